"""The tracking loop: a clip in, a trajectory in millimetres and seconds out.

``track_clip`` decodes the clip once, sequentially (``tracker.video``), and for every frame:

1. skips repeated (duplicate) pictures;
2. registers the frame to the static scene (``tracker.stabilize``), leaving out the windows of
   the objects being followed;
3. measures every followed object in a small window around its constant-velocity prediction
   (``tracker.detect.measure``); a frame where it is hidden, crowded or touches the border is a
   gap, and short gaps are bridged by the prediction;
4. searches the whole (downsampled) frame for new objects only while nothing is followed, and
   every few frames otherwise (full-frame work is for acquisition only);
5. refreshes the background model now and then, never inside the followed windows.

At the end the passages are sorted out: fragments split by a long occlusion are joined; a ball
that comes to rest ends its passage at the stop; objects that hardly move, bubbles (bright core
in a dark rim, or rising while the sphere falls), reflections (a fainter object moving in step
with a stronger one) are dropped; passages are numbered in time order.

Position uncertainty ``pos_u_px`` is per point: the noise of the occupancy propagated to the
centroid, scaled for each passage so that its median matches the passage's own scatter about a
local quadratic in time (codec and registration errors included), plus a 0.02 px floor for the
method's residual bias.

Coordinates and time follow DEVELOPERS.md: ``x_px``, ``y_px`` are in the displayed frame of the
scene as the first frame shows it (the camera's own motion after that is removed; a camera that
never moved more than the registration's codec noise, 0.35 px, is taken as static and the frame
positions are used as they are), origin at the top-left pixel's centre, y down; ``t_s`` is physical time from the first frame plus, with a rolling
shutter, the centre's sensor-row delay ``stored_row / stored_height × readout``; pixels become
millimetres only through ``scale.to_mm``.
"""

from __future__ import annotations

import bisect
import contextlib
import math
import pathlib
import statistics
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from tracker.detect import Background, Measurement, measure
from tracker.errors import TrackingError
from tracker.stabilize import Stabilizer
from tracker.video import ClipInfo, read_clip

__all__ = ["TRAJECTORY_COLUMNS", "TrackResult", "track_clip", "save_check_picture"]

#: Columns of the trajectory (DEVELOPERS.md contract), in order; extras follow them.
TRAJECTORY_COLUMNS = ("frame", "t_s", "x_px", "y_px", "pos_u_px", "diameter_h_px", "diameter_v_px",
                      "z_mm", "z_u_mm", "lateral_mm", "track")
#: Extra columns: contrast (grey levels), motion-blur streak (px), camera shift of the frame (px).
EXTRA_COLUMNS = ("contrast_dn", "blur_px", "shake_dx_px", "shake_dy_px")

_NO_SPHERE = ("expected a dark sphere on a bright background or a bright one on a dark background")
_DIRECTION_WARNING = ("sphere moves {moved} in the displayed frame although it is {denser} than the "
                      "liquid — check the clip's rotation")

# A passage needs this many points (fewer cannot give a velocity with an uncertainty).
_MIN_POINTS = 5
# A tentative object becomes a followed one after this many consecutive detections.
_CONFIRM_POINTS = 5
# Full-frame acquisition cadence (frames) while nothing / something is followed.
_ACQUIRE_IDLE_EVERY = 2
_ACQUIRE_EVERY = 15
# Background refresh cadence (frames) and blending weight (time constant ≈ 5 refreshes).
_BG_EVERY = 30
_BG_ALPHA = 0.2
# Points used for the constant-velocity prediction.
_PREDICT_POINTS = 8
# An object that moves less than this speed (px/s) over _STILL_S seconds is at rest (a ball on
# the bottom, or the imprint of an object that was in the first frame); slower real spheres are
# not expected (0.5 px/s is 0.1 mm/s at 5 px/mm).
_STILL_SPEED_PX_S = 0.5
_STILL_S = 1.0
# Gaps: coasting ends after this many missed frames once the prediction has travelled more than
# _COAST_DIAMETERS diameters (+ _COAST_PX), or after _COAST_S seconds.
_COAST_MIN_MISSES = 3
_COAST_DIAMETERS = 2.5
_COAST_PX = 15.0
_COAST_S = 2.0
# ... and an object that has not yet moved a diameter (a ghost of the first frame) after this many.
_COAST_STILL_MISSES = 6
# A passage is found in at least this fraction of the frames it spans, and the robust spread of
# its apparent width is at most this fraction of the width.
_MIN_DETECTED_FRACTION = 0.5
_MAX_SIZE_SPREAD = 0.25
# Tentative objects are dropped after this many misses.
_TENTATIVE_MISSES = 2
# Crops kept for the check picture: a new one when the object moved this many diameters.
_CROP_STEP_DIAMETERS = 0.8
# Bubble: a silhouette whose filled hole (bright core) is larger than this fraction.
_BUBBLE_HOLE_FRACTION = 0.25
# A whole sphere's measured height stays within this fraction of its passage's (see
# _height_tolerance); a partly hidden one falls short.
_PARTIAL_HEIGHT_FRACTION = 0.06
# Reflection: a passage seen in the same frames as a stronger one (this fraction of its points),
# at a constant offset along the motion below this many diameters, speeds within this fraction.
_REFLECTION_OVERLAP = 0.5
_REFLECTION_DIAMETERS = 1.5
_REFLECTION_SPEED = 0.1
# Below this camera shift (95th percentile over the clip, px) the camera is taken as static: the
# registration's own noise on heavily compressed clips (key frames re-quantise the scene) is
# 0.1–0.3 px (crf 35–40), more than the shift it would correct.
_STATIC_CAMERA_PX = 0.35
# Type-B floor of the centre's standard uncertainty: residual systematic error of the method
# (pixel locking with defocus, codec smoothing, registration), px; from the known-truth tests
# in tests/tracker/test_track.py (measured biases 0.005–0.02 px on dark spheres).
_POS_U_FLOOR_PX = 0.02


