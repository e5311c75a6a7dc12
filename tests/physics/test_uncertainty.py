"""GUM budget of the viscosity: the sheet's worked example (row #28), sensitivity coefficients,
Welch–Satterthwaite, and the Monte Carlo (JCGM 101) cross-check."""

import json
import math

import pytest

from physics.drag import drag_law_spread, wall_model_spread
from physics.uncertainty import ViscosityInputs, monte_carlo, viscosity_budget

# Row #28 asks for 1e-2 relative on u_c/μ = 0.367 % and U = 0.73 %.
BUDGET_RTOL = 1e-2
# Sensitivities in the §9 table are printed to 4 decimals.
SENS_ATOL = 1e-4
# Analytic vs Monte Carlo: with 2e5 draws the sample standard deviation scatters by
# 1/√(2n) ≈ 0.16 %; first-order GUM and MC differ by the neglected curvature, < 1 % here.
# "Within a few % of u_c": 3 %.
MC_RTOL = 0.03


def worked_example(**changes):
    """§9 worked budget: d = 2.000 mm (micrometer, 2 µm), D = 50.0 mm (0.1 mm),
    ρ_s = 7810 (±10 rectangular), ρ_f = 1261 (±1 rectangular), v = 10.00 mm/s (0.3 %)."""
    base = dict(
        v_m_s=0.010,
        u_v_m_s=0.003 * 0.010,
        d_m=2.000e-3,
        u_d_m=2e-6,
        rho_s_kg_m3=7810.0,
        u_rho_s_kg_m3=10.0 / math.sqrt(3.0),
        rho_f_kg_m3=1261.0,
        u_rho_f_kg_m3=1.0 / math.sqrt(3.0),
        tube_d_m=50.0e-3,
        u_tube_d_m=0.1e-3,
        u_wall_model_rel=0.0,
        u_inertia_rel=0.0,
        rectangular=("rho_s_kg_m3", "rho_f_kg_m3"),
    )
    base.update(changes)
    return ViscosityInputs(**base)


def test_worked_budget_row_28():
    # #28 computed: u_c/μ = 0.367 %, U (k = 2) = 0.73 %; μ = 1.307215 Pa·s after f_w = 0.915933
    b = viscosity_budget(worked_example(), drag="stokes")
    assert b.mu_pa_s == pytest.approx(1.307215, rel=1e-6)
    assert b.combined_u_rel == pytest.approx(0.00367, rel=BUDGET_RTOL)
    assert b.k == 2.0 and b.dof_eff is None
    assert b.expanded_U_rel == pytest.approx(0.0073, rel=BUDGET_RTOL)
    assert b.dominant == "terminal velocity"


@pytest.mark.parametrize(
    ("symbol", "c_rel", "contribution_rel"),
    [
        # §9 worked-budget table (computed): c' and contribution
        ("d_m", 1.9085, 0.00191),
        ("tube_d_m", 0.0915, 0.00018),
        ("rho_s_kg_m3", 1.1925, 0.00088),
        ("rho_f_kg_m3", -0.1925, 0.00009),
        ("v_m_s", -1.0, 0.00300),
    ],
)
def test_worked_budget_rows(symbol, c_rel, contribution_rel):
    rows = {r.symbol: r for r in viscosity_budget(worked_example(), drag="stokes").rows}
    assert rows[symbol].sensitivity_rel == pytest.approx(c_rel, abs=SENS_ATOL)
    # contributions are printed to 3 significant figures (0.0915 % rounds to 0.018 %)
    assert rows[symbol].contribution_rel == pytest.approx(contribution_rel, abs=1e-5)


def test_shares_sum_to_one_and_rows_are_sorted():
    rows = viscosity_budget(worked_example(), drag="stokes").rows
    assert sum(r.share for r in rows) == pytest.approx(1.0, rel=1e-12)
    assert [r.share for r in rows] == sorted((r.share for r in rows), reverse=True)


def test_ball_diameter_from_grade_only():
    # §9: "If d is only known as '2 mm G10' (±9 µm rectangular): 0.587 %" (computed)
    b = viscosity_budget(worked_example(u_d_m=9e-6 / math.sqrt(3.0)), drag="stokes")
    assert b.combined_u_rel == pytest.approx(0.00587, rel=BUDGET_RTOL)
    assert b.dominant == "ball diameter"


