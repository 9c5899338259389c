"""The corruption check: :func:`assert_survives_corruption`, and
:func:`survive_damage`, its entry for a codec that is already bound and a
sample that is already encoded (what ``ratefloor.check(..., corruption=True)``
has in hand after the round trip).

The public function checks its arguments, binds the codec once, draws the
sample once and encodes it once; :func:`survive_damage` does the rest: the
schedule, the isolated trials, and on failure the replay files and the
:class:`~pytest_ratefloor.errors.CorruptionFailure`.
"""

from __future__ import annotations

import dataclasses
import os
import sys
import tempfile
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Union, cast

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.codecs import Codec, CodecContractError, Encoded, as_codec
from pytest_ratefloor.corruption.replay import replay_lines, save_damaged, stem_for
from pytest_ratefloor.corruption.schedule import corruption_schedule
from pytest_ratefloor.corruption.worker import (
    DEFAULT_MEMORY_LIMIT,
    TRIAL_STATUSES,
    CodecDecoder,
    CorruptionRun,
    run_trials,
    size_text,
    trial_limits,
)
from pytest_ratefloor.errors import CodecMisbehaviour, CorruptionFailure

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = [
    "DEFAULT_TIMEOUT",
    "DEFAULT_TRIALS",
    "SaveDir",
    "assert_survives_corruption",
    "survive_damage",
]

#: Damaged streams tried per check.
DEFAULT_TRIALS = 200
#: Seconds a decode of one damaged stream may take before it counts as a hang.
DEFAULT_TIMEOUT = 2.0

#: Where damaged streams of failed trials go: a directory, ``None`` for a new
#: temporary one, or a function giving either, called only when a trial fails.
SaveDir = Union[
    str, "os.PathLike[str]", Callable[[], Union[str, "os.PathLike[str]", None]], None
]


@dataclass(frozen=True)
class _Settings:
    """The checked settings of one run."""

    trials: int
    timeout: float
    must_detect: bool
    memory_limit: int | None


@dataclass(frozen=True)
class _Encoding:
    """The encoding under damage: the bound codec, the sample, its encoding, and
    how messages name the sample (``label``) and the schedule (``seed``)."""

    codec: Codec
    symbols: np.ndarray
    encoded: Encoded
    label: str
    seed: int


def _settings(
    trials: object, timeout: object, must_detect: object, memory_limit: object
) -> _Settings:
    trials = validation.integer(trials, "trials", minimum=1)
    seconds, limit = trial_limits(timeout, memory_limit)
    return _Settings(trials, seconds, validation.flag(must_detect, "must_detect"), limit)


def assert_survives_corruption(
    codec: object,
    source: object,
    n: int = 10_000,
    seed: int = 0,
    trials: int = DEFAULT_TRIALS,
    timeout: float = DEFAULT_TIMEOUT,
    must_detect: bool = False,
    memory_limit: int | None = DEFAULT_MEMORY_LIMIT,
    save_dir: str | os.PathLike[str] | None = None,
) -> CorruptionRun:
    """Check that the decoder survives damaged streams.

    Encodes ``source.sample(n, seed)`` (``source`` may also be a sequence of
    symbols, then ``n`` is ignored), damages the stream ``trials`` ways from
    :func:`~pytest_ratefloor.corruption.corruption_schedule` (seeded by
    ``seed``), and feeds each damaged stream to the decoder in an isolated
    worker (see the docstring of :mod:`pytest_ratefloor.corruption` for what
    counts as surviving, the isolation and the memory limit).

    ``codec`` is anything :func:`pytest_ratefloor.codecs.as_codec` accepts,
    an ``(encode, decode)`` pair of callables included, with
    ``encode(symbols)`` returning bytes, a ``bitarray`` or ``(bytes, nbits)``
    and ``decode(data, n)``. ``memory_limit`` is in bytes (growth allowed to
    the worker, default 1 GiB; ``None`` for no limit). Damaged streams of
    failed trials are saved under ``save_dir`` (default: a new temporary
    directory, whose path is printed), with a ``.json`` file beside each
    naming the corruption; :func:`~pytest_ratefloor.corruption.load_damaged`
    reads one back for replay.

    With ``must_detect=True`` returning anything but the original symbols
    without raising is a failure; output that the codec adapter rejects
    (wrong type or length) counts as returned, not as detected.

    ``n`` (an integer >= 0), ``seed`` and ``trials`` are checked as by every
    other entry point: a wrong type raises ``TypeError``, a bad value
    ``ValueError``.

    Raises :class:`~pytest_ratefloor.errors.CorruptionFailure` naming each
    failed corruption (the run stops after
    :data:`~pytest_ratefloor.corruption.MAX_FAILURES`),
    :class:`~pytest_ratefloor.errors.CodecMisbehaviour` if the encoder fails
    on the clean sample, and :class:`~pytest_ratefloor.errors.CorruptionSetupError`
    if no worker can be started. Returns the
    :class:`~pytest_ratefloor.corruption.CorruptionRun` when every trial survived.
    """
    __tracebackhide__ = True
    n = validation.sample_size(n, minimum=0)
    seed = validation.seed(seed)
    settings = _settings(trials, timeout, must_detect, memory_limit)
    bound = as_codec(codec)
    if hasattr(source, "sample"):
        bound = bound.for_source(cast("Source", source))
    symbols, label = _sample(source, n, seed)
    encoded = _encode_clean(bound, symbols)
    return _survive(_Encoding(bound, symbols, encoded, label, seed), settings, save_dir)


