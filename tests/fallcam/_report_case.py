"""A synthetic analysed run (trajectory + summary dict) for the figure, report and overlay tests.

Not collected by pytest (no ``test_`` prefix); the test files load it by path because tests run
with ``--import-mode=importlib``. The numbers are an invented scenario of our own (a 2 mm steel
ball in our "amber" glycerol mixture): they exercise the rendering, they are not an oracle.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

FPS = 60.0
DURATION_S = 9.0
V_T_MM_S = 10.0123  # terminal speed of the scenario
V0_MM_S = 3.0  # speed when the ball enters the view
TAU_S = 0.4  # exponential approach (enough for drawing; real approaches are slower)
Z0_MM = -25.0  # entry depth, above the upper scale point
NOISE_MM = 0.02
PLATEAU = (2.70, 8.30)  # s
MARKS_Z_MM = (10.0, 55.0)
EXCLUDE_TOP_MM, EXCLUDE_BOTTOM_MM = -15.0, 58.0
MIRROR_MM = 60.0  # a rising ball of the same scenario moves along z' = MIRROR_MM - z
PX_PER_MM = 6.0
X_AXIS_PX = 320.0
Y_TOP_PX = 200.0  # y of the upper scale point (z = 0)


def z_of_t(t_s: np.ndarray) -> np.ndarray:
    """Exact depth (mm) of the scenario at time t (s)."""
    return Z0_MM + V_T_MM_S * t_s + (V0_MM_S - V_T_MM_S) * TAU_S * (1.0 - np.exp(-t_s / TAU_S))


def v_of_t(t_s: np.ndarray) -> np.ndarray:
    """Exact velocity (mm/s) of the scenario at time t (s)."""
    return V_T_MM_S + (V0_MM_S - V_T_MM_S) * np.exp(-t_s / TAU_S)


def trajectory(seed: int = 7, *, direction: str = "down", n_frames: int | None = None,
               fps: float = FPS) -> pd.DataFrame:
    """Trajectory DataFrame with the DEVELOPERS.md columns plus v_mm_s and in_plateau."""
    rng = np.random.default_rng(seed)
    n = int(DURATION_S * fps) if n_frames is None else n_frames
    frame = np.arange(n)
    t = frame / fps
    z = z_of_t(t) + rng.normal(0.0, NOISE_MM, n)
    v = v_of_t(t) + rng.normal(0.0, 0.15, n)
    if direction == "up":
        z, v = MIRROR_MM - z, -v
    lateral = rng.normal(0.0, 0.03, n) + 0.2
    return pd.DataFrame({
        "frame": frame,
        "t_s": t,
        "x_px": X_AXIS_PX + lateral * PX_PER_MM,
        "y_px": Y_TOP_PX + z * PX_PER_MM,
        "pos_u_px": np.full(n, 0.1),
        "diameter_h_px": np.full(n, 2.0 * PX_PER_MM * 1.3),
        "diameter_v_px": np.full(n, 2.0 * PX_PER_MM),
        "z_mm": z,
        "z_u_mm": np.full(n, 0.1 / PX_PER_MM),
        "lateral_mm": lateral,
        "track": np.zeros(n, dtype=int),
        "v_mm_s": v,
        "in_plateau": (t >= PLATEAU[0]) & (t <= PLATEAU[1]),
    })


def summary(*, direction: str = "down", warnings: list[str] | None = None) -> dict:
    """Summary dict shaped like summary.json (summary_schema.md), for the scenario above."""
    budget_rows = [
        # quantity, value, unit, u, c', contribution
        ("ball diameter", 2.0, "mm", 0.002, 1.9085, 0.00191),
        ("tube diameter", 50.0, "mm", 0.1, 0.0915, 0.00018),
        ("ball density", 7810.0, "kg/m³", 5.77, 1.1925, 0.00088),
        ("liquid density", 1261.0, "kg/m³", 0.577, -0.1925, 0.00009),
        ("terminal velocity", 0.0100123, "m/s", 0.0000045, -1.0, 0.00045),
        ("scale distance", 300.0, "mm", 0.5, -1.0, 0.00167),
        ("temperature", 21.0, "°C", 0.2, -0.0923 * 21.0, 0.01846),
    ]
    total = sum(c**2 for *_, c in budget_rows)
    rows = [{"quantity": q, "value": val, "unit": unit, "standard_uncertainty": u,
             "sensitivity_rel": s, "contribution_rel": c, "share": c**2 / total}
            for q, val, unit, u, s, c in budget_rows]
    u_rel = total**0.5
    mu = 1.30721
    up = direction == "up"

    def depth(z_mm: float) -> float:
        return MIRROR_MM - z_mm if up else z_mm

    top, bottom = sorted((depth(EXCLUDE_TOP_MM), depth(EXCLUDE_BOTTOM_MM)))
    return {
        "fallcam_version": "0.1.0",
        "command": "fallcam analyze amber_2mm_a.mp4 --rig amber.toml --out out",
        "created_utc": "2025-01-01T12:00:00Z",
        "clip": "amber_2mm_a.mp4",
        "clip_info": {"container": "mp4", "codec": "h264", "width_px": 640, "height_px": 720,
                      "rotation_deg": 90, "n_frames": 540, "duration_s": 8.983,
                      "stored_fps": 60.0, "capture_fps": 60.0, "time_scale": 1.0,
                      "capture_fps_source": "container pts", "timestamps": "container",
                      "frame_interval_s": {"min": 0.0163, "median": 0.016667, "max": 0.0171},
                      "n_duplicates": 2, "n_gaps": 0},
        "capture_fps": 60.0,
        "timestamps": "container",
        "px_per_mm": PX_PER_MM,
        "scale": {"p1_px": [X_AXIS_PX, Y_TOP_PX], "p2_px": [X_AXIS_PX, Y_TOP_PX + 600.0],
                  "distance_mm": 100.0, "distance_u_mm": 0.5, "plane": "ball-plane",
                  "refraction_factor": 1.0, "px_per_mm": PX_PER_MM, "px_per_mm_u": 0.03},
        "rig": {"liquid": {"model": "glycerol-water", "glycerol_mass_fraction": 0.99,
                           "temperature_c": 21.0, "density_kg_m3": 1261.0,
                           "density_provenance": "glycerol-water model at 21.0 °C"},
                "ball": {"diameter_mm": 2.0, "diameter_u_mm": 0.002, "material": "steel-52100"},
                "tube": {"inner_diameter_mm": 50.0},
                "marks": {"points_px": [[X_AXIS_PX, Y_TOP_PX + 6.0 * MARKS_Z_MM[0]],
                                        [X_AXIS_PX, Y_TOP_PX + 6.0 * MARKS_Z_MM[1]]]},
                "camera": {}},
        "reference": {"model": "glycerol-water", "temperature_c": 21.0, "density_kg_m3": 1261.0,
                      "viscosity_pa_s": 1.29, "reference_u_rel": 0.035,
                      "source": "Cheng (2008) & Volk & Kähler (2018)", "warnings": []},
        "tracks": [{
            "id": 0, "direction": direction, "n_points": 540,
            "terminal_velocity_m_s": V_T_MM_S / 1000.0, "terminal_velocity_u_m_s": 0.0000045,
            "plateau": {"start_s": PLATEAU[0], "end_s": PLATEAU[1], "start_mm": depth(-0.8),
                        "end_mm": depth(55.2), "found": True, "reason": None, "settling_time_s": 2.6,
                        "exclude_top_mm": top, "exclude_bottom_mm": bottom},
            "terminal_reached": True,
            "marks": [{"index": 0, "z_mm": depth(MARKS_Z_MM[0]), "crossing_s": 3.7800,
                       "crossing_u_s": 0.0021, "terminal_at_mark": True, "velocity_deficit": 0.0003},
                      {"index": 1, "z_mm": depth(MARKS_Z_MM[1]), "crossing_s": 8.2796,
                       "crossing_u_s": 0.0021, "terminal_at_mark": True,
                       "velocity_deficit": 0.0001}],
            "stopwatch": {"pairs": [{"from_index": 0, "to_index": 1, "transit_s": 4.4996,
                                     "stopwatch_speed_m_s": 0.0100030, "hand_timing_u_s": 0.10,
                                     "transit_u_s": 0.003}]},
            "viscosity_pa_s": mu, "viscosity_u_pa_s": u_rel * mu,
            "viscosity_U_pa_s": 2.0 * u_rel * mu, "coverage_factor_k": 2.0,
            "stokes_viscosity_pa_s": 1.42718, "reynolds_number": 0.0193, "wall_factor": 0.915933,
            "corrections": {"wall_factor": 0.915933, "inertia_factor": 1.0036,
                            "refraction_scale_factor": 1.0, "time_scale": 1.0},
            "budget": {"rows": rows, "combined_u_rel": u_rel, "k": 2.0,
                       "expanded_U_rel": 2.0 * u_rel, "dominant": "temperature"},
            "transient": {"tau_s": TAU_S, "v_m_s": 0.010009,
                          "mu_pa_s": 1.31, "model": "exponential, no history force",
                          "converged": True},
            "comparison": {"reference_viscosity_pa_s": 1.29, "z_score": 0.37,
                           "glycerol_mass_fraction_explaining": 0.9915},
            "lateral_offset_mm": 0.2, "lateral_drift_mm": 0.05,
            "warnings": list(warnings or []),
        }],
        "warnings": ["2 duplicated frames in the clip (ignored for timing)"],
        "outputs": {"trajectory_csv": "trajectory.csv",
                    "plots": {"position_time": "position_time.png",
                              "velocity_time": "velocity_time.png",
                              "residuals": "residuals.png"},
                    "report_html": "report.html", "overlay_mp4": None},
        "versions": {"fallcam": "0.1.0", "python": "3.11", "numpy": np.__version__},
    }
