"""One clip, start to finish: track → per-passage physics → summary, CSV, figures, report.

This is where the two stages meet. :func:`analyze_clip` runs :func:`tracker.track.track_clip`,
then, for every passage (``track``), the physics chain

    plateau (where acceleration has ended) → terminal-velocity fit → timing marks →
    viscosity by the full force balance (wall + inertia) → GUM budget → reference comparison,

with the transient fit as a cross-check (and as the labelled fallback when there is no plateau).
The summary dict follows INTERFACE.md (``summary.json``); every output file is written with the
atomic helpers of :mod:`fallcam.atomic`.
"""

from __future__ import annotations

import datetime as _dt
import math
import os
import platform
import sys
from importlib import metadata
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd

from fallcam import __version__
from fallcam.atomic import atomic_write_json, atomic_write_text, json_ready
from fallcam.rig import Rig
from physics import (calibration, drag, fluids, marks, plateau, rolling_shutter, terminal, transient,
                     uncertainty, viscosity)
from tracker.lens import reach_fraction
from tracker.track import TRAJECTORY_COLUMNS
from tracker.video import DECODE_THREADS_ENV, available_cores

Progress = Callable[[int, "int | None"], None]

#: Points per sliding window of the ``v_mm_s`` column (odd): wide enough to average the
#: frame-to-frame noise, short enough to show the approach (common practice, no source).
LOCAL_VELOCITY_WINDOW = 9
#: Relative standard uncertainty of a container time base: tick and clock-rate error of phone
#: and webcam clocks, 50 ppm (common practice, no source). Nominal timing gets 0.1 % (the
#: size of the nominal-vs-actual rate differences seen in phone video, physics-references §9).
TIME_BASE_U_REL = {"container": 5e-5, "nominal": 1e-3}
#: Points given to the transient (history-force) fit; see :func:`_transient_points`.
TRANSIENT_MAX_POINTS = 60
#: Lateral drift over the plateau above this fraction of the tube diameter is reported.
LATERAL_DRIFT_WARN_FRACTION = 0.05
#: Without a ``[lens]`` calibration, a passage is reported when its plateau reaches farther than
#: EDGE_WARN_FRACTION of the way from the frame centre to its corners (lens distortion is radial
#: and grows with the distance from the centre) *and* its v_t would move by more than
#: DISTORTION_WARN_SENSITIVITY per 1 % of barrel distortion at the corners (its scale points and
#: plateau lie at different distances from the centre, so the distortion does not cancel). Both
#: thresholds are common practice, no source; not published values. A vertical path through the
#: centre of a landscape frame reaches at most ~50 %; one along a portrait frame's full height
#: ~87 %, where a scale taken along the same stretch keeps the sensitivity small.
EDGE_WARN_FRACTION = 0.8
#: Without ``[camera] readout_ms``, a possible rolling-shutter shift of v_t above this is also
#: warned about (it is in the budget in any case): the tool's own velocity accuracy aim, 0.2 %.
ROLLING_SHUTTER_WARN = 0.002
DISTORTION_WARN_SENSITIVITY = 0.001
#: Corner distortion of the reference lens behind ``distortion_sensitivity`` (1 % barrel).
_REFERENCE_CORNER_DISTORTION = 0.01


def _versions() -> dict[str, str]:
    out = {"fallcam": __version__, "python": platform.python_version()}
    for dist, key in (("numpy", "numpy"), ("scipy", "scipy"), ("av", "av"),
                      ("opencv-python-headless", "opencv"), ("matplotlib", "matplotlib"),
                      ("pandas", "pandas")):
        try:
            out[key] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[key] = "not installed"
    return out


def _track(clip_path: Path, rig: Rig, progress: Progress | None) -> Any:
    from fallcam.errors import UsageError
    from tracker.lens import LensMismatchError
    from tracker.track import track_clip

    try:
        return track_clip(clip_path, rig.scale(), capture_fps=rig.camera.capture_fps,
                          readout_ms=rig.camera.readout_ms or 0.0,
                          expect_direction=rig.expected_direction(),
                          ball_diameter_mm=rig.ball.diameter_mm, progress=progress)
    except LensMismatchError as exc:
        raise UsageError(f"{rig.path}: {exc}") from None


