"""Tabulated EOS: every bad table names file, row and rule; every accepted unit gives the same stars."""

from __future__ import annotations

import hashlib
import itertools

import numpy as np
import pytest

from stellar_match import units
from stellar_match.eos import TableColumns, from_table, polytrope
from stellar_match.errors import InputError, TableError
from stellar_match.sweep import solve_stars

# --- Exact conversion factors, computed here independently of stellar_match.units ---
#: Speed of light, cm/s: exact by the SI definition of the metre (BIPM SI Brochure, 9th ed., 2019).
C_CGS = 299_792_458.0 * 1e2
#: 1 MeV/fm^3 in erg/cm^3: exact, 1 eV = 1.602176634e-19 J (SI 2019 / CODATA 2018),
#: 1 MeV = 1.602176634e-6 erg, 1 fm^3 = 1e-39 cm^3.
MEV_FM3_IN_ERG_CM3 = 1.602176634e33
#: Neutron mass in g: m_n c^2 = 939.56542052 MeV (CODATA 2018, Tiesinga et al. 2021, RMP 93, 025010).
NEUTRON_MASS_G = 939.56542052 * 1.602176634e-6 / C_CGS**2
#: 1 Pa = 1 N/m^2 = 1e5 dyn / 1e4 cm^2 = 10 dyn/cm^2 (SI / cgs definitions).
PA_IN_DYN_CM2 = 10.0

#: Polytrope p = K rho^2 (cgs); with eps = rho c^2 + p/(Gamma - 1) it obeys the
#: first law exactly (Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, eq. 3-7).
K_CGS, GAMMA = 1.0e5, 2.0
RHO_ROWS = np.geomspace(1e5, 4e15, 60)  # g/cm^3
CENTRAL_DENSITIES = np.geomspace(5e14, 3e15, 6)

REST_MASS = TableColumns(("p", "dyn/cm2"), ("e", "erg/cm3"), ("rho", "g/cm3"), "rest_mass_density")


def polytrope_rows():
    """(rho g/cm^3, p dyn/cm^2, eps erg/cm^3) of the analytic polytrope."""
    p = K_CGS * RHO_ROWS**GAMMA
    return RHO_ROWS, p, RHO_ROWS * C_CGS**2 + p / (GAMMA - 1.0)


def write_csv(path, header, rows, comments=()):
    lines = [f"# {c}" for c in comments] + [",".join(header)]
    lines += [",".join(x if isinstance(x, str) else repr(float(x)) for x in row) for row in rows]
    path.write_text("\n".join(lines) + "\n")
    return path


def polytrope_table(tmp_path, name="poly.csv"):
    rho, p, eps = polytrope_rows()
    return write_csv(tmp_path / name, ("rho", "p", "e"), zip(rho, p, eps, strict=True))


def table_error(path, columns=REST_MASS) -> TableError:
    with pytest.raises(TableError) as info:
        from_table("t", path, columns)
    err = info.value
    assert err.source == str(path)
    assert str(path) in err.one_line()
    return err


# --- bad tables -------------------------------------------------------------

def test_non_numeric_cell_names_file_and_line(tmp_path):
    rho, p, eps = polytrope_rows()
    rows = [list(r) for r in zip(rho, p, eps, strict=True)]
    rows[3][1] = "1.0e3x"  # data row 4 = file line 2 comments + header + 4 = 7
    path = write_csv(tmp_path / "t.csv", ("rho", "p", "e"), rows, comments=("made by hand", "p in dyn/cm2"))
    err = table_error(path)
    assert err.row == 7
    assert f"{path}: line 7: " in err.one_line()
    assert "'1.0e3x'" in err.message and "not a number" in err.message


def test_empty_cell_is_not_a_number(tmp_path):
    rho, p, eps = polytrope_rows()
    rows = [list(r) for r in zip(rho, p, eps, strict=True)]
    rows[0][2] = ""
    err = table_error(write_csv(tmp_path / "t.csv", ("rho", "p", "e"), rows))
    assert err.row == 2 and "not a number" in err.message


def test_negative_pressure_names_row(tmp_path):
    rho, p, eps = polytrope_rows()
    p = p.copy()
    p[10] = -p[10]
    err = table_error(write_csv(tmp_path / "t.csv", ("rho", "p", "e"), zip(rho, p, eps, strict=True)))
    assert err.row == 12  # header is line 1, data row 11 is line 12
    assert "pressure must be finite and positive" in err.message


def test_nan_energy_density_names_row(tmp_path):
    rho, p, eps = polytrope_rows()
    rows = [list(r) for r in zip(rho, p, eps, strict=True)]
    rows[5][2] = "nan"
    err = table_error(write_csv(tmp_path / "t.csv", ("rho", "p", "e"), rows))
    assert err.row == 7 and "energy_density must be finite" in err.message


