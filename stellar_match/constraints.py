"""The constraints file: measurements to draw over mass-radius curves and to score EOS against.

A constraints file is TOML.  Every measurement is an array-of-tables entry
with a ``label``; masses are in Msun, radii in km, everything else is
dimensionless.  The kinds:

``[[mass]]``
    A mass: Gaussian (``mass``, ``sigma``) or posterior samples
    (``samples`` = CSV file, ``column``).
``[[ellipse]]``
    A mass and radius: correlated bivariate Gaussian (``mass``, ``radius``,
    ``sigma_mass``, ``sigma_radius``, ``correlation``).
``[[mass_radius_samples]]``
    A mass and radius from posterior samples (``path``, ``mass_column``,
    ``radius_column``), turned into a density by a Gaussian kernel density
    estimate (``bandwidth``).
``[[redshift]]``
    A surface gravitational redshift z: Gaussian (``z``, ``sigma``) or
    samples (``samples``, ``column``).
``[[binary]]``
    A binary tidal measurement at a chirp mass taken as exact
    (``chirp_mass``) with mass ratio q = m2/m1 in [``q_min``, 1]: Gaussian in
    Lambda-tilde (``lambda_tilde``, ``sigma``), an upper limit
    (``lambda_tilde_upper`` at ``credibility``), or samples of (q,
    Lambda-tilde) (``samples``, ``q_column``, ``lambda_tilde_column``).
``[[box]]``
    A rectangular (M, R) range, drawn only.

Every measurement but ``box`` carries a likelihood (see
:mod:`stellar_match.likelihood`) unless it says ``likelihood = false``.
The top-level ``mass_floor`` (Msun, default 1.0) is the lower end of the
mass prior of the likelihoods, ``title`` a figure title.

Sample files are CSV with a header row (``#`` comment lines allowed); paths
are relative to the constraints file.  Their samples are read when the file
is parsed, so a constraints object is self-contained.

Every mistake is one :class:`~stellar_match.errors.ConfigError` naming the
file and the dotted key (``binary[0].q_min``), or the sample file and line.
"""

from __future__ import annotations

import hashlib
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ConfigError

__all__ = [
    "MassMeasurement",
    "EllipseMeasurement",
    "MassRadiusSamples",
    "RedshiftMeasurement",
    "BinaryMeasurement",
    "BoxMeasurement",
    "Constraints",
    "DEFAULT_MASS_FLOOR",
    "MIN_SAMPLES",
    "load_constraints",
    "parse_constraints",
]

#: Default lower end (Msun) of the mass prior (common practice: a floor near 1 Msun keeps the puffed-up
#: low-mass branch, which no observed neutron star is thought to occupy, out of the prior).
DEFAULT_MASS_FLOOR = 1.0
#: Fewest samples a sample file may give (fewer make a kernel density estimate meaningless; common practice).
MIN_SAMPLES = 10
#: Bandwidth rules of scipy.stats.gaussian_kde, or a positive number (its factor times the data covariance).
BANDWIDTH_RULES = ("scott", "silverman")


@dataclass(frozen=True)
class MassMeasurement:
    """A mass: Gaussian ``mass`` +- ``sigma`` (Msun), or posterior ``samples`` of M.

    Drawn as a horizontal band (the samples' 16-84 % range when given as samples).
    """

    label: str
    mass: float = math.nan
    sigma: float = math.nan
    two_sigma: bool = False
    samples: np.ndarray | None = field(default=None, repr=False, compare=False)
    samples_path: str | None = None
    bandwidth: str | float = "scott"
    likelihood: bool = True

    @property
    def kind(self) -> str:
        return "mass"

    @property
    def form(self) -> str:
        return "samples" if self.samples is not None else "gaussian"


@dataclass(frozen=True)
class EllipseMeasurement:
    """A correlated Gaussian (M, R) measurement (Msun, km), drawn as 1- and 2-sigma ellipses."""

    label: str
    mass: float
    radius: float
    sigma_mass: float
    sigma_radius: float
    correlation: float = 0.0
    likelihood: bool = True

    @property
    def kind(self) -> str:
        return "ellipse"

    @property
    def form(self) -> str:
        return "gaussian"

    def covariance(self) -> np.ndarray:
        """2x2 covariance of (M, R)."""
        c = self.correlation * self.sigma_mass * self.sigma_radius
        return np.array([[self.sigma_mass**2, c], [c, self.sigma_radius**2]])


