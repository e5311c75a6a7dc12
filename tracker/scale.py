"""Two-point scale: pixels of the displayed frame → millimetres along the fall axis.

The user clicks two points a known distance apart (ruler graduations, tape marks). The line
from the upper to the lower point is the fall axis; ``z_mm`` is measured along it, positive
**downward** in the displayed frame, with its origin at the upper point; ``lateral_mm`` is the
signed offset perpendicular to it, positive to the right.

When the two points are not in the ball's plane the scale is corrected for refraction and depth
(physics-references.md §10, paraxial, pinhole camera on the tube's axis plane). A ray from the
ball on the axis crosses the wall (thickness t, index n_w) and half the liquid (inner radius R_i,
index n_l), so the ball is imaged as if it stood at the effective distance

    L_eff = L + t/n_w + R_i/n_l        (L: lens to the tube's outer front surface)

- ``"ball-plane"``: the points lie in the ball's plane (e.g. a ruler inside the liquid on the
  axis): no correction, factor 1;
- ``"tube-front"``: marks on the tube's outer front surface (at distance L): factor L_eff / L;
- ``"in-air"``: a ruler in air at L + ``ruler_offset_mm`` (offset measured behind the tube's
  front surface; a ruler beside the tube in the axial plane has offset R_o = R_i + t):
  factor L_eff / (L + offset).

The factor multiplies displacements measured with the scale's own px/mm; ``px_per_mm`` is the
effective value at the ball's plane (own px/mm ÷ factor). Horizontal offsets are additionally
magnified about ×n_l by the liquid cylinder (§10), so ``lateral_mm`` is an *apparent* offset, good
for drift and off-axis checks, not for sizes.

Lens distortion (optional, :mod:`tracker.lens`): with a :class:`tracker.lens.LensModel`, every
measured (distorted) pixel position is first mapped to its ideal (undistorted) pixel position —
the two scale points and the timing marks as well as the ball's centre — and the scale, the axis
and ``to_mm`` work on ideal pixels. ``p1_px``/``p2_px`` stay as given (displayed frame);
``px_per_mm`` is then in ideal pixels. Without a lens model nothing changes.

Scale uncertainty: u(distance_mm) as given, plus a ±0.5 px click uncertainty per coordinate of
each point, taken as a rectangular half-width (common practice) → 0.5/√3 px; and, for the
refraction factor, u(camera_distance_mm) when given.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from tracker.lens import LensModel

__all__ = ["Scale", "PLANES", "CLICK_HALF_WIDTH_PX", "MAX_TILT_WARN_DEG"]

PLANES = ("ball-plane", "tube-front", "in-air")
CLICK_HALF_WIDTH_PX = 0.5  # ±0.5 px per clicked coordinate, rectangular (common practice)
MAX_TILT_WARN_DEG = 2.0  # warn when the scale axis leans more than this from vertical
_MAX_TILT_DEG = 45.0  # beyond this the two points do not describe a fall axis at all
_SHORT_SPAN_RATIO = 0.5  # warn when the scale covers less than half of the measured travel


def _point(name: str, value: Any) -> tuple[float, float]:
    try:
        x, y = (float(v) for v in value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} = {value!r} must be an (x, y) pair of pixel coordinates") from None
    if not (math.isfinite(x) and math.isfinite(y)):
        raise ValueError(f"{name} = {value!r} must have finite coordinates")
    return x, y


def _number(name: str, value: Any, *, minimum: float | None = None, strict: bool = True,
            unit: str = "") -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} = {value!r} must be a number{f' ({unit})' if unit else ''}") from None
    if not math.isfinite(x):
        raise ValueError(f"{name} = {value!r} must be a finite number")
    if minimum is not None and (x <= minimum if strict else x < minimum):
        rel = ">" if strict else "≥"
        raise ValueError(f"{name} = {x:g} must be {rel} {minimum:g}{f' {unit}' if unit else ''}")
    return x


@dataclass(frozen=True)
class Scale:
    """A two-point scale with its refraction correction and uncertainty.

    Build it with :meth:`from_points` (or :meth:`from_rig`), not directly.

    Attributes
    ----------
    p1_px, p2_px : tuple of float
        The two points as given, (x, y) in the displayed frame, px.
    distance_mm : float
        Known distance between them, mm.
    distance_u_mm : float
        Its standard uncertainty, mm.
    plane : str
        ``"ball-plane"``, ``"tube-front"`` or ``"in-air"``.
    refraction_factor : float
        True ball displacement ÷ displacement measured with the scale's own px/mm (1 for
        ``"ball-plane"``).
    px_per_mm : float
        Effective pixels per millimetre at the ball's plane (after the factor), px/mm.
    px_per_mm_u : float
        Standard uncertainty of ``px_per_mm``, px/mm.
    warnings : list of str
        Scale problems the user should know about (tilt, ignored keys).
    origin_px : tuple of float
        The upper point (z = 0), px.
    axis_unit : tuple of float
        Unit vector from the upper to the lower point (displayed frame, y down).
    tilt_deg : float
        Signed angle of the axis from vertical, degrees (+ when the lower point is to the right).
    effective_distance_mm : float or None
        L_eff of the ball (None for ``"ball-plane"``), mm.
    optics : dict
        The optics inputs used (empty for ``"ball-plane"``).
    lens : tracker.lens.LensModel or None
        Lens-distortion model applied before the scale (None: no correction).
    """

    p1_px: tuple[float, float]
    p2_px: tuple[float, float]
    distance_mm: float
    distance_u_mm: float
    plane: str
    refraction_factor: float
    px_per_mm: float
    px_per_mm_u: float
    warnings: list[str] = field(default_factory=list)
    origin_px: tuple[float, float] = (0.0, 0.0)
    axis_unit: tuple[float, float] = (0.0, 1.0)
    tilt_deg: float = 0.0
    effective_distance_mm: float | None = None
    optics: dict = field(default_factory=dict)
    lens: LensModel | None = None

    @property
    def lens_corrected(self) -> bool:
        """True when a lens-distortion model is applied."""
        return self.lens is not None

    def undistort_px(self, x_px: float | np.ndarray, y_px: float | np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray]:
        """Measured pixel positions → ideal pixel positions (unchanged without a lens model)."""
        if self.lens is None:
            return np.asarray(x_px, dtype=float), np.asarray(y_px, dtype=float)
        return self.lens.undistort_px(x_px, y_px)

    @classmethod
    def from_points(cls, p1_px: tuple[float, float], p2_px: tuple[float, float],
                    distance_mm: float, distance_u_mm: float = 0.0, *,
                    plane: str = "ball-plane", camera_distance_mm: float | None = None,
                    tube_wall_mm: float | None = None, wall_refractive_index: float | None = None,
                    liquid_refractive_index: float | None = None,
                    tube_inner_diameter_mm: float | None = None,
                    ruler_offset_mm: float | None = None,
                    camera_distance_u_mm: float = 0.0,
                    lens: LensModel | None = None) -> Scale:
        """Build a scale from two points a known distance apart.

        Parameters
        ----------
        p1_px, p2_px : (float, float)
            The two points (x, y) in the displayed frame, px; either order.
        distance_mm : float
            Distance between them, mm (> 0).
        distance_u_mm : float
            Its standard uncertainty, mm (≥ 0).
        plane : {"ball-plane", "tube-front", "in-air"}
            Where the points lie (see module docstring).
        camera_distance_mm : float, optional
            L, lens (entrance pupil) to the tube's outer front surface, mm. Needed unless
            ``plane="ball-plane"``, as are the next four.
        tube_wall_mm : float, optional
            Wall thickness t, mm (≥ 0).
        wall_refractive_index, liquid_refractive_index : float, optional
            n_w and n_l (≥ 1).
        tube_inner_diameter_mm : float, optional
            Inner diameter 2 R_i, mm.
        ruler_offset_mm : float, optional
            For ``"in-air"``: the ruler plane's distance behind the tube's front surface, mm
            (negative when in front of it).
        camera_distance_u_mm : float
            u(L), mm, propagated into the refraction factor.
        lens : tracker.lens.LensModel, optional
            Lens-distortion model of the displayed frame: the points (given as measured, in the
            distorted frame) are undistorted before the scale is formed, and so is every
            position given to :meth:`to_mm`.

        Returns
        -------
        Scale

        Raises
        ------
        ValueError
            Bad values, identical points, an axis more than 45° from vertical, an unknown plane,
            or a missing optics input for a non-ball plane (the message names the input).
        """
        p1 = _point("p1_px", p1_px)
        p2 = _point("p2_px", p2_px)
        dist = _number("distance_mm", distance_mm, minimum=0.0, unit="mm")
        dist_u = _number("distance_u_mm", distance_u_mm, minimum=0.0, strict=False, unit="mm")
        if plane not in PLANES:
            raise ValueError(f"plane = {plane!r} is unknown; expected one of {', '.join(PLANES)}")
        if lens is not None and not isinstance(lens, LensModel):
            raise ValueError(f"lens = {lens!r}: expected a tracker.lens.LensModel or None")
        q1, q2 = p1, p2
        if lens is not None:
            (ux, uy) = lens.undistort_px([p1[0], p2[0]], [p1[1], p2[1]])
            q1, q2 = (float(ux[0]), float(uy[0])), (float(ux[1]), float(uy[1]))
        upper, lower = (q1, q2) if q1[1] <= q2[1] else (q2, q1)
        dx, dy = lower[0] - upper[0], lower[1] - upper[1]
        span_px = math.hypot(dx, dy)
        if span_px == 0.0:
            raise ValueError(f"p1_px and p2_px are the same point {p1}; expected two distinct points")
        tilt = math.degrees(math.atan2(dx, dy))
        if abs(tilt) > _MAX_TILT_DEG:
            raise ValueError(
                f"scale points {p1} and {p2} lie {abs(tilt):.1f}° from vertical; expected two points "
                f"along the fall axis (within {_MAX_TILT_DEG:g}° of vertical)"
            )
        warnings: list[str] = []
        if abs(tilt) > MAX_TILT_WARN_DEG:
            warnings.append(f"scale axis is tilted {tilt:+.1f}° from vertical in the frame "
                            f"(more than {MAX_TILT_WARN_DEG:g}°); it is still used as the fall axis")
        optics_given = {
            "camera_distance_mm": camera_distance_mm, "tube_wall_mm": tube_wall_mm,
            "wall_refractive_index": wall_refractive_index,
            "liquid_refractive_index": liquid_refractive_index,
            "tube_inner_diameter_mm": tube_inner_diameter_mm, "ruler_offset_mm": ruler_offset_mm,
        }
        factor, factor_u, l_eff, optics = 1.0, 0.0, None, {}
        if plane == "ball-plane":
            # the tube's diameter is a property of the rig, not of the scale: never "ignored"
            ignored = [k for k, v in optics_given.items()
                       if v is not None and k != "tube_inner_diameter_mm"]
            if ignored:
                warnings.append(f"plane is ball-plane: {', '.join(ignored)} ignored (no refraction "
                                "correction)")
        else:
            factor, factor_u, l_eff, optics = _refraction(plane, optics_given, camera_distance_u_mm)
        own_px_per_mm = span_px / dist
        click_u_px = CLICK_HALF_WIDTH_PX / math.sqrt(3.0)
        # the span depends on both points' along-axis coordinates → √2 · u per point
        u_rel = math.sqrt((math.sqrt(2.0) * click_u_px / span_px) ** 2 + (dist_u / dist) ** 2
                          + (factor_u / factor) ** 2)
        px_per_mm = own_px_per_mm / factor
        return cls(p1, p2, dist, dist_u, plane, factor, px_per_mm, px_per_mm * u_rel, warnings,
                   upper, (dx / span_px, dy / span_px), tilt, l_eff, optics, lens)

    @classmethod
    def from_rig(cls, tables: Mapping[str, Mapping[str, Any]]) -> Scale:
        """Build a scale from rig-file tables (INTERFACE.md key names), without further validation.

        Parameters
        ----------
        tables : mapping
            At least ``tables["scale"]`` with ``points_px`` and ``distance_mm`` (plus the optional
            ``[scale]`` keys); ``tables["tube"]["inner_diameter_mm"]`` is used for the optics,
            and an optional ``tables["lens"]`` (``[lens]`` keys) gives the lens model.
            Strict checking of rig files (unknown keys, types) is ``fallcam.rig``'s job.

        Returns
        -------
        Scale
        """
        sc = tables["scale"]
        tube = tables.get("tube", {})
        lens = LensModel.from_dict(tables["lens"]) if tables.get("lens") else None
        p1, p2 = sc["points_px"]
        return cls.from_points(
            p1, p2, sc["distance_mm"], sc.get("distance_u_mm", 0.0),
            plane=sc.get("plane", "ball-plane"),
            camera_distance_mm=sc.get("camera_distance_mm"),
            tube_wall_mm=sc.get("tube_wall_mm"),
            wall_refractive_index=sc.get("wall_refractive_index"),
            liquid_refractive_index=sc.get("liquid_refractive_index"),
            tube_inner_diameter_mm=tube.get("inner_diameter_mm"),
            ruler_offset_mm=sc.get("ruler_offset_mm"),
            camera_distance_u_mm=sc.get("camera_distance_u_mm", 0.0),
            lens=lens,
        )

    def to_mm(self, x_px: float | np.ndarray, y_px: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Convert displayed-frame pixel positions to millimetres at the ball's plane.

        Parameters
        ----------
        x_px, y_px : float or ndarray of shape (n,)
            Positions in the displayed frame (origin at the top-left pixel's centre, y down), px,
            as measured: with a lens model they are undistorted first.

        Returns
        -------
        z_mm : ndarray of shape (n,) (0-d for scalars)
            Along the axis, positive downward, 0 at the upper scale point, mm.
        lateral_mm : ndarray
            Perpendicular to the axis, positive to the right, mm (apparent, see module notes).
        """
        xi, yi = self.undistort_px(x_px, y_px)
        x = xi - self.origin_px[0]
        y = yi - self.origin_px[1]
        ex, ey = self.axis_unit
        z_px = x * ex + y * ey
        lateral_px = x * ey - y * ex  # (ey, −ex) is the axis turned towards +x ("to the right")
        return z_px / self.px_per_mm, lateral_px / self.px_per_mm

    def check_span(self, travel_mm: float) -> str | None:
        """Warn when the scale is short compared with the distance the ball was tracked over.

        A short scale extrapolates its own error (and any lens distortion) over the track.

        Parameters
        ----------
        travel_mm : float
            Measured travel of the ball along the axis, mm.

        Returns
        -------
        str or None
            The warning, or None when the scale spans at least half the travel.
        """
        travel = abs(_number("travel_mm", travel_mm, unit="mm"))
        if self.distance_mm < _SHORT_SPAN_RATIO * travel:
            return (f"scale points are {self.distance_mm:g} mm apart but the ball was tracked over "
                    f"{travel:.1f} mm: place the scale points farther apart (at least half the "
                    "travel) to avoid extrapolating the scale")
        return None

    def to_dict(self) -> dict:
        """Return a JSON-friendly dict (summary.json ``scale``)."""
        return {
            "p1_px": [float(v) for v in self.p1_px],
            "p2_px": [float(v) for v in self.p2_px],
            "distance_mm": float(self.distance_mm),
            "distance_u_mm": float(self.distance_u_mm),
            "plane": self.plane,
            "refraction_factor": float(self.refraction_factor),
            "px_per_mm": float(self.px_per_mm),
            "px_per_mm_u": float(self.px_per_mm_u),
            "tilt_deg": float(self.tilt_deg),
            "effective_distance_mm": (None if self.effective_distance_mm is None
                                      else float(self.effective_distance_mm)),
            "optics": {k: float(v) for k, v in self.optics.items()},
            "lens_corrected": self.lens is not None,
            "lens": None if self.lens is None else self.lens.to_dict(),
            "warnings": list(self.warnings),
        }


