"""The package's own shape: public names, plain-data measurements, README ↔ CI agreement."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import pytest_ratefloor
from pytest_ratefloor.measurement import Measurement

ROOT = Path(__file__).resolve().parents[1]

# The public API the README documents: everything importable from pytest_ratefloor.
PUBLIC_NAMES = [
    "sources", "codes", "StreamCodec", "ByteCodec", "Codebook", "measure",
    "assert_roundtrip", "assert_rate", "assert_prefix_free", "assert_kraft",
    "assert_uniquely_decodable", "assert_survives_corruption", "Measurement", "gate",
    "RateFloorHarness", "Floor", "RateFloorFailure", "RegressionFailure", "LedgerError",
]


def test_loading_the_plugin_imports_nothing_heavy() -> None:
    # pytest imports the plugin module in every run of every project that installs it
    code = ("import sys, pytest_ratefloor.plugin; "
            "print(sorted(m for m in ('numpy', 'scipy', 'bitarray') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    assert out.strip() == "[]"


@pytest.mark.parametrize("name", PUBLIC_NAMES)
def test_public_name_resolves(name: str) -> None:
    assert getattr(pytest_ratefloor, name) is not None
    assert name in dir(pytest_ratefloor)


def test_unknown_name_is_attribute_error() -> None:
    with pytest.raises(AttributeError, match="no_such_thing"):
        _ = pytest_ratefloor.no_such_thing  # type: ignore[attr-defined]


def _measurement(**overrides: object) -> Measurement:
    fields: dict[str, object] = dict(
        codec="demo", source="bernoulli(p=0.1)", n=np.int64(1000), seed=0, bits=np.int64(480),
        entropy=np.float64(0.4689955935892812), floor="entropy", floor_bits=np.float64(468.99),
        sample_information=470.1, spread=np.float32(0.02), fingerprint="abc",
        source_params={"p": np.float64(0.1)},
    )
    fields.update(overrides)
    return Measurement(**fields)  # type: ignore[arg-type]


def test_record_is_builtin_only_and_round_trips() -> None:
    m = _measurement()
    record = m.to_record()

    def check(value: object) -> None:
        # execnet dispatches on exact type names (pytest-plugin notes §8): numpy scalars fail.
        assert type(value) in (int, float, str, bool, type(None), dict, list), type(value)
        if isinstance(value, dict):
            for v in value.values():
                check(v)

    for value in record.values():
        check(value)
    json.dumps(record)  # the stdlib json rejects numpy scalars too
    again = Measurement.from_record(record)
    assert again.bits == 480
    assert again.n == 1000
    assert again.rate == pytest.approx(0.48)


def test_derived_figures() -> None:
    m = _measurement(n=1000, bits=500, floor_bits=400.0)
    assert m.rate == 0.5
    assert m.floor_rate == 0.4
    assert m.excess == pytest.approx(0.1)
    assert m.efficiency == pytest.approx(0.8)
    assert m.key == ("demo", "bernoulli(p=0.1)", 1000, 0)


def test_record_missing_fields_is_clear() -> None:
    with pytest.raises(ValueError, match="bits"):
        Measurement.from_record({"codec": "x", "source": "y", "n": 1, "seed": 0})


def test_ci_runs_readme_test_command_verbatim() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    block = re.search(r"<!-- ci:test-command -->\s*```\w*\n(.+?)\n", readme)
    assert block, "README.md lacks the CI test-command marker"
    command = block.group(1)
    assert "pytest tests" in command
    # .ci/run extracts exactly that line (shell awk, run here to prove it).
    script = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    awk = re.search(r"cmd=\$\(awk '(.+?)' README.md\)", script)
    assert awk
    out = subprocess.run(
        ["awk", awk.group(1), "README.md"], cwd=ROOT, capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == command


USER_TEST_MODULE = '''\
import zlib

from pytest_ratefloor import ByteCodec, Floor, RateFloorHarness, sources


def test_calm(ratefloor: RateFloorHarness) -> None:
    codec = ByteCodec(zlib.compress, zlib.decompress, name="z")
    floor: Floor = "huffman"
    m = ratefloor.check(codec, sources.two_sided_geometric(0.8), n=1000, floor=floor)
    reveal_type(m.efficiency)
    reveal_type(sources.bernoulli(0.1).entropy)
    ratefloor.check(codec, sources.uniform(4), floor="shannon")
'''


@pytest.mark.slow
def test_mypy_sees_the_installed_package_types(tmp_path: Path) -> None:
    # Install as a user does (a wheel built from this checkout, README "Use it in
    # your project"), then type-check a user's test module against it: mypy finds
    # the package through PEP 561 (py.typed) in the interpreter's site-packages.
    import venv
    import zipfile

    checkout = tmp_path / "checkout"
    checkout.mkdir()
    for name in ("pyproject.toml", "README.md"):
        (checkout / name).write_bytes((ROOT / name).read_bytes())
    for path in (ROOT / "pytest_ratefloor").rglob("*"):
        if path.is_file() and "__pycache__" not in path.parts:
            target = checkout / path.relative_to(ROOT)
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(path.read_bytes())
    wheels = tmp_path / "wheels"
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(wheels),
                    str(checkout)], check=True, capture_output=True)
    env_dir = tmp_path / "userenv"
    venv.create(env_dir, with_pip=False)
    python = env_dir / "bin" / "python"
    where = "import sysconfig; print(sysconfig.get_path('purelib'))"
    site = subprocess.run([str(python), "-c", where], check=True, capture_output=True,
                          text=True).stdout.strip()
    (wheel,) = wheels.glob("*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    for module in ("py.typed", "sources/__init__.py", "codes/__init__.py",
                   "corruption/__init__.py"):
        assert f"pytest_ratefloor/{module}" in names
    zipfile.ZipFile(wheel).extractall(site)
    user = tmp_path / "test_user.py"
    user.write_text(USER_TEST_MODULE)
    result = subprocess.run(
        [sys.executable, "-m", "mypy", "--python-executable", str(python), "--no-incremental",
         "--cache-dir", str(tmp_path / "cache"), "--no-error-summary", str(user)],
        capture_output=True, text=True, cwd=tmp_path,
    )
    lines = result.stdout.splitlines()
    assert any('Revealed type is "float"' in line and ":10:" in line for line in lines), lines
    assert any('Revealed type is "float"' in line and ":11:" in line for line in lines), lines
    (error,) = [line for line in lines if "error:" in line]
    assert ":12:" in error
    # a lossy codec has its own overload of check(): mypy names the call, not the literal
    assert "Literal['shannon']" in error or 'No overload variant of "check"' in error
