"""Verdicts: how a case compares with its ledger entry, decided once.

:func:`compare` is the one place where a verdict is decided. Its
:class:`Comparison` carries the verdict, the two cases and the change in bits
(Δ bits, Δ %); the terminal summary, the reports, JUnit properties and
``ratefloor diff`` all read it. :data:`VERDICTS` is the one table of verdict
names with what each means for the gate and how it is shown.

:class:`LedgerRun` holds one test run's measurements against a baseline
ledger; it knows nothing of pytest (the plugin wires it to hooks).
"""

from __future__ import annotations

import contextlib
import math
import shlex
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal, get_args

from pytest_ratefloor.errors import (
    LedgerError,
    NewCaseFailure,
    RegressionFailure,
    SampleMismatchError,
)
from pytest_ratefloor.ledger import Ledger
from pytest_ratefloor.measurement import CaseKey, Measurement, figure

__all__ = [
    "SUSPICIOUS_SPREADS",
    "VERDICTS",
    "Colour",
    "Comparison",
    "LedgerRun",
    "Status",
    "VerdictKind",
    "compare",
    "counts_of",
    "listed",
    "worst_first",
]

Status = Literal[
    "regressed", "resampled", "within-slack", "traded", "improved", "new", "unchanged",
    "dropped",
]
Colour = Literal["red", "yellow", "green", ""]


@dataclass(frozen=True)
class VerdictKind:
    """One verdict: whether the gate fails on it and how a summary shows it."""

    name: Status
    #: a test (or ``ratefloor diff``) fails on this verdict
    fails: bool
    colour: Colour
    #: shown in a tally even when its count is zero
    always_counted: bool
    meaning: str


#: Every verdict, worst first (the display order).
VERDICTS: dict[Status, VerdictKind] = {
    v.name: v
    for v in (
        VerdictKind("regressed", True, "red", True,
                    "more bits than the ledger entry allows (its bits × (1 + slack))"),
        VerdictKind("resampled", True, "red", False,
                    "measured on a different sample than the ledger entry: not comparable"),
        VerdictKind("within-slack", False, "yellow", False,
                    "more bits (or, lossy, more distortion) than the ledger entry, within the "
                    "slack"),
        VerdictKind("traded", False, "yellow", False,
                    "lossy: another rate–distortion point than the ledger's (fewer bits at more "
                    "distortion, or the reverse): neither better nor worse by the ledger alone"),
        VerdictKind("improved", False, "green", True, "fewer bits than the ledger entry"),
        VerdictKind("new", False, "", True, "no ledger entry yet"),
        VerdictKind("unchanged", False, "", True, "the same bits as the ledger entry"),
        VerdictKind("dropped", False, "yellow", False,
                    "in the old ledger, not in the new one (ratefloor diff only)"),
    )
}
assert set(VERDICTS) == set(get_args(Status))


#: A drop on the same sample larger than this many sampling spreads is shown for review.
SUSPICIOUS_SPREADS = 3.0


