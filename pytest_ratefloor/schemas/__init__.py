"""The published JSON Schemas (draft 2020-12) of the files the plugin writes.

``ledger.schema.json``
    the committed rate ledger (``ratefloor-ledger.json``)
``report.schema.json``
    the JSON report (``--ratefloor-report NAME.json``, ``ratefloor show --format json``);
    it refers to the ledger schema for the stale entries it quotes

Tools that read these files can validate them with any JSON Schema validator;
the plugin's own readers (:mod:`pytest_ratefloor.ledger`,
:mod:`pytest_ratefloor.pruning`) accept exactly what the schemas allow, and
also check that each ledger key spells its entry.
"""

from __future__ import annotations

import json
from importlib import resources
from pathlib import Path
from typing import Any, Literal

from pytest_ratefloor import validation

__all__ = ["SCHEMAS", "load", "path"]

SchemaName = Literal["ledger", "report"]
SCHEMAS: tuple[SchemaName, ...] = ("ledger", "report")


def path(name: SchemaName) -> Path:
    """The file of the schema ``name`` inside the installed package."""
    validation.choice(name, "schema", SCHEMAS)
    return Path(str(resources.files(__name__).joinpath(f"{name}.schema.json")))


def load(name: SchemaName) -> dict[str, Any]:
    """The schema ``name`` as a dict."""
    doc: dict[str, Any] = json.loads(path(name).read_text(encoding="utf-8"))
    return doc
