"""Memory layout of the arrays the fits read.

Results must be equal to the last bit wherever a fit runs: in this process, in
a local worker or on a cluster. The rounding of compiled loops and of the
linear-algebra library depends on where an array starts in memory (vector
instructions treat an unaligned head separately), and data that travel to a
Dask worker can arrive at any byte offset. So the arrays that fits share are
always placed on 64-byte boundaries, here and on arrival.
"""

from __future__ import annotations

import numpy as np

ALIGNMENT = 64


def aligned(array, alignment: int = ALIGNMENT):
    """``array`` itself when it starts on an ``alignment``-byte boundary, else an aligned copy.

    The copy keeps the values, dtype and memory order (C or Fortran).
    """
    if array is None:
        return None
    array = np.asarray(array)
    if array.ctypes.data % alignment == 0:
        return array
    order = "F" if array.flags.f_contiguous and not array.flags.c_contiguous else "C"
    out = empty_aligned(array.shape, order, array.dtype, alignment)
    out[...] = array
    return out


def empty_aligned(shape, order="C", dtype=np.float64, alignment: int = ALIGNMENT):
    """An uninitialised array that starts on an ``alignment``-byte boundary."""
    dtype = np.dtype(dtype)
    nbytes = int(np.prod(shape)) * dtype.itemsize
    raw = np.empty(nbytes + alignment, dtype=np.uint8)
    start = -raw.ctypes.data % alignment
    return raw[start:start + nbytes].view(dtype).reshape(shape, order=order)
