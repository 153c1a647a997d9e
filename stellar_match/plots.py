"""Figures: candidate EOS overlaid on the forbidden regions and the user's measurements.

:func:`overlay_figure` draws the mass-radius curves of any number of EOS
sequences (stable branch solid, unstable branch dashed, markers along both,
maximum-mass star marked), shades the regions no static star may enter
(:data:`stellar_match.exports.FORBIDDEN_REGIONS`, each with a legend entry),
draws the measurements of a constraints file (:func:`load_constraints`), and
with ``panels=True`` adds M(rho_c) -- M(p_c) for uniform-density sweeps --,
z(M) and, when the sequences have a ``tidal_deformability`` column,
Lambda(M).  It draws into a new :class:`matplotlib.figure.Figure` or into
the caller's own Axes, dict or grid of Axes, or Figure (``ax=``), with the
object-oriented API (no pyplot, no global state); :func:`save_figure` writes
PNG, PDF or SVG.

Colours come from the Okabe-Ito qualitative set (:data:`OKABE_ITO`), made to
stay distinct for colour-blind readers; each EOS also gets its own marker,
repeated along its curves, so curves stay apart in greyscale and print.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure, FigureBase
from matplotlib.lines import Line2D
from matplotlib.patches import Ellipse, Patch, Rectangle
from matplotlib.text import Text
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
    "OKABE_ITO",
    "PANELS",
    "OverlayArtists",
    "palette",
    "overlay_figure",
    "CredibleBand",
    "ensemble_band",
    "bands_from_results",
    "save_figure",
]

FIGURE_FORMATS = (".png", ".pdf", ".svg")


# --- drawing ------------------------------------------------------------------------

#: Okabe & Ito (2008), "Color Universal Design (CUD): how to make figures and presentations
#: that are friendly to colorblind people" (jfly.uni-koeln.de/color/): eight colours that stay
#: apart for protan, deutan and tritan vision.  Ordered so that the first few are the most
#: distinct on white and on the grey regions; yellow, the faintest on white, comes last.
OKABE_ITO = ("#0072B2",  # blue
             "#D55E00",  # vermillion
             "#009E73",  # bluish green
             "#CC79A7",  # reddish purple
             "#E69F00",  # orange
             "#56B4E9",  # sky blue
             "#000000",  # black
             "#F0E442")  # yellow
#: Markers along every curve, one per EOS (they repeat after ten, the colours after eight).
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h")
#: Spacing of the markers along a curve, as a fraction of the axes diagonal (matplotlib markevery).
_MARK_SPACING = 0.11
#: Grey levels of the forbidden regions, outermost (causality) lightest.
_REGION_GREYS = {"causality": "0.88", "buchdahl": "0.74", "horizon": "0.55"}
_KEY_COLOR = "0.25"  # the branch / maximum-mass legend keys: not an EOS colour
_RADIUS_LABEL = "Radius R [km]"
_MASS_LABEL = r"Mass M [M$_\odot$]"
#: Panels of an overlay, in the order of a sequence of Axes passed as ``ax``.
PANELS = ("mr", "central", "z", "lam")
_CENTRAL_LABELS = {"central_density": r"Central density $\rho_c$ [g cm$^{-3}$]",
                   "central_pressure": r"Central pressure $p_c$ [dyn cm$^{-2}$]"}


@dataclass
class OverlayArtists:
    """What an overlay drew, to restyle it or build your own legend.

    Attributes
    ----------
    figure : matplotlib.figure.Figure or SubFigure
        The figure the axes belong to.
    axes : dict of str -> Axes
        The axes drawn into, by panel: ``"mr"`` (mass-radius), ``"central"``
        (M against rho_c or p_c), ``"z"`` (z(M)), ``"lam"`` (Lambda(M)).
    lines : dict of str -> list of Line2D
        Every line of each EOS label, over all panels (stable and unstable
        branches, maximum-mass markers).
    regions : dict of str -> Artist
        The shaded forbidden regions: ``"horizon"``, ``"buchdahl"``,
        ``"causality"`` in the mass-radius axes, ``"causality_z"`` in z(M).
    labels : dict of str -> Text
        The region names written along their boundaries.
    measurements : list of Artist
        The patches of the constraints' measurements.
    handles : list of Artist
        The legend entries, in legend order (for a legend of your own).
    legend : Legend or None
        The legend drawn (figure or axes legend), if any.
    """

    figure: object
    axes: dict
    lines: dict = field(default_factory=dict)
    regions: dict = field(default_factory=dict)
    labels: dict = field(default_factory=dict)
    measurements: list = field(default_factory=list)
    handles: list = field(default_factory=list)
    legend: object = None

    def __repr__(self) -> str:
        return f"OverlayArtists(axes={list(self.axes)}, eos={list(self.lines)}, regions={list(self.regions)})"


def palette(n: int) -> list[str]:
    """Colours for ``n`` separate EOS: the Okabe-Ito set, repeating after eight."""
    return [OKABE_ITO[i % len(OKABE_ITO)] for i in range(n)]


def _curve(seq: EOSSequence, x_key: str, y_key: str):
    """(x, y, stable) in sweep order, with the maximum-mass star inserted."""
    rho = np.asarray(seq["central_density"], dtype=float)
    # by density, then pressure: the uniform-density EOS has one rho_c for every star
    order = np.lexsort((np.asarray(seq["central_pressure"], dtype=float), rho))
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
                   mark_start: float = 0.0) -> tuple[Line2D, list[Line2D]]:
    """Stable runs solid with filled markers, unstable runs dashed with open ones; M_max marked.

    Returns the legend handle and the lines drawn.  ``mark_start`` staggers
    the markers of different EOS along their curves, so they do not sit on
    top of each other where curves cross.
    """
    x, y, stable = _curve(seq, x_key, y_key)
    ok = np.isfinite(x) & np.isfinite(y)
    x, y, stable = x[ok], y[ok], stable[ok]
    starts = np.flatnonzero(np.concatenate([[True], stable[1:] != stable[:-1]]))
    ends = np.append(starts[1:], x.size)
    drawn = []
    # no finite star at all (none solved to tolerance): no curve, only the M_max marker if any
    for a, b in zip(starts, ends, strict=True) if x.size else ():
        run = slice(max(a - 1, 0), b)  # start at the previous run's last star: no gap
        drawn += ax.plot(x[run], y[run], color=color, lw=1.9 if stable[a] else 1.3,
                         ls="-" if stable[a] else (0, (4, 2.5)), marker=marker, ms=4.5,
                         markevery=(mark_start, _MARK_SPACING), mec=color,
                         mfc=color if stable[a] else "white", mew=1.0,
                         gid=f"{label}:{'stable' if stable[a] else 'unstable'}")
    s = seq.summary
    keys = {"radius": s.get("max_mass_radius", np.nan), "mass": s.get("max_mass", np.nan),
            "central_density": s.get("max_mass_central_density", np.nan)}
    style = {"marker": marker, "color": color, "ms": 8, "mec": "black", "mew": 0.9, "ls": "none", "zorder": 5,
             "gid": f"{label}:max_mass"}
    if x_key in keys and y_key in keys:
        drawn += ax.plot([keys[x_key]], [keys[y_key]], **style)
    elif y_key == "surface_redshift" and x_key == "mass":
        drawn += ax.plot([keys["mass"]], [exterior.redshift_at_radius(keys["mass"], keys["radius"])], **style)
    handle = Line2D([], [], color=color, lw=1.9, marker=marker, ms=5.5, mec=color, label=label)
    return handle, drawn


def _forbidden(ax, r_max: float, m_top: float) -> dict:
    """Shade R < k GM/c^2 for every forbidden region; boundary lines carry gid 'forbidden:<name>'."""
    r = np.linspace(0.0, r_max, 200)
    regions = {}
    for name, (k, _label, _) in reversed(list(FORBIDDEN_REGIONS.items())):
        m_line = r / (k * units.SOLAR_MASS_KM)
        regions[name] = ax.fill_between(r, m_line, m_top, color=_REGION_GREYS[name], lw=0, zorder=0,
                                        gid=f"region:{name}")
        ax.plot(r, m_line, color="0.35", lw=0.8, zorder=1, gid=f"forbidden:{name}")
    return regions


def _region_handles() -> list:
    """One legend entry per forbidden region, with its grey and its rule."""
    return [Patch(facecolor=_REGION_GREYS[name], edgecolor="0.35", lw=0.6, label=f"forbidden: {label}")
            for name, (_, label, _) in FORBIDDEN_REGIONS.items()]


class _BoundaryLabel(Text):
    """A region's name along its boundary M = slope R, placed inside the axes when drawn.

    Placed at draw time, after the layout engine has sized the axes, so that
    the text fits whatever the figure size, limits or layout: it runs along
    the visible part of the line, ending just inside where the line leaves
    the axes, with every corner of the text inside the axes.  When the
    visible part is too short even at a smaller size, it is not drawn (the
    legend still names the region).
    """

    _SIZES = (7.5, 6.5, 5.5)

    def __init__(self, slope: float, text: str, **kwargs) -> None:
        super().__init__(0.0, 0.0, text, rotation_mode="anchor", ha="right", va="bottom",
                         fontsize=self._SIZES[0], **kwargs)
        self._slope = slope

    def draw(self, renderer) -> None:
        self._place(renderer)
        super().draw(renderer)

    def _place(self, renderer) -> None:
        ax, s = self.axes, self._slope
        (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
        xa, xb = max(x0, y0 / s), min(x1, y1 / s)
        self.set_visible(xb > xa)
        if xb <= xa:
            return
        to_px = ax.transData
        a, b = to_px.transform((xa, s * xa)), to_px.transform((xb, s * xb))
        box = ax.bbox
        u = (b - a) / np.hypot(*(b - a))
        n = np.array([-u[1], u[0]])  # the side of the text: above the line, inside the region
        pad = renderer.points_to_pixels(2.0)
        self.set_rotation(math.degrees(math.atan2(u[1], u[0])))
        for size in self._SIZES:
            self.set_fontsize(size)
            w, h, _ = renderer.get_text_width_height_descent(self.get_text(), self.get_fontproperties(),
                                                             ismath=False)
            # back off from the exit point until the upper corners clear the top and right edges
            d = max(pad, (h * n[1] + pad - (box.y1 - b[1])) / max(u[1], 1e-9),
                    (max(h * n[0], 0.0) + pad - (box.x1 - b[0])) / max(u[0], 1e-9))
            p = b - d * u
            corners = np.array([p, p + h * n, p - w * u, p - w * u + h * n])
            edge = pad / 2  # d keeps a full pad: round-off must not push a corner out
            inside = ((corners[:, 0] >= box.x0 + edge).all() and (corners[:, 0] <= box.x1 - edge).all()
                      and (corners[:, 1] >= box.y0 + edge).all() and (corners[:, 1] <= box.y1 - edge).all())
            if inside and np.dot(p - w * u - a, u) >= 0:  # the text starts on the visible part
                self.set_position(to_px.inverted().transform(p))
                return
        self.set_visible(False)


def _label_forbidden(ax) -> dict:
    """Write each region's name along its boundary, inside the axes (see _BoundaryLabel)."""
    labels = {}
    for name, (k, label, _) in FORBIDDEN_REGIONS.items():
        text = _BoundaryLabel(1.0 / (k * units.SOLAR_MASS_KM), label.split(",")[0] + " ",
                              color="0.1", zorder=2, gid=f"label:{name}", transform=ax.transData)
        ax.add_artist(text)  # clipped to the axes as well
        labels[name] = text
    return labels


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


