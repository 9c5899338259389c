"""Symbol-code analysis: codebooks, prefix-freeness, Kraft, unique decodability and
optimal-length floors.

One concern per module; this package re-exports their public names, so that
``from pytest_ratefloor import codes; codes.huffman_lengths(...)`` and
``from pytest_ratefloor.codes import Codebook, assert_kraft`` read as before.

===================  =========================================================
module               holds
===================  =========================================================
``codebook``         :class:`Codebook` (a table ``{symbol: codeword}`` that is
                     also a working codec) and the parsing of tables
``entries``          reading one entry: a symbol, a codeword, with the message
                     naming a bad one
``bulk``             reading a big integer-keyed table at once (pairs or
                     strings); anything unusual goes entry by entry
``properties``       prefix-freeness with a witness, exact Kraft sums, canonical
                     order and :func:`canonical_codebook`, the length cap, and
                     :func:`assert_prefix_free` / :func:`assert_kraft`
``decodability``     Sardinas–Patterson: :func:`ambiguity`,
                     :func:`assert_uniquely_decodable`
``sp_layers``        the same search on integers, a layer of buckets at a time
                     (codewords up to 62 bits; same answers)
``optimal``          Huffman and package-merge lengths, Golomb/Rice parameters
                     and expected lengths, :func:`entropy_bits`,
                     :func:`expected_length`, :func:`redundancy`,
                     :func:`excess_by_symbol`
===================  =========================================================

Conventions
-----------
* Symbols are the team's own keys: integers, characters, strings, bytes, tuples, any
  hashable value (``{'a': '0', 'b': '01', 'c': '11'}`` fails
  :func:`assert_prefix_free` with ``'a'`` and ``'b'``). Every analysis takes any table,
  and witnesses and messages name the symbols with ``repr``. Only encoding and decoding
  samples (``Codebook.encode``/``decode``, a table used as a codec) needs integer
  symbols, and says so (``"encoding samples needs integer symbols; this table is keyed
  by str such as 'a'"``); so do the lengths against a pmf of integer symbols
  (:func:`expected_length` and its kin). A ``bool`` is never a symbol, in any table:
  ``True == 1`` in Python, so beside ``'a'`` it would be ambiguous with ``1``. Symbol
  order (ties, the canonical assignment) is ascending when the symbols compare with one
  another, else the table's own order.
* Codewords are bit strings written most-significant bit first: ``"0110"``, a
  ``bitarray`` (its logical bit order, whatever its endianness) or ``(value, length)``
  meaning the low ``length`` bits of ``value``, MSB first. Witnesses in results and
  messages are given as ``"0110"`` text.
* A zero probability gets no codeword (length 0 in length vectors): a symbol that
  never occurs needs no room in the code space.
* A source with a single possible symbol gets one 1-bit codeword. A zero-length
  codeword would make the stream carry no bits at all, so the symbol count could not
  be recovered from the stream; every real symbol-code format spends at least one bit.
  Such a code has Kraft sum 1/2 and is the one incomplete code ``assert_kraft(...,
  complete=True)`` accepts.
* Kraft sums are exact :class:`fractions.Fraction` values (integer arithmetic only).
* Arguments are checked by :mod:`pytest_ratefloor.validation`: a wrong type raises
  ``TypeError`` (a ``bool`` is never taken for a symbol, a length or a count), a
  right type with a bad value ``ValueError``. Sizes that would make the analysis
  allocate without bound are capped: a codeword is at most
  :data:`MAX_CODEWORD_BITS` bits, a Golomb parameter at most :data:`GOLOMB_MAX_M`.
"""

from __future__ import annotations

from pytest_ratefloor.codes.codebook import MAX_CODEWORD_BITS, Codebook
from pytest_ratefloor.codes.codebook import CodeLike as CodeLike
from pytest_ratefloor.codes.codebook import IntArray as IntArray
from pytest_ratefloor.codes.decodability import (
    SP_SUFFIX_LIMIT,
    ambiguity,
    assert_uniquely_decodable,
)
from pytest_ratefloor.codes.optimal import (
    GOLOMB_MAX_M,
    entropy_bits,
    excess_by_symbol,
    expected_length,
    golomb_expected_length,
    golomb_parameter,
    huffman_lengths,
    length_limited_lengths,
    redundancy,
    rice_parameter,
)
from pytest_ratefloor.codes.optimal import (
    _package_merge as _package_merge,
)
from pytest_ratefloor.codes.properties import (
    Witness as Witness,
)
from pytest_ratefloor.codes.properties import (
    _check_shape as _check_shape,
)
from pytest_ratefloor.codes.properties import (
    assert_kraft,
    assert_prefix_free,
    canonical_codebook,
    is_canonical,
    kraft_sum,
    prefix_witness,
)

__all__ = [
    "GOLOMB_MAX_M",
    "MAX_CODEWORD_BITS",
    "SP_SUFFIX_LIMIT",
    "Codebook",
    "ambiguity",
    "assert_kraft",
    "assert_prefix_free",
    "assert_uniquely_decodable",
    "canonical_codebook",
    "entropy_bits",
    "excess_by_symbol",
    "expected_length",
    "golomb_expected_length",
    "golomb_parameter",
    "huffman_lengths",
    "is_canonical",
    "kraft_sum",
    "length_limited_lengths",
    "prefix_witness",
    "redundancy",
    "rice_parameter",
]
