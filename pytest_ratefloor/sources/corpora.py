"""Corpus files as sources: the sample *is* the file, its entropy a plug-in *estimate*.

:class:`Corpus` holds the exact symbols of one file read through the
project's one layout table (:mod:`pytest_ratefloor.layouts`). Unlike
:func:`~pytest_ratefloor.sources.from_file` (which fits a model to the file
and draws fresh samples from it), a corpus source never draws anything:
``sample(n)`` is the first ``n`` symbols of the file and the seed has no
effect. So a codec is measured on the real data, against the order-0 plug-in
estimate of that data.

:func:`corpus` reads one file; :func:`corpus_files` reads a folder or a glob
pattern into one source per file, sorted by path. Files are read once,
bounded (regular files only, at most ``max_bytes``).
"""

from __future__ import annotations

import glob
import hashlib
import math
import os
import re
import stat

import numpy as np

from pytest_ratefloor import layouts, validation
from pytest_ratefloor.errors import LayoutError
from pytest_ratefloor.sources.base import Source, _log2_ratio

__all__ = ["MAX_CORPUS_BYTES", "Corpus", "corpus", "corpus_files"]

#: Default cap on a corpus file's size (16 MiB: 16 Mi symbols as ``u8``, taking
#: 128 MiB as int64; 128 Mi symbols, 1 GiB, as ``bits``). Raise it with ``max_bytes=``.
MAX_CORPUS_BYTES = 1 << 24
#: Hex digits of the file's SHA-256 kept in the spec.
SHA_CHARS = 12
_MAGIC = re.compile(r"[*?[]")  # what makes a path a glob pattern
_UNSAFE = re.compile(r"[^A-Za-z0-9._/-]")  # kept out of specs (test ids, ledger keys)
_READ_CHUNK = 1 << 20


def _label(name: str) -> str:
    """``name`` (a relative path, ``/``-separated) made safe for a spec: others become ``_``."""
    return _UNSAFE.sub("_", name) or "file"


