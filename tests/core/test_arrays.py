"""Memory placement of shared arrays (see pathfinder.core.arrays)."""

import numpy as np
from hypothesis import given
from hypothesis import strategies as st

from pathfinder.core.arrays import aligned, empty_aligned


@given(offset=st.integers(1, 63), rows=st.integers(1, 30), cols=st.integers(1, 6),
       fortran=st.booleans())
def test_aligned_copy_keeps_values_and_order(offset, rows, cols, fortran):
    buffer = np.zeros(rows * cols * 8 + 128, dtype=np.uint8)
    start = (-buffer.ctypes.data % 64) + offset          # deliberately misaligned
    values = np.arange(rows * cols, dtype=float).reshape(rows, cols)
    order = "F" if fortran else "C"
    misplaced = buffer[start:start + values.nbytes].view(float).reshape(values.shape, order=order)
    misplaced[...] = values
    out = aligned(misplaced)
    assert out.ctypes.data % 64 == 0
    assert np.array_equal(out, values)
    if rows > 1 and cols > 1:
        assert out.flags.f_contiguous == fortran


def test_aligned_arrays_are_returned_as_they_are():
    a = empty_aligned((50, 3), "F")
    assert a.ctypes.data % 64 == 0 and a.flags.f_contiguous
    assert aligned(a) is a
