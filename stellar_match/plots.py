"""Figures: candidate EOS overlaid on the forbidden regions and the user's measurements.

:func:`overlay_figure` draws the mass-radius curves of any number of EOS
sequences (stable branch solid, unstable branch dashed, maximum-mass star
marked), shades the regions no static star may enter
(:data:`stellar_match.exports.FORBIDDEN_REGIONS`), draws the measurements of
a constraints file (:func:`load_constraints`), and with ``panels=True`` adds
M(rho_c), z(M) and -- when the sequences have a ``tidal_deformability``
column -- Lambda(M).  It returns a :class:`matplotlib.figure.Figure` built
with the object-oriented API (no pyplot, no global state), which
:func:`save_figure` writes as PNG, PDF or SVG.

Colours are samples of matplotlib's "cividis" colormap, whose lightness
rises monotonically (readable in greyscale and for colour-blind readers);
each EOS also gets its own marker so curves stay apart in print.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib import colormaps
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Ellipse, Rectangle
from matplotlib.ticker import NullFormatter

from . import exterior, units
from .constraints import (
    BoxMeasurement,
    Constraints,
    EllipseMeasurement,
    MassMeasurement,
    load_constraints,
    parse_constraints,
)
from .errors import InputError
from .exports import FORBIDDEN_REGIONS, check_output_path
from .sequence import EOSSequence

__all__ = [
    "FIGURE_FORMATS",
    "MassMeasurement",
    "EllipseMeasurement",
    "BoxMeasurement",
    "Constraints",
    "load_constraints",
    "parse_constraints",
    "overlay_figure",
    "CredibleBand",
    "ensemble_band",
    "bands_from_results",
    "save_figure",
]

FIGURE_FORMATS = (".png", ".pdf", ".svg")

_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h")
#: Grey levels of the forbidden regions, outermost (causality) lightest.
_REGION_GREYS = {"causality": "0.88", "buchdahl": "0.74", "horizon": "0.55"}
_RADIUS_LABEL = "Radius R [km]"
_MASS_LABEL = r"Mass M [M$_\odot$]"


# --- drawing ------------------------------------------------------------------------

def _palette(n: int) -> list:
    """n colours from cividis, dark to light, stopping before the palest yellow."""
    cmap = colormaps["cividis"]
    return [cmap(v) for v in (np.linspace(0.0, 0.78, n) if n > 1 else [0.0])]


def _curve(seq: EOSSequence, x_key: str, y_key: str):
    """(x, y, stable) in central-density order, with the maximum-mass star inserted."""
    rho = np.asarray(seq["central_density"], dtype=float)
    order = np.argsort(rho, kind="stable")
    x = np.asarray(seq[x_key], dtype=float)[order]
    y = np.asarray(seq[y_key], dtype=float)[order]
    stable = seq.stable[order]
    s = seq.summary
    point = {"mass": s.get("max_mass", np.nan), "radius": s.get("max_mass_radius", np.nan),
             "central_density": s.get("max_mass_central_density", np.nan)}
    if "surface_redshift" in (x_key, y_key):
        point["surface_redshift"] = float(exterior.redshift_at_radius(point["mass"], point["radius"]))
    if x_key in point and y_key in point and np.isfinite(point["central_density"]) and np.isfinite(point["mass"]):
        i = int(np.searchsorted(rho[order], point["central_density"]))
        x, y = np.insert(x, i, point[x_key]), np.insert(y, i, point[y_key])
        stable = np.insert(stable, i, True)
    return x, y, stable


def _draw_sequence(ax, seq: EOSSequence, x_key: str, y_key: str, color, marker: str, label: str,
                   legend: bool = True):
    """Stable runs solid, unstable runs dashed (joined at their shared star); M_max marked."""
    x, y, stable = _curve(seq, x_key, y_key)
    ok = np.isfinite(x) & np.isfinite(y)
    x, y, stable = x[ok], y[ok], stable[ok]
    starts = np.flatnonzero(np.concatenate([[True], stable[1:] != stable[:-1]]))
    ends = np.append(starts[1:], x.size)
    # no finite star at all (none solved to tolerance): no curve, only the M_max marker if any
    for a, b in zip(starts, ends, strict=True) if x.size else ():
        run = slice(max(a - 1, 0), b)  # start at the previous run's last star: no gap
        ax.plot(x[run], y[run], color=color, lw=1.9 if stable[a] else 1.3,
                ls="-" if stable[a] else (0, (4, 2.5)), gid=f"{label}:{'stable' if stable[a] else 'unstable'}")
    s = seq.summary
    keys = {"radius": s.get("max_mass_radius", np.nan), "mass": s.get("max_mass", np.nan),
            "central_density": s.get("max_mass_central_density", np.nan)}
    if x_key in keys and y_key in keys:
        ax.plot([keys[x_key]], [keys[y_key]], marker=marker, color=color, ms=7, mec="black", mew=0.8,
                ls="none", zorder=5, gid=f"{label}:max_mass")
    elif y_key == "surface_redshift" and x_key == "mass":
        ax.plot([keys["mass"]], [exterior.redshift_at_radius(keys["mass"], keys["radius"])], marker=marker,
                color=color, ms=7, mec="black", mew=0.8, ls="none", zorder=5, gid=f"{label}:max_mass")
    return Line2D([], [], color=color, lw=1.9, marker=marker, mec="black", mew=0.8, label=label if legend else None)


def _forbidden(ax, r_max: float, m_top: float) -> None:
    """Shade R < k GM/c^2 for every forbidden region; boundary lines carry gid 'forbidden:<name>'."""
    r = np.linspace(0.0, r_max, 200)
    for name, (k, _label, _) in reversed(list(FORBIDDEN_REGIONS.items())):
        m_line = r / (k * units.SOLAR_MASS_KM)
        ax.fill_between(r, m_line, m_top, color=_REGION_GREYS[name], lw=0, zorder=0)
        ax.plot(r, m_line, color="0.35", lw=0.8, zorder=1, gid=f"forbidden:{name}")


def _label_forbidden(ax) -> None:
    """Write each region's label along its boundary near the top of the axes, rotated with the line.

    Near the top the wedges are widest and measurement bands (usually at
    1.2-2.1 Msun) rarely reach; the text ends at the anchor and runs down-left.
    """
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    for name, (k, label, _) in FORBIDDEN_REGIONS.items():
        slope = 1.0 / (k * units.SOLAR_MASS_KM)  # dM/dR of the boundary
        m = y0 + 0.96 * (y1 - y0)
        r = m / slope
        if not x0 < r < x1:
            continue
        ax.text(r, m, label.split(",")[0] + "  ", rotation=math.degrees(math.atan(slope)),
                transform_rotates_text=True, rotation_mode="anchor", ha="right", va="bottom",
                fontsize=7.5, color="0.1", zorder=2, gid=f"label:{name}")


def _draw_constraints(ax, constraints: Constraints, handles: list) -> None:
    grey = "0.25"
    hatches = ("//", "\\\\", "xx", "..")
    for i, c in enumerate(constraints.mass):
        hatch = hatches[i % len(hatches)]
        one, two = _mass_band(c)
        if c.two_sigma:
            ax.axhspan(*two, facecolor="none", edgecolor=grey, hatch=hatch, lw=0.0, alpha=0.35, zorder=1)
        ax.axhspan(*one, facecolor="none", edgecolor=grey, hatch=hatch, lw=0.6, zorder=1, gid=f"mass:{c.label}")
        sig = r" (1$\sigma$; faint: 2$\sigma$)" if c.two_sigma else ""
        text = (f"{c.mass:g} $\\pm$ {c.sigma:g} M$_\\odot$" if c.samples is None
                else f"{one[0]:.3g}-{one[1]:.3g} M$_\\odot$ (16-84 % of samples)")
        handles.append(Rectangle((0, 0), 1, 1, facecolor="none", edgecolor=grey, hatch=hatch,
                                 label=f"{c.label}, {text}{sig}"))
    for i, c in enumerate(constraints.mass_radius_samples):
        pts = c.samples[:: max(1, len(c.samples) // 1500)]  # enough points to show the shape
        ax.scatter(pts[:, 1], pts[:, 0], s=2, color=("0.15", "0.45")[i % 2], alpha=0.25, lw=0, zorder=2,
                   gid=f"mass_radius_samples:{c.label}")
        handles.append(Line2D([], [], color="0.15", marker=".", ls="none", label=f"{c.label} (samples)"))
    for i, c in enumerate(constraints.ellipse):
        ls = ("-", "--", ":", "-.")[i % 4]
        cov = np.array([[c.sigma_radius**2, c.correlation * c.sigma_radius * c.sigma_mass],
                        [c.correlation * c.sigma_radius * c.sigma_mass, c.sigma_mass**2]])
        vals, vecs = np.linalg.eigh(cov)
        angle = math.degrees(math.atan2(vecs[1, 1], vecs[0, 1]))
        for n, alpha in ((2, 0.12), (1, 0.28)):
            ax.add_patch(Ellipse((c.radius, c.mass), 2 * n * math.sqrt(vals[1]), 2 * n * math.sqrt(vals[0]),
                                 angle=angle, facecolor=(0.1, 0.1, 0.1, alpha), edgecolor="black", lw=0.9,
                                 ls=ls, zorder=3, gid=f"ellipse:{c.label}:{n}sigma"))
        handles.append(Ellipse((0, 0), 1, 1, facecolor=(0.1, 0.1, 0.1, 0.28), edgecolor="black", ls=ls,
                               label=f"{c.label}, 1$\\sigma$ and 2$\\sigma$"))
    for c in constraints.box:
        ax.add_patch(Rectangle((c.radius_min, c.mass_min), c.radius_max - c.radius_min, c.mass_max - c.mass_min,
                               facecolor=(0.1, 0.1, 0.1, 0.10), edgecolor="black", lw=0.9, ls="-.", zorder=3,
                               gid=f"box:{c.label}"))
        handles.append(Rectangle((0, 0), 1, 1, facecolor=(0.1, 0.1, 0.1, 0.10), edgecolor="black", ls="-.",
                                 label=c.label))


def _mass_band(c: MassMeasurement) -> tuple[tuple[float, float], tuple[float, float]]:
    """1- and 2-sigma mass ranges: mean +- sigma, or the samples' 16-84 % and 2.3-97.7 % ranges."""
    if c.samples is None:
        return (c.mass - c.sigma, c.mass + c.sigma), (c.mass - 2 * c.sigma, c.mass + 2 * c.sigma)
    q = np.quantile(c.samples, [0.16, 0.84, 0.023, 0.977])
    return (float(q[0]), float(q[1])), (float(q[2]), float(q[3]))


