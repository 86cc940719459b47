"""Interpolation within one compacted column (bottom-up, pressure strictly decreasing).

Between levels, temperature, mixing ratio and height vary linearly in ln p (the
project's convention). Compiled, pure functions; ``ln_p`` arrays are decreasing.
"""

from __future__ import annotations

import math

import numba

from gridstab.constants import DRY_AIR_GAS_CONSTANT, STANDARD_GRAVITY


@numba.njit(cache=True, nogil=True)
def bracket(ln_p, count, target):
    """Index k with ln_p[k] >= target >= ln_p[k+1]; -1 below the column, -2 above it."""
    if target > ln_p[0]:
        return -1
    if target < ln_p[count - 1]:
        return -2
    for k in range(count - 1):
        if target >= ln_p[k + 1]:
            return k
    return count - 2


@numba.njit(cache=True, nogil=True)
def linear(ln_p, values, k, target):
    """Value at ln p = ``target`` on the segment between levels k and k+1."""
    fraction = (target - ln_p[k]) / (ln_p[k + 1] - ln_p[k])
    return values[k] + fraction * (values[k + 1] - values[k])


@numba.njit(cache=True, nogil=True)
def value_at(ln_p, values, count, target):
    """Value at ln p = ``target`` anywhere inside the column; NaN outside it."""
    if count == 1:
        return values[0] if target == ln_p[0] else math.nan
    k = bracket(ln_p, count, target)
    if k < 0:
        return math.nan
    return linear(ln_p, values, k, target)


@numba.njit(cache=True, nogil=True)
def height_at(ln_p, height, virtual_temperature, count, target):
    """Height (m) at ln p = ``target``.

    Linear in ln p inside the column; below its lowest level (down to the surface) the
    hypsometric equation with the lowest level's virtual temperature; NaN above it.
    """
    if target > ln_p[0]:
        return height[0] - DRY_AIR_GAS_CONSTANT / STANDARD_GRAVITY * virtual_temperature[0] * (
            target - ln_p[0]
        )
    return value_at(ln_p, height, count, target)
