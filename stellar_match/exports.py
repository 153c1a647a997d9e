"""Tables for spectral fitting: surface redshifts and gravities, as ECSV, CSV or HDF5.

Every table here is an :class:`ExportTable` -- named 1-D columns with a unit
string astropy understands and a description -- written through
``astropy.table.Table`` by :func:`write_table`, in the format its file
extension names:

* ``.ecsv``: the Enhanced Character Separated Values text format (Astropy
  APE 6): a YAML header in ``#`` lines declares every column's name,
  datatype, unit and description, and carries the metadata.
* ``.csv``: plain CSV, a header line and the rows, nothing else (no comment
  or unit lines), so that ``pandas.read_csv(path)``,
  ``numpy.genfromtxt(path, names=True, delimiter=",", dtype=None)`` and
  ``astropy.table.Table.read(path)`` read it with their defaults.  A plain
  CSV has no place for units or metadata: the units are fixed by the column
  names (:data:`COLUMN_UNITS`; ``Table.read(path, units=COLUMN_UNITS)`` or
  :func:`read_table` attach them).  numpy's reader knows no quoting, so in
  the ``eos`` column the characters ``% , " #`` of a name are written
  percent-encoded (``%25 %2C %22 %23``; ``urllib.parse.unquote`` or
  :func:`read_table` restores them).
* ``.h5`` / ``.hdf5``: astropy's HDF5 table layout: one compound dataset
  ``table`` (a field per column, text as UTF-8 bytes) and its units,
  descriptions and metadata in ``table.__table_column_meta__``;
  ``Table.read(path)`` reads it with units.

The exterior formulas are those of :mod:`stellar_match.exterior`; the
regions no static star may enter are :data:`FORBIDDEN_REGIONS`.
"""

from __future__ import annotations

import math
import os
import tempfile
import tomllib
import urllib.parse
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import exterior, units
from .errors import InputError, StorageError
from .schema import STAR_STATUS
from .sequence import EOSSequence

__all__ = [
    "FORBIDDEN_REGIONS",
    "CAUSALITY_RADIUS",
    "TABLE_FORMATS",
    "COLUMN_UNITS",
    "MAX_EXPORT_ROWS",
    "ExportTable",
    "parse_range",
    "parse_members",
    "select_sequences",
    "select_stars",
    "forbidden_region",
    "redshift_table",
    "redshift_table_at_masses",
    "redshift_grid",
    "redshift_window",
    "control_of_run",
    "check_output_path",
    "write_table",
    "read_table",
    "format_text_table",
]

#: Smallest radius, in units of GM/c^2, allowed by causality (sound speed
#: <= c) for any EOS matched to a known low-density crust: R >~ 2.9 GM/c^2.
#: Value quoted from memory of Lattimer & Prakash 2007, Phys. Rep. 442, 109
#: (their causality limit, after Lattimer et al. 1990 and Glendenning 1992);
#: approximate, the coefficient depends on the assumed matching density.
CAUSALITY_RADIUS = 2.9

#: Regions of the mass-radius plane no static star may enter, innermost first:
#: name -> (R_min in units of GM/c^2, label, source).
FORBIDDEN_REGIONS: dict[str, tuple[float, str, str]] = {
    "horizon": (2.0, "inside the horizon, R < 2GM/c$^2$", "Schwarzschild radius"),
    "buchdahl": (1.0 / exterior.BUCHDAHL_COMPACTNESS,
                 "Buchdahl bound, R < 9GM/(4c$^2$)", "Buchdahl 1959, Phys. Rev. 116, 1027"),
    "causality": (CAUSALITY_RADIUS, "causality, R < 2.9GM/c$^2$",
                  "Lattimer & Prakash 2007, Phys. Rep. 442, 109 (approximate)"),
}

#: Output formats of :func:`write_table` by file extension.
TABLE_FORMATS = (".ecsv", ".csv", ".h5", ".hdf5")

