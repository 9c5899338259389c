"""Pages of memory shared with another process, where one process notes what it is doing.

A process that may end without warning (a forked child running a codec, or
the whole test session under :mod:`pytest_ratefloor.supervisor`) notes where
it is on a :class:`StepBoard`; the process watching it reads the board only
when the other one ends without saying why. A note is a copy into memory, so
it costs about a microsecond, and the last whole note survives a process
killed while writing.
"""

from __future__ import annotations

import mmap

__all__ = ["StepBoard"]


class StepBoard:
    """One line of text on a page of anonymous memory shared with processes forked later.

    Two slots and a byte naming the one to read: the writer fills the other
    slot, then flips the byte, so a writer killed while writing leaves the
    last whole line. A line longer than :attr:`SLOT` bytes of UTF-8 is cut there.
    """

    SIZE = 4096
    SLOT = (SIZE - 8) // 2 - 4  # bytes of text; each slot is a 4-byte length and the text

    def __init__(self) -> None:
        self.memory = mmap.mmap(-1, self.SIZE)  # anonymous: shared with children forked later

    def _offset(self, slot: int) -> int:
        return 8 + slot * (4 + self.SLOT)

    def clear(self) -> None:
        """No line yet (:meth:`read` gives its default)."""
        self.memory[0] = 0
        self.memory[8:12] = bytes(4)

    def write(self, text: str) -> None:
        """Replace the line (cut to :attr:`SLOT` bytes)."""
        data = text.encode("utf-8", "replace")[: self.SLOT]
        slot = 1 - self.memory[0]
        at = self._offset(slot)
        self.memory[at:at + 4] = len(data).to_bytes(4, "little")
        self.memory[at + 4:at + 4 + len(data)] = data
        self.memory[0] = slot

    def read(self, default: str = "") -> str:
        """The last whole line written, or ``default`` when there is none."""
        at = self._offset(self.memory[0] & 1)
        length = min(int.from_bytes(self.memory[at:at + 4], "little"), self.SLOT)
        return self.memory[at + 4:at + 4 + length].decode("utf-8", "replace") or default