def distortion_sensitivity(t_s: np.ndarray, x_px: np.ndarray, y_px: np.ndarray,
                           scale_px: tuple[tuple[float, float], tuple[float, float]],
                           width_px: int, height_px: int) -> float:
    """Relative error of a terminal velocity fitted to these points, with the scale from
    ``scale_px``, if the lens had a barrel distortion of 1 % at the frame corners (uncorrected).

    The reference lens is pure radial about the frame centre, r_d = r (1 − 0.01 (r/R)²) with R
    the half-diagonal; to first order an ideal position is c + (p − c)(1 + 0.01 (|p − c|/R)²).
    The velocity is a least-squares slope of the position along the scale axis against time, as
    the plateau fit takes it (it weights the middle of the stretch most, so the ratio of the
    end points' distances would not do); the true one is the measured one × (slope of the ideal
    positions ÷ slope of the measured ones) ÷ (ideal ÷ measured distance of the scale points).

    Parameters
    ----------
    t_s, x_px, y_px : ndarray
        Times (s) and positions in the displayed frame (px) of the plateau's points.
    scale_px : ((x, y), (x, y))
        The two scale points, px.
    width_px, height_px : int
        Displayed frame size, px.

    Returns
    -------
    float
        Measured ÷ true velocity − 1 for 1 % of corner distortion (0.002: v_t reads 0.2 % high
        for each % of barrel distortion at the corners); 0 with fewer than 2 points.
    """
    c = np.array([(width_px - 1) / 2.0, (height_px - 1) / 2.0])
    r2 = float(c @ c)

    def ideal(p: np.ndarray) -> np.ndarray:
        d = p - c
        return c + d * (1.0 + _REFERENCE_CORNER_DISTORTION * (d * d).sum(axis=1, keepdims=True) / r2)

    s = np.asarray(scale_px, float)
    span = float(np.hypot(*(s[1] - s[0])))
    t = np.asarray(t_s, float)
    if span <= 0 or t.size < 2 or np.ptp(t) <= 0:
        return 0.0
    axis = (s[1] - s[0]) / span
    pts = np.column_stack([np.asarray(x_px, float), np.asarray(y_px, float)])
    tc = t - t.mean()
    slope_measured = float(tc @ (pts @ axis)) / float(tc @ tc)
    slope_ideal = float(tc @ (ideal(pts) @ axis)) / float(tc @ tc)
    if slope_ideal == 0.0:
        return 0.0
    si = ideal(s)
    return slope_measured / slope_ideal * float(np.hypot(*(si[1] - si[0]))) / span - 1.0


def _exclusion_zones(g: pd.DataFrame, rig: Rig, frame_height_px: int,
                     last_frame: int) -> tuple[float | None, float | None]:
    """End-effect exclusion (physics-references §3: one tube diameter from a closed end).

    A passage that ends inside the view before the clip ends has met the bottom (or, rising, the
    surface): points closer than one tube diameter to that end are set aside. A passage that
    leaves the view, or is still moving when the clip ends, keeps all its points (the plateau
    test itself rejects a deceleration it can see).
    """
    tube_d_mm = rig.tube.inner_diameter_mm
    if tube_d_mm is None or len(g) < 2:
        return None, None
    last = g.iloc[-1]
    margin_px = 1.5 * max(float(last["diameter_v_px"]), 4.0)
    left_view = not (margin_px < last["y_px"] < frame_height_px - 1 - margin_px)
    clip_ended = int(last["frame"]) >= last_frame - 2
    if left_view or clip_ended:
        return None, None
    exclusion_mm = drag.bottom_exclusion_mm(tube_d_mm)
    z_end = float(last["z_mm"])
    radius_mm = 0.5 * (rig.ball.diameter_mm or 0.0)
    if z_end >= float(g["z_mm"].iloc[0]):  # falling: the bottom lies just below the last point
        return None, z_end + radius_mm - exclusion_mm
    return z_end - radius_mm + exclusion_mm, None


def _gravity_u(rig: Rig) -> float:
    """u(g): 0 for a value the user measured; 0.5 mm/s² for WGS 84 normal gravity (local
    anomalies are usually below 1 mm/s², physics-references §12, from memory); for the default
    standard gravity, the spread of g over the Earth's surface (9.780–9.832 m/s², WGS 84)
    taken as rectangular: 0.026/√3 = 0.015 m/s²."""
    site = rig.site
    if site.gravity_m_s2 is not None:
        return 0.0
    if site.latitude_deg is not None:
        return 0.5e-3
    return 0.026 / math.sqrt(3.0)


