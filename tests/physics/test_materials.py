"""Ball materials and ISO 3290-1 grades against the reference sheet (physics-references.md §7)."""

import json
import math

import numpy as np
import pytest

from physics import materials

# Check value #29 — published (via two vendor reproductions of ISO 3290-1:2014 Table and one of
# ISO 3290 3rd ed. 2001): V_Dws, V_DwL and the preferred-gauge range, µm. Exact.
ISO_CHECKS = [
    # grade, V_Dws, V_DwL, preferred gauges ±
    ("G10", 0.25, 0.5, 9.0),
    ("G28", 0.7, 1.4, 12.0),
]


@pytest.mark.parametrize("grade, v_dws, v_dwl, gauge", ISO_CHECKS)
def test_iso3290_check_value_29(grade, v_dws, v_dwl, gauge):
    g = materials.iso3290_grade(grade)
    assert (g.v_dws_um, g.v_dwl_um, g.preferred_gauge_um) == (v_dws, v_dwl, gauge)


@pytest.mark.parametrize("spelling", ["G10", "g10", "10", 10, " G10 "])
def test_iso3290_grade_spellings(spelling):
    assert materials.iso3290_grade(spelling).grade == "G10"


def test_iso3290_unknown_grade_lists_the_grades():
    with pytest.raises(ValueError, match=r"ISO 3290-1 grade 'G11' is unknown; expected one of G3, G5, G10"):
        materials.iso3290_grade("G11")


def test_iso3290_diameter_u_gauge_unknown_is_rectangular_over_preferred_gauges():
    # sheet §7 (computed): G10 ±9 µm → u = 9/√3 = 5.2 µm
    assert materials.iso3290_diameter_u_mm("G10", gauge_known=False) == pytest.approx(9e-3 / math.sqrt(3), rel=1e-12)
    assert round(1e3 * materials.iso3290_diameter_u_mm("G10", gauge_known=False), 1) == 5.2


def test_iso3290_diameter_u_gauge_known_is_lot_variation_over_sqrt12():
    assert materials.iso3290_diameter_u_mm("G28", gauge_known=True) == pytest.approx(1.4e-3 / math.sqrt(12), rel=1e-12)


def test_iso3290_u_in_mu_for_2mm_ball():
    # sheet §7 (computed): G10 gauge unknown on a 2 mm ball is 0.26 % in d and 0.52 % in μ
    u_rel_d = materials.iso3290_diameter_u_mm("G10", gauge_known=False) / 2.0
    assert round(100 * u_rel_d, 2) == 0.26
    assert round(100 * 2 * u_rel_d, 2) == 0.52


# Published densities from the sheet §7 table (kg/m³): every published/handbook value of a row
# must lie inside the row's rectangular distribution.
PUBLISHED = [
    ("steel-52100", [7810.0, 7833.0]),  # published: 52100 data page; published (via) ball sheet
    ("stainless-303", [7900.0]),  # published (via): ASM Metals Handbook 1961 p. 52
    ("stainless-304", [7900.0, 8020.0]),  # ASM 1961 p. 52; Bolz & Tuve 1973 p. 118
    ("stainless-316", [8000.0]),  # ASM 1961 p. 52
    ("stainless-440c", [7700.0]),  # ASM 1961 p. 52 ("440")
    ("tungsten-carbide", [15200.0]),  # Bolz & Tuve p. 183 (pure WC)
    ("glass-soda-lime", [2500.0, 2450.0, 2720.0]),  # Bolz & Tuve p. 177; Marks' 7th ed. 6-7
    ("fused-silica", [2200.0, 2210.0]),  # Bolz & Tuve pp. 178, 187
    ("ptfe", [2100.0, 2150.0, 2300.0]),  # Bolz & Tuve pp. 137, 152
    ("nylon-66", [1130.0, 1150.0]),  # Bolz & Tuve p. 137
    ("polypropylene", [900.0, 905.0]),  # Bolz & Tuve pp. 137, 152
]