def survive_damage(
    codec: Codec,
    symbols: np.ndarray,
    encoded: Encoded,
    *,
    source: str,
    seed: int,
    trials: int = DEFAULT_TRIALS,
    timeout: float = DEFAULT_TIMEOUT,
    must_detect: bool = False,
    memory_limit: int | None = DEFAULT_MEMORY_LIMIT,
    save_dir: SaveDir = None,
) -> CorruptionRun:
    """The corruption check on an encoding that already exists.

    ``codec`` is a bound :class:`~pytest_ratefloor.codecs.Codec` (what
    ``as_codec(...).for_source(source)`` returned), ``symbols`` the int64
    sample and ``encoded`` what ``codec.encode(symbols)`` returned for it;
    nothing is bound, drawn or encoded again. ``source`` is the text that
    failure messages name the sample by (a source spec); ``seed`` seeds the
    damage schedule and is named in messages. The settings are those of
    :func:`assert_survives_corruption` and are checked the same way;
    ``save_dir`` may also be a function giving the directory (or ``None``),
    called only when a trial fails.

    Raises :class:`~pytest_ratefloor.errors.CorruptionFailure` (replay files
    saved under ``save_dir``, default a new temporary directory) or returns the
    :class:`~pytest_ratefloor.corruption.CorruptionRun`.
    """
    __tracebackhide__ = True
    seed = validation.seed(seed)
    settings = _settings(trials, timeout, must_detect, memory_limit)
    symbols = np.asarray(symbols, dtype=np.int64)
    return _survive(_Encoding(codec, symbols, encoded, source, seed), settings, save_dir)


def _sample(source: object, n: int, seed: int) -> tuple[np.ndarray, str]:
    """The symbols to encode and the text that names them."""
    if hasattr(source, "sample"):
        symbols = np.asarray(cast("Source", source).sample(n, seed=seed))
        return symbols.astype(np.int64, copy=False), str(getattr(source, "spec", source))
    try:
        symbols = np.asarray(source, dtype=np.int64)
    except (TypeError, ValueError) as exc:
        raise TypeError(
            "source must be a reference source (with .sample) or a sequence of symbols, "
            f"got {validation.show(source)}"
        ) from exc
    if symbols.ndim != 1:
        raise ValueError(f"source symbols must be one-dimensional, got shape {symbols.shape}")
    return symbols, f"{symbols.shape[0]} given symbols"


def _encode_clean(codec: Codec, symbols: np.ndarray) -> Encoded:
    """The one encoding of the clean sample (of a copy: ``symbols`` stay the reference)."""
    __tracebackhide__ = True
    try:
        return codec.encode(symbols.copy())
    except CodecContractError as exc:
        raise CodecMisbehaviour(
            f"encoder of {codec.name!r} on the clean sample: {exc}"
        ) from exc
    except Exception as exc:
        raise CodecMisbehaviour(
            f"encoder of {codec.name!r} raised {type(exc).__name__}: {exc} on the clean sample"
        ) from exc


def _survive(target: _Encoding, settings: _Settings, save_dir: SaveDir) -> CorruptionRun:
    __tracebackhide__ = True
    stream = target.encoded.stream
    run = run_trials(
        CodecDecoder(target.codec),
        target.encoded,
        len(target.symbols),
        corruption_schedule(len(stream), settings.trials, target.seed),
        expected=target.symbols if settings.must_detect else None,
        timeout=settings.timeout,
        memory_limit=settings.memory_limit,
    )
    if run.failures:
        raise CorruptionFailure(_failure_message(target, settings, run, save_dir))
    return run


def _failure_message(
    target: _Encoding, settings: _Settings, run: CorruptionRun, save_dir: SaveDir
) -> str:
    """The failure text, saving each failed trial's damaged stream on the way."""
    codec, symbols, encoded = target.codec, target.symbols, target.encoded
    label, seed = target.label, target.seed
    if callable(save_dir):
        save_dir = save_dir()
    if save_dir is None:
        directory = Path(tempfile.mkdtemp(prefix="ratefloor-corruption-"))
        print(f"ratefloor: damaged streams saved under {directory}", file=sys.stderr)
    else:
        directory = Path(save_dir)
    stream, shape, n = encoded.stream, encoded.shape, len(symbols)
    mode = "must-detect" if settings.must_detect else "survival"
    count = len(run.failures)
    lines = [
        f"decoder of {codec.name!r} failed {count} corruption trial{'s' if count != 1 else ''} "
        f"({mode} mode) on {label}, n={n}, seed={seed}; clean stream {len(stream)} bytes"
        + (f" ({encoded.bits} bits, {shape.kind})" if shape.kind != "bytes" else "")
    ]
    for outcome in run.failures:
        c = outcome.corruption
        damaged = c.apply(stream)
        meta = {
            "codec": codec.name,
            "source": label,
            "n": n,
            "seed": seed,
            "trial": outcome.trial,
            "status": outcome.status,
            "detail": outcome.detail,
            "corruption": dataclasses.asdict(c) | {"bits": list(c.bits)},
            "description": c.describe(),
        }
        stem = stem_for(codec.name, seed, outcome.trial, c.kind)
        path = save_damaged(directory, stem, damaged, shape, meta)
        detail = outcome.detail
        if outcome.status == "memory" and settings.memory_limit is not None:
            detail += (
                f" (limit: {size_text(settings.memory_limit)} of growth, "
                f"guard: {run.memory_guard})"
            )
        lines += [
            f"  trial {outcome.trial}: {TRIAL_STATUSES[outcome.status].title}: {detail}",
            f"    corruption: {c.describe()}",
            f"    {c!r}",
            f"    damaged stream: {path} ({len(damaged)} bytes)",
            *(f"    {line}" for line in replay_lines(codec, path, n)),
        ]
    if run.stopped_early:
        lines.append(f"  stopped after {count} failures")
    lines.append(f"  {run.summary()}")
    return "\n".join(lines)
