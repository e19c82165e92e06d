"""The total super-observation error, formed in this one place.

``error = max(floor, sqrt(observation^2 + representation^2))``: the observation part (the
instrument-based or the spread-based error) and the representation error are independent and
add in quadrature; the floor keeps many raw values from claiming more accuracy than the analysis
can use (common practice).
"""

from __future__ import annotations

import numpy as np

from obsprep.superobs.errors import apply_floor, combine_in_quadrature


def total_error(observation, representation, floor) -> tuple[np.ndarray, np.ndarray]:
    """Total 1-sigma error and where the floor set it.

    ``observation``, ``representation`` and ``floor`` (>= 0) are standard deviations in the
    units of the value, broadcast against each other.  Returns ``(error, floored)``: the total
    error (same units; NaN where the observation part is NaN) and a boolean array, True where
    the floor exceeds sqrt(observation^2 + representation^2).
    """
    unfloored = combine_in_quadrature(observation, representation)
    return apply_floor(unfloored, floor), np.asarray(floor) > unfloored


__all__ = ["total_error"]