@dataclass(frozen=True)
class CredibleBand:
    """Quantiles of R(M) across an ensemble, for drawing.

    Attributes
    ----------
    label : str
        Legend text, e.g. ``"prior-2026 posterior"``.
    mass : ndarray, shape (masses,)
        Msun.
    radius : ndarray, shape (5, masses)
        km, at the levels 5, 16, 50, 84 and 95 % (:data:`stellar_match.scoring.BAND_LEVELS`).
    which : {"posterior", "prior"}
        Posterior bands are filled, prior bands outlined.
    support : ndarray, shape (masses,), optional
        Weight of the members whose stable branch reaches each mass; the band
        is drawn where it is at least :data:`BAND_MIN_SUPPORT`.
    """

    label: str
    mass: np.ndarray
    radius: np.ndarray
    which: str = "posterior"
    support: np.ndarray | None = None


#: Least weight of members reaching a mass for the band to be drawn there: above the heaviest
#: members' maxima the quantiles describe a handful of members (our choice, stated in README).
BAND_MIN_SUPPORT = 0.1


def ensemble_band(run, name: str, *, masses=None, mass_floor: float = 0.5) -> CredibleBand:
    """The prior band of R(M) of an ensemble of a run file (its members weighted by their prior)."""
    from .scoring import BAND_MASS_STEP, ensemble_bands

    summary = run.ensembles[name]
    if masses is None:
        ok = np.asarray(summary["status"]) == 0
        top = np.nanmax(np.where(ok, summary["max_mass"], np.nan)) if ok.any() else np.nan
        masses = (np.arange(mass_floor, top + 1e-9, BAND_MASS_STEP) if np.isfinite(top) and top > mass_floor
                  else np.array([mass_floor]))
    b = ensemble_bands(run, name, band_masses=masses, mass_floor=mass_floor)
    return CredibleBand(f"{name}, prior", np.asarray(masses, dtype=float), b["radius"], "prior", b["support"])


