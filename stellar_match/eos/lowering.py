"""EOS in compiled form: every family lowers itself to coefficient rows and piece-type codes.

A lowered EOS is a few flat arrays that the compiled solver
(:mod:`stellar_match.kernels.tov_stepping`) reads: for each piece its upper
log-enthalpy, its piece type (:mod:`stellar_match.kernels.eos_pieces`) and a
row of coefficients; the interior energy-density jumps; the crust-core
boundary.  A family says how it lowers with two class attributes:
``PIECE_TYPE`` (a code) and ``LOWERED_COEFFICIENTS`` (the names of its
``piece_arrays()`` in row order).  A :class:`~.joined.JoinedEOS` lowers each
piece with the attributes of its own part's family.

Many EOS (ensemble members) lower to one :class:`LoweredBank`: their pieces
concatenated, with each member's range of pieces and jumps, so a batch of
stars of any members is one call of the compiled solver.  Lowering an EOS
costs one array build; it is kept on the EOS object (EOS objects do not
change after they are built), so repeated solves of one EOS pay it once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..kernels.eos_pieces import N_COEFFICIENTS

__all__ = ["LoweredBank", "lower", "lower_many"]


@dataclass(frozen=True)
class LoweredBank:
    """One or more EOS as the flat arrays of the compiled solver (geometric units).

    Attributes
    ----------
    piece_lo, piece_hi : ndarray of int64, shape (M,)
        Member m's pieces are ``piece_lo[m]:piece_hi[m]``, ascending in h.
    piece_top : ndarray, shape (P,)
        Upper log-enthalpy of each piece (its member's next breakpoint; inf for the last).
    piece_type : ndarray of int64, shape (P,)
        Piece-type code of each piece.
    coefficients : ndarray, shape (P, N_COEFFICIENTS)
        Coefficient row of each piece.
    jump_lo, jump_hi : ndarray of int64, shape (M,)
        Member m's interior jumps are ``jump_lo[m]:jump_hi[m]``.
    jump_h, jump_delta_eps, jump_pressure : ndarray, shape (J,)
        Log-enthalpy, eps(h+) - eps(h-) and pressure of each jump.
    crust_core_enthalpy : ndarray, shape (M,)
        Log-enthalpy of each member's crust-core boundary (NaN: no crust).
    surface_energy_density : ndarray, shape (M,)
        Energy density just inside each member's surface.
    """

    piece_lo: np.ndarray
    piece_hi: np.ndarray
    piece_top: np.ndarray
    piece_type: np.ndarray
    coefficients: np.ndarray
    jump_lo: np.ndarray
    jump_hi: np.ndarray
    jump_h: np.ndarray
    jump_delta_eps: np.ndarray
    jump_pressure: np.ndarray
    crust_core_enthalpy: np.ndarray
    surface_energy_density: np.ndarray

    @property
    def members(self) -> int:
        return int(self.piece_lo.size)

    def __repr__(self) -> str:
        return f"LoweredBank({self.members} members, {self.piece_top.size} pieces, {self.jump_h.size} jumps)"


def _rows(eos) -> tuple[np.ndarray, np.ndarray]:
    """(piece types, coefficient rows) of one EOS's pieces."""
    arrays = eos.piece_arrays()
    n = eos.breakpoints_h.size + 1
    forms = getattr(eos, "forms", None)
    if forms is None:
        forms, form_of = (type(eos),), np.zeros(n, dtype=np.intp)
    elif len(forms) == 1:
        form_of = np.zeros(n, dtype=np.intp)
    else:
        form_of = arrays["form"].astype(np.intp)
    types = np.empty(n, dtype=np.int64)
    rows = np.zeros((n, N_COEFFICIENTS))
    for f_index, form in enumerate(forms):
        sel = form_of == f_index
        if not sel.any():
            continue
        names = getattr(form, "LOWERED_COEFFICIENTS", None)
        if names is None:
            raise TypeError(f"EOS family {form.__name__} does not say how it lowers (LOWERED_COEFFICIENTS)")
        types[sel] = form.PIECE_TYPE
        for col, name in enumerate(names):
            rows[sel, col] = np.broadcast_to(arrays[name], (n,))[sel]
    return types, rows


def _lower_one(eos) -> dict:
    types, rows = _rows(eos)
    top = np.append(np.asarray(eos.breakpoints_h, dtype=float), np.inf)
    jumps = eos.interior_jumps
    if jumps is None:
        jh = jde = jp = np.empty(0)
    else:
        jh, jde, jp = (np.asarray(a, dtype=float).ravel() for a in (jumps.h, jumps.delta_eps, jumps.pressure))
    crust = eos.crust_core_enthalpy
    return {"top": top, "types": types, "rows": rows, "jh": jh, "jde": jde, "jp": jp,
            "crust": np.nan if crust is None else float(crust), "surface": float(eos.surface_energy_density)}


def _lowered_parts(eos) -> dict:
    # kept on the object: EOS objects are not changed after they are built (and crust_core_enthalpy,
    # set once by set_crust_core, is part of the key)
    cached = eos.__dict__.get("_lowered_parts")
    if cached is not None and cached[0] == eos.crust_core_enthalpy:
        return cached[1]
    parts = _lower_one(eos)
    eos.__dict__["_lowered_parts"] = (eos.crust_core_enthalpy, parts)
    return parts


def lower_many(members) -> LoweredBank:
    """The bank of several EOS (in order: member m is ``members[m]``)."""
    parts = [_lowered_parts(m) for m in members]
    pieces = np.array([p["top"].size for p in parts], dtype=np.int64)
    jumps = np.array([p["jh"].size for p in parts], dtype=np.int64)
    piece_lo = np.concatenate([[0], np.cumsum(pieces)[:-1]]).astype(np.int64)
    jump_lo = np.concatenate([[0], np.cumsum(jumps)[:-1]]).astype(np.int64)
    return LoweredBank(
        piece_lo=piece_lo, piece_hi=piece_lo + pieces,
        piece_top=np.concatenate([p["top"] for p in parts]),
        piece_type=np.concatenate([p["types"] for p in parts]),
        coefficients=np.ascontiguousarray(np.concatenate([p["rows"] for p in parts])),
        jump_lo=jump_lo, jump_hi=jump_lo + jumps,
        jump_h=np.concatenate([p["jh"] for p in parts]),
        jump_delta_eps=np.concatenate([p["jde"] for p in parts]),
        jump_pressure=np.concatenate([p["jp"] for p in parts]),
        crust_core_enthalpy=np.array([p["crust"] for p in parts]),
        surface_energy_density=np.array([p["surface"] for p in parts]),
    )


def lower(eos) -> tuple[LoweredBank, np.ndarray | None]:
    """(bank, member index per star or None) for an EOS or a bound ensemble stack."""
    stack = getattr(eos, "stack", None)
    if stack is not None:
        return stack.lowered(), eos.member
    cached = eos.__dict__.get("_lowered_bank")
    if cached is not None and cached[0] == eos.crust_core_enthalpy:
        return cached[1], None
    bank = lower_many([eos])
    eos.__dict__["_lowered_bank"] = (eos.crust_core_enthalpy, bank)
    return bank, None
