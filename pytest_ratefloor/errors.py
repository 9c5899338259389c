"""Every exception the plugin raises, in one place, with one naming scheme.

``*Failure``
    ``AssertionError`` subclasses: a check found the codec (or its code
    table, or its rate against the ledger) wanting. pytest reports them as
    test failures. All derive from :class:`RateFloorFailure`. Three public
    names from the first release keep their shorter form
    (:class:`CodecMisbehaviour`, :class:`ImpossibleRate`,
    :class:`AmbiguousCode`); they are failures all the same.
``*Error``
    Something other than the codec is wrong: a ledger file that cannot be
    used (:class:`LedgerError` and its kinds), a byte layout that cannot hold
    the symbols (:class:`LayoutError`, a ``ValueError``), a codec adapter
    contract breach before it is attributed (:class:`CodecContractError`),
    an isolated worker that cannot start (:class:`CorruptionSetupError`), a
    bounded search that hit its limit (:class:`SearchLimitError`), a command
    line mistake (:class:`CommandLineError`).

A bad argument is not here: it is a plain ``TypeError`` (wrong type) or
``ValueError`` (bad value) from :mod:`pytest_ratefloor.validation`.
Checks set ``__tracebackhide__`` so a failure's traceback ends at the
user's call.
"""

from __future__ import annotations

from collections.abc import Sequence

__all__ = [
    "AmbiguousCode",
    "CodeShapeFailure",
    "CodecContractError",
    "CodecMisbehaviour",
    "CodecTraceback",
    "CommandError",
    "CommandLineError",
    "CorruptionFailure",
    "CorruptionSetupError",
    "DistortionFailure",
    "ErrorBoundFailure",
    "ImpossibleRate",
    "KraftFailure",
    "LayoutError",
    "LedgerError",
    "LossyRateFailure",
    "NewCaseFailure",
    "NewerLedgerError",
    "NoisyToleranceWarning",
    "PluginMemoryError",
    "PrefixFailure",
    "RateFailure",
    "RateFloorFailure",
    "RegressionFailure",
    "RoundTripFailure",
    "SampleMismatchError",
    "SearchLimitError",
    "UnreadableLedgerError",
]


# -- failures: what the checks find ------------------------------------------------


class RateFloorFailure(AssertionError):
    """Base class of every failure the plugin reports."""

    #: the message's first line starts with the figures (``+2.960% bits vs ledger: ...``):
    #: the short test summary shows it as it is, without the class name
    figures_first: bool = False


class RoundTripFailure(RateFloorFailure):
    """Decoded symbols differ from the symbols that were encoded."""


class CodecMisbehaviour(RateFloorFailure):
    """The codec raised, returned the wrong type or length, mutated its input,
    or was not deterministic."""


class RateFailure(RateFloorFailure):
    """The measured rate exceeds the floor by more than the tolerance."""

    figures_first = True


class ImpossibleRate(RateFloorFailure):
    """The measured length is below what any decodable code can reach on the
    sample: the decoder must be getting information from outside the stream."""

    figures_first = True


class LossyRateFailure(RateFloorFailure):
    """A lossy codec's rate exceeds the rate–distortion function at its measured
    distortion by more than the allowed gap (bits/sample)."""


class DistortionFailure(RateFloorFailure):
    """A lossy codec's measured mean distortion exceeds the allowed distortion."""


class ErrorBoundFailure(RateFloorFailure):
    """A reconstructed sample lies farther from its original than the promised error bound."""


class PrefixFailure(RateFloorFailure):
    """A codeword is a prefix of another (or two codewords are equal)."""


class KraftFailure(RateFloorFailure):
    """The Kraft sum exceeds 1, or is below 1 where a complete code was asked for."""


class CodeShapeFailure(RateFloorFailure):
    """A codeword exceeds the format's length cap, or the table is not canonical."""


class AmbiguousCode(RateFloorFailure):
    """A bit string has two different parses into codewords (not uniquely decodable)."""


class RegressionFailure(RateFloorFailure):
    """The measured bits exceed the committed ledger entry by more than the slack."""

    figures_first = True


class NewCaseFailure(RateFloorFailure):
    """Strict mode: a measured case has no ledger entry (a changed ``n``, seed or codec
    name would otherwise turn a regression into a 'new' case)."""