def bands_from_results(path, names: list[str] | None = None) -> list[CredibleBand]:
    """Prior and posterior bands of R(M) of the ensembles of a likelihood results file."""
    from .scoring import read_scores

    res = read_scores(path)
    out = []
    for name, e in res["ensemble"].items():
        if names and name not in names:
            continue
        out.append(CredibleBand(f"{name}, prior", e["band_mass"], e["band_radius_prior"], "prior",
                                e["band_support_prior"]))
        out.append(CredibleBand(f"{name}, posterior", e["band_mass"], e["band_radius"], "posterior",
                                e["band_support"]))
    return out


#: Band colours: Okabe & Ito (2008, "Color Universal Design") blue and vermillion, readable by colour-blind readers.
_BAND_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7")


def _draw_bands(ax, bands: list[CredibleBand]) -> list:
    """Posterior: 5-95 % light and 16-84 % darker fills with the median; prior: the same as outlines."""
    handles = []
    ensembles = list(dict.fromkeys(b.label.rsplit(", ", 1)[0] for b in bands))
    for b in bands:
        colour = _BAND_COLOURS[ensembles.index(b.label.rsplit(", ", 1)[0]) % len(_BAND_COLOURS)]
        r = np.asarray(b.radius, dtype=float)
        ok = np.all(np.isfinite(r), axis=0)
        if b.support is not None:
            ok &= np.asarray(b.support) >= BAND_MIN_SUPPORT
        m = np.asarray(b.mass, dtype=float)[ok]
        r = r[:, ok]
        if not m.size:
            continue
        if b.which == "posterior":
            ax.fill_betweenx(m, r[0], r[4], color=colour, alpha=0.18, lw=0, zorder=2, gid=f"band:{b.label}:90")
            ax.fill_betweenx(m, r[1], r[3], color=colour, alpha=0.35, lw=0, zorder=2, gid=f"band:{b.label}:68")
            ax.plot(r[2], m, color=colour, lw=1.2, zorder=2, gid=f"band:{b.label}:median")
            handles.append(Rectangle((0, 0), 1, 1, facecolor=colour, alpha=0.35,
                                     label=f"{b.label}: 68 % and 90 % bands"))
        else:
            for k, ls in ((0, "--"), (4, "--"), (1, ":"), (3, ":")):
                ax.plot(r[k], m, color=colour, lw=1.0, ls=ls, zorder=2, gid=f"band:{b.label}:{k}")
            handles.append(Line2D([], [], color=colour, lw=1.0, ls="--", label=f"{b.label}: 90 % (dashed), "
                                  "68 % (dotted)"))
    return handles


