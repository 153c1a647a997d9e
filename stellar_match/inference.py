"""EOS parameters in, ln L out: the likelihood as a function for external samplers.

:class:`EOSLikelihood` wraps the whole chain for one parameter vector:
build the EOS of an ensemble kind, solve a small sweep as one batch, find
the stable branch and the maximum mass, and integrate the measurements of a
constraints object along it (:mod:`stellar_match.likelihood`).  Calling it
returns the total ln L, or -inf -- never an exception -- for parameters that
give no valid EOS or no usable sequence, so any MCMC or nested sampler can
call it directly::

    import emcee
    like = sm.EOSLikelihood("piecewise_polytrope", sm.load_constraints("c.toml"))
    sampler = emcee.EnsembleSampler(32, 4, lambda t: like(t) + log_prior(t))

:meth:`EOSLikelihood.members` scores a whole array of parameter vectors in
memory (an ensemble without a run file) and returns the per-member
summaries with their ln L.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from .constraints import BinaryMeasurement, Constraints
from .ensemble import ENSEMBLE_KINDS, EnsembleSpec, solve_members
from .errors import InputError
from .likelihood import LIKELIHOOD_STATUS, density_of, log_likelihoods, stable_branches
from .schema import MEMBER_STATUS, MEMBER_SUMMARIES
from .structure import StepControl

__all__ = ["EOSLikelihood", "DEFAULT_CENTRAL_DENSITIES", "SAMPLER_STEP_SCALE", "SAMPLER_TOLERANCE"]

#: Default sweep of a likelihood call: 60 central densities (g/cm^3), log-spaced.  From below the
#: central density of a 1 Msun star of stiff EOS to beyond the maximum of soft ones (common practice
#: for Read et al. 2009 piecewise polytropes; widen it for other kinds).
DEFAULT_CENTRAL_DENSITIES = np.geomspace(2.5e14, 4.0e15, 60)
#: Default solver settings of a likelihood call: steps twice the sweep default and a per-star tolerance of
#: 5e-4, which give relative errors below 3e-6 in M and R and 2e-5 (SLy) to 1.4e-4 (a stiff EOS) in Lambda
#: against tolerance 1e-9, and ln L within 2e-6 (README) -- far below any measurement's width.
SAMPLER_STEP_SCALE = 2.0
SAMPLER_TOLERANCE = 5e-4


def _parameters_of(kind: str, fixed: dict | None, names) -> tuple[dict, tuple[str, ...]]:
    """(parsed fixed keys, parameter names) of a sampler over ``kind``, as an ensemble block gives them."""
    from .eos import registry

    if not isinstance(fixed, dict | None):
        raise InputError(f"needs a dict of the kind's keys, got {type(fixed).__name__}", key="fixed")
    raw = dict(fixed or {})
    if "kind" in raw:
        raise InputError("holds the kind's keys, not the kind itself", key="fixed.kind")
    column_keys = frozenset(c.key for c in ENSEMBLE_KINDS[kind].columns)
    _, parsed = registry.parse_options({"kind": kind, **raw}, "EOSLikelihood", "fixed", None,
                                       open_keys=column_keys)  # a ConfigError (an InputError) names the key
    offered = set() if names is None else {str(n) for n in names}
    columns = registry.member_columns(kind, parsed, offered)
    if names is not None and tuple(str(n) for n in names) != columns:
        raise InputError(f"kind {kind!r} with these fixed keys takes parameters ({', '.join(columns)}) in that "
                         f"order, got ({', '.join(map(str, names))})", key="parameter_names")
    if not columns:
        raise InputError(f"every key of kind {kind!r} is fixed: nothing to sample", key="fixed")
    return parsed, columns


class EOSLikelihood:
    """ln L(parameters) of an EOS kind given a constraints object.

    Parameters
    ----------
    kind : str
        An ensemble kind (``"piecewise_polytrope"``: log10_p1, gamma1,
        gamma2, gamma3; ``"polytrope"``: K, gamma; every kind of README's
        member-column table).
    constraints : Constraints
        Measurements, at least one with a likelihood.
    central_densities : array_like, optional
        The sweep (g/cm^3, or dyn/cm^2 with ``quantity="central_pressure"``);
        default :data:`DEFAULT_CENTRAL_DENSITIES`.
    quantity : {"central_density", "central_pressure"}
    control : StepControl, optional
        Solver step control (default: :data:`SAMPLER_STEP_SCALE` and :data:`SAMPLER_TOLERANCE`;
        ``SolverOptions().control()`` gives a sweep's defaults).
    member_chunk : int
        Members solved as one batch by :meth:`members`.
    fixed : dict, optional
        Keys of the kind held for every parameter vector, written as in an
        ``[[ensemble]]`` block, e.g. ``{"base": {"kind": "polytrope", "K": 1e5,
        "gamma": 2.5}}`` for ``phase_transition`` or ``{"densities": [...]}``
        for ``sound_speed_nodes``.  Every other key is a parameter.
    parameter_names : sequence of str, optional
        The parameters, in the order of the vector, when the kind has optional
        ones (e.g. ``["gamma0", "gamma1", "gamma2"]`` for ``spectral``); checked
        against the kind.  Default: its required columns given ``fixed``.
    refine_maximum : bool
        Locate each maximum mass by fresh solves (Brent's search, about a
        dozen structure-only stars), or (default) take it from the parabola
        through the three samples around it: for 60 stars the vertex is
        within a few 1e-6 of the located maximum (README's measurements).

    Examples
    --------
    >>> like = EOSLikelihood("piecewise_polytrope", constraints)   # doctest: +SKIP
    >>> like([34.38, 3.0, 3.0, 2.9])                                # doctest: +SKIP
    -4.73...
    """

    def __init__(self, kind: str, constraints: Constraints, *, central_densities=None,
                 quantity: str = "central_density", control: StepControl | None = None,
                 member_chunk: int = 64, refine_maximum: bool = False, fixed: dict | None = None,
                 parameter_names=None) -> None:
        if kind not in ENSEMBLE_KINDS:
            raise InputError(f"unknown kind {kind!r} (use one of: {', '.join(ENSEMBLE_KINDS)})", key="kind")
        if not constraints.scored():
            raise InputError("has no measurement with a likelihood", source=constraints.source)
        if quantity not in ("central_density", "central_pressure"):
            raise InputError(f"needs central_density or central_pressure, got {quantity!r}", key="quantity")
        values = DEFAULT_CENTRAL_DENSITIES if central_densities is None else central_densities
        self.values = np.asarray(values, dtype=float)
        if self.values.ndim != 1 or self.values.size < 3 or not np.all(np.isfinite(self.values) & (self.values > 0)):
            raise InputError("needs at least 3 positive finite central values", key="central_densities")
        self.kind, self.constraints, self.quantity = kind, constraints, quantity
        if control is None:
            from .config import SolverOptions

            control = SolverOptions(step_scale=SAMPLER_STEP_SCALE, tolerance=SAMPLER_TOLERANCE).control()
        self.control = control
        self.member_chunk = int(member_chunk)
        self.refine_maximum = bool(refine_maximum)
        self.fixed, self.parameter_names = _parameters_of(kind, fixed, parameter_names)
        self.labels = constraints.labels
        # Lambda only when a measurement needs it: the structure-only solve is about twice as fast
        self.response = any(isinstance(m, BinaryMeasurement) for m in constraints.scored())
        self._densities = [density_of(m) for m in constraints.scored()]

    def __repr__(self) -> str:
        return (f"EOSLikelihood({self.kind!r}, {len(self.labels)} measurements, {self.values.size} stars, "
                f"parameters {', '.join(self.parameter_names)})")

    def __call__(self, parameters) -> float:
        """Total ln L of one parameter vector.

        -inf for parameters that make no valid EOS or no usable sequence (it
        never raises for those); a vector of the wrong length or type is a
        caller's mistake and raises InputError, so that a sampler set up with
        the wrong number of dimensions fails at once instead of sitting still.
        """
        theta = self._vector(parameters)
        try:
            return float(self.details(theta)["log_likelihood"])
        except (InputError, ValueError, FloatingPointError, OverflowError, ZeroDivisionError):
            return -math.inf

    def _vector(self, parameters) -> np.ndarray:
        try:
            theta = np.asarray(parameters, dtype=float)
        except (TypeError, ValueError):
            raise InputError(f"needs {len(self.parameter_names)} numbers ({', '.join(self.parameter_names)}), "
                             f"got {parameters!r}", key="parameters") from None
        if theta.shape != (len(self.parameter_names),):
            raise InputError(f"needs {len(self.parameter_names)} numbers ({', '.join(self.parameter_names)}), "
                             f"got shape {theta.shape}", key="parameters")
        return theta

    def details(self, parameters) -> dict:
        """ln L per measurement, the total, the member summaries and the status of one parameter vector.

        Returns
        -------
        dict
            ``log_likelihood`` (total, -inf when not scored), ``log_likelihood_by_measurement``,
            ``member_status`` and ``likelihood_status`` with their meanings, and the
            :data:`~stellar_match.schema.MEMBER_SUMMARIES`.
        """
        out = self.members(self._vector(parameters)[None, :])
        return {k: (v[0] if isinstance(v, np.ndarray) and v.ndim >= 1 else v) for k, v in out.items()}

    def members(self, parameters, *, progress: Callable[[int], None] | None = None) -> dict[str, np.ndarray]:
        """Score many parameter vectors in memory.

        Parameters
        ----------
        parameters : array_like, shape (members, n_parameters)
            One row per member, columns in ``parameter_names`` order.
        progress : callable, optional
            Called with the number of members finished after each batch.

        Returns
        -------
        dict of str -> ndarray
            ``log_likelihood`` (members; -inf where not scored),
            ``log_likelihood_by_measurement`` (members x measurements),
            ``member_status``, ``likelihood_status``, and the member summaries
            (``max_mass``, ``radius_at_1.4``, ...), plus ``member_status_meaning``
            and ``likelihood_status_meaning``.
        """
        params = np.asarray(parameters, dtype=float)
        if params.ndim != 2 or params.shape[1] != len(self.parameter_names):
            raise InputError(f"needs rows of {len(self.parameter_names)} parameters "
                             f"({', '.join(self.parameter_names)}), got shape {params.shape}", key="parameters")
        n = params.shape[0]
        k = len(self.labels)
        result = {"log_likelihood": np.full(n, -np.inf), "log_likelihood_by_measurement": np.full((n, k), np.nan),
                  "member_status": np.zeros(n, np.int8), "likelihood_status": np.ones(n, np.int8)}
        for name in MEMBER_SUMMARIES:
            if name != "status":
                result[name] = np.full(n, np.nan)
        spec = EnsembleSpec(index=0, name="parameters", kind=self.kind, parameters=params, origin={},
                            columns=self.parameter_names, fixed=self.fixed)
        for a in range(0, n, self.member_chunk):
            b = min(n, a + self.member_chunk)
            with np.errstate(all="ignore"):
                solved = solve_members(spec, a, b, self.quantity, self.values, self.control, response=self.response,
                                       refine=self.refine_maximum)
                usable = solved["status"] == 0
                mass = np.where(solved["star_status"] == 0, solved["mass"], np.nan)
                br = stable_branches(solved["central_pressure"], mass, solved["radius"], solved["stable"],
                                     tidal_deformability=solved["tidal_deformability"],
                                     max_mass=solved["max_mass"], max_mass_radius=solved["max_mass_radius"],
                                     usable=usable, mass_floor=self.constraints.mass_floor)
                ll, lstatus = log_likelihoods(br, self.constraints, densities=self._densities)
            lstatus[~usable] = 1
            total = np.sum(ll, axis=1)
            counted = usable & ((lstatus == 0) | (lstatus == 2))
            result["log_likelihood"][a:b] = np.where(counted, total, -np.inf)
            result["log_likelihood_by_measurement"][a:b] = ll
            result["member_status"][a:b] = solved["status"]
            result["likelihood_status"][a:b] = lstatus
            for name in MEMBER_SUMMARIES:
                if name != "status":
                    result[name][a:b] = solved[name]
            if progress is not None:
                progress(b - a)
        result["member_status_meaning"] = dict(MEMBER_STATUS)
        result["likelihood_status_meaning"] = dict(LIKELIHOOD_STATUS)
        return result