class CorruptionFailure(RateFloorFailure):
    """The decoder hung, crashed, grew memory without bound, or (where detection
    is promised) silently returned wrong data on a damaged stream."""


# -- errors: what is wrong besides the codec ----------------------------------------


class CodecTraceback(Exception):
    """The traceback of an exception the codec raised in the check's child process.

    A check with ``isolate=True`` runs the codec in a forked child (see
    :mod:`pytest_ratefloor.isolation`);
    the child's exception objects cannot carry their traceback back, so its
    text is attached as the ``__cause__`` of the failure the test shows (the
    same device the standard library's process pools use).
    """

    def __init__(self, text: str) -> None:
        super().__init__(text)
        self.text = text

    def __str__(self) -> str:
        return "\n" + self.text.rstrip()


class LedgerError(Exception):
    """The ledger file cannot be used: corrupt, truncated, newer schema, or a
    fingerprint mismatch. Raised as an error, never silently repaired."""


class UnreadableLedgerError(LedgerError):
    """The ledger file is not valid JSON or not a well-formed ledger (corrupt or truncated)."""


class NewerLedgerError(LedgerError):
    """The ledger was written with a newer schema than this plugin understands."""


class SampleMismatchError(LedgerError):
    """The ledger entry was measured on a different sample (fingerprint differs):
    the source spec changed meaning, so the two bit counts cannot be compared."""


class LayoutError(ValueError):
    """A symbol does not fit a byte layout, or the layout name is unknown."""


class CommandError(Exception):
    """A program run by a :class:`CommandCodec` failed: it could not be started,
    exited with a non-zero status or by a signal, wrote to standard error, or
    ran past its time limit.

    ``command`` is the argv that ran (``{n}`` filled in), ``returncode`` its
    exit status (negative: the number of the signal that ended it; ``None``:
    it never started), ``stderr`` what it wrote there, ``timed_out`` whether
    it was killed for running too long. An ordinary exception: the checks name
    it as the decoder (or encoder) raising, and the damaged-stream check counts
    it as the decoder having detected the damage.
    """

    def __init__(
        self,
        message: str,
        command: Sequence[str] = (),
        returncode: int | None = None,
        stderr: bytes = b"",
        timed_out: bool = False,
    ) -> None:
        super().__init__(message)
        self.command = tuple(command)
        self.returncode = returncode
        self.stderr = bytes(stderr)
        self.timed_out = timed_out

    @property
    def signal(self) -> int | None:
        """The number of the signal that ended the program, if one did (and not
        the SIGKILL of a time out)."""
        if self.timed_out or self.returncode is None or self.returncode >= 0:
            return None
        return -self.returncode

    def __reduce__(self) -> tuple[type[CommandError], tuple[object, ...]]:
        # The checks send failures from a child process: keep every field.
        return type(self), (
            str(self), self.command, self.returncode, self.stderr, self.timed_out
        )


class CodecContractError(Exception):
    """A codec broke the adapter contract (wrong type, wrong length, bad bit count).

    The message says what was returned and what was expected; the checks turn
    it into a :class:`CodecMisbehaviour` naming the codec, the source, ``n``
    and the seed.
    """


class CorruptionSetupError(RuntimeError):
    """The isolated decode worker cannot be set up (e.g. a decoder that does not
    pickle where ``fork`` is unavailable). Not a fault of the codec."""


class SearchLimitError(RuntimeError):
    """A bounded search (e.g. Sardinas–Patterson) hit its documented limit."""


class PluginMemoryError(MemoryError):
    """The plugin itself ran out of memory (drawing, narrowing, packing or comparing
    the sample): not a fault of the codec. The message names ``n`` and the step."""


# -- warnings ----------------------------------------------------------------------------


class NoisyToleranceWarning(UserWarning):
    """A check's tolerance is smaller than the sampling noise of its floor (or than one
    bit): its verdict depends on the luck of one sample. The message names the case,
    the spread and the ``n`` from which the tolerance would be meaningful."""


class CommandLineError(Exception):
    """A mistake on the ``ratefloor`` command line: one line on stderr, exit status 2."""
