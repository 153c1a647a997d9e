"""Checks every run file against the schema when it is opened.

A run file comes from outside: it may be copied half-way, edited by hand
with h5py, written by a newer version or be some other HDF5 file.  The
readers (:func:`stellar_match.runfile.read_run` and everything built on it:
``summary``, ``overlay``, ``redshift``) therefore look at every group,
dataset and attribute the schema (:mod:`stellar_match.schema`) names before
they use any of it.  The first problem found is raised as one
:class:`~stellar_match.errors.RunFileError` naming the file and the HDF5 path
of the offending object, so a damaged file never ends in a traceback or in a
table printed from half-valid data.

Only metadata is read (attributes, shapes, dtypes): checking a run file with
10^8 ensemble stars costs as much as checking one with ten.
"""

from __future__ import annotations

import json
import tomllib
from typing import Any

import h5py
import numpy as np

from .errors import RunFileError
from .schema import (
    BINARY_DATASETS,
    DATASET_SINCE_VERSION,
    DIMENSIONS,
    DIMENSIONS_SINCE_VERSION,
    FORMAT,
    FORMAT_VERSION,
    MEMBER_SUMMARIES,
    OPTIONAL_STAR_DATASETS,
    RADIAL_MODE_2D,
    RADIAL_MODE_DATASETS,
    READABLE_VERSIONS,
    STAR_DATASETS,
    SUMMARY_ATTRIBUTES,
    TARGET_DATASETS,
    accepted_units,
    dataset_dtype,
)

__all__ = ["check_run_file"]

#: Root attributes besides ``format`` and ``format_version``; all are strings.
ROOT_TEXT_ATTRIBUTES = ("software_version", "created_utc", "config_toml")
#: The sweep quantities an ensemble's ``sweep_values`` may hold.
SWEEP_QUANTITIES = ("central_density", "central_pressure")


class _Problem(Exception):
    """The first schema violation: where (HDF5 path) and what."""

    def __init__(self, where: str, message: str) -> None:
        super().__init__(message)
        self.where, self.message = where, message


def check_run_file(f: h5py.File, path: str) -> int:
    """Check an open run file against the schema; return its format version.

    Parameters
    ----------
    f : h5py.File
        The file, open for reading.
    path : str
        Its name, for the error message.

    Returns
    -------
    int
        The file's ``format_version`` (one of :data:`~stellar_match.schema.READABLE_VERSIONS`).

    Raises
    ------
    RunFileError
        Naming ``path`` and the HDF5 path of the first object that is
        missing, of the wrong type, shape or dtype, or inconsistent with
        the others.
    """
    try:
        version = _check_root(f)
        for name, obj in f["eos"].items():
            _check_eos_group(obj, f"/eos/{name}", version)
        if "ensemble" in f:
            ensembles = _group(f, "ensemble", "/ensemble")
            for name, obj in ensembles.items():
                _check_ensemble_group(obj, f"/ensemble/{name}", version)
    except _Problem as problem:
        raise RunFileError(problem.message, source=str(path), key=problem.where) from None
    except (KeyError, OSError, RuntimeError) as exc:
        # h5py raises these for dangling links and damaged object headers
        raise RunFileError(f"damaged HDF5 structure ({_first_line(exc)})", source=str(path)) from None
    return version


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


# -- attributes ------------------------------------------------------------------

def _describe(value: Any) -> str:
    if isinstance(value, np.ndarray):
        return f"an array of shape {value.shape}"
    text = repr(value.item() if isinstance(value, np.generic) else value)
    return f"{type(value).__name__} {text[:40]}"


def _attr(obj, name: str, where: str, *, required: bool = True) -> Any:
    if name not in obj.attrs:
        if required:
            raise _Problem(f"{where} attribute {name}", "missing")
        return None
    return obj.attrs[name]


def _text_attr(obj, name: str, where: str, *, required: bool = True) -> str | None:
    value = _attr(obj, name, where, required=required)
    if value is None:
        return None
    if isinstance(value, bytes):
        try:
            value = value.decode()
        except UnicodeDecodeError:
            raise _Problem(f"{where} attribute {name}", "needs UTF-8 text") from None
    if not isinstance(value, str):
        raise _Problem(f"{where} attribute {name}", f"needs a string, got {_describe(value)}")
    return value