@dataclass(frozen=True)
class Comparison:
    """A case beside its ledger entry, with the verdict.

    ``current`` is the case measured now (``None`` for a case only the
    baseline has: ``dropped``); ``baseline`` the ledger's (``None`` when the
    ledger has none). ``status`` is ``None`` for a plain listing, where
    nothing was compared (``ratefloor show``).
    """

    key: CaseKey
    status: Status | None
    current: Measurement | None
    baseline: Measurement | None
    slack: float = 0.0

    @property
    def case(self) -> Measurement:
        """The case shown: the current one, else the baseline's."""
        shown = self.current if self.current is not None else self.baseline
        assert shown is not None, "a comparison holds at least one case"
        return shown

    @property
    def ledger_bits(self) -> int | None:
        return None if self.baseline is None else self.baseline.bits

    @property
    def delta_bits(self) -> int | None:
        """Bits now minus bits in the ledger (``None`` unless both exist)."""
        if self.current is None or self.baseline is None:
            return None
        return self.current.bits - self.baseline.bits

    @property
    def delta_pct(self) -> float | None:
        """Change relative to the ledger, percent (``None`` unless both exist).

        Computed from the integers, so a bit count too large for a float
        (a hand-edited entry) gives ``inf`` rather than an error.
        """
        if self.current is None or self.baseline is None:
            return None
        new, old = self.current.bits, self.baseline.bits
        if old == 0:
            return 0.0 if new == 0 else math.inf
        try:
            return 100.0 * ((new - old) / old)
        except OverflowError:
            return math.inf if new > old else -math.inf

    @property
    def delta_distortion_pct(self) -> float | None:
        """Lossy cases: the change of the mean distortion against the ledger, percent."""
        if self.current is None or self.baseline is None:
            return None
        new, old = self.current.distortion, self.baseline.distortion
        if new is None or old is None:
            return None
        new = figure(new)  # as the ledger keeps it: last-digit noise is no change
        if old == 0.0:
            return 0.0 if new == 0.0 else math.inf
        return 100.0 * ((new - old) / old)

    @property
    def fails(self) -> bool:
        return self.status is not None and VERDICTS[self.status].fails

    @property
    def suspicious_drop(self) -> bool:
        """Fewer bits than the ledger, on the very same sample, by more than
        :data:`SUSPICIOUS_SPREADS` sampling spreads of the sample's information.

        The same sample (same fingerprint) means no luck is involved: the drop is
        the code's. A genuine improvement can be this large, but so is a decoder
        that learns from outside the stream, next to which an adaptive coder's
        excess hides it from the impossible-rate rule: shown for a human to look
        at, never failed.
        """
        current, baseline = self.current, self.baseline
        if self.status != "improved" or current is None or baseline is None:
            return False
        if not current.fingerprint or current.fingerprint != baseline.fingerprint:
            return False
        if current.spread is None:
            return False
        spread_bits = current.spread * current.n  # spread is √(V/n) bits per symbol
        return baseline.bits - current.bits > SUSPICIOUS_SPREADS * max(spread_bits, 1.0)


def compare(current: Measurement | None, baseline: Measurement | None,
            slack: float = 0.0) -> Comparison:
    """Compare a case with its ledger entry (either may be ``None``, not both).

    A case regresses when ``bits > ledger_bits · (1 + slack)``; more bits
    within the slack is ``within-slack``. Fingerprints that differ (both
    non-empty) give ``resampled``: the sample changed, so the counts are not
    comparable.
    """
    status: Status
    if current is None:
        assert baseline is not None, "compare needs at least one case"
        return Comparison(baseline.key, "dropped", None, baseline, slack)
    if baseline is None:
        return Comparison(current.key, "new", current, None, slack)
    if baseline.fingerprint and current.fingerprint and \
            baseline.fingerprint != current.fingerprint:
        status = "resampled"
    elif current.distortion is not None and baseline.distortion is not None:
        status = _lossy_status(current, baseline, slack)
    elif current.bits == baseline.bits:
        status = "unchanged"
    elif current.bits < baseline.bits:
        status = "improved"
    elif current.bits > baseline.bits * (1.0 + slack):
        status = "regressed"
    else:
        status = "within-slack"
    return Comparison(current.key, status, current, baseline, slack)


def _lossy_status(current: Measurement, baseline: Measurement, slack: float) -> Status:
    """A lossy case against its entry: two figures, the bits and the mean distortion.

    It regresses when its bits grow beyond the slack at equal or worse distortion,
    or its distortion grows beyond the slack at equal or more bits. The
    distortion is compared as the ledger keeps it (12 significant digits), so a
    re-run on another machine does not move it. Fewer bits at more distortion (or
    the reverse) is ``traded``: another point of the codec's curve, shown, not failed.
    """
    assert current.distortion is not None
    assert baseline.distortion is not None
    d_now, d_old = figure(current.distortion), baseline.distortion
    bits, old_bits = current.bits, baseline.bits
    if bits == old_bits and d_now == d_old:
        return "unchanged"
    if bits <= old_bits and d_now <= d_old:
        return "improved"
    worse_bits = bits > old_bits * (1.0 + slack)
    worse_distortion = d_now > d_old * (1.0 + slack)
    if (worse_bits and d_now >= d_old) or (worse_distortion and bits >= old_bits):
        return "regressed"
    if bits >= old_bits and d_now >= d_old:
        return "within-slack"
    return "traded"


