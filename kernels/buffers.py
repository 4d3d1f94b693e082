"""Reusable output buffers for the large per-chunk arrays of the series stage.

The engine folds a year in time blocks; every block asks the kernels for new
arrays of tens of MB (sky vectors, illuminance). Fresh memory of that size is
mapped page by page on first write, which costs about as much as the
arithmetic that fills it (measured: 2 × 33 MB allocated and filled in 29 ms,
refilled in place in 4 ms). :func:`empty` hands out views of buffers that no
caller references any longer instead.

A buffer is free when nothing but this module refers to it: every array
handed out is a view whose ``base`` is the buffer, so while any such view (or
a view of it) is alive the buffer's reference count stays above the pool's
own. The check and the claim happen under one lock. At most
:data:`MAX_BUFFERS` buffers are kept (the largest recently used); the memory
is the same the arrays would occupy anyway, but it stays mapped between
blocks.
"""

from __future__ import annotations

import sys
import threading

import numpy as np

__all__ = ["MAX_BUFFERS", "empty"]

MAX_BUFFERS = 6
"""Buffers kept for reuse (a series block holds at most five large arrays at once)."""

_POOL: list[np.ndarray] = []
_LOCK = threading.Lock()
_MIN_BYTES = 4 * 2**20  # smaller arrays come from the allocator's own free lists


def _free(i: int) -> bool:
    """Whether pool entry ``i`` is referenced by nothing but the pool."""
    # the two references: the pool's list entry and getrefcount's own argument
    return sys.getrefcount(_POOL[i]) == 2


def empty(shape: tuple[int, ...], dtype: type = np.float32) -> np.ndarray:
    """Like :func:`numpy.empty` (C order, uninitialised), reusing unreferenced buffers.

    Parameters
    ----------
    shape : tuple of int
    dtype : numpy dtype

    Returns
    -------
    ndarray
        Writable, C-contiguous; a view of a pooled buffer when at least 4 MiB.
    """
    dtype = np.dtype(dtype)
    nbytes = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
    if nbytes < _MIN_BYTES:
        return np.empty(shape, dtype)
    with _LOCK:
        fits = [i for i in range(len(_POOL)) if _POOL[i].nbytes >= nbytes and _free(i)]
        if fits:
            i = min(fits, key=lambda j: _POOL[j].nbytes)
        else:
            # twice the size: later blocks may be longer, and pages never written
            # are never mapped, so the spare half costs address space only
            buffer = np.empty(2 * nbytes, dtype=np.uint8)
            free = [j for j in range(len(_POOL)) if _free(j)]
            if len(_POOL) < MAX_BUFFERS:
                _POOL.append(buffer)
                i = len(_POOL) - 1
            elif free:
                i = min(free, key=lambda j: _POOL[j].nbytes)
                _POOL[i] = buffer
            else:
                return np.empty(shape, dtype)
            del buffer
        return _POOL[i][:nbytes].view(dtype).reshape(shape)
