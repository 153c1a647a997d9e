"""HDF5 run files: one self-describing file per sweep.

Layout (``format`` = "stellar_match.run", ``format_version`` = 3; names and units in
:mod:`stellar_match.schema`)::

    /                       attrs: format, format_version, software_version,
                                   created_utc, config_toml
    /eos/<name>/            attrs: kind, parameters (JSON), table_sha256 (tables),
                                   causal, max_sound_speed_squared, max_mass,
                                   max_mass_radius, max_mass_central_density,
                                   max_mass_status, star_status_meaning (JSON)
        <dataset>           1-D, one entry per star in sweep order, attr unit
        star                dimension scale 0..n-1 of every dataset above
        targets/            (with [sweep] target_masses) one entry per requested mass,
                            attr status: per-target "found" or why the row is NaN;
                            dimension scale "target"
        binaries/           (with [sweep] binaries) one entry per pair; dimension scale "binary"
    /ensemble/<name>/       2-D datasets (member x star), 1-D summaries (member),
                            sweep_values (star), members/<parameter> (member);
                            dimension scales "member" and "star"

The datasets and their units are listed in :data:`STAR_DATASETS`; unit
attributes use astropy's spelling (``solMass``, ``g / cm3``, ``""``), and the
dimension scales are HDF5's (``H5DS``), which netCDF-4 readers and xarray's
``h5netcdf`` engine show as named dimensions.

Writing follows the pattern of an HDF5 sampler backend: resizable datasets
grow chunk by chunk as stars are solved and are flushed after each chunk;
everything goes to ``<name>.partial``, which is fsynced and renamed onto the
final name only when the sweep is complete (and the folder fsynced), so an
interrupted sweep never leaves a half-written file under the requested name.

HDF5 writes through :class:`_GuardedFile`: a failed write (disk full, a
file-size limit) is recorded there and reported as
:class:`~stellar_match.errors.StorageError` instead of reaching HDF5, whose
state after a failed write is broken (closing such a file, or the
interpreter's exit, crashes the process).
"""

from __future__ import annotations

import datetime as _dt
import io
import json
import os
from pathlib import Path

import h5py
import numpy as np

from .errors import RunFileError, StorageError
from .runfile_check import check_run_file
from .schema import (
    BINARY_DATASETS,
    DIMENSIONS,
    FORMAT,
    FORMAT_VERSION,
    MEMBER_PARAMETER_UNITS,
    MEMBER_STATUS,
    MEMBER_SUMMARIES,
    OPTIONAL_STAR_DATASETS,
    PRIOR_WEIGHT,
    RADIAL_MODE_2D,
    STAR_DATASETS,
    STAR_STATUS,
    SWEEP_UNITS,
    TARGET_DATASETS,
    dataset_dtype,
)
from .sequence import EOSSequence

__all__ = [
    "STAR_DATASETS", "TARGET_DATASETS", "BINARY_DATASETS", "FORMAT", "FORMAT_VERSION",
    "RunFileWriter", "RunFile", "read_run",
]

def _software_version() -> str:
    from . import __version__

    return __version__


def _partial_name(path: Path) -> Path:
    return path.with_name(path.name + ".partial")


class _GuardedFile(io.FileIO):
    """A file for h5py's file-object driver that never fails a write towards HDF5.

    The first ``OSError`` of a write or truncate is kept in :attr:`failure`
    and later writes are dropped; :class:`RunFileWriter` checks it after each
    flush and gives up with a :class:`StorageError`.  The file is deleted
    then, so the dropped bytes never matter.
    """

    failure: OSError | None = None

    def write(self, data) -> int:
        view = memoryview(data).cast("B")
        if self.failure is None:
            try:
                done = 0
                while done < len(view):  # a nearly full disk may take only part of a write
                    done += super().write(view[done:])
            except OSError as exc:
                self.failure = exc
        return len(view)

    def truncate(self, size: int | None = None) -> int:
        if self.failure is None:
            try:
                return super().truncate(size)
            except OSError as exc:
                self.failure = exc
        return self.tell() if size is None else size


