"""pytest hooks of pytest-ratefloor (kept thin; the work lives in other modules)."""

from __future__ import annotations
