"""The files that go with a release: LICENSE, CHANGELOG.md and the example CI workflow.

The changelog must not name an API, option or ini key the package does not have:
each backticked name in it that looks like one of the plugin's public names is
resolved against the installed package (``getattr`` on ``pytest_ratefloor``, a
dotted path, or the option and ini-key definitions in ``settings.py`` and
``cli.py``).
"""

from __future__ import annotations

import builtins
import importlib
import re
from pathlib import Path
from typing import Any

import pytest

import pytest_ratefloor

REPO = Path(__file__).resolve().parents[1]
LICENSE = REPO / "LICENSE"
CHANGELOG = REPO / "CHANGELOG.md"
WORKFLOW = REPO / "example_project" / "ci" / "pull-request.yml"
PACKAGE = REPO / "pytest_ratefloor"
STRICT_COMMAND = "python -m pytest example_project --ratefloor-strict"


def _code_spans(text: str) -> list[str]:
    """The contents of the single-backtick code spans of a Markdown text.

    A span right after "moved from " or "renamed from " names what an upgrade
    leaves behind, not what the package has, and is left out.
    """
    return re.findall(r"(?<!moved from )(?<!renamed from )(?<!`)`([^`\n]+)`(?!`)", text)


def _option_texts() -> str:
    return "\n".join((PACKAGE / name).read_text(encoding="utf-8")
                     for name in ("settings.py", "cli.py"))


def _resolve_dotted(path: str) -> Any:
    """``pytest_ratefloor.a.b`` or ``a.b`` (from the package): the object, or raise."""
    parts = path.split(".")
    if parts[0] == "pytest_ratefloor":
        parts = parts[1:]
    obj: Any = pytest_ratefloor
    prefix = "pytest_ratefloor"
    for part in parts:
        prefix = f"{prefix}.{part}"
        try:
            obj = getattr(obj, part)
        except AttributeError:
            obj = importlib.import_module(prefix)  # a submodule not loaded yet
    return obj


def _checked_names(text: str) -> dict[str, str]:
    """Each name worth checking in the changelog, with the kind of name it is.

    A code span counts when, after dropping a call's arguments, it is a
    ``--ratefloor-`` option, a ``ratefloor_`` ini key, a ``ratefloor`` subcommand,
    a dotted path into the package or ``sources``/``codes``, a public CamelCase
    name or an ``assert_`` function. Everything else (values such as ``"sample"``,
    keyword arguments, file names) is left alone.
    """
    found: dict[str, str] = {}
    for span in _code_spans(text):
        head = span.split("(", 1)[0].strip()
        if re.fullmatch(r"--ratefloor-[a-z-]+", head.split(" ", 1)[0]):
            found[head.split(" ", 1)[0]] = "option"
        elif re.fullmatch(r"ratefloor_[a-z_]+", head.split(" ", 1)[0]):
            found[head.split(" ", 1)[0]] = "ini"
        elif m := re.fullmatch(r"ratefloor ([a-z]+)\b.*", span):
            found[m.group(1)] = "command"
        elif re.fullmatch(r"(pytest_ratefloor|sources|codes)(\.[A-Za-z_]\w*)+", head):
            found[head] = "dotted"
        elif (re.fullmatch(r"[A-Z][a-z]+(?:[A-Z][a-z]+)+\w*|assert_\w+|gate|measure", head)
              and not hasattr(builtins, head)):  # KeyboardInterrupt and the like
            found[head] = "public"
    return found


def test_license_is_mit_and_names_the_year_and_holders() -> None:
    text = LICENSE.read_text(encoding="utf-8")
    assert text.startswith("MIT License\n")
    assert "Copyright (c) 2026 the pytest-ratefloor developers" in text
    assert "Permission is hereby granted, free of charge" in text
    assert 'THE SOFTWARE IS PROVIDED "AS IS"' in text
    pyproject = (REPO / "pyproject.toml").read_text(encoding="utf-8")
    assert re.search(r'^license = \{ text = "MIT" \}$', pyproject, flags=re.MULTILINE)


def test_changelog_has_an_unreleased_section_above_the_first_release() -> None:
    text = CHANGELOG.read_text(encoding="utf-8")
    headings = re.findall(r"^## (.+)$", text, flags=re.MULTILINE)
    assert headings, "no version headings"
    assert headings[0].startswith("Unreleased")
    assert "0.1.0" in headings[-1]


def test_changelog_names_only_what_the_package_has() -> None:
    names = _checked_names(CHANGELOG.read_text(encoding="utf-8"))
    # A guard against the parser silently finding nothing.
    assert {"option", "ini", "command", "dotted", "public"} <= set(names.values()), names
    options = _option_texts()
    missing = []
    for name, kind in sorted(names.items()):
        if kind in ("option", "ini"):
            ok = f'"{name}"' in options
        elif kind == "command":
            ok = f'add_parser("{name}"' in options or f"add_parser(\n        \"{name}\"" in options
        else:
            try:
                if kind == "dotted":
                    _resolve_dotted(name)
                else:
                    getattr(pytest_ratefloor, name)
                ok = True
            except (AttributeError, ImportError):
                ok = False
        if not ok:
            missing.append(f"{name} ({kind})")
    assert not missing, f"CHANGELOG.md names what the package does not have: {missing}"


def test_the_name_check_catches_a_made_up_name() -> None:
    names = _checked_names("`NoSuchCodec`, `--ratefloor-nothing`, `sources.nowhere(3)`, "
                           "`SystemExit`, moved from `pytest_ratefloor.gone`")
    assert names == {"NoSuchCodec": "public", "--ratefloor-nothing": "option",
                     "sources.nowhere": "dotted"}
    assert not hasattr(pytest_ratefloor, "NoSuchCodec")
    assert '"--ratefloor-nothing"' not in _option_texts()
    with pytest.raises((AttributeError, ImportError)):
        _resolve_dotted("sources.nowhere")


def test_example_workflow_runs_the_strict_gate_and_records_on_release() -> None:
    text = WORKFLOW.read_text(encoding="utf-8")
    assert STRICT_COMMAND in text
    assert "--ratefloor-record" in text
    assert "ratefloor diff" in text


def test_example_workflow_is_valid_yaml() -> None:
    yaml = pytest.importorskip("yaml")
    doc = yaml.safe_load(WORKFLOW.read_text(encoding="utf-8"))
    assert isinstance(doc, dict)
    assert "on" in doc or True in doc  # YAML 1.1 reads a bare `on` key as true
    runs = [step.get("run", "") for job in doc["jobs"].values() for step in job["steps"]]
    assert any(STRICT_COMMAND in run for run in runs), runs