def _fsync_folder(folder: Path) -> None:
    """Make a rename in ``folder`` durable (POSIX; a no-op where folders cannot be opened)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass  # some file systems refuse fsync on folders; the rename itself is done
    finally:
        os.close(fd)


class RunFileWriter:
    """Write a run file chunk by chunk; rename into place on :meth:`close`.

    Parameters
    ----------
    path : str or Path
        Final file name.
    config_text : str
        The full config, stored verbatim for reproducibility.
    force : bool
        Overwrite an existing file at ``path``.
    compression : {None, "gzip"}
        Compress the per-star datasets (of ``/eos/<name>`` groups and
        ensembles) with gzip and the byte-shuffle filter; readers need no
        option for it.
    compression_level : int
        gzip level, 1 (fastest) to 9 (smallest).

    Raises
    ------
    RunFileError
        If ``path`` exists and ``force`` is false, or is a folder.
    StorageError
        If its folder does not exist, or the file cannot be written (disk
        full, a file-size limit, permissions); the partial file is deleted
        then.
    """

    def __init__(self, path: str | Path, *, config_text: str, force: bool = False,
                 compression: str | None = None, compression_level: int = 4) -> None:
        self.path = Path(path)
        self._pending_2d: dict[tuple[str, str], tuple[str, str]] = {}  # radial modes, see start_eos
        if compression not in (None, "gzip"):
            raise ValueError(f"unknown compression {compression!r}")
        self._filters = ({"compression": "gzip", "compression_opts": int(compression_level), "shuffle": True}
                         if compression else {})
        if self.path.is_dir():  # found now, not by the rename after the whole sweep
            raise RunFileError("is a folder; give a file name for the run file", source=str(self.path))
        if self.path.exists() and not force:
            raise RunFileError("exists already; pass --force to overwrite it", source=str(self.path))
        if not self.path.parent.is_dir():  # a typo in a path should not grow a folder tree
            raise StorageError("folder does not exist; create it first", source=str(self.path.parent))
        self.partial = _partial_name(self.path)
        try:
            self._raw = _GuardedFile(self.partial, "w+")
        except OSError as exc:
            raise StorageError.from_os_error(exc, "cannot write the run file", source=str(self.partial)) from None
        try:
            self._file = h5py.File(self._raw, "w", track_order=True)
        except BaseException:
            self._raw.close()
            self.partial.unlink(missing_ok=True)
            raise
        a = self._file.attrs
        a["format"] = FORMAT
        a["format_version"] = FORMAT_VERSION
        a["software_version"] = _software_version()
        a["created_utc"] = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
        a["config_toml"] = config_text
        self._file.create_group("eos", track_order=True)
        self._flush()

    @staticmethod
    def partial_path(path: str | Path) -> Path:
        """Where the writer of ``path`` keeps the file until it is complete."""
        return _partial_name(Path(path))

    def _flush(self) -> None:
        """Flush to disk and stop at the first failed write."""
        self._file.flush()
        self._check_storage()

    def _check_storage(self) -> None:
        if self._raw.failure is not None:
            raise StorageError.from_os_error(self._raw.failure, "cannot write the run file",
                                             source=str(self.partial))

    # -- the sink interface used by sweep_eos --------------------------------
    def start_eos(self, name: str, kind: str, parameters: dict, table_sha256: str | None,
                  columns: dict[str, tuple[str, str]]) -> None:
        """Create ``/eos/<name>`` with empty resizable datasets."""
        g = self._file["eos"].create_group(name, track_order=True)
        g.attrs["kind"] = kind
        g.attrs["parameters"] = json.dumps(parameters, default=str)
        if table_sha256:
            g.attrs["table_sha256"] = table_sha256
        g.attrs["star_status_meaning"] = json.dumps({str(k): v for k, v in STAR_STATUS.items()})
        for col, (unit, meaning) in columns.items():
            if col in RADIAL_MODE_2D:  # stars x modes: created at the first chunk, which knows the modes
                self._pending_2d[(name, col)] = (unit, meaning)
                continue
            d = g.create_dataset(col, shape=(0,), maxshape=(None,), dtype=dataset_dtype(col), chunks=(4096,),
                                 **self._filters)
            d.attrs["unit"] = unit
            d.attrs["description"] = meaning
        self._flush()

    def append(self, name: str, chunk: dict[str, np.ndarray]) -> None:
        """Append one chunk of stars (every per-star column but ``stable``)."""
        g = self._file["eos"][name]
        for col, values in chunk.items():
            pending = self._pending_2d.pop((name, col), None)
            if pending is not None:
                d = g.create_dataset(col, shape=(0, values.shape[1]), maxshape=(None, values.shape[1]),
                                     dtype=float, chunks=(max(1, 4096 // values.shape[1]), values.shape[1]),
                                     **self._filters)
                d.attrs["unit"], d.attrs["description"] = pending
            d = g[col]
            n = d.shape[0]
            d.resize((n + len(values),) + d.shape[1:])
            d[n:] = values
        self._flush()

    def finish_eos(self, name: str, late_columns: dict[str, np.ndarray], summary: dict,
                   groups: dict | None = None) -> None:
        """Write columns known only for the whole sequence, the summary and subgroups."""
        g = self._file["eos"][name]
        for col, values in late_columns.items():
            d = g[col]
            d.resize((len(values),))
            d[:] = values
        for k, v in summary.items():
            g.attrs[k] = v
        _attach_scales(g, ["star"])
        _attach_mode_scale(g)
        for sub, datasets in (groups or {}).items():
            sg = g.create_group(sub)
            for k, v in datasets.get("attrs", {}).items():
                sg.attrs[k] = v
            for col, (values, unit) in datasets["data"].items():
                d = sg.create_dataset(col, data=values)
                d.attrs["unit"] = unit
            _attach_scales(sg, [_SUBGROUP_DIMENSION.get(sub, sub)])
        self._flush()

    def write_ensemble(self, spec, axis, parts) -> None:
        """Write ``/ensemble/<name>`` from (task, arrays) parts in member order.

        2-D datasets (members x stars) are created full size and filled part
        by part, so memory does not grow with the number of members.
        """
        g = self._file.require_group("ensemble").create_group(spec.name, track_order=True)
        g.attrs["kind"] = spec.kind
        g.attrs["origin"] = json.dumps(spec.origin)
        g.attrs["status_meaning"] = json.dumps({str(k): v for k, v in MEMBER_STATUS.items()})
        g.attrs["sweep_quantity"] = axis.quantity
        members = g.create_group("members")
        for j, name in enumerate(spec.parameter_names):
            members.create_dataset(name, data=spec.parameters[:, j])
        if getattr(spec, "prior_weight", None) is not None:
            d = g.create_dataset(PRIOR_WEIGHT, data=np.asarray(spec.prior_weight, dtype=float))
            d.attrs["unit"] = ""
            d.attrs["description"] = "prior weight of each member (the members CSV's weight column)"
        ax = g.create_dataset("sweep_values", data=axis.values)
        ax.attrs["unit"] = SWEEP_UNITS[axis.quantity]
        ax.attrs["quantity"] = axis.quantity
        n, m = spec.size, axis.values.size
        chunk_rows = max(1, min(n, 2**16 // max(m, 1)))
        g.attrs["star_status_meaning"] = json.dumps({str(k): v for k, v in STAR_STATUS.items()})
        star_datasets = STAR_DATASETS | {k: OPTIONAL_STAR_DATASETS[k] for k in getattr(spec, "extra_datasets", ())}
        for col, (unit, meaning) in star_datasets.items():
            d = g.create_dataset(col, shape=(n, m), dtype=dataset_dtype(col), chunks=(chunk_rows, m),
                                 **self._filters)
            d.attrs["unit"] = unit
            d.attrs["description"] = meaning
        for col, unit in MEMBER_SUMMARIES.items():
            d = g.create_dataset(col, shape=(n,), dtype=dataset_dtype(col))
            d.attrs["unit"] = unit
        _attach_scales(g, ["member", "star"], sizes={"member": n, "star": m})
        for d in members.values():
            d.dims[0].attach_scale(g["member"])
        for task, arrays in parts:
            for col in (*star_datasets, *MEMBER_SUMMARIES):
                g[col][task.start : task.stop] = arrays[col]
            self._flush()

    def discard(self) -> None:
        """Close and delete the partial file (the caller keeps its parts elsewhere)."""
        self.abort()
        try:
            self.partial.unlink(missing_ok=True)
        except OSError:
            pass  # e.g. the folder became read-only; nothing under the final name either way

    def close(self) -> Path:
        """Close, fsync and move the completed file onto its final name.

        Raises
        ------
        StorageError
            If any byte could not be written; the file is then not renamed
            (call :meth:`discard`).
        """
        self._file.close()
        self._check_storage()
        try:
            self._raw.flush()
            os.fsync(self._raw.fileno())  # the data is on disk before the name says "complete"
        except OSError as exc:
            raise StorageError.from_os_error(exc, "cannot write the run file", source=str(self.partial)) from None
        self._raw.close()
        os.replace(self.partial, self.path)
        _fsync_folder(self.path.parent)
        return self.path

    def abort(self) -> Path:
        """Close after an interruption, keeping ``<name>.partial`` for inspection."""
        try:
            self._file.close()
        except Exception:  # noqa: BLE001 - the file may already be unusable
            pass
        try:
            self._raw.close()
        except OSError:
            pass
        return self.partial


#: The dimension scale of each subgroup of an ``/eos/<name>`` group.
_SUBGROUP_DIMENSION = {"targets": "target", "binaries": "binary"}


def _attach_mode_scale(g: h5py.Group) -> None:
    """The ``mode`` dimension scale of the stars x modes datasets of radial modes, if any."""
    two_d = [g[k] for k in RADIAL_MODE_2D if k in g]
    if not two_d:
        return
    scale = g.create_dataset("mode", data=np.arange(two_d[0].shape[1], dtype=np.int32))
    scale.make_scale("mode")
    scale.attrs["description"] = DIMENSIONS["mode"]
    for d in two_d:
        d.dims[1].attach_scale(scale)


def _attach_scales(g: h5py.Group, names: list[str], sizes: dict[str, int] | None = None) -> None:
    """Create index dimension scales ``names`` in ``g`` and attach them to its datasets.

    One name: the scale's length is that of the (equal-length, 1-D) datasets of
    the group.  Two names (ensembles): the first labels axis 0 and the second
    axis 1 of 2-D datasets; 1-D datasets get the one of their length, which
    ``sizes`` gives.
    """
    datasets = [d for k, d in g.items() if isinstance(d, h5py.Dataset) and k not in DIMENSIONS]
    if sizes is None:
        sizes = {names[0]: datasets[0].shape[0] if datasets else 0}
    scales = {}
    for name in names:
        # int32 holds every index the size limits allow (10^7 stars, 10^6 members)
        scale = g.create_dataset(name, data=np.arange(sizes[name], dtype=np.int32))
        scale.make_scale(name)
        scale.attrs["description"] = DIMENSIONS[name]
        scales[name] = scale
    for d in datasets:
        if d.ndim == 2:
            for axis, name in enumerate(names):
                d.dims[axis].attach_scale(scales[name])
        elif d.ndim == 1:
            by_length = [n for n in names if sizes[n] == d.shape[0]]
            name = "star" if d.name.endswith("/sweep_values") else (by_length or names)[0]
            d.dims[0].attach_scale(scales[name])


class RunFile:
    """A run file read back into memory.

    Attributes
    ----------
    path : Path
    attrs : dict
        Root attributes (``format``, ``software_version``, ``config_toml`` ...).
    eos : dict of str -> EOSSequence
        One entry per ``/eos/<name>`` group, in file order.
    """

    def __init__(self, path: Path, attrs: dict, eos: dict[str, EOSSequence],
                 ensembles: dict[str, EnsembleSummary] | None = None) -> None:
        self.path, self.attrs, self.eos = path, attrs, eos
        self.ensembles = ensembles or {}

    def __repr__(self) -> str:
        return f"RunFile({str(self.path)!r}, eos={_names(self.eos)}, ensembles={_names(self.ensembles)})"

    def ensemble_stars(self, name: str, columns, members: slice = slice(None)) -> dict[str, np.ndarray]:
        """Several 2-D ensemble datasets (members x stars) for a slice of members, in one read.

        A per-star column the file's format version lacks (``star_status`` and
        ``error_estimate`` before format 2) is left out of the result.
        """
        with _open_run(self.path) as f:  # checked again: the file may have changed since it was read
            try:
                g = f["ensemble"][name]
            except KeyError:
                raise RunFileError(f"no ensemble {name!r}", source=str(self.path)) from None
            return {c: g[c][members] for c in columns if c in g}

    def ensemble_dataset(self, name: str, column: str, members=slice(None)) -> np.ndarray:
        """Read (part of) a 2-D ensemble dataset, members x stars, from the file."""
        with _open_run(self.path) as f:  # checked again: the file may have changed since it was read
            try:
                return f["ensemble"][name][column][members]
            except KeyError:
                raise RunFileError(f"no dataset ensemble/{name}/{column}", source=str(self.path)) from None


class EnsembleSummary:
    """The 1-D part of an ``/ensemble/<name>`` group: member table and per-member summaries.

    The 2-D per-star datasets stay on disk (they can hold 10^8 numbers); read
    them with :meth:`RunFile.ensemble_dataset` or h5py.
    """

    def __init__(self, name: str, attrs: dict, members: dict[str, np.ndarray],
                 summaries: dict[str, np.ndarray]) -> None:
        self.name, self.attrs, self.members, self.summaries = name, attrs, members, summaries
        self.kind = attrs.get("kind")
        self.status_meaning = {int(k): v for k, v in json.loads(attrs.get("status_meaning", "{}")).items()}

    @property
    def size(self) -> int:
        return int(next(iter(self.summaries.values())).size) if self.summaries else 0

    def __getitem__(self, key: str) -> np.ndarray:
        return self.summaries[key]

    def to_table(self):
        """One row per member: ``member`` index, the member parameters and the summaries, as a QTable.

        Units are the schema's (``max_mass`` in solMass, ``radius_at_1.4`` in
        km, ``log10_p1`` in dex(dyn / cm2)); ``status`` is the member status
        code (meanings in ``meta["status_meaning"]``).
        """
        from . import units

        columns = {"member": np.arange(self.size)} | dict(self.members) | dict(self.summaries)
        unit_of = dict(MEMBER_PARAMETER_UNITS) | dict(MEMBER_SUMMARIES)
        return units.quantity_table(columns, unit_of, meta={"name": self.name, "kind": self.kind,
                                                            "status_meaning": self.status_meaning})

    def __repr__(self) -> str:
        status = self.summaries.get("status")
        ok = f", {int(np.count_nonzero(np.asarray(status) == 0))} ok" if status is not None else ""
        return f"EnsembleSummary({self.name!r}, kind={self.kind!r}, {self.size} members{ok})"


def _names(groups: dict, shown: int = 8) -> str:
    """The first ``shown`` names of a dict of groups, and how many more (a run may hold hundreds)."""
    names = list(groups)
    more = f", ... {len(names) - shown} more" if len(names) > shown else ""
    return "[" + ", ".join(repr(n) for n in names[:shown]) + more + "]"


def _attr(v):
    if isinstance(v, bytes):
        return v.decode()
    if isinstance(v, np.generic):
        return v.item()
    return v


def _open_run(path: Path) -> h5py.File:
    """Open a run file for reading and check it against the schema (see :mod:`.runfile_check`)."""
    if not path.exists():
        parts = path.with_name(path.name + ".parts")
        hint = (f" (an unfinished run is in {parts.name}: rerun the sweep with --resume)"
                if parts.is_dir() else "")
        raise RunFileError(f"run file not found{hint}", source=str(path))
    if path.is_dir():
        raise RunFileError("is a folder, not a run file", source=str(path))
    try:
        f = h5py.File(path, "r")
    except OSError:
        raise RunFileError("not an HDF5 file (or a truncated or damaged one)", source=str(path)) from None
    try:
        check_run_file(f, str(path))
    except BaseException:
        f.close()
        raise
    return f


def read_run(path: str | Path) -> RunFile:
    """Read a run file written by :class:`RunFileWriter`.

    The file is checked against the whole schema first, so what comes back
    has every dataset and attribute the schema promises (version-1 files:
    all but ``star_status`` and ``error_estimate``).

    Raises
    ------
    RunFileError
        If the file is missing, not HDF5, not a stellar_match run file, of
        a format version this software does not read, or if any group,
        dataset or attribute is missing or of the wrong type or shape (the
        message names the first one).
    """
    path = Path(path)
    f = _open_run(path)
    try:
        with f:
            return _read_checked(f, path)
    except OSError as exc:  # damaged data chunks show only when read
        raise RunFileError(f"cannot read the data (damaged HDF5: {exc})", source=str(path)) from None


def _read_checked(f: h5py.File, path: Path) -> RunFile:
    attrs = {k: _attr(v) for k, v in f.attrs.items()}
    sequences = {}
    for name, g in f["eos"].items():
        # dimension scales (star, target, binary) are axes, not columns
        columns = {k: d[()] for k, d in g.items() if isinstance(d, h5py.Dataset) and k not in DIMENSIONS}
        groups = {
            k: {n: d[()] for n, d in sg.items() if n not in DIMENSIONS}
            | {"attrs": {a: _attr(v) for a, v in sg.attrs.items()}}
            for k, sg in g.items()
            if isinstance(sg, h5py.Group)
        }
        ga = {k: _attr(v) for k, v in g.attrs.items()}
        ga.pop("star_status_meaning", None)  # the schema's, see schema.STAR_STATUS
        sequences[name] = EOSSequence(
            name=name,
            kind=ga.pop("kind"),
            parameters=json.loads(ga.pop("parameters")),
            table_sha256=ga.pop("table_sha256", None),
            columns=columns,
            summary=ga,
            groups=groups,
        )
    ensembles = {}
    for name, g in (f["ensemble"].items() if "ensemble" in f else ()):
        members = {k: d[()] for k, d in g["members"].items()}
        summaries = {k: d[()] for k, d in g.items() if isinstance(d, h5py.Dataset) and d.ndim == 1
                     and k != "sweep_values" and k not in DIMENSIONS}
        ensembles[name] = EnsembleSummary(name, {k: _attr(v) for k, v in g.attrs.items()}, members, summaries)
    return RunFile(path, attrs, sequences, ensembles)