#: Columns of the star tables: name -> (astropy unit string, description), in output order.
REDSHIFT_COLUMNS: dict[str, tuple[str, str]] = {
    "eos": ("", "EOS name (run-file group: /eos/<name>, or /ensemble/<name> for ensemble members)"),
    "member": ("", "ensemble member index (-1: a star of an [[eos]] block)"),
    "requested_mass": ("solMass", "mass asked for (--masses); the star's mass matches it to 1e-6"),
    "central_density": ("g / cm3", "central rest-mass density"),
    "mass": ("solMass", "gravitational mass"),
    "radius": ("km", "areal (circumferential) radius of the surface"),
    "baryon_mass": ("solMass", "baryon (rest) mass"),
    "compactness": ("", "GM/(Rc^2)"),
    "surface_redshift": ("", "z = (1 - 2GM/(Rc^2))^(-1/2) - 1"),
    "redshift_velocity": ("km / s", "c z, the gravitational redshift as a velocity"),
    "surface_gravity": ("cm / s2", "g = GM/(R^2 sqrt(1 - 2GM/(Rc^2)))"),
    "log10_surface_gravity": ("dex(cm / s2)", "log10 of g in cm/s2"),
    "radiation_radius": ("km", "R_infinity = R (1 + z), the radiation radius seen from infinity"),
    "love_number_k2": ("", "quadrupolar tidal Love number k2 (Hinderer 2008)"),
    "tidal_deformability": ("", "dimensionless tidal deformability Lambda = (2/3) k2 (Rc^2/GM)^5"),
    "moment_of_inertia": ("g cm2", "slow-rotation moment of inertia (Hartle 1967)"),
    "stable": ("", "turning-point stability (see the run file)"),
    "star_status": ("", "0: computed within tolerance; else NaN, see the run file's star_status_meaning "
                        "(-1 in a --masses table: the stable branch does not reach the mass)"),
}
#: Columns of the window table (``--observed-z``) with a unit.
WINDOW_UNITS = {"mass_min": "solMass", "mass_max": "solMass", "radius_min": "km", "radius_max": "km"}
#: Unit of every column name any export may have ("" or absent: none), for readers of plain CSV:
#: ``astropy.table.Table.read(path, units=COLUMN_UNITS)`` (member parameters included).
COLUMN_UNITS: dict[str, str] = ({k: u for k, (u, _) in REDSHIFT_COLUMNS.items() if u} | WINDOW_UNITS
                                | {"log10_p1": "dex(dyn / cm2)"})
#: Per-star columns a star table takes from the run file (sweep or ensemble).
_RUN_COLUMNS = ("central_density", "mass", "radius", "baryon_mass", "compactness", "surface_redshift",
                "surface_gravity", "love_number_k2", "tidal_deformability", "moment_of_inertia", "stable",
                "star_status")


@dataclass
class ExportTable:
    """Named 1-D columns with units, ready for :func:`write_table`.

    Attributes
    ----------
    columns : dict of str -> ndarray
        Equal-length columns in output order (float, bool, int or str).
    units : dict of str -> str
        Astropy-readable unit strings; "" or absent for dimensionless/text.
    descriptions : dict of str -> str
        One line per column.
    meta : dict of str -> str
        Provenance (source run file, software version, notes).
    """

    columns: dict[str, np.ndarray]
    units: dict[str, str] = field(default_factory=dict)
    descriptions: dict[str, str] = field(default_factory=dict)
    meta: dict[str, str] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def to_table(self):
        """The table as an ``astropy.table.QTable``: unit-carrying columns are Quantities."""
        return units.quantity_table(self.columns, self.units, descriptions=self.descriptions, meta=self.meta)

    def _astropy(self):
        """An ``astropy.table.Table`` with unit strings and descriptions on its columns (for writing)."""
        from astropy.table import Column, Table

        table = Table(meta=dict(self.meta))
        for name, values in self.columns.items():
            values = np.asarray(values)
            if values.dtype.kind == "O":
                values = values.astype(str)
            table[name] = Column(values, unit=self.units.get(name) or None,
                                 description=self.descriptions.get(name) or None)
        return table


# --- arguments ----------------------------------------------------------------

#: Most values one MIN:MAX:STEP option may give.
MAX_RANGE_VALUES = 100_000
#: Most (M, R) points of a redshift grid: about 2 GB while it is built and
#: written (measured: 10^7 points peak at 2.0 GB), and far finer than any fit needs.
MAX_GRID_POINTS = 10**7
#: Most rows of a star table, counted before any ensemble star is read (the same memory as the grid's limit).
MAX_EXPORT_ROWS = 10**7

def parse_members(text: str, option: str = "--members") -> slice:
    """The members ``START:STOP`` selects (0-based, STOP excluded; either may be left out).

    Raises
    ------
    InputError
        Naming ``option`` unless both parts are whole numbers (or empty) with 0 <= START < STOP.
    """
    parts = str(text).split(":")
    try:
        if len(parts) != 2:
            raise ValueError
        start = int(parts[0]) if parts[0].strip() else 0
        stop = int(parts[1]) if parts[1].strip() else None
    except ValueError:
        raise InputError(f"needs START:STOP with whole numbers (0-based, STOP excluded), got {text!r}",
                         key=option) from None
    if start < 0 or (stop is not None and stop <= start):
        raise InputError(f"needs 0 <= START < STOP, got {text!r}", key=option)
    return slice(start, stop)