def _budget_inputs(fit: terminal.TerminalFit, rig: Rig, scale: Any, timestamps: str,
                   fit_dof: float | None, *, u_rolling_shutter_rel: float = 0.0
                   ) -> uncertainty.ViscosityInputs:
    ball, liquid, tube = rig.ball, rig.liquid, rig.tube
    rel_scale = scale.px_per_mm_u / scale.px_per_mm
    temperature = liquid.temperature_c if liquid.dlnmu_dT_per_K is not None else None
    return uncertainty.ViscosityInputs(
        v_m_s=fit.v_m_s, u_v_m_s=fit.u_v_m_s,
        d_m=ball.diameter_mm * 1e-3, u_d_m=(ball.diameter_u_mm or 0.0) * 1e-3,
        rho_s_kg_m3=ball.density_kg_m3, u_rho_s_kg_m3=ball.density_u_kg_m3 or 0.0,
        rho_f_kg_m3=liquid.density_kg_m3, u_rho_f_kg_m3=liquid.density_u_kg_m3 or 0.0,
        tube_d_m=None if tube.inner_diameter_mm is None else tube.inner_diameter_mm * 1e-3,
        u_tube_d_m=(tube.inner_diameter_u_mm or 0.0) * 1e-3,
        g_m_s2=rig.gravity_m_s2(), u_g_m_s2=_gravity_u(rig),
        scale_distance_m=scale.distance_mm * 1e-3,
        u_scale_distance_m=rel_scale * scale.distance_mm * 1e-3,
        u_time_base_rel=TIME_BASE_U_REL.get(timestamps, TIME_BASE_U_REL["nominal"]),
        u_rolling_shutter_rel=u_rolling_shutter_rel,
        temperature_c=temperature, u_temperature_c=liquid.temperature_u_c if temperature is not None else 0.0,
        dlnmu_dT_per_K=liquid.dlnmu_dT_per_K if temperature is not None else None,
        dof={} if fit_dof is None else {"v_m_s": fit_dof},
        apparatus_factor=rig.analysis.apparatus_factor,
        u_apparatus_factor=rig.analysis.apparatus_factor_u,
    )


def _comparison(mu: float, u_mu_no_temperature: float, rig: Rig) -> dict[str, Any] | None:
    """Measured viscosity against the liquid model at the measured temperature."""
    liquid = rig.liquid
    if liquid.model_viscosity_pa_s is None:
        return None
    ref, u_ref = liquid.model_viscosity_pa_s, liquid.model_viscosity_u_pa_s or 0.0
    denom = math.hypot(u_mu_no_temperature, u_ref)
    out: dict[str, Any] = {
        "reference_viscosity_pa_s": ref, "reference_viscosity_u_pa_s": u_ref,
        "model": liquid.model, "temperature_c": liquid.temperature_c,
        "difference_rel": mu / ref - 1.0,
        "z_score": (mu - ref) / denom if denom > 0 else None,
        "glycerol_mass_fraction_explaining": None, "glycerol_mass_fraction_u": None,
    }
    if liquid.model in ("glycerol-water", "glycerol") and liquid.temperature_c is not None:
        frac = fluids.glycerol_fraction_for_viscosity(
            mu, liquid.temperature_c, mu_u_pa_s=u_mu_no_temperature,
            temperature_u_c=liquid.temperature_u_c)
        if frac.ok:
            out["glycerol_mass_fraction_explaining"] = frac.glycerol_mass_fraction
            out["glycerol_mass_fraction_u"] = frac.glycerol_mass_fraction_u
    return out


def _transient_points(t: np.ndarray, plat: plateau.Plateau) -> np.ndarray:
    """Points for the transient fit: every point of the approach, the rest thinned evenly to
    about ``TRANSIENT_MAX_POINTS`` (each model evaluation of the history force costs ~0.1 ms per
    point, and the plateau's information on μ saturates long before its last frame)."""
    keep = np.zeros(t.size, bool)
    keep[:: max(1, math.ceil(t.size / TRANSIENT_MAX_POINTS))] = True
    if plat.start_s is not None:
        keep |= t <= plat.start_s
    return keep