@dataclass(frozen=True)
class MassRadiusSamples:
    """Posterior samples of (M, R) (Msun, km); a Gaussian kernel density estimate gives the density."""

    label: str
    path: str
    mass_column: str
    radius_column: str
    samples: np.ndarray = field(repr=False, compare=False)
    bandwidth: str | float = "scott"
    likelihood: bool = True

    @property
    def kind(self) -> str:
        return "mass_radius_samples"

    @property
    def form(self) -> str:
        return "samples"


@dataclass(frozen=True)
class RedshiftMeasurement:
    """A surface gravitational redshift: Gaussian ``z`` +- ``sigma``, or posterior ``samples`` of z."""

    label: str
    z: float = math.nan
    sigma: float = math.nan
    samples: np.ndarray | None = field(default=None, repr=False, compare=False)
    samples_path: str | None = None
    bandwidth: str | float = "scott"
    likelihood: bool = True

    @property
    def kind(self) -> str:
        return "redshift"

    @property
    def form(self) -> str:
        return "samples" if self.samples is not None else "gaussian"


@dataclass(frozen=True)
class BinaryMeasurement:
    """A binary's tidal deformability Lambda-tilde at an exact chirp mass (Msun), q = m2/m1 in [q_min, 1].

    ``form`` is "gaussian" (``lambda_tilde`` +- ``sigma``), "upper_limit"
    (Lambda-tilde below ``lambda_tilde_upper`` at ``credibility``) or
    "samples" (rows of (q, Lambda-tilde)).
    """

    label: str
    chirp_mass: float
    q_min: float
    lambda_tilde: float = math.nan
    sigma: float = math.nan
    lambda_tilde_upper: float = math.nan
    credibility: float = math.nan
    samples: np.ndarray | None = field(default=None, repr=False, compare=False)
    samples_path: str | None = None
    bandwidth: str | float = "scott"
    likelihood: bool = True

    @property
    def kind(self) -> str:
        return "binary"

    @property
    def form(self) -> str:
        if self.samples is not None:
            return "samples"
        return "upper_limit" if math.isfinite(self.lambda_tilde_upper) else "gaussian"


@dataclass(frozen=True)
class BoxMeasurement:
    """A rectangular (M, R) region, e.g. a quoted range of both (drawn only)."""

    label: str
    mass_min: float
    mass_max: float
    radius_min: float
    radius_max: float
    likelihood: bool = False

    @property
    def kind(self) -> str:
        return "box"


Measurement = (MassMeasurement | EllipseMeasurement | MassRadiusSamples | RedshiftMeasurement
               | BinaryMeasurement | BoxMeasurement)


@dataclass
class Constraints:
    """The measurements of a constraints file.

    Attributes
    ----------
    title : str
        Figure title ("" for none).
    mass_floor : float
        Lower end (Msun) of the uniform mass prior of the likelihoods.
    mass, ellipse, mass_radius_samples, redshift, binary, box : list
        The measurements of each kind, in file order.
    order : list of (kind, index)
        Every measurement in file order across kinds.
    source : str
        Where the constraints came from (file name, or "<constraints>").
    sha256 : str
        SHA-256 of the constraints text (sample files are hashed separately, see ``sample_files``).
    text : str
        The constraints file itself, kept for provenance.
    sample_files : dict of str -> str
        Sample file path -> SHA-256 of its bytes.
    """

    title: str = ""
    mass_floor: float = DEFAULT_MASS_FLOOR
    mass: list[MassMeasurement] = field(default_factory=list)
    ellipse: list[EllipseMeasurement] = field(default_factory=list)
    mass_radius_samples: list[MassRadiusSamples] = field(default_factory=list)
    redshift: list[RedshiftMeasurement] = field(default_factory=list)
    binary: list[BinaryMeasurement] = field(default_factory=list)
    box: list[BoxMeasurement] = field(default_factory=list)
    order: list[tuple[str, int]] = field(default_factory=list)
    source: str = "<constraints>"
    sha256: str = ""
    text: str = field(default="", repr=False)
    sample_files: dict[str, str] = field(default_factory=dict)

    def all_measurements(self) -> list[Measurement]:
        """Every measurement, in file order."""
        return [getattr(self, kind)[i] for kind, i in self.order]

    def scored(self) -> list[Measurement]:
        """The measurements that carry a likelihood, in file order."""
        return [m for m in self.all_measurements() if m.likelihood]

    @property
    def labels(self) -> list[str]:
        """Labels of :meth:`scored`, in order."""
        return [m.label for m in self.scored()]

    def __repr__(self) -> str:
        counts = ", ".join(f"{k}={len(getattr(self, k))}" for k in _KINDS if getattr(self, k))
        return f"Constraints({self.source!r}, mass_floor={self.mass_floor:g}, {counts or 'empty'})"