def _draw_bands(ax, bands: list[CredibleBand], colours=_BAND_COLOURS) -> list:
    """Posterior: 5-95 % light and 16-84 % darker fills with the median; prior: the same as outlines."""
    handles = []
    ensembles = list(dict.fromkeys(b.label.rsplit(", ", 1)[0] for b in bands))
    for b in bands:
        colour = colours[ensembles.index(b.label.rsplit(", ", 1)[0]) % len(colours)]
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


def _central_quantity(sequences, central: str) -> str:
    """The x quantity of the first side panel: rho_c, or p_c where rho_c would be a vertical line."""
    if central in _CENTRAL_LABELS:
        return central
    if central != "auto":
        raise ValueError(f"central must be 'auto', 'central_density' or 'central_pressure', got {central!r}")
    for _, s in sequences:
        rho = np.asarray(s["central_density"], dtype=float)
        rho = rho[np.isfinite(rho)]
        if rho.size >= 2 and rho.min() == rho.max():  # uniform density: rho_c = eps/c^2 for every star
            return "central_pressure"
    return "central_density"


def _new_layout(fig, panels: bool, tidal: bool) -> dict:
    if not panels:
        return {"mr": fig.add_subplot()}
    rows = [["mr", "central"], ["mr", "z"]] + ([["mr", "lam"]] if tidal else [])
    return dict(fig.subplot_mosaic(rows, width_ratios=[1.35, 1.0]))


