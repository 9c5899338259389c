"""The memory of the decode worker: the guard that limits it, and the measures
that tell real growth from a decoder that refuses a stream at once.

The guard (:func:`guard_memory`) is set once when a worker starts: on Linux
``setrlimit(RLIMIT_AS)`` at the address space the worker holds then plus the
limit, elsewhere a ceiling on the peak resident size that the worker compares
after each trial. A :class:`MemoryMark` is the worker's memory at one moment;
:func:`growth` says by how much it grew between marks, which decides whether a
``MemoryError`` is memory growth or an ordinary rejection (see
:data:`GROWTH_SHARE`).
"""

from __future__ import annotations

import contextlib
import sys
from dataclasses import dataclass

__all__ = ["GROWTH_SHARE", "MemoryMark", "growth", "guard_memory", "peak_rss", "size_text"]


def _vm_size() -> int | None:
    """Current address-space size of this process in bytes (Linux), else None."""
    return MemoryMark.now().address_space


def peak_rss() -> int | None:
    """Peak resident size of this process in bytes, where ``resource`` exists."""
    try:
        import resource
    except ImportError:
        return None
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak) if sys.platform == "darwin" else int(peak) * 1024  # macOS: bytes; else KiB


#: A ``MemoryError`` counts as memory growth (not as an ordinary rejection) when the
#: worker grew by at least this share of the limit first. A buffer that grows by a
#: factor g each step fails once the next step no longer fits, having grown by more
#: than limit/g by then (more than limit/(1+g) when old and new are held at once, and
#: then at a peak above limit/g); CPython's lists and bytearrays grow by about 1/8
#: (Objects/listobject.c, Objects/bytearrayobject.c), hand-written buffers commonly
#: by 1.5 or 2 (common practice), so 1/8 catches every such loop with room to spare,
#: while a decoder that refuses an absurd header with ``raise MemoryError`` at once
#: has grown by next to nothing.
GROWTH_SHARE = 1 / 8


@dataclass(frozen=True)
class MemoryMark:
    """The worker's memory at one moment: its address space now and at its peak
    (``/proc/self/status``, Linux), and its peak resident size (``getrusage``);
    ``None`` where the platform does not tell."""

    address_space: int | None
    peak_address_space: int | None
    peak_resident: int | None

    @classmethod
    def now(cls) -> MemoryMark:
        size = peak = None
        try:
            with open("/proc/self/status") as fh:
                for line in fh:
                    key, _, value = line.partition(":")
                    if key in ("VmSize", "VmPeak"):
                        kib = int(value.split()[0]) * 1024  # the file gives kB (proc(5))
                        if key == "VmSize":
                            size = kib
                        else:
                            peak = kib
        except (OSError, ValueError, IndexError):
            pass
        return cls(size, peak, peak_rss())


def growth(start: MemoryMark, before: MemoryMark, after: MemoryMark) -> int:
    """Bytes the worker grew by since ``start`` (its own start), as far as can be told
    at ``after``: the address space held now (the failed decoder's frames, and what
    they hold, are still alive while its exception is handled), or the peak address
    space if this trial (begun at ``before``) raised it; else the rise of the peak
    resident size during the trial. 0 when nothing can be measured."""
    grown = 0
    if start.address_space is not None and after.address_space is not None:
        grown = after.address_space - start.address_space
        if (
            after.peak_address_space is not None
            and before.peak_address_space is not None
            and after.peak_address_space > before.peak_address_space
        ):
            grown = max(grown, after.peak_address_space - start.address_space)
    elif after.peak_resident is not None and before.peak_resident is not None:
        grown = after.peak_resident - before.peak_resident
    return max(grown, 0)


def size_text(size: int) -> str:
    """``size`` bytes for a message: ``64 MiB``, ``1.5 GiB``, ``300 bytes``."""
    for unit, scale in (("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)):
        if size >= scale:
            return f"{size / scale:.4g} {unit}"
    return f"{size} bytes"


def guard_memory(limit: int | None) -> tuple[str, int | None]:
    """Limit the worker's memory. Returns the guard used and, for the peak-RSS
    guard, the RSS ceiling to compare with after each trial."""
    try:
        import resource
    except ImportError:
        resource = None  # type: ignore[assignment]
    if resource is not None:
        with contextlib.suppress(ValueError, OSError):
            # No core files from decoders that crash on purpose-built damage.
            resource.setrlimit(
                resource.RLIMIT_CORE, (0, resource.getrlimit(resource.RLIMIT_CORE)[1])
            )
    if limit is None:
        return "none", None
    base = _vm_size()
    if resource is not None and base is not None and sys.platform.startswith("linux"):
        _soft, hard = resource.getrlimit(resource.RLIMIT_AS)
        ceiling = base + limit
        if hard != resource.RLIM_INFINITY:
            ceiling = min(ceiling, hard)
        try:
            resource.setrlimit(resource.RLIMIT_AS, (ceiling, hard))
            return "address-space", None
        except (ValueError, OSError):
            pass
    rss = peak_rss()
    if rss is None:
        return "none", None
    return "peak-rss", rss + limit