# --- parsing ----------------------------------------------------------------------------------

#: key -> (type, required).  Types: label, positive, number, bool, fraction (0 < x < 1),
#: q (0 < x <= 1), path, column, bandwidth.
_KEYS: dict[str, dict[str, tuple[str, bool]]] = {
    "mass": {"label": ("label", True), "mass": ("positive", False), "sigma": ("positive", False),
             "two_sigma": ("bool", False), "samples": ("path", False), "column": ("column", False),
             "bandwidth": ("bandwidth", False), "likelihood": ("bool", False)},
    "ellipse": {"label": ("label", True), "mass": ("positive", True), "radius": ("positive", True),
                "sigma_mass": ("positive", True), "sigma_radius": ("positive", True),
                "correlation": ("number", False), "likelihood": ("bool", False)},
    "mass_radius_samples": {"label": ("label", True), "path": ("path", True), "mass_column": ("column", True),
                            "radius_column": ("column", True), "bandwidth": ("bandwidth", False),
                            "likelihood": ("bool", False)},
    "redshift": {"label": ("label", True), "z": ("positive", False), "sigma": ("positive", False),
                 "samples": ("path", False), "column": ("column", False), "bandwidth": ("bandwidth", False),
                 "likelihood": ("bool", False)},
    "binary": {"label": ("label", True), "chirp_mass": ("positive", True), "q_min": ("q", True),
               "lambda_tilde": ("positive", False), "sigma": ("positive", False),
               "lambda_tilde_upper": ("positive", False), "credibility": ("fraction", False),
               "samples": ("path", False), "q_column": ("column", False),
               "lambda_tilde_column": ("column", False), "bandwidth": ("bandwidth", False),
               "likelihood": ("bool", False)},
    "box": {"label": ("label", True), "mass_min": ("positive", True), "mass_max": ("positive", True),
            "radius_min": ("positive", True), "radius_max": ("positive", True), "likelihood": ("bool", False)},
}
_KINDS = tuple(_KEYS)
#: The alternative forms of the kinds that have several: form -> keys it needs (beyond label).
_FORMS: dict[str, dict[str, tuple[str, ...]]] = {
    "mass": {"gaussian": ("mass", "sigma"), "samples": ("samples", "column")},
    "redshift": {"gaussian": ("z", "sigma"), "samples": ("samples", "column")},
    "binary": {"gaussian": ("lambda_tilde", "sigma"), "upper_limit": ("lambda_tilde_upper", "credibility"),
               "samples": ("samples", "q_column", "lambda_tilde_column")},
}


def _value(v, what: str, source: str, key: str):
    def fail(msg: str) -> ConfigError:
        return ConfigError(msg, source=source, key=key)

    if what in ("label", "path", "column"):
        if not isinstance(v, str) or not v.strip():
            raise fail(f"needs a non-empty string, got {v!r}")
        return v.strip() if what == "column" else v
    if what == "bool":
        if not isinstance(v, bool):
            raise fail(f"needs true or false, got {v!r}")
        return v
    if what == "bandwidth":
        if isinstance(v, str):
            if v.lower() not in BANDWIDTH_RULES:
                raise fail(f"needs {' or '.join(map(repr, BANDWIDTH_RULES))} or a positive number, got {v!r}")
            return v.lower()
        what = "positive"
    if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
        raise fail(f"needs a finite number, got {v!r}")
    v = float(v)
    if what == "positive" and v <= 0:
        raise fail(f"needs a positive number, got {v:g}")
    if what == "fraction" and not 0.0 < v < 1.0:
        raise fail(f"needs a number between 0 and 1 (exclusive), got {v:g}")
    if what == "q" and not 0.0 < v <= 1.0:
        raise fail(f"needs 0 < q_min <= 1, got {v:g}")
    return v


