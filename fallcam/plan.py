"""``fallcam plan``: what a rig will give, before filming.

From the rig (ball, liquid, tube, scale, marks) and an expected viscosity this predicts

- the terminal velocity in the tube with the wall factor and the inertia (drag-law) correction,
  the Reynolds number and the wall factor (:func:`physics.viscosity.terminal_velocity`);
- the transit time over the timed stretch (between the first and last timing mark, else between
  the two scale points);
- the run-in: the distance from release needed to come within 0.1 % of terminal speed, with the
  exponential textbook model and with the Basset history force (:mod:`physics.transient`), and a
  recommended minimum depth of the first mark, the distance travelled in max(7 τ, R²/ν)
  (physics-references.md §5 "Rule for the tool", common practice, no source);
- the frame rate (at the rig's resolution) and the resolution (at common frame rates) that give
  a chosen statistical velocity uncertainty, from the least-squares slope of N equally spaced
  positions with independent noise σ_y over a time T, σ_v ≈ √12 σ_y / (T √N)
  (physics-references.md §9, from memory: standard regression result), with σ_y ≈ 0.1 px;
- the zones to keep clear, one tube diameter above the bottom and below the free surface
  (:func:`physics.drag.bottom_exclusion_mm`, common practice);
- warnings when d/D > 0.1 or Re > 0.1, plus the validity warnings of the physics models.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

from fallcam.errors import UsageError
from fallcam.rig import Rig
from physics import rolling_shutter
from physics.drag import STOKES_RE_MAX, WALL_WARN_LAMBDA, bottom_exclusion_mm
from physics.transient import transient_model
from physics.viscosity import terminal_velocity

__all__ = ["COMMON_FPS", "PIXEL_NOISE_PX", "RUN_IN_FRACTION", "Plan", "plan"]

RUN_IN_FRACTION = 0.999
"""Fraction of terminal speed the run-in is computed for ("within 0.1 %")."""

PIXEL_NOISE_PX = 0.1
"""Assumed standard deviation of one sphere-centre position, px (typical sub-pixel centring of a
sharp, well-lit sphere; common practice, no source). Blur, poor contrast or compression raise it."""

COMMON_FPS = (30.0, 60.0, 120.0, 240.0)
"""Frame rates for which the resolution needed is tabulated, frames/s (phone video modes)."""

_SKIP_TAU_MULTIPLE = 7.0  # physics-references.md §5: skip at least max(7τ, R²/ν) after release
_MM_PER_M = 1000.0

#: Readout time of a typical 1080p phone sensor, s: 26–33 ms measured for several phones
#: (published: Oth et al. 2013 and Ringaby & Forssén 2011, physics-references §11).
TYPICAL_READOUT_S = 0.030


@dataclasses.dataclass(frozen=True)
class Plan:
    """Prediction for a rig before filming.

    Attributes
    ----------
    rig_path : str
        The rig file.
    viscosity_pa_s : float
        Viscosity used, Pa·s.
    viscosity_source : str
        Where it came from (command line, the rig's known viscosity, the liquid model).
    ball_diameter_mm, diameter_ratio : float, float or None
        Ball diameter, mm, and d/D (None without a tube).
    direction : str
        ``"down"`` or ``"up"``.
    terminal_velocity_m_s : float
        Predicted speed in the tube, m/s (wall and inertia corrected).
    unbounded_velocity_m_s, stokes_velocity_m_s : float
        Speed in unbounded liquid with the drag law, and the bare Stokes speed, m/s.
    reynolds_number : float
        Re = ρ_f v∞ d / μ.
    wall_factor : float or None
        f_w = v/v∞ (None without a tube).
    inertia_factor_phi : float
        φ of the drag law at the solution.
    wall_model, drag_model : str
        Models used (from the rig's ``[analysis]``).
    timed_stretch_mm : float
        Length timed, mm (ball plane).
    timed_stretch_source : str
        ``"marks"`` (first to last timing mark) or ``"scale points"``.
    transit_time_s : float
        Time to cross the timed stretch at the predicted speed, s.
    first_mark_mm : float or None
        Depth of the first timing mark below the upper scale point, mm (None without marks).
    tau_s : float
        Time constant of the exponential model, s.
    run_in : dict
        ``{"exponential": {...}, "history": {...}}``, each with ``model`` (text), ``time_s`` and
        ``distance_mm`` to reach :data:`RUN_IN_FRACTION` of terminal speed from release.
    skip_time_s, recommended_run_in_mm : float
        max(7 τ, R²/ν) (7 τ without a tube), s, and the distance travelled by then with the
        history model, mm: the first mark should lie at least this far below the release point.
    px_per_mm : float
        Resolution of the rig's scale at the ball's plane, px/mm.
    pixel_noise_px : float
        Assumed σ of one centre position, px.
    target_u_rel : float
        Wanted statistical relative velocity uncertainty.
    fps_needed : float
        Frame rate giving ``target_u_rel`` at ``px_per_mm`` over ``transit_time_s``, frames/s.
    resolution_table : list of dict
        Per frame rate of :data:`COMMON_FPS` (and the rig's ``capture_fps``):
        ``{"fps", "n_frames", "u_rel_at_rig_resolution", "px_per_mm_needed"}``.
    exclusion_mm : float or None
        Zone to keep clear above the bottom and below the free surface (1 D), mm.
    liquid_depth_mm, usable_depth_mm : float or None
        Liquid depth from the rig and what remains for timing after the run-in and the two end
        zones, mm.
    assumptions : list of str
        What the numbers assume.
    warnings : list of str
        Problems of the planned run.
    """

    rig_path: str
    viscosity_pa_s: float
    viscosity_source: str
    ball_diameter_mm: float
    diameter_ratio: float | None
    direction: str
    terminal_velocity_m_s: float
    unbounded_velocity_m_s: float
    stokes_velocity_m_s: float
    reynolds_number: float
    wall_factor: float | None
    inertia_factor_phi: float
    wall_model: str
    drag_model: str
    timed_stretch_mm: float
    timed_stretch_source: str
    transit_time_s: float
    first_mark_mm: float | None
    tau_s: float
    run_in: dict[str, dict[str, Any]]
    skip_time_s: float
    recommended_run_in_mm: float
    px_per_mm: float
    pixel_noise_px: float
    target_u_rel: float
    fps_needed: float
    resolution_table: list[dict[str, float]]
    exclusion_mm: float | None
    liquid_depth_mm: float | None
    usable_depth_mm: float | None
    assumptions: list[str]
    warnings: list[str]

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dict of every attribute."""
        return dataclasses.asdict(self)

    def to_text(self) -> str:
        """Short human-readable plan (what ``fallcam plan`` prints)."""
        v_mm_s = self.terminal_velocity_m_s * _MM_PER_M
        lines = [
            f"plan for {self.rig_path}",
            f"  viscosity           {self.viscosity_pa_s:.4g} Pa·s ({self.viscosity_source})",
            f"  terminal velocity   {v_mm_s:.4g} mm/s {self.direction} in the tube "
            f"(unbounded {self.unbounded_velocity_m_s * _MM_PER_M:.4g} mm/s, "
            f"bare Stokes {self.stokes_velocity_m_s * _MM_PER_M:.4g} mm/s)",
            f"  Reynolds number     {self.reynolds_number:.3g} (inertia factor φ = "
            f"{self.inertia_factor_phi:.4f}, {self.drag_model})",
        ]
        if self.wall_factor is not None and self.diameter_ratio is not None:
            lines.append(f"  wall factor         {self.wall_factor:.4f} (d/D = {self.diameter_ratio:.3f}, "
                         f"{self.wall_model})")
        else:
            lines.append("  wall factor         none (the rig gives no tube diameter)")
        lines.append(f"  transit time        {self.transit_time_s:.3g} s over {self.timed_stretch_mm:.1f} mm "
                     f"(between the {self.timed_stretch_source})")
        lines.append(f"run-in to within {(1 - RUN_IN_FRACTION) * 100:.1g} % of terminal speed, from release "
                     "(the first mark must lie below it):")
        for key in ("exponential", "history"):
            r = self.run_in[key]
            lines.append(f"  {r['distance_mm']:.3g} mm, {r['time_s']:.3g} s: {r['model']}")
        lines.append(f"  recommended: first mark ≥ {self.recommended_run_in_mm:.3g} mm below the release "
                     f"point (distance travelled in max(7 τ, R²/ν) = {self.skip_time_s:.3g} s; "
                     "common practice)")
        if self.first_mark_mm is not None:
            lines.append(f"  (the first mark lies {self.first_mark_mm:.1f} mm below the upper scale point)")
        lines.append(f"frame rate and resolution for u(v) = {self.target_u_rel * 100:.3g} % (statistical "
                     f"part only, σ = {self.pixel_noise_px:g} px per position):")
        lines.append(f"  at the rig's {self.px_per_mm:.3g} px/mm: ≥ {self.fps_needed:.3g} frames/s")
        for row in self.resolution_table:
            lines.append(f"  at {row['fps']:g} frames/s ({row['n_frames']:.0f} frames): u(v) = "
                         f"{row['u_rel_at_rig_resolution'] * 100:.2g} % at the rig's resolution; "
                         f"needs ≥ {row['px_per_mm_needed']:.3g} px/mm")
        if self.exclusion_mm is not None:
            text = (f"keep clear: {self.exclusion_mm:.0f} mm (1 D) above the bottom and below the "
                    "free surface")
            if self.usable_depth_mm is not None:
                text += f"; usable for timing: {self.usable_depth_mm:.0f} mm of {self.liquid_depth_mm:.0f} mm depth"
            lines.append(text)
        lines.extend(f"warning: {w}" for w in self.warnings)
        lines.extend(f"assumes: {a}" for a in self.assumptions)
        return "\n".join(lines) + "\n"


def _viscosity(rig: Rig, viscosity_pa_s: float | None) -> tuple[float, str]:
    if viscosity_pa_s is not None:
        if not (math.isfinite(viscosity_pa_s) and viscosity_pa_s > 0):
            raise UsageError(f"--viscosity-pa-s {viscosity_pa_s!r}: expected a viscosity in Pa·s > 0")
        return float(viscosity_pa_s), "given on the command line"
    liquid = rig.liquid
    if liquid.reference_viscosity_pa_s is not None:
        return liquid.reference_viscosity_pa_s, "the rig's reference_viscosity_pa_s"
    if liquid.model_viscosity_pa_s is not None:
        where = f" at {liquid.temperature_c:g} °C" if liquid.temperature_c is not None else ""
        return liquid.model_viscosity_pa_s, f"{liquid.model} model{where}"
    raise UsageError(f"{rig.path}: the liquid has no reference model or known viscosity, so plan "
                     "needs an expected viscosity",
                     hint="give --viscosity-pa-s X, or [liquid] model with temperature_c in the rig")


def _timed_stretch(rig: Rig) -> tuple[float, str, float | None]:
    scale = rig.scale()
    marks = sorted(float(z) for z in rig.marks_z_mm(scale))
    if len(marks) >= 2:
        return marks[-1] - marks[0], "marks", marks[0]
    (z1, z2), _ = scale.to_mm([scale.p1_px[0], scale.p2_px[0]], [scale.p1_px[1], scale.p2_px[1]])
    return abs(float(z2) - float(z1)), "scale points", (marks[0] if marks else None)


def _u_rel(px_per_mm: float, stretch_mm: float, n_frames: float, noise_px: float) -> float:
    """σ_v / v = √12 σ_y / (L √N) with σ_y = noise_px / px_per_mm (σ_v ≈ √12 σ_y / (T √N), v T = L)."""
    return math.sqrt(12.0) * noise_px / (px_per_mm * stretch_mm * math.sqrt(n_frames))


def plan(rig: Rig, viscosity_pa_s: float | None = None, *, target_u_rel: float = 1e-3,
         pixel_noise_px: float = PIXEL_NOISE_PX) -> Plan:
    """Predict terminal velocity, run-in, timing and camera needs of a rig.

    Parameters
    ----------
    rig : fallcam.rig.Rig
        The loaded rig. Needs the ball diameter and density and the liquid density.
    viscosity_pa_s : float, optional
        Expected viscosity, Pa·s. Default: the rig's ``reference_viscosity_pa_s``, else the
        liquid model's viscosity at the rig's temperature.
    target_u_rel : float, optional
        Wanted statistical relative uncertainty of the velocity (default 0.001 = 0.1 %).
    pixel_noise_px : float, optional
        σ of one centre position, px (default :data:`PIXEL_NOISE_PX`).

    Returns
    -------
    Plan

    Raises
    ------
    fallcam.errors.UsageError
        The rig lacks a needed value, no viscosity is available, or the physics rejects the
        combination (e.g. Re beyond the drag law's range) — the message names the value.
    """
    if not (math.isfinite(target_u_rel) and 0 < target_u_rel < 1):
        raise UsageError(f"target velocity uncertainty {target_u_rel!r}: expected a fraction between 0 and 1")
    missing = rig.missing_for_viscosity()
    if missing:
        raise UsageError(f"{rig.path}: plan needs {', '.join(missing)}")
    mu, mu_source = _viscosity(rig, viscosity_pa_s)
    d_mm = float(rig.ball.diameter_mm)
    rho_s, rho_f = float(rig.ball.density_kg_m3), float(rig.liquid.density_kg_m3)
    if rho_s == rho_f:
        raise UsageError(f"{rig.path}: ball and liquid density are both {rho_s:g} kg/m³; the ball "
                         "would neither fall nor rise")
    tube_mm = rig.tube.inner_diameter_mm
    d_m, tube_m = d_mm / _MM_PER_M, (None if tube_mm is None else tube_mm / _MM_PER_M)
    g = rig.gravity_m_s2()
    try:
        pred = terminal_velocity(mu, d_m, rho_s, rho_f, tube_d_m=tube_m, g_m_s2=g,
                                 wall=rig.analysis.wall_model, drag=rig.analysis.drag_model)
        f_w = 1.0 if pred.wall_factor is None else pred.wall_factor
        models = {history: transient_model(d_m=d_m, rho_s_kg_m3=rho_s, rho_f_kg_m3=rho_f,
                                           mu_pa_s=mu, g_m_s2=g, wall_factor=f_w, history=history)
                  for history in (False, True)}
    except ValueError as exc:
        raise UsageError(f"{rig.path}: {exc}") from None

    warnings: list[str] = []
    lam = None if tube_mm is None else d_mm / tube_mm
    if lam is not None and lam > WALL_WARN_LAMBDA:
        warnings.append(f"d/D = {lam:.3f} > {WALL_WARN_LAMBDA}: the wall correction is large "
                        f"({(1 / f_w - 1) * 100:.0f} % of the drag); a smaller ball or wider tube "
                        "makes the result less model dependent")
    if pred.reynolds_number > STOKES_RE_MAX:
        warnings.append(f"Re = {pred.reynolds_number:.3g} > {STOKES_RE_MAX}: inertia matters "
                        f"(φ = {pred.inertia_factor_phi:.3f}); a smaller ball or a more viscous "
                        "liquid keeps Stokes' law closer")
    warnings.extend(w for w in pred.warnings if w not in warnings)

    stretch_mm, stretch_source, first_mark_mm = _timed_stretch(rig)
    if stretch_mm <= 0:
        raise UsageError(f"{rig.path}: the timed stretch has zero length; expected marks (or scale "
                         "points) at different heights")
    v_mm_s = pred.v_m_s * _MM_PER_M
    transit_s = stretch_mm / v_mm_s

    run_in = {}
    for key, history in (("exponential", False), ("history", True)):
        model = models[history]
        t_p = model.time_to_fraction(RUN_IN_FRACTION)
        run_in[key] = {"model": model.model, "time_s": t_p,
                       "distance_mm": float(model.distance_m([t_p])[0]) * _MM_PER_M}
    tau = models[False].tau_s
    skip_s = _SKIP_TAU_MULTIPLE * tau
    if tube_mm is not None:
        nu = mu / rho_f
        skip_s = max(skip_s, (tube_m / 2.0) ** 2 / nu)
    recommended_mm = float(models[True].distance_m([skip_s])[0]) * _MM_PER_M

    px_per_mm = float(rig.scale().px_per_mm)
    n_needed = 12.0 * (pixel_noise_px / (px_per_mm * stretch_mm * target_u_rel)) ** 2
    fps_needed = max(n_needed, 2.0) / transit_s
    rates = sorted(set(COMMON_FPS) | ({rig.camera.capture_fps} if rig.camera.capture_fps else set()))
    table = []
    for fps in rates:
        n = max(fps * transit_s, 2.0)
        u_here = _u_rel(px_per_mm, stretch_mm, n, pixel_noise_px)
        table.append({"fps": float(fps), "n_frames": float(n), "u_rel_at_rig_resolution": u_here,
                      "px_per_mm_needed": px_per_mm * u_here / target_u_rel})

    exclusion = None if tube_mm is None else bottom_exclusion_mm(tube_mm)
    depth = rig.tube.liquid_depth_mm
    usable = None
    if exclusion is not None and depth is not None:
        usable = depth - max(exclusion, recommended_mm) - exclusion
        if usable <= 0:
            warnings.append(f"liquid depth {depth:g} mm leaves no stretch for timing after the run-in "
                            f"({max(exclusion, recommended_mm):.0f} mm) and the bottom zone "
                            f"({exclusion:.0f} mm); use a taller column")
        elif stretch_mm > usable:
            warnings.append(f"the timed stretch ({stretch_mm:.0f} mm) is longer than the usable depth "
                            f"({usable:.0f} mm): move the marks closer together")
    if not rig.camera.readout_ms:
        # the field is at least as tall as the timed stretch: an upper bound on the bias c·v
        c = rolling_shutter.readout_coefficient(TYPICAL_READOUT_S, stretch_mm / _MM_PER_M)
        bias = rolling_shutter.apparent_velocity(pred.v_m_s, c) / pred.v_m_s - 1.0
        if bias > target_u_rel:
            warnings.append(
                f"no [camera] readout_ms: a rolling shutter of {TYPICAL_READOUT_S * 1e3:.0f} ms (typical "
                f"1080p phone) reading along the fall biases v by up to +{100 * bias:.2g} % over a "
                f"{stretch_mm:.0f} mm field; film in portrait (readout across the fall) or give readout_ms")
    if tube_mm is None:
        warnings.append("the rig gives no [tube] inner_diameter_mm: no wall factor is predicted "
                        "(and the analysis will apply none)")

    assumptions = [
        f"σ = {pixel_noise_px:g} px per centre position, independent between frames; blur, low "
        "contrast or compression make it larger",
        "frames equally spaced over the timed stretch and one straight-line fit over all of it: "
        "σ_v ≈ √12 σ_y / (T √N) (standard regression result, from memory)",
        "statistical part only: scale, refraction, temperature and ball-size terms are separate "
        "(and usually larger)",
        "run-in from release at rest; the history-force figure is for unbounded liquid and is an "
        "upper bound in a tube (the wall cuts the slow tail off after about R²/ν)",
        f"viscosity {mu:.4g} Pa·s ({mu_source}); the prediction scales with it",
    ]
    return Plan(
        rig_path=rig.path, viscosity_pa_s=mu, viscosity_source=mu_source, ball_diameter_mm=d_mm,
        diameter_ratio=lam, direction=pred.direction, terminal_velocity_m_s=pred.v_m_s,
        unbounded_velocity_m_s=pred.v_unbounded_m_s, stokes_velocity_m_s=pred.v_stokes_m_s,
        reynolds_number=pred.reynolds_number, wall_factor=pred.wall_factor,
        inertia_factor_phi=pred.inertia_factor_phi, wall_model=rig.analysis.wall_model,
        drag_model=rig.analysis.drag_model, timed_stretch_mm=stretch_mm,
        timed_stretch_source=stretch_source, transit_time_s=transit_s, first_mark_mm=first_mark_mm,
        tau_s=tau, run_in=run_in, skip_time_s=skip_s, recommended_run_in_mm=recommended_mm,
        px_per_mm=px_per_mm, pixel_noise_px=pixel_noise_px, target_u_rel=target_u_rel,
        fps_needed=fps_needed, resolution_table=table, exclusion_mm=exclusion,
        liquid_depth_mm=depth, usable_depth_mm=usable, assumptions=assumptions, warnings=warnings,
    )
