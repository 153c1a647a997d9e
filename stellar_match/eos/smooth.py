"""Pieces p = A + exp(P(h)) with P a polynomial in the log-enthalpy: constant sound speed and smooth EOS.

Any pressure given as a function of the log-enthalpy h is a complete,
thermodynamically consistent zero-temperature EOS: with mu = mu_s e^h the
enthalpy per rest mass, the first law dp = n dmu gives

    eps + p = dp/dh,    rho = (eps + p) e^(-h) / mu_s,    c_s^2 = (dp/dh) / (d^2 p/dh^2 - dp/dh),

so d eps/d n = (eps + p)/n holds exactly, whatever p(h) is.  Here each piece
j has p = A_j + exp(P_j(t)), t = h - h_j, with P_j of degree <= 5:

* a **constant sound speed** c_s^2 = s is exact with P linear:
  eps + p = w_0 exp((1 + s)(h - h_0)/s) and p = p_0 + s (eps + p - w_0)/(1 + s),
  i.e. A = p_0 - s w_0/(1 + s), P(t) = ln(s w_0/(1 + s)) + (1 + s) t / s
  (the quark-matter and transition phases of :mod:`.quark` and :mod:`.transition`);
* a **smooth EOS** known at knots (the spectral and sound-speed kinds) is
  represented by quintic Hermite pieces of ln p matching ln p, d ln p/dh =
  (eps + p)/p and d^2 ln p/dh^2 = ((eps + p)/p)(1/c_s^2 + 1 - (eps + p)/p)
  at both ends of each piece: p, eps, rho and c_s^2 are continuous at the
  knots and exact there, and the pieces deviate from the EOS they represent
  by O(dh^6) in between (measured in tests/test_eos_families.py).

Geometric units (km^-2) throughout.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..kernels import eos_pieces
from .base import EquationOfState

__all__ = ["ExpPolynomialPieces", "SmoothPieces", "constant_sound_speed_coefficients",
           "quintic_hermite_coefficients", "DEGREE"]

#: Highest power of t in a piece's P(t).
DEGREE = 5


def constant_sound_speed_coefficients(p0: float, w0: float, s: float) -> tuple[float, np.ndarray]:
    """(A, c) of a constant-c_s^2 piece through p = p0, eps + p = w0 at t = 0 (see module notes)."""
    c = np.zeros(DEGREE + 1)
    c[0] = np.log(s * w0 / (1.0 + s))
    c[1] = (1.0 + s) / s
    return p0 - s * w0 / (1.0 + s), c


def log_pressure_derivatives(p, eps, cs2):
    """(ln p, d ln p/dh, d^2 ln p/dh^2) from p, eps and c_s^2 (for A = 0 pieces)."""
    p, eps, cs2 = (np.asarray(x, dtype=float) for x in (p, eps, cs2))
    d1 = (eps + p) / p
    return np.log(p), d1, d1 * (1.0 / cs2 + 1.0 - d1)


def quintic_hermite_coefficients(dt: np.ndarray, left: tuple, right: tuple) -> np.ndarray:
    """Coefficients c_0..c_5 (shape (n, 6)) of quintics through (value, slope, curvature) at t = 0 and t = dt.

    Parameters
    ----------
    dt : ndarray, shape (n,)
        Piece widths.
    left, right : tuple of three ndarrays, shape (n,)
        (f, f', f'') at the start and the end of each piece.
    """
    f0, d0, s0 = left
    f1, d1, s1 = right
    c0, c1, c2 = f0, d0, 0.5 * s0
    # remaining cubic part r(t) = c3 t^3 + c4 t^4 + c5 t^5 fixes the right end
    a = f1 - (c0 + c1 * dt + c2 * dt**2)
    b = d1 - (c1 + 2.0 * c2 * dt)
    g = s1 - 2.0 * c2
    c3 = (10.0 * a - 4.0 * b * dt + 0.5 * g * dt**2) / dt**3
    c4 = (-15.0 * a + 7.0 * b * dt - g * dt**2) / dt**4
    c5 = (6.0 * a - 3.0 * b * dt + 0.5 * g * dt**2) / dt**5
    return np.stack([c0, c1, c2, c3, c4, c5], axis=-1)


@dataclass(eq=False)
class ExpPolynomialPieces(EquationOfState):
    """Pieces p = A_j + exp(P_j(h - h_j)), deg P_j <= 5, from h = h_0 up.

    Parameters
    ----------
    name, kind : str
        Label and config kind.
    lower_h : ndarray, shape (n,)
        Log-enthalpy where each piece starts, ascending, the first 0 (the
        surface) unless the pieces continue another EOS (:mod:`.joined`).
    offset : ndarray, shape (n,)
        A_j (km^-2).
    coefficients : ndarray, shape (n, 6)
        c_0 .. c_5 of P_j(t) = sum_k c_k t^k.
    surface_enthalpy_per_mass : float
        mu_s: (eps + p)/rho at h = 0, which fixes the rest-mass density
        rho = (eps + p) e^(-h) / mu_s.
    h_max : float
        Top of the last piece (inf if it is valid for all h).
    parameters : dict
        Physical parameters for the run file.
    """

    #: How the family lowers to the compiled solver (eos/lowering.py): its piece type and row order.
    PIECE_TYPE = eos_pieces.EXP_POLY
    LOWERED_COEFFICIENTS = ("t0", "A", "q0", "q1", "q2", "q3", "q4", "q5", "inv_mu_s")

    #: Coefficients that keep the formula finite on pieces of other families (see :mod:`.joined`).
    NEUTRAL_COEFFICIENTS = {"t0": 0.0, "A": 0.0, "q0": 0.0, "q1": 1.0, "q2": 0.0, "q3": 0.0, "q4": 0.0, "q5": 0.0,
                            "inv_mu_s": 1.0}

    _closed_form_inversion = True

    name: str
    kind: str
    lower_h: np.ndarray
    offset: np.ndarray
    coefficients: np.ndarray
    surface_enthalpy_per_mass: float
    h_max: float = np.inf
    parameters: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.lower_h = np.asarray(self.lower_h, dtype=float)
        self.offset = np.asarray(self.offset, dtype=float)
        self.coefficients = np.asarray(self.coefficients, dtype=float).reshape(self.lower_h.size, DEGREE + 1)
        if np.any(np.diff(self.lower_h) <= 0):
            raise ValueError("pieces must start at increasing log-enthalpies")
        self.breakpoints_h = self.lower_h[1:]
        c = self.coefficients
        # key names distinct from those of the other families (JoinedEOS keeps them in one table)
        self._coeff = {"t0": self.lower_h, "A": self.offset, **{f"q{k}": c[:, k] for k in range(DEGREE + 1)},
                       "inv_mu_s": np.full(self.lower_h.size, 1.0 / self.surface_enthalpy_per_mass)}

    # -- solver interface ---------------------------------------------------
    def piece_index(self, h):
        return np.searchsorted(self.breakpoints_h, h, side="left")

    def piece_arrays(self):
        return self._coeff

    @staticmethod
    def state_from_coefficients(h, coeff, expm1_h=None):
        t = h - coeff["t0"]
        c1, c2, c3, c4, c5 = coeff["q1"], coeff["q2"], coeff["q3"], coeff["q4"], coeff["q5"]
        big_p = ((((c5 * t + c4) * t + c3) * t + c2) * t + c1) * t + coeff["q0"]
        dp = (((5.0 * c5 * t + 4.0 * c4) * t + 3.0 * c3) * t + 2.0 * c2) * t + c1
        e = np.exp(big_p)
        p = coeff["A"] + e
        w = dp * e  # eps + p = dp/dh
        em1 = np.expm1(h) if expm1_h is None else expm1_h
        return p, w - p, w * coeff["inv_mu_s"] / (1.0 + em1)

    @staticmethod
    def slope_from_coefficients(p, eps, coeff, h=None):
        # d eps/dh = d^2 p/dh^2 - dp/dh = (P'' + P'^2 - P') e^P
        t = h - coeff["t0"]
        c1, c2, c3, c4, c5 = coeff["q1"], coeff["q2"], coeff["q3"], coeff["q4"], coeff["q5"]
        dp = (((5.0 * c5 * t + 4.0 * c4) * t + 3.0 * c3) * t + 2.0 * c2) * t + c1
        ddp = ((20.0 * c5 * t + 12.0 * c4) * t + 6.0 * c3) * t + 2.0 * c2
        return (ddp + dp * dp - dp) * (p - coeff["A"])

    def sound_speed_squared(self, h):
        # c_s^2 = P' / (P'' + P'^2 - P') = 1 / (P' - 1 + P''/P'): exactly s on a constant-sound-speed piece
        h = np.asarray(h, dtype=float)
        coeff = self.coefficients_at(h)
        t = h - coeff["t0"]
        c1, c2, c3, c4, c5 = coeff["q1"], coeff["q2"], coeff["q3"], coeff["q4"], coeff["q5"]
        dp = (((5.0 * c5 * t + 4.0 * c4) * t + 3.0 * c3) * t + 2.0 * c2) * t + c1
        ddp = ((20.0 * c5 * t + 12.0 * c4) * t + 6.0 * c3) * t + 2.0 * c2
        return 1.0 / (dp - 1.0 + ddp / dp)

    # -- inversions (set-up and references: closed form or safeguarded Newton in the piece) --
    def _invert(self, target, which: int) -> np.ndarray:
        """h where state()[which] equals ``target`` (p: 0, rho: 2), both increasing in h.

        A linear P (constant sound speed) inverts in closed form; otherwise
        Newton steps with d p/dh = eps + p and d ln rho/dh = 1/c_s^2, kept
        inside the piece's bracket by bisection.  Below the first piece: its start.
        """
        target = np.atleast_1d(np.asarray(target, dtype=float))
        starts = self.state(self.lower_h)[which]
        j = np.clip(np.searchsorted(starts, target, side="right") - 1, 0, None)
        coeff = {k: v[j] for k, v in self._coeff.items()}
        lo = self.lower_h[j]
        hi = np.append(self.lower_h[1:], np.inf)[j]
        linear = np.zeros(target.shape, dtype=bool)
        t_lin = np.zeros(target.shape)
        if self._closed_form_inversion:
            linear = np.all([coeff[f"q{k}"] == 0 for k in range(2, DEGREE + 1)], axis=0)
            with np.errstate(all="ignore"):
                if which == 0:
                    t_lin = (np.log(target - coeff["A"]) - coeff["q0"]) / coeff["q1"]
                else:
                    t_lin = (np.log(target / (coeff["inv_mu_s"] * coeff["q1"])) - coeff["q0"] + lo) \
                        / (coeff["q1"] - 1.0)
        h = np.where(linear, lo + t_lin, np.where(np.isfinite(hi), 0.5 * (lo + hi), lo + 0.1))
        todo = ~linear
        bracket_lo, bracket_hi = lo.copy(), np.where(np.isfinite(hi), hi, np.inf)
        for _ in range(100):
            if not todo.any():
                break
            idx = np.flatnonzero(todo)
            hh = h[idx]
            c = {k: v[idx] for k, v in coeff.items()}
            p, eps, rho = self.state_from_coefficients(hh, c)
            value = (p, eps, rho)[which]
            below = value < target[idx]
            bracket_lo[idx] = np.where(below, hh, bracket_lo[idx])
            bracket_hi[idx] = np.where(below, bracket_hi[idx], hh)
            if which == 0:
                step = (target[idx] - p) / (eps + p)
            else:
                cs2 = (eps + p) / self.slope_from_coefficients(p, eps, c, hh)
                step = np.log(target[idx] / rho) * cs2
            new = hh + step
            outside = ~((new > bracket_lo[idx]) & (new < bracket_hi[idx]))
            finite_hi = np.isfinite(bracket_hi[idx])
            new = np.where(outside, np.where(finite_hi, 0.5 * (bracket_lo[idx] + bracket_hi[idx]),
                                             2.0 * hh - bracket_lo[idx] + 1e-3), new)
            h[idx] = new
            done = np.abs(new - hh) <= 4e-16 * np.abs(new) + 1e-300
            todo[idx[done]] = False
        return np.where(target <= starts[0], self.lower_h[0], h).reshape(np.shape(target))

    def enthalpy_of_density(self, rho):
        with np.errstate(all="ignore"):  # trial steps may leave the piece; the bracket brings them back
            return self._invert(rho, 2)

    def enthalpy_of_pressure(self, p):
        with np.errstate(all="ignore"):
            return self._invert(p, 0)

    def max_sound_speed_squared(self, h_top):
        # c_s^2 is smooth inside each piece: sample densely (16 points per piece) and at the ends
        inside = self.lower_h[self.lower_h < h_top]
        ends = np.append(inside[1:], h_top)
        u = np.linspace(0.0, 1.0, 17)
        h = (inside[:, None] + (ends - inside)[:, None] * u[None, :]).ravel()
        h = h[h > 0]
        return float(np.max(self.sound_speed_squared(h))) if h.size else 0.0


@dataclass(eq=False)
class SmoothPieces(ExpPolynomialPieces):
    """Pieces p = exp(P_j(t)) with t = ln((mu - m_j)/(mu_j - m_j)): smooth EOS known at knots.

    mu = mu_s e^h is the enthalpy per rest mass and mu_j its value at the start h_j of piece j.
    Inside a polytropic piece mu - (1 + a) is proportional to rho^(Gamma - 1) and ln p is exactly
    linear in ln(mu - (1 + a)) (Read et al. 2009, eqs. 3-7), so with the shift m_j taken from the
    local adiabatic index Gamma_j = c_s^2 (eps + p)/p at the piece's start,

        m_j = mu_j - Gamma_j/(Gamma_j - 1) p_j/rho_j   (0 if Gamma_j <= 1.05),

    P_j(t) is nearly linear wherever Gamma varies slowly, and quintic Hermite pieces in t (matching
    ln p and its first two derivatives at both knots) are some 100 times more accurate than in h
    for the same knots (measured for the sound-speed kind).  With t = log1p(B (e^(h - h_j) - 1)),
    B = mu_j/(mu_j - m_j), and D = dt/dh = mu/(mu - m_j):

        eps + p = P_t D e^P,    d eps/dh = D^2 (P_tt + P_t^2 - P_t) e^P,
        c_s^2 = P_t / (D (P_tt + P_t^2 - P_t)),    rho = (eps + p) e^(-h) / mu_s.

    Parameters are those of :class:`ExpPolynomialPieces` (``offset`` all zero) plus ``shift`` m_j;
    build them with :meth:`from_knots`.
    """

    PIECE_TYPE = eos_pieces.SMOOTH
    LOWERED_COEFFICIENTS = ("E0", "B", "q0", "q1", "q2", "q3", "q4", "q5", "inv_mu_s")

    NEUTRAL_COEFFICIENTS = {"E0": 1.0, "B": 1.0, "q0": 0.0, "q1": 1.0, "q2": 0.0, "q3": 0.0, "q4": 0.0, "q5": 0.0,
                            "inv_mu_s": 1.0}
    _closed_form_inversion = False

    shift: np.ndarray = None

    def __post_init__(self) -> None:
        super().__post_init__()
        mu_j = self.surface_enthalpy_per_mass * np.exp(self.lower_h)
        B = mu_j / (mu_j - np.asarray(self.shift, dtype=float))
        c = self.coefficients
        self._coeff = {"E0": np.exp(-self.lower_h), "B": B, **{f"q{k}": c[:, k] for k in range(DEGREE + 1)},
                       "inv_mu_s": np.full(self.lower_h.size, 1.0 / self.surface_enthalpy_per_mass)}

    @classmethod
    def from_knots(cls, name: str, kind: str, h, p, eps, cs2, surface_enthalpy_per_mass: float,
                   h_max: float) -> SmoothPieces:
        """Pieces through knots (h, p, eps, c_s^2), ascending in h (geometric units); the last knot ends them."""
        h, p, eps, cs2 = (np.asarray(a, dtype=float) for a in (h, p, eps, cs2))
        w = eps + p
        mu = surface_enthalpy_per_mass * np.exp(h)
        rho = w / mu
        gamma = cs2 * w / p
        with np.errstate(divide="ignore", invalid="ignore"):
            m = np.where(gamma > 1.05, mu - gamma / (gamma - 1.0) * p / rho, 0.0)[:-1]
        B = mu[:-1] / (mu[:-1] - m)
        width = np.log1p(B * np.expm1(np.diff(h)))
        lnp, p_h, p_hh = log_pressure_derivatives(p, eps, cs2)

        def in_t(d_h, dd_h, D):
            p_t = d_h / D
            return p_t, (dd_h - p_t * D * (1.0 - D)) / D**2

        d0, d1 = B, mu[1:] / (mu[1:] - m)
        left = (lnp[:-1], *in_t(p_h[:-1], p_hh[:-1], d0))
        right = (lnp[1:], *in_t(p_h[1:], p_hh[1:], d1))
        coefficients = quintic_hermite_coefficients(width, left, right)
        return cls(name=name, kind=kind, lower_h=h[:-1], offset=np.zeros(h.size - 1), coefficients=coefficients,
                   surface_enthalpy_per_mass=surface_enthalpy_per_mass, h_max=h_max, shift=m)

    @staticmethod
    def _t_and_d(h, coeff, em1):
        x = (1.0 + em1) * coeff["E0"] - 1.0  # e^(h - h_j) - 1; its absolute error is what matters
        bx = coeff["B"] * x
        return np.log1p(bx), coeff["B"] * (1.0 + x) / (1.0 + bx)

    @staticmethod
    def _polynomial(t, coeff):
        c1, c2, c3, c4, c5 = coeff["q1"], coeff["q2"], coeff["q3"], coeff["q4"], coeff["q5"]
        big_p = ((((c5 * t + c4) * t + c3) * t + c2) * t + c1) * t + coeff["q0"]
        dp = (((5.0 * c5 * t + 4.0 * c4) * t + 3.0 * c3) * t + 2.0 * c2) * t + c1
        ddp = ((20.0 * c5 * t + 12.0 * c4) * t + 6.0 * c3) * t + 2.0 * c2
        return big_p, dp, ddp

    @staticmethod
    def state_from_coefficients(h, coeff, expm1_h=None):
        em1 = np.expm1(h) if expm1_h is None else expm1_h
        t, D = SmoothPieces._t_and_d(h, coeff, em1)
        big_p, dp, _ = SmoothPieces._polynomial(t, coeff)
        p = np.exp(big_p)
        w = dp * D * p
        return p, w - p, w * coeff["inv_mu_s"] / (1.0 + em1)

    @staticmethod
    def slope_from_coefficients(p, eps, coeff, h=None):
        t, D = SmoothPieces._t_and_d(h, coeff, np.expm1(h))
        _, dp, ddp = SmoothPieces._polynomial(t, coeff)
        return D * D * (ddp + dp * dp - dp) * p

    def sound_speed_squared(self, h):
        h = np.asarray(h, dtype=float)
        coeff = self.coefficients_at(h)
        t, D = self._t_and_d(h, coeff, np.expm1(h))
        _, dp, ddp = self._polynomial(t, coeff)
        return dp / (D * (ddp + dp * dp - dp))
