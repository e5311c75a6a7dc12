"""Reference liquids against the check values of physics-references.md (rows 15–20, §6)."""

import json
import math
import time

import numpy as np
import pytest

from physics import fluids

# ---- check value #15: Cheng pure liquids (computed: Cheng eqs. 21–22), rel tol 1e-5 ----------
CHENG_PURE_REL = 1e-5


def test_check_15_cheng_pure_liquids_at_20c():
    assert fluids.cheng_glycerol_viscosity_pa_s(20.0) * 1e3 == pytest.approx(1413.831, rel=CHENG_PURE_REL)
    assert fluids.cheng_water_viscosity_pa_s(20.0) * 1e3 == pytest.approx(1.004860, rel=CHENG_PURE_REL)


# ---- check value #16: Cheng mixtures (computed; vs Segur/Dow 6.00 / 219), rel tol 1e-4 ---------
@pytest.mark.parametrize("w, t_c, mu_mpa_s", [
    (0.5, 20.0, 6.00225),  # computed: Cheng eq. 6 (sheet row 16)
    (0.9, 20.0, 223.746),  # computed: Cheng eq. 6 (sheet row 16)
    (0.99, 20.0, 1136.67),  # computed: Cheng eq. 6 (sheet row 16)
])
def test_check_16_cheng_mixtures(w, t_c, mu_mpa_s):
    assert fluids.fluid_state("glycerol-water", t_c, w).viscosity_pa_s * 1e3 == pytest.approx(mu_mpa_s, rel=1e-4)


# ---- check value #17 and §6.6: d ln μ/dT (computed: Cheng), rel tol 1e-2 (3 digits given) -------
DLNMU_REL = 1e-2


@pytest.mark.parametrize("w, t_c, dlnmu_per_k", [
    (1.0, 20.0, -0.0923),  # row 17
    (1.0, 25.0, -0.0860),  # §6.6
    (0.99, 20.0, -0.0902),  # §6.6
    (0.90, 20.0, -0.0744),  # §6.6
    (0.80, 20.0, -0.0611),  # §6.6
    (0.60, 20.0, -0.0435),  # §6.6
    (0.0, 20.0, -0.0245),  # §6.6 "water −2.45 %/K (20 °C)", Cheng water term
])
def test_check_17_temperature_coefficient(w, t_c, dlnmu_per_k):
    state = fluids.fluid_state("glycerol-water", t_c, w)
    assert state.dlnmu_dT_per_K == pytest.approx(dlnmu_per_k, rel=DLNMU_REL)


# ---- check value #18 and §6.4 grid: Volk & Kähler 2018 (computed), rel tol 1e-5 ----------------
VOLK_GRID = {  # w: {T °C: ρ kg/m³}
    0.0: {15: 998.97, 20: 998.05, 25: 996.89, 30: 995.52},
    0.5: {15: 1128.54, 20: 1126.11, 25: 1123.63, 30: 1121.11},
    0.8: {15: 1210.94, 20: 1207.90, 25: 1204.87, 30: 1201.86},
    0.9: {15: 1237.99, 20: 1234.88, 25: 1231.78, 30: 1228.70},
    1.0: {15: 1263.82, 20: 1260.76, 25: 1257.70, 30: 1254.64},
}


@pytest.mark.parametrize("w, t_c, rho", [(w, t, r) for w, row in VOLK_GRID.items() for t, r in row.items()])
def test_check_18_volk_kahler_density(w, t_c, rho):
    assert fluids.volk_density_kg_m3(w, t_c) == pytest.approx(rho, rel=1e-5)


def test_volk_density_is_vectorised_and_finite_at_the_ends():
    w = np.linspace(0.0, 1.0, 101)
    rho = fluids.volk_density_kg_m3(w, 20.0)
    assert rho.shape == (101,) and np.all(np.isfinite(rho)) and np.all(np.diff(rho) > 0)


def test_glycerol_density_slope_is_volk_slope():
    # published: Volk slope dρ_g/dT = −0.612 kg/m³/K (sheet §6.6); contraction vanishes at w = 1
    assert fluids.fluid_state("glycerol", 20.0).drho_dT_kg_m3_per_K == pytest.approx(-0.612, rel=1e-6)


def test_density_per_wt_percent_near_pure_glycerol():
    # sheet §6.6 (computed: Volk): near w = 1 at 20 °C, dρ/dw ≈ 2.25 kg/m³ per wt%
    assert fluids.fluid_state("glycerol", 20.0).drho_dw_kg_m3 / 100 == pytest.approx(2.25, abs=0.005)


