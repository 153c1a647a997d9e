"""Values at a given mass along the stable branches of many sequences (compiled).

Row k of ``mass``, ``values`` and ``stable`` is one sequence.  Its stable
stars with finite mass and value, sorted by mass (a repeated mass keeps one
of its stars), are interpolated at ``target`` by the cubic spline with
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
def _tridiagonal_solve(sub, diag, sup, rhs):
    """Solve a tridiagonal system by Gaussian elimination with partial pivoting (LAPACK's gtsv scheme).

    ``sub[i]`` is the entry (i + 1, i), ``sup[i]`` the entry (i, i + 1); the inputs are overwritten.
    """
    n = diag.size
    fill = np.zeros(n)  # the second superdiagonal that row swaps create
    for i in range(n - 1):
        if abs(diag[i]) >= abs(sub[i]):  # no swap
            f = sub[i] / diag[i]
            diag[i + 1] -= f * sup[i]
            rhs[i + 1] -= f * rhs[i]
        else:  # swap rows i and i + 1
            f = diag[i] / sub[i]
            diag[i] = sub[i]
            t = diag[i + 1]
            diag[i + 1] = sup[i] - f * t
            sup[i] = t
            if i < n - 2:
                fill[i] = sup[i + 1]
                sup[i + 1] = -f * fill[i]
            t = rhs[i]
            rhs[i] = rhs[i + 1]
            rhs[i + 1] = t - f * rhs[i + 1]
    x = np.empty(n)
    x[n - 1] = rhs[n - 1] / diag[n - 1]
    if n > 1:
        x[n - 2] = (rhs[n - 2] - sup[n - 2] * x[n - 1]) / diag[n - 2]
    for i in range(n - 3, -1, -1):
        x[i] = (rhs[i] - sup[i] * x[i + 1] - fill[i] * x[i + 2]) / diag[i]
    return x


@njit(cache=True)
def _not_a_knot(x, y, t):
    """The not-a-knot cubic spline through (x, y), x increasing, n >= 4, at t in [x[0], x[-1]].

    Second derivatives s_i from the continuity of the first derivative at the interior knots, with
    s_0 and s_{n-1} eliminated by the continuity of the third derivative at x_1 and x_{n-2}: a
    tridiagonal system in s_1 .. s_{n-2}.
    """
    n = x.size
    h = np.empty(n - 1)
    for i in range(n - 1):
        h[i] = x[i + 1] - x[i]
    m = n - 2
    sub = np.empty(m)
    diag = np.empty(m)
    sup = np.empty(m)
    rhs = np.empty(m)
    for i in range(1, n - 1):
        k = i - 1
        diag[k] = 2.0 * (h[i - 1] + h[i])
        if k > 0:
            sub[k - 1] = h[i - 1]
        if k < m - 1:
            sup[k] = h[i]
        rhs[k] = 6.0 * ((y[i + 1] - y[i]) / h[i] - (y[i] - y[i - 1]) / h[i - 1])
    # s_0 = ((h0 + h1) s_1 - h0 s_2) / h1 into the first row ...
    h0, h1 = h[0], h[1]
    diag[0] += h0 * (h0 + h1) / h1
    if m > 1:
        sup[0] -= h0 * h0 / h1
    # ... and s_{n-1} = ((h_{n-3} + h_{n-2}) s_{n-2} - h_{n-2} s_{n-3}) / h_{n-3} into the last
    ha, hb = h[n - 3], h[n - 2]
    diag[m - 1] += hb * (ha + hb) / ha
    if m > 1:
        sub[m - 2] -= hb * hb / ha
    inner = _tridiagonal_solve(sub, diag, sup, rhs)
    s = np.empty(n)
    for i in range(m):
        s[i + 1] = inner[i]
    s[0] = ((h0 + h1) * s[1] - h0 * s[2]) / h1
    s[n - 1] = ((ha + hb) * s[n - 2] - hb * s[n - 3]) / ha
    i = 0
    while i < n - 2 and x[i + 1] < t:
        i += 1
    hi = h[i]
    left, right = x[i + 1] - t, t - x[i]
    return (s[i] * left * left * left / (6.0 * hi) + s[i + 1] * right * right * right / (6.0 * hi)
            + (y[i] / hi - s[i] * hi / 6.0) * left + (y[i + 1] / hi - s[i + 1] * hi / 6.0) * right)


@njit(cache=True)
def _linear(x, y, n, t):
    """Linear interpolation at t in [x[0], x[n - 1]] through the first n points, x non-decreasing."""
    i = 0
    while i < n - 2 and x[i + 1] < t:
        i += 1
    if x[i + 1] == x[i]:
        return y[i]
    return y[i] + (y[i + 1] - y[i]) * (t - x[i]) / (x[i + 1] - x[i])


@njit(cache=True)
def values_at_mass(mass, values, stable, target, cubic, out):
    """``values`` at mass ``target`` along each row's stable branch into ``out`` (see the module docstring)."""
    n_rows, n = mass.shape
    m = np.empty(n)
    v = np.empty(n)
    ms = np.empty(n)
    vs = np.empty(n)
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
        order = np.argsort(m[:count])
        kept = 0
        for j in range(count):  # sorted by mass; a repeated mass keeps one star
            if kept == 0 or m[order[j]] > ms[kept - 1]:
                ms[kept] = m[order[j]]
                vs[kept] = v[order[j]]
                kept += 1
        if not (ms[0] <= target <= ms[kept - 1]) or kept < 2:
            continue
        if not cubic or kept < 4:
            out[k] = _linear(ms, vs, kept, target)
        else:
            out[k] = _not_a_knot(ms[:kept], vs[:kept], target)