def _json_attr(obj, name: str, where: str, *, required: bool = True, mapping: bool = True) -> Any:
    text = _text_attr(obj, name, where, required=required)
    if text is None:
        return None
    try:
        value = json.loads(text)
    except ValueError:
        raise _Problem(f"{where} attribute {name}", "is not valid JSON") from None
    if mapping and not isinstance(value, dict):
        raise _Problem(f"{where} attribute {name}", f"needs a JSON object, got {type(value).__name__}")
    return value


def _number_attr(obj, name: str, where: str) -> None:
    value = _attr(obj, name, where)
    if isinstance(value, bool | np.bool_) or not isinstance(value, int | float | np.integer | np.floating):
        raise _Problem(f"{where} attribute {name}", f"needs a number, got {_describe(value)}")


def _bool_attr(obj, name: str, where: str) -> None:
    value = _attr(obj, name, where)
    if not isinstance(value, bool | np.bool_):
        raise _Problem(f"{where} attribute {name}", f"needs true/false, got {_describe(value)}")


# -- groups and datasets ---------------------------------------------------------

def _group(parent, name: str, where: str) -> h5py.Group:
    if name not in parent:
        raise _Problem(where, "missing group")
    obj = parent[name]
    if not isinstance(obj, h5py.Group):
        raise _Problem(where, "needs a group, found a dataset")
    return obj


#: Value ranges of the crust datasets; NaN is always allowed (a star without a result).
_CRUST_RANGES = {"crust_thickness": (0.0, np.inf), "crust_mass": (0.0, np.inf), "crust_inertia_fraction": (0.0, 1.0)}


def _crust_range(d: h5py.Dataset, name: str, where: str) -> None:
    """A crust dataset must hold NaN or values in its range (a thickness or mass below 0, a fraction above 1)."""
    if name not in _CRUST_RANGES:
        return
    lo, hi = _CRUST_RANGES[name]
    values = np.asarray(d[()], dtype=float)
    bad = np.isfinite(values) & ~((values >= lo - 1e-12) & (values <= hi + 1e-12)) | np.isinf(values)
    if bad.any():
        raise _Problem(where, f"holds {values[bad][0]!r} at star {int(np.flatnonzero(bad)[0])}, outside [{lo}, {hi}]")


def _dataset(g: h5py.Group, name: str, where: str, *, kind: str, ndim: int, unit: str | None,
             shape: tuple[int, ...] | None = None, version: int = FORMAT_VERSION) -> h5py.Dataset:
    """The dataset ``g[name]``, checked for presence, rank, dtype kind, shape and unit.

    ``unit`` is the schema's spelling; files of older ``version`` may carry the old one.
    """
    if name not in g:
        raise _Problem(where, "missing dataset")
    d = g[name]
    if not isinstance(d, h5py.Dataset):
        raise _Problem(where, "needs a dataset, found a group")
    if d.ndim != ndim:
        raise _Problem(where, f"needs {ndim} dimension(s), has shape {d.shape}")
    if d.dtype.kind not in kind:
        want = {"f": "floating-point", "b": "boolean", "iu": "integer"}.get(kind, kind)
        raise _Problem(where, f"needs {want} values, has dtype {d.dtype}")
    if shape is not None and d.shape != shape:
        raise _Problem(where, f"has shape {d.shape}, the rest of its group {shape}")
    if unit is not None:
        got = _text_attr(d, "unit", where)
        allowed = accepted_units(unit, version)
        if got not in allowed:
            raise _Problem(f"{where} attribute unit", f"is {got!r}; the schema says "
                           f"{' or '.join(map(repr, allowed))} (format version {version})")
    return d


def _scale(g: h5py.Group, name: str, where: str, length: int, version: int) -> None:
    """The index dimension scale ``name`` of a group: required from format 3 on, checked when present."""
    if name not in g:
        if version >= DIMENSIONS_SINCE_VERSION:
            raise _Problem(f"{where}/{name}", "missing dimension scale")
        return
    d = _dataset(g, name, f"{where}/{name}", kind="iu", ndim=1, unit=None, shape=(length,))
    if version >= DIMENSIONS_SINCE_VERSION and not d.is_scale:
        raise _Problem(f"{where}/{name}", "needs to be an HDF5 dimension scale")


def _kind_of(name: str) -> str:
    kind = np.dtype(dataset_dtype(name)).kind
    return "iu" if kind in "iu" else kind