# ---- check value #19: IAPWS 2008 verification point (IAPWS R12-08 Table 4, from memory) --------
def test_check_19_iapws2008_viscosity():
    assert fluids.iapws2008_viscosity_pa_s(998.0, 298.15) * 1e6 == pytest.approx(889.735100, rel=1e-8)


# ---- check value #20 and §6.5: water at 0.101325 MPa (computed: IAPWS-95 + IAPWS 2008) ---------
@pytest.mark.parametrize("t_c, rho, mu_mpa_s, n", [
    (15.0, 999.103, 1.13757, 1.33375),
    (20.0, 998.207, 1.00160, 1.33335),  # row 20
    (25.0, 997.048, 0.890022, 1.33286),  # row 20
    (30.0, 995.649, 0.797222, 1.33229),
])
def test_check_20_water(t_c, rho, mu_mpa_s, n):
    state = fluids.fluid_state("water", t_c)
    assert state.density_kg_m3 == pytest.approx(rho, rel=1e-5)
    assert state.viscosity_pa_s * 1e3 == pytest.approx(mu_mpa_s, rel=1e-5)
    assert state.refractive_index == pytest.approx(n, rel=1e-5)
    assert state.warnings == []


# A single water state must be quick enough for the CLI and for per-clip use (task: < 50 ms).
WATER_CALL_BUDGET_S = 0.050


def test_water_state_is_fast():
    timings = []
    for t_c in (17.123, 23.456, 28.789):  # uncached temperatures
        start = time.perf_counter()
        fluids.fluid_state("water", t_c)
        timings.append(time.perf_counter() - start)
    assert min(timings) < WATER_CALL_BUDGET_S


def test_water_dlnmu_dT_matches_isobaric_finite_difference():
    # the analytic chain (∂μ/∂T|ρ + ∂μ/∂ρ|T dρ/dT) vs a finite difference along the isobar;
    # a ±0.05 K step has truncation error ~1e-6 relative, 1e-4 leaves room.
    h = 0.05
    fd = (math.log(fluids.water_viscosity_pa_s(20.0 + h)) - math.log(fluids.water_viscosity_pa_s(20.0 - h))) / (2 * h)
    assert fluids.fluid_state("water", 20.0).dlnmu_dT_per_K == pytest.approx(fd, rel=1e-4)


def test_iapws_water_term_option():
    mu0 = fluids.cheng_viscosity_pa_s(0.0, 20.0, water_term="iapws")
    assert float(mu0) == pytest.approx(fluids.water_viscosity_pa_s(20.0), rel=1e-12)
    # glycerol end is unaffected by the water term
    assert float(fluids.cheng_viscosity_pa_s(1.0, 20.0, water_term="iapws")) == pytest.approx(1.4138306, rel=1e-6)
    # sheet §6.1: Cheng's water term is 0.33 % above IAPWS at 20 °C (computed)
    assert fluids.cheng_water_viscosity_pa_s(20.0) / mu0 - 1 == pytest.approx(0.0033, abs=0.00005)
    state = fluids.fluid_state("glycerol-water", 20.0, 0.5, water_term="iapws")
    assert "IAPWS 2008" in state.source


@pytest.mark.parametrize("t_c", [0.0, 99.97])
def test_iapws_water_term_at_the_ends_of_liquid_water(t_c):
    # the temperature derivative must stay inside 0–99.97 °C (one-sided there), not raise
    state = fluids.fluid_state("glycerol-water", t_c, 0.5, water_term="iapws")
    cheng = fluids.fluid_state("glycerol-water", t_c, 0.5)
    # Cheng's and the IAPWS water term give slopes within a few per cent of each other
    assert state.dlnmu_dT_per_K == pytest.approx(cheng.dlnmu_dT_per_K, rel=0.05)


# ---- Segur & Oberstar (1951) grid, published (via) Dow table 18 (sheet §6.2) ----------------------
# Cheng states agreement within ±3.5 % over this grid (sheet §6.1).
CHENG_VS_SEGUR_REL = 0.035
SEGUR = {  # mass %: (0, 10, 20, 30, 40 °C) mPa·s
    0: (1.792, 1.308, 1.005, 0.8007, 0.656),
    10: (2.44, 1.74, 1.31, 1.03, 0.826),
    20: (3.44, 2.41, 1.76, 1.35, 1.07),
    30: (5.14, 3.49, 2.50, 1.87, 1.46),
    40: (8.25, 5.37, 3.72, 2.72, 2.07),
    50: (14.6, 9.01, 6.00, 4.21, 3.10),
    60: (29.9, 17.4, 10.8, 7.19, 5.08),
    65: (45.7, 25.3, 15.2, 9.85, 6.80),
    67: (55.5, 29.9, 17.7, 11.3, 7.73),
    70: (76, 38.8, 22.5, 14.1, 9.4),
    75: (132, 65.2, 35.5, 21.2, 13.6),
    80: (255, 116, 60.1, 33.9, 20.8),
    85: (540, 223, 109, 58, 33.5),
    90: (1310, 498, 219, 109, 60),
    95: (3690, 1270, 523, 237, 121),
    100: (12070, 3900, 1410, 612, 284),
}


