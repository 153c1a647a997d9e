"""Tables for spectral fitting: surface redshifts and gravities, as ECSV, CSV or HDF5.

Every table here is an :class:`ExportTable` -- named 1-D columns with a unit
string astropy understands and a description -- written by
:func:`write_table` in the format its file extension names:

* ``.ecsv``: the Enhanced Character Separated Values text format (Astropy
  APE 6, ECSV 1.0): a YAML header in ``#`` comment lines declares every
  column's name, datatype, unit and description, so ``astropy.table.Table.read``
  recovers the units.  Written here without astropy.
* ``.csv``: the header line, then a ``# units:`` comment line with one unit
  per column (empty: dimensionless or text), then ``#`` metadata lines; reads
  with ``numpy.genfromtxt(path, delimiter=",", names=True, dtype=None)``.
* ``.h5`` / ``.hdf5``: one dataset per column with ``unit`` and
  ``description`` attributes; metadata as root attributes.

The exterior formulas are those of :mod:`stellar_match.exterior`; the
regions no static star may enter are :data:`FORBIDDEN_REGIONS`.
"""

from __future__ import annotations

import csv
import io
import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np

from . import exterior, units
from .errors import InputError
from .sequence import EOSSequence

__all__ = [
    "FORBIDDEN_REGIONS",
    "CAUSALITY_RADIUS",
    "TABLE_FORMATS",
    "ExportTable",
    "parse_range",
    "select_sequences",
    "forbidden_region",
    "redshift_table",
    "redshift_table_at_masses",
    "redshift_grid",
    "redshift_window",
    "control_of_run",
    "check_output_path",
    "write_table",
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

#: Columns of the redshift tables: name -> (astropy unit string, description).
REDSHIFT_COLUMNS: dict[str, tuple[str, str]] = {
    "eos": ("", "EOS name (run-file group)"),
    "central_density": ("g / cm3", "central rest-mass density"),
    "mass": ("solMass", "gravitational mass"),
    "radius": ("km", "areal (circumferential) radius of the surface"),
    "compactness": ("", "GM/(Rc^2)"),
    "surface_redshift": ("", "z = (1 - 2GM/(Rc^2))^(-1/2) - 1"),
    "surface_gravity": ("cm / s2", "g = GM/(R^2 sqrt(1 - 2GM/(Rc^2)))"),
    "log10_surface_gravity": ("dex(cm / s2)", "log10 of g in cm/s2"),
    "apparent_radius": ("km", "R (1 + z), the radius seen from infinity"),
}


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


# --- arguments ----------------------------------------------------------------

#: Most values one MIN:MAX:STEP option may give.
MAX_RANGE_VALUES = 100_000
#: Most (M, R) points of a redshift grid: about 2 GB while it is built and
#: written (measured: 10^7 points peak at 2.0 GB), and far finer than any fit needs.
MAX_GRID_POINTS = 10**7

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


# --- physics of the tables --------------------------------------------------

def forbidden_region(mass_msun, radius_km) -> np.ndarray:
    """Name of the innermost forbidden region holding each (M, R), else "allowed".

    Boundaries (R in units of GM/c^2): horizon R <= 2, Buchdahl R <= 9/4,
    causality R < 2.9 (see :data:`FORBIDDEN_REGIONS`).
    """
    x = np.asarray(radius_km, dtype=float) / units.mass_to_geometric(np.asarray(mass_msun, dtype=float))
    region = np.full(x.shape, "allowed", dtype=object)
    region[x < FORBIDDEN_REGIONS["causality"][0]] = "causality"
    region[x <= FORBIDDEN_REGIONS["buchdahl"][0]] = "buchdahl"
    region[x <= FORBIDDEN_REGIONS["horizon"][0]] = "horizon"
    return region.astype(str)


def _surface_columns(mass, radius, redshift=None, gravity=None) -> dict[str, np.ndarray]:
    """compactness, z, g, log10 g and R(1+z) from M (Msun) and R (km)."""
    mass, radius = np.asarray(mass, dtype=float), np.asarray(radius, dtype=float)
    z = exterior.redshift_at_radius(mass, radius) if redshift is None else np.asarray(redshift, float)
    g = exterior.surface_gravity(mass, radius) if gravity is None else np.asarray(gravity, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        log_g = np.log10(g)
    return {
        "compactness": units.mass_to_geometric(mass) / radius,
        "surface_redshift": z,
        "surface_gravity": g,
        "log10_surface_gravity": log_g,
        "apparent_radius": radius * (1.0 + z),
    }


def _star_table(parts: list[tuple[str, dict[str, np.ndarray]]], meta: dict,
                requested: np.ndarray | None = None) -> ExportTable:
    columns: dict[str, list] = {k: [] for k in REDSHIFT_COLUMNS}
    for label, stars in parts:
        n = len(stars["mass"])
        derived = _surface_columns(stars["mass"], stars["radius"],
                                   stars.get("surface_redshift"), stars.get("surface_gravity"))
        if "compactness" in stars:  # the run's own value, bit for bit
            derived["compactness"] = np.asarray(stars["compactness"], dtype=float)
        columns["eos"].append(np.full(n, label, dtype=object))
        columns["central_density"].append(np.asarray(stars["central_density"], dtype=float))
        columns["mass"].append(np.asarray(stars["mass"], dtype=float))
        columns["radius"].append(np.asarray(stars["radius"], dtype=float))
        for k, v in derived.items():
            columns[k].append(v)
    data = {k: (np.concatenate(v) if v else np.zeros(0)) for k, v in columns.items()}
    data["eos"] = data["eos"].astype(str)
    unit_of = {k: u for k, (u, _) in REDSHIFT_COLUMNS.items()}
    text_of = {k: d for k, (_, d) in REDSHIFT_COLUMNS.items()}
    if requested is not None:  # the row key of a mass-sampled table, kept on NaN rows too
        data = {"eos": data.pop("eos"), "requested_mass": np.tile(requested, len(parts))} | data
        unit_of["requested_mass"] = "solMass"
        text_of["requested_mass"] = "mass asked for (--masses); the star's mass matches it to 1e-6"
    return ExportTable(columns=data, units=unit_of, descriptions=text_of, meta=meta)


def redshift_table(sequences: list[tuple[str, EOSSequence]], *, stable_only: bool = False,
                   meta: dict | None = None) -> ExportTable:
    """One row per star of the sweeps, in sweep order, with the redshift columns.

    ``compactness``, ``surface_redshift`` and ``surface_gravity`` are the
    run file's own values; ``log10_surface_gravity`` and ``apparent_radius``
    are derived from them.
    """
    parts = []
    for label, seq in sequences:
        keep = seq.stable if stable_only else np.ones(len(seq["mass"]), dtype=bool)
        parts.append((label, {k: np.asarray(seq[k])[keep] for k in ("central_density", "mass", "radius",
                                                                     "compactness", "surface_redshift",
                                                                     "surface_gravity")}))
    meta = dict(meta or {})
    meta["selection"] = "stable branch only" if stable_only else "every star of the sweep"
    return _star_table(parts, meta)


def redshift_table_at_masses(sequences: list[tuple[str, EOSSequence]], masses, *, control=None,
                             meta: dict | None = None) -> tuple[ExportTable, list[str]]:
    """Stable-branch stars of every EOS at the given masses, by fresh solves.

    Uses :func:`stellar_match.sweep.eos_from_sequence` and
    :func:`stellar_match.sweep.stars_at_masses` (mass to 1e-6 relative).
    A ``requested_mass`` column follows ``eos``.  Masses the stable branch
    does not reach give NaN rows (every column but ``eos`` and
    ``requested_mass``), and a note.

    Returns
    -------
    table : ExportTable
    notes : list of str
        One line per EOS with unreachable masses.
    """
    from .structure import DEFAULT_STEPS
    from .sweep import eos_from_sequence, stars_at_masses

    masses = np.atleast_1d(np.asarray(masses, dtype=float))
    parts, notes = [], []
    for label, seq in sequences:
        stars = stars_at_masses(eos_from_sequence(seq), seq, masses, control=control or DEFAULT_STEPS)
        missing = masses[~np.isfinite(stars["mass"])]
        if missing.size:
            notes.append(f"{label}: {missing.size} mass(es) not on the stable branch of the sweep "
                         f"(M_max = {seq.summary.get('max_mass', float('nan')):.4f} Msun): "
                         f"{', '.join(f'{m:g}' for m in missing)} -> NaN rows")
        parts.append((label, stars))
    meta = dict(meta or {})
    meta["selection"] = "stable branch at requested masses (fresh solves); NaN rows: mass not reached"
    meta["requested_masses_msun"] = " ".join(f"{m:g}" for m in masses)
    return _star_table(parts, meta, requested=masses), notes


def redshift_grid(masses, radii, *, meta: dict | None = None) -> ExportTable:
    """EOS-independent z and log10 g over every (M, R) pair, with its forbidden region.

    Rows run over radius fastest.  Inside the horizon z, g and log10 g are NaN.

    Raises
    ------
    InputError
        For more than :data:`MAX_GRID_POINTS` points, before anything is allocated.
    """
    points = np.size(masses) * np.size(radii)
    if points > MAX_GRID_POINTS:
        raise InputError(f"{np.size(masses)} masses x {np.size(radii)} radii = {points} points; at most "
                         f"{MAX_GRID_POINTS}", key="--grid-mass x --grid-radius")
    mm, rr = np.meshgrid(np.asarray(masses, dtype=float), np.asarray(radii, dtype=float), indexing="ij")
    m, r = mm.ravel(), rr.ravel()
    derived = _surface_columns(m, r)
    cols = {"mass": m, "radius": r} | derived | {"region": forbidden_region(m, r)}
    unit_of = {k: u for k, (u, _) in REDSHIFT_COLUMNS.items()}
    text_of = {k: d for k, (_, d) in REDSHIFT_COLUMNS.items()}
    text_of["region"] = "allowed, or the innermost forbidden region: causality, buchdahl, horizon"
    meta = dict(meta or {})
    meta["regions"] = "; ".join(f"{k}: R < {v[0]:g} GM/c^2 ({v[2]})" for k, v in FORBIDDEN_REGIONS.items())
    return ExportTable(cols, {k: unit_of.get(k, "") for k in cols}, {k: text_of[k] for k in cols}, meta)


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
    interpolated crossings of its ends (no fresh solves).
    """
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
        units={"mass_min": "solMass", "mass_max": "solMass", "radius_min": "km", "radius_max": "km"},
        descriptions={
            "eos": "EOS name", "n_stars": "sampled stable stars inside the window",
            "mass_min": "lowest stable-branch mass in the window", "mass_max": "highest one",
            "radius_min": "smallest radius in the window", "radius_max": "largest one",
            "branch_z_max": "largest surface redshift of the stable branch (maximum-mass star)",
            "status": "ok, or why the range is empty or open-ended",
        },
        meta=meta,
    )


# --- writers ------------------------------------------------------------------

def _datatype(values: np.ndarray) -> str:
    if values.dtype.kind == "b":
        return "bool"
    if values.dtype.kind in "iu":
        return "int64"
    if values.dtype.kind == "f":
        return "float64"
    return "string"


def _text(value, dtype: str) -> str:
    if dtype == "float64":
        return repr(float(value))
    if dtype == "bool":
        return "True" if value else "False"
    return str(value)


def _rows(table: ExportTable, dtypes: list[str]):
    cols = list(table.columns.values())
    for i in range(len(table)):
        yield [_text(c[i], d) for c, d in zip(cols, dtypes, strict=True)]


def _yaml(value: str) -> str:
    """A YAML double-quoted scalar (JSON strings are valid YAML)."""
    return json.dumps(str(value))


def ecsv_text(table: ExportTable) -> str:
    """The table as ECSV 1.0 text (Astropy APE 6), space-delimited."""
    dtypes = [_datatype(np.asarray(v)) for v in table.columns.values()]
    out = io.StringIO()
    out.write("# %ECSV 1.0\n# ---\n# datatype:\n")
    for (name, _), dtype in zip(table.columns.items(), dtypes, strict=True):
        fields = [f"name: {name}"]
        if table.units.get(name):
            fields.append(f"unit: {_yaml(table.units[name])}")
        fields.append(f"datatype: {dtype}")
        if table.descriptions.get(name):
            fields.append(f"description: {_yaml(table.descriptions[name])}")
        out.write("# - {" + ", ".join(fields) + "}\n")
    if table.meta:
        out.write("# meta:\n")
        for k, v in table.meta.items():
            out.write(f"#   {k}: {_yaml(v)}\n")
    writer = csv.writer(out, delimiter=" ", quotechar='"', lineterminator="\n")
    writer.writerow(list(table.columns))
    writer.writerows(_rows(table, dtypes))
    return out.getvalue()


def csv_text(table: ExportTable) -> str:
    """The table as CSV: header, ``# units:`` line, ``#`` metadata lines, rows."""
    dtypes = [_datatype(np.asarray(v)) for v in table.columns.values()]
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(list(table.columns))
    out.write("# units: " + ",".join(table.units.get(k, "") for k in table.columns) + "\n")
    for k, v in table.meta.items():
        out.write(f"# {k}: {' '.join(str(v).splitlines())}\n")
    writer.writerows(_rows(table, dtypes))
    return out.getvalue()


def _write_hdf5(table: ExportTable, path: Path) -> None:
    with h5py.File(path, "w", track_order=True) as f:
        f.attrs["format"] = "stellar_match.table"
        for k, v in table.meta.items():
            f.attrs[k] = str(v)
        for name, values in table.columns.items():
            values = np.asarray(values)
            if _datatype(values) == "string":
                d = f.create_dataset(name, data=values.astype(object), dtype=h5py.string_dtype())
            else:
                d = f.create_dataset(name, data=values)
            d.attrs["unit"] = table.units.get(name, "")
            d.attrs["description"] = table.descriptions.get(name, "")


def write_table(table: ExportTable, path: str | Path) -> Path:
    """Write ``table`` as ECSV, CSV or HDF5 according to the extension of ``path``.

    Raises
    ------
    InputError
        For an extension not in :data:`TABLE_FORMATS` or an unwritable path.
    """
    path = check_output_path(path, TABLE_FORMATS)
    suffix = path.suffix.lower()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        if suffix == ".ecsv":
            path.write_text(ecsv_text(table), encoding="utf-8")
        elif suffix == ".csv":
            path.write_text(csv_text(table), encoding="utf-8")
        else:
            _write_hdf5(table, path)
    except OSError as exc:
        raise InputError(f"cannot write here ({exc.strerror or exc})", source=str(path)) from None
    return path


def format_text_table(table: ExportTable, float_spec: str = ".4g") -> str:
    """Aligned plain text of a (small) table, with a units row, for the terminal."""
    names = list(table.columns)
    unit_row = [f"[{table.units[k]}]" if table.units.get(k) else "" for k in names]
    body = [[format(v, float_spec) if isinstance(v, float | np.floating) else str(v) for v in row]
            for row in zip(*(table.columns[k].tolist() for k in names), strict=True)]
    widths = [max(len(r[i]) for r in (names, unit_row, *body)) for i in range(len(names))]
    return "\n".join("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
                     for r in (names, unit_row, *body))
