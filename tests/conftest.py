"""Shared fixtures of the plugin's own tests."""

from __future__ import annotations