def _resolve_axes(ax, panels: bool, tidal: bool) -> tuple[object, dict, bool]:
    """(figure, panel -> Axes, whether the layout is ours) for every accepted form of ``ax``."""
    if ax is None or isinstance(ax, FigureBase):
        if ax is None:
            rows = 2 + tidal if panels else 0
            ax = Figure(figsize=(11.5, 3.0 * rows + 0.6) if panels else (7.6, 7.4), layout="constrained")
        elif isinstance(ax, Figure) and ax.get_layout_engine() is None:
            ax.set_layout_engine("constrained")  # room for the legend below the axes
        return ax, _new_layout(ax, panels, tidal), True
    if isinstance(ax, Axes):
        if panels:
            raise ValueError("panels=True draws up to four panels: pass a dict or a sequence of Axes, "
                             "or a Figure, as ax")
        return ax.get_figure(), {"mr": ax}, False
    if isinstance(ax, Mapping):
        unknown = [k for k in ax if k not in PANELS]
        if unknown:
            raise ValueError(f"unknown panel {unknown[0]!r} in ax (panels: {', '.join(PANELS)})")
        axd = {k: ax[k] for k in PANELS if k in ax}
    else:
        items = list(np.ravel(np.asarray(ax, dtype=object)))
        if not 1 <= len(items) <= len(PANELS):
            raise ValueError(f"ax holds {len(items)} Axes; an overlay has at most {len(PANELS)} panels "
                             f"({', '.join(PANELS)})")
        axd = dict(zip(PANELS, items, strict=False))
    for k, a in axd.items():
        if not isinstance(a, Axes):
            raise TypeError(f"ax[{k!r}] is a {type(a).__name__}, not a matplotlib Axes")
    return next(iter(axd.values())).get_figure(), axd, False