def _analyze_track(g: pd.DataFrame, rig: Rig, scale: Any, marks_z_mm: np.ndarray,
                   timestamps: str, frame_height_px: int, last_frame: int,
                   frame_width_px: int | None = None,
                   rolling: tuple[np.ndarray, float] | None = None
                   ) -> tuple[dict[str, Any], np.ndarray, np.ndarray]:
    """Physics of one passage. Returns (track dict, v_mm_s column, in_plateau column).

    ``rolling``: when the rig does not give the readout time, each point's sensor-row fraction and
    the longest possible readout (one capture frame interval, s), for the rolling-shutter term."""
    t = g["t_s"].to_numpy(float)
    z = g["z_mm"].to_numpy(float)
    zu = g["z_u_mm"].to_numpy(float)
    warnings: list[str] = []
    v_local = terminal.local_velocity(t, z, window=min(LOCAL_VELOCITY_WINDOW, len(t) - (1 - len(t) % 2)))
    top, bottom = _exclusion_zones(g, rig, frame_height_px, last_frame)
    plat = plateau.find_plateau(t, z, zu, exclude_top_mm=top, exclude_bottom_mm=bottom)
    warnings += plat.warnings
    out: dict[str, Any] = {
        "id": int(g["track"].iloc[0]), "direction": plat.direction or ("down" if z[-1] >= z[0] else "up"),
        "n_points": int(len(g)),
        "terminal_velocity_m_s": None, "terminal_velocity_u_m_s": None,
        "plateau": {"found": plat.found, "reason": plat.reason, "start_s": plat.start_s,
                    "end_s": plat.end_s, "start_mm": plat.start_mm, "end_mm": plat.end_mm,
                    "settling_time_s": plat.settling_time_s,
                    "settling_distance_mm": plat.settling_distance_mm,
                    "exclude_top_mm": top, "exclude_bottom_mm": bottom,
                    "criterion": plat.criterion, "n_points": plat.n_points},
        "terminal_reached": bool(plat.found),
        "marks": [], "stopwatch": None,
        "viscosity_pa_s": None, "viscosity_u_pa_s": None, "viscosity_U_pa_s": None,
        "coverage_factor_k": None, "stokes_viscosity_pa_s": None, "reynolds_number": None,
        "wall_factor": None, "corrections": {}, "budget": None, "transient": None,
        "comparison": None, "calibration": None, "velocity_fit": None,
        "lateral_offset_mm": None, "lateral_drift_mm": None, "edge_reach_fraction": None,
        "distortion_sensitivity": None, "rolling_shutter_bound": None,
        "warnings": warnings,
    }
    in_plateau = np.asarray(plat.mask, bool)
    fit = None
    if plat.found:
        fit = terminal.fit_terminal_velocity(t, z, in_plateau, zu)
        warnings += fit.warnings
        out["terminal_velocity_m_s"] = fit.v_m_s
        out["terminal_velocity_u_m_s"] = fit.u_v_m_s
        out["direction"] = fit.direction
        out["velocity_fit"] = {k: v for k, v in fit.to_dict().items() if k != "residuals_mm"}
        if rolling is not None:
            # readout unknown: anything from 0 (global shutter) to one frame interval, either way
            # along the fall (the scan direction is not known): ±bound, rectangular, in the budget
            row_fraction, longest_readout_s = rolling
            bound = abs(rolling_shutter.velocity_bias(t[in_plateau], z[in_plateau],
                                                      row_fraction[in_plateau], longest_readout_s))
            out["rolling_shutter_bound"] = bound
            if bound > ROLLING_SHUTTER_WARN:
                warnings.append(
                    f"track {out['id']}: no [camera] readout_ms: a rolling shutter could shift v_t by up "
                    f"to ±{100 * bound:.2g} % here (readout up to one frame, {1e3 * longest_readout_s:.1f} ms, "
                    "along the fall); carried in the budget; give readout_ms (0 for a global shutter)")
        lat = g["lateral_mm"].to_numpy(float)[in_plateau]
        out["lateral_offset_mm"] = float(np.mean(lat))
        out["lateral_drift_mm"] = float(lat[-1] - lat[0])
        if frame_width_px and getattr(scale, "lens", None) is None:
            xp = g["x_px"].to_numpy(float)[in_plateau]
            yp = g["y_px"].to_numpy(float)[in_plateau]
            out["edge_reach_fraction"] = reach_fraction(xp, yp, frame_width_px, frame_height_px)
            sens = distortion_sensitivity(t[in_plateau], xp, yp, (scale.p1_px, scale.p2_px),
                                          frame_width_px, frame_height_px)
            out["distortion_sensitivity"] = sens
            if out["edge_reach_fraction"] > EDGE_WARN_FRACTION and abs(sens) > DISTORTION_WARN_SENSITIVITY:
                warnings.append(
                    f"track {out['id']}: the plateau reaches {100 * out['edge_reach_fraction']:.0f} % "
                    "of the way from the frame centre to its corners and the rig has no [lens] "
                    f"calibration: each 1 % of barrel lens distortion at the corners would make v_t "
                    f"read {100 * sens:+.2f} %; calibrate with `fallcam lens` and add its [lens] "
                    f"table, or keep the fall region within {100 * EDGE_WARN_FRACTION:.0f} % of the "
                    "way to the corners and take the scale along it")
        tube_d = rig.tube.inner_diameter_mm
        if tube_d and abs(out["lateral_drift_mm"]) > LATERAL_DRIFT_WARN_FRACTION * tube_d:
            warnings.append(f"track {out['id']}: the sphere drifted {out['lateral_drift_mm']:+.2f} mm "
                            "sideways over the plateau (apparent, magnified by the liquid): it is "
                            "probably off the tube axis, where the wall drag is larger")
    else:
        warnings.append(f"track {out['id']}: no plateau — {plat.reason}; terminal speed not "
                        "proven, so no viscosity from the plateau")

    # marks
    if marks_z_mm.size and fit is not None:
        mres = marks.mark_crossings(t, z, marks_z_mm, terminal=fit, plateau=plat)
        out["marks"] = [m.to_dict() for m in mres]
        sign = 1.0 if fit.direction == "down" else -1.0
        for m in mres:
            if m.crossing_s is not None and not m.terminal_at_mark:
                before = plat.start_mm is not None and sign * (m.z_mm - plat.start_mm) < 0
                where = ("before the plateau starts, where terminal speed is not proven" if before
                         else "where the local speed differs from v_t beyond its uncertainty")
                warnings.append(f"track {out['id']}: mark {m.index} was crossed {where} (local "
                                f"speed {-100 * (m.velocity_deficit or 0):+.2g} % from v_t)")
        pairs = marks.stopwatch_comparison(mres, terminal=fit)
        out["stopwatch"] = {"pairs": [p.to_dict() for p in pairs]} if pairs else None

    can_mu = rig.can_infer_viscosity()
    d_m = (rig.ball.diameter_mm or 0.0) * 1e-3
    tube_d_m = None if rig.tube.inner_diameter_mm is None else rig.tube.inner_diameter_mm * 1e-3
    wall_value = 1.0
    if tube_d_m is not None and d_m > 0:
        wall_value = drag.wall_factor(d_m / tube_d_m, rig.analysis.wall_model).value

    # transient: a cross-check with a plateau, the labelled fallback without one
    if can_mu:
        try:
            tr = transient.fit_transient(t, z, d_m=d_m, rho_s_kg_m3=rig.ball.density_kg_m3,
                                         rho_f_kg_m3=rig.liquid.density_kg_m3,
                                         g_m_s2=rig.gravity_m_s2(), wall_factor=wall_value,
                                         z_u_mm=zu, mask=_transient_points(t, plat))
            out["transient"] = tr.to_dict()
        except ValueError as exc:
            out["transient"] = {"label": "transient estimate", "converged": False, "reason": str(exc)}

    if fit is not None and can_mu:
        res = viscosity.infer_viscosity(fit.v_m_s, d_m, rig.ball.density_kg_m3, rig.liquid.density_kg_m3,
                                        tube_d_m=tube_d_m, g_m_s2=rig.gravity_m_s2(),
                                        wall=rig.analysis.wall_model, drag=rig.analysis.drag_model)
        warnings += res.warnings
        budget = uncertainty.viscosity_budget(
            _budget_inputs(fit, rig, scale, timestamps, fit.effective_points - 2,
                           u_rolling_shutter_rel=(out["rolling_shutter_bound"] or 0.0) / math.sqrt(3.0)),
            wall=rig.analysis.wall_model, drag=rig.analysis.drag_model)
        mu = res.mu_pa_s * (rig.analysis.apparatus_factor or 1.0)
        out.update({
            "viscosity_pa_s": mu, "viscosity_u_pa_s": budget.combined_u_rel * mu,
            "viscosity_U_pa_s": budget.expanded_U_rel * mu, "coverage_factor_k": budget.k,
            "stokes_viscosity_pa_s": res.stokes_viscosity_pa_s, "reynolds_number": res.reynolds_number,
            "wall_factor": res.corrections.get("wall_factor", 1.0),
            "budget": budget.to_dict(),
        })
        out["corrections"] = dict(res.corrections)
        if rig.analysis.apparatus_factor is not None:
            out["corrections"]["apparatus_factor"] = rig.analysis.apparatus_factor
        # the temperature row describes the stated temperature; a model comparison carries u(T) itself
        u_rel_no_t = math.sqrt(max(budget.combined_u_rel**2 - sum(
            r.contribution_rel**2 for r in budget.rows if r.symbol == "temperature_K"), 0.0))
        out["comparison"] = _comparison(mu, u_rel_no_t * mu, rig)
        if rig.liquid.is_calibration:
            cal = calibration.calibrate_apparatus(
                rig.liquid.reference_viscosity_pa_s, rig.liquid.reference_viscosity_u_pa_s or 0.0,
                [mu], [u_rel_no_t * mu], tube_d_m=tube_d_m, d_m=d_m)
            out["calibration"] = cal.to_dict()
    elif not can_mu:
        warnings.append("viscosity not computed: the rig lacks " + ", ".join(rig.missing_for_viscosity()))
    out["corrections"]["refraction_scale_factor"] = scale.refraction_factor
    return out, v_local, in_plateau


