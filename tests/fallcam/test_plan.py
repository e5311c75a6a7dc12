"""``fallcam plan``: predictions checked against the reference sheet and against simulation.

Check values are from the project's physics reference sheet (physics-references.md), each named
beside its assertion with the row number of its "Suggested test check values" table.
"""

import math

import numpy as np
import pytest

from fallcam.errors import UsageError
from fallcam.plan import COMMON_FPS, PIXEL_NOISE_PX, RUN_IN_FRACTION, plan
from fallcam.rig import load_rig

# Steel ball in pure glycerol at 20 °C, the sheet's worked example (§1, §5): d = 2 mm,
# ρ_s = 7810, ρ_f = 1261 kg/m³, μ = 1.410 Pa·s, g = 9.80665 m/s².
MU_GLYCEROL_PA_S = 1.410
SCALE_PX = ((500.0, 100.0), (500.0, 900.0))  # 800 px for 200 mm: 4 px/mm
SCALE_MM = 200.0

RTOL_CHECK = 1e-5  # sheet values are given to 5-6 significant digits
RTOL_TABLE = 1e-3  # §5 table values are given to 4 significant digits
# The history-force time to 0.1 % follows the algebraic tail 1 − v/v_t ≈ a √(ρ_f/(π μ t))
# (sheet #23, derived); at t/τ ≈ 2e5 the next term of the expansion is ~√(τ/t) ≈ 0.2 % relative.
RTOL_ASYMPTOTE = 0.01


def _rig(tmp_path, *, tube="", liquid="density_kg_m3 = 1261.0", marks="", analysis='drag_model = "oseen"',
         extra_ball=""):
    text = f"""
[liquid]
{liquid}

[ball]
diameter_mm = 2.0
density_kg_m3 = 7810.0
{extra_ball}

[scale]
points_px = [[{SCALE_PX[0][0]}, {SCALE_PX[0][1]}], [{SCALE_PX[1][0]}, {SCALE_PX[1][1]}]]
distance_mm = {SCALE_MM}

[analysis]
{analysis}
"""
    if tube:
        text += f"\n[tube]\n{tube}\n"
    if marks:
        text += f"\n[marks]\n{marks}\n"
    path = tmp_path / "rig.toml"
    path.write_text(text, encoding="utf-8")
    return load_rig(path)


def test_prediction_matches_sheet_check_values(tmp_path):
    rig = _rig(tmp_path)  # Oseen drag law, no tube
    # sheet #1: bare Stokes terminal velocity 1.0121947e-2 m/s at μ = 1.410 Pa·s
    assert plan(rig, MU_GLYCEROL_PA_S).stokes_velocity_m_s == pytest.approx(1.0121947e-2, rel=RTOL_CHECK)
    # sheet #10 (Oseen closed form): v = 0.010 m/s belongs to μ_Oseen = 1.422466 Pa·s, so the
    # forward prediction at that viscosity must give 0.010 m/s
    p = plan(rig, 1.422466)
    assert p.terminal_velocity_m_s == pytest.approx(0.010, rel=RTOL_CHECK)
    # Re = ρ_f v d / μ = 1261 · 0.010 · 0.002 / 1.422466 (sheet §4 table: CGW row, Re 0.01773)
    assert p.reynolds_number == pytest.approx(1261 * 0.010 * 0.002 / 1.422466, rel=RTOL_CHECK)
    assert p.wall_factor is None and p.direction == "down"
    assert p.viscosity_source == "given on the command line"
    # no marks: the timed stretch is the scale span, 200 mm at 10 mm/s
    assert p.timed_stretch_source == "scale points"
    assert p.timed_stretch_mm == pytest.approx(SCALE_MM)
    assert p.transit_time_s == pytest.approx(SCALE_MM / 10.0, rel=RTOL_CHECK)


def test_run_in_matches_sheet_transient_values(tmp_path):
    p = plan(_rig(tmp_path), MU_GLYCEROL_PA_S)
    assert RUN_IN_FRACTION == 0.999
    # sheet #21 / §5 table, 2 mm ball: τ = 1.3303 ms, t₉₉.₉ = 9.189 ms, z₉₉.₉ = 79.6 µm
    assert p.tau_s == pytest.approx(1.3303e-3, rel=RTOL_TABLE)
    expo = p.run_in["exponential"]
    assert expo["time_s"] == pytest.approx(9.189e-3, rel=RTOL_TABLE)
    assert expo["distance_mm"] == pytest.approx(79.6e-3, rel=RTOL_TABLE)
    assert "no history force" in expo["model"]
    # sheet #23 (derived asymptote): 1 − v/v∞ = a √(ρ_f/(π μ t)) → t = a² ρ_f / (π μ 0.001²)
    hist = p.run_in["history"]
    a_m, rho_f = 1e-3, 1261.0
    t_tail_s = a_m**2 * rho_f / (math.pi * MU_GLYCEROL_PA_S * (1 - RUN_IN_FRACTION) ** 2)
    assert hist["time_s"] == pytest.approx(t_tail_s, rel=RTOL_ASYMPTOTE)
    assert "history force" in hist["model"]
    assert hist["distance_mm"] > 1000 * expo["distance_mm"]
    # without a tube the recommended skip is 7 τ (sheet §5 rule)
    assert p.skip_time_s == pytest.approx(7 * p.tau_s)
    assert 0 < p.recommended_run_in_mm < hist["distance_mm"]