def overlay_figure(
    sequences: list[tuple[str, EOSSequence]],
    constraints: Constraints | None = None,
    *,
    panels: bool = False,
    title: str | None = None,
    ax=None,
    legend: str | None = "auto",
    central: str = "auto",
    bands: list[CredibleBand] | None = None,
):
    """Mass-radius curves of several EOS over forbidden regions and measurements.

    Parameters
    ----------
    sequences : list of (label, EOSSequence)
        What to draw, e.g. from :func:`stellar_match.exports.select_sequences`.
    constraints : Constraints, optional
        Measurements from :func:`load_constraints`.
    panels : bool
        Add M(rho_c) (or M(p_c), see ``central``), z(M) and (if any sequence
        has ``tidal_deformability``) Lambda(M) panels beside the mass-radius
        plot.  Used when ``ax`` is None or a Figure.
    title : str, optional
        Title (default: the constraints file's ``title``): the figure's when
        the layout is ours, else the first axes'.
    ax : None, Axes, dict or sequence of Axes, or Figure
        Where to draw.  None: a new Figure.  An Axes: the mass-radius plot
        goes there and nothing else is created.  A dict with keys among
        :data:`PANELS` (``"mr"``, ``"central"``, ``"z"``, ``"lam"``), or a
        sequence (e.g. ``fig.subplots(2, 2)``) taken in that order: each
        panel given is drawn into its Axes, the others are left out.  A
        Figure or SubFigure: the usual layout is drawn into it.
    legend : {"auto", "figure", "axes", None}
        "auto": below the axes as a figure legend when the layout is ours
        (``ax`` None or a Figure), else inside the first axes.  None: no
        legend (the entries are in the returned ``handles``).
    central : {"auto", "central_density", "central_pressure"}
        The x quantity of the first side panel.  "auto" takes p_c when
        some sequence has one rho_c for all its stars (the uniform-density
        EOS, swept in central pressure), where M(rho_c) would be a vertical
        line, else rho_c.
    bands : list of CredibleBand, optional
        Credible bands of R(M) of ensembles (prior and/or posterior), from
        :func:`ensemble_band` or :func:`bands_from_results`, drawn in the
        mass-radius axes in the colours after the EOS colours.

    Returns
    -------
    matplotlib.figure.Figure or OverlayArtists
        With ``ax=None``, the new Figure (as before: ``fig.axes[0]`` is the
        mass-radius plot); otherwise an :class:`OverlayArtists` naming the
        axes, the lines per EOS, the regions, labels and legend entries.
        Pass ``ax=Figure()`` to have a new figure and its artists.  Lines
        carry gids: ``"forbidden:<region>"`` for the region boundaries
        (M = R/(k GM_sun/c^2)), ``"<eos>:stable"``, ``"<eos>:unstable"``,
        ``"<eos>:max_mass"``; the shaded regions ``"region:<region>"``.

    Notes
    -----
    Each EOS has its own colour (:data:`OKABE_ITO`, a colour-blind-safe
    qualitative set; colours repeat after eight EOS) and its own marker,
    repeated along its curves (filled on the stable branch, open on the
    unstable one), so curves stay apart in greyscale too.  The maximum-mass
    star is a larger marker with a black edge.  The M(p_c) panel has no
    maximum-mass marker (the run file stores rho_c of that star, not p_c).
    """
    bands = list(bands or [])
    if not sequences and not bands:
        raise InputError("no EOS or ensemble to plot")
    if legend not in ("auto", "figure", "axes", None):
        raise ValueError(f"legend must be 'auto', 'figure', 'axes' or None, got {legend!r}")
    tidal = any("tidal_deformability" in s.columns for _, s in sequences)
    fig, axd, ours = _resolve_axes(ax, panels, tidal)
    art = OverlayArtists(figure=fig, axes=axd, lines={label: [] for label, _ in sequences})
    n = len(sequences)
    styles = [(label, s, c, _MARKERS[i % len(_MARKERS)], _MARK_SPACING * i / n)
              for i, ((label, s), c) in enumerate(zip(sequences, palette(n), strict=True))]

    eos_handles, band_handles = [], []
    if "mr" in axd:
        ax_mr = axd["mr"]
        xlim, ylim = _mass_radius_limits(sequences, constraints, bands)
        art.regions.update(_forbidden(ax_mr, xlim[1], ylim[1]))
        eos_handles = _draw_all(ax_mr, styles, "radius", "mass", art)
        # the ensembles' colours follow the EOS colours, so a band never shares one with a curve
        band_handles = _draw_bands(ax_mr, bands, colours=palette(n + len(bands))[n:] or OKABE_ITO)
    art.handles = eos_handles + band_handles
    art.handles += [Line2D([], [], color=_KEY_COLOR, lw=1.9, label="stable branch"),
                    Line2D([], [], color=_KEY_COLOR, lw=1.3, ls=(0, (4, 2.5)), marker="o", ms=4.5,
                           mfc="white", mec=_KEY_COLOR, label="unstable branch (open markers)"),
                    Line2D([], [], color="none", marker="o", ms=8, mfc="white", mec="black", label="maximum mass")]
    art.handles += _region_handles()
    if "mr" in axd:
        if constraints is not None:
            before = set(ax_mr.patches) | set(ax_mr.collections)
            _draw_constraints(ax_mr, constraints, art.handles)
            art.measurements = [p for p in [*ax_mr.patches, *ax_mr.collections] if p not in before]
        ax_mr.set_xlim(xlim)
        ax_mr.set_ylim(ylim)
        ax_mr.set_xlabel(_RADIUS_LABEL)
        ax_mr.set_ylabel(_MASS_LABEL)
        art.labels.update(_label_forbidden(ax_mr))
    if "central" in axd:
        _central_panel(axd["central"], styles, _central_quantity(sequences, central), art)
    if "z" in axd:
        _redshift_panel(axd["z"], styles, art)
    if "lam" in axd:
        _tidal_panel(axd["lam"], styles, art)
    if sequences and not eos_handles:  # no mass-radius axes: the legend names the EOS all the same
        art.handles[:0] = [Line2D([], [], color=c, lw=1.9, marker=mk, ms=5.5, mec=c, label=label)
                           for label, _, c, mk, _ in styles]

    where = ("figure" if ours else "axes") if legend == "auto" else legend
    if where == "figure":
        # outside the axes, so the legend never hides a curve or a measurement
        art.legend = fig.legend(handles=art.handles, loc="outside lower center", ncols=3 if len(axd) > 1 else 2,
                                fontsize=8, frameon=False)
    elif where == "axes":
        art.legend = next(iter(axd.values())).legend(handles=art.handles, fontsize=7, framealpha=0.9)
    heading = title if title is not None else (constraints.title if constraints else "")
    if heading:
        if ours:
            fig.suptitle(heading, fontsize=12)
        else:
            next(iter(axd.values())).set_title(heading)
    return fig if ax is None else art


