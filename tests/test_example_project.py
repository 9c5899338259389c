"""The example project's suite, run the way a user runs it.

``python -m pytest example_project`` from the repository root must pass against
the committed ledger, and the documented regression switch
(``KELPWICK_RICE_RULE=naive``, a worse Rice-parameter rule) must fail exactly
the cases whose Rice parameter it changes (one synthetic source and the recorded day of
level changes), as ledger regressions. Neither
run may modify the committed ledger. Both runs go in parallel subprocesses
(the example's ini file, not this repository's, must be the one pytest finds).
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from pytest_ratefloor import sources

REPO = Path(__file__).resolve().parents[1]
EXAMPLE = REPO / "example_project"
LEDGER = EXAMPLE / "ratefloor-ledger.json"
RULE_VARIABLE = "KELPWICK_RICE_RULE"
# The Rice parameter the naive rule changes: theta = 0.93 has zig-zag mean ~27,
# GvV picks k = 4, "2**k nearest the mean" picks k = 5 (see kelpwick/levels.py).
REGRESSED_SOURCE = sources.two_sided_geometric(0.93).spec
REGRESSED_ID = f"example_project/tests/test_rates.py::test_levels[{REGRESSED_SOURCE}]"
# ... and the day of recorded level changes in example_project/corpus, whose mean zig-zag
# value also sits where the two rules pick different k: the team's own data shows it too.
CORPUS_SOURCE = sources.corpus(EXAMPLE / "corpus" / "level_changes_one_day.u8",
                               symbol="zigzag-u8").spec
CORPUS_ID = f"example_project/tests/test_rates.py::test_levels_day[{CORPUS_SOURCE}]"
# ... and the lossy surge coder, which codes its quantizer indices with the same Rice coder:
# its bits grow at the same distortion, which the ledger calls a regression (its gap to R(D)
# stays inside the tolerance)
SURGE_SPECS = (sources.gauss_markov(0.95, sigma=0.3).spec, sources.gaussian(0.3).spec)
SURGE_IDS = [f"example_project/tests/test_rates.py::test_surge[{spec}]" for spec in SURGE_SPECS]
SURGE_IDS.append(
    f"example_project/tests/test_rates.py::test_surge_bounded[{SURGE_SPECS[0]}]")
TIMEOUT = 300


def _start(tmp_path: Path, name: str, extra_env: dict[str, str],
           plot: bool) -> subprocess.Popen[str]:
    env = {k: v for k, v in os.environ.items()
           if k not in (RULE_VARIABLE, "PYTEST_ADDOPTS", "GITHUB_STEP_SUMMARY")
           and not k.startswith("PYTEST_XDIST")}
    env.update(extra_env)
    out = tmp_path / name
    out.mkdir()
    cmd = [
        sys.executable, "-m", "pytest", "example_project", "-p", "no:cacheprovider",
        "--ratefloor-report", str(out / "report.md"),
        # never the ini's plot path inside the checkout; "-o key=" switches the plot off
        *(["--ratefloor-plot", str(out / "rates.png")] if plot else ["-o", "ratefloor_plot="]),
    ]
    return subprocess.Popen(cmd, cwd=REPO, env=env, text=True,
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT)


def _finish(proc: subprocess.Popen[str]) -> tuple[int, str]:
    try:
        output, _ = proc.communicate(timeout=TIMEOUT)
    except subprocess.TimeoutExpired:
        proc.kill()
        output, _ = proc.communicate()
        pytest.fail(f"example suite did not finish within {TIMEOUT} s:\n{output}")
    return proc.returncode, output


def _outcomes(output: str) -> dict[str, int]:
    final = output.strip().splitlines()[-1]
    return {word: int(count) for count, word in re.findall(r"(\d+) (passed|failed|error)", final)}


def test_example_suite_passes_and_the_regression_switch_fails_its_cases(tmp_path: Path) -> None:
    assert LEDGER.is_file(), f"the example's committed ledger {LEDGER} is missing"
    before = LEDGER.read_bytes()
    clean = _start(tmp_path, "clean", {}, plot=True)
    naive = _start(tmp_path, "naive", {RULE_VARIABLE: "naive"}, plot=False)
    clean_rc, clean_out = _finish(clean)
    naive_rc, naive_out = _finish(naive)
    assert LEDGER.read_bytes() == before, "running the example suite modified its ledger"

    # The clean run: everything passes, against the ledger, and the report is written.
    assert clean_rc == 0, clean_out
    assert f"rootdir: {EXAMPLE}" in clean_out  # example_project/pyproject.toml is the config
    counts = _outcomes(clean_out)
    assert counts.get("passed", 0) > 0, clean_out
    assert "failed" not in counts, clean_out
    assert "ratefloor: measured rate against the floor" in clean_out
    report = (tmp_path / "clean" / "report.md").read_text()
    for codec in ("kelpwick-seastate-huffman", "kelpwick-levels-rice", "kelpwick-faults-range",
                  "kelpwick-surge-dpcm"):
        assert codec in report
    assert (tmp_path / "clean" / "rates.png").stat().st_size > 0

    # The regression run: exactly the cases whose Rice parameter the switch changes fail
    # (two level-change cases and the surge coder's three), and they fail on the ledger.
    assert naive_rc == 1, naive_out
    failed = re.findall(r"^FAILED (\S+)", naive_out, flags=re.MULTILINE)
    assert sorted(failed) == sorted([REGRESSED_ID, CORPUS_ID, *SURGE_IDS]), naive_out
    assert re.search(
        r"RegressionFailure: \+\d+\.\d{3}% bits vs ledger \(\+[\d,]+ bits, slack 0%\): "
        + re.escape(f"codec 'kelpwick-levels-rice' on {REGRESSED_SOURCE}, n=100000, seed=0"),
        naive_out), naive_out
    assert "RateFailure" not in naive_out  # within the floor tolerance: only the ledger sees it
    failing = 2 + len(SURGE_IDS)
    assert _outcomes(naive_out) == {"passed": counts["passed"] - failing, "failed": failing}, \
        naive_out


def test_committed_ledger_covers_every_codec_of_the_example() -> None:
    text = json.dumps(json.loads(LEDGER.read_text()))
    for codec in ("kelpwick-seastate-huffman", "kelpwick-levels-rice", "kelpwick-faults-range",
                  "kelpwick-surge-dpcm", "kelpwick-surge-dpcm-bound-0.01"):
        assert codec in text