def _star_datasets(version: int) -> dict[str, str]:
    """Per-star dataset -> unit, as present in files of ``version``."""
    return {k: unit for k, (unit, _) in STAR_DATASETS.items() if DATASET_SINCE_VERSION.get(k, 1) <= version}


# -- the parts of a run file ------------------------------------------------------

def _check_root(f: h5py.File) -> int:
    fmt = f.attrs.get("format")
    if isinstance(fmt, bytes):
        fmt = fmt.decode(errors="replace")
    if fmt != FORMAT:
        found = "missing" if fmt is None else f"is {_describe(fmt)}"
        raise _Problem("/ attribute format", f"not a {FORMAT} file (format attribute {found})")
    version = _attr(f, "format_version", "/")
    if isinstance(version, bool | np.bool_) or not isinstance(version, int | np.integer):
        raise _Problem("/ attribute format_version", f"needs an integer, got {_describe(version)}")
    version = int(version)
    readable = ", ".join(map(str, READABLE_VERSIONS))
    if version > FORMAT_VERSION:
        raise _Problem("/ attribute format_version",
                       f"format_version {version} is newer than this software reads ({readable})")
    if version not in READABLE_VERSIONS:
        raise _Problem("/ attribute format_version", f"format_version {version} is not one this software "
                       f"reads ({readable})")
    if not isinstance(f.get("eos"), h5py.Group):
        raise _Problem("/eos", "incomplete run file: no /eos group")
    for name in ROOT_TEXT_ATTRIBUTES:
        _text_attr(f, name, "/")
    try:
        config = tomllib.loads(_text_attr(f, "config_toml", "/"))
    except tomllib.TOMLDecodeError:
        raise _Problem("/ attribute config_toml", "is not valid TOML") from None
    # redshift --masses solves fresh stars with the run's step scale: it must be usable
    solver = config.get("solver", {})
    scale = solver.get("step_scale", 1.0) if isinstance(solver, dict) else None
    if isinstance(scale, bool) or not isinstance(scale, int | float) or not 0 < scale < float("inf"):
        raise _Problem("/ attribute config_toml", f"[solver] step_scale needs a positive number, got {scale!r}")
    return version


def _check_eos_group(g, where: str, version: int) -> None:
    if not isinstance(g, h5py.Group):
        raise _Problem(where, "needs a group, found a dataset")
    kind = _text_attr(g, "kind", where)
    if not kind:
        raise _Problem(f"{where} attribute kind", "is empty")
    _json_attr(g, "parameters", where)
    _text_attr(g, "table_sha256", where, required=False)
    _json_attr(g, "star_status_meaning", where, required=version >= 2)
    for name in SUMMARY_ATTRIBUTES:
        if name == "causal":
            _bool_attr(g, name, where)
        elif name == "max_mass_status":
            _text_attr(g, name, where)
        else:
            _number_attr(g, name, where)
    shape = None
    for name, unit in _star_datasets(version).items():
        d = _dataset(g, name, f"{where}/{name}", kind=_kind_of(name), ndim=1, unit=unit, shape=shape,
                     version=version)
        shape = d.shape
    if shape == (0,):
        raise _Problem(f"{where}/central_density", "holds no stars")
    _scale(g, "star", where, shape[0], version)
    for name, obj in g.items():
        sub = f"{where}/{name}"
        if isinstance(obj, h5py.Dataset):
            if name in DIMENSIONS:
                if name not in ("star", "mode"):  # mode: radial modes
                    raise _Problem(sub, f"a {name!r} dimension scale belongs to a subgroup")
            # --- radial oscillation modes: stars x modes, or per star ---
            elif name in RADIAL_MODE_DATASETS:
                two_d = name in RADIAL_MODE_2D
                d = _dataset(g, name, sub, kind="fiub", ndim=2 if two_d else 1, unit=RADIAL_MODE_DATASETS[name][0],
                             version=version)
                if d.shape[0] != shape[0]:
                    raise _Problem(sub, f"has {d.shape[0]} rows for {shape[0]} stars")
            elif name in OPTIONAL_STAR_DATASETS:
                d = _dataset(g, name, sub, kind="f", ndim=1, unit=OPTIONAL_STAR_DATASETS[name][0], shape=shape,
                             version=version)
                _crust_range(d, name, sub)
            elif name not in STAR_DATASETS:  # read as a column too: it must line up with the stars
                _dataset(g, name, sub, kind="fiub", ndim=1, unit=None, shape=shape)
        elif name == "targets":
            n = _subgroup_datasets(obj, sub, TARGET_DATASETS, "target", version)
            status = obj.attrs.get("status")
            if status is not None and (np.ndim(status) != 1 or len(status) != n
                                       or not all(isinstance(s, str | bytes) for s in status)):
                raise _Problem(f"{sub} attribute status", f"needs {n} strings, one per target")
        elif name == "binaries":
            _subgroup_datasets(obj, sub, BINARY_DATASETS, "binary", version)
        else:
            raise _Problem(sub, "unknown group (an EOS group holds only targets and binaries)")


