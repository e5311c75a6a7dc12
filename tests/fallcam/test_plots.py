"""Figures: files are valid PNGs, inputs are checked, and the plotted residuals are those of the
reported terminal velocity (checked against synthetic trajectories with exact ground truth)."""

import functools
import importlib.util
import pathlib
import struct

import numpy as np
import pandas as pd
import pytest

from fallcam import plots

_spec = importlib.util.spec_from_file_location(
    "report_case", pathlib.Path(__file__).with_name("_report_case.py"))
case = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(case)

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
# 7.5 in × 150 dpi; constrained layout never changes the canvas size
EXPECTED_WIDTH_PX = 1125
# RMS of N = 400 Gaussian residuals scatters by σ/√(2N) ≈ 3.5 % of σ; 12 % is > 3 standard
# deviations of that scatter while a sign error or a wrong slope gives residuals 100× larger
RMS_REL_TOL = 0.12
NOISE_MM = 0.02


def png_size(path: pathlib.Path) -> tuple[int, int]:
    data = path.read_bytes()
    assert data[:8] == PNG_MAGIC, f"{path.name} is not a PNG file"
    width, height = struct.unpack(">II", data[16:24])  # IHDR chunk
    return width, height


@pytest.mark.parametrize("direction", ["down", "up"])
@pytest.mark.parametrize("name", ["position_time", "velocity_time", "residuals"])
def test_run_figures_are_png(tmp_path, name, direction):
    traj = case.trajectory(direction=direction)
    out = getattr(plots, name)(traj, case.summary(direction=direction), tmp_path / f"{name}.png")
    assert out == tmp_path / f"{name}.png"
    width, height = png_size(out)
    assert width == EXPECTED_WIDTH_PX
    assert height > 600
    assert [p.name for p in tmp_path.iterdir()] == [f"{name}.png"]  # no temporary file left


@pytest.mark.parametrize("name", ["position_time", "velocity_time", "residuals"])
def test_figures_without_plateau_or_optional_parts(tmp_path, name):
    traj = case.trajectory().drop(columns=["in_plateau", "z_u_mm"])
    summary = {"tracks": [{"id": 0, "direction": "down",
                           "plateau": {"found": False, "reason": "still accelerating when it "
                                                                  "left the view"}}]}
    png_size(getattr(plots, name)(traj, summary, tmp_path / "f.png"))


def test_figures_with_two_tracks_and_empty_summary(tmp_path):
    first, second = case.trajectory(seed=1), case.trajectory(seed=2)
    second = second.assign(track=1, t_s=second["t_s"] + 12.0)
    traj = pd.concat([first, second], ignore_index=True)
    summary = case.summary()
    summary["tracks"].append({**summary["tracks"][0], "id": 1,
                              "plateau": {"start_s": 14.7, "end_s": 20.3, "found": True}})
    for name in ("position_time", "velocity_time", "residuals"):
        png_size(getattr(plots, name)(traj, summary, tmp_path / f"{name}.png"))
        png_size(getattr(plots, name)(traj, {}, tmp_path / f"{name}_bare.png"))


def test_clip_figures_in_parallel_are_the_serial_ones(tmp_path):
    traj, summary = case.trajectory(), case.summary()
    (tmp_path / "one").mkdir()
    (tmp_path / "three").mkdir()
    serial = plots.clip_figures(traj, summary, tmp_path / "one", processes=1)
    forked = plots.clip_figures(traj, summary, tmp_path / "three", processes=3)
    assert list(serial) == list(forked) == ["position_time", "velocity_time", "residuals"]
    for name in serial:
        assert forked[name] == tmp_path / "three" / f"{name}.png"
        assert forked[name].read_bytes() == serial[name].read_bytes()


def test_clip_figures_error_in_a_child_reaches_the_caller(tmp_path):
    # velocity_time is the one drawn in a child process
    traj = case.trajectory().drop(columns=["v_mm_s"])
    with pytest.raises(ValueError, match=r"trajectory: missing column\(s\) v_mm_s"):
        plots.clip_figures(traj, case.summary(), tmp_path, processes=2)
    assert not list(tmp_path.glob("velocity_time*"))


@pytest.mark.parametrize(("drop", "name", "match"), [
    ("v_mm_s", "velocity_time", r"trajectory: missing column\(s\) v_mm_s"),
    ("z_mm", "position_time", r"trajectory: missing column\(s\) z_mm"),
    ("track", "residuals", r"trajectory: missing column\(s\) track"),
])
def test_missing_column_is_named(tmp_path, drop, name, match):
    traj = case.trajectory().drop(columns=[drop])
    with pytest.raises(ValueError, match=match):
        getattr(plots, name)(traj, case.summary(), tmp_path / "f.png")
    assert not list(tmp_path.iterdir())


def test_empty_trajectory_is_refused(tmp_path):
    with pytest.raises(ValueError, match="trajectory: 0 rows; expected at least one detection"):
        plots.position_time(case.trajectory().iloc[0:0], case.summary(), tmp_path / "f.png")