@pytest.mark.parametrize("percent", sorted(SEGUR))
def test_cheng_within_stated_band_of_segur_oberstar(percent):
    temps = np.array([0.0, 10.0, 20.0, 30.0, 40.0])
    mu = fluids.cheng_viscosity_pa_s(percent / 100, temps) * 1e3
    dev = mu / np.array(SEGUR[percent]) - 1
    assert np.all(np.abs(dev) <= CHENG_VS_SEGUR_REL)


# ---- §6.6 water uptake at 20 °C (computed: Cheng), three digits given → abs 5e-4 ------------------
@pytest.mark.parametrize("w, ratio", [(0.999, 0.978), (0.995, 0.896), (0.99, 0.804), (0.98, 0.652), (0.95, 0.365)])
def test_water_uptake_ratios(w, ratio):
    mu = fluids.fluid_state("glycerol-water", 20.0, w).viscosity_pa_s
    assert mu / fluids.fluid_state("glycerol", 20.0).viscosity_pa_s == pytest.approx(ratio, abs=5e-4)


def test_dlnmu_dw_near_pure_glycerol():
    # sheet §6.6: d ln μ/dC_m ≈ 22 per unit mass fraction near C_m = 1 ("≈": 5 %)
    assert fluids.fluid_state("glycerol", 20.0).dlnmu_dw == pytest.approx(22.0, rel=0.05)


# ---- validity ranges → warnings; non-physical input → ValueError -----------------------------------
def test_no_warnings_inside_ranges():
    assert fluids.fluid_state("glycerol-water", 22.0, 0.8).warnings == []


@pytest.mark.parametrize("t_c, fragment", [
    (35.0, "outside the 15–30 °C data basis of the Volk & Kähler (2018) density model"),
    (10.0, "outside the 15–30 °C data basis"),
    (105.0, "outside Cheng (2008)'s validity range 0–100 °C"),
    (-5.0, "outside Cheng (2008)'s validity range 0–100 °C"),
])
def test_validity_warnings(t_c, fragment):
    state = fluids.fluid_state("glycerol-water", t_c, 0.9)
    assert any(fragment in w for w in state.warnings)


@pytest.mark.parametrize("args, kwargs, message", [
    (("oil", 20.0), {}, r"liquid model 'oil' is unknown; expected one of water, glycerol-water, glycerol"),
    (("water", 120.0), {}, r"temperature_c = 120 °C is outside liquid water at 0.101325 MPa; expected 0 to 99.97 °C"),
    (("water", -3.0), {}, r"temperature_c = -3 °C is outside liquid water"),
    (("water", 20.0, 0.5), {}, r"glycerol_mass_fraction = 0.5 does not apply to model 'water'"),
    (("glycerol", 20.0, 0.9), {}, r"glycerol_mass_fraction = 0.9 does not apply to model 'glycerol'"),
    (("glycerol-water", 20.0), {}, r"glycerol_mass_fraction is required for model 'glycerol-water'"),
    (("glycerol-water", 20.0, 1.2), {}, r"glycerol_mass_fraction = 1.2 must lie between 0 and 1"),
    (("glycerol-water", 200.0, 0.5), {}, r"temperature_c = 200 °C is far outside the glycerol-water correlations"),
    (("glycerol-water", float("nan"), 0.5), {}, r"temperature_c = nan must be a finite number"),
    (("glycerol-water", 20.0, 0.5), {"water_term": "crc"}, r"water_term = 'crc' is unknown; expected 'cheng' or 'iapws'"),
])
def test_bad_input_raises(args, kwargs, message):
    with pytest.raises(ValueError, match=message):
        fluids.fluid_state(*args, **kwargs)


def test_glycerol_alias_equals_w_one():
    a = fluids.fluid_state("glycerol", 21.0)
    b = fluids.fluid_state("glycerol-water", 21.0, 1.0)
    assert a.viscosity_pa_s == b.viscosity_pa_s and a.density_kg_m3 == b.density_kg_m3
    assert a.glycerol_mass_fraction == 1.0 and a.model == "glycerol"


