"""Reusable result buffers for the auto backend's blocks.

A fresh NumPy array of a block's size (64 Ki rows of 8 bytes: 512 KiB) is above glibc's mmap
threshold, and the memory a block frees is handed back to the kernel when it ends, so every
block page-faulted all its intermediates in again: on this machine that made the float64 ->
int64 cast kernel about four times slower than its arithmetic (bench/bench_auto.py).

Each thread that evaluates blocks of one call keeps the 8-byte buffers it used and hands them
out again for the next block, in the same order. A buffer is only valid inside the block that
took it: the backend copies a block's result out before the next one starts, and the buffers
are dropped when the call ends, so nothing is kept between calls.
"""

from __future__ import annotations

import threading
from contextlib import contextmanager
from typing import Iterator

import numpy as np

_CURRENT = threading.local()  # .scratch: the Scratch of the block this thread runs, if any


class Scratch:
    """One thread's buffers for one call: handed out in order, reused block after block."""

    def __init__(self) -> None:
        self.buffers: list[np.ndarray] = []
        self.used = 0

    def take(self, dtype: np.dtype, length: int) -> np.ndarray:
        if self.used == len(self.buffers) or len(self.buffers[self.used]) < length * 8:
            buffer = np.empty(length * 8, dtype=np.uint8)
            if self.used == len(self.buffers):
                self.buffers.append(buffer)
            else:
                self.buffers[self.used] = buffer
        raw = self.buffers[self.used]
        self.used += 1
        return raw[: length * 8].view(dtype)


class ScratchSet:
    """The scratches of one call, one per thread; :meth:`close` drops every buffer."""

    def __init__(self) -> None:
        self._by_thread: dict[int, Scratch] = {}
        self._lock = threading.Lock()

    @contextmanager
    def block(self) -> Iterator[None]:
        """While a block runs on this thread, :func:`empty` hands out this thread's buffers."""
        ident = threading.get_ident()
        with self._lock:
            scratch = self._by_thread.setdefault(ident, Scratch())
        scratch.used = 0
        _CURRENT.scratch = scratch
        try:
            yield
        finally:
            _CURRENT.scratch = None

    def close(self) -> None:
        with self._lock:
            self._by_thread.clear()


def empty(dtype: np.dtype | type, length: int) -> np.ndarray:
    """An uninitialised array of ``length`` 8-byte values: from the running block's scratch,
    or a new array outside a block."""
    scratch: Scratch | None = getattr(_CURRENT, "scratch", None)
    dtype = np.dtype(dtype)
    if scratch is None or dtype.itemsize != 8:
        return np.empty(length, dtype)
    return scratch.take(dtype, length)