def _draw_all(ax, styles, x_key: str, y_key: str, art: OverlayArtists) -> list:
    handles = []
    for label, s, c, mk, start in styles:
        if x_key in s.columns and y_key in s.columns:
            handle, lines = _draw_sequence(ax, s, x_key, y_key, c, mk, label, start)
            handles.append(handle)
            art.lines[label] += lines
    return handles


def _log_ticks_1_2_5(ax) -> None:
    """1, 2, 5 x 10^k ticks on a log axis spanning about one decade (else matplotlib's own)."""
    lo, hi = ax.get_xlim()
    if not (0 < lo < hi) or hi / lo > 30:
        return
    ticks = [t * 10.0**e for e in range(math.floor(math.log10(lo)), math.ceil(math.log10(hi)) + 1)
             for t in (1, 2, 5) if lo <= t * 10.0**e <= hi]
    ax.set_xticks(ticks, labels=[f"${t / 10**math.floor(math.log10(t)):.0f}\\times10^{{{math.floor(math.log10(t))}}}$"
                                 for t in ticks])
    ax.xaxis.set_minor_formatter(NullFormatter())  # the automatic minor labels collide


def _central_panel(ax, styles, quantity: str, art: OverlayArtists) -> None:
    _draw_all(ax, styles, quantity, "mass", art)
    ax.set_xscale("log")
    _log_ticks_1_2_5(ax)
    ax.set_xlabel(_CENTRAL_LABELS[quantity])
    ax.set_ylabel(_MASS_LABEL)
    ax.set_ylim(bottom=0.0)


