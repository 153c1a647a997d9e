"""EOS made of consecutive parts of different families in log-enthalpy (crust + core, base + new phase).

A :class:`JoinedEOS` takes part i of its EOS on h_(i-1) < h <= h_i (h_0 = 0,
the last part up to its own h_max).  The parts are single-family EOS
(power-law pieces, exponential-polynomial pieces, ...); their pieces become
the pieces of the whole, with a step edge at every join.  The pressure and
the baryon chemical potential mu = mu_s e^h are continuous at a join by
construction (h is continuous); the energy density may jump there (a
first-order phase transition with a Maxwell construction,
:class:`~.base.InteriorJumps`).

On the solver's hot path every piece carries the coefficients of every
family present (those of the other families set to values that keep their
formulas finite) and a ``form`` index; each family's closed form is
evaluated and the piece's own is selected.  With one family only, that
family's formula is used directly.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .base import EquationOfState, InteriorJumps

__all__ = ["JoinedEOS"]


@dataclass(eq=False)
class JoinedEOS(EquationOfState):
    """Parts of single-family EOS joined at given log-enthalpies.

    Parameters
    ----------
    name, kind : str
        Label and config kind.
    parts : list of EquationOfState
        Single-family EOS (each with ``NEUTRAL_COEFFICIENTS``), in order of
        increasing h; part i is used above ``joins[i - 1]`` and up to
        ``joins[i]``.  Every part computes rho from the same surface
        enthalpy per mass (the first part's).
    joins : list of float
        Log-enthalpies where the next part takes over, ascending, > 0.
    interior_jumps : InteriorJumps or None
        Energy-density jumps, each at a join.
    parameters : dict
        Physical parameters for the run file.
    """

    name: str
    kind: str
    parts: list
    joins: list
    interior_jumps: InteriorJumps | None = None
    parameters: dict = field(default_factory=dict)
    table_sha256: str | None = None

    def __post_init__(self) -> None:
        if len(self.joins) != len(self.parts) - 1 or np.any(np.diff([0.0, *self.joins]) <= 0):
            raise ValueError("joins must be ascending positive log-enthalpies, one fewer than the parts")
        first, last = self.parts[0], self.parts[-1]
        self.surface_energy_density = first.surface_energy_density
        self.surface_enthalpy_per_mass = first.surface_enthalpy_per_mass
        self.density_axis = all(p.density_axis for p in self.parts)
        self.h_max = float(last.h_max)
        forms: list[type] = []
        for p in self.parts:
            if type(p) not in forms:
                forms.append(type(p))
        self.forms = tuple(forms)
        lows = [0.0, *self.joins]
        highs = [*self.joins, np.inf]
        keys: dict[str, float] = {"form": 0.0} if len(forms) > 1 else {}
        for f in forms:
            keys.update(f.NEUTRAL_COEFFICIENTS)
        breaks, tables, ranges = [], {k: [] for k in keys}, []
        for i, (part, lo, hi) in enumerate(zip(self.parts, lows, highs, strict=True)):
            inside = part.breakpoints_h[(part.breakpoints_h > lo) & (part.breakpoints_h < hi)]
            j_lo = int(part.piece_index(np.array([lo]))[0]) if lo > 0 else 0
            local = np.arange(j_lo, j_lo + inside.size + 1)
            own = part.piece_arrays()
            for k in keys:
                if k == "form":
                    tables[k].append(np.full(local.size, float(forms.index(type(part)))))
                elif k in own:
                    tables[k].append(own[k][local])
                else:
                    tables[k].append(np.full(local.size, keys[k]))
            breaks.extend(inside)
            if i < len(self.joins):
                breaks.append(self.joins[i])
            ranges.append((lo, hi))
        self.breakpoints_h = np.array(breaks, dtype=float)
        if np.any(np.diff(self.breakpoints_h) <= 0):
            raise ValueError("joined pieces overlap")
        self._coeff = {k: np.concatenate(v) for k, v in tables.items()}
        if self.interior_jumps is not None and not np.all(np.isin(self.interior_jumps.h, self.joins)):
            raise ValueError("interior jumps must sit at joins")
        self._ranges = ranges
        # pressure and rest-mass density at both ends of every part, for the inversions
        self._ends = {which: (np.array([float(part.state(np.array([lo]))[which][0])
                                        for part, (lo, _) in zip(self.parts, ranges, strict=True)]),
                              np.array([float(part.state(np.array([hi]))[which][0])
                                        for part, (_, hi) in zip(self.parts[:-1], ranges[:-1], strict=True)]
                                       + [np.inf]))
                      for which in (0, 2)}
        self.table_sha256 = self.table_sha256 or next((p.table_sha256 for p in self.parts if p.table_sha256), None)

    # -- solver interface ---------------------------------------------------
    def piece_index(self, h):
        return np.searchsorted(self.breakpoints_h, h, side="left")

    def piece_arrays(self):
        return self._coeff

    def state_from_coefficients(self, h, coeff, expm1_h=None):
        forms = self.forms
        if len(forms) == 1:
            return forms[0].state_from_coefficients(h, coeff, expm1_h)
        em1 = np.expm1(h) if expm1_h is None else expm1_h
        p, eps, rho = forms[0].state_from_coefficients(h, coeff, em1)
        for k, f in enumerate(forms[1:], start=1):
            pk, ek, rk = f.state_from_coefficients(h, coeff, em1)
            sel = coeff["form"] == k
            p, eps, rho = np.where(sel, pk, p), np.where(sel, ek, eps), np.where(sel, rk, rho)
        return p, eps, rho

    def slope_from_coefficients(self, p, eps, coeff, h=None):
        forms = self.forms
        if len(forms) == 1:
            return forms[0].slope_from_coefficients(p, eps, coeff, h)
        out = forms[0].slope_from_coefficients(p, eps, coeff, h)
        for k, f in enumerate(forms[1:], start=1):
            out = np.where(coeff["form"] == k, f.slope_from_coefficients(p, eps, coeff, h), out)
        return out

    # -- set-up: delegate to the part that holds each value ------------------
    def _by_part(self, values, method: str, which: int) -> np.ndarray:
        """h where state()[which] (0: p, 2: rho) equals ``values``, from the part that covers each.

        A value inside the gap of an energy-density jump (rho between its
        two sides) belongs to no equilibrium state: it maps to the join.
        """
        values = np.asarray(values, dtype=float)
        lows = np.array([lo for lo, _ in self._ranges])
        highs = np.array([hi for _, hi in self._ranges])
        bottom, top = self._ends[which]
        i = np.searchsorted(top, values, side="left")
        out = np.empty(values.shape)
        for k, part in enumerate(self.parts):
            mine = i == k
            if not mine.any():
                continue
            h = np.clip(getattr(part, method)(values[mine]), lows[k], highs[k])
            out[mine] = np.where(values[mine] < bottom[k], lows[k], h) if k > 0 else h
        return out

    def enthalpy_of_density(self, rho):
        return self._by_part(rho, "enthalpy_of_density", 2)

    def enthalpy_of_pressure(self, p):
        return self._by_part(p, "enthalpy_of_pressure", 0)

    def sound_speed_squared(self, h):
        h = np.asarray(h, dtype=float)
        out = np.empty(h.shape)
        for part, (lo, hi) in zip(self.parts, self._ranges, strict=True):
            mine = (h > lo) & (h <= hi) if lo > 0 else (h <= hi)
            if mine.any():
                out[mine] = part.sound_speed_squared(h[mine])
        return out

    def max_sound_speed_squared(self, h_top):
        out = 0.0
        for part, (lo, hi) in zip(self.parts, self._ranges, strict=True):
            if lo >= h_top:
                break
            top = min(h_top, hi)
            if lo == 0.0:
                out = max(out, part.max_sound_speed_squared(top))
            else:  # the part's own range only: sample its pieces above lo
                inside = part.breakpoints_h[(part.breakpoints_h > lo) & (part.breakpoints_h < top)]
                edges = np.concatenate([[lo], inside, [top]])
                u = np.linspace(0.0, 1.0, 17)[1:]
                h = (edges[:-1, None] + np.diff(edges)[:, None] * u[None, :]).ravel()
                h = np.concatenate([h, edges[:-1] * (1 + 1e-12) + 1e-300])
                out = max(out, float(np.max(part.sound_speed_squared(h))))
        return out
