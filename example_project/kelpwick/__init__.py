"""kelpwick: telemetry codecs of the (invented) Kelpwick Sound tide-gauge network.

Each gauge reports every few minutes over a narrow radio link. A report batch
carries three streams, each with its own entropy coder:

- ``levels``   change in water level since the last report, in millimetres
  (small signed integers, roughly two-sided geometric): zig-zag + Rice code;
- ``faults``   sensor-fault flag, almost always 0: adaptive binary range coder
  with Krichevsky–Trofimov counts;
- ``seastate`` sea-state class out of at most 16 categories with skewed
  frequencies: length-limited canonical Huffman code.

Every codec has ``encode(symbols: numpy.ndarray) -> bytes`` and
``decode(data: bytes, n: int) -> numpy.ndarray``; the message starts with the
symbol count, so a decoder can tell a truncated or mismatched message.
"""

from __future__ import annotations

__version__ = "1.0.0"