def _largest_finite(values, default: float) -> float:
    """The largest finite value, or ``default`` when there is none (every star NaN: none solved)."""
    values = np.asarray(values, dtype=float)
    values = values[np.isfinite(values)]
    return float(values.max()) if values.size else default


def _mass_radius_limits(sequences, constraints: Constraints | None, bands=()) -> tuple[tuple, tuple]:
    m_top = max([_largest_finite(s["mass"], 0.0) for _, s in sequences] + [0.5])
    r_lo, r_hi = [], []
    for b in bands:
        ok = np.isfinite(b.radius[0]) & np.isfinite(b.radius[-1])
        if ok.any():
            m_top = max(m_top, float(b.mass[ok].max()))
            r_lo.append(float(np.min(b.radius[0][ok])))
            r_hi.append(float(np.max(b.radius[-1][ok])))
    for _, s in sequences:
        # stable stars above 0.3 M_max: the light, huge stars would squeeze the interesting part
        big = s.stable & (np.asarray(s["mass"]) >= 0.3 * _largest_finite(s["mass"], np.inf))
        if not big.any():
            continue
        r_lo.append(float(np.nanmin(np.asarray(s["radius"])[big])))
        r_hi.append(float(np.nanmax(np.asarray(s["radius"])[big])))
    if constraints is not None:
        for c in constraints.mass:
            m_top = max(m_top, _mass_band(c)[1 if c.two_sigma else 0][1])
        for c in constraints.mass_radius_samples:
            m_top = max(m_top, float(np.quantile(c.samples[:, 0], 0.99)))
            r_lo.append(float(np.quantile(c.samples[:, 1], 0.01)))
            r_hi.append(float(np.quantile(c.samples[:, 1], 0.99)))
        for e in constraints.ellipse:
            m_top = max(m_top, e.mass + 2 * e.sigma_mass)
            r_lo.append(e.radius - 2 * e.sigma_radius)
            r_hi.append(e.radius + 2 * e.sigma_radius)
        for b in constraints.box:
            m_top = max(m_top, b.mass_max)
            r_lo.append(b.radius_min)
            r_hi.append(b.radius_max)
    top = 1.18 * m_top
    # far enough left that the horizon wedge, the narrowest, is wide enough for its label
    horizon_r = 0.96 * top * FORBIDDEN_REGIONS["horizon"][0] * units.SOLAR_MASS_KM
    left = max(0.0, min(math.floor(min(r_lo or [8.0])) - 3.0, math.floor(horizon_r - 1.5)))
    right = math.ceil(max(r_hi or [16.0])) + 1.0
    return (left, right), (0.0, top)