def parse_range(text: str, option: str) -> np.ndarray:
    """Values MIN, MIN+STEP, ... up to MAX (inclusive) from ``"MIN:MAX:STEP"``.

    Raises
    ------
    InputError
        Naming ``option`` when the text is not three numbers with
        0 < MIN <= MAX, STEP > 0 and at most 100 000 values.
    """
    parts = str(text).split(":")
    try:
        lo, hi, step = (float(p) for p in parts) if len(parts) == 3 else (math.nan,) * 3
    except ValueError:
        lo = hi = step = math.nan
    if not all(math.isfinite(v) for v in (lo, hi, step)):
        raise InputError(f"needs MIN:MAX:STEP with three numbers, got {text!r}", key=option)
    if lo <= 0 or hi < lo or step <= 0:
        raise InputError(f"needs 0 < MIN <= MAX and STEP > 0, got {text!r}", key=option)
    # counted as a float first: (MAX - MIN)/STEP may be too large for an integer
    span = (hi - lo) / step * (1 + 1e-12) + 1e-9
    if not span < MAX_RANGE_VALUES:
        raise InputError(f"{span + 1:.3g} values is too many (at most {MAX_RANGE_VALUES})", key=option)
    return lo + step * np.arange(math.floor(span) + 1)


def select_sequences(runs, names: list[str] | None = None) -> list[tuple[str, EOSSequence]]:
    """The EOS sequences of one or several run files, as (label, sequence) pairs.

    Parameters
    ----------
    runs : sequence of RunFile
    names : list of str, optional
        EOS names to keep (all when None or empty), in file order.

    Returns
    -------
    list of (str, EOSSequence)
        Labels are the EOS names; a name found in several files gets the
        file's stem appended, ``"name (stem)"``.

    Raises
    ------
    InputError
        For a name in no run file (the message lists the names available).
    """
    available = [(run, name, seq) for run in runs for name, seq in run.eos.items()]
    known = {name for _, name, _ in available}
    for name in names or []:
        if name not in known:
            raise InputError(f"unknown EOS {name!r}; the run file(s) hold: {', '.join(sorted(known))}",
                             key="--eos")
    counts: dict[str, int] = {}
    for _, name, _ in available:
        counts[name] = counts.get(name, 0) + 1
    stems = [Path(run.path).stem for run in runs]
    unique_stems = len(set(stems)) == len(stems)

    def tag(run) -> str:
        return Path(run.path).stem if unique_stems else str(run.path)

    return [
        (name if counts[name] == 1 else f"{name} ({tag(run)})", seq)
        for run, name, seq in available
        if not names or name in names
    ]


def control_of_run(run):
    """The solver step control a run file's sweep used (``[solver] step_scale`` and ``tolerance``)."""
    from .config import SolverOptions

    try:
        solver = tomllib.loads(str(run.attrs.get("config_toml", ""))).get("solver", {})
    except tomllib.TOMLDecodeError:
        solver = {}
    return SolverOptions(step_scale=float(solver.get("step_scale", 1.0)),
                         tolerance=float(solver.get("tolerance", SolverOptions.tolerance))).control()


def check_output_path(path: str | Path, allowed: tuple[str, ...]) -> Path:
    """Return ``path`` if its extension is one of ``allowed``, else raise InputError."""
    path = Path(path)
    if path.suffix.lower() not in allowed:
        raise InputError(f"unsupported output format {path.suffix or '(none)'!r}; use one of "
                         f"{', '.join(allowed)}", source=str(path))
    return path


def select_stars(runs, names: list[str] | None = None) -> tuple[list[tuple[str, EOSSequence]], list[tuple]]:
    """The [[eos]] sequences and the ensembles of run files whose stars a table may hold.

    Parameters
    ----------
    runs : sequence of RunFile
    names : list of str, optional
        EOS or ensemble names to keep (all when None or empty); a name held
        by an EOS and an ensemble selects both.

    Returns
    -------
    sequences : list of (str, EOSSequence)
        As :func:`select_sequences`.
    ensembles : list of (str, RunFile, str)
        (label, run file, ensemble name): the label is the name, with the
        file's stem appended when several files hold it.

    Raises
    ------
    InputError
        For a name in no run file (the message lists the names available).
    """
    eos_known = {n for run in runs for n in run.eos}
    ens_known = {n for run in runs for n in run.ensembles}
    for name in names or []:
        if name not in eos_known | ens_known:
            held = ", ".join(sorted(eos_known)) or "no EOS"
            raise InputError(f"unknown EOS {name!r}; the run file(s) hold: {held}"
                             + (f" (ensembles: {', '.join(sorted(ens_known))})" if ens_known else ""), key="--eos")
    eos_names = [n for n in names or [] if any(n in run.eos for run in runs)]
    sequences = select_sequences(runs, eos_names) if eos_names or not names else []
    found = [(run, n) for run in runs for n in run.ensembles if not names or n in names]
    counts: dict[str, int] = {}
    for _, n in found:
        counts[n] = counts.get(n, 0) + 1
    ensembles = [(n if counts[n] == 1 else f"{n} ({Path(run.path).stem})", run, n) for run, n in found]
    return sequences, ensembles