def _line_trajectory(v_mm_s: float, seed: int, n: int = 400) -> pd.DataFrame:
    """Exact straight fall (or rise, v < 0) plus seeded Gaussian noise of NOISE_MM."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / 50.0
    z = 5.0 + v_mm_s * t + rng.normal(0.0, NOISE_MM, n)
    return pd.DataFrame({"t_s": t, "z_mm": z, "track": 0, "in_plateau": True})


def _line_summary(speed_m_s: float, direction: str) -> dict:
    return {"tracks": [{"id": 0, "direction": direction, "terminal_velocity_m_s": speed_m_s,
                        "plateau": {"start_s": 0.0, "end_s": 8.0, "found": True}}]}


@pytest.mark.parametrize(("v_mm_s", "direction"), [(12.5, "down"), (-4.0, "up")])
def test_residuals_of_the_true_slope_are_the_noise(v_mm_s, direction):
    traj = _line_trajectory(v_mm_s, seed=11)
    res = plots.plateau_residuals_um(traj, _line_summary(abs(v_mm_s) / 1000.0, direction))
    t, r_um = res[0]
    assert t.shape == r_um.shape == (400,)
    rms_um = float(np.sqrt(np.mean(r_um**2)))
    assert rms_um == pytest.approx(1000.0 * NOISE_MM, rel=RMS_REL_TOL)
    assert abs(float(np.mean(r_um))) < 1e-9  # centroid intercept: residuals sum to zero


def test_residuals_show_a_wrong_slope_as_a_trend():
    # reported speed 0.1 mm/s too high → residuals fall by 100 µm per second
    traj = _line_trajectory(10.0, seed=12)
    t, r_um = plots.plateau_residuals_um(traj, _line_summary(0.0101, "down"))[0]
    trend_um_s = np.polyfit(t, r_um, 1)[0]
    # slope scatter of a 400-point line with 20 µm noise over 8 s is ≈ 0.3 µm/s
    assert trend_um_s == pytest.approx(-100.0, abs=2.0)


def test_residuals_use_the_plateau_window_when_no_flag_column():
    traj = _line_trajectory(10.0, seed=13).drop(columns=["in_plateau"])
    summary = _line_summary(0.010, "down")
    summary["tracks"][0]["plateau"].update(start_s=2.0, end_s=4.0)
    t, _ = plots.plateau_residuals_um(traj, summary)[0]
    assert t.min() >= 2.0 and t.max() <= 4.0 and t.size == 101


def test_no_residuals_without_terminal_velocity():
    traj = _line_trajectory(10.0, seed=14)
    assert plots.plateau_residuals_um(traj, {"tracks": [{"id": 0}]}) == {}


@functools.cache  # the series analysis is the slow part; each case is computed once
def _series(materials: tuple[float, ...] = (7810.0,), sizes_mm=(1.5, 2.0, 3.0), seed: int = 21):
    """A series computed by physics.series from seeded synthetic drops (Stokes speeds)."""
    from physics import series
    from physics.viscosity import stokes_terminal_velocity

    rng = np.random.default_rng(seed)
    drops = []
    for rho_s in materials:
        for d_mm in sizes_mm:
            v = stokes_terminal_velocity(1.3, d_mm / 1000.0, rho_s, 1261.0)
            drops += [series.Drop(ball=f"{d_mm:g} mm, {rho_s:g}", d_m=d_mm / 1000.0,
                                  v_m_s=v * (1.0 + rng.normal(0.0, 0.003)), rho_s_kg_m3=rho_s,
                                  u_d_m=2e-6, u_v_m_s=0.002 * v, label=f"drop {k}")
                      for k in range(3)]
    return series.analyze_series(drops, rho_f_kg_m3=1261.0)


def test_series_plot_from_physics_results(tmp_path):
    result = _series()
    assert png_size(plots.series_plot(result.balls, result, tmp_path / "s.png"))[0] == \
        EXPECTED_WIDTH_PX
    # the same from the JSON form (to_dict), as stored in a summary
    plain = result.to_dict()
    png_size(plots.series_plot(plain["balls"], plain, tmp_path / "s_plain.png"))


def test_series_plot_with_one_size_has_no_fit(tmp_path):
    result = _series(sizes_mm=(2.0,))
    assert result.fit_through_origin is None
    png_size(plots.series_plot(result.balls, result, tmp_path / "s.png"))


def test_series_plot_several_materials_needs_the_liquid_density(tmp_path):
    result = _series(materials=(7810.0, 2500.0))
    with pytest.raises(ValueError, match="rho_f_kg_m3 = None with balls of several densities"):
        plots.series_plot(result.balls, result, tmp_path / "s.png")
    png_size(plots.series_plot(result.balls, result, tmp_path / "s.png", rho_f_kg_m3=1261.0))


def test_series_plot_refuses_an_empty_or_bad_table(tmp_path):
    result = _series()
    with pytest.raises(ValueError, match="series table: 0 rows"):
        plots.series_plot([], result, tmp_path / "s.png")
    bad = [{**result.to_dict()["balls"][0], "v_mean_m_s": float("nan")}]
    with pytest.raises(ValueError, match=r"series table row 0 \(1.5 mm, 7810\): v_mean_m_s = nan"):
        plots.series_plot(bad, result, tmp_path / "s.png")


def test_lines_break_where_the_sphere_was_not_measured():
    t = np.array([0.0, 0.1, 0.2, 0.3, 0.9, 1.0, 1.1, 1.25])   # hidden from 0.3 to 0.9 s
    y = np.arange(8.0)
    t2, y2 = plots._gaps_broken(t, y)
    assert np.flatnonzero(np.isnan(y2)).tolist() == [4] and t2[4] == pytest.approx(0.6)
    np.testing.assert_array_equal(np.delete(t2, 4), t)
    np.testing.assert_array_equal(np.delete(y2, 4), y)
    # 1.4 × the typical interval is still a line (timing jitter, not a gap)
    t3, y3 = plots._gaps_broken(np.array([0.0, 0.1, 0.24, 0.34]), y[:4])
    assert not np.isnan(y3).any() and len(t3) == 4
