"""Values at a given mass along the stable branches of many sequences (compiled).

Row k of ``mass``, ``values`` and ``stable`` is one sequence.  Its stable
stars with finite mass and value, sorted by mass (repeated masses keep their
first star), are interpolated at ``target`` by the cubic spline with
not-a-knot end conditions (de Boor 1978, *A Practical Guide to Splines*,
ch. IV; the default of scipy's CubicSpline), or linearly when fewer than
four stars remain.  NaN when the branch does not reach ``target``.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["values_at_mass"]


@njit(cache=True)
def _not_a_knot(x, y, t):
    """The not-a-knot cubic spline through (x, y), x increasing, n >= 4, at t in [x[0], x[-1]]."""
    n = x.size
    h = np.diff(x)
    a = np.zeros((n, n))
    rhs = np.zeros(n)
    # second derivatives s: continuity of the first derivative at the interior knots ...
    for i in range(1, n - 1):
        a[i, i - 1] = h[i - 1]
        a[i, i] = 2.0 * (h[i - 1] + h[i])
        a[i, i + 1] = h[i]
        rhs[i] = 6.0 * ((y[i + 1] - y[i]) / h[i] - (y[i] - y[i - 1]) / h[i - 1])
    # ... and of the third derivative at x[1] and x[n - 2] (not-a-knot)
    a[0, 0], a[0, 1], a[0, 2] = h[1], -(h[0] + h[1]), h[0]
    a[n - 1, n - 3], a[n - 1, n - 2], a[n - 1, n - 1] = h[n - 2], -(h[n - 3] + h[n - 2]), h[n - 3]
    s = np.linalg.solve(a, rhs)
    i = 0
    while i < n - 2 and x[i + 1] < t:
        i += 1
    hi = h[i]
    left, right = x[i + 1] - t, t - x[i]
    return (s[i] * left**3 / (6.0 * hi) + s[i + 1] * right**3 / (6.0 * hi)
            + (y[i] / hi - s[i] * hi / 6.0) * left + (y[i + 1] / hi - s[i + 1] * hi / 6.0) * right)


@njit(cache=True)
def values_at_mass(mass, values, stable, target, cubic, out):
    """``values`` at mass ``target`` along each row's stable branch into ``out`` (see the module docstring)."""
    n_rows, n = mass.shape
    m = np.empty(n)
    v = np.empty(n)
    for k in range(n_rows):
        count = 0
        for j in range(n):
            if stable[k, j] and math.isfinite(mass[k, j]) and math.isfinite(values[k, j]):
                m[count] = mass[k, j]
                v[count] = values[k, j]
                count += 1
        out[k] = math.nan
        if count < 2:
            continue
        order = np.argsort(m[:count], kind="mergesort")
        ms = m[:count][order]
        vs = v[:count][order]
        if not (ms[0] <= target <= ms[count - 1]):
            continue
        if not cubic:
            out[k] = np.interp(target, ms, vs)
            continue
        keep = np.ones(count, dtype=np.bool_)
        for j in range(1, count):
            keep[j] = ms[j] > ms[j - 1]
        ms = ms[keep]
        vs = vs[keep]
        out[k] = np.interp(target, ms, vs) if ms.size < 4 else _not_a_knot(ms, vs, target)