def test_state_uncertainty_helpers_combine_terms():
    s = fluids.fluid_state("glycerol-water", 20.0, 0.99)
    u_mu = s.viscosity_u_pa_s(temperature_u_c=0.1, glycerol_mass_fraction_u=0.002)
    expected = s.viscosity_pa_s * math.sqrt(s.reference_u_rel ** 2 + (s.dlnmu_dT_per_K * 0.1) ** 2 + (s.dlnmu_dw * 0.002) ** 2)
    assert u_mu == pytest.approx(expected, rel=1e-12)
    assert s.reference_u_rel == pytest.approx(0.035 / math.sqrt(3))
    u_rho = s.density_u_kg_m3(temperature_u_c=0.1, glycerol_mass_fraction_u=0.002)
    assert u_rho == pytest.approx(math.sqrt((s.density_u_rel * s.density_kg_m3) ** 2 + (s.drho_dT_kg_m3_per_K * 0.1) ** 2 + (s.drho_dw_kg_m3 * 0.002) ** 2))


def test_to_dict_is_plain_json():
    d = fluids.fluid_state("water", 20.0).to_dict()
    text = json.dumps(d, allow_nan=False)
    assert all(type(v) in (str, float, list) for v in d.values()), d
    assert "IAPWS-95" in text


# ---- inverse: the glycerol fraction that explains a measured viscosity ------------------------------
INVERSE_W_ATOL = 1e-9  # brentq to 1e-13 in w; the forward model is smooth


@pytest.mark.parametrize("w", [0.3, 0.8, 0.95, 0.99, 0.999])
@pytest.mark.parametrize("t_c", [15.0, 20.0, 25.0])
def test_inverse_round_trip(w, t_c):
    mu = fluids.fluid_state("glycerol-water", t_c, w).viscosity_pa_s
    res = fluids.glycerol_fraction_for_viscosity(mu, t_c)
    assert res.ok
    assert res.glycerol_mass_fraction == pytest.approx(w, abs=INVERSE_W_ATOL)
    assert res.water_mass_fraction == pytest.approx(1 - w, abs=INVERSE_W_ATOL)


def test_inverse_from_sheet_ratio():
    # sheet §6.6: at 20 °C μ(99 %)/μ(100 %) = 0.804 → the inverse of 0.804 μ_g must be ≈ 0.99
    # (0.804 is rounded to 3 digits: ±0.0005/0.804 in μ ÷ d ln μ/dw ≈ 21 → ±3e-5 in w)
    mu = 0.804 * fluids.fluid_state("glycerol", 20.0).viscosity_pa_s
    assert fluids.glycerol_fraction_for_viscosity(mu, 20.0).glycerol_mass_fraction == pytest.approx(0.99, abs=5e-5)


def test_inverse_uncertainty_matches_monte_carlo():
    # JCGM 101 check of the first-order propagation: u(μ) = 1 %, u(T) = 0.1 K at w ≈ 0.985.
    # 2000 draws → the std of the std is ≈ 1.6 %; 5 % (3σ) covers that and the mild nonlinearity.
    t_c, w_true = 21.0, 0.985
    mu = fluids.fluid_state("glycerol-water", t_c, w_true).viscosity_pa_s
    res = fluids.glycerol_fraction_for_viscosity(mu, t_c, mu_u_pa_s=0.01 * mu, temperature_u_c=0.1)
    rng = np.random.default_rng(2008)
    mus = rng.normal(mu, 0.01 * mu, 2000)
    temps = rng.normal(t_c, 0.1, 2000)
    ws = [fluids.glycerol_fraction_for_viscosity(m, t).glycerol_mass_fraction for m, t in zip(mus, temps)]
    assert np.std(ws) == pytest.approx(res.glycerol_mass_fraction_u, rel=0.05)
    assert res.glycerol_mass_fraction_u_model == pytest.approx(0.035 / math.sqrt(3) / res.dlnmu_dw)


@pytest.mark.parametrize("mu, fragment", [
    (2.0, "is above pure glycerol at 20 °C"),
    (0.0009, "is below pure water at 20 °C"),
])
def test_inverse_out_of_range_is_a_value_with_a_reason(mu, fragment):
    res = fluids.glycerol_fraction_for_viscosity(mu, 20.0)
    assert not res.ok and res.glycerol_mass_fraction is None
    assert fragment in res.reason
    json.dumps(res.to_dict(), allow_nan=False)


@pytest.mark.parametrize("kwargs, message", [
    (dict(mu_pa_s=-1.0, temperature_c=20.0), r"mu_pa_s = -1.0 is not allowed; expected a viscosity in Pa·s > 0"),
    (dict(mu_pa_s=1.0, temperature_c=20.0, temperature_u_c=-0.1), r"temperature_u_c = -0.1 must be ≥ 0"),
])
def test_inverse_bad_input(kwargs, message):
    with pytest.raises(ValueError, match=message):
        fluids.glycerol_fraction_for_viscosity(**kwargs)