def test_non_increasing_energy_density_names_row(tmp_path):
    rho, p, eps = polytrope_rows()
    eps = eps.copy()
    eps[20] = eps[19]
    err = table_error(write_csv(tmp_path / "t.csv", ("rho", "p", "e"), zip(rho, p, eps, strict=True)))
    assert err.row == 22
    assert "energy_density must increase strictly" in err.message


def test_decreasing_density_names_row(tmp_path):
    rho, p, eps = polytrope_rows()
    rho = rho.copy()
    rho[30] = 0.5 * rho[29]
    err = table_error(write_csv(tmp_path / "t.csv", ("rho", "p", "e"), zip(rho, p, eps, strict=True)))
    assert err.row == 32 and "rest_mass_density must increase strictly" in err.message


def test_missing_column_names_file_and_key(tmp_path):
    cols = TableColumns(("pressure", "dyn/cm2"), ("e", "erg/cm3"), ("rho", "g/cm3"), "rest_mass_density")
    err = table_error(polytrope_table(tmp_path), cols)
    assert err.key == "columns.pressure.column"
    assert "'pressure'" in err.message and "rho, p, e" in err.message


def test_unknown_unit_names_key(tmp_path):
    cols = TableColumns(("p", "bar"), ("e", "erg/cm3"), ("rho", "g/cm3"), "rest_mass_density")
    err = table_error(polytrope_table(tmp_path), cols)
    assert err.key == "columns.pressure.unit"
    assert "'bar'" in err.message and "MeV/fm3" in err.message


def test_wrong_number_of_fields_names_line(tmp_path):
    rho, p, eps = polytrope_rows()
    rows = [list(r) for r in zip(rho, p, eps, strict=True)]
    rows[2].append(1.0)
    err = table_error(write_csv(tmp_path / "t.csv", ("rho", "p", "e"), rows))
    assert err.row == 4
    assert "4 fields" in err.message and "has 3" in err.message