def overlay_figure(
    sequences: list[tuple[str, EOSSequence]],
    constraints: Constraints | None = None,
    *,
    panels: bool = False,
    title: str | None = None,
    bands: list[CredibleBand] | None = None,
) -> Figure:
    """Mass-radius curves of several EOS over forbidden regions and measurements.

    Parameters
    ----------
    sequences : list of (label, EOSSequence)
        What to draw, e.g. from :func:`stellar_match.exports.select_sequences`.
    constraints : Constraints, optional
        Measurements from :func:`load_constraints`.
    panels : bool
        Add M(rho_c), z(M) and (if any sequence has ``tidal_deformability``)
        Lambda(M) panels beside the mass-radius plot.
    title : str, optional
        Figure title (default: the constraints file's ``title``).
    bands : list of CredibleBand, optional
        Credible bands of R(M) of ensembles (prior and/or posterior), from
        :func:`ensemble_band` or :func:`bands_from_results`.

    Returns
    -------
    matplotlib.figure.Figure
        Axes ``fig.axes[0]`` is the mass-radius plot.  Lines carry gids:
        ``"forbidden:<region>"`` for the region boundaries (M = R/(k GM_sun/c^2)),
        ``"<eos>:stable"``, ``"<eos>:unstable"``, ``"<eos>:max_mass"``.
    """
    bands = list(bands or [])
    if not sequences and not bands:
        raise InputError("no EOS or ensemble to plot")
    tidal = any("tidal_deformability" in s.columns for _, s in sequences)
    if panels:
        rows = [["mr", "rho"], ["mr", "z"]] + ([["mr", "lam"]] if tidal else [])
        fig = Figure(figsize=(11.5, 3.0 * len(rows) + 0.6), layout="constrained")
        axd = fig.subplot_mosaic(rows, width_ratios=[1.35, 1.0])
        ax = axd["mr"]
    else:
        fig = Figure(figsize=(7.6, 7.4), layout="constrained")
        ax = fig.add_subplot()
        axd = {"mr": ax}
    colors = _palette(len(sequences)) if sequences else []
    markers = [_MARKERS[i % len(_MARKERS)] for i in range(len(sequences))]

    xlim, ylim = _mass_radius_limits(sequences, constraints, bands)
    _forbidden(ax, xlim[1], ylim[1])
    handles = [_draw_sequence(ax, s, "radius", "mass", c, mk, label)
               for (label, s), c, mk in zip(sequences, colors, markers, strict=True)]
    handles += _draw_bands(ax, bands)
    handles += [Line2D([], [], color="black", lw=1.9, label="stable branch"),
                Line2D([], [], color="black", lw=1.3, ls=(0, (4, 2.5)), label="unstable branch"),
                Line2D([], [], color="none", marker="o", mfc="white", mec="black", label="maximum mass")]
    if constraints is not None:
        _draw_constraints(ax, constraints, handles)
    ax.set_xlim(xlim)
    ax.set_ylim(ylim)
    ax.set_xlabel(_RADIUS_LABEL)
    ax.set_ylabel(_MASS_LABEL)
    _label_forbidden(ax)
    # outside the axes, so the legend never hides a curve or a measurement
    fig.legend(handles=handles, loc="outside lower center", ncols=3 if panels else 2, fontsize=8, frameon=False)

    if panels:
        _side_panels(axd, sequences, colors, markers, tidal)
    heading = title if title is not None else (constraints.title if constraints else "")
    if heading:
        fig.suptitle(heading, fontsize=12)
    return fig