_RANK: dict[str, int] = {name: i for i, name in enumerate(VERDICTS)}


def worst_first(rows: Iterable[Comparison]) -> list[Comparison]:
    """Rows in the verdict table's order (regressed first, unchanged last), then by case;
    a plain listing (no verdict) keeps the case order."""
    return sorted(rows, key=lambda r: (_RANK[r.status] if r.status else 0, r.key))


def listed(case: Measurement) -> Comparison:
    """A case shown on its own (a ledger listing): no verdict."""
    return Comparison(case.key, None, case, None)


def counts_of(comparisons: Iterable[Comparison]) -> dict[str, int]:
    """Number of comparisons per verdict, every verdict present (zeros included)."""
    out: dict[str, int] = dict.fromkeys(VERDICTS, 0)
    for c in comparisons:
        if c.status is not None:
            out[c.status] += 1
    return out


def _signed_pct(value: float) -> str:
    return f"{value:+.3f}%" if math.isfinite(value) else ("+inf%" if value > 0 else "-inf%")


def regression_message(comparison: Comparison, ledger_path: Path, record_hint: str) -> str:
    """The text of a RegressionFailure: both figures, the delta, the ledger and the fix."""
    assert comparison.current is not None
    assert comparison.baseline is not None
    assert comparison.delta_bits is not None
    assert comparison.delta_pct is not None
    current, baseline = comparison.current, comparison.baseline
    d_pct = comparison.delta_distortion_pct
    lossy = ""
    if d_pct is not None:
        lossy = (f"\n  distortion {current.distortion_measure}: {current.distortion:.6g} now, "
                 f"{baseline.distortion:.6g} in the ledger ({_signed_pct(d_pct)}); a lossy case "
                 "regresses when its bits grow at equal or worse distortion, or its distortion "
                 "grows at equal or more bits")
    figures = (f"{_signed_pct(comparison.delta_pct)} bits" if d_pct is None else
               f"{_signed_pct(comparison.delta_pct)} bits, {_signed_pct(d_pct)} distortion")
    return (
        f"{figures} vs ledger ({comparison.delta_bits:+,} bits, "
        f"slack {100.0 * comparison.slack:g}%): {comparison.key.phrase}\n"
        f"  rate regression: needs {current.bits:,} bits; the ledger holds "
        f"{baseline.bits:,} bits{lossy}\n"
        f"  ledger: {ledger_path}\n"
        f"  if the increase is intended, record the new figure: {record_hint}"
    )


def resampled_message(comparison: Comparison, ledger_path: Path, record_hint: str) -> str:
    """The text of a SampleMismatchError."""
    m, entry = comparison.current, comparison.baseline
    assert m is not None
    assert entry is not None
    return (
        f"ledger entry cannot be compared: {m.key.phrase} was recorded on a "
        f"different sample (fingerprint {entry.fingerprint} in the ledger, {m.fingerprint} now)\n"
        f"  the source spec {m.source!r} now draws different symbols (a changed sampler or "
        f"source definition), so {entry.bits:,} recorded bits and {m.bits:,} measured bits "
        f"are not the same experiment\n"
        f"  ledger: {ledger_path}\n"
        f"  re-record the case: {record_hint}"
    )