def _subgroup_datasets(g: h5py.Group, where: str, datasets: dict[str, str], dimension: str, version: int) -> int:
    """Check a ``targets`` / ``binaries`` subgroup: equal-length 1-D float datasets; return the length."""
    shape = None
    for name, unit in datasets.items():
        shape = _dataset(g, name, f"{where}/{name}", kind="f", ndim=1, unit=unit, shape=shape,
                         version=version).shape
    _scale(g, dimension, where, shape[0], version)
    for name, obj in g.items():
        if not isinstance(obj, h5py.Dataset):
            raise _Problem(f"{where}/{name}", "unexpected group")
        if name not in datasets and name != dimension:
            _dataset(g, name, f"{where}/{name}", kind="fiub", ndim=1, unit=None, shape=shape)
    return shape[0]


def _check_ensemble_group(g, where: str, version: int) -> None:
    if not isinstance(g, h5py.Group):
        raise _Problem(where, "needs a group, found a dataset")
    if not _text_attr(g, "kind", where):
        raise _Problem(f"{where} attribute kind", "is empty")
    _json_attr(g, "origin", where)
    meaning = _json_attr(g, "status_meaning", where)
    if not all(isinstance(k, str) and k.lstrip("-").isdigit() for k in meaning):
        raise _Problem(f"{where} attribute status_meaning", "needs integer status codes as keys")
    _json_attr(g, "star_status_meaning", where, required=version >= 2)
    quantity = _text_attr(g, "sweep_quantity", where)
    if quantity not in SWEEP_QUANTITIES:
        raise _Problem(f"{where} attribute sweep_quantity", f"needs one of {', '.join(SWEEP_QUANTITIES)}, "
                       f"got {quantity!r}")
    members = _group(g, "members", f"{where}/members")
    n_members = None
    for name in members:
        sub = f"{where}/members/{name}"
        shape = None if n_members is None else (n_members,)
        n_members = _dataset(members, name, sub, kind="f", ndim=1, unit=None, shape=shape).shape[0]
    if not n_members:
        raise _Problem(f"{where}/members", "holds no member parameters")
    values = _dataset(g, "sweep_values", f"{where}/sweep_values", kind="f", ndim=1, unit=None)
    if values.shape[0] == 0:
        raise _Problem(f"{where}/sweep_values", "holds no central values")
    grid = (n_members, values.shape[0])
    for name, unit in _star_datasets(version).items():
        _dataset(g, name, f"{where}/{name}", kind=_kind_of(name), ndim=2, unit=unit, shape=grid, version=version)
    for name, unit in MEMBER_SUMMARIES.items():
        _dataset(g, name, f"{where}/{name}", kind=_kind_of(name), ndim=1, unit=unit, shape=(n_members,),
                 version=version)
    _scale(g, "member", where, n_members, version)
    _scale(g, "star", where, values.shape[0], version)
    for name, obj in g.items():
        if (name == "members" or name in STAR_DATASETS or name in MEMBER_SUMMARIES or name == "sweep_values"
                or name in ("member", "star")):
            continue
        if name in OPTIONAL_STAR_DATASETS:
            _dataset(g, name, f"{where}/{name}", kind="f", ndim=2, unit=OPTIONAL_STAR_DATASETS[name][0], shape=grid,
                     version=version)
            continue
        if not isinstance(obj, h5py.Dataset):
            raise _Problem(f"{where}/{name}", "unknown group (an ensemble holds only members)")
        if obj.ndim == 1:  # read with the member summaries
            _dataset(g, name, f"{where}/{name}", kind="fiub", ndim=1, unit=None, shape=(n_members,))
