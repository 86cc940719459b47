"""Turn a compiled scalar function into an array function of any shape.

The scalar functions of gridstab's thermodynamics are written once, compiled with
numba, and used both inside the column kernels and, through :func:`elementwise`, as
array functions for users. Arithmetic is always float64; the result has the
floating type of the inputs (float32 stays float32).
"""

from __future__ import annotations

import functools

import numba
import numpy as np


def result_dtype(*arrays: np.ndarray) -> np.dtype:
    """Floating type of a result computed from ``arrays``: float32 unless one is float64."""
    return np.result_type(*[a.dtype for a in arrays], np.float32)


def elementwise(scalar_kernel):
    """Wrap a numba-compiled scalar function as a broadcasting array function."""
    ufunc = numba.vectorize(cache=True, nopython=True)(scalar_kernel.py_func)

    @functools.wraps(scalar_kernel.py_func)
    def array_function(*args):
        arrays = [np.asarray(a) for a in args]
        dtype = result_dtype(*arrays)
        result = ufunc(*[a.astype(np.float64, copy=False) for a in arrays])
        return np.asarray(result).astype(dtype, copy=False)[()]

    array_function.scalar_kernel = scalar_kernel
    return array_function
