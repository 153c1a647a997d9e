"""The run-file schema: every dataset and attribute name, its unit and meaning.

One module owns the names so that the solver's columns, the writer, the
reader (and its checks on open), ensembles and exports agree.  Lower layers
import from here; this module imports nothing of the package.

Format history
--------------
1. First release.
2. Per-star ``status`` (quality code, meanings in :data:`STAR_STATUS`) and
   ``error_estimate`` in every ``/eos/<name>`` group and ensemble; a star
   that could not be computed to tolerance is NaN there, never a
   plausible-looking number.  Version-1 files are still read (they have
   neither dataset).
3. Unit attributes in astropy's spelling, so that ``astropy.units.Unit``
   parses every one and they match the exports: ``solMass`` (was ``Msun``),
   ``g / cm3`` (``g/cm3``), ``dyn / cm2`` (``dyn/cm2``), ``cm / s2``
   (``cm/s2``), ``g cm2`` (unchanged), ``km`` (unchanged) and ``""`` for
   dimensionless (was ``1``); :data:`LEGACY_UNITS` maps them back, and files
   of versions 1 and 2 are read with their old spellings.  HDF5 dimension
   scales name every axis (:data:`DIMENSIONS`): a ``star`` index in every
   ``/eos/<name>`` group, ``member`` and ``star`` in every ensemble,
   ``target`` and ``binary`` in the subgroups, so h5py, netCDF readers and
   xarray (engine ``h5netcdf``) see named dimensions.  Per-star datasets may
   be gzip-compressed (``[output] compression``); HDF5 filters are
   transparent to readers, so this needs no version of its own.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "FORMAT", "FORMAT_VERSION", "READABLE_VERSIONS", "STAR_DATASETS", "STAR_STATUS", "TARGET_DATASETS",
    "BINARY_DATASETS", "SUMMARY_ATTRIBUTES", "NOT_SOLVED", "MEMBER_SUMMARIES", "MEMBER_STATUS", "dataset_dtype",
    "DATASET_SINCE_VERSION", "MAX_NAME_LENGTH", "group_name_problem", "DIMENSIONS", "LEGACY_UNITS",
    "SWEEP_UNITS", "accepted_units", "DIMENSIONS_SINCE_VERSION", "MEMBER_PARAMETER_UNITS", "PRIOR_WEIGHT",
    "OPTIONAL_STAR_DATASETS", "CORE_DATASETS", "CRUST_DATASETS", "optional_star_datasets",
    "RADIAL_MODE_DATASETS", "RADIAL_MODE_2D", "RADIAL_STATUS",
]

FORMAT = "stellar_match.run"
FORMAT_VERSION = 3
#: Format versions this software reads.
READABLE_VERSIONS = (1, 2, 3)

#: Per-star datasets of every ``/eos/<name>`` group: name -> (unit, meaning).
STAR_DATASETS: dict[str, tuple[str, str]] = {
    "central_density": ("g / cm3", "central rest-mass density (incompressible: energy density / c^2)"),
    "central_energy_density": ("g / cm3", "central energy density / c^2"),
    "central_pressure": ("dyn / cm2", "central pressure"),
    "mass": ("solMass", "gravitational mass"),
    "radius": ("km", "areal radius of the surface p = 0"),
    "baryon_mass": ("solMass", "baryon (rest) mass"),
    "compactness": ("", "GM/(Rc^2)"),
    "surface_redshift": ("", "z = (1 - 2GM/(Rc^2))^(-1/2) - 1"),
    "surface_gravity": ("cm / s2", "GM/(R^2 sqrt(1 - 2GM/(Rc^2)))"),
    "love_number_k2": ("", "quadrupolar tidal Love number k2 (Hinderer 2008)"),
    "tidal_deformability": ("", "dimensionless tidal deformability Lambda = (2/3) k2 (Rc^2/GM)^5"),
    "moment_of_inertia": ("g cm2", "slow-rotation moment of inertia (Hartle 1967)"),
    "binding_energy": ("solMass", "M_baryon - M"),
    "error_estimate": ("", "estimated relative integration error of M and R (embedded Dormand-Prince)"),
    "star_status": ("", "per-star quality code, 0 = within tolerance (meanings: attribute star_status_meaning)"),
    "stable": ("", "turning-point stability (dM/d rho_c > 0, up to the first maximum)"),
}
#: Per-star datasets present only in groups whose EOS has a first-order phase transition (kind
#: ``phase_transition``: the core ones, NaN for stars without a core) or a crust (the crust ones; see
#: :func:`optional_star_datasets`), in every format version: name -> (unit, meaning).
#: Readers that do not know them still accept the files (an extra 1-D column of the stars' length).
OPTIONAL_STAR_DATASETS: dict[str, tuple[str, str]] = {
    "core_radius": ("km", "areal radius of the core of the high-density phase (NaN: no core)"),
    "core_mass": ("solMass", "gravitational mass m(r) inside the core of the high-density phase (NaN: no core)"),
    # -- the crust: groups whose EOS has a crust (the SLy crust fit of the
    # piecewise_polytrope, spectral and sound_speed_nodes kinds, a table with crust_core_density);
    # r_cc is where the rest-mass density equals the EOS's crust_core_density.
    "crust_thickness": ("km", "R - r_cc, the radial extent of the crust above the crust-core boundary"),
    "crust_mass": ("solMass", "M - m(r_cc), the gravitational mass of the crust"),
    "crust_inertia_fraction": ("", "Delta I_crust / I = 1 - J(r_cc)/J(R), the crust's share of the slow-rotation "
                                   "moment of inertia (Hartle 1967 frame dragging)"),
}
#: The optional datasets of an EOS with an interior density jump (``eos.interior_jumps``) ...
CORE_DATASETS = ("core_radius", "core_mass")
#: ... and those of an EOS with a crust (``eos.crust_core_enthalpy``).
CRUST_DATASETS = ("crust_thickness", "crust_mass", "crust_inertia_fraction")


def optional_star_datasets(eos) -> tuple[str, ...]:
    """Names of :data:`OPTIONAL_STAR_DATASETS` that the sweeps of ``eos`` write (core, then crust)."""
    core = CORE_DATASETS if getattr(eos, "interior_jumps", None) is not None else ()
    crust = CRUST_DATASETS if getattr(eos, "crust_core_enthalpy", None) is not None else ()
    return core + crust


# --- radial oscillation modes ---
#: Per-star datasets written only when ``[sweep] radial_modes = N`` asks for them (any format version):
#: name -> (unit, meaning).  The first two are 2-D (stars x modes, dimension scales ``star`` and ``mode``).
RADIAL_MODE_DATASETS: dict[str, tuple[str, str]] = {
    "radial_omega_squared": ("rad2 / s2", "omega^2 of the radial modes, fundamental first (NaN: not computed)"),
    "radial_frequency": ("kHz", "omega / 2 pi of the radial modes (NaN where omega^2 < 0 or not computed)"),
    "radial_stable": ("", "omega_0^2 > 0 (radial_modes); compare with the turning-point flag stable"),
    "radial_status": ("", "0 = modes computed; else why not (attribute radial_status_meaning)"),
}
#: Codes of radial_status (every non-zero code comes with NaN modes).
RADIAL_STATUS: dict[int, str] = {
    0: "ok",
    1: "the star itself has a non-zero star_status",
    2: "eigenproblem not finite",
    3: "too few grid points for the modes asked",
    4: "more than one interior density jump (one transition per EOS is supported)",
}
#: Which of them are stars x modes.
RADIAL_MODE_2D = ("radial_omega_squared", "radial_frequency")

#: Per-star status codes (dataset ``star_status``); every non-zero code comes with NaN physics columns.
STAR_STATUS: dict[int, str] = {
    0: "ok: error estimate within tolerance",
    1: "tolerance not met within the step budget (attempted steps, and re-solves of the star alone)",
    2: "integration broke down (non-finite state)",
    3: "no bound star (mass or radius not positive, or 2GM/(Rc^2) beyond the Buchdahl bound 8/9)",
    4: "not solved: its ensemble member failed before the solve (see the member status)",
}
#: The star status of stars that were never solved.
NOT_SOLVED = 4
#: Datasets of the ``targets`` subgroup (one entry per requested mass).
TARGET_DATASETS: dict[str, str] = {
    "requested_mass": "solMass",
    "mass": "solMass",
    "radius": "km",
    "central_density": "g / cm3",
    "surface_redshift": "",
    "tidal_deformability": "",
    "moment_of_inertia": "g cm2",
}
#: Datasets of the ``binaries`` subgroup (one entry per requested pair).
BINARY_DATASETS: dict[str, str] = {
    "mass_1": "solMass",
    "mass_2": "solMass",
    "chirp_mass": "solMass",
    "lambda_tilde": "",
}
#: Per-EOS summary attributes and their units.
SUMMARY_ATTRIBUTES: dict[str, str] = {
    "causal": "",
    "max_sound_speed_squared": "",  # c_s^2 / c^2
    "max_mass": "solMass",
    "max_mass_radius": "km",
    "max_mass_central_density": "g / cm3",
    "max_mass_status": "",
}
#: Per-member summaries of an ensemble: dataset name -> unit.
MEMBER_SUMMARIES: dict[str, str] = {
    "max_mass": "solMass",
    "max_mass_radius": "km",
    "max_mass_central_density": "g / cm3",
    "radius_at_1.4": "km",
    "tidal_deformability_at_1.4": "",
    "causal": "",
    "status": "",
}
#: Optional 1-D dataset of an ensemble: each member's prior weight (from a ``weight`` column of the
#: members CSV; absent: every member weighs the same).
PRIOR_WEIGHT = "prior_weight"
#: Member status codes (dataset ``status`` of an ensemble) and their meaning
#: (attribute ``status_meaning``).
MEMBER_STATUS: dict[int, str] = {
    0: "ok",
    1: "invalid parameters: the EOS cannot be built",
    2: "acausal: sound speed above c below the maximum-mass density",
    3: "no stable star in the sweep range",
    4: "maximum mass not reached in the sweep range",
    5: "central density beyond the EOS's validity",
    6: "stars not computed to tolerance within the step budget (NaN, see star_status); "
       "summaries are from the other stars",
}


def dataset_dtype(name: str):
    """numpy dtype of a per-star or per-member dataset."""
    return {"stable": bool, "causal": bool, "status": np.int8, "star_status": np.int8,
            "radial_stable": bool, "radial_status": np.int8}.get(name, float)


#: Per-star datasets that are not in every readable version: name -> first
#: format version that has it (all others are in every version).
DATASET_SINCE_VERSION: dict[str, int] = {"error_estimate": 2, "star_status": 2}

#: Units of the member parameters of ensembles (``/ensemble/<name>/members/<parameter>``),
#: where they have one: log10_p1 is the log10 of a pressure in dyn/cm^2; the
#: polytropic K (cgs) has a unit that depends on each member's gamma, and the
#: gammas, sound speeds and mu_e are dimensionless.  Not stored in the file
#: (the datasets predate it).
MEMBER_PARAMETER_UNITS: dict[str, str] = {
    "log10_p1": "dex(dyn / cm2)",
    "energy_density": "g / cm3",
    "bag_constant": "MeV / fm3",
    "reference_pressure": "dyn / cm2",
    "transition_pressure": "dyn / cm2",
    "energy_density_jump": "g / cm3",
}

#: Units of an ensemble's ``sweep_values`` by sweep quantity.
SWEEP_UNITS: dict[str, str] = {"central_density": "g / cm3", "central_pressure": "dyn / cm2"}

#: The spelling of every unit in files of format versions 1 and 2 (new -> old).
LEGACY_UNITS: dict[str, str] = {
    "solMass": "Msun",
    "g / cm3": "g/cm3",
    "dyn / cm2": "dyn/cm2",
    "cm / s2": "cm/s2",
    "": "1",
}


def accepted_units(unit: str, version: int) -> tuple[str, ...]:
    """The unit attribute strings a file of format ``version`` may carry for ``unit``.

    Version 3 writes astropy's spelling only.  Files of versions 1 and 2 carry
    the old spelling; the new one is accepted there too, since a file is
    sometimes relabelled by hand (and tests downgrade new files that way).
    """
    if version >= 3:
        return (unit,)
    old = LEGACY_UNITS.get(unit, unit)
    return (old, unit) if old != unit else (unit,)


#: Names of the HDF5 dimension scales (index datasets 0, 1, ... n-1) and what they count.
#: ``star``: the stars of an ``/eos/<name>`` group and the central values of an ensemble;
#: ``member``: the members of an ensemble; ``target``, ``binary``: the rows of the subgroups.
DIMENSIONS: dict[str, str] = {
    "star": "index of the star in sweep order",
    "member": "index of the ensemble member",
    "target": "index of the requested mass",
    "binary": "index of the requested pair",
    "mode": "radial mode number (0: fundamental)",  # radial modes
}
#: Dimension scales are written from this format version on (and required in its files).
DIMENSIONS_SINCE_VERSION = 3

#: Longest EOS or ensemble name: it is a label in tables and figure legends.
MAX_NAME_LENGTH = 200


def group_name_problem(name: object) -> str | None:
    """Why ``name`` cannot be the name of an ``/eos`` or ``/ensemble`` group, or None if it can.

    EOS and ensemble names become HDF5 link names, which are split at ``/``,
    give ``.`` a meaning of its own and are cut at the first NUL by the HDF5
    C library (so ``"a\\0b"`` and ``"a"`` would collide only when the run
    file is assembled, after the whole computation).  Control characters and
    outer blanks would make the one-line error messages and the summary
    table ambiguous, and a leading dot hides the group from the usual
    listings.
    """
    import unicodedata

    if not isinstance(name, str):
        return f"needs a string, got {type(name).__name__}"
    if not name.strip():
        return "needs a non-empty name"
    if name in (".", ".."):
        return f"{name!r} is not a usable name"
    if "/" in name:
        return f"may not contain '/', got {name!r}"
    if any(unicodedata.category(c) in ("Cc", "Zl", "Zp") for c in name):
        return f"may not contain NUL, line breaks or other control characters, got {name!r}"
    if name.startswith("."):
        return f"may not start with '.', got {name!r}"
    if name != name.strip():
        return f"may not start or end with blanks, got {name!r}"
    if len(name) > MAX_NAME_LENGTH:
        return f"is {len(name)} characters long (at most {MAX_NAME_LENGTH})"
    return None