@pytest.mark.parametrize(("tube_mm", "f_w", "warned"), [
    (50.0, None, False),  # λ = 0.04
    (20.0, 0.79158, False),  # λ = 0.1, sheet #4 Haberman–Sayre f_w = 0.79158 (not > 0.1)
    (10.0, None, True),  # λ = 0.2
])
def test_wall_factor_and_large_ratio_warning(tmp_path, tube_mm, f_w, warned):
    p = plan(_rig(tmp_path, tube=f"inner_diameter_mm = {tube_mm}"), MU_GLYCEROL_PA_S)
    assert p.diameter_ratio == pytest.approx(2.0 / tube_mm)
    if f_w is not None:
        assert p.wall_factor == pytest.approx(f_w, rel=RTOL_TABLE)
    # the wall factor multiplies the unbounded speed (physics-references.md §4: product form)
    assert p.terminal_velocity_m_s == pytest.approx(p.wall_factor * p.unbounded_velocity_m_s, rel=RTOL_CHECK)
    assert any("d/D" in w and "> 0.1" in w for w in p.warnings) is warned
    # the tube sets the zone to keep clear (1 D) and the wall time R²/ν enters the skip time
    assert p.exclusion_mm == pytest.approx(tube_mm)
    nu = MU_GLYCEROL_PA_S / 1261.0
    assert p.skip_time_s == pytest.approx(max(7 * p.tau_s, (tube_mm / 2e3) ** 2 / nu))


@pytest.mark.parametrize(("mu_pa_s", "warned"), [(1.41, False), (0.2, True)])
def test_reynolds_warning_above_0_1(tmp_path, mu_pa_s, warned):
    p = plan(_rig(tmp_path, analysis='drag_model = "clift-grace-weber"'), mu_pa_s)
    assert (p.reynolds_number > 0.1) is warned
    assert any(w.startswith("Re = ") and "> 0.1" in w for w in p.warnings) is warned
    # the drag law slows the ball below the bare Stokes speed
    assert p.terminal_velocity_m_s < p.stokes_velocity_m_s


def test_marks_define_the_timed_stretch(tmp_path):
    # marks at y = 300 and 700 px: 400 px at 4 px/mm = 100 mm; first mark 50 mm below the top point
    p = plan(_rig(tmp_path, marks="points_px = [[500.0, 700.0], [500.0, 300.0]]"), MU_GLYCEROL_PA_S)
    assert p.timed_stretch_source == "marks"
    assert p.timed_stretch_mm == pytest.approx(100.0)
    assert p.first_mark_mm == pytest.approx(50.0)
    assert p.px_per_mm == pytest.approx(4.0)


def test_velocity_uncertainty_formula_agrees_with_simulated_fits(tmp_path):
    """Fit straight lines to simulated noisy positions; their slope scatter is what plan predicts."""
    p = plan(_rig(tmp_path), MU_GLYCEROL_PA_S)
    row = next(r for r in p.resolution_table if r["fps"] == 30.0)
    n = int(round(row["n_frames"]))
    t_s = np.linspace(0.0, p.transit_time_s, n)
    sigma_mm = PIXEL_NOISE_PX / p.px_per_mm
    rng = np.random.default_rng(20240611)
    n_runs = 4000
    z = p.terminal_velocity_m_s * 1e3 * t_s[:, None] + rng.normal(0.0, sigma_mm, size=(n, n_runs))
    slopes = np.polyfit(t_s, z, 1)[0]
    u_rel_sim = np.std(slopes, ddof=1) / (p.terminal_velocity_m_s * 1e3)
    # 4000 runs: the standard deviation itself is known to ±1/√(2·4000) ≈ 1.1 %; the formula's
    # √12/(T√N) form differs from the exact √(12/(N(N²−1)))/Δt by < 0.5 % at N ≈ 600
    assert row["u_rel_at_rig_resolution"] == pytest.approx(u_rel_sim, rel=0.05)