def new_case_message(m: Measurement, ledger: Ledger, record_hint: str) -> str:
    """The text of a NewCaseFailure, naming ledger entries that look like this case."""
    key = m.key
    near = [k for k in sorted(ledger.entries)
            if (k.codec == key.codec and k.source == key.source)
            or (k.source, k.n, k.seed) == (key.source, key.n, key.seed)]
    lines = [
        f"new case: {key.phrase} has no entry in the ledger, and strict mode gates every "
        "case: record it on the release branch",
        f"  ledger: {ledger.path}",
    ]
    if near:
        shown = ", ".join(f"codec {k.codec!r} n={k.n} seed={k.seed}" for k in near[:4])
        more = f" and {len(near) - 4} more" if len(near) > 4 else ""
        lines.append(f"  the ledger holds {key.source} as {shown}{more}: did n, the seed or "
                     "the codec name change? (that would hide a regression)")
    lines.append(f"  to add it: {record_hint}")
    return "\n".join(lines)


def conflict_message(first: Measurement, second: Measurement) -> str:
    """Two measurements of the same ledger key disagree within one run."""
    return (
        f"two measurements of {first.key.phrase} disagree in one run: "
        f"{first.bits:,} bits (fingerprint {first.fingerprint}) and "
        f"{second.bits:,} bits (fingerprint {second.fingerprint}); give each codec "
        "a distinct name and make sure its encoder is deterministic"
    )


