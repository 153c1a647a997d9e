"""Many EOS of one family solved as one batch (ensembles).

Ensembles solve the stars of many members together: every star carries the
index of its member, and the per-piece coefficients of all members sit in
one flat table, so a stacked solve performs the same floating-point
operations on each star as a solve of its member alone (bit-identical).
"""

from __future__ import annotations

import numpy as np

from .base import EquationOfState, InteriorJumps
from .lowering import lower_many

__all__ = ["EOSStack", "BoundEOSStack"]


class EOSStack:
    """Several EOS of one family (one evaluation function), solved as one batch.

    :meth:`bind` returns the object the solver uses.

    Parameters
    ----------
    members : list of EquationOfState
        The members: all of one class with the same coefficient names (the
        members of an ensemble share a kind); their numbers of pieces may
        differ.
    """

    def __init__(self, members: list[EquationOfState]) -> None:
        if not members:
            raise ValueError("an EOS stack needs at least one member")
        first = members[0]
        keys = tuple(first.piece_arrays())
        if any(type(m) is not type(first) or tuple(m.piece_arrays()) != keys for m in members):
            raise ValueError("stacked EOS must be of one class with the same coefficients")
        forms = {getattr(m, "forms", None) for m in members}
        if len(forms) != 1:
            raise ValueError("stacked EOS must evaluate their pieces with the same forms")
        self.members = members
        self.state_from_coefficients = first.state_from_coefficients
        self.slope_from_coefficients = first.slope_from_coefficients
        pieces = np.array([m.breakpoints_h.size + 1 for m in members])
        self.n_pieces = int(pieces.max())
        self.piece_offsets = np.concatenate([[0], np.cumsum(pieces)[:-1]])
        # members with fewer pieces never leave their last one: +inf breakpoints
        self.breakpoints = np.full((len(members), self.n_pieces - 1), np.inf)
        for i, m in enumerate(members):
            self.breakpoints[i, : m.breakpoints_h.size] = m.breakpoints_h
        self.coeff = {k: np.concatenate([m.piece_arrays()[k] for m in members]) for k in keys}
        self.surface_energy_density = np.array([float(m.surface_energy_density) for m in members])
        n_jumps = max((m.interior_jumps.count if m.interior_jumps is not None else 0) for m in members)
        if n_jumps:
            shape = (n_jumps, len(members))
            h, de, p = np.full(shape, np.inf), np.zeros(shape), np.zeros(shape)
            for i, m in enumerate(members):
                if m.interior_jumps is not None:
                    j = m.interior_jumps.count
                    h[:j, i], de[:j, i], p[:j, i] = m.interior_jumps.h, m.interior_jumps.delta_eps, \
                        m.interior_jumps.pressure
            self.interior_jumps = InteriorJumps(h, de, p)
        else:
            self.interior_jumps = None
        # the crust-core boundary of each member: all members or none (one kind)
        crust = [m.crust_core_enthalpy for m in members]
        self.crust_core_enthalpy = None if any(c is None for c in crust) else np.array(crust, dtype=float)
        self._bank = None

    def lowered(self):
        """The members in compiled form (:class:`~.lowering.LoweredBank`), built on first use."""
        if self._bank is None:
            self._bank = lower_many(self.members)
        return self._bank

    def bind(self, member) -> BoundEOSStack:
        """The stack seen by a batch whose star j belongs to member ``member[j]``."""
        return BoundEOSStack(self, np.asarray(member, dtype=np.intp))


class BoundEOSStack:
    """An :class:`EOSStack` with a member index per star (the solver's EOS for ensembles).

    Methods take arrays whose last axis runs over the batch's stars.
    """

    h_max = np.inf

    def __init__(self, stack: EOSStack, member: np.ndarray) -> None:
        self.stack, self.member = stack, member
        self.offset = stack.piece_offsets[member]
        self.star_breakpoints = stack.breakpoints[member]  # (n, P - 1)
        self.state_from_coefficients = stack.state_from_coefficients
        self.slope_from_coefficients = stack.slope_from_coefficients
        self.surface_energy_density = stack.surface_energy_density[member]
        jumps = stack.interior_jumps
        self.interior_jumps = None if jumps is None else InteriorJumps(
            jumps.h[:, member], jumps.delta_eps[:, member], jumps.pressure[:, member])
        crust = stack.crust_core_enthalpy
        self.crust_core_enthalpy = None if crust is None else crust[member]

    def piece_index(self, h):
        h = np.asarray(h, dtype=float)
        local = (self.star_breakpoints < h[..., None]).sum(axis=-1)
        return self.offset + local

    def piece_arrays(self):
        return self.stack.coeff

    def _per_star(self, fn_name: str, values):
        values = np.asarray(values, dtype=float)
        out = np.empty(values.shape)
        for m in np.unique(self.member):
            sel = self.member == m
            out[..., sel] = getattr(self.stack.members[m], fn_name)(values[..., sel])
        return out

    # the same per-point evaluation as a single EOS, through piece_index / piece_arrays
    state = EquationOfState.state
    coefficients_at = EquationOfState.coefficients_at
    energy_density_slope = EquationOfState.energy_density_slope

    def enthalpy_of_density(self, rho):
        return self._per_star("enthalpy_of_density", rho)
