"""Lock-free single-writer ring buffer of fixed-width float64 frames.

The audio thread is the only writer; any number of readers poll. The writer
fills a row and only then advances a monotonically increasing write counter,
so a reader that reads the counter first never sees a half-written row unless
the writer has lapped it (the reader detects that and reports frames lost).
No locks, no allocation on the write path.

Audio thread: :meth:`FrameRing.write_row` (via ``next_row`` + ``commit``).
Any other thread: :meth:`FrameRing.read_new`, :meth:`FrameRing.latest`.

A ring may live in shared memory (:meth:`FrameRing.shared`), so a reader in
another process (the workbench, while the host runs in its own process) can
:meth:`FrameRing.attach` to it by name and read frames without asking the
writer's process for anything. The counter is one aligned 64-bit word,
stored after the row it publishes (x86-64 and ARMv8 keep aligned 64-bit
stores whole); a reader sees at worst one row torn by a lap, which
``read_new`` reports as lost.
"""
from __future__ import annotations

from multiprocessing import shared_memory

import numpy as np

HEADER_BYTES = 64


class FrameRing:
    """Ring of ``capacity`` frames, ``width`` float64 values each."""

    def __init__(self, capacity: int, width: int, _shm=None, _owner: bool = False):
        if capacity < 2 or width < 1:
            raise ValueError("ring needs capacity >= 2 and width >= 1")
        self.capacity = int(capacity)
        self.width = int(width)
        self.shm = _shm
        self.owner = _owner
        if _shm is None:
            self.data = np.zeros((self.capacity, self.width), dtype=np.float64)
            # counters live in arrays so compiled code can advance them too
            self._written = np.zeros(1, dtype=np.int64)
        else:
            self._written = np.ndarray((1,), dtype=np.int64, buffer=_shm.buf, offset=0)
            self.data = np.ndarray((self.capacity, self.width), dtype=np.float64,
                                   buffer=_shm.buf, offset=HEADER_BYTES)

    # ---- shared memory -----------------------------------------------------
    @classmethod
    def shared(cls, capacity: int, width: int) -> "FrameRing":
        """A ring in a new shared-memory block (zeroed); its :attr:`name`
        lets another process :meth:`attach`. The creator unlinks it in
        :meth:`close`."""
        size = HEADER_BYTES + int(capacity) * int(width) * 8
        shm = shared_memory.SharedMemory(create=True, size=size)
        shm.buf[:size] = bytes(size)
        return cls(capacity, width, shm, True)

    @classmethod
    def attach(cls, name: str, capacity: int, width: int) -> "FrameRing":
        """Open, for reading, a ring made by :meth:`shared` in another process."""
        return cls(capacity, width, shared_memory.SharedMemory(name=name), False)

    @property
    def name(self) -> str | None:
        """Shared-memory name (None for a private ring)."""
        return None if self.shm is None else self.shm.name

    def spec(self) -> tuple | None:
        """``(name, capacity, width)`` for :meth:`attach`, or None if private."""
        return None if self.shm is None else (self.shm.name, self.capacity, self.width)

    def close(self) -> None:
        """Release the shared memory (the creator also unlinks it). The arrays
        are replaced by private copies so late readers do not fault."""
        shm, self.shm = self.shm, None
        if shm is None:
            return
        self.data = self.data.copy()
        self._written = self._written.copy()
        try:
            shm.close()
        except BufferError:
            pass
        if self.owner:
            try:
                shm.unlink()
            except FileNotFoundError:
                pass

    # ---- writer side (audio thread) ---------------------------------------
    def next_row(self) -> np.ndarray:
        """The row view the writer fills next (audio thread; no allocation
        beyond the view object)."""
        return self.data[self._written[0] % self.capacity]

    def commit(self) -> None:
        """Publish the row filled through :meth:`next_row` (audio thread)."""
        self._written[0] += 1

    def write_row(self, values) -> None:
        """Copy ``values`` into the next row and publish it (audio thread)."""
        self.data[self._written[0] % self.capacity, :] = values
        self._written[0] += 1

    # ---- reader side -------------------------------------------------------
    @property
    def written(self) -> int:
        """Frames written since creation."""
        return int(self._written[0])

    def read_new(self, since: int) -> tuple[np.ndarray, int, int]:
        """Frames written after counter value ``since``.

        Returns ``(frames, new_since, lost)``: a copy of the frames in write
        order, the counter to pass next time, and how many frames were
        overwritten before this reader got to them.
        """
        end = int(self._written[0])
        lost = 0
        # keep one row of margin: the writer may be filling row ``end`` now
        start = since
        if end - start > self.capacity - 1:
            lost = end - (self.capacity - 1) - start
            start = end - (self.capacity - 1)
        if end <= start:
            return np.zeros((0, self.width)), end, lost
        idx = np.arange(start, end) % self.capacity
        out = self.data[idx].copy()
        # a row overwritten during our copy would have index < the counter now
        # minus capacity; drop those (rare: only if the reader stalls)
        now = int(self._written[0])
        stale = max(0, now - self.capacity + 1 - start)
        if stale:
            out = out[stale:]
            lost += stale
        return out, end, lost

    def latest(self) -> np.ndarray | None:
        """A copy of the most recent frame, or None if nothing was written."""
        end = int(self._written[0])
        if end == 0:
            return None
        return self.data[(end - 1) % self.capacity].copy()