def _recorded_path(path: str | Path, out: Path) -> str:
    """A path as the result files record it: relative to the output folder when the file lies in
    it (the demo's clip and rig: the folder is written under a staging name and renamed, see
    :func:`fallcam.atomic.atomic_output_dir`), otherwise as given."""
    try:
        return Path(path).resolve().relative_to(out.resolve()).as_posix()
    except ValueError:
        return str(path)


def _clip_summary(result: Any, clip_path: Path, rig: Rig, scale: Any, command: str | None,
                  out: Path) -> dict[str, Any]:
    info = result.clip
    clip_info = info.to_dict()
    clip_info["path"] = _recorded_path(clip_path, out)
    rig_dict = rig.to_dict()
    if rig_dict.get("path"):
        rig_dict["path"] = _recorded_path(rig_dict["path"], out)
    return {
        "fallcam_version": __version__,
        "command": command or " ".join(sys.argv),
        "created_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "clip": _recorded_path(clip_path, out),
        "clip_info": clip_info,
        "capture_fps": info.capture_fps,
        "timestamps": info.timestamps,
        "px_per_mm": scale.px_per_mm,
        "lens_corrected": scale.lens is not None,
        "lens": None if scale.lens is None else scale.lens.to_dict(),
        "scale": scale.to_dict(),
        "rig": rig_dict,
        "reference": None if rig.liquid.state is None else rig.liquid.state.to_dict(),
        "tracks": [],
        "warnings": list(dict.fromkeys([*rig.warnings, *scale.warnings, *result.warnings])),
        "outputs": {},
        "versions": _versions(),
    }