class Corpus(Source):
    """The exact symbols of one file; entropy is the order-0 plug-in *estimate*.

    ``content``: the file's bytes; ``name``: the name the spec shows (the
    factories give the file's base name, or its path relative to the folder
    or glob root); ``symbol``: the layout the bytes hold symbols in (any of
    :data:`pytest_ratefloor.layouts.LAYOUTS`).

    Spec: ``corpus(name=<name>,sha=<first 12 hex digits of the SHA-256 of the
    file's bytes, as sha256sum prints it>,symbol=<layout>)``, so an edited
    file changes the spec and the ledger sees a new case rather than a
    regression of the old one.

    * ``sample(n=None, seed=0)``: the first ``n`` symbols of the file (all of
      them when ``n`` is ``None``). The seed is checked but has **no effect**:
      every seed gives the same sample. ``n`` beyond the file is a
      ``ValueError`` naming the file and its length.
    * ``entropy``: the order-0 plug-in estimate ``Ĥ0 = Σₐ (cₐ/N) log2(N/cₐ)``
      over the whole file's histogram (``N`` symbols, ``cₐ`` occurrences of
      ``a``). ``is_estimate`` is True: it describes this file under an i.i.d.
      model, not the process the file came from.
    * ``information(x)``: ``Σᵢ −log2(c_{xᵢ}/N)``, the self-information under
      the same histogram, so the whole file's information is ``N·Ĥ0`` exactly
      (the ``"sample"`` floor of the whole file equals the ``"empirical"``
      one). A symbol that never occurs in the file has probability 0.
    * ``varentropy``: the variance of ``−log2(c_X/N)`` under the histogram;
      the model is memoryless, so it is also the ``varentropy_rate``.

    ``fixed_sample`` is True: the sample is data, not a draw from the model.
    A coder that exploits structure beyond order 0 (repeats, context) can
    legitimately go far below ``information(sample)``, which is therefore no
    hard floor for such data.

    Attributes: ``name``, ``sha``, ``symbol``, ``path`` (as given, or
    ``None``), ``length`` (symbols in the file), ``data`` (the symbols,
    read-only int64), ``symbols``/``counts`` (the histogram).
    """

    fixed_sample = True

    def __init__(
        self,
        content: bytes,
        *,
        name: str,
        symbol: str = "u8",
        path: str | os.PathLike[str] | None = None,
    ) -> None:
        where = "corpus"
        if not isinstance(content, (bytes, bytearray, memoryview)):
            raise TypeError(validation.message("content", "bytes", content, where))
        raw = bytes(content)
        label = _label(validation.text(name, "name", where=where))
        layout = validation.choice(symbol, "symbol", layouts.LAYOUTS, where=where)
        if not raw:
            raise ValueError(f"{where}: {label} is empty; a corpus needs at least one symbol")
        try:
            data = layouts.unpack(raw, None, layout)
        except LayoutError as exc:
            raise LayoutError(f"{where}: {label}: {exc}") from None
        data.flags.writeable = False
        symbols, counts = np.unique(data, return_counts=True)
        self.name = label
        self.sha = hashlib.sha256(raw).hexdigest()[:SHA_CHARS]
        self.symbol = layout
        self.path = None if path is None else os.fspath(path)
        self.data = data
        self.length = int(data.size)
        self.symbols = symbols.astype(np.int64)
        self.counts = counts.astype(np.int64)
        n = self.length
        # -log2(c/N) of each distinct symbol, via log1p where c/N is near 1
        self._neg_log2 = np.array([-_log2_ratio(c, n) for c in self.counts.tolist()])
        super().__init__(
            family="corpus",
            spec=f"corpus(name={label},sha={self.sha},symbol={layout})",
            params={"n": n},
            alphabet_size=int(symbols.size),
            min_symbol=int(symbols[0]),
            max_symbol=int(symbols[-1]),
            is_estimate=True,
            memoryless=True,
        )

    # -- the sample is the file

    def sample(self, n: int | None = None, seed: int = 0) -> np.ndarray:
        """The first ``n`` symbols of the file (int64; ``None``: all of them).

        ``seed`` must be a valid seed but has no effect: a corpus sample is the
        file itself, the same for every seed.

        :raises ValueError: ``n`` is more than the file's symbols (the message
            names the file and its length).
        """
        validation.seed(seed)
        count = self.length if n is None else validation.sample_size(n, minimum=0)
        return self._prefix(count)

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        return self._prefix(n)  # no randomness: the bit generator is not used

    def _prefix(self, n: int) -> np.ndarray:
        if n > self.length:
            raise ValueError(
                f"{self.spec}: n={n} is more than the {self.length} {self.symbol} symbols of "
                f"{self.name}; a corpus sample is the file itself, so n must be <= {self.length}"
            )
        return self.data[:n].copy()

    # -- the plug-in model of the whole file

    def _compute_entropy(self) -> float:
        return math.fsum((self.counts * self._neg_log2).tolist()) / self.length

    def _compute_varentropy(self) -> float:
        dev = self._neg_log2 - self.entropy
        return math.fsum((self.counts * dev * dev).tolist()) / self.length

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        where = np.searchsorted(self.symbols, x)
        found = where < self.symbols.size
        found[found] = self.symbols[where[found]] == x[found]
        info = np.full(x.shape, np.inf)
        info[found] = self._neg_log2[where[found]]
        return info

    def _why_impossible(self, x: np.ndarray, i: int) -> str:
        return (
            f"symbol {int(x[i])} at index {i} never occurs in {self.name} "
            "(probability 0 under the plug-in estimate)"
        )

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
        return self.symbols.copy(), np.array([c / self.length for c in self.counts.tolist()])


# --------------------------------------------------------------------------
# reading files


def _read_bounded(name: str, max_bytes: int, where: str) -> bytes:
    """The bytes of the regular file ``name``, refusing FIFOs, devices and files over the cap."""

    def refuse(mode: int) -> None:
        if stat.S_ISDIR(mode):
            raise ValueError(
                f"{where}: {name} is a folder; corpus_files({name!r}) gives one source per file"
            )
        if not stat.S_ISREG(mode):
            kind = (
                "a FIFO" if stat.S_ISFIFO(mode)
                else "a device" if stat.S_ISCHR(mode) or stat.S_ISBLK(mode)
                else "a socket" if stat.S_ISSOCK(mode)
                else "not a regular file"
            )
            raise ValueError(f"{where}: {name} is {kind}; a corpus is read from regular files only")

    def too_big(size: int) -> ValueError:
        return ValueError(
            f"{where}: {name} is {size:,} bytes, over the limit of {max_bytes:,} bytes; "
            "pass a larger max_bytes= or a shorter file"
        )

    refuse(os.stat(name).st_mode)  # before opening: opening a device may have effects
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0)
    fd = os.open(name, flags | getattr(os, "O_CLOEXEC", 0))
    try:
        info = os.fstat(fd)  # the file opened, in case the path changed since
        refuse(info.st_mode)
        if info.st_size > max_bytes:
            raise too_big(info.st_size)
        parts: list[bytes] = []
        total = 0
        while total <= max_bytes:
            part = os.read(fd, min(_READ_CHUNK, max_bytes + 1 - total))
            if not part:
                break
            parts.append(part)
            total += len(part)
        if total > max_bytes:  # grew while being read
            raise too_big(total)
        return b"".join(parts)
    finally:
        os.close(fd)