def _kinds_in_file_order(text: str, data: dict) -> list[str]:
    """The kind of every [[...]] block in the order the text has them (TOML tables lose it across kinds)."""
    seen = [m.group(1) for m in re.finditer(r"^\s*\[\[\s*([A-Za-z_]+)\s*\]\]", text, re.MULTILINE)]
    counts = {k: len(data.get(k, [])) if isinstance(data.get(k), list) else 0 for k in _KINDS}
    if all(seen.count(k) == counts[k] for k in _KINDS):
        return [k for k in seen if k in _KINDS]
    return [k for k in _KINDS for _ in range(counts[k])]  # inline arrays of tables: kind by kind


def parse_constraints(text: str, *, source: str = "<constraints>", base_dir: str | Path | None = None
                      ) -> Constraints:
    """Validate constraints TOML text (see :func:`load_constraints`).

    Parameters
    ----------
    text : str
        The TOML text.
    source : str
        Name used in error messages.
    base_dir : path, optional
        Folder that relative sample-file paths start from (default: the current folder).
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML ({exc})", source=source) from None
    allowed = {"title", "mass_floor", *_KINDS}
    for k in data:
        if k not in allowed:
            raise ConfigError(f"unknown key (expected one of: {', '.join(sorted(allowed))})", source=source, key=k)
    out = Constraints(source=source, text=text, sha256=hashlib.sha256(text.encode()).hexdigest())
    if "title" in data:
        out.title = _value(data["title"], "label", source, "title")
    if "mass_floor" in data:
        out.mass_floor = _value(data["mass_floor"], "positive", source, "mass_floor")
    base = Path(base_dir) if base_dir is not None else Path()
    for kind in _KINDS:
        blocks = data.get(kind, [])
        if not isinstance(blocks, list) or not all(isinstance(b, dict) for b in blocks):
            raise ConfigError(f"needs [[{kind}]] blocks", source=source, key=kind)
        for i, block in enumerate(blocks):
            getattr(out, kind).append(_measurement(kind, i, block, source, base, out.sample_files))
    positions = {k: 0 for k in _KINDS}
    for kind in _kinds_in_file_order(text, data):
        out.order.append((kind, positions[kind]))
        positions[kind] += 1
    seen: dict[str, str] = {}
    for kind, i in out.order:
        m = getattr(out, kind)[i]
        if m.likelihood and m.label in seen:
            raise ConfigError(f"label {m.label!r} is already used by {seen[m.label]} (results are stored by "
                              "label)", source=source, key=f"{kind}[{i}].label")
        if m.likelihood:
            seen[m.label] = f"{kind}[{i}]"
    return out


def _measurement(kind: str, i: int, block: dict, source: str, base: Path, hashes: dict):
    where = f"{kind}[{i}]"
    keys = _KEYS[kind]
    for k in block:
        if k not in keys:
            raise ConfigError(f"unknown key (expected one of: {', '.join(keys)})", source=source, key=f"{where}.{k}")
    values = {}
    for k, (what, required) in keys.items():
        if k in block:
            values[k] = _value(block[k], what, source, f"{where}.{k}")
        elif required:
            raise ConfigError("missing", source=source, key=f"{where}.{k}")
    if kind in _FORMS:
        given = [f for f, ks in _FORMS[kind].items() if any(k in values for k in ks)]
        if len(given) != 1:
            options = "; ".join(" + ".join(ks) for ks in _FORMS[kind].values())
            what = "needs one of" if not given else f"mixes the forms {' and '.join(given)}; give only one of"
            raise ConfigError(f"{what}: {options}", source=source, key=where)
        for k in _FORMS[kind][given[0]]:
            if k not in values:
                raise ConfigError(f"missing (the {given[0]} form needs {', '.join(_FORMS[kind][given[0]])})",
                                  source=source, key=f"{where}.{k}")
        if given[0] != "samples" and "bandwidth" in values:
            raise ConfigError("only sample files have a bandwidth", source=source, key=f"{where}.bandwidth")
    if kind == "box" and values.get("likelihood"):
        raise ConfigError("a box is drawn only; it has no likelihood", source=source, key=f"{where}.likelihood")
    if kind == "ellipse" and not -1.0 < values.get("correlation", 0.0) < 1.0:
        raise ConfigError(f"needs -1 < correlation < 1, got {values['correlation']:g}", source=source,
                          key=f"{where}.correlation")
    if kind == "box":
        for q in ("mass", "radius"):
            if values[f"{q}_max"] <= values[f"{q}_min"]:
                raise ConfigError(f"{q}_max must exceed {q}_min", source=source, key=f"{where}.{q}_max")
    # sample files: read now, so the object is self-contained
    path_key = "path" if kind == "mass_radius_samples" else "samples"
    if path_key in values:
        columns = {"mass": ("column",), "redshift": ("column",), "binary": ("q_column", "lambda_tilde_column"),
                   "mass_radius_samples": ("mass_column", "radius_column")}[kind]
        p = Path(values[path_key])
        p = p if p.is_absolute() else base / p
        samples, sha = read_samples(p, [values[c] for c in columns], source=source, key=f"{where}.{path_key}")
        _check_samples(kind, samples, source, f"{where}.{path_key}", p)
        hashes[str(p)] = sha
        values["samples"] = samples if samples.shape[1] > 1 else samples[:, 0]
        if kind == "mass_radius_samples":
            values["path"] = str(p)
        else:
            values["samples_path"] = str(p)
        for c in columns:
            if kind != "mass_radius_samples":
                values.pop(c, None)
        _check_kde(values["samples"], values.get("bandwidth", "scott"), source, f"{where}.{path_key}", p)
    cls = {"mass": MassMeasurement, "ellipse": EllipseMeasurement, "mass_radius_samples": MassRadiusSamples,
           "redshift": RedshiftMeasurement, "binary": BinaryMeasurement, "box": BoxMeasurement}[kind]
    return cls(**values)


def _check_samples(kind: str, samples: np.ndarray, source: str, key: str, path: Path) -> None:
    def fail(msg: str) -> ConfigError:
        return ConfigError(f"sample file {path}: {msg}", source=source, key=key)

    if kind == "binary":
        q = samples[:, 0]
        if np.any(q <= 0) or np.any(q > 1):
            raise fail("mass ratios q must lie in (0, 1]")
        if np.any(samples[:, 1] < 0):
            raise fail("Lambda-tilde samples must be >= 0")
    elif np.any(samples <= 0):
        raise fail("masses, radii and redshifts must be positive")


def _check_kde(samples: np.ndarray, bandwidth, source: str, key: str, path: Path) -> None:
    from scipy.stats import gaussian_kde

    try:
        gaussian_kde(samples.T, bw_method=bandwidth)
    except (np.linalg.LinAlgError, ValueError) as exc:
        raise ConfigError(f"sample file {path}: no kernel density estimate from these samples "
                          f"(they are degenerate: {exc})", source=source, key=key) from None


def read_samples(path: Path, columns: list[str], *, source: str, key: str) -> tuple[np.ndarray, str]:
    """Read named columns of a CSV sample file: (samples (n, len(columns)), sha256 of the file).

    The first non-comment line is the header (names separated by commas);
    ``#`` lines and blank lines are skipped.
    """
    from .csv_columns import read_columns

    rows, sha, _ = read_columns(path, columns, what="sample file", item="sample", source=source, key=key,
                                finite=True)
    if len(rows) < MIN_SAMPLES:
        raise ConfigError(f"sample file {path}: {len(rows)} sample rows; at least {MIN_SAMPLES} are needed",
                          source=source, key=key)
    return rows, sha


def load_constraints(path: str | Path) -> Constraints:
    """Read a constraints file: measurements to draw and to score EOS against.

    See the module docstring for the kinds and README.md for every key.
    Sample-file paths are relative to the constraints file's folder.

    Raises
    ------
    ConfigError
        Naming the file and the dotted key (``ellipse[0].correlation``) for
        unreadable TOML, unknown keys, missing keys, wrong types or values,
        and unreadable, empty or non-numeric sample files.
    """
    from .config import read_text_file

    path = Path(path)
    return parse_constraints(read_text_file(path, "constraints"), source=str(path), base_dir=path.parent)