def test_frame_rate_and_resolution_needed_reach_the_target(tmp_path):
    target = 1e-4
    p = plan(_rig(tmp_path), MU_GLYCEROL_PA_S, target_u_rel=target)
    assert [r["fps"] for r in p.resolution_table] == list(COMMON_FPS)
    for row in p.resolution_table:
        # u ∝ 1/√N: at fps_needed the rig's resolution gives exactly the target
        assert row["u_rel_at_rig_resolution"] * math.sqrt(row["fps"] / p.fps_needed) == pytest.approx(target)
        # u ∝ 1/(px/mm): at px_per_mm_needed this frame rate gives exactly the target
        assert row["u_rel_at_rig_resolution"] * p.px_per_mm / row["px_per_mm_needed"] == pytest.approx(target)


def test_capture_fps_of_the_rig_joins_the_table(tmp_path):
    rig_path = tmp_path / "r"
    rig_path.mkdir()
    rig = _rig(rig_path)
    p_plain = plan(rig, MU_GLYCEROL_PA_S)
    text = (rig_path / "rig.toml").read_text() + "\n[camera]\ncapture_fps = 480.0\n"
    (rig_path / "rig.toml").write_text(text)
    p = plan(load_rig(rig_path / "rig.toml"), MU_GLYCEROL_PA_S)
    assert [r["fps"] for r in p.resolution_table] == [*COMMON_FPS, 480.0]
    assert len(p_plain.resolution_table) == len(COMMON_FPS)


def test_usable_depth_and_short_column_warning(tmp_path):
    ok = plan(_rig(tmp_path, tube="inner_diameter_mm = 50.0\nliquid_depth_mm = 400.0"), MU_GLYCEROL_PA_S)
    assert ok.usable_depth_mm == pytest.approx(400.0 - max(50.0, ok.recommended_run_in_mm) - 50.0)
    short = plan(_rig(tmp_path, tube="inner_diameter_mm = 50.0\nliquid_depth_mm = 90.0"), MU_GLYCEROL_PA_S)
    assert short.usable_depth_mm < 0
    assert any("leaves no stretch for timing" in w for w in short.warnings)


def test_viscosity_comes_from_rig_reference_then_model(tmp_path):
    # glycerol model: the rig's liquid has a model viscosity
    model_rig = _rig(tmp_path, liquid='model = "glycerol"\ntemperature_c = 20.0')
    p = plan(model_rig)
    assert p.viscosity_pa_s == pytest.approx(model_rig.liquid.model_viscosity_pa_s)
    assert p.viscosity_source == "glycerol model at 20 °C"
    # a known viscosity in the rig wins over the model
    ref_rig = _rig(tmp_path, liquid='model = "glycerol"\ntemperature_c = 20.0\nreference_viscosity_pa_s = 1.2')
    assert plan(ref_rig).viscosity_pa_s == 1.2
    # the command line wins over both
    assert plan(ref_rig, 0.9).viscosity_pa_s == 0.9


def test_no_viscosity_available_is_a_usage_error(tmp_path):
    with pytest.raises(UsageError, match="has no reference model or known viscosity") as info:
        plan(_rig(tmp_path))
    assert "--viscosity-pa-s" in info.value.hint


@pytest.mark.parametrize(("kwargs", "match"), [
    ({"viscosity_pa_s": -1.0}, r"--viscosity-pa-s -1\.0: expected a viscosity in Pa·s > 0"),
    ({"viscosity_pa_s": 1.4, "target_u_rel": 0.0}, "expected a fraction between 0 and 1"),
    # a very thin liquid drives Re beyond the drag law's range: the physics message, as exit 2
    ({"viscosity_pa_s": 1e-6}, r"rig\.toml: mu_pa_s = 1e-06 gives Re > "),
])
def test_bad_inputs_are_usage_errors(tmp_path, kwargs, match):
    rig = _rig(tmp_path, analysis='drag_model = "clift-grace-weber"')
    with pytest.raises(UsageError, match=match):
        plan(rig, **kwargs)


def test_missing_ball_values_are_named(tmp_path):
    path = tmp_path / "rig.toml"
    path.write_text("[liquid]\ndensity_kg_m3 = 1261.0\n[scale]\npoints_px = [[1.0, 1.0], [1.0, 401.0]]\n"
                    "distance_mm = 100.0\n", encoding="utf-8")
    with pytest.raises(UsageError, match=r"plan needs \[ball\] diameter_mm, \[ball\] density_kg_m3"):
        plan(load_rig(path), 1.0)


def test_text_and_dict_forms(tmp_path):
    p = plan(_rig(tmp_path, tube="inner_diameter_mm = 50.0"), MU_GLYCEROL_PA_S)
    d = p.to_dict()
    assert d["terminal_velocity_m_s"] == p.terminal_velocity_m_s
    assert isinstance(d["run_in"]["history"]["distance_mm"], float)
    text = p.to_text()
    for needle in ("terminal velocity", "Reynolds number", "wall factor", "transit time",
                   "run-in to within 0.1 % of terminal speed", "first mark must lie below it",
                   "frames/s", "keep clear: 50 mm (1 D)", "assumes: σ = 0.1 px"):
        assert needle in text
