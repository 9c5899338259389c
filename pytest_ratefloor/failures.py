"""The failure classes every check raises.

All are ``AssertionError`` subclasses so that pytest reports them as test
failures (not errors), and each carries a message a reviewer can act on
without a debugger. Checks set ``__tracebackhide__`` so the traceback ends at
the user's call.
"""

from __future__ import annotations


class RateFloorFailure(AssertionError):
    """Base class of every failure the plugin reports."""


class RoundTripFailure(RateFloorFailure):
    """Decoded symbols differ from the symbols that were encoded."""


class CodecMisbehaviour(RateFloorFailure):
    """The codec raised, returned the wrong type or length, mutated its input,
    or was not deterministic."""


class RateFailure(RateFloorFailure):
    """The measured rate exceeds the floor by more than the tolerance."""


class ImpossibleRate(RateFloorFailure):
    """The measured length is below what any decodable code can reach on the
    sample: the decoder must be getting information from outside the stream."""


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


class CorruptionFailure(RateFloorFailure):
    """The decoder hung, crashed, grew memory without bound, or (where detection
    is promised) silently returned wrong data on a damaged stream."""


class LedgerError(Exception):
    """The ledger file cannot be used: corrupt, truncated, newer schema, or a
    fingerprint mismatch. Raised as an error, never silently repaired."""


class SearchLimitExceeded(RuntimeError):
    """A bounded search (e.g. Sardinas–Patterson) hit its documented limit."""
