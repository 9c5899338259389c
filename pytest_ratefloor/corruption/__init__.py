"""Robustness of a decoder against damaged streams.

This package holds the corruption check: a deterministic schedule of damage
(truncations, single and burst bit flips, appended garbage, random bytes of
the same length), the isolated worker process that feeds each damaged stream
to the decoder, and :func:`assert_survives_corruption`, which turns what went
wrong into a :class:`~pytest_ratefloor.errors.CorruptionFailure` with a
replay file.

What counts as surviving
    For every damaged stream the decoder must return within ``timeout``
    seconds and either raise an ordinary exception (any ``Exception``; a
    ``MemoryError`` too when it is raised before the worker has grown, e.g. to
    refuse a header that asks for 6·10^18 bytes) or return something. A wrong
    result is acceptable, because a format without an integrity check cannot
    know. With
    ``must_detect=True`` (formats that promise detection, e.g. with a
    checksum) returning anything other than the original symbols is a
    failure; returning the original exactly (as decoders that ignore trailing
    garbage do) is not.

    A failure is one of: ``hang`` (no answer within the timeout), ``crash``
    (the interpreter died: a signal such as SIGSEGV/SIGABRT, or an exit),
    ``memory`` (``MemoryError`` after the worker really grew: by at least
    :data:`~pytest_ratefloor.corruption.memory.GROWTH_SHARE` of
    ``memory_limit`` (of the default limit when there is none), as measured
    from its address space, or its peak resident size where that is all there
    is; or the worker was killed by SIGKILL, which is what the kernel's
    out-of-memory killer sends), ``exit`` (the decoder raised
    ``SystemExit``/``KeyboardInterrupt``, which would end a test session) and
    ``silent`` (must-detect mode only: wrong data returned without an error).

Isolation
    Decodes run in one worker process that runs the trials one after another
    and reports each outcome over a pipe; the parent waits at most
    ``timeout`` for each report. A hung worker is killed, a dead one is
    reaped, the trial is recorded as failed, and a fresh worker continues
    with the next trial. The worker starts a session (and process group) of
    its own before anything else, so every process the decoder starts belongs
    to it; whenever a worker is torn down (a hang, a death, the end of the
    run) the whole group is killed with SIGKILL before the worker is reaped,
    and nothing the decoder started outlives the check (except a process that
    left the group on purpose by starting its own session). On Linux (and
    other non-macOS systems that have it)
    the worker is started with ``fork``: it inherits the decoder, so closures
    and lambdas defined in test files work. Elsewhere (macOS, where ``fork``
    is unsafe with system libraries, and Windows) it is started with
    ``spawn``, which needs the decoder to pickle; if it does not, a
    :class:`CorruptionSetupError` says so. There is deliberately no
    in-process fallback: a hang there would stall the whole test session,
    the very thing the check exists to prevent. When the worker dies of a
    signal, ``faulthandler`` prints its Python traceback (the decoder's frame
    on top) to standard error, which pytest captures and shows with the
    failure. A run stops after :data:`MAX_FAILURES` failed trials.

Memory limit
    ``memory_limit`` bytes is the growth allowed to the worker's address
    space beyond what it holds when it starts (the forked copy of the test
    process). On Linux it is enforced with ``setrlimit(RLIMIT_AS)``, so an
    unbounded allocation raises ``MemoryError`` (or kills a C extension that
    does not check ``malloc``). Where ``RLIMIT_AS`` is not available or not
    enforced (macOS, Windows) the worker instead compares its peak resident
    size after each trial with the limit, which catches growth after the
    fact but cannot stop an allocation that exhausts the machine.

Bit-level payloads
    The schedule damages bytes. When the encoder returns a ``bitarray`` the
    check corrupts ``payload.tobytes()`` and passes a ``bitarray`` of the same
    endianness back to the decoder, of length ``8 * len(damaged) - pad``
    where ``pad`` is the number of padding bits of the original (so an
    unchanged length keeps the exact bit count, a truncation removes whole
    bytes from the end and appended garbage adds 8 bits per byte). A
    ``(bytes, nbits)`` payload is handled the same way and passed back as a
    ``(bytes, nbits)`` pair. Flips that land in padding bits change nothing.
    The codec adapters own this (:class:`~pytest_ratefloor.codecs.Encoded`
    and :class:`~pytest_ratefloor.codecs.PayloadShape`); the worker and
    :func:`load_damaged` rebuild damaged payloads with the same routine.

Where things are
    ``schedule`` (the :class:`Corruption` record, the damage kinds,
    :func:`corruption_schedule`), ``worker`` (the isolated worker,
    :func:`run_corruption_trials` and its records), ``memory`` (the memory
    guard, and the measures that tell growth from refusal), ``replay`` (saved
    damaged streams, :func:`load_damaged`, and the replay lines of a failure,
    which run as printed: the decoder is named by its import path, by the
    name the calling test has for it, or, when it has none in reach, a note
    says what to bind first) and ``check``
    (:func:`assert_survives_corruption`, and ``survive_damage`` for a codec
    and an encoding that ``ratefloor.check`` already made).
"""

from __future__ import annotations

from pytest_ratefloor.corruption.check import assert_survives_corruption
from pytest_ratefloor.corruption.check import (  # the entry ratefloor.check uses
    survive_damage as survive_damage,
)
from pytest_ratefloor.corruption.replay import load_damaged
from pytest_ratefloor.corruption.schedule import (
    CORRUPTION_KINDS,
    Corruption,
    CorruptionKind,
    corruption_schedule,
)
from pytest_ratefloor.corruption.worker import (
    DEFAULT_MEMORY_LIMIT,
    MAX_FAILURES,
    CorruptionRun,
    TrialOutcome,
    TrialStatus,
    run_corruption_trials,
)
from pytest_ratefloor.errors import CorruptionSetupError

__all__ = [
    "CORRUPTION_KINDS",
    "DEFAULT_MEMORY_LIMIT",
    "MAX_FAILURES",
    "Corruption",
    "CorruptionKind",
    "CorruptionRun",
    "CorruptionSetupError",
    "TrialOutcome",
    "TrialStatus",
    "assert_survives_corruption",
    "corruption_schedule",
    "load_damaged",
    "run_corruption_trials",
]
