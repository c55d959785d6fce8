"""The one angle wrap of the planner: every heading difference and output heading goes through it."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["wrap_angle"]

_PI = math.pi
_TWO_PI = 2.0 * math.pi


def wrap_angle(a):
    """Wrap an angle (radians) to [-pi, pi); scalars stay Python floats, arrays stay arrays.

    -pi maps to -pi and +pi maps to -pi, for scalars and arrays alike. The remainder is
    taken first and pi subtracted after, so huge angles (1e17 rad) wrap to the heading
    they stand for instead of losing the half turn to rounding.

    Examples
    --------
    >>> wrap_angle(3 * math.pi / 2)
    -1.5707963267948966
    >>> wrap_angle(math.pi) == wrap_angle(-math.pi) == -math.pi
    True
    """
    if isinstance(a, (float, int)):
        r = float(a) % _TWO_PI  # exact remainder, then one subtraction: no "+ pi" lost to rounding
        return r - _TWO_PI if r >= _PI else r
    if np.ndim(a) == 0:
        return wrap_angle(float(a))
    r = np.mod(np.asarray(a, dtype=float), _TWO_PI)
    return np.where(r >= _PI, r - _TWO_PI, r)