def _write_trajectory(traj: pd.DataFrame, path: Path) -> None:
    cols = [c for c in TRAJECTORY_COLUMNS if c in traj.columns]
    extra = [c for c in traj.columns if c not in cols]
    atomic_write_text(path, traj[cols + extra].to_csv(index=False, float_format="%.6f"))


def track_clip_to_dir(clip_path: str | Path, rig: Rig, out_dir: str | Path, *,
                      progress: Progress | None = None, command: str | None = None) -> dict[str, Any]:
    """``fallcam track``: trajectory.csv, a tracking check picture and tracking.json.

    Returns the dict written to ``tracking.json`` (clip facts, scale, passages, warnings).
    """
    from tracker.track import save_check_picture

    clip_path, out = Path(clip_path), Path(out_dir)
    result = _track(clip_path, rig, progress)
    scale = rig.scale()
    traj = result.trajectory
    summary = _clip_summary(result, clip_path, rig, scale, command, out)
    summary["n_points"] = int(len(traj))
    for tid, g in traj.groupby("track", sort=True):
        summary["tracks"].append({
            "id": int(tid), "direction": "down" if g["z_mm"].iloc[-1] >= g["z_mm"].iloc[0] else "up",
            "n_points": int(len(g)), "start_s": float(g["t_s"].iloc[0]), "end_s": float(g["t_s"].iloc[-1]),
            "start_mm": float(g["z_mm"].iloc[0]), "end_mm": float(g["z_mm"].iloc[-1])})
    _write_trajectory(traj, out / "trajectory.csv")
    save_check_picture(result, out / "tracking_check.png")
    summary["outputs"] = {"trajectory_csv": "trajectory.csv", "tracking_check_png": "tracking_check.png"}
    atomic_write_json(out / "tracking.json", json_ready(summary))
    return summary