def _redshift_panel(ax, styles, art: OverlayArtists) -> None:
    _draw_all(ax, styles, "mass", "surface_redshift", art)
    k = FORBIDDEN_REGIONS["causality"][0]
    z_causal = 1.0 / math.sqrt(1.0 - 2.0 / k) - 1.0
    top = max(ax.get_ylim()[1], 1.1 * z_causal)
    art.regions["causality_z"] = ax.axhspan(z_causal, top, color=_REGION_GREYS["causality"], lw=0, zorder=0,
                                            gid="region:causality_z")
    ax.axhline(z_causal, color="0.35", lw=0.8, zorder=1, gid="forbidden:causality_z")
    art.labels["causality_z"] = ax.text(0.02, z_causal, f" causality: z > {z_causal:.3f} forbidden",
                                        transform=ax.get_yaxis_transform(), va="bottom", fontsize=7.5,
                                        color="0.15", clip_on=True, gid="label:causality_z")
    ax.set_ylim(0.0, top)
    ax.set_xlim(left=0.0)
    ax.set_xlabel(_MASS_LABEL)
    ax.set_ylabel("Surface redshift z")


def _tidal_panel(ax, styles, art: OverlayArtists) -> None:
    _draw_all(ax, styles, "mass", "tidal_deformability", art)
    ax.set_yscale("log")
    lam = [np.asarray(s["tidal_deformability"])[s.stable & (np.asarray(s["mass"]) >= 0.5)]
           for _, s, *_ in styles if "tidal_deformability" in s.columns]
    lam = np.concatenate(lam) if lam else np.array([])
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