def test_header_only(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("# nothing yet\nrho,p,e\n")
    assert "at least two data rows" in table_error(path).message


def test_comments_only_has_no_header(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("# nothing\n\n")
    assert "no header" in table_error(path).message


def test_missing_table_file(tmp_path):
    err = table_error(tmp_path / "absent.csv")
    assert "not found" in err.message


def test_first_rows_too_soft_to_reach_zero_pressure(tmp_path):
    # p must vanish at rho -> 0 for a surface to exist: Gamma > 1 below the first row.
    rho, p, eps = polytrope_rows()
    p = p.copy()
    p[0] = p[1] * (rho[0] / rho[1]) ** 0.5
    err = table_error(write_csv(tmp_path / "t.csv", ("rho", "p", "e"), zip(rho, p, eps, strict=True)))
    assert err.row == 3 and "Gamma" in err.message


@pytest.mark.parametrize(
    ("declared", "scale"),
    [
        # g/cm^3 numbers (eps / c^2) read as MeV/fm^3: about 1.78e12 times too large
        ("MeV/fm3", 1.0 / C_CGS**2),
        # MeV/fm^3 numbers read as g/cm^3: about 1.78e12 times too small
        ("g/cm3", 1.0 / MEV_FM3_IN_ERG_CM3),
    ],
    ids=["g/cm3-numbers-declared-MeV/fm3", "MeV/fm3-numbers-declared-g/cm3"],
)
def test_energy_column_in_wrong_unit_fails_first_law(tmp_path, declared, scale):
    # A constant factor on eps is invisible where eps ~ rho c^2, but the first law
    # d(eps/rho) = p d rho / rho^2 (e.g. Haensel, Potekhin & Yakovlev 2007,
    # "Neutron Stars 1", eq. 5.5) fixes how eps/rho grows with the pressure.
    rho, p, eps = polytrope_rows()
    path = write_csv(tmp_path / "t.csv", ("rho", "p", "e"), zip(rho, p, eps * scale, strict=True))
    cols = TableColumns(("p", "dyn/cm2"), ("e", declared), ("rho", "g/cm3"), "rest_mass_density")
    err = table_error(path, cols)
    assert "first law" in err.message and "check the column units" in err.message
    assert err.row is not None and 2 <= err.row <= RHO_ROWS.size + 1


def test_byte_order_mark_is_accepted(tmp_path):
    path = polytrope_table(tmp_path)
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    assert from_table("t", path, REST_MASS).kind == "table"


# --- good tables --------------------------------------------------------------

def test_table_metadata(tmp_path):
    path = polytrope_table(tmp_path)
    eos = from_table("poly", path, REST_MASS)
    assert eos.table_sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert eos.table_density_range == pytest.approx((RHO_ROWS[0], RHO_ROWS[-1]), rel=1e-14)
    assert eos.parameters["rows"] == RHO_ROWS.size
    # the analytic polytrope is exactly consistent: only round-off remains
    assert eos.first_law_deviation < 1e-10


def test_central_density_beyond_last_row(tmp_path):
    eos = from_table("poly", polytrope_table(tmp_path), REST_MASS)
    with pytest.raises(InputError) as info:
        solve_stars(eos, central_density=[1e15, 5e15])
    assert info.value.key == "sweep.central_density"
    solve_stars(eos, central_density=[RHO_ROWS[-1]])  # the last row itself is in range


def test_table_of_a_polytrope_gives_the_polytrope(tmp_path):
    # Power-law interpolation in p(rho) with eps from the first law is exact for a
    # polytrope (Read et al. 2009, eqs. 3-7), so the stars agree to round-off.
    table = from_table("poly", polytrope_table(tmp_path), REST_MASS)
    exact = polytrope("poly", K_CGS, GAMMA)
    a = solve_stars(table, central_density=CENTRAL_DENSITIES)
    b = solve_stars(exact, central_density=CENTRAL_DENSITIES)
    assert np.all((b["mass"] > 0.5) & (b["mass"] < 2.0))  # neutron-star-like
    for col in ("mass", "radius", "baryon_mass", "central_pressure", "central_energy_density"):
        np.testing.assert_allclose(a[col], b[col], rtol=1e-6, err_msg=col)


PRESSURE_UNITS = {"dyn/cm2": 1.0, "MeV/fm3": 1.0 / MEV_FM3_IN_ERG_CM3, "Pa": 1.0 / PA_IN_DYN_CM2}
ENERGY_UNITS = {"g/cm3": 1.0 / C_CGS**2, "erg/cm3": 1.0, "MeV/fm3": 1.0 / MEV_FM3_IN_ERG_CM3}
DENSITY_UNITS = {  # (density kind, unit) -> factor from rho in g/cm^3
    ("rest_mass_density", "g/cm3"): 1.0,
    ("baryon_density", "cm-3"): 1.0 / NEUTRON_MASS_G,
    ("baryon_density", "fm-3"): 1e-39 / NEUTRON_MASS_G,
}
UNIT_COMBINATIONS = list(itertools.product(PRESSURE_UNITS, ENERGY_UNITS, DENSITY_UNITS))


@pytest.fixture(scope="module")
def reference_stars(tmp_path_factory):
    """Stars of the table in the base units dyn/cm^2, erg/cm^3, g/cm^3."""
    eos = from_table("poly", polytrope_table(tmp_path_factory.mktemp("reference")), REST_MASS)
    return solve_stars(eos, central_density=CENTRAL_DENSITIES)


@pytest.mark.parametrize(("p_unit", "e_unit", "density"), UNIT_COMBINATIONS,
                         ids=[f"{p}|{e}|{d[1]}" for p, e, d in UNIT_COMBINATIONS])
def test_every_unit_combination_gives_the_same_stars(tmp_path, reference_stars, p_unit, e_unit, density):
    rho, p, eps = polytrope_rows()
    kind, d_unit = density
    path = write_csv(tmp_path / "t.csv", ("d", "p", "e"), zip(
        rho * DENSITY_UNITS[density], p * PRESSURE_UNITS[p_unit], eps * ENERGY_UNITS[e_unit], strict=True))
    eos = from_table("t", path, TableColumns(("p", p_unit), ("e", e_unit), ("d", d_unit), kind))
    stars = solve_stars(eos, central_density=CENTRAL_DENSITIES)
    # Exact factors: the tables differ only in the last digit of each number, so
    # the stars agree far below the solver's own error (~1e-8 against the
    # analytic polytrope above); a factor wrong in its 10th digit would show.
    for col in ("mass", "radius", "baryon_mass", "central_pressure", "surface_redshift"):
        np.testing.assert_allclose(stars[col], reference_stars[col], rtol=1e-11, err_msg=col)


def test_package_conversion_factors_match_codata():
    # Independent check of the factors the table reader multiplies by (sources above).
    assert units.PRESSURE_UNITS["MeV/fm3"] == pytest.approx(MEV_FM3_IN_ERG_CM3, rel=1e-15)
    assert units.PRESSURE_UNITS["Pa"] == PA_IN_DYN_CM2
    assert units.ENERGY_DENSITY_UNITS["erg/cm3"] == pytest.approx(1.0 / C_CGS**2, rel=1e-15)
    assert units.ENERGY_DENSITY_UNITS["MeV/fm3"] == pytest.approx(MEV_FM3_IN_ERG_CM3 / C_CGS**2, rel=1e-15)
    assert units.BARYON_DENSITY_UNITS["fm-3"] == 1e39
    assert units.NEUTRON_MASS_G == pytest.approx(NEUTRON_MASS_G, rel=1e-15)
    assert NEUTRON_MASS_G == pytest.approx(1.67492749804e-24, rel=1e-11)  # CODATA 2018 m_n in kg * 1e3