# --- physics of the tables --------------------------------------------------

def forbidden_region(mass_msun, radius_km) -> np.ndarray:
    """Name of the innermost forbidden region holding each (M, R), else "allowed".

    Boundaries (R in units of GM/c^2): horizon R <= 2, Buchdahl R <= 9/4,
    causality R < 2.9 (see :data:`FORBIDDEN_REGIONS`).  Masses in Msun and
    radii in km, or Quantities.
    """
    r = np.asarray(units.to_unit(radius_km, units.LENGTH_UNIT, name="radius_km"), dtype=float)
    x = r / units.mass_to_geometric(np.asarray(units.to_unit(mass_msun, units.MASS_UNIT, name="mass_msun"),
                                               dtype=float))
    region = np.full(x.shape, "allowed", dtype=object)
    region[x < FORBIDDEN_REGIONS["causality"][0]] = "causality"
    region[x <= FORBIDDEN_REGIONS["buchdahl"][0]] = "buchdahl"
    region[x <= FORBIDDEN_REGIONS["horizon"][0]] = "horizon"
    return region.astype(str)


def _surface_columns(mass, radius, redshift=None, gravity=None, compactness=None) -> dict[str, np.ndarray]:
    """compactness, z, c z, g, log10 g and R_infinity = R(1+z) from M (Msun) and R (km).

    z, g and the compactness are taken as given where the run file has them
    (bit for bit), and computed by :mod:`stellar_match.exterior` otherwise.
    """
    mass, radius = np.asarray(mass, dtype=float), np.asarray(radius, dtype=float)
    z = exterior.redshift_at_radius(mass, radius) if redshift is None else np.asarray(redshift, float)
    g = exterior.surface_gravity(mass, radius) if gravity is None else np.asarray(gravity, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        log_g = np.log10(g)
        c = units.mass_to_geometric(mass) / radius if compactness is None else np.asarray(compactness, float)
    return {
        "compactness": c,
        "surface_redshift": z,
        "redshift_velocity": exterior.redshift_velocity(z),
        "surface_gravity": g,
        "log10_surface_gravity": log_g,
        "radiation_radius": radius * (1.0 + z),
    }


def _star_columns(stars: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The physics columns of a star table, in order, from run-file columns (1-D)."""
    n = len(stars["mass"])
    nan = np.full(n, np.nan)
    out = {k: np.asarray(stars.get(k, nan), dtype=float) for k in ("central_density", "mass", "radius",
                                                                     "baryon_mass")}
    out |= _surface_columns(stars["mass"], stars["radius"], stars.get("surface_redshift"),
                            stars.get("surface_gravity"), stars.get("compactness"))
    for k in ("love_number_k2", "tidal_deformability", "moment_of_inertia"):
        out[k] = np.asarray(stars.get(k, nan), dtype=float)
    out["stable"] = np.asarray(stars.get("stable", np.isfinite(out["mass"])), dtype=bool)
    # format-1 run files predate star_status: their stars count as computed
    out["star_status"] = np.asarray(stars.get("star_status", np.zeros(n)), dtype=np.int8)
    return out


def _assemble(parts: list[dict[str, np.ndarray]], meta: dict) -> ExportTable:
    """One ExportTable from row blocks with the same keys (missing parameter columns are NaN)."""
    order = list(REDSHIFT_COLUMNS)
    names: list[str] = []
    for part in parts:  # the column order of REDSHIFT_COLUMNS, member parameters after "member"
        for k in part:
            if k not in names:
                names.append(k)
    params = [k for k in names if k not in REDSHIFT_COLUMNS]
    head = [k for k in order if k in names]
    cut = head.index("member") + 1 if "member" in head else 1
    columns_order = head[:cut] + params + head[cut:]
    data = {}
    for k in columns_order:
        blocks = []
        for part in parts:
            n = len(part["mass"])
            blocks.append(part[k] if k in part else np.full(n, np.nan))
        data[k] = np.concatenate(blocks) if blocks else np.zeros(0)
    data["eos"] = data["eos"].astype(str)
    unit_of = {k: COLUMN_UNITS.get(k, "") for k in data}
    text_of = {k: REDSHIFT_COLUMNS[k][1] if k in REDSHIFT_COLUMNS else f"ensemble member parameter {k}"
               for k in data}
    if "log10_p1" in data:
        text_of["log10_p1"] = "ensemble member parameter: log10 of p (dyn/cm2) at 10^14.7 g/cm3"
    return ExportTable(columns=data, units=unit_of, descriptions=text_of, meta=meta)


def _ensemble_parts(ensembles, members: slice | None, budget: int) -> list[dict[str, np.ndarray]]:
    """Row blocks (member-major, star fastest) of the selected members of each ensemble."""
    from .ensemble import ENSEMBLE_KINDS
    from .eos import registry

    members = members or slice(None)
    sizes = []
    for label, run, name in ensembles:
        summary = run.ensembles[name]
        start, stop, _ = members.indices(summary.size)
        if start >= stop:
            raise InputError(f"ensemble {label!r} has {summary.size} members; {members.start}:"
                             f"{'' if members.stop is None else members.stop} selects none", key="--members")
        stars = int(np.size(run.ensemble_dataset(name, "sweep_values")))
        sizes.append((start, stop, stars))
    rows = sum((stop - start) * m for start, stop, m in sizes)
    if rows > budget:
        raise InputError(f"{rows} ensemble stars (members x central values) and the [[eos]] stars make more "
                         f"than {MAX_EXPORT_ROWS} rows; select fewer members with --members START:STOP",
                         key="--members")
    parts = []
    for (label, run, name), (start, stop, m) in zip(ensembles, sizes, strict=True):
        block = run.ensemble_stars(name, _RUN_COLUMNS, slice(start, stop))
        part = {"eos": np.full((stop - start) * m, label, dtype=object),
                "member": np.repeat(np.arange(start, stop), m)}
        params = run.ensembles[name].members
        kind = run.ensembles[name].kind
        for k in sorted(params, key=lambda k: (registry.column_rank(kind, k) if kind in ENSEMBLE_KINDS else (0, 0), k)):
            part[k] = np.repeat(np.asarray(params[k], dtype=float)[start:stop], m)
        parts.append(part | _star_columns({k: np.asarray(v).reshape(-1) for k, v in block.items()}))
    return parts


def redshift_table(sequences: list[tuple[str, EOSSequence]], *, keep_unstable: bool = False,
                   ensembles=(), members: slice | None = None, meta: dict | None = None) -> ExportTable:
    """One row per star of the sweeps (and of ensemble members), with the redshift columns.

    ``compactness``, ``surface_redshift`` and ``surface_gravity`` are the run
    file's own values; ``redshift_velocity`` (c z), ``log10_surface_gravity``
    and ``radiation_radius`` (R_infinity = R(1 + z)) are derived from them.

    Parameters
    ----------
    sequences : list of (str, EOSSequence)
        Labelled sweeps, e.g. from :func:`select_stars`.
    keep_unstable : bool
        Keep every star.  By default only stable stars computed within
        tolerance (``stable`` and ``star_status`` 0) are exported: unstable
        stars and the NaN stars of a non-zero status are left out.
    ensembles : list of (str, RunFile, str), optional
        (label, run file, ensemble name) of ensembles whose members' stars to
        add, with a ``member`` column and the member parameters (see
        :func:`select_stars`).
    members : slice, optional
        Only these members of each ensemble (0-based; see :func:`parse_members`).
    meta : dict, optional
        Provenance to carry.

    Raises
    ------
    InputError
        When no star is left to export (the message says how many were left
        out and why), when ``members`` selects no member, or when the table
        would hold more than :data:`MAX_EXPORT_ROWS` rows.
    """
    parts = []
    for label, seq in sequences:
        stars = {k: np.asarray(seq[k]) for k in _RUN_COLUMNS if k in seq.columns}
        n = len(stars["mass"])
        part = {"eos": np.full(n, label, dtype=object)}
        if ensembles:
            part["member"] = np.full(n, -1)
        parts.append(part | _star_columns(stars))
    budget = MAX_EXPORT_ROWS - sum(len(p["mass"]) for p in parts)
    parts += _ensemble_parts(list(ensembles), members, budget) if ensembles else []
    total = sum(len(p["mass"]) for p in parts)
    if not keep_unstable:
        dropped = {"unstable": 0, **{f"star_status {k}": 0 for k in STAR_STATUS if k}}
        for i, p in enumerate(parts):
            ok = p["star_status"] == 0
            keep = p["stable"] & ok
            dropped["unstable"] += int(np.count_nonzero(ok & ~p["stable"]))
            for code in np.unique(p["star_status"][~ok]):
                dropped[f"star_status {int(code)}"] = (dropped.get(f"star_status {int(code)}", 0)
                                                        + int(np.count_nonzero(p["star_status"] == code)))
            parts[i] = {k: v[keep] for k, v in p.items()}
    kept = sum(len(p["mass"]) for p in parts)
    if kept == 0:
        if total == 0:
            raise InputError("no star to export: the selection holds no [[eos]] sweep and no ensemble")
        why = ", ".join(f"{v} {k}" for k, v in dropped.items() if v)
        raise InputError(f"no star to export: all {total} selected stars are left out ({why}); "
                         "pass --keep-unstable (keep_unstable=True) to export them")
    meta = dict(meta or {})
    meta["selection"] = ("every star, unstable and NaN (non-zero star_status) ones included" if keep_unstable
                         else "stable stars computed within tolerance (stable and star_status 0)")
    if ensembles and members is not None:
        meta["members"] = f"{members.start or 0}:{'' if members.stop is None else members.stop}"
    return _assemble(parts, meta)


def redshift_table_at_masses(sequences: list[tuple[str, EOSSequence]], masses, *, control=None,
                             meta: dict | None = None) -> tuple[ExportTable, list[str]]:
    """Stable-branch stars of every EOS at the given masses, by fresh solves.

    Uses :func:`stellar_match.sweep.eos_from_sequence` and
    :func:`stellar_match.sweep.stars_at_masses` (mass to 1e-6 relative).
    A ``requested_mass`` column follows ``eos``.  Masses the stable branch
    does not reach give NaN rows (every column but ``eos`` and
    ``requested_mass``; ``stable`` False, ``star_status`` -1), and a note.

    Parameters
    ----------
    masses : array_like or Quantity
        Gravitational masses (Msun).

    Returns
    -------
    table : ExportTable
    notes : list of str
        One line per EOS with unreachable masses.

    Raises
    ------
    InputError
        When no EOS is selected, or no requested mass is reached by any of them.
    """
    from .structure import DEFAULT_STEPS
    from .sweep import eos_from_sequence, stars_at_masses

    masses = np.atleast_1d(np.asarray(units.to_unit(masses, units.MASS_UNIT, name="masses"), dtype=float))
    if not sequences:
        raise InputError("--masses solves stars of [[eos]] sweeps, and the selection has none", key="--masses")
    parts, notes = [], []
    for label, seq in sequences:
        stars = stars_at_masses(eos_from_sequence(seq), seq, masses, control=control or DEFAULT_STEPS)
        found = np.isfinite(stars["mass"])
        missing = masses[~np.isfinite(stars["star_status"])]
        if missing.size:
            notes.append(f"{label}: {missing.size} mass(es) not on the stable branch of the sweep "
                         f"(M_max = {seq.summary.get('max_mass', float('nan')):.4f} Msun): "
                         f"{', '.join(f'{m:g}' for m in missing)} -> NaN rows")
        stars["stable"] = found  # found stars lie on the stable branch by construction
        stars["star_status"] = np.where(np.isfinite(stars["star_status"]), stars["star_status"], -1)
        parts.append({"eos": np.full(masses.size, label, dtype=object), "requested_mass": masses}
                     | _star_columns(stars))
    if not any(np.any(np.isfinite(p["mass"])) for p in parts):
        raise InputError("no star to export: no requested mass lies on the stable branch of a selected EOS",
                         key="--masses")
    meta = dict(meta or {})
    meta["selection"] = "stable branch at requested masses (fresh solves); NaN rows: mass not reached"
    meta["requested_masses_msun"] = " ".join(f"{m:g}" for m in masses)
    return _assemble(parts, meta), notes


def redshift_grid(masses, radii, *, meta: dict | None = None) -> ExportTable:
    """EOS-independent z, c z, log10 g and R_infinity over every (M, R) pair, with its forbidden region.

    Rows run over radius fastest.  Inside the horizon z, g and log10 g are NaN.
    Masses in Msun and radii in km, or Quantities.

    Raises
    ------
    InputError
        For more than :data:`MAX_GRID_POINTS` points, before anything is allocated.
    """
    masses = units.to_unit(masses, units.MASS_UNIT, name="masses")
    radii = units.to_unit(radii, units.LENGTH_UNIT, name="radii")
    points = np.size(masses) * np.size(radii)
    if points > MAX_GRID_POINTS:
        raise InputError(f"{np.size(masses)} masses x {np.size(radii)} radii = {points} points; at most "
                         f"{MAX_GRID_POINTS}", key="--grid-mass x --grid-radius")
    mm, rr = np.meshgrid(np.asarray(masses, dtype=float), np.asarray(radii, dtype=float), indexing="ij")
    m, r = mm.ravel(), rr.ravel()
    cols = {"mass": m, "radius": r} | _surface_columns(m, r) | {"region": forbidden_region(m, r)}
    text_of = {k: REDSHIFT_COLUMNS[k][1] for k in cols if k in REDSHIFT_COLUMNS}
    text_of["region"] = "allowed, or the innermost forbidden region: causality, buchdahl, horizon"
    meta = dict(meta or {})
    meta["regions"] = "; ".join(f"{k}: R < {v[0]:g} GM/c^2 ({v[2]})" for k, v in FORBIDDEN_REGIONS.items())
    return ExportTable(cols, {k: COLUMN_UNITS.get(k, "") for k in cols}, text_of, meta)


def _window_points(z, m, r, z_lo, z_hi):
    """Samples of a polyline (z, M, R) inside [z_lo, z_hi] plus its crossings of both ends."""
    pts = [(mi, ri) for zi, mi, ri in zip(z, m, r, strict=True) if z_lo <= zi <= z_hi]
    for a in range(z.size - 1):
        for level in (z_lo, z_hi):
            dz = z[a + 1] - z[a]
            if dz != 0 and (z[a] - level) * (z[a + 1] - level) < 0:
                t = (level - z[a]) / dz
                pts.append((m[a] + t * (m[a + 1] - m[a]), r[a] + t * (r[a + 1] - r[a])))
    return pts


def redshift_window(sequences: list[tuple[str, EOSSequence]], observed_z: float, sigma: float,
                    *, meta: dict | None = None) -> ExportTable:
    """Per EOS, the stable-branch mass and radius range with z within observed_z +- sigma.

    The stable branch is the sweep's stable stars in central-density order
    closed by the maximum-mass star, taken as a polyline in (z, M, R):
    ranges come from the samples inside the window and the linearly
    interpolated crossings of its ends (no fresh solves).  ``observed_z``
    and ``sigma`` are plain numbers or dimensionless Quantities.
    """
    observed_z = float(units.to_unit(observed_z, units.DIMENSIONLESS, name="--observed-z"))
    sigma = float(units.to_unit(sigma, units.DIMENSIONLESS, name="--sigma"))
    if not sequences:
        raise InputError("--observed-z looks along [[eos]] sweeps, and the selection has none", key="--observed-z")
    if not (math.isfinite(observed_z) and observed_z > 0):
        raise InputError(f"needs a positive redshift, got {observed_z!r}", key="--observed-z")
    if not (math.isfinite(sigma) and sigma > 0):
        raise InputError(f"needs a positive sigma, got {sigma!r}", key="--sigma")
    z_lo, z_hi = observed_z - sigma, observed_z + sigma
    rows: dict[str, list] = {k: [] for k in ("eos", "n_stars", "mass_min", "mass_max", "radius_min",
                                             "radius_max", "branch_z_max", "status")}
    for label, seq in sequences:
        st = seq.stable
        order = np.argsort(np.asarray(seq["central_density"])[st])
        z = np.asarray(seq["surface_redshift"])[st][order]
        m = np.asarray(seq["mass"])[st][order]
        r = np.asarray(seq["radius"])[st][order]
        m_max, r_max = (float(seq.summary.get(k, np.nan)) for k in ("max_mass", "max_mass_radius"))
        if np.isfinite(m_max) and np.isfinite(r_max):
            z = np.append(z, exterior.redshift_at_radius(m_max, r_max))
            m, r = np.append(m, m_max), np.append(r, r_max)
        pts = np.array(_window_points(z, m, r, z_lo, z_hi)).reshape(-1, 2)
        z_top = float(z.max()) if z.size else float("nan")
        if pts.size == 0:
            status = "no stable star in the window"
        elif z_hi > z_top:
            status = "window reaches beyond the maximum-mass star"
        else:
            status = "ok"
        rows["eos"].append(label)
        rows["n_stars"].append(int(np.count_nonzero((z >= z_lo) & (z <= z_hi))))
        for k, col, f in (("mass_min", 0, np.min), ("mass_max", 0, np.max),
                          ("radius_min", 1, np.min), ("radius_max", 1, np.max)):
            rows[k].append(float(f(pts[:, col])) if pts.size else float("nan"))
        rows["branch_z_max"].append(z_top)
        rows["status"].append(status)
    cols = {k: np.array(v) for k, v in rows.items()}
    meta = dict(meta or {})
    meta["window"] = f"surface_redshift in [{z_lo:g}, {z_hi:g}] (observed {observed_z:g} +- {sigma:g})"
    return ExportTable(
        columns=cols,
        units=dict(WINDOW_UNITS),
        descriptions={
            "eos": "EOS name", "n_stars": "sampled stable stars inside the window",
            "mass_min": "lowest stable-branch mass in the window", "mass_max": "highest one",
            "radius_min": "smallest radius in the window", "radius_max": "largest one",
            "branch_z_max": "largest surface redshift of the stable branch (maximum-mass star)",
            "status": "ok, or why the range is empty or open-ended",
        },
        meta=meta,
    )


# --- writers and the reader ---------------------------------------------------

#: Characters of a text field that plain CSV readers without quoting (numpy.genfromtxt) or with
#: comments ("#") would split or cut; written percent-encoded (RFC 3986 style), "%" first.
_CSV_UNSAFE = {"%": "%25", ",": "%2C", '"': "%22", "#": "%23"}


def _csv_safe(text: str) -> str:
    for char, code in _CSV_UNSAFE.items():
        text = text.replace(char, code)
    return text


def _csv_table(table: ExportTable):
    """The astropy Table for plain CSV: text columns made safe for readers without quoting, no metadata."""
    t = table._astropy()
    t.meta.clear()
    for name in t.colnames:
        if t[name].dtype.kind == "U":
            t[name] = np.array([_csv_safe(str(v)) for v in t[name]], dtype=str)
    return t


def _write_atomically(path: Path, write) -> None:
    """Run ``write(temporary path)`` in ``path``'s folder, then rename onto ``path``: never half a file."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=path.suffix, dir=path.parent)
    os.close(fd)
    try:
        write(Path(tmp))
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_table(table: ExportTable, path: str | Path) -> Path:
    """Write ``table`` as ECSV, CSV or HDF5 according to the extension of ``path``, through astropy.

    The file appears whole or not at all (written under a temporary name, then renamed).

    Raises
    ------
    InputError
        For an extension not in :data:`TABLE_FORMATS`, a table without rows,
        or an unwritable path (a :class:`~stellar_match.errors.StorageError`).
    """
    import warnings

    path = check_output_path(path, TABLE_FORMATS)
    if len(table) == 0:
        raise InputError("nothing to write: the table has no rows", source=str(path))
    suffix = path.suffix.lower()
    if not path.parent.is_dir():
        raise StorageError("folder does not exist; create it first", source=str(path.parent))

    def write(tmp: Path) -> None:
        with warnings.catch_warnings():
            # astropy warns that HDF5 text is stored as UTF-8 bytes: that is the documented layout
            warnings.simplefilter("ignore")
            if suffix == ".ecsv":
                table._astropy().write(tmp, format="ascii.ecsv", overwrite=True)
            elif suffix == ".csv":
                _csv_table(table).write(tmp, format="ascii.csv", overwrite=True)
            else:
                table._astropy().write(tmp, format="hdf5", path="table", serialize_meta=True, overwrite=True)

    try:
        _write_atomically(path, write)
    except OSError as exc:
        raise StorageError.from_os_error(exc, "cannot write the table", source=str(path)) from None
    return path


def read_table(path: str | Path):
    """Read an export back as an ``astropy.table.QTable`` with its units, whatever its format.

    ECSV and HDF5 carry their units and metadata; a plain CSV gets the
    units of :data:`COLUMN_UNITS` for its column names, ``True``/``False``
    columns as booleans and its percent-encoded text decoded.

    Raises
    ------
    InputError
        For a missing or unreadable file, or an extension not in :data:`TABLE_FORMATS`.
    """
    from astropy.io import ascii as astropy_ascii
    from astropy.table import QTable, Table

    path = check_output_path(path, TABLE_FORMATS)
    suffix = path.suffix.lower()
    try:
        if suffix == ".ecsv":
            t = Table.read(path, format="ascii.ecsv")
        elif suffix == ".csv":
            header = path.read_text(encoding="utf-8").split("\n", 1)[0].split(",")
            bools = {n: [astropy_ascii.convert_numpy(bool)] for n in ("stable",) if n in header}
            t = Table.read(path, format="ascii.csv", converters=bools,
                           units={k: v for k, v in COLUMN_UNITS.items() if k in header})
            for name in t.colnames:
                if t[name].dtype.kind == "U":
                    t[name] = [urllib.parse.unquote(str(v)) for v in t[name]]
        else:
            t = Table.read(path, path="table", character_as_bytes=False)
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot read the table ({exc})", source=str(path)) from None
    return QTable(t)


def format_text_table(table: ExportTable, float_spec: str = ".4g") -> str:
    """Aligned plain text of a (small) table, with a units row, for the terminal."""
    names = list(table.columns)
    unit_row = [f"[{table.units[k]}]" if table.units.get(k) else "" for k in names]
    body = [[format(v, float_spec) if isinstance(v, float | np.floating) else str(v) for v in row]
            for row in zip(*(table.columns[k].tolist() for k in names), strict=True)]
    widths = [max(len(r[i]) for r in (names, unit_row, *body)) for i in range(len(names))]
    return "\n".join("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
                     for r in (names, unit_row, *body))