class ScaleLike(Protocol):
    """What the tracker needs from a scale (``tracker.scale.Scale``)."""

    px_per_mm: float

    def to_mm(self, x_px: Any, y_px: Any) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Pixel position (displayed frame) → (z_mm along the axis, lateral_mm)."""
        ...


@dataclass
class TrackResult:
    """Result of tracking one clip.

    Attributes
    ----------
    trajectory : pandas.DataFrame
        One row per detection, sorted by ``track`` then ``t_s``; columns
        :data:`TRAJECTORY_COLUMNS` (units in the names, DEVELOPERS.md) followed by
        :data:`EXTRA_COLUMNS`.
    clip : tracker.video.ClipInfo
        What the clip is (timing source, rotation, rates, its own warnings).
    warnings : list of str
        Tracking warnings, one sentence each (the clip's own are in ``clip.warnings``).
    n_frames : int
        Frames decoded.
    composite : ndarray of shape (H, W), uint8, or None
        The scene with the sphere drawn at its positions along each passage (darkest value for
        a dark sphere, brightest for a bright one), in the scene frame.
    polarity : str or None
        "dark" or "bright" (of the first passage).
    readout_ms : float
        Rolling-shutter readout used for the point times, ms.
    """

    trajectory: pd.DataFrame
    clip: ClipInfo
    warnings: list[str]
    n_frames: int
    composite: NDArray[np.uint8] | None = field(default=None, repr=False)
    polarity: str | None = None
    readout_ms: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly summary (no DataFrame): clip, counts, warnings, one entry per passage."""
        tracks = []
        for tid, g in self.trajectory.groupby("track", sort=True):
            tracks.append({
                "id": int(tid),
                "n_points": int(len(g)),
                "start_s": float(g["t_s"].iloc[0]),
                "end_s": float(g["t_s"].iloc[-1]),
                "start_mm": float(g["z_mm"].iloc[0]),
                "end_mm": float(g["z_mm"].iloc[-1]),
                "direction": "down" if g["z_mm"].iloc[-1] >= g["z_mm"].iloc[0] else "up",
                "median_pos_u_px": float(g["pos_u_px"].median()),
                "diameter_h_px": float(g["diameter_h_px"].median()),
                "diameter_v_px": float(g["diameter_v_px"].median()),
            })
        return {
            "clip": self.clip.to_dict(),
            "n_frames": int(self.n_frames),
            "n_points": int(len(self.trajectory)),
            "polarity": self.polarity,
            "readout_ms": float(self.readout_ms),
            "tracks": tracks,
            "warnings": list(self.warnings),
        }


# ------------------------------------------------------------------------------------ internals
@dataclass
class _Point:
    frame: int
    t_frame: float
    x_frame: float
    y_frame: float
    x: float            # scene frame
    y: float
    m: Measurement
    dx: float
    dy: float


class _Track:
    """One object being followed: its points and its prediction."""

    def __init__(self, polarity: str, point: _Point) -> None:
        self.polarity = polarity
        self.points: list[_Point] = [point]
        self.misses = 0
        self.n_gaps_bridged = 0
        self.longest_gap = 0
        self.end_reason = ""
        self._confirmed = False
        self.crops: list[tuple[int, int, NDArray[np.uint8]]] = []   # (x0, y0, crop) scene frame
        self._levels: list[float] = []
        self._sizes: list[tuple[float, float, float]] = []
        self._size = (0.0, 0.0, 0.0)
        self._v_spread = 0.0
        self._level: float | None = None
        self._velocity = (0.0, 0.0)
        self._add_stats(point.m)

    # -- statistics (recomputed once per new point; read many times per frame)
    def _add_stats(self, m: Measurement) -> None:
        if np.isfinite(m.level_dn):
            self._levels.append(m.level_dn)
            del self._levels[:-50]
            if len(self._levels) >= 3:
                self._level = float(statistics.median(self._levels))
        self._sizes.append((m.diameter_h_px, m.diameter_v_px, m.blur_px))
        del self._sizes[:-50]
        h, v, b = zip(*self._sizes)
        self._size = (float(statistics.median(h)), float(statistics.median(v)), float(statistics.median(b)))
        self._v_spread = 1.4826 * float(statistics.median(abs(x - self._size[1]) for x in v))
        self._velocity = self._fit_velocity()

    @property
    def confirmed(self) -> bool:
        """Seen in ``_CONFIRM_POINTS`` frames; it stays so when points are dropped later (the
        heal of a first-frame blob drops those measured over it)."""
        return self._confirmed

    @property
    def level_dn(self) -> float | None:
        """Median gain-normalised grey level of the object's core (None until known)."""
        return self._level

    def size(self) -> tuple[float, float, float]:
        """Median (diameter_h, diameter_v, blur) of the recent points, px."""
        return self._size

    def diameter(self) -> float:
        return max(self._size[0], self._size[1])

    def whole(self, diameter_v_px: float) -> bool:
        """True when a measured height fits the recent ones (a sphere partly hidden is not)."""
        return abs(diameter_v_px - self._size[1]) <= _height_tolerance(self._size[1], self._v_spread)

    def add(self, point: _Point) -> None:
        if self.misses:
            self.n_gaps_bridged += 1
            self.longest_gap = max(self.longest_gap, self.misses)
        self.points.append(point)
        self._confirmed = self._confirmed or len(self.points) >= _CONFIRM_POINTS
        self.misses = 0
        self._add_stats(point.m)

    # -- motion
    def velocity(self) -> tuple[float, float]:
        """Velocity in the scene frame from the recent points, px/s."""
        return self._velocity

    def _fit_velocity(self) -> tuple[float, float]:
        # least-squares slope of the last few points (plain Python: numpy costs more on 8 values)
        pts = self.points[-_PREDICT_POINTS:]
        n = len(pts)
        if n < 2:
            return 0.0, 0.0
        t0 = pts[0].t_frame
        if pts[-1].t_frame - t0 <= 0:
            return 0.0, 0.0
        tc = [p.t_frame - t0 for p in pts]
        t_mean = sum(tc) / n
        tc = [v - t_mean for v in tc]
        den = sum(v * v for v in tc)
        x_mean = sum(p.x for p in pts) / n
        y_mean = sum(p.y for p in pts) / n
        return (sum(v * (p.x - x_mean) for v, p in zip(tc, pts)) / den,
                sum(v * (p.y - y_mean) for v, p in zip(tc, pts)) / den)

    def predict(self, t: float) -> tuple[float, float]:
        """Predicted scene position at physical time ``t`` (constant velocity), px."""
        last = self.points[-1]
        vx, vy = self.velocity()
        return last.x + vx * (t - last.t_frame), last.y + vy * (t - last.t_frame)

    def half_extent(self, t: float) -> tuple[float, float]:
        """Half size of the search window at time ``t``, px (grows with missed frames)."""
        dh, dv, blur = self.size()
        vx, vy = self.velocity()
        dt = t - self.points[-1].t_frame
        slack = 0.25 * math.hypot(vx, vy) * dt
        if len(self.points) < 3:
            slack += max(6.0, 0.75 * max(dh, dv))
        return dh / 2.0 + slack, (dv + blur) / 2.0 + slack

    def box(self, t: float, shift: tuple[float, float], pad: float = 0.0) -> tuple[float, float, float, float]:
        """Frame-coordinate box around the prediction (for exclusion), px."""
        x, y = self.predict(t)
        hx, hy = self.half_extent(t)
        hx += 4.0 + pad
        hy += 4.0 + pad
        return (x + shift[0] - hx, y + shift[1] - hy, x + shift[0] + hx, y + shift[1] + hy)

    def still(self) -> bool:
        """True when the object has not moved (speed below _STILL_SPEED_PX_S) for _STILL_S."""
        last = self.points[-1]
        start = bisect.bisect_left(self.points, last.t_frame - _STILL_S, key=lambda p: p.t_frame)
        recent = self.points[start:]            # the last _STILL_S seconds, oldest first
        if recent[0].t_frame > last.t_frame - 0.9 * _STILL_S or len(recent) < 5:
            return False
        limit = _STILL_SPEED_PX_S * _STILL_S
        # a moving object is told at once by its oldest recent point
        if math.hypot(recent[0].x - last.x, recent[0].y - last.y) >= limit:
            return False
        return max(math.hypot(p.x - last.x, p.y - last.y) for p in recent) < limit


def _stitch(tracks: list[_Track]) -> list[_Track]:
    """Join fragments of one passage split by a gap longer than the coasting allowed."""
    tracks = sorted(tracks, key=lambda tr: tr.points[0].t_frame)
    out: list[_Track] = []
    for tr in tracks:
        joined = False
        for prev in reversed(out):
            if prev.polarity != tr.polarity or prev.points[-1].t_frame >= tr.points[0].t_frame:
                continue
            gap_s = tr.points[0].t_frame - prev.points[-1].t_frame
            if gap_s > _COAST_S * 2:
                continue
            px, py = prev.predict(tr.points[0].t_frame)
            d = max(prev.diameter(), tr.diameter())
            vx, vy = prev.velocity()
            tol = 0.75 * d + 2.0 + 0.1 * math.hypot(vx, vy) * gap_s
            if math.hypot(px - tr.points[0].x, py - tr.points[0].y) <= tol and \
                    abs(prev.diameter() - tr.diameter()) <= 0.35 * d:
                prev.longest_gap = max(prev.longest_gap, tr.longest_gap,
                                       tr.points[0].frame - prev.points[-1].frame - 1)
                prev.points.extend(tr.points)
                prev.n_gaps_bridged += tr.n_gaps_bridged + 1
                prev.end_reason = tr.end_reason
                for p in tr.points:
                    prev._add_stats(p.m)
                prev.crops.extend(tr.crops)
                joined = True
                break
        if not joined:
            out.append(tr)
    return out


def _trim_rest(tr: _Track) -> None:
    """Cut the points after the object came to rest (a ball lying on the bottom)."""
    pts = tr.points
    if len(pts) < _MIN_POINTS:
        return
    last = pts[-1]
    radius = max(1.0, 0.1 * tr.diameter())
    k = len(pts) - 1
    while k > 0 and math.hypot(pts[k - 1].x - last.x, pts[k - 1].y - last.y) <= radius:
        k -= 1
    # A slow sphere also stays within `radius` for a while: a stop must last 0.3 s and three
    # times what the passage's own typical speed (before its last fifth) needs to cross `radius`.
    body = pts[: max(2, (4 * len(pts)) // 5)]
    speeds = [math.hypot(b.x - a.x, b.y - a.y) / (b.t_frame - a.t_frame)
              for a, b in zip(body[:-5:5], body[5::5]) if b.t_frame > a.t_frame]
    typical_px_s = statistics.median(speeds) if speeds else 0.0
    need_s = max(0.3, 3.0 * radius / typical_px_s) if typical_px_s > 0 else 0.3
    if last.t_frame - pts[k].t_frame >= need_s:
        tr.points = pts[: k + 1]


def _height_tolerance(height_px: float, spread_px: float) -> float:
    """Largest departure of a whole sphere's measured height from its passage's, px: 6 % or four
    robust σ of the passage's own scatter, whichever is larger, plus 0.3 px."""
    return max(_PARTIAL_HEIGHT_FRACTION * height_px, 4.0 * spread_px) + 0.3


def _drop_partly_hidden(tr: _Track) -> None:
    """Drop the points where the sphere was partly hidden (its height short of the passage's).

    While a passage is followed, such points are refused (``_Track.whole``); this catches those
    of a fragment that began half hidden (a sphere emerging from behind a label, picked up anew
    and joined by ``_stitch``) and the first ones before the passage's size was known.
    """
    heights = np.array([p.m.diameter_v_px for p in tr.points])
    if heights.size < _MIN_POINTS:
        return
    med = float(np.median(heights))
    spread = 1.4826 * float(np.median(np.abs(heights - med)))
    keep = np.abs(heights - med) <= _height_tolerance(med, spread)
    if not keep.all():
        tr.points = [p for p, k in zip(tr.points, keep) if k]


def _coherent(tr: _Track) -> bool:
    """A passage of one solid object: it moved at least a diameter, was found in most of the
    frames it spans, and kept its apparent size (codec flicker and noise do none of these)."""
    a, b = tr.points[0], tr.points[-1]
    if math.hypot(b.x - a.x, b.y - a.y) < max(3.0, tr.diameter()):
        return False
    span = b.frame - a.frame + 1
    if len(tr.points) < _MIN_DETECTED_FRACTION * span:
        return False
    dh = np.array([p.m.diameter_h_px for p in tr.points])
    med = float(np.median(dh))
    spread = 1.4826 * float(np.median(np.abs(dh - med)))
    return spread <= _MAX_SIZE_SPREAD * med


def _direction(tr: _Track, scale: ScaleLike) -> tuple[str, float]:
    """("down"/"up", net travel in mm along the scale axis)."""
    z, _ = scale.to_mm(np.array([tr.points[0].x, tr.points[-1].x]),
                       np.array([tr.points[0].y, tr.points[-1].y]))
    dz = float(z[1] - z[0])
    return ("down" if dz >= 0 else "up"), dz


def _speed(tr: _Track) -> float:
    """Mean speed over the passage, px/s."""
    a, b = tr.points[0], tr.points[-1]
    dt = b.t_frame - a.t_frame
    return math.hypot(b.x - a.x, b.y - a.y) / dt if dt > 0 else 0.0


def _in_step(weak: _Track, strong: _Track) -> bool:
    """True when ``weak`` moves in step with ``strong``: seen in the same frames, at a constant
    offset of less than _REFLECTION_DIAMETERS diameters along the motion (a reflection in the
    tube wall sits beside the sphere; a second drop is far above or below it)."""
    by_frame = {p.frame: p for p in strong.points}
    common = [(by_frame[p.frame], p) for p in weak.points if p.frame in by_frame]
    if len(common) < max(_MIN_POINTS, _REFLECTION_OVERLAP * len(weak.points)):
        return False
    vx, vy = strong.velocity()
    norm = math.hypot(vx, vy)
    if norm <= 0:
        return False
    along = np.array([((q.x - p.x) * vx + (q.y - p.y) * vy) / norm for p, q in common])
    d = strong.diameter()
    return bool(np.abs(along).max() < _REFLECTION_DIAMETERS * d and
                abs(_speed(weak) - _speed(strong)) <= _REFLECTION_SPEED * max(_speed(strong), 1e-9))


def _strength(tr: _Track) -> float:
    return float(np.median([p.m.contrast_dn * p.m.area_px for p in tr.points]))


def _empirical_noise(t: NDArray[np.float64], x: NDArray[np.float64], y: NDArray[np.float64],
                     half: int = 7) -> float:
    """Per-axis scatter of positions about a local quadratic in time (leave-one-out), px.

    Parameters
    ----------
    t : ndarray of shape (n,)
        Times, s.
    x, y : ndarray of shape (n,)
        Positions, px.
    half : int
        Neighbours on each side used for the local fit.

    Returns
    -------
    float
        RMS of the leave-one-out residuals (each scaled by its prediction variance), leaving out
        gross outliers beyond 5 robust σ; NaN with fewer than 7 points.
    """
    n = len(t)
    if n < 2 * half + 1:
        half = (n - 1) // 2
    if half < 3:
        return float("nan")
    # every point's neighbours (the window slides along but stays inside the data), one batch
    lo = np.clip(np.arange(n) - half, 0, n - 2 * half - 1)
    window = lo[:, None] + np.arange(2 * half + 1)[None, :]
    idx = window[window != np.arange(n)[:, None]].reshape(n, 2 * half)       # leave point i out
    tt = t[idx] - t[:, None]
    tt = tt / np.maximum(np.abs(tt).max(axis=1, keepdims=True), 1e-9)
    a = np.stack([np.ones_like(tt), tt, tt * tt], axis=-1)                    # (n, 2h, 3)
    ata_inv = np.linalg.pinv(np.swapaxes(a, 1, 2) @ a)
    fac = 1.0 + ata_inv[:, 0, 0]                    # variance factor of the fit at t_i
    res = []
    for v in (x, y):
        coef = ata_inv @ (np.swapaxes(a, 1, 2) @ v[idx][:, :, None])
        res.append((v - coef[:, 0, 0]) / np.sqrt(fac))
    r = np.concatenate(res)
    mad = float(np.median(np.abs(r))) * 1.4826
    # codec errors have heavy tails: the RMS of all but gross outliers, not the MAD
    core = r[np.abs(r) <= 5.0 * mad] if mad > 0 else r
    return float(np.sqrt(np.mean(core ** 2)))


# Mean |frame − background| (DN) over a first-frame blob's box above which it has moved off.
_IMPRINT_CHANGE_DN = 3.0
# How far behind its first point (in diameters) a passage may have left a first-frame blob: the
# pieces measured while it moved off can be lost (refused as hidden by its own imprint), so the
# passage kept may start a few diameters on (a rising bead: 1.8 diameters measured).
_IMPRINT_REACH_DIAMETERS = 4.0


def _overlap(a: tuple[float, float, float, float], b: tuple[float, float, float, float]) -> bool:
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


def _came_from(tr: _Track, blob: tuple[float, float, float, float]) -> bool:
    """True when the passage started on a first-frame blob (scene box): its first window covers
    the blob, or the blob lies on its path, traced back from its first points, within
    ``_IMPRINT_REACH_DIAMETERS`` diameters."""
    first = tr.points[0]
    if _overlap(_window(first), blob):
        return True
    lead = tr.points[min(len(tr.points), _PREDICT_POINTS) - 1]
    ux, uy = lead.x - first.x, lead.y - first.y
    norm = math.hypot(ux, uy)
    if norm <= 0.0:
        return False
    cx, cy = (blob[0] + blob[2]) / 2.0, (blob[1] + blob[3]) / 2.0
    back = -((cx - first.x) * ux + (cy - first.y) * uy) / norm      # distance behind the start
    across = abs((cx - first.x) * uy - (cy - first.y) * ux) / norm
    d = tr.diameter()
    half = max(blob[2] - blob[0], blob[3] - blob[1]) / 2.0
    return 0.0 < back <= _IMPRINT_REACH_DIAMETERS * d + half and across <= half + d / 2.0


def _window(p: _Point) -> tuple[float, float, float, float]:
    """Scene-frame box of the window a point was measured in (detect.measure's margin)."""
    hx, hy = p.m.diameter_h_px / 2.0, (p.m.diameter_v_px + p.m.blur_px) / 2.0
    margin = 3.0 + 0.35 * max(hx, hy) + 1.0
    return (p.x - hx - margin, p.y - hy - margin, p.x + hx + margin, p.y + hy + margin)


# ------------------------------------------------------------------------------------ the loop
class _Loop:
    def __init__(self, info: ClipInfo, ball_px: float | None = None) -> None:
        self.info = info
        self.ball_px = ball_px
        self.bg: Background | None = None
        self.stab: Stabilizer | None = None
        self.active: list[_Track] = []
        self.done: list[_Track] = []
        self.parked: list[tuple[float, float, float, str]] = []   # scene x, y, radius, polarity
        self.shift = (0.0, 0.0)
        self.n_unregistered = 0
        self.max_shift = 0.0
        self.n_used = 0
        self.imprints: list[tuple[int, int, int, int]] = []   # scene boxes, not yet healed
        self.cleared_s: list[float] = []    # when a sphere moved clear of such a box (healed), s

    def step(self, index: int, t: float, luma: NDArray[np.uint8]) -> None:
        if self.bg is None:
            self.bg = Background(luma)
            self.stab = Stabilizer(luma, avoid_diameter_px=self.ball_px)
            # a sphere-like blob in the first frame is in the background model too: when it moves
            # off, it leaves its imprint there, which biases the centre until healed
            self.imprints = [(int(b[0]), int(b[1]), int(math.ceil(b[2])), int(math.ceil(b[3])))
                             for b in self.stab.avoided]
            return
        self.n_used += 1
        excl = [tr.box(t, self.shift) for tr in self.active]
        reg = self.stab.register(luma, exclude_boxes=excl)
        if not reg.ok:
            self.n_unregistered += 1
        self.shift = (reg.dx_px, reg.dy_px)
        self.max_shift = max(self.max_shift, abs(reg.dx_px), abs(reg.dy_px))
        for tr in list(self.active):
            self._follow(tr, index, t, luma)
        if self.imprints:
            self._heal(t, luma)
        busy = any(tr.confirmed for tr in self.active)
        if self.n_used % (_ACQUIRE_EVERY if busy else _ACQUIRE_IDLE_EVERY) == 1:
            self._acquire(index, t, luma)
        if self.n_used % _BG_EVERY == 0:
            boxes = []
            for tr in self.active:
                x0, y0, x1, y1 = tr.box(t, (0.0, 0.0), pad=4.0)
                boxes.append((int(x0), int(y0), int(math.ceil(x1)), int(math.ceil(y1))))
            self.bg.update(luma, self.shift, boxes, _BG_ALPHA)

    def _heal(self, t: float, luma: NDArray[np.uint8]) -> None:
        """Replace the background under a first-frame blob once it has moved off, and drop the
        points measured with their window over its imprint.

        The blob has moved off when a confirmed passage came from it (:func:`_came_from`), no
        followed object's window covers the blob or that passage's start any more, and the frame
        there differs from the model.
        """
        windows = [tr.box(t, (0.0, 0.0), pad=4.0) for tr in self.active]
        for blob in list(self.imprints):
            if blob not in self.imprints:    # healed with another one this frame
                continue
            origin = [_window(tr.points[0]) for tr in self.active + self.done
                      if tr.confirmed and _came_from(tr, blob)]
            if not origin:
                continue
            # until it was found, the moving blob was learnt into the model along its way too
            box = (min(blob[0], *(int(w[0]) for w in origin)), min(blob[1], *(int(w[1]) for w in origin)),
                   max(blob[2], *(int(math.ceil(w[2])) for w in origin)),
                   max(blob[3], *(int(math.ceil(w[3])) for w in origin)))
            if any(_overlap(w, box) for w in windows):
                continue
            x0, y0, x1, y1 = box
            ix, iy = int(round(self.shift[0])), int(round(self.shift[1]))
            h, w = luma.shape
            if x0 + ix < 0 or y0 + iy < 0 or x1 + ix > w or y1 + iy > h:
                continue
            now = luma[y0 + iy:y1 + iy, x0 + ix:x1 + ix].astype(np.float32)
            if float(np.mean(np.abs(now - self.bg.image[y0:y1, x0:x1]))) < _IMPRINT_CHANGE_DN:
                continue
            keep_out = [(int(a), int(b), int(math.ceil(c)), int(math.ceil(d)))  # scene frame
                        for a, b, c, d in windows]
            self.bg.update(luma, self.shift, keep_out, 1.0, region=box)
            # the box holds the blob, and with it any other found there (dark and bright parts)
            self.imprints = [b for b in self.imprints if not (
                box[0] <= b[0] and box[1] <= b[1] and b[2] <= box[2] and b[3] <= box[3])]
            self.cleared_s.append(t)
            for tr in self.active + self.done:
                keep = [p for p in tr.points[:-1] if not _overlap(_window(p), box)]
                tr.points = keep + tr.points[-1:]

    def _end(self, tr: _Track, reason: str) -> None:
        tr.end_reason = reason
        self.active.remove(tr)
        moved = math.hypot(tr.points[-1].x - tr.points[0].x, tr.points[-1].y - tr.points[0].y)
        if reason == "still" or (tr.confirmed and moved < tr.diameter()):
            # at rest, or an imprint that never moved: do not acquire it again where it lies
            last = tr.points[-1]
            self.parked.append((last.x, last.y, tr.diameter() + 4.0, tr.polarity))
        if tr.confirmed and moved > max(2.0, 0.5 * tr.diameter()):
            self.done.append(tr)

    def _point(self, index: int, t: float, m: Measurement) -> _Point:
        return _Point(index, t, m.x_px, m.y_px, m.x_px - self.shift[0], m.y_px - self.shift[1], m,
                      self.shift[0], self.shift[1])

    def _follow(self, tr: _Track, index: int, t: float, luma: NDArray[np.uint8]) -> None:
        px, py = tr.predict(t)
        hx, hy = tr.half_extent(t)
        dh, dv, blur = tr.size()
        m, why = measure(luma, self.bg, self.shift, px + self.shift[0], py + self.shift[1],
                         tr.polarity, half_width_px=hx, half_height_px=hy, level_dn=tr.level_dn,
                         footprint_px=(dh, dv + blur) if tr.confirmed else None)
        if why == "edge":
            self._end(tr, "left the frame")
            return
        ok = m is not None and not m.touches_edge
        if ok and m is not None:
            gate = 2.0 + 0.5 * max(dh, dv) + (hx - dh / 2.0)
            ok = math.hypot(m.x_px - self.shift[0] - px, m.y_px - self.shift[1] - py) <= gate
            if ok and tr.confirmed:
                # a sphere partly hidden by something in front of it (a label, a clamp, glare)
                # loses height on one side and its centroid moves: a gap, not a point
                ok = 0.6 * dh <= m.diameter_h_px <= 1.6 * dh + 1.0 and tr.whole(m.diameter_v_px)
        if ok and m is not None:
            tr.add(self._point(index, t, m))
            self._keep_crop(tr, luma, m)
            if tr.confirmed and tr.still():
                self._end(tr, "still")
            return
        tr.misses += 1
        if not tr.confirmed:
            if tr.misses >= _TENTATIVE_MISSES:
                self._end(tr, "lost")
            return
        last = tr.points[-1]
        vx, vy = tr.velocity()
        travel = math.hypot(vx, vy) * (t - last.t_frame)
        first = tr.points[0]
        moved = math.hypot(last.x - first.x, last.y - first.y)
        if tr.misses >= _COAST_MIN_MISSES and (
                travel > _COAST_DIAMETERS * tr.diameter() + _COAST_PX or t - last.t_frame > _COAST_S
                or (moved < tr.diameter() and tr.misses >= _COAST_STILL_MISSES)):
            self._end(tr, "lost")

    def _keep_crop(self, tr: _Track, luma: NDArray[np.uint8], m: Measurement) -> None:
        d = max(m.diameter_h_px, m.diameter_v_px + m.blur_px)
        if tr.crops:
            x0, y0, c = tr.crops[-1]
            cx, cy = x0 + c.shape[1] / 2.0, y0 + c.shape[0] / 2.0
            if math.hypot(m.x_px - self.shift[0] - cx, m.y_px - self.shift[1] - cy) < _CROP_STEP_DIAMETERS * d:
                return
        r = int(math.ceil(d / 2.0 + 2))
        ix, iy = int(round(m.x_px)), int(round(m.y_px))
        h, w = luma.shape
        x0, y0, x1, y1 = max(0, ix - r), max(0, iy - r), min(w, ix + r + 1), min(h, iy + r + 1)
        sx, sy = int(round(self.shift[0])), int(round(self.shift[1]))
        tr.crops.append((x0 - sx, y0 - sy, luma[y0:y1, x0:x1].copy()))

    def _acquire(self, index: int, t: float, luma: NDArray[np.uint8]) -> None:
        excl = [tr.box(t, self.shift, pad=2.0) for tr in self.active]
        excl_int = [(int(a), int(b), int(math.ceil(c)), int(math.ceil(d))) for a, b, c, d in excl]
        for cand in self.bg.find_candidates(luma, self.shift, exclude_boxes=excl_int):
            sxp, syp = cand.x_px - self.shift[0], cand.y_px - self.shift[1]
            if any(math.hypot(sxp - x, syp - y) < r and pol == cand.polarity
                   for x, y, r, pol in self.parked):
                continue
            if any(b[0] <= cand.x_px <= b[2] and b[1] <= cand.y_px <= b[3] for b in excl):
                continue
            m, _ = measure(luma, self.bg, self.shift, cand.x_px, cand.y_px, cand.polarity,
                           half_width_px=cand.width_px / 2.0 + 1.0,
                           half_height_px=cand.height_px / 2.0 + 1.0)
            if m is None or m.touches_edge or m.area_px < 2.0 or m.diameter_h_px < 1.5:
                continue
            # a coarse candidate beside a followed object (its trail in the background, a blob
            # touching it) can measure as that object itself: never follow one object twice
            if any(b[0] <= m.x_px <= b[2] and b[1] <= m.y_px <= b[3] for b in excl):
                continue
            extent_v = m.diameter_v_px + m.blur_px
            if not 0.2 <= extent_v / m.diameter_h_px <= 8.0:
                continue
            tr = _Track(cand.polarity, self._point(index, t, m))
            self.active.append(tr)
            excl.append(tr.box(t, self.shift, pad=2.0))

    def finish(self) -> list[_Track]:
        for tr in list(self.active):
            self._end(tr, "clip ended")
        return self.done


# ------------------------------------------------------------------------------------ public API
def track_clip(path: str | pathlib.Path, scale: ScaleLike, *, capture_fps: float | None = None,
               readout_ms: float = 0.0, expect_direction: str | None = None,
               ball_diameter_mm: float | None = None,
               progress: Callable[[int, int | None], None] | None = None) -> TrackResult:
    """Track the sphere(s) through a clip and return the trajectory in mm and s.

    Parameters
    ----------
    path : str or path-like
        The clip (MP4/MOV/MKV/AVI; H.264, HEVC or MJPEG).
    scale : tracker.scale.Scale (or any object with ``to_mm`` and ``px_per_mm``)
        Pixel → millimetre conversion at the ball's plane.
    capture_fps : float, optional
        Physical capture rate for slow-motion files (frames per physical second).
    readout_ms : float
        Rolling-shutter readout time (first to last sensor row), ms; 0 for a global shutter.
    expect_direction : {"down", "up"} or None
        Direction of motion expected from the densities ("down" for a ball denser than the
        liquid). Passages in the other direction (bubbles) are dropped when one in the expected
        direction exists; if none does, the other way is kept with a warning.
    ball_diameter_mm : float, optional
        Diameter of the sphere, mm. With it, the camera-shake registration places no patch on a
        sphere-sized blob of the first frame (a ball at rest in view when the clip starts).
    progress : callable, optional
        Called as ``progress(n_frames_done, n_frames_total)`` after each frame (total may be
        None when unknown).

    Returns
    -------
    TrackResult

    Raises
    ------
    tracker.errors.ClipError
        The clip cannot be read (from ``tracker.video``).
    tracker.errors.TrackingError
        No usable sphere passage in the clip.
    tracker.lens.LensMismatchError
        The scale's lens model was calibrated at another frame size than the clip's (a
        ``ValueError``).
    ValueError
        ``readout_ms`` negative or not finite, ``expect_direction`` not "down"/"up"/None.
    """
    if not (isinstance(readout_ms, (int, float)) and math.isfinite(readout_ms) and readout_ms >= 0):
        raise ValueError(f"readout_ms = {readout_ms!r}: expected a finite time ≥ 0 in ms")
    if expect_direction not in (None, "down", "up"):
        raise ValueError(f"expect_direction = {expect_direction!r}: expected 'down', 'up' or None")
    if not (hasattr(scale, "to_mm") and hasattr(scale, "px_per_mm")):
        raise ValueError(f"scale = {scale!r}: expected a tracker.scale.Scale (to_mm and px_per_mm)")
    if ball_diameter_mm is not None and not (isinstance(ball_diameter_mm, (int, float))
                                             and math.isfinite(ball_diameter_mm) and ball_diameter_mm > 0):
        raise ValueError(f"ball_diameter_mm = {ball_diameter_mm!r}: expected a diameter > 0 in mm")
    info, frames = read_clip(path, capture_fps=capture_fps)
    with contextlib.closing(frames):
        lens = getattr(scale, "lens", None)
        if lens is not None:  # a calibration holds only for the frame size it was made at
            lens.check_frame(info.width_px, info.height_px, pathlib.Path(path).name)
        ball_px = None if ball_diameter_mm is None else ball_diameter_mm * float(scale.px_per_mm)
        loop = _Loop(info, ball_px)
        n_frames = 0
        n_dup = 0
        total = info.n_frames if info.n_frames > 0 else None
        for frame in frames:
            n_frames += 1
            if frame.duplicate:
                n_dup += 1
            else:
                loop.step(frame.index, frame.t_s, frame.luma)
            if progress is not None:
                progress(n_frames, total)
    tracks = loop.finish()
    warnings: list[str] = []
    name = pathlib.Path(path).name
    never_cleared = any(_came_from(tr, blob) for tr in tracks for blob in loop.imprints)

    tracks = _stitch(tracks)
    for tr in tracks:
        _trim_rest(tr)
    tracks = [tr for tr in tracks if len(tr.points) >= _MIN_POINTS]
    for tr in tracks:
        _drop_partly_hidden(tr)
    tracks = [tr for tr in tracks if _coherent(tr)]
    if not tracks:
        if loop.cleared_s or never_cleared:
            moved = (f"moved clear of where it lay at t = {max(loop.cleared_s):.1f} s of "
                     f"{info.duration_s:.1f} s" if loop.cleared_s else "never moved clear of where it lay")
            raise TrackingError(
                f"{name}: no sphere was measured long enough: one lay in view in the first frame and "
                f"{moved}, and points over its own image in the background are not used; expected a "
                "clip that starts before the sphere comes into view, or one long enough for it to "
                "move a few diameters on")
        raise TrackingError(f"{name}: no moving sphere found in {n_frames} frames; {_NO_SPHERE}")

    # bubbles: bright core in a dark rim
    bubble_like = [tr for tr in tracks if tr.polarity == "dark" and
                   float(np.median([p.m.hole_fraction for p in tr.points])) > _BUBBLE_HOLE_FRACTION]
    if len(bubble_like) < len(tracks) and bubble_like:
        tracks = [tr for tr in tracks if tr not in bubble_like]
        warnings.append(f"ignored {len(bubble_like)} bubble-like object(s) (bright core in a dark rim)")

    # direction expected from the densities
    if expect_direction is not None:
        right = [tr for tr in tracks if _direction(tr, scale)[0] == expect_direction]
        if right:
            if len(right) < len(tracks):
                warnings.append(f"ignored {len(tracks) - len(right)} object(s) moving "
                                f"{'up' if expect_direction == 'down' else 'down'} (bubbles or debris)")
            tracks = right
        else:
            moved = "up" if expect_direction == "down" else "down"
            denser = "denser" if expect_direction == "down" else "less dense"
            warnings.append(_DIRECTION_WARNING.format(moved=moved, denser=denser))

    # reflections: a fainter object moving in step with a stronger one
    tracks.sort(key=_strength, reverse=True)
    kept: list[_Track] = []
    for tr in tracks:
        if not any(_in_step(tr, k) for k in kept):
            kept.append(tr)
    if len(kept) < len(tracks):
        warnings.append(f"ignored {len(tracks) - len(kept)} fainter object(s) moving in step with the "
                        "sphere (reflections)")
    tracks = sorted(kept, key=lambda tr: tr.points[0].t_frame)

    # A camera that never moved more than the registration's own codec noise is a static one:
    # positions are then taken in the frame itself, free of that noise.
    shifts = np.array([[p.dx, p.dy] for tr in tracks for p in tr.points])
    static = bool(np.percentile(np.abs(shifts), 95) < _STATIC_CAMERA_PX)
    trajectory = _table(tracks, info, scale, readout_ms, static_camera=static)
    composite = _composite(loop, tracks)

    if loop.max_shift > 1.0:
        warnings.append(f"the camera moved by up to {loop.max_shift:.1f} px; positions are measured "
                        "relative to the static scene")
    if loop.stab is not None and loop.stab.weak_axes:
        axes = " and ".join(loop.stab.weak_axes)
        warnings.append(f"the scene has too little structure to register camera motion along {axes} "
                        "(assumed still); film a ruler or marks beside the tube")
    if loop.n_unregistered:
        warnings.append(f"{loop.n_unregistered} frame(s) could not be registered to the static scene; "
                        "their camera shift was taken from the frame before")
    gaps = sum(tr.n_gaps_bridged for tr in tracks)
    if gaps:
        longest = max(tr.longest_gap for tr in tracks)
        warnings.append(f"bridged {gaps} gap(s) in the track (sphere hidden or not measurable), the "
                        f"longest {longest} frame(s)")
    for tr in tracks:
        last = tr.points[-1]
        if tr.end_reason == "still":
            z, _ = scale.to_mm(last.x, last.y)
            warnings.append(f"track {tracks.index(tr)}: the sphere came to rest at z = {float(z):.1f} mm; "
                            "points after the stop are not part of the track")
        if any(_came_from(tr, blob) for blob in loop.imprints):
            # lying in view in the first frame, it is in the background model too; that imprint is
            # replaced only once the sphere has moved clear of it, which this one never did
            warnings.append(f"track {tracks.index(tr)}: the sphere lay in view in the first frame and "
                            "never moved clear of where it lay; its own image in the background biases "
                            "its positions (v_t reads low); start the clip before the release, or film "
                            "until the sphere has travelled a few diameters")
    if n_dup:
        # a repeated picture carries no new time-position pair; a still scene before the ball
        # enters, flattened by the codec, repeats too (then it is harmless)
        warnings.append(f"{n_dup} repeated frame(s) skipped (identical to the frame before: a "
                        "duplicated frame, or a still scene with nothing moving)")
    return TrackResult(trajectory=trajectory, clip=info, warnings=warnings, n_frames=n_frames,
                       composite=composite, polarity=tracks[0].polarity, readout_ms=float(readout_ms))


def _table(tracks: list[_Track], info: ClipInfo, scale: ScaleLike, readout_ms: float, *,
           static_camera: bool) -> pd.DataFrame:
    """The trajectory DataFrame of the kept passages (contract columns + extras).

    With ``static_camera`` the positions are the frame positions (no registration shift)."""
    frames = []
    for tid, tr in enumerate(tracks):
        pts = tr.points
        xf = np.array([p.x_frame for p in pts])
        yf = np.array([p.y_frame for p in pts])
        t = np.array([p.t_frame for p in pts])
        if readout_ms > 0:
            row = np.asarray(info.stored_row(xf, yf), dtype=float)
            t = t + row / info.stored_height_px * readout_ms / 1000.0
        x = xf.copy() if static_camera else np.array([p.x for p in pts])
        y = yf.copy() if static_camera else np.array([p.y for p in pts])
        u = np.array([p.m.pos_u_px for p in pts])
        emp = _empirical_noise(t, x, y)
        if np.isfinite(emp) and emp > 0:
            u = u * float(np.clip(emp / np.median(u), 0.3, 100.0))
        u = np.sqrt(u ** 2 + _POS_U_FLOOR_PX ** 2)
        z, lat = scale.to_mm(x, y)
        frames.append(pd.DataFrame({
            "frame": np.array([p.frame for p in pts], dtype=np.int64),
            "t_s": t,
            "x_px": x,
            "y_px": y,
            "pos_u_px": u,
            "diameter_h_px": [p.m.diameter_h_px for p in pts],
            "diameter_v_px": [p.m.diameter_v_px for p in pts],
            "z_mm": np.asarray(z, dtype=float),
            "z_u_mm": u / float(scale.px_per_mm),
            "lateral_mm": np.asarray(lat, dtype=float),
            "track": np.full(len(pts), tid, dtype=np.int64),
            "contrast_dn": [p.m.contrast_dn for p in pts],
            "blur_px": [p.m.blur_px for p in pts],
            "shake_dx_px": [p.dx for p in pts],
            "shake_dy_px": [p.dy for p in pts],
        }))
    out = pd.concat(frames, ignore_index=True)
    return out.sort_values(["track", "t_s"], kind="stable").reset_index(drop=True)


def _composite(loop: _Loop, tracks: list[_Track]) -> NDArray[np.uint8] | None:
    """Scene with the sphere pasted at its kept positions (min for dark, max for bright)."""
    if loop.bg is None:
        return None
    comp = np.clip(np.round(loop.bg.image), 0, 255).astype(np.uint8)
    h, w = comp.shape
    for tr in tracks:
        op = np.minimum if tr.polarity == "dark" else np.maximum
        for x0, y0, crop in tr.crops:
            ch, cw = crop.shape
            ax0, ay0 = max(0, x0), max(0, y0)
            ax1, ay1 = min(w, x0 + cw), min(h, y0 + ch)
            if ax1 <= ax0 or ay1 <= ay0:
                continue
            sub = crop[ay0 - y0: ay1 - y0, ax0 - x0: ax1 - x0]
            comp[ay0:ay1, ax0:ax1] = op(comp[ay0:ay1, ax0:ax1], sub)
    return comp


def save_check_picture(result: TrackResult, path_png: str | pathlib.Path, *,
                       background: NDArray[np.uint8] | None = None) -> None:
    """Save one picture to check the tracking at a glance.

    The composite (the scene with the sphere at its positions along each passage) is shown in
    grey, cropped to the passages; detected centres are marked and each passage is drawn with
    its own marker and line style (readable in greyscale), and the vertical axis carries ticks in
    millimetres along the scale (z, positive down) beside the pixel rows.

    Parameters
    ----------
    result : TrackResult
        The tracking result.
    path_png : str or path-like
        Output PNG file.
    background : ndarray of shape (H, W), uint8, optional
        Picture to draw on instead of ``result.composite``.
    """
    from matplotlib.figure import Figure

    img = background if background is not None else result.composite
    traj = result.trajectory
    if img is None:
        raise ValueError("result: has no composite picture; pass background= (an (H, W) uint8 image)")
    h, w = img.shape[:2]
    if len(traj):
        pad = 40.0 + 2.0 * float(traj["diameter_h_px"].max())
        x0 = max(0.0, float(traj["x_px"].min()) - pad)
        x1 = min(w - 1.0, float(traj["x_px"].max()) + pad)
        y0 = max(0.0, float(traj["y_px"].min()) - pad)
        y1 = min(h - 1.0, float(traj["y_px"].max()) + pad)
    else:
        x0, x1, y0, y1 = 0.0, w - 1.0, 0.0, h - 1.0
    # keep a readable aspect: at least 1/3 as wide as tall
    min_w = (y1 - y0) / 3.0
    if x1 - x0 < min_w:
        cx = (x0 + x1) / 2.0
        x0, x1 = max(0.0, cx - min_w / 2.0), min(w - 1.0, cx + min_w / 2.0)
    height_in = 9.0
    width_in = max(4.5, min(14.0, height_in * (x1 - x0) / max(y1 - y0, 1.0) + 2.5))
    fig = Figure(figsize=(width_in, height_in), dpi=110)
    ax = fig.add_subplot(1, 1, 1)
    ax.imshow(img, cmap="gray", vmin=0, vmax=255, interpolation="nearest",
              extent=(-0.5, w - 0.5, h - 0.5, -0.5))
    styles = [("o", "-"), ("s", "--"), ("^", ":"), ("D", "-."), ("v", (0, (5, 1, 1, 1)))]
    for tid, g in traj.groupby("track", sort=True):
        marker, line = styles[int(tid) % len(styles)]
        step = max(1, len(g) // 60)
        ax.plot(g["x_px"], g["y_px"], linestyle=line, color="white", lw=2.6, alpha=0.9)
        ax.plot(g["x_px"], g["y_px"], linestyle=line, color="black", lw=1.2,
                label=f"track {int(tid)}: {len(g)} points, "
                      f"z {g['z_mm'].iloc[0]:.1f} → {g['z_mm'].iloc[-1]:.1f} mm")
        ax.plot(g["x_px"].iloc[::step], g["y_px"].iloc[::step], linestyle="none", marker=marker,
                ms=5, mfc="white", mec="black", mew=1.0)
    ax.set_xlim(x0 - 0.5, x1 + 0.5)
    ax.set_ylim(y1 + 0.5, y0 - 0.5)
    ax.set_xlabel("x (px, displayed frame of the scene)")
    ax.set_ylabel("y (px)")
    # millimetre ticks along the scale axis, on the right
    if len(traj) >= 2:
        a = np.polyfit(traj["y_px"], traj["z_mm"], 1)
        if abs(a[0]) > 1e-12:
            sec = ax.secondary_yaxis("right", functions=(lambda yy: a[0] * yy + a[1],
                                                         lambda zz: (zz - a[1]) / a[0]))
            sec.set_ylabel("z (mm, along the scale, positive down)")
    n_tr = traj["track"].nunique() if len(traj) else 0
    ax.set_title(f"{pathlib.Path(result.clip.path).name}: {n_tr} passage(s), "
                 f"{len(traj)} detections, {result.polarity or '?'} sphere", fontsize=10)
    if len(traj):
        ax.legend(loc="lower left", fontsize=8, framealpha=0.85)
    fig.tight_layout()
    fig.savefig(str(path_png))