def _figure_processes() -> int:
    """Processes to draw a clip's figures with: the cores this process may use, or, in a parallel
    batch worker, its share of them (``$FALLCAM_DECODE_THREADS``, which the batch sets to it)."""
    cores = available_cores()
    share = os.environ.get(DECODE_THREADS_ENV, "").strip()
    return max(1, min(cores, int(share))) if share.isdigit() else cores


def analyze_clip(clip_path: str | Path, rig: Rig, out_dir: str | Path, *, overlay: bool = False,
                 progress: Progress | None = None, command: str | None = None,
                 figures: bool = True) -> dict[str, Any]:
    """``fallcam analyze``: the whole job for one clip.

    Parameters
    ----------
    clip_path : path
        The clip.
    rig : fallcam.rig.Rig
        Apparatus and liquid (with any command-line overrides applied).
    out_dir : path
        Folder for ``summary.json``, ``trajectory.csv``, the figures, ``report.html`` and, with
        ``overlay``, ``overlay.mp4``. Created if missing.
    overlay : bool
        Also write the overlay video.
    progress : callable, optional
        ``progress(n_frames_done, n_frames_total)``.
    figures : bool
        Write the figures and the report (batch runs may switch them off).

    Returns
    -------
    dict
        The summary (INTERFACE.md keys), as written to ``summary.json``.

    Raises
    ------
    tracker.errors.ClipError, tracker.errors.TrackingError
        Exit codes 3 and 4 of the command line.
    """
    clip_path, out = Path(clip_path), Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    result = _track(clip_path, rig, progress)
    scale = rig.scale()
    traj = result.trajectory.copy()
    summary = _clip_summary(result, clip_path, rig, scale, command, out)
    marks_z = np.asarray(rig.marks_z_mm(scale), float)
    height = int(result.clip.height_px)
    traj["v_mm_s"] = np.nan
    traj["in_plateau"] = False
    for _, g in traj.groupby("track", sort=True):
        info = result.clip
        rolling = None
        if rig.camera.readout_ms is None:
            rows = info.stored_row(g["x_px"].to_numpy(float), g["y_px"].to_numpy(float))
            rolling = (np.asarray(rows, float) / info.stored_height_px, 1.0 / info.capture_fps)
        track, v_local, in_plat = _analyze_track(g, rig, scale, marks_z, info.timestamps,
                                                 height, result.n_frames - 1,
                                                 int(info.width_px), rolling)
        traj.loc[g.index, "v_mm_s"] = v_local
        traj.loc[g.index, "in_plateau"] = in_plat
        track["warnings"] = list(dict.fromkeys(track["warnings"]))
        summary["tracks"].append(track)
    if any(not tr["terminal_reached"] for tr in summary["tracks"]):
        summary["warnings"].append("at least one passage never reached a terminal-speed plateau in view")

    _write_trajectory(traj, out / "trajectory.csv")
    outputs: dict[str, Any] = {"trajectory_csv": "trajectory.csv"}
    if figures:
        from fallcam import plots, report

        figs = plots.clip_figures(traj, summary, out, processes=_figure_processes())
        outputs["plots"] = {k: Path(v).name for k, v in figs.items()}
        outputs["report_html"] = "report.html"
        summary["outputs"] = outputs
        report.write_report(summary, out, figs)
    if overlay:
        from fallcam.overlay import write_overlay

        write_overlay(clip_path, traj, summary, out / "overlay.mp4")
        outputs["overlay_mp4"] = "overlay.mp4"
    summary["outputs"] = outputs
    summary = json_ready(summary)
    atomic_write_json(out / "summary.json", summary)
    return summary