def _refraction(plane: str, given: dict[str, float | None],
                camera_distance_u_mm: float) -> tuple[float, float, float, dict[str, float]]:
    """Paraxial factor, its standard uncertainty from u(L), L_eff and the inputs used."""
    needed = ["camera_distance_mm", "tube_wall_mm", "wall_refractive_index",
              "liquid_refractive_index", "tube_inner_diameter_mm"]
    if plane == "in-air":
        needed.append("ruler_offset_mm")
    for key in needed:
        if given[key] is None:
            raise ValueError(f"{key} is required for plane = {plane!r} (refraction correction); "
                             "give it or use plane = 'ball-plane'")
    cam = _number("camera_distance_mm", given["camera_distance_mm"], minimum=0.0, unit="mm")
    wall = _number("tube_wall_mm", given["tube_wall_mm"], minimum=0.0, strict=False, unit="mm")
    n_w = _number("wall_refractive_index", given["wall_refractive_index"], minimum=1.0, strict=False)
    n_l = _number("liquid_refractive_index", given["liquid_refractive_index"], minimum=1.0,
                  strict=False)
    d_i = _number("tube_inner_diameter_mm", given["tube_inner_diameter_mm"], minimum=0.0, unit="mm")
    cam_u = _number("camera_distance_u_mm", camera_distance_u_mm, minimum=0.0, strict=False,
                    unit="mm")
    l_eff = cam + wall / n_w + 0.5 * d_i / n_l
    optics = {"camera_distance_mm": cam, "tube_wall_mm": wall, "wall_refractive_index": n_w,
              "liquid_refractive_index": n_l, "tube_inner_diameter_mm": d_i}
    if plane == "tube-front":
        ref = cam
    else:
        offset = _number("ruler_offset_mm", given["ruler_offset_mm"], unit="mm")
        ref = cam + offset
        if ref <= 0:
            raise ValueError(f"ruler_offset_mm = {offset:g} puts the ruler at or behind the camera "
                             f"(camera_distance_mm = {cam:g}); expected camera_distance_mm + "
                             "ruler_offset_mm > 0")
        optics["ruler_offset_mm"] = offset
    if cam_u > 0:
        optics["camera_distance_u_mm"] = cam_u
    factor = l_eff / ref
    # d(factor)/dL = (ref − L_eff)/ref² since both L_eff and ref contain L once
    factor_u = abs(ref - l_eff) / ref ** 2 * cam_u
    return factor, factor_u, l_eff, optics
