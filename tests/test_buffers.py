"""Reused output buffers (kernels/buffers.py): a buffer is handed out again only when free."""

from __future__ import annotations

import numpy as np

from luxsweep.kernels import buffers


def test_buffer_in_use_is_not_handed_out_again(monkeypatch):
    monkeypatch.setattr(buffers, "_POOL", [])  # a pool of this test's own
    a = buffers.empty((600, 4000), np.float32)  # 9.6 MB: pooled
    a[:] = 1.0
    view = a[::3]
    del a
    b = buffers.empty((600, 4000), np.float32)
    b[:] = 2.0
    assert np.all(view == 1.0)  # the first buffer is still referenced through the view
    assert view.base is not b.base
    first = id(view.base)
    del view
    c = buffers.empty((500, 4000), np.float32)
    assert id(c.base) == first  # free again: reused (the smaller request fits)
    assert len(buffers._POOL) == 2
    assert c.flags.c_contiguous and c.flags.writeable and c.shape == (500, 4000)


def test_small_arrays_and_dtypes():
    small = buffers.empty((10, 10), np.int32)
    assert small.shape == (10, 10) and small.dtype == np.int32 and small.base is None
    big = buffers.empty((3, 1000, 1000), np.int32)
    assert big.dtype == np.int32 and big.shape == (3, 1000, 1000)