@pytest.mark.parametrize(("u_temperature_c", "total_rel"), [(0.1, 0.0099), (0.5, 0.046)])
def test_temperature_term_for_pure_glycerol(u_temperature_c, total_rel):
    # §9: stated at a reference temperature, −9.23 %/K (Cheng, computed): u(T) = 0.1 K adds
    # 0.92 % → total 0.99 %; u(T) = 0.5 K → 4.6 %
    inputs = worked_example(temperature_c=20.0, u_temperature_c=u_temperature_c, dlnmu_dT_per_K=-0.0923)
    b = viscosity_budget(inputs, drag="stokes")
    assert b.combined_u_rel == pytest.approx(total_rel, rel=BUDGET_RTOL)
    assert b.dominant == "liquid temperature"
    row = next(r for r in b.rows if r.symbol == "temperature_K")
    assert row.value == pytest.approx(293.15) and row.unit == "K"
    # μ_T = μ exp(−k δT): the central difference over ±u gives k·sinh(ku)/(ku) (derived)
    ku = 0.0923 * u_temperature_c
    assert row.contribution_rel == pytest.approx(math.sinh(ku), rel=1e-9)


def test_sensitivities_match_the_analytic_stokes_coefficients():
    # unbounded liquid, Stokes: c'(d) = 2, c'(ρ_s) = ρ_s/Δρ, c'(ρ_f) = −ρ_f/Δρ, c'(g) = 1,
    # c'(scale) = −1, c'(time base) = +1 (§9 table, derived); central differences over ±u are
    # exact for the linear terms and carry (u/x)² for d², 1/v: tolerance 1e-5.
    inputs = ViscosityInputs(
        v_m_s=0.01, u_v_m_s=1e-5, d_m=2e-3, u_d_m=1e-6, rho_s_kg_m3=7810, u_rho_s_kg_m3=5,
        rho_f_kg_m3=1261, u_rho_f_kg_m3=0.5, g_m_s2=9.81, u_g_m_s2=1e-3,
        scale_distance_m=0.3, u_scale_distance_m=1e-4, u_time_base_rel=1e-4, u_inertia_rel=0.0,
    )
    rows = {r.symbol: r.sensitivity_rel for r in viscosity_budget(inputs, drag="stokes").rows}
    drho = 7810 - 1261
    expected = {
        "d_m": 2.0, "rho_s_kg_m3": 7810 / drho, "rho_f_kg_m3": -1261 / drho, "g_m_s2": 1.0,
        "scale_distance_m": -1.0, "time_base": 1.0, "v_m_s": -1.0,
    }
    assert rows.keys() == expected.keys()
    for symbol, c in expected.items():
        assert rows[symbol] == pytest.approx(c, abs=1e-5), symbol


def test_model_terms_default_to_the_model_spreads():
    inputs = worked_example(u_wall_model_rel=None, u_inertia_rel=None)
    b = viscosity_budget(inputs)
    rows = {r.symbol: r for r in b.rows}
    assert rows["wall_model"].standard_uncertainty == pytest.approx(wall_model_spread(0.04), rel=1e-15)
    re = 1261 * (0.010 / 0.915933) * 2e-3 / b.mu_pa_s
    assert rows["inertia_model"].standard_uncertainty == pytest.approx(drag_law_spread(re), rel=1e-3)
    assert rows["wall_model"].sensitivity_rel == pytest.approx(1.0, abs=0.01)


def test_welch_satterthwaite_single_type_a_term():
    # one term with ν = 4: ν_eff = 4 and k = t_95.45(4) = 2.87 (from memory: JCGM 100 Table G.2)
    inputs = ViscosityInputs(
        v_m_s=0.01, u_v_m_s=5e-5, d_m=2e-3, u_d_m=0.0, rho_s_kg_m3=7810, u_rho_s_kg_m3=0.0,
        rho_f_kg_m3=1261, u_rho_f_kg_m3=0.0, u_inertia_rel=0.0, dof={"v_m_s": 4},
    )
    b = viscosity_budget(inputs)
    assert b.dof_eff == pytest.approx(4.0, rel=1e-12)
    assert b.k == pytest.approx(2.87, abs=0.005)
    assert any("effective degrees of freedom" in w for w in b.warnings)


def test_welch_satterthwaite_two_equal_terms():
    # u_1 = u_2, ν_1 = ν_2 = 4: ν_eff = (2u²)² / (2 u⁴/4) = 8 (GUM G.2b, derived); k = 2.37 (Table G.2, from memory)
    inputs = ViscosityInputs(
        v_m_s=0.01, u_v_m_s=2e-5, d_m=2e-3, u_d_m=2e-6, rho_s_kg_m3=7810, u_rho_s_kg_m3=0.0,
        rho_f_kg_m3=1261, u_rho_f_kg_m3=0.0, u_inertia_rel=0.0, dof={"v_m_s": 4, "d_m": 4},
    )
    b = viscosity_budget(inputs, drag="stokes")
    # contributions 0.2 % (v) and 2 × 0.1 % (d): equal to first order
    assert b.dof_eff == pytest.approx(8.0, rel=1e-4)
    assert b.k == pytest.approx(2.37, abs=0.005)