@dataclass
class LedgerRun:
    """One test run's measurements against a baseline ledger.

    In the process that runs a test, the ``ratefloor`` fixture calls
    :meth:`admit` for every measurement. On the xdist controller,
    :meth:`absorb` takes the workers' plain records without enforcing (the
    workers already did). Each measurement is compared once, when it is
    observed; the comparison is kept.
    """

    baseline: Ledger
    slack: float = 0.0
    record: bool = False
    record_hint: str = "pytest --ratefloor-record"
    #: strict mode: a case with no ledger entry fails (see :meth:`enforce`)
    strict: bool = False
    comparisons: dict[CaseKey, Comparison] = field(default_factory=dict)
    #: the tests (node ids) that measured each case
    origins: dict[CaseKey, set[str]] = field(default_factory=dict)
    conflicts: list[str] = field(default_factory=list)
    #: why this run does not cover the whole suite (empty: a full run)
    partial_reasons: list[str] = field(default_factory=list)

    @property
    def measurements(self) -> dict[CaseKey, Measurement]:
        """Every case measured in this run, by key."""
        return {k: c.current for k, c in self.comparisons.items() if c.current is not None}

    def slack_for(self, key: CaseKey) -> float:
        """The slack the case was compared with (the run's, unless a marker set another)."""
        comparison = self.comparisons.get(key)
        return self.slack if comparison is None else comparison.slack

    def observe(self, m: Measurement, slack: float | None = None,
                origin: str | None = None) -> Comparison:
        """Compare ``m`` with its ledger entry, keep the comparison and return it.

        ``origin`` is the node id of the test that measured it (a recording
        writes a case only if every test that measured it passed).

        :raises LedgerError: an earlier measurement of the same case in this run
            had other bits or another sample (also kept in :attr:`conflicts`).
        """
        earlier = self.comparisons.get(m.key)
        if earlier is not None and earlier.current is not None and (
            earlier.current.bits != m.bits or earlier.current.fingerprint != m.fingerprint
        ):
            message = conflict_message(earlier.current, m)
            self.conflicts.append(message)
            raise LedgerError(message)
        if origin is not None:
            self.origins.setdefault(m.key, set()).add(origin)
        comparison = compare(m, self.baseline.entries.get(m.key),
                             self.slack if slack is None else slack)
        self.comparisons[m.key] = comparison
        return comparison

    def enforce(self, comparison: Comparison, nodeid: str | None = None) -> None:
        """Raise for a regression or a resampled case (and in strict mode a new one),
        unless recording.

        :raises RegressionFailure: more bits than the ledger allows.
        :raises SampleMismatchError: the ledger entry was measured on another sample.
        :raises NewCaseFailure: strict mode, and the ledger has no entry for the case.
        """
        __tracebackhide__ = True
        if self.record:
            return
        hint = self.record_hint + ("" if nodeid is None else " " + shlex.quote(nodeid))
        if self.strict and comparison.status == "new" and comparison.current is not None:
            raise NewCaseFailure(new_case_message(comparison.current, self.baseline, hint))
        if not comparison.fails:
            return
        if comparison.status == "regressed":
            raise RegressionFailure(regression_message(comparison, self.baseline.path, hint))
        raise SampleMismatchError(resampled_message(comparison, self.baseline.path, hint))

    def admit(self, m: Measurement, slack: float | None = None,
              nodeid: str | None = None) -> Comparison:
        """:meth:`observe` then :meth:`enforce`; returns the comparison."""
        __tracebackhide__ = True
        comparison = self.observe(m, slack, nodeid)
        self.enforce(comparison, nodeid)
        return comparison

    def payload(self) -> dict[str, Any]:
        """What an xdist worker sends home: builtin types only (execnet rejects the rest)."""
        return {
            "measurements": [
                {"case": c.current.to_record(), "slack": float(c.slack),
                 "origins": sorted(self.origins.get(k, ()))}
                for k, c in self.comparisons.items() if c.current is not None
            ],
            "partial": [str(r) for r in self.partial_reasons],
            "conflicts": [str(c) for c in self.conflicts],
        }

    def absorb(self, payload: Mapping[str, Any]) -> None:
        """Merge a worker's :meth:`payload`; conflicts between workers are collected."""
        for item in payload.get("measurements", []):
            m = Measurement.from_record(dict(item["case"]))
            origins = [str(o) for o in item.get("origins", [])]
            with contextlib.suppress(LedgerError):  # kept in self.conflicts
                self.observe(m, float(item["slack"]))
            self.origins.setdefault(m.key, set()).update(origins)
        for message in payload.get("conflicts", []):
            if message not in self.conflicts:
                self.conflicts.append(message)
        for reason in payload.get("partial", []):
            if reason not in self.partial_reasons:
                self.partial_reasons.append(reason)

    def sorted_comparisons(self) -> list[Comparison]:
        """Every comparison of this run, sorted by key."""
        return [self.comparisons[k] for k in sorted(self.comparisons)]

    @property
    def is_full(self) -> bool:
        return not self.partial_reasons

    def stale(self) -> list[Measurement]:
        """Ledger entries nobody measured; empty unless this was a full run."""
        if not self.is_full:
            return []
        return [e for k, e in sorted(self.baseline.entries.items())
                if k not in self.comparisons]

    def counts(self) -> dict[str, int]:
        """Number of cases per verdict, plus ``stale``."""
        out = counts_of(self.comparisons.values())
        out["stale"] = len(self.stale())
        return out

    def recordable(self, passed: set[str],
                   failed: Mapping[str, str]) -> tuple[list[Measurement], list[tuple[str, str]]]:
        """Split this run's cases into those a recording writes and those it skips.

        A case is written only when every test that measured it passed
        (``passed`` holds node ids whose call passed, ``failed`` maps node ids
        to why they did not pass). A skipped case keeps its ledger entry, or
        gets none. Returns ``(to write, [(case label, reason), ...])``.
        """
        write: list[Measurement] = []
        skipped: list[tuple[str, str]] = []
        for key in sorted(self.comparisons):
            m = self.comparisons[key].current
            if m is None:
                continue
            origins = self.origins.get(key, set())
            reasons = [f"{o}: {failed[o]}" for o in sorted(origins) if o in failed]
            reasons += [f"{o}: did not finish" for o in sorted(origins)
                        if o not in failed and o not in passed]
            if not origins:
                reasons.append("measured outside a test")
            if reasons:
                skipped.append((key.label, "; ".join(reasons)))
            else:
                write.append(m)
        return write, skipped

    def recorded(self) -> Ledger:
        """The ledger a recording writes: the baseline merged with this run."""
        measured = self.measurements
        return self.baseline.merged(measured[k] for k in sorted(measured))