def _load(name: str, label: str, symbol: str, max_bytes: int, where: str) -> Corpus:
    content = _read_bounded(name, max_bytes, where)
    if not content:
        raise ValueError(f"{where}: {name} is empty; a corpus needs at least one symbol")
    return Corpus(content, name=label, symbol=symbol, path=name)


def _arguments(path: object, symbol: object, max_bytes: object,
               where: str) -> tuple[str, str, int]:
    if not isinstance(path, (str, os.PathLike)):
        raise TypeError(validation.message("path", "a path (str or os.PathLike)", path, where))
    name = os.fspath(path)
    if not isinstance(name, str):
        raise TypeError(validation.message("path", "a text path", path, where))
    layout = validation.choice(symbol, "symbol", layouts.LAYOUTS, where=where)
    cap = validation.integer(max_bytes, "max_bytes", minimum=1, where=where)
    return name, layout, cap


def corpus(
    path: str | os.PathLike[str], symbol: str = "u8", *, max_bytes: int = MAX_CORPUS_BYTES
) -> Corpus:
    """One file as a :class:`Corpus` source: its sample is the file's own symbols.

    ``symbol`` names the layout the bytes hold symbols in (``"u8"``: one per
    byte; ``"bits"``: eight per byte, most significant first; ``"u16le"``,
    ``"i32le"``, ``"zigzag-u16le"``, …: little-endian words, and the file must
    be a whole number of them). The spec names the file by its base name:
    ``corpus(name=tides.u8,sha=0123456789ab,symbol=u8)``. For a folder or a
    glob pattern use :func:`corpus_files`.

    :raises FileNotFoundError: no such file.
    :raises ValueError: a folder, a FIFO, a device or another non-regular
        file; an empty file; a file over ``max_bytes``.
    :raises LayoutError: the file is not a whole number of symbols (a ``ValueError``).
    """
    name, layout, cap = _arguments(path, symbol, max_bytes, "corpus")
    return _load(name, os.path.basename(os.path.normpath(name)), layout, cap, "corpus")


def _glob_root(pattern: str) -> str:
    """The leading folders of ``pattern`` that hold no wildcard (``"."`` if none)."""
    parts = re.split(r"[/\\]", pattern) if os.sep == "\\" else pattern.split("/")
    fixed: list[str] = []
    for part in parts[:-1]:
        if _MAGIC.search(part):
            break
        fixed.append(part)
    if not fixed:
        return "."
    return "/".join(fixed) or "/"


def corpus_files(
    pattern: str | os.PathLike[str], symbol: str = "u8", *, max_bytes: int = MAX_CORPUS_BYTES
) -> list[Corpus]:
    """One :class:`Corpus` per file of a folder or a glob pattern, sorted by path.

    * a folder: every file directly in it (not in sub-folders; names starting
      with ``.`` are skipped);
    * a glob pattern (``*``, ``?``, ``[…]``; ``**`` crosses folders): every
      match that is not a folder (hidden names only when the pattern spells
      the dot);
    * a plain file: a list of one.

    Each spec names its file by the path relative to the folder, or to the
    pattern's leading folders without wildcards (``corpus_files("data/**/*.u8")``
    names ``data/tides/jan.u8`` ``tides/jan.u8``), with ``/`` separators, so
    specs do not depend on where the checkout lives. ``symbol`` and
    ``max_bytes`` apply to every file as in :func:`corpus`; a FIFO or device
    among the matches is refused, not skipped.

    :raises FileNotFoundError: nothing matches (or the folder holds no files).
    """
    where = "corpus_files"
    name, layout, cap = _arguments(pattern, symbol, max_bytes, where)
    if os.path.isdir(name):
        root = name
        with os.scandir(name) as entries:
            found = [e.path for e in entries if not e.name.startswith(".") and not e.is_dir()]
        if not found:
            raise FileNotFoundError(f"{where}: the folder {name} holds no files")
    elif _MAGIC.search(name):
        root = _glob_root(name)
        found = [p for p in glob.glob(name, recursive=True) if not os.path.isdir(p)]
        if not found:
            raise FileNotFoundError(f"{where}: no files match {name!r}")
    else:
        if not os.path.lexists(name):
            raise FileNotFoundError(f"{where}: no such file, folder or pattern: {name!r}")
        return [corpus(name, layout, max_bytes=cap)]
    named = sorted(
        (os.path.relpath(p, root).replace(os.sep, "/"), p) for p in found
    )
    return [_load(p, rel, layout, cap, where) for rel, p in named]
