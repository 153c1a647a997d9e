"""One EOS piece in compiled form: (p, eps, rho, d eps/dh) at a log-enthalpy from a coefficient row.

Every EOS family lowers itself (:mod:`stellar_match.eos.lowering`) to rows of
``N_COEFFICIENTS`` numbers, one row per piece, and a piece-type code per row.
The formulas are those of the families' own Python evaluators, which stay the
readable reference (the tests compare the two at random points):

* ``POWER``: a polytropic piece p = K rho^Gamma with the energy density of
  Read et al. (2009, PRD 79, 124032, eqs. 3-7), in h (see ``eos/pieces.py``);
  row (K, c1, 1/(Gamma-1), 1 + a, a_0 - a, mu_s, Gamma).
* ``EXP_POLY``: p = A + exp(P(h - h_j)), P a quintic (``eos/smooth.py``);
  row (h_j, A, q0 .. q5, 1/mu_s).
* ``SMOOTH``: p = exp(P(t)), t = ln((mu - m_j)/(mu_j - m_j)) (``eos/smooth.py``);
  row (e^-h_j, B, q0 .. q5, 1/mu_s).
* ``ELECTRON``: the degenerate electron gas of Chandrasekhar (1935) with
  Salpeter's (1961) lattice term (``eos/electrons.py``);
  row (K_rho, K_P, R, C_Z, a_C, G_0, R mu_s).
* ``INCOMPRESSIBLE``: constant energy density (Schwarzschild 1916); row (eps_0,).

Geometric units (km^-2).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["POWER", "EXP_POLY", "SMOOTH", "ELECTRON", "INCOMPRESSIBLE", "N_COEFFICIENTS", "PIECE_TYPES",
           "piece_state", "pressure_integral"]

POWER = 0
EXP_POLY = 1
SMOOTH = 2
ELECTRON = 3
INCOMPRESSIBLE = 4
#: Names of the piece types, by code (for messages and reprs).
PIECE_TYPES = ("power", "exp_poly", "smooth", "electron", "incompressible")
#: Width of a coefficient row (the widest piece type, EXP_POLY and SMOOTH, uses all of it).
N_COEFFICIENTS = 9

#: Below this Fermi momentum x the pressure integral f(x) is summed as a series: the closed form
#: loses about 3 digits there (the same switch as eos/electrons.py).
ELECTRON_SERIES_BELOW = 0.2
# f(x) = (1/(3 pi^2)) sum_k binom(-1/2, k) x^(2k+5)/(2k+5); 13 terms reach 1e-18 of the first at x = 0.2
_BINOM = np.array([np.prod([(-0.5 - i) / (i + 1) for i in range(k)]) for k in range(13)])
ELECTRON_SERIES = _BINOM / (2 * np.arange(13) + 5) / (3 * np.pi**2)


@njit(cache=True)
def pressure_integral(x: float) -> float:
    """f(x) = (1/(3 pi^2)) int_0^x t^4/sqrt(1 + t^2) dt (Chandrasekhar 1939, ch. X)."""
    if x < ELECTRON_SERIES_BELOW:
        z = x * x
        s = 0.0
        for k in range(ELECTRON_SERIES.size - 1, -1, -1):
            s = s * z + ELECTRON_SERIES[k]
        return s * x**5
    return (x * (2.0 * x * x / 3.0 - 1.0) * math.sqrt(1.0 + x * x) + math.asinh(x)) / (8.0 * math.pi**2)


@njit(cache=True)
def _quintic(c, t):
    """(P, P', P'') of P(t) = c[2] + c[3] t + ... + c[7] t^5 (row entries 2..7)."""
    c0, c1, c2, c3, c4, c5 = c[2], c[3], c[4], c[5], c[6], c[7]
    big_p = ((((c5 * t + c4) * t + c3) * t + c2) * t + c1) * t + c0
    dp = (((5.0 * c5 * t + 4.0 * c4) * t + 3.0 * c3) * t + 2.0 * c2) * t + c1
    ddp = ((20.0 * c5 * t + 12.0 * c4) * t + 6.0 * c3) * t + 2.0 * c2
    return big_p, dp, ddp


@njit(cache=True)
def piece_state(kind: int, c, h: float, em1: float):
    """(p, eps, rho, d eps/dh) of a piece of type ``kind`` with coefficient row ``c`` at ``h``.

    ``em1`` is expm1(h), shared with the caller.  Outside a piece's range the
    values may be NaN (a negative base of a fractional power); the solver
    never asks there.
    """
    if kind == POWER:
        q = c[1] * (c[5] * em1 + c[4])
        rho = q ** c[2]
        p = c[0] * rho * q
        eps = c[3] * rho + p * c[2]
        # c_s^2 = Gamma p / (eps + p); at p = 0 the limit of (eps + p)^2 / (Gamma p) is 0 for Gamma < 2
        slope = (eps + p) * (eps + p) / (c[6] * p) if p > 0.0 else 0.0
        return p, eps, rho, slope
    if kind == EXP_POLY:
        big_p, dp, ddp = _quintic(c, h - c[0])
        e = math.exp(big_p)
        w = dp * e  # eps + p = dp/dh
        p = c[1] + e
        return p, w - p, w * c[8] / (1.0 + em1), (ddp + dp * dp - dp) * e
    if kind == SMOOTH:
        x = (1.0 + em1) * c[0] - 1.0  # e^(h - h_j) - 1
        bx = c[1] * x
        t = math.log1p(bx)
        d = c[1] * (1.0 + x) / (1.0 + bx)
        big_p, dp, ddp = _quintic(c, t)
        p = math.exp(big_p)
        w = dp * d * p
        return p, w - p, w * c[8] / (1.0 + em1), d * d * (ddp + dp * dp - dp) * p
    if kind == ELECTRON:
        g = c[5] + c[6] * em1  # gamma - 1 - C_Z x
        cz = c[3]
        x = ((1.0 + g) * cz + math.sqrt(max(g * (g + 2.0) + cz * cz, 0.0))) / (1.0 - cz * cz)
        gamma = 1.0 + g + cz * x
        mu = 1.0 + g / c[2]
        rho = c[0] * x**3
        p = c[1] * (pressure_integral(x) - c[4] * x**4)
        slope = 3.0 * c[2] * c[0] * x * x * mu * mu / (x / gamma - cz)
        return p, rho * mu - p, rho, slope
    # INCOMPRESSIBLE
    return c[0] * em1, c[0], c[0], 0.0