@pytest.mark.parametrize(
    "inputs",
    [
        worked_example(),
        worked_example(temperature_c=21.0, u_temperature_c=0.2, dlnmu_dT_per_K=-0.0923, u_wall_model_rel=None, u_inertia_rel=None),
        worked_example(v_m_s=0.05, u_v_m_s=0.05 * 0.01, d_m=6e-3, u_d_m=5e-6, tube_d_m=60e-3, scale_distance_m=0.3,
                       u_scale_distance_m=0.5e-3, u_time_base_rel=1e-3, u_inertia_rel=None),
    ],
    ids=["worked-example", "with-temperature-and-models", "Re-0.15-large-ball"],
)
def test_monte_carlo_agrees_with_the_analytic_budget(inputs):
    b = viscosity_budget(inputs)
    mc = monte_carlo(inputs, n_samples=200_000, seed=20240601)
    assert mc.u_pa_s == pytest.approx(b.combined_u_pa_s, rel=MC_RTOL)
    # the mean lies within a small fraction of u_c of the estimate (second-order bias only)
    assert abs(mc.mu_pa_s - b.mu_pa_s) < 0.1 * b.combined_u_pa_s
    # 95 % interval ≈ ±1.96 u_c
    half_width = (mc.interval_high_pa_s - mc.interval_low_pa_s) / 2.0
    assert half_width == pytest.approx(1.96 * b.combined_u_pa_s, rel=0.05)


def test_monte_carlo_is_seeded():
    a = monte_carlo(worked_example(), n_samples=5000, seed=7)
    assert a == monte_carlo(worked_example(), n_samples=5000, seed=7)
    assert a.u_pa_s != monte_carlo(worked_example(), n_samples=5000, seed=8).u_pa_s


def test_non_linear_model_is_flagged():
    # a 30 % speed uncertainty: μ ∝ 1/v is far from linear over ±u
    b = viscosity_budget(worked_example(u_v_m_s=0.003))
    assert any("non-linear in terminal velocity" in w for w in b.warnings)


def test_temperature_uncertainty_without_a_coefficient_is_reported():
    b = viscosity_budget(worked_example(temperature_c=20.0, u_temperature_c=0.2))
    assert any("not in the budget" in w for w in b.warnings)
    assert all(r.symbol != "temperature_K" for r in b.rows)


@pytest.mark.parametrize(
    ("changes", "match"),
    [
        ({"dof": {"speed": 3}}, r"dof keys \['speed'\] are unknown; expected symbols among v_m_s, d_m"),
        ({"u_d_m": -1e-6}, r"standard uncertainty of d_m = -1e-06 is not allowed; expected a number ≥ 0"),
        ({"dlnmu_dT_per_K": -0.09}, r"temperature_c = None while dlnmu_dT_per_K is given; expected the liquid temperature"),
        ({"d_m": 0.0}, r"d_m = 0\.0 is not allowed; expected a ball diameter in metres > 0"),
    ],
)
def test_budget_rejects_bad_input(changes, match):
    with pytest.raises(ValueError, match=match):
        viscosity_budget(worked_example(**changes))


def test_monte_carlo_rejects_bad_input():
    with pytest.raises(ValueError, match=r"n_samples = 10 is too small; expected at least 1000 draws"):
        monte_carlo(worked_example(), n_samples=10)
    with pytest.raises(ValueError, match=r"rectangular names \['rho'\] are unknown"):
        monte_carlo(worked_example(rectangular=("rho",)))


def test_results_are_json_friendly():
    b = viscosity_budget(worked_example(u_wall_model_rel=None))
    d = json.loads(json.dumps(b.to_dict()))
    assert {"quantity", "value", "unit", "standard_uncertainty", "sensitivity_rel", "contribution_rel", "share"} <= set(d["rows"][0])
    json.dumps(monte_carlo(worked_example(), n_samples=2000).to_dict())


def test_apparatus_factor_scales_mu_and_adds_its_own_term():
    """A calibration factor K_app = 1.02 ± 0.004 multiplies μ and adds u(K)/K in quadrature
    (derived: the model is linear in K)."""
    plain = viscosity_budget(worked_example(), drag="stokes")
    cal = viscosity_budget(worked_example(apparatus_factor=1.02, u_apparatus_factor=0.004), drag="stokes")
    assert cal.mu_pa_s == pytest.approx(1.02 * plain.mu_pa_s, rel=1e-12)
    (row,) = [r for r in cal.rows if r.symbol == "apparatus_factor"]
    assert row.contribution_rel == pytest.approx(0.004 / 1.02, rel=1e-6)
    assert cal.combined_u_rel == pytest.approx(math.hypot(plain.combined_u_rel, 0.004 / 1.02), rel=1e-6)