def _side_panels(axd: dict, sequences, colors, markers, tidal: bool) -> None:
    ax = axd["rho"]
    for (label, s), c, mk in zip(sequences, colors, markers, strict=True):
        _draw_sequence(ax, s, "central_density", "mass", c, mk, label, legend=False)
    ax.set_xscale("log")
    lo, hi = ax.get_xlim()
    ticks = [t * 10.0**e for e in range(10, 20) for t in (1, 2, 5) if lo <= t * 10.0**e <= hi]
    ax.set_xticks(ticks, labels=[f"${t / 10**math.floor(math.log10(t)):.0f}\\times10^{{{math.floor(math.log10(t))}}}$"
                                 for t in ticks])
    ax.xaxis.set_minor_formatter(NullFormatter())  # the automatic minor labels collide
    ax.set_xlabel(r"Central density $\rho_c$ [g cm$^{-3}$]")
    ax.set_ylabel(_MASS_LABEL)
    ax.set_ylim(bottom=0.0)

    ax = axd["z"]
    for (label, s), c, mk in zip(sequences, colors, markers, strict=True):
        _draw_sequence(ax, s, "mass", "surface_redshift", c, mk, label, legend=False)
    k = FORBIDDEN_REGIONS["causality"][0]
    z_causal = 1.0 / math.sqrt(1.0 - 2.0 / k) - 1.0
    top = max(ax.get_ylim()[1], 1.1 * z_causal)
    ax.axhspan(z_causal, top, color=_REGION_GREYS["causality"], lw=0, zorder=0)
    ax.axhline(z_causal, color="0.35", lw=0.8, zorder=1, gid="forbidden:causality_z")
    ax.text(0.02, z_causal, f" causality: z > {z_causal:.3f} forbidden", transform=ax.get_yaxis_transform(),
            va="bottom", fontsize=7.5, color="0.15")
    ax.set_ylim(0.0, top)
    ax.set_xlim(left=0.0)
    ax.set_xlabel(_MASS_LABEL)
    ax.set_ylabel("Surface redshift z")

    if tidal:
        ax = axd["lam"]
        for (label, s), c, mk in zip(sequences, colors, markers, strict=True):
            if "tidal_deformability" in s.columns:
                _draw_sequence(ax, s, "mass", "tidal_deformability", c, mk, label, legend=False)
        ax.set_yscale("log")
        lam = np.concatenate([np.asarray(s["tidal_deformability"])[s.stable & (np.asarray(s["mass"]) >= 0.5)]
                              for _, s in sequences if "tidal_deformability" in s.columns])
        lam = lam[np.isfinite(lam) & (lam > 0)]
        if lam.size:  # the light stars' huge Lambda would flatten the interesting range
            ax.set_ylim(lam.min() / 2.0, lam.max() * 2.0)
        ax.set_xlim(left=0.0)
        ax.set_xlabel(_MASS_LABEL)
        ax.set_ylabel(r"Tidal deformability $\Lambda$")


def save_figure(fig: Figure, path: str | Path) -> Path:
    """Write ``fig`` as PNG (200 dpi), PDF or SVG according to the extension of ``path``.

    Raises
    ------
    InputError
        For another extension or an unwritable path.
    """
    path = check_output_path(path, FIGURE_FORMATS)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fig.savefig(path, dpi=200)
    except OSError as exc:
        raise InputError(f"cannot write here ({exc.strerror or exc})", source=str(path)) from None
    return path