@pytest.mark.parametrize("name, values", PUBLISHED)
def test_material_range_covers_published_values(name, values):
    m = materials.material(name)
    lo, hi = m.range_kg_m3
    assert all(lo <= v <= hi for v in values)
    assert m.density_kg_m3 == pytest.approx(0.5 * (lo + hi))
    # rectangular: u = half-width/√3; half-width at least 0.5 % (common practice, module docstring)
    assert m.density_u_kg_m3 == pytest.approx(0.5 * (hi - lo) / math.sqrt(3), rel=1e-12)
    assert 0.5 * (hi - lo) >= 0.005 * m.density_kg_m3 * (1 - 1e-12)


def test_every_material_named_in_the_task_exists_with_a_source():
    names = ["steel-52100", "stainless-302", "stainless-303", "stainless-304", "stainless-316",
             "stainless-440c", "tungsten-carbide", "glass-soda-lime", "glass-borosilicate",
             "ptfe", "nylon-66", "polypropylene"]
    for name in names:
        m = materials.material(name)
        assert m.source and m.density_u_kg_m3 > 0


def test_from_memory_rows_get_one_percent_half_width():
    m = materials.material("glass-borosilicate")  # 2230, from memory (ISO 3585)
    assert m.density_kg_m3 == 2230.0
    assert m.density_u_kg_m3 == pytest.approx(22.3 / math.sqrt(3))
    assert "from memory" in m.source


def test_unknown_material_lists_names():
    with pytest.raises(ValueError, match=r"material 'steel-5210' is unknown; expected one of steel-52100, "):
        materials.material("steel-5210")


# sheet §7 (computed): a 2 mm 52100 ball (7810 kg/m³) is 32.71 mg, a 6 mm ball 0.8833 g.
# Tolerance: the masses are given to 4 significant digits → ±1.5e-4 relative at most.
MASS_ROUNDING_REL = 2e-4


@pytest.mark.parametrize("mass_mg, d_mm", [(32.71, 2.0), (883.3, 6.0)])
def test_density_from_mass_reproduces_sheet(mass_mg, d_mm):
    rho, _ = materials.density_from_mass(mass_mg, d_mm)
    assert rho == pytest.approx(7810.0, rel=MASS_ROUNDING_REL)


def test_density_from_mass_uncertainty_matches_monte_carlo():
    # linear propagation vs seeded Monte Carlo (JCGM 101); small inputs u → linear regime,
    # 200 000 draws → relative std error of the std ≈ 0.16 %; 2 % allows nonlinearity too.
    mass, u_m, d, u_d = 32.71, 0.05, 2.0, 0.002
    rho, u_rho = materials.density_from_mass(mass, d, u_m, u_d)
    rng = np.random.default_rng(29)
    m_s = rng.normal(mass, u_m, 200_000)
    d_s = rng.normal(d, u_d, 200_000)
    rho_s = m_s * 1e-6 / (math.pi * (d_s * 1e-3) ** 3 / 6)
    assert np.std(rho_s) == pytest.approx(u_rho, rel=0.02)
    assert u_rho / rho == pytest.approx(math.hypot(u_m / mass, 3 * u_d / d), rel=1e-12)


@pytest.mark.parametrize("kwargs, message", [
    (dict(mass_mg=-1.0, diameter_mm=2.0), r"mass_mg = -1.0 is not allowed; expected a mass in mg > 0"),
    (dict(mass_mg=30.0, diameter_mm=0.0), r"diameter_mm = 0.0 is not allowed; expected a diameter in mm > 0"),
    (dict(mass_mg=30.0, diameter_mm=2.0, mass_u_mg=-0.1), r"mass_u_mg = -0.1 must be a number ≥ 0"),
])
def test_density_from_mass_rejects_bad_input(kwargs, message):
    with pytest.raises(ValueError, match=message):
        materials.density_from_mass(**kwargs)


def test_to_dict_is_json_friendly():
    json.dumps(materials.material("ptfe").to_dict(), allow_nan=False)
    json.dumps(materials.iso3290_grade("G5").to_dict(), allow_nan=False)
