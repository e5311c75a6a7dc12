"""Seeded synthetic footage of falling (or rising) spheres, with exact ground truth.

The renderer draws what a phone or webcam films when a ball falls through a liquid-filled tube:
a back-lit dark sphere (or a top-lit bright one on a dark background) with a soft, slightly
defocused edge and an optional specular highlight, seen through the tube (horizontal stretch by
the liquid cylinder), moving with an exact law of motion; motion blur over the exposure, a
rolling shutter, sensor noise, mains flicker, an auto-exposure dip, camera shake, and a static
scene (tube walls, liquid surface, mm ruler, timing marks), optionally with a rising bubble and a
hand with tweezers. Frames come out as a generator (memory flat in clip length); `write_clip`
encodes them with a real codec through :func:`tracker.encode.write_clip`.

Conventions (DEVELOPERS.md, INTERFACE.md)
-----------------------------------------
- Displayed frame: x right, y down, origin at the centre of the top-left pixel; a pixel covers
  ±0.5 px around its centre. ``width_px``/``height_px`` are the **displayed** size.
- Stored (sensor) frame: for ``rotation_deg`` = 90/270 the stored image is the displayed image
  turned back, ``stored = np.rot90(displayed, k=rotation_deg // 90)``; the display matrix
  written to the file asks players to turn it ``rotation_deg`` clockwise.
- Time: a frame's time ``t_s`` is the middle of the exposure of stored row 0. Stored row ``r``
  is exposed around ``t_s + r / H_stored * readout_s`` (physics-references.md §11).
  ``pts_s`` is the stored presentation time: ``t_s * capture_fps / stored_fps`` for slow motion.
- Axial position ``z_mm``: positive downward, 0 at the upper scale point (row ``z0_y_px``);
  ``y_px = z0_y_px + z_mm * px_per_mm``; ``x_px = axis_x_px + lateral * px_per_mm *
  horizontal_magnification`` (the liquid cylinder magnifies horizontally, §10).
- Shake moves the whole rendered view; truth positions are in the scene frame (without shake),
  the per-frame offsets are given beside them.

Laws of motion (physics-references.md §5)
-----------------------------------------
``"exponential"``: z = z0 ± v_t [(t − t0) − τ (1 − e^{−(t − t0)/τ})] (no history force).
``"basset"``: the Basset–Boussinesq–Oseen equation with added mass 1/2 and the history force,
made dimensionless with s = t/τ, u = v/v_t (τ = (ρ_s + ρ_f/2) d²/(18 μ)):

    du/ds = 1 − u − κ ∫₀ˢ u'(σ) / √(s − σ) dσ,     κ² = 9 r / (2π (1 + r/2)),  r = ρ_f/ρ_s,

integrated once into the weakly singular Volterra equation
``u(s) = s − ∫₀ˢ u dq − κ ∫₀ˢ u(q)/√(s − q) dq`` and solved by product integration
(piecewise-linear u, kernel integrated exactly) on a graded mesh. Its tail is
1 − u → κ/√s, i.e. 1 − v/v∞ → a √(ρ_f/(π μ t)) (§5).

Optics of the scale (§10, paraxial): the ball is imaged as if at L_eff = L + t/n_w + R_i/n_l;
a ruler on the tube's front surface (distance L) is drawn at px_per_mm × L_eff/L, a ruler in air
at L + offset at px_per_mm × L_eff/(L + offset).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Sequence
from dataclasses import asdict, dataclass, field
from functools import lru_cache
from pathlib import Path

import cv2
import numpy as np
import pandas as pd
from scipy.interpolate import CubicHermiteSpline, CubicSpline
from scipy.optimize import brentq

__all__ = [
    "Drop", "ClipSpec", "RenderedFrame", "Truth", "BassetSolution",
    "bbo_kappa", "basset_solution", "frame_times_s", "presentation_times_s", "scale_factor",
    "scene_image", "truth", "render", "write_clip", "rig_dict",
]

# --- rendering constants (appearance; none of them enters the truth) -------------------------
SUPERSAMPLE = 4                 # spatial supersampling per axis of moving sprites (≥ 4, brief)
MIN_SUBSTEPS = 8                # minimum time samples over one exposure (brief: ≥ 8–16)
MAX_SUBSTEPS = 128              # cap: a streak longer than 32 px is still sampled every ¼ px
SHAKE_QUANTUM_PX = 1.0 / 32.0   # shake offsets are multiples of this: cv2's bilinear warp works
                                # on a 1/32-px grid, so the applied shift equals the truth exactly
_BACKLIGHT_DN = 205.0           # back-light level at the frame centre (dark polarity)
_VIGNETTE = 0.10                # relative fall-off of the back-light to the frame corners
_GRADIENT = 0.04                # relative top-to-bottom illumination gradient
_DARK_ROOM_DN = 16.0            # background level of the dark (top-lit) scene
_BALL_CONTRAST = 0.85           # dark ball: its own level is (1 − this) × back-light
_HIGHLIGHT_UV = (-0.32, -0.38)  # specular spot, in units of the semi-axes (up-left of centre)
_HIGHLIGHT_SIGMA = 0.13         # its width, in units of the semi-axes
_HIGHLIGHT_DN = 110.0           # its peak above the ball's level
_LIGHT_DIR = np.array([-0.25, -0.55, 0.80]) / np.linalg.norm([-0.25, -0.55, 0.80])  # top light
_SHININESS = 60.0               # Blinn–Phong exponent of the bright (polished) ball
_DIP_DEPTH = 0.25               # auto-exposure: relative gain change while a hand is in view
_DIP_LAG_S = 0.12               # … lagging the hand by this much
_HAND_IN_S = (0.6, 0.3)         # hand starts entering this long before release, is in place at …
_HAND_OUT_S = (0.05, 0.45)      # … and starts leaving / is gone this long after release
_JOLT_HZ, _JOLT_DECAY_S = 7.0, 0.12   # tap jolt: damped oscillation of the phone on its stand
_NOISE_POOL = 2                 # noise fields kept; each frame crops one at a random offset
_NOISE_MARGIN_PX = 48
_NOISE_REF_DN = 128.0           # noise_dn is the standard deviation at this level …
_READ_NOISE = 0.3               # … of which this fraction is read noise; the rest is shot
                                # noise, variance ∝ signal (sensor physics, common practice)
_BASSET_ETA = 0.005             # BBO mesh: step = max(h_min, η s); η = 0.005 converges to ~1e-7
_BASSET_H_MIN = 1e-5            # (checked against physics-references.md §5 in the tests)

_POLARITIES = ("dark", "bright")
_MOTIONS = ("exponential", "basset")
_PLANES = ("ball-plane", "tube-front", "in-air")
_DIRECTIONS = ("down", "up")


def _check(cond: bool, message: str) -> None:
    if not cond:
        raise ValueError(message)


def _finite(name: str, value: float, *, low: float | None = None, strict: bool = True,
            unit: str = "") -> None:
    ok = isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
    if ok and low is not None:
        ok = value > low if strict else value >= low
    rel = "" if low is None else f" {'>' if strict else '≥'} {low:g}"
    _check(ok, f"{name} = {value!r}: expected a finite number{rel}{f' {unit}' if unit else ''}")


# ============================================================================================
# Specification
# ============================================================================================

@dataclass(frozen=True)
class Drop:
    """One passage of the ball.

    Attributes
    ----------
    release_t_s : float
        Physical time of release (v = 0 there), s from the clip's first frame.
    z0_mm : float
        Axial position at release, mm (+ down, 0 = upper scale point); may be outside the view.
    lateral_mm : float
        Offset from the tube axis, mm (+ to the right).
    direction : {"down", "up"}
        "up" for a rising (light) ball: z decreases.
    drift_mm_per_mm : float
        Lateral drift per mm travelled (a ball wandering towards the wall), mm/mm.
    terminal_velocity_mm_s : float or None
        Overrides ``ClipSpec.terminal_velocity_mm_s`` for this drop (a different ball), mm/s.
    """

    release_t_s: float
    z0_mm: float = -20.0
    lateral_mm: float = 0.0
    direction: str = "down"
    drift_mm_per_mm: float = 0.0
    terminal_velocity_mm_s: float | None = None

    def __post_init__(self) -> None:
        _finite("Drop.release_t_s", self.release_t_s, unit="s")
        _finite("Drop.z0_mm", self.z0_mm, unit="mm")
        _finite("Drop.lateral_mm", self.lateral_mm, unit="mm")
        _finite("Drop.drift_mm_per_mm", self.drift_mm_per_mm)
        _check(self.direction in _DIRECTIONS,
               f"Drop.direction = {self.direction!r}: expected one of {', '.join(_DIRECTIONS)}")
        if self.terminal_velocity_mm_s is not None:
            _finite("Drop.terminal_velocity_mm_s", self.terminal_velocity_mm_s, low=0.0, unit="mm/s")

    def to_dict(self) -> dict:
        """Return the fields as a JSON-friendly dict."""
        return asdict(self)


@dataclass(frozen=True)
class ClipSpec:
    """Everything that defines a synthetic clip; with ``seed`` it fixes every pixel.

    Attributes
    ----------
    width_px, height_px : int
        Displayed frame size, px.
    capture_fps : float
        Physical frame rate, frames per second of physical time.
    stored_fps : float or None
        Slow motion: the written presentation-time cadence (e.g. 30 while ``capture_fps`` = 240).
    frame_times_s : tuple of float or None
        Explicit physical frame times (variable frame rate), s; override ``capture_fps`` and
        ``duration_s`` for timing (``capture_fps`` still sets the default exposure).
    duration_s : float
        Clip length, s (frames at k / capture_fps while < duration_s).
    px_per_mm : float
        Vertical image scale at the ball's plane, px/mm.
    horizontal_magnification : float
        Apparent horizontal stretch by the liquid cylinder (≈ n_l, §10); 1 = none.
    axis_x_px : float or None
        Column of the tube axis in the displayed frame, px (default: the centre column).
    z0_y_px : float
        Row of z = 0 (the upper scale point) in the displayed frame, px.
    ball_diameter_mm : float
        True ball diameter, mm.
    polarity : {"dark", "bright"}
        Back-lit dark silhouette, or top-lit bright ball on a dark background.
    highlight : bool
        Specular highlight on the dark ball (always present on the bright one).
    terminal_velocity_mm_s, tau_s : float
        Terminal speed (mm/s, positive) and time constant τ of the approach (s).
    motion : {"exponential", "basset"}
        Law of motion (module docstring).
    density_ratio : float
        ρ_f/ρ_s, used by ``"basset"`` (history-force strength κ); default steel in glycerol.
    drops : tuple of Drop
        The passages, in any order.
    exposure_s : float or None
        Exposure time (motion blur), s; default 0.5 / capture_fps.
    readout_s : float
        Rolling-shutter readout (row 0 to row H_stored), s; at most the shortest frame interval.
    rotation_deg : {0, 90, 180, 270}
        Display-matrix rotation; 90/270 make a portrait phone clip.
    noise_dn : float
        Standard deviation of the sensor noise at mid-grey (128 DN), DN. Shot noise makes it
        level-dependent: σ(I) = noise_dn √(0.09 + 0.91 I/128) (read noise 0.3 × noise_dn).
    duplicate_frames : tuple of int
        Indices of frames that repeat the previous picture byte for byte under their own
        presentation time (a camera delivering the same frame twice).
    shake_px : float
        RMS (per axis) of a smooth random wander of the whole view, px (handheld phone).
    jolt_t_s : tuple of float
        Times of taps on the phone: a damped shake of amplitude ``jolt_px`` starts at each, s.
    jolt_px : float
        Amplitude of a tap jolt, px.
    flicker : float
        Relative amplitude of mains flicker (light at 2 × ``mains_hz``), 0 = none.
    mains_hz : float
        Mains frequency, Hz.
    exposure_dip : bool
        Auto-exposure changes the gain by 25 % while a hand is (or would be) in view.
    bubble : bool
        A rising bubble (bright core, dark rim, wobbling) beside the ball's path.
    bubble_diameter_mm, bubble_speed_mm_s : float
        Its diameter (mm) and rise speed (mm/s).
    hand : bool
        A hand with tweezers enters from the top around each release and leaves after it.
    marks_mm : tuple of float
        Timing marks (rubber bands) across the tube, drawn at these z (ball-plane mm).
    marks_occlude : bool
        Marks in front of the ball (it disappears behind them) instead of behind it.
    surface_z_mm : float or None
        Liquid surface, mm (default: 3 mm above the highest release of a falling ball; with
        only rising balls, above the view).
    scale_plane : {"ball-plane", "tube-front", "in-air"}
        Where the ruler (the scale) lies; off the ball plane it is drawn at its own image scale.
    camera_distance_mm, tube_wall_mm, wall_refractive_index, liquid_refractive_index,
    tube_inner_diameter_mm, ruler_offset_mm : float
        Optics of §10 (L, t, n_w, n_l, 2 R_i; ruler plane behind the front surface for
        ``"in-air"``), mm or dimensionless.
    defocus_px : float
        Gaussian defocus of the whole picture, σ in px.
    codec, container : str
        For `write_clip`: "h264", "hevc" or "mjpeg"; "mp4", "mov", "mkv" or "avi".
    crf, bit_rate, gop : int or None
        Encoder quality (constant rate factor), bit rate (bit/s), key-frame interval.
    seed : int
        Seed of every random choice (shake, noise, flicker phase, bubble).
    """

    width_px: int = 1280
    height_px: int = 720
    capture_fps: float = 60.0
    stored_fps: float | None = None
    frame_times_s: tuple[float, ...] | None = None
    duration_s: float = 3.0
    px_per_mm: float = 4.0
    horizontal_magnification: float = 1.0
    axis_x_px: float | None = None
    z0_y_px: float = 80.0
    ball_diameter_mm: float = 3.0
    polarity: str = "dark"
    highlight: bool = True
    terminal_velocity_mm_s: float = 40.0
    tau_s: float = 0.02
    motion: str = "exponential"
    density_ratio: float = 1261.0 / 7810.0
    drops: tuple[Drop, ...] = (Drop(release_t_s=0.1),)
    exposure_s: float | None = None
    readout_s: float = 0.0
    rotation_deg: int = 0
    noise_dn: float = 1.5
    duplicate_frames: tuple[int, ...] = ()
    shake_px: float = 0.0
    jolt_t_s: tuple[float, ...] = ()
    jolt_px: float = 6.0
    flicker: float = 0.0
    mains_hz: float = 50.0
    exposure_dip: bool = False
    bubble: bool = False
    bubble_diameter_mm: float = 2.0
    bubble_speed_mm_s: float = 12.0
    hand: bool = False
    marks_mm: tuple[float, ...] = ()
    marks_occlude: bool = False
    surface_z_mm: float | None = None
    scale_plane: str = "ball-plane"
    camera_distance_mm: float = 500.0
    tube_wall_mm: float = 2.5
    wall_refractive_index: float = 1.47
    liquid_refractive_index: float = 1.473
    tube_inner_diameter_mm: float = 49.0
    ruler_offset_mm: float = 27.0
    defocus_px: float = 0.6
    codec: str = "h264"
    container: str = "mp4"
    crf: int | None = 18
    bit_rate: int | None = None
    gop: int | None = None
    seed: int = 0

    def __post_init__(self) -> None:
        for name in ("width_px", "height_px"):
            v = getattr(self, name)
            _check(isinstance(v, int) and not isinstance(v, bool) and v >= 8,
                   f"ClipSpec.{name} = {v!r}: expected an integer number of pixels ≥ 8")
        _finite("ClipSpec.capture_fps", self.capture_fps, low=0.0, unit="frames/s")
        if self.stored_fps is not None:
            _finite("ClipSpec.stored_fps", self.stored_fps, low=0.0, unit="frames/s")
        if self.frame_times_s is not None:
            t = np.asarray(self.frame_times_s, dtype=float)
            _check(t.ndim == 1 and t.size >= 1 and bool(np.all(np.isfinite(t))) and t[0] >= 0,
                   f"ClipSpec.frame_times_s = {self.frame_times_s!r:.80}: expected a non-empty "
                   "sequence of finite times ≥ 0 s")
            steps = np.diff(t)
            if steps.size and steps.min() <= 0:
                i = int(np.argmin(steps))
                raise ValueError(f"ClipSpec.frame_times_s: step {steps[i]:g} s at index {i + 1}; "
                                 "expected strictly increasing times")
        _finite("ClipSpec.duration_s", self.duration_s, low=0.0, unit="s")
        _finite("ClipSpec.px_per_mm", self.px_per_mm, low=0.0, unit="px/mm")
        _finite("ClipSpec.horizontal_magnification", self.horizontal_magnification, low=0.0)
        if self.axis_x_px is not None:
            _finite("ClipSpec.axis_x_px", self.axis_x_px, unit="px")
        _finite("ClipSpec.z0_y_px", self.z0_y_px, unit="px")
        _check(0.0 <= self.z0_y_px <= self.height_px - 1,
               f"ClipSpec.z0_y_px = {self.z0_y_px!r}: the upper scale point must be inside the "
               f"displayed frame (0 … {self.height_px - 1} px)")
        _finite("ClipSpec.ball_diameter_mm", self.ball_diameter_mm, low=0.0, unit="mm")
        _check(self.polarity in _POLARITIES,
               f"ClipSpec.polarity = {self.polarity!r}: expected one of {', '.join(_POLARITIES)}")
        _finite("ClipSpec.terminal_velocity_mm_s", self.terminal_velocity_mm_s, low=0.0, unit="mm/s")
        _finite("ClipSpec.tau_s", self.tau_s, low=0.0, unit="s")
        _check(self.motion in _MOTIONS,
               f"ClipSpec.motion = {self.motion!r}: expected one of {', '.join(_MOTIONS)}")
        _finite("ClipSpec.density_ratio", self.density_ratio, low=0.0, strict=False)
        _check(isinstance(self.drops, tuple) and all(isinstance(d, Drop) for d in self.drops),
               f"ClipSpec.drops = {self.drops!r:.80}: expected a tuple of Drop")
        period = self.min_frame_interval_s
        if self.exposure_s is not None:
            _finite("ClipSpec.exposure_s", self.exposure_s, low=0.0, unit="s")
            _check(self.exposure_s <= period * (1 + 1e-9),
                   f"ClipSpec.exposure_s = {self.exposure_s:g} s: expected at most the shortest "
                   f"frame interval ({period:g} s)")
        _finite("ClipSpec.readout_s", self.readout_s, low=0.0, strict=False, unit="s")
        # a rolling shutter cannot read out slower than it delivers frames (§11, published bound)
        _check(self.readout_s <= period * (1 + 1e-9),
               f"ClipSpec.readout_s = {self.readout_s:g} s: expected at most the shortest frame "
               f"interval ({period:g} s)")
        _check(self.rotation_deg in (0, 90, 180, 270),
               f"ClipSpec.rotation_deg = {self.rotation_deg!r}: expected 0, 90, 180 or 270")
        for name in ("noise_dn", "shake_px", "jolt_px", "flicker", "defocus_px"):
            _finite(f"ClipSpec.{name}", getattr(self, name), low=0.0, strict=False)
        _check(self.flicker < 1.0, f"ClipSpec.flicker = {self.flicker!r}: expected a relative "
                                   "amplitude below 1")
        _finite("ClipSpec.mains_hz", self.mains_hz, low=0.0, unit="Hz")
        n_frames = len(frame_times_s(self))
        _check(isinstance(self.duplicate_frames, tuple)
               and all(isinstance(i, int) and 1 <= i < n_frames for i in self.duplicate_frames),
               f"ClipSpec.duplicate_frames = {self.duplicate_frames!r}: expected a tuple of frame "
               f"indices 1 … {n_frames - 1}")
        for name in ("jolt_t_s", "marks_mm"):
            v = getattr(self, name)
            _check(isinstance(v, tuple) and all(isinstance(x, (int, float)) and math.isfinite(x)
                                                for x in v),
                   f"ClipSpec.{name} = {v!r}: expected a tuple of finite numbers")
        _finite("ClipSpec.bubble_diameter_mm", self.bubble_diameter_mm, low=0.0, unit="mm")
        _finite("ClipSpec.bubble_speed_mm_s", self.bubble_speed_mm_s, low=0.0, unit="mm/s")
        if self.surface_z_mm is not None:
            _finite("ClipSpec.surface_z_mm", self.surface_z_mm, unit="mm")
        _check(self.scale_plane in _PLANES,
               f"ClipSpec.scale_plane = {self.scale_plane!r}: expected one of {', '.join(_PLANES)}")
        _finite("ClipSpec.camera_distance_mm", self.camera_distance_mm, low=0.0, unit="mm")
        _finite("ClipSpec.tube_wall_mm", self.tube_wall_mm, low=0.0, strict=False, unit="mm")
        _finite("ClipSpec.wall_refractive_index", self.wall_refractive_index, low=1.0, strict=False)
        _finite("ClipSpec.liquid_refractive_index", self.liquid_refractive_index, low=1.0,
                strict=False)
        _finite("ClipSpec.tube_inner_diameter_mm", self.tube_inner_diameter_mm, low=0.0, unit="mm")
        _finite("ClipSpec.ruler_offset_mm", self.ruler_offset_mm, unit="mm")
        _check(self.camera_distance_mm + self.ruler_offset_mm > 0,
               f"ClipSpec.ruler_offset_mm = {self.ruler_offset_mm:g}: puts the ruler behind the "
               "camera; expected camera_distance_mm + ruler_offset_mm > 0")
        _check(self.codec in ("h264", "hevc", "mjpeg"),
               f"ClipSpec.codec = {self.codec!r}: expected 'h264', 'hevc' or 'mjpeg'")
        _check(self.container in ("mp4", "mov", "mkv", "avi"),
               f"ClipSpec.container = {self.container!r}: expected 'mp4', 'mov', 'mkv' or 'avi'")
        _check(isinstance(self.seed, int) and not isinstance(self.seed, bool) and self.seed >= 0,
               f"ClipSpec.seed = {self.seed!r}: expected a non-negative integer")
        _geometry(self)     # the ruler must have room for a scale below z = 0

    # --- derived quantities ---------------------------------------------------------------
    @property
    def min_frame_interval_s(self) -> float:
        """Shortest interval between physical frame times, s."""
        if self.frame_times_s is not None and len(self.frame_times_s) > 1:
            return float(np.min(np.diff(np.asarray(self.frame_times_s, dtype=float))))
        return 1.0 / self.capture_fps

    @property
    def exposure(self) -> float:
        """Exposure time actually used, s (``exposure_s`` or 0.5 / capture_fps)."""
        return 0.5 / self.capture_fps if self.exposure_s is None else float(self.exposure_s)

    @property
    def axis_x(self) -> float:
        """Column of the tube axis actually used, px."""
        return (self.width_px - 1) / 2.0 if self.axis_x_px is None else float(self.axis_x_px)

    @property
    def stored_shape(self) -> tuple[int, int]:
        """(rows, columns) of the stored (sensor) image."""
        if self.rotation_deg in (90, 270):
            return self.width_px, self.height_px
        return self.height_px, self.width_px

    def to_dict(self) -> dict:
        """Return the fields as a JSON-friendly dict (drops as dicts, tuples as lists)."""
        out = {}
        for k, v in asdict(self).items():
            if isinstance(v, tuple):
                v = [x if isinstance(x, (dict, int)) else float(x) for x in v]
            out[k] = v
        return out


def frame_times_s(spec: ClipSpec) -> np.ndarray:
    """Physical time of every frame (middle of row 0's exposure).

    Parameters
    ----------
    spec : ClipSpec

    Returns
    -------
    ndarray of shape (n_frames,)
        Seconds from the clip's first frame: ``frame_times_s`` if given, else k / capture_fps
        for k = 0, 1, … while below ``duration_s``.
    """
    if spec.frame_times_s is not None:
        return np.asarray(spec.frame_times_s, dtype=float)
    n = max(1, math.ceil(spec.duration_s * spec.capture_fps - 1e-9))
    return np.arange(n) / spec.capture_fps


def presentation_times_s(spec: ClipSpec) -> np.ndarray:
    """Stored presentation times, the pts the file carries.

    Parameters
    ----------
    spec : ClipSpec

    Returns
    -------
    ndarray of shape (n_frames,)
        s of stored time: the physical times × capture_fps / stored_fps for slow motion
        (played back at ``stored_fps``), else the physical times.
    """
    t = frame_times_s(spec)
    return t * (spec.capture_fps / spec.stored_fps) if spec.stored_fps is not None else t


def scale_factor(spec: ClipSpec) -> float:
    """Ruler's own px/mm ÷ px/mm at the ball's plane (physics-references.md §10, paraxial).

    Parameters
    ----------
    spec : ClipSpec

    Returns
    -------
    float
        1 for ``"ball-plane"``; L_eff/L for ``"tube-front"``; L_eff/(L + ruler_offset_mm) for
        ``"in-air"``, with L_eff = L + t/n_w + R_i/n_l. True displacement = displacement
        measured with the ruler's own scale × this factor.
    """
    if spec.scale_plane == "ball-plane":
        return 1.0
    if spec.scale_plane == "tube-front":
        return _l_eff_mm(spec) / spec.camera_distance_mm
    return _l_eff_mm(spec) / (spec.camera_distance_mm + spec.ruler_offset_mm)


def _l_eff_mm(spec: ClipSpec) -> float:
    """Paraxial effective distance of the ball on the axis, L + t/n_w + R_i/n_l (§10), mm."""
    return (spec.camera_distance_mm + spec.tube_wall_mm / spec.wall_refractive_index
            + 0.5 * spec.tube_inner_diameter_mm / spec.liquid_refractive_index)


# ============================================================================================
# Laws of motion
# ============================================================================================

def bbo_kappa(density_ratio: float) -> float:
    """Strength of the history force in the dimensionless BBO equation.

    Parameters
    ----------
    density_ratio : float
        r = ρ_f/ρ_s (≥ 0).

    Returns
    -------
    float
        κ = √(9 r / (2π (1 + r/2))), so that 1 − v/v∞ → κ/√(t/τ) for large t.
    """
    _finite("density_ratio", density_ratio, low=0.0, strict=False)
    return math.sqrt(9.0 * density_ratio / (2.0 * math.pi * (1.0 + density_ratio / 2.0)))


@dataclass(frozen=True)
class BassetSolution:
    """Numerical solution of the dimensionless BBO equation on a graded mesh.

    Attributes
    ----------
    kappa : float
        History-force strength κ.
    s : ndarray of shape (n,)
        Mesh of t/τ, from 0.
    u : ndarray of shape (n,)
        v/v∞ at the mesh points.
    distance : ndarray of shape (n,)
        ∫₀ˢ u ds (distance in units of v∞ τ), from the integral equation itself.
    """

    kappa: float
    s: np.ndarray = field(repr=False)
    u: np.ndarray = field(repr=False)
    distance: np.ndarray = field(repr=False)
    _u_spline: CubicSpline = field(init=False, repr=False, compare=False)
    _d_spline: CubicHermiteSpline = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        # u between nodes: cubic spline; distance: Hermite cubic whose slope is u itself
        object.__setattr__(self, "_u_spline", CubicSpline(self.s, self.u))
        object.__setattr__(self, "_d_spline", CubicHermiteSpline(self.s, self.distance, self.u))

    def to_dict(self) -> dict:
        """Return κ and the mesh solution as JSON-friendly lists."""
        return {"kappa": float(self.kappa), "s": self.s.tolist(), "u": self.u.tolist(),
                "distance": self.distance.tolist()}

    @property
    def s_max(self) -> float:
        """Largest t/τ solved."""
        return float(self.s[-1])

    def velocity_fraction(self, s: np.ndarray | float) -> np.ndarray:
        """v/v∞ at t/τ = s (0 for s ≤ 0).

        Parameters
        ----------
        s : float or ndarray
            Dimensionless time t/τ, at most ``s_max``.

        Returns
        -------
        ndarray, same shape as s
        """
        return self._evaluate(self._u_spline, s)

    def distance_fraction(self, s: np.ndarray | float) -> np.ndarray:
        """∫₀ˢ u ds at t/τ = s (0 for s ≤ 0); distance travelled in units of v∞ τ.

        Parameters
        ----------
        s : float or ndarray
            Dimensionless time t/τ, at most ``s_max``.

        Returns
        -------
        ndarray, same shape as s
        """
        return self._evaluate(self._d_spline, s)

    def _evaluate(self, spline, s: np.ndarray | float) -> np.ndarray:
        """A solution spline at t/τ = s (0 for s ≤ 0), within the solved range."""
        s = np.asarray(s, dtype=float)
        _check(bool(np.all(s <= self.s_max)), f"s = {np.max(s):g}: beyond the solved range "
                                              f"(s_max = {self.s_max:g}); solve further")
        return np.where(s > 0, spline(np.clip(s, 0.0, None)), 0.0)


def basset_solution(density_ratio: float, s_max: float) -> BassetSolution:
    """Solve the BBO equation (added mass 1/2, Basset history force) for release from rest.

    Parameters
    ----------
    density_ratio : float
        ρ_f/ρ_s (≥ 0; 0 gives the exponential law 1 − e^{−s}).
    s_max : float
        Solve up to t/τ = s_max (> 0). Cost grows like (log s_max)².

    Returns
    -------
    BassetSolution
        Accurate to ~1e-7 in v/v∞ (checked against physics-references.md §5 #22/#23).

    Notes
    -----
    Product integration of ``u(s) = s − ∫u − κ ∫ u(q)/√(s−q) dq`` with u piecewise linear and
    both kernels integrated exactly over each step (trapezoid for the first, closed-form moments
    of (s−q)^(−1/2) for the second, in a cancellation-free form), implicit in the new value.
    The mesh is graded, step = max(1e-5, 0.005 s), because u has an s^(3/2) term at s = 0 and
    varies on the scale s itself later on.
    """
    _finite("s_max", s_max, low=0.0)
    top = 2.0 ** math.ceil(math.log2(max(s_max, 1.0)))  # round up: reuse cached solutions
    return _basset_cached(float(density_ratio), top)


@lru_cache(maxsize=16)
def _basset_cached(density_ratio: float, s_max: float) -> BassetSolution:
    kappa = bbo_kappa(density_ratio)
    mesh = [0.0]
    while mesh[-1] < s_max:
        mesh.append(mesh[-1] + max(_BASSET_H_MIN, _BASSET_ETA * mesh[-1]))
    s = np.asarray(mesh)
    n = s.size
    u = np.zeros(n)
    dist = np.zeros(n)
    for m in range(1, n):
        a = s[m] - s[1:m + 1]                # distance of each step's right end from s_m
        b = s[m] - s[:m]                     # … and of its left end
        h = b - a
        ra, rb = np.sqrt(a), np.sqrt(b)
        den = ra + rb
        w_left = (2.0 / 3.0) * h * (1.0 + ra / den) / den   # ∫ of the kernel × left hat function
        w_right = 2.0 * h / den - w_left                      # … × right hat function
        history = np.dot(w_left, u[:m]) + np.dot(w_right[:-1], u[1:m])
        hm = s[m] - s[m - 1]
        dist_known = dist[m - 1] + 0.5 * hm * u[m - 1]
        u[m] = (s[m] - dist_known - kappa * history) / (1.0 + 0.5 * hm + kappa * w_right[-1])
        dist[m] = dist_known + 0.5 * hm * u[m]
    return BassetSolution(kappa, s, u, dist)


@dataclass
class _Track:
    """Exact motion of one drop (mm, s), positions in the displayed scene frame (px)."""

    drop: Drop
    v_t_mm_s: float
    tau_s: float
    motion: str
    density_ratio: float
    px_per_mm: float
    hmag: float
    axis_x: float
    z0_y: float
    basset: BassetSolution | None = None

    @property
    def sign(self) -> float:
        return 1.0 if self.drop.direction == "down" else -1.0

    def _s(self, t: np.ndarray | float) -> np.ndarray:
        return np.clip((np.asarray(t, dtype=float) - self.drop.release_t_s) / self.tau_s, 0.0, None)

    def _solution(self, s_top: float) -> BassetSolution:
        """The BBO solution, solved further when asked beyond its range."""
        if self.basset is None or s_top > self.basset.s_max:
            self.basset = basset_solution(self.density_ratio, max(s_top, 1.0))
        return self.basset

    def _fractions(self, t: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
        """(distance in units of v_t τ, v/v_t) at times t."""
        s = self._s(t)
        if self.motion == "exponential":
            return s + np.expm1(-s), -np.expm1(-s)
        sol = self._solution(float(np.max(s)) if s.size else 1.0)
        return sol.distance_fraction(s), sol.velocity_fraction(s)

    def z_mm(self, t: np.ndarray | float) -> np.ndarray:
        d, _ = self._fractions(t)
        return self.drop.z0_mm + self.sign * self.v_t_mm_s * self.tau_s * d

    def v_mm_s(self, t: np.ndarray | float) -> np.ndarray:
        _, u = self._fractions(t)
        return self.sign * self.v_t_mm_s * u

    def lateral_mm(self, z_mm: np.ndarray) -> np.ndarray:
        return self.drop.lateral_mm + self.drop.drift_mm_per_mm * np.abs(z_mm - self.drop.z0_mm)

    def xy_px(self, t: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
        z = self.z_mm(t)
        x = self.axis_x + self.lateral_mm(z) * self.px_per_mm * self.hmag
        return x, self.z0_y + z * self.px_per_mm

    def settling_time_s(self, fraction: float) -> float:
        if self.motion == "exponential":
            return -self.tau_s * math.log1p(-fraction)
        kappa = bbo_kappa(self.density_ratio)
        # the tail 1 − u ≈ κ/√s reaches 1 − fraction near s = (κ/(1 − fraction))²
        sol = self._solution(max(50.0, 2.0 * (kappa / (1.0 - fraction)) ** 2))
        k = int(np.nonzero(sol.u >= fraction)[0][0])
        s_hit = brentq(lambda x: float(sol.velocity_fraction(x)) - fraction, sol.s[k - 1], sol.s[k])
        return s_hit * self.tau_s


# ============================================================================================
# Timing, shake, illumination
# ============================================================================================

def _row_map(spec: ClipSpec) -> tuple[float, float, float]:
    """(a, b, c) with stored row = a x + b y + c for a displayed pixel (x, y)."""
    rows_s, cols_s = spec.stored_shape
    rows = np.broadcast_to(np.arange(rows_s, dtype=float)[:, None], (rows_s, cols_s))
    disp = _to_display(rows, spec.rotation_deg)
    c = float(disp[0, 0])
    return float(disp[0, 1] - c), float(disp[1, 0] - c), c


def _to_display(stored: np.ndarray, rotation_deg: int) -> np.ndarray:
    return np.rot90(stored, k=-(rotation_deg // 90))


def _to_stored(displayed: np.ndarray, rotation_deg: int) -> np.ndarray:
    return np.rot90(displayed, k=rotation_deg // 90)


def _streams(spec: ClipSpec) -> dict[str, np.random.Generator]:
    names = ("shake", "noise", "flicker", "bubble")
    seqs = np.random.SeedSequence(spec.seed).spawn(len(names))
    return {n: np.random.default_rng(s) for n, s in zip(names, seqs)}


def _shake_px(spec: ClipSpec, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-frame offset of the whole view (px), quantised to SHAKE_QUANTUM_PX."""
    t = np.asarray(t, dtype=float)
    dx = np.zeros_like(t)
    dy = np.zeros_like(t)
    if spec.shake_px > 0:
        rng = _streams(spec)["shake"]
        for out in (dx, dy):
            freq = rng.uniform(0.3, 3.0, 6)          # hand tremor and sway, Hz
            phase = rng.uniform(0.0, 2.0 * math.pi, 6)
            amp = 1.0 / freq
            amp *= spec.shake_px / math.sqrt(0.5 * np.sum(amp ** 2))   # RMS per axis
            out += np.sum(amp[:, None] * np.sin(2 * math.pi * freq[:, None] * t + phase[:, None]),
                          axis=0)
    for tj in spec.jolt_t_s:
        age = t - tj
        env = np.where(age >= 0, np.exp(-np.clip(age, 0.0, None) / _JOLT_DECAY_S), 0.0)
        dy += spec.jolt_px * env * np.sin(2 * math.pi * _JOLT_HZ * age)
        dx += 0.4 * spec.jolt_px * env * np.sin(2 * math.pi * _JOLT_HZ * age + 1.1)
    q = SHAKE_QUANTUM_PX
    return np.round(dx / q) * q, np.round(dy / q) * q


def _smoothstep(x: np.ndarray | float) -> np.ndarray:
    x = np.clip(x, 0.0, 1.0)
    return x * x * (3.0 - 2.0 * x)


def _hand_presence(spec: ClipSpec, release_t_s: float, t: np.ndarray | float) -> np.ndarray:
    """0 … 1: how far the hand of one release has reached into the view."""
    rel = np.asarray(t, dtype=float) - release_t_s
    enter = _smoothstep((rel + _HAND_IN_S[0]) / (_HAND_IN_S[0] - _HAND_IN_S[1]))
    leave = 1.0 - _smoothstep((rel - _HAND_OUT_S[0]) / (_HAND_OUT_S[1] - _HAND_OUT_S[0]))
    return np.minimum(enter, leave)


def _exposure_gain(spec: ClipSpec, t: float) -> float:
    if not spec.exposure_dip:
        return 1.0
    p = sum(float(_hand_presence(spec, d.release_t_s, t - _DIP_LAG_S)) for d in spec.drops)
    return 1.0 - _DIP_DEPTH * min(p, 1.0)


# ============================================================================================
# Truth
# ============================================================================================

@dataclass
class Truth:
    """Ground truth of a synthetic clip.

    Attributes
    ----------
    spec : ClipSpec
        The clip's specification.
    frames : pandas.DataFrame
        One row per frame and drop whose ellipse touches the displayed frame, sorted by track
        then frame. Columns: ``frame``; ``t_s`` (physical, row 0), ``pts_s`` (stored), s;
        ``track``; ``x_px``, ``y_px`` (displayed scene frame, no shake) and ``z_mm``,
        ``lateral_mm``, ``v_mm_s`` (signed, + down) at ``t_s``; ``t_row_s``, ``x_row_px``,
        ``y_row_px``: the instant and scene position at which the rolling shutter images the
        centre (its own row's time; equal to the above without readout); ``shake_dx_px``,
        ``shake_dy_px``; ``diameter_h_px``, ``diameter_v_px``; ``released``; ``fully_visible``;
        ``duplicate`` (the frame repeats the previous picture, so it shows the ball where the
        previous row says, not where this row's time would put it).
    distractors : pandas.DataFrame
        Bubble centre / tweezers tip per frame in view: ``frame``, ``t_s``, ``kind``
        ("bubble" or "hand"), ``x_px``, ``y_px`` (scene frame).
    """

    spec: ClipSpec
    frames: pd.DataFrame
    distractors: pd.DataFrame
    _tracks: tuple[_Track, ...] = field(repr=False)

    @property
    def n_tracks(self) -> int:
        """Number of drops (tracks are numbered in release order)."""
        return len(self._tracks)

    def _track(self, track: int) -> _Track:
        _check(isinstance(track, (int, np.integer)) and 0 <= track < len(self._tracks),
               f"track = {track!r}: expected an integer 0 … {len(self._tracks) - 1}")
        return self._tracks[int(track)]

    def position_px(self, t_s: np.ndarray | float, track: int) -> tuple[np.ndarray, np.ndarray]:
        """Exact centre in the displayed scene frame at any physical time.

        Parameters
        ----------
        t_s : float or ndarray of shape (n,)
            Physical time, s (e.g. a tracker's own times including rolling-shutter offsets).
        track : int
            Track id (release order).

        Returns
        -------
        x_px, y_px : ndarray, same shape as t_s
        """
        return self._track(track).xy_px(t_s)

    def z_mm(self, t_s: np.ndarray | float, track: int) -> np.ndarray:
        """Axial position (mm, + down, 0 at the upper scale point) at physical time ``t_s`` (s)."""
        return self._track(track).z_mm(t_s)

    def v_mm_s(self, t_s: np.ndarray | float, track: int) -> np.ndarray:
        """Axial velocity (mm/s, + down) at physical time ``t_s`` (s)."""
        return self._track(track).v_mm_s(t_s)

    def release_t_s(self, track: int) -> float:
        """Physical release time of a track, s."""
        return float(self._track(track).drop.release_t_s)

    def direction(self, track: int) -> str:
        """"down" or "up"."""
        return self._track(track).drop.direction

    def terminal_velocity_mm_s(self, track: int) -> float:
        """Terminal speed (positive) of a track, mm/s."""
        return float(self._track(track).v_t_mm_s)

    def settling_time_s(self, track: int, fraction: float = 0.999) -> float:
        """Time after release at which the speed reaches ``fraction`` of terminal, s.

        Parameters
        ----------
        track : int
        fraction : float
            0 < fraction < 1 (default 99.9 %).

        Returns
        -------
        float
            Exponential law: −τ ln(1 − fraction) (6.9078 τ for 99.9 %). Basset law: from the
            numerical solution (far longer: the tail is algebraic).
        """
        _check(0.0 < fraction < 1.0, f"fraction = {fraction!r}: expected 0 < fraction < 1")
        return self._track(track).settling_time_s(fraction)

    def mark_crossing_t_s(self, track: int) -> np.ndarray:
        """Physical times at which the centre crosses each of ``spec.marks_mm``, s (NaN if never).

        Parameters
        ----------
        track : int

        Returns
        -------
        ndarray of shape (n_marks,)
        """
        tr = self._track(track)
        t0 = tr.drop.release_t_s
        out = []
        for zm in self.spec.marks_mm:
            dz = (zm - tr.drop.z0_mm) * tr.sign
            if dz <= 0:
                out.append(math.nan)
                continue
            hi = t0 + tr.tau_s + dz / tr.v_t_mm_s
            while (float(tr.z_mm(hi)) - zm) * tr.sign < 0:
                hi = t0 + 2.0 * (hi - t0)
            out.append(brentq(lambda t: float(tr.z_mm(t)) - zm, t0, hi, xtol=1e-13))
        return np.asarray(out, dtype=float)

    def to_dict(self) -> dict:
        """JSON-friendly summary: the spec, per-track truths and the per-frame table."""
        tracks = [{
            "id": k, "direction": self.direction(k), "release_t_s": self.release_t_s(k),
            "terminal_velocity_mm_s": self.terminal_velocity_mm_s(k),
            "settling_time_s": float(self.settling_time_s(k)),
        } for k in range(self.n_tracks)]
        frames = [{k: (v.item() if isinstance(v, np.generic) else v) for k, v in row.items()}
                  for row in self.frames.to_dict(orient="records")]
        return {"spec": self.spec.to_dict(), "tracks": tracks, "frames": frames}


def _make_tracks(spec: ClipSpec) -> tuple[_Track, ...]:
    order = sorted(spec.drops, key=lambda d: d.release_t_s)
    t_end = float(frame_times_s(spec)[-1]) + spec.exposure + spec.readout_s + 1.0
    tracks = []
    for d in order:
        v_t = spec.terminal_velocity_mm_s if d.terminal_velocity_mm_s is None else d.terminal_velocity_mm_s
        tr = _Track(d, float(v_t), spec.tau_s, spec.motion, spec.density_ratio, spec.px_per_mm,
                    spec.horizontal_magnification, spec.axis_x, spec.z0_y_px)
        if spec.motion == "basset":   # solve once for the whole clip (and a second beyond it)
            tr._solution(max(t_end - d.release_t_s, 0.0) / spec.tau_s)
        tracks.append(tr)
    return tuple(tracks)


def _rolling_position(spec: ClipSpec, tr: _Track, t: np.ndarray, dx: np.ndarray,
                      dy: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Solve t_row = t + readout · row(x(t_row) + dx, y(t_row) + dy) / H_stored by iteration."""
    x, y = tr.xy_px(t)
    if spec.readout_s == 0:
        return t.copy(), x, y
    a, b, c = _row_map(spec)
    per_row = spec.readout_s / spec.stored_shape[0]
    t_row = t.copy()
    for _ in range(50):
        t_new = t + per_row * (a * (x + dx) + b * (y + dy) + c)
        done = np.max(np.abs(t_new - t_row)) < 1e-13
        t_row = t_new
        x, y = tr.xy_px(t_row)
        if done:
            break
    return t_row, x, y


def truth(spec: ClipSpec) -> Truth:
    """Compute the ground truth of a clip without rendering it.

    Parameters
    ----------
    spec : ClipSpec

    Returns
    -------
    Truth
    """
    tracks = _make_tracks(spec)
    t = frame_times_s(spec)
    pts = presentation_times_s(spec)
    dx, dy = _shake_px(spec, t)
    w, h = spec.width_px, spec.height_px
    half_h = 0.5 * spec.ball_diameter_mm * spec.px_per_mm * spec.horizontal_magnification
    half_v = 0.5 * spec.ball_diameter_mm * spec.px_per_mm
    idx = np.arange(t.size)
    parts = []
    for k, tr in enumerate(tracks):
        x, y = tr.xy_px(t)
        xs, ys = x + dx, y + dy
        touch = ((xs + half_h > -0.5) & (xs - half_h < w - 0.5)
                 & (ys + half_v > -0.5) & (ys - half_v < h - 0.5))
        if not touch.any():
            continue
        full = ((xs - half_h >= -0.5) & (xs + half_h <= w - 0.5)
                & (ys - half_v >= -0.5) & (ys + half_v <= h - 0.5))
        z = tr.z_mm(t)
        t_row, x_row, y_row = _rolling_position(spec, tr, t, dx, dy)
        parts.append(pd.DataFrame({
            "frame": idx, "t_s": t, "pts_s": pts, "track": k, "x_px": x, "y_px": y, "z_mm": z,
            "lateral_mm": tr.lateral_mm(z), "v_mm_s": tr.v_mm_s(t),
            "t_row_s": t_row, "x_row_px": x_row, "y_row_px": y_row,
            "shake_dx_px": dx, "shake_dy_px": dy,
            "diameter_h_px": 2 * half_h, "diameter_v_px": 2 * half_v,
            "released": t >= tr.drop.release_t_s, "fully_visible": full,
            "duplicate": np.isin(idx, spec.duplicate_frames),
        })[touch])
    cols = ["frame", "t_s", "pts_s", "track", "x_px", "y_px", "z_mm", "lateral_mm", "v_mm_s",
            "t_row_s", "x_row_px", "y_row_px", "shake_dx_px", "shake_dy_px", "diameter_h_px",
            "diameter_v_px", "released", "fully_visible", "duplicate"]
    frames = (pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols))
    frames = frames.sort_values(["track", "frame"], kind="stable").reset_index(drop=True)
    return Truth(spec, frames, _distractor_table(spec, tracks, t, dx, dy), tracks)


# ============================================================================================
# Static scene
# ============================================================================================

@dataclass(frozen=True)
class _Geometry:
    """Where the static things are in the displayed scene frame (px)."""

    inner_half_px: float
    outer_half_px: float
    ruler_x_px: float           # left edge of the ruler strip (ticks start here)
    ruler_px_per_mm: float
    scale_mm: float             # distance between the two scale points
    surface_y_px: float


def _geometry(spec: ClipSpec) -> _Geometry:
    ppm = spec.px_per_mm
    r_i = 0.5 * spec.tube_inner_diameter_mm
    r_o = r_i + spec.tube_wall_mm
    # silhouette of the outer wall ≈ at the depth of the axis plane (decorative, not a scale)
    outer = r_o * ppm * _l_eff_mm(spec) / (spec.camera_distance_mm + r_o)
    inner = outer * r_i / r_o
    ruler_x = min(spec.axis_x + outer + max(4.0, 1.5 * ppm), spec.width_px - 12.0)
    rppm = ppm * scale_factor(spec)
    room = (spec.height_px - 6.0 - spec.z0_y_px) / rppm       # mm available below z = 0
    step = next((s for s in (100.0, 50.0, 10.0, 5.0, 1.0) if room >= s), None)
    _check(step is not None, f"ClipSpec.z0_y_px = {spec.z0_y_px:g}: leaves less than 1 mm of "
                             "ruler below the upper scale point; expected a lower z0_y_px")
    scale_mm = step * math.floor(room / step)
    surface = spec.surface_z_mm
    if surface is None:   # 3 mm above the highest falling release; else above the view
        falling = [d.z0_mm - 3.0 for d in spec.drops if d.direction == "down"]
        surface = min(falling) if falling else -spec.z0_y_px / ppm - 5.0
    return _Geometry(inner, outer, ruler_x, rppm, scale_mm, spec.z0_y_px + surface * ppm)


def _cover(lo: float, hi: float, coords: np.ndarray) -> np.ndarray:
    """Exact fraction of each unit pixel [c − ½, c + ½] covered by the interval [lo, hi]."""
    return np.clip(np.minimum(hi, coords + 0.5) - np.maximum(lo, coords - 0.5), 0.0, 1.0)


def _span(lo: float, hi: float, pad: int, n: int) -> slice:
    """Index range of the padded pixels that [lo, hi] (scene coordinates) can touch."""
    return slice(min(n, max(0, math.floor(lo + 0.5) + pad)), max(0, min(n, math.ceil(hi + 0.5) + pad)))


def _static_layers(spec: ClipSpec, pad: int) -> tuple[np.ndarray, np.ndarray | None, float]:
    """Background behind the ball, foreground alpha of occluding marks and its level.

    Arrays of shape (H + 2 pad, W + 2 pad), float32, scene coordinates shifted by ``pad``.
    """
    geo = _geometry(spec)
    hh, ww = spec.height_px + 2 * pad, spec.width_px + 2 * pad
    ys = np.arange(hh, dtype=float) - pad
    xs = np.arange(ww, dtype=float) - pad
    cx, cy = spec.axis_x, (spec.height_px - 1) / 2.0
    r2 = ((xs[None, :] - cx) ** 2 + (ys[:, None] - cy) ** 2) / (cx ** 2 + cy ** 2 + 1.0)
    light = (1.0 - _VIGNETTE * r2) * (1.0 + _GRADIENT * (ys[:, None] / spec.height_px - 0.5))
    dark = spec.polarity == "dark"
    img = (_BACKLIGHT_DN if dark else _DARK_ROOM_DN) * light
    ax = spec.axis_x
    inside = _cover(ax - geo.inner_half_px, ax + geo.inner_half_px, xs)[None, :]
    liquid = _cover(geo.surface_y_px, 1e9, ys)[:, None]
    walls = (_cover(ax - geo.outer_half_px, ax - geo.inner_half_px, xs)
             + _cover(ax + geo.inner_half_px, ax + geo.outer_half_px, xs))[None, :]
    edges = sum(_cover(e - 0.75, e + 0.75, xs) for e in
                (ax - geo.outer_half_px, ax + geo.outer_half_px))[None, :]
    if dark:
        img = img * (1.0 - 0.06 * inside * liquid) * (1.0 - 0.15 * walls) * (1.0 - 0.6 * edges)
    else:
        img = img + 22.0 * edges + 4.0 * walls
    # meniscus: a dark (or faint bright) band across the inside of the tube
    men = _cover(geo.surface_y_px - 1.5, geo.surface_y_px + 1.5, ys)[:, None] * inside
    img = img * (1.0 - 0.55 * men) if dark else img + 30.0 * men
    # ruler strip with mm ticks (1 mm ticks only when they are ≥ 2.5 px apart)
    strip_w = max(8.0, 3.0 * geo.ruler_px_per_mm)
    strip = _cover(geo.ruler_x_px - 2.0, geo.ruler_x_px + strip_w, xs)[None, :]
    strip_level = 235.0 if dark else 70.0
    img = img * (1.0 - strip) + strip_level * strip
    tick_level = 30.0 if dark else 18.0
    k_lo = math.floor((-pad - spec.z0_y_px) / geo.ruler_px_per_mm) - 1
    k_hi = math.ceil((hh - pad - spec.z0_y_px) / geo.ruler_px_per_mm) + 1
    tick_w = min(1.2, 0.3 * geo.ruler_px_per_mm)
    for k in range(k_lo, k_hi + 1):
        if k % 5 and geo.ruler_px_per_mm < 2.5:
            continue
        length = strip_w * (0.8 if k % 10 == 0 else 0.55 if k % 5 == 0 else 0.35)
        yk = spec.z0_y_px + k * geo.ruler_px_per_mm
        rows = _span(yk - tick_w / 2, yk + tick_w / 2, pad, hh)
        cols = _span(geo.ruler_x_px, geo.ruler_x_px + length, pad, ww)
        if rows.start < rows.stop and cols.start < cols.stop:
            a = (_cover(yk - tick_w / 2, yk + tick_w / 2, ys[rows])[:, None]
                 * _cover(geo.ruler_x_px, geo.ruler_x_px + length, xs[cols])[None, :])
            img[rows, cols] = img[rows, cols] * (1.0 - a) + tick_level * a
    # timing marks (rubber bands round the tube): behind or in front of the ball
    band = max(2.0, 0.8 * spec.px_per_mm)
    mark_a = np.zeros((hh, ww))
    x_band = _cover(ax - geo.outer_half_px, ax + geo.outer_half_px, xs)[None, :]
    for zm in spec.marks_mm:
        ym = spec.z0_y_px + zm * spec.px_per_mm
        rows = _span(ym - band / 2, ym + band / 2, pad, hh)
        mark_a[rows] = np.maximum(mark_a[rows],
                                  _cover(ym - band / 2, ym + band / 2, ys[rows])[:, None] * x_band)
    mark_level = 40.0 if dark else 60.0
    fg = None
    if spec.marks_mm and spec.marks_occlude:
        fg = mark_a
    else:
        img = img * (1.0 - mark_a) + mark_level * mark_a
    img = _defocus(img.astype(np.float32), spec.defocus_px, cv2.BORDER_REFLECT)
    if fg is not None:
        fg = _defocus(fg.astype(np.float32), spec.defocus_px, cv2.BORDER_REFLECT)
    return img, fg, mark_level


def _defocus(img: np.ndarray, sigma: float, border: int) -> np.ndarray:
    if sigma <= 0:
        return img
    return cv2.GaussianBlur(img, (0, 0), sigmaX=sigma, sigmaY=sigma, borderType=border)


def scene_image(spec: ClipSpec) -> np.ndarray:
    """The static scene (no ball, bubble, hand, shake, gain changes or noise), displayed frame.

    Parameters
    ----------
    spec : ClipSpec

    Returns
    -------
    ndarray of shape (height_px, width_px), float32
        Intensity in DN (8-bit scale, not rounded), occluding marks included.
    """
    bg, fg, level = _static_layers(spec, 0)
    return bg if fg is None else bg * (1.0 - fg) + level * fg


# ============================================================================================
# Sprites: ball, bubble, hand
# ============================================================================================

Geometry = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]
# profile(u, v, q): own radiance and relative transmission at normalised coordinates u (along x),
# v (along y), q = u² + v² (broadcastable arrays); None for "no transmission term"
Profile = Callable[[np.ndarray, np.ndarray, np.ndarray], tuple[object, object]]


@dataclass(frozen=True)
class _Patch:
    y0: int
    x0: int
    alpha: np.ndarray         # time-averaged coverage
    v_abs: np.ndarray         # time average of coverage × own radiance (DN)
    v_rel: np.ndarray | None  # … × transmission relative to the background


@dataclass(frozen=True)
class _Optics:
    exposure_s: float
    readout_s: float
    rows_stored: int
    row_map: tuple[float, float, float]
    defocus_px: float


def _render_sprite(geom: Geometry, profile: Profile, t: float, optics: _Optics,
                   shake: tuple[float, float], bounds: tuple[int, int, int, int]) -> _Patch | None:
    """Supersampled, motion-blurred, rolling-shutter render of an elliptical sprite.

    ``geom(times)`` gives centre x, y and semi-axes A (horizontal), B (vertical), px, in scene
    coordinates. ``bounds`` = (x_lo, y_lo, x_hi, y_hi), inclusive pixel range. Each supersample
    is evaluated at its own times: SUPERSAMPLE² samples per pixel, n_sub instants spread
    symmetrically over the exposure, shifted by its stored row's readout delay.
    """
    ss = SUPERSAMPLE
    e = optics.exposure_s
    a_row, b_row, c_row = optics.row_map
    per_row = optics.readout_s / optics.rows_stored
    probe = t + np.array([-e / 2, e / 2, -e / 2 + optics.readout_s, e / 2 + optics.readout_s])
    pcx, pcy, pa, pb = (np.broadcast_to(v, probe.shape) for v in geom(probe))
    blur = math.hypot(pcx[1] - pcx[0], pcy[1] - pcy[0])
    n_sub = int(np.clip(math.ceil(blur * ss) + 1, MIN_SUBSTEPS, MAX_SUBSTEPS))
    margin = 3.0 * optics.defocus_px + 2.0
    x_lo = max(bounds[0], math.floor(float(np.min(pcx - pa)) - margin))
    x_hi = min(bounds[2], math.ceil(float(np.max(pcx + pa)) + margin))
    y_lo = max(bounds[1], math.floor(float(np.min(pcy - pb)) - margin))
    y_hi = min(bounds[3], math.ceil(float(np.max(pcy + pb)) + margin))
    if x_lo > x_hi or y_lo > y_hi:
        return None
    nx, ny = x_hi - x_lo + 1, y_hi - y_lo + 1
    # supersample centres relative to the patch origin (float32 keeps ~1e-5 px here)
    xs = ((np.arange(nx * ss) + 0.5) / ss - 0.5).astype(np.float32)
    ys = ((np.arange(ny * ss) + 0.5) / ss - 0.5).astype(np.float32)
    sub = ((np.arange(n_sub) + 0.5) / n_sub - 0.5) * e      # symmetric about mid-exposure
    if per_row == 0:
        lag = np.zeros((1, 1))
    elif a_row != 0:                                         # readout runs along displayed x
        lag = per_row * (a_row * (x_lo + xs.astype(float) + shake[0]) + c_row)[None, :]
    else:                                                    # … along displayed y
        lag = per_row * (b_row * (y_lo + ys.astype(float) + shake[1]) + c_row)[:, None]
    acc_a = np.zeros((ny * ss, nx * ss), np.float32)
    acc_abs = np.zeros_like(acc_a)
    acc_rel = None
    chunk = max(1, 262_144 // (nx * ny * ss * ss))           # keep temporaries in cache
    for j0 in range(0, n_sub, chunk):
        times = t + sub[j0:j0 + chunk, None, None] + lag[None, :, :]
        cx, cy, sa, sb = (np.asarray(v, dtype=float) for v in geom(times))
        sa32 = np.asarray(sa, np.float32)
        sb32 = np.asarray(sb, np.float32)
        u = (xs[None, None, :] - (cx - x_lo).astype(np.float32)) / sa32
        v = (ys[None, :, None] - (cy - y_lo).astype(np.float32)) / sb32
        q = u * u + v * v
        # anti-aliasing: linear ramp one subsample wide across the rim; near q = 1 the distance
        # to the rim is ≈ (q − 1)/2 × r with r the local radius (√(A B) used: symmetric, so
        # the centroid stays exact)
        k = np.asarray(0.5 * ss * np.sqrt(sa * sb), np.float32)
        alpha = np.float32(0.5) - (q - np.float32(1.0)) * k
        np.clip(alpha, 0.0, 1.0, out=alpha)
        v_abs, v_rel = profile(u, v, q)
        acc_a += alpha.sum(axis=0)
        acc_abs += (alpha * v_abs).sum(axis=0) if not np.isscalar(v_abs) else \
            np.float32(v_abs) * alpha.sum(axis=0)
        if v_rel is not None:
            term = (alpha * v_rel).sum(axis=0)
            acc_rel = term if acc_rel is None else acc_rel + term

    def down(m: np.ndarray) -> np.ndarray:
        m = m.reshape(ny, ss, nx, ss).mean(axis=(1, 3), dtype=np.float32) / np.float32(n_sub)
        return _defocus(m, optics.defocus_px, cv2.BORDER_CONSTANT)

    return _Patch(y_lo, x_lo, down(acc_a), down(acc_abs),
                  None if acc_rel is None else down(acc_rel))


def _ball_profile(spec: ClipSpec) -> Profile:
    if spec.polarity == "dark":
        level = _BACKLIGHT_DN * (1.0 - _BALL_CONTRAST)
        hu, hv = _HIGHLIGHT_UV
        c = np.float32(-0.5 / _HIGHLIGHT_SIGMA ** 2)

        def dark(u: np.ndarray, v: np.ndarray, q: np.ndarray) -> tuple[object, object]:
            if not spec.highlight:
                return level, None
            # separable Gaussian spot: two small exponentials, one broadcast product
            spot = np.exp(c * (u - np.float32(hu)) ** 2) * np.exp(c * (v - np.float32(hv)) ** 2)
            return np.float32(level) + np.float32(_HIGHLIGHT_DN) * spot, None
        return dark

    half = _LIGHT_DIR + np.array([0.0, 0.0, 1.0])
    half = (half / np.linalg.norm(half)).astype(np.float32)
    light = _LIGHT_DIR.astype(np.float32)

    def bright(u: np.ndarray, v: np.ndarray, q: np.ndarray) -> tuple[object, object]:
        # normal of the visible hemisphere; beyond the rim (only inside the anti-aliasing ramp)
        # the rim normal is used
        inv = np.float32(1.0) / np.sqrt(np.maximum(q, np.float32(1.0)))
        nz = np.sqrt(np.clip(np.float32(1.0) - q, 0.0, 1.0))
        lam = np.clip((u * light[0] + v * light[1]) * inv + nz * light[2], 0.0, None)
        glint = np.clip((u * half[0] + v * half[1]) * inv + nz * half[2], 0.0, None) ** _SHININESS
        return np.float32(30.0) + np.float32(150.0) * (np.float32(0.3) + np.float32(0.7) * lam) \
            + np.float32(90.0) * glint, None
    return bright


def _bubble_profile(spec: ClipSpec) -> Profile:
    dark = spec.polarity == "dark"

    def prof(u: np.ndarray, v: np.ndarray, q: np.ndarray) -> tuple[object, object]:
        rim = _smoothstep((np.sqrt(q) - np.float32(0.55)) / np.float32(0.3))
        if dark:          # refraction: dark rim, core brighter than the back-light
            return 0.0, np.float32(1.15) - np.float32(0.8) * rim
        return np.float32(45.0) * rim, 1.0   # top light: bright rim on the dark background
    return prof


def _bubble_geom(spec: ClipSpec) -> Geometry:
    rng = _streams(spec)["bubble"]
    phase, phase2 = rng.uniform(0.0, 2.0 * math.pi, 2)
    geo = _geometry(spec)
    ppm, hm = spec.px_per_mm, spec.horizontal_magnification
    r = 0.5 * spec.bubble_diameter_mm * ppm
    y_start = spec.height_px - 1 + r + 2.0
    x_mid = spec.axis_x + 0.35 * geo.inner_half_px
    wobble = 0.3 * ppm * hm

    def geom(t: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        t = np.asarray(t, dtype=float)
        cx = x_mid + wobble * np.sin(2 * math.pi * 2.5 * t + phase)
        cy = y_start - spec.bubble_speed_mm_s * ppm * t
        squash = 0.08 * np.sin(2 * math.pi * 4.0 * t + phase2)
        return cx, cy, r * hm * (1.0 + squash), r * (1.0 - squash)
    return geom


def _ball_geom(spec: ClipSpec, tr: _Track) -> Geometry:
    a = 0.5 * spec.ball_diameter_mm * spec.px_per_mm * spec.horizontal_magnification
    b = 0.5 * spec.ball_diameter_mm * spec.px_per_mm

    def geom(t: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        x, y = tr.xy_px(t)
        return x, y, a, b
    return geom


def _hand_shapes(spec: ClipSpec, tr: _Track,
                 t: float) -> tuple[list[tuple[float, ...]], tuple[float, ...]] | None:
    """Tweezers and hand at time t (None when out of view), scene px.

    Two capsules (x0, y0, x1, y1, half-width, level), the first ends at the ball's release
    point, and the palm ellipse (centre x, centre y, semi-axis along the prongs, across, level).
    """
    p = float(_hand_presence(spec, tr.drop.release_t_s, t))
    if p <= 0:
        return None
    ppm = spec.px_per_mm
    xr, yr = (float(v) for v in tr.xy_px(tr.drop.release_t_s))
    a_ball = 0.5 * spec.ball_diameter_mm * ppm * spec.horizontal_magnification
    d = np.array([math.sin(math.radians(30.0)), -math.cos(math.radians(30.0))])
    prong = max(60.0, 35.0 * ppm)
    half_w = max(1.0, 0.3 * ppm)
    palm = (45.0 * ppm, 28.0 * ppm)
    shift = (1.0 - p) * (prong + 2.0 * palm[0] + 40.0)      # withdrawn along the prongs
    ox, oy = d * shift
    dark = spec.polarity == "dark"
    metal = 45.0 if dark else 110.0
    caps = []
    for s in (-1.0, 1.0):
        x0 = xr + s * (a_ball + half_w + 0.5) + ox
        y0 = yr + oy
        caps.append((x0, y0, xr + d[0] * prong + s * 2 * half_w + ox,
                     yr + d[1] * prong + oy, half_w, metal))
    centre = (xr + d[0] * (prong + palm[1]) + ox, yr + d[1] * (prong + palm[1]) + oy)
    return caps, (centre[0], centre[1], palm[0], palm[1], 60.0 if dark else 85.0)


def _draw_hand(buf: np.ndarray, pad: int, spec: ClipSpec, tr: _Track, t: float) -> None:
    shapes = _hand_shapes(spec, tr, t)
    if shapes is None:
        return
    caps, (ex, ey, ea, eb, elevel) = shapes
    xs_all = [c[0] for c in caps] + [c[2] for c in caps] + [ex - ea, ex + ea]
    ys_all = [c[1] for c in caps] + [c[3] for c in caps] + [ey - ea, ey + ea]
    hh, ww = buf.shape
    x_lo = max(0, math.floor(min(xs_all) - 3) + pad)
    x_hi = min(ww - 1, math.ceil(max(xs_all) + 3) + pad)
    y_lo = max(0, math.floor(min(ys_all) - 3) + pad)
    y_hi = min(hh - 1, math.ceil(max(ys_all) + 3) + pad)
    if x_lo > x_hi or y_lo > y_hi:
        return
    xs = np.arange(x_lo, x_hi + 1, dtype=float)[None, :] - pad
    ys = np.arange(y_lo, y_hi + 1, dtype=float)[:, None] - pad
    region = buf[y_lo:y_hi + 1, x_lo:x_hi + 1]
    # palm: ellipse with its long axis along the prongs
    ang = math.atan2(-math.cos(math.radians(30.0)), math.sin(math.radians(30.0)))
    ca, sa = math.cos(ang), math.sin(ang)
    pu = ((xs - ex) * ca + (ys - ey) * sa) / ea
    pv = (-(xs - ex) * sa + (ys - ey) * ca) / eb
    rho = np.hypot(pu, pv)
    alpha = np.clip(0.5 - (rho - 1.0) * eb, 0.0, 1.0)
    region *= 1.0 - alpha
    region += alpha * elevel
    for x0, y0, x1, y1, hw, level in caps:
        vx, vy = x1 - x0, y1 - y0
        lam = np.clip(((xs - x0) * vx + (ys - y0) * vy) / (vx * vx + vy * vy), 0.0, 1.0)
        dist = np.hypot(xs - x0 - lam * vx, ys - y0 - lam * vy)
        alpha = np.clip(0.5 - (dist - hw), 0.0, 1.0)
        region *= 1.0 - alpha
        region += alpha * level


def _distractor_table(spec: ClipSpec, tracks: Sequence[_Track], t: np.ndarray, dx: np.ndarray,
                      dy: np.ndarray) -> pd.DataFrame:
    rows = []
    w, h = spec.width_px, spec.height_px
    if spec.bubble:
        cx, cy, _, _ = _bubble_geom(spec)(t)
        keep = ((cx + dx > -0.5) & (cx + dx < w - 0.5) & (cy + dy > -0.5) & (cy + dy < h - 0.5))
        for i in np.nonzero(keep)[0]:
            rows.append((int(i), float(t[i]), "bubble", float(cx[i]), float(cy[i])))
    if spec.hand:
        for tr in tracks:
            for i, ti in enumerate(t):
                shapes = _hand_shapes(spec, tr, float(ti))
                if shapes is None:
                    continue
                x0, y0 = shapes[0][0][0], shapes[0][0][1]
                x1, y1 = shapes[0][1][0], shapes[0][1][1]
                tip = (0.5 * (x0 + x1), 0.5 * (y0 + y1))
                if -0.5 < tip[0] + dx[i] < w - 0.5 and -0.5 < tip[1] + dy[i] < h - 0.5:
                    rows.append((i, float(ti), "hand", tip[0], tip[1]))
    return pd.DataFrame(rows, columns=["frame", "t_s", "kind", "x_px", "y_px"])


# ============================================================================================
# Frames
# ============================================================================================

@dataclass(frozen=True)
class RenderedFrame:
    """One rendered frame.

    Attributes
    ----------
    index : int
        Frame index, 0-based.
    t_s : float
        Physical time (middle of row 0's exposure), s.
    pts_s : float
        Stored presentation time, s.
    image : ndarray of shape (height_px, width_px), uint8
        Displayed orientation.
    stored : ndarray of shape ``spec.stored_shape``, uint8
        Stored (sensor) orientation: what goes into the encoder.
    """

    index: int
    t_s: float
    pts_s: float
    image: np.ndarray = field(repr=False)
    stored: np.ndarray = field(repr=False)


def render(spec: ClipSpec) -> Iterator[RenderedFrame]:
    """Render the clip frame by frame (a generator: memory flat in clip length).

    Parameters
    ----------
    spec : ClipSpec

    Yields
    ------
    RenderedFrame
        In presentation order. The same spec (and seed) always gives the same pixels.
    """
    t_all = frame_times_s(spec)
    pts_all = presentation_times_s(spec)
    tracks = _make_tracks(spec)
    dx_all, dy_all = _shake_px(spec, t_all)
    pad = int(math.ceil(max(np.max(np.abs(dx_all)), np.max(np.abs(dy_all))))) + 2 \
        if (spec.shake_px > 0 or spec.jolt_t_s) else 0
    behind, fg, fg_level = _static_layers(spec, pad)
    scene = behind if fg is None else behind * (1.0 - fg) + fg_level * fg
    h, w = spec.height_px, spec.width_px
    bounds = (-pad, -pad, w - 1 + pad, h - 1 + pad)
    rows_s = spec.stored_shape[0]
    optics = _Optics(spec.exposure, spec.readout_s, rows_s, _row_map(spec), spec.defocus_px)
    sprites = [(_bubble_geom(spec), _bubble_profile(spec))] if spec.bubble else []
    sprites += [(_ball_geom(spec, tr), _ball_profile(spec)) for tr in tracks]
    streams = _streams(spec)
    noise_rng = streams["noise"]
    pool = None
    if spec.noise_dn > 0:
        pool = noise_rng.standard_normal(
            (_NOISE_POOL, h + _NOISE_MARGIN_PX, w + _NOISE_MARGIN_PX), dtype=np.float32)
        pool *= np.float32(spec.noise_dn)
    # flicker: light ∝ 1 + f sin(2π·2·mains·t + φ), averaged over each row's exposure
    f_light = 2.0 * spec.mains_hz
    flicker_amp = spec.flicker * float(np.sinc(f_light * spec.exposure))
    flicker_phase = float(streams["flicker"].uniform(0.0, 2.0 * math.pi))
    a_row, b_row, c_row = optics.row_map
    along_x = a_row != 0
    line = (np.arange(w, dtype=float) if along_x else np.arange(h, dtype=float))
    line_rows = (a_row if along_x else b_row) * line + c_row
    duplicates = set(spec.duplicate_frames)
    previous = None
    for i, (t, pts) in enumerate(zip(t_all, pts_all)):
        t, pts = float(t), float(pts)
        if i in duplicates and previous is not None:
            yield RenderedFrame(i, t, pts, previous.image, previous.stored)
            continue
        shake = (float(dx_all[i]), float(dy_all[i]))
        buf = scene.copy()
        patches = [_render_sprite(geom, prof, t, optics, shake, bounds)
                   for geom, prof in sprites]
        patches = [p for p in patches if p is not None]
        if patches:
            # redraw the union of the patches from the background behind the sprites, then put
            # the occluding marks back in front
            y0 = min(p.y0 for p in patches) + pad
            x0 = min(p.x0 for p in patches) + pad
            y1 = max(p.y0 + p.alpha.shape[0] for p in patches) + pad
            x1 = max(p.x0 + p.alpha.shape[1] for p in patches) + pad
            under = behind[y0:y1, x0:x1]
            region = under.copy()
            for p in patches:
                sl = (slice(p.y0 + pad - y0, p.y0 + pad - y0 + p.alpha.shape[0]),
                      slice(p.x0 + pad - x0, p.x0 + pad - x0 + p.alpha.shape[1]))
                out = region[sl] * (1.0 - p.alpha) + p.v_abs
                if p.v_rel is not None:
                    out += p.v_rel * under[sl]
                region[sl] = out
            if fg is not None:
                a = fg[y0:y1, x0:x1]
                region = region * (1.0 - a) + fg_level * a
            buf[y0:y1, x0:x1] = region
        if spec.hand:
            for tr in tracks:
                _draw_hand(buf, pad, spec, tr, t)
        if pad:
            m = np.array([[1.0, 0.0, pad - shake[0]], [0.0, 1.0, pad - shake[1]]])
            buf = cv2.warpAffine(buf, m, (w, h), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                                 borderMode=cv2.BORDER_REPLICATE)
        gain = _exposure_gain(spec, t)
        if flicker_amp:
            g_line = gain * (1.0 + flicker_amp * np.sin(
                2 * math.pi * f_light * (t + spec.readout_s / rows_s * line_rows) + flicker_phase))
            g_line = g_line.astype(np.float32)
            buf *= g_line[None, :] if along_x else g_line[:, None]
        elif gain != 1.0:
            buf *= np.float32(gain)
        if pool is not None:
            k = int(noise_rng.integers(_NOISE_POOL))
            oy, ox = (int(v) for v in noise_rng.integers(0, _NOISE_MARGIN_PX + 1, 2))
            # σ(I)/noise_dn = √(read² + (1 − read²) I/128); the content is never negative here
            sigma = cv2.addWeighted(buf, (1 - _READ_NOISE ** 2) / _NOISE_REF_DN, buf, 0.0,
                                    _READ_NOISE ** 2)
            cv2.sqrt(sigma, sigma)
            cv2.multiply(sigma, pool[k, oy:oy + h, ox:ox + w], dst=sigma)
            cv2.add(buf, sigma, dst=buf)
        cv2.max(buf, 0.0, dst=buf)
        image = cv2.convertScaleAbs(buf)      # rounds and saturates to 0 … 255
        stored = image if spec.rotation_deg == 0 else np.ascontiguousarray(
            _to_stored(image, spec.rotation_deg))
        previous = RenderedFrame(i, t, pts, image, stored)
        yield previous


# ============================================================================================
# Files
# ============================================================================================

def write_clip(spec: ClipSpec, path: str | Path) -> Truth:
    """Render the clip and encode it with a real codec; return its truth.

    Parameters
    ----------
    spec : ClipSpec
        ``codec``, ``container``, ``crf``, ``bit_rate``, ``gop`` and ``rotation_deg`` go to the
        encoder (for ``"mjpeg"`` ``crf`` is the JPEG quantiser scale, 2–31); slow-motion clips
        carry ``capture_fps`` as capture-rate metadata. The encoder needs even frame sizes and,
        for AVI, times on a fixed grid.
    path : str or Path
        Output file; its suffix must match ``spec.container``.

    Returns
    -------
    Truth
    """
    from tracker import encode

    path = Path(path)
    _check(path.suffix.lower() == f".{spec.container}",
           f"path = {str(path)!r}: suffix does not match ClipSpec.container = "
           f"{spec.container!r}; expected a .{spec.container} file")
    nominal = None                       # VFR: the encoder takes the median interval
    if spec.frame_times_s is None:
        nominal = spec.stored_fps if spec.stored_fps is not None else spec.capture_fps
    encode.write_clip(
        path, (f.stored for f in render(spec)), presentation_times_s(spec),
        codec=spec.codec, fps_hint=nominal, rotation_deg=spec.rotation_deg,
        capture_fps_metadata=spec.capture_fps if spec.stored_fps is not None else None,
        crf=spec.crf, bit_rate=spec.bit_rate, gop=spec.gop,
    )
    return truth(spec)


def rig_dict(spec: ClipSpec, *, liquid: dict | None = None, ball: dict | None = None) -> dict:
    """Rig-file tables (INTERFACE.md key names) that describe a synthetic clip.

    Parameters
    ----------
    spec : ClipSpec
    liquid : dict, optional
        The ``[liquid]`` table; omitted when not given (the clip does not define a liquid).
    ball : dict, optional
        Extra ``[ball]`` keys (e.g. ``density_kg_m3``) merged over ``diameter_mm``.

    Returns
    -------
    dict
        ``ball``, ``tube``, ``scale`` (two ruler ticks, ``distance_mm``, ``distance_u_mm``,
        ``plane`` and its optics keys), ``camera`` (``capture_fps`` for slow motion,
        ``readout_ms`` with a rolling shutter; omitted when empty), ``marks`` (when any), and
        ``liquid`` when given.
    """
    geo = _geometry(spec)
    x = geo.ruler_x_px + 0.5
    y1 = spec.z0_y_px
    y2 = spec.z0_y_px + geo.scale_mm * geo.ruler_px_per_mm
    scale: dict = {"points_px": [[float(x), float(y1)], [float(x), float(y2)]],
                   "distance_mm": float(geo.scale_mm),
                   "distance_u_mm": 0.1,   # reading a mm ruler to ±0.1 mm (common practice)
                   "plane": spec.scale_plane}
    if spec.scale_plane != "ball-plane":
        scale.update(camera_distance_mm=float(spec.camera_distance_mm),
                     tube_wall_mm=float(spec.tube_wall_mm),
                     wall_refractive_index=float(spec.wall_refractive_index),
                     liquid_refractive_index=float(spec.liquid_refractive_index))
        if spec.scale_plane == "in-air":
            scale["ruler_offset_mm"] = float(spec.ruler_offset_mm)
    out: dict = {}
    if liquid is not None:
        out["liquid"] = dict(liquid)
    out["ball"] = {"diameter_mm": float(spec.ball_diameter_mm), **(ball or {})}
    out["tube"] = {"inner_diameter_mm": float(spec.tube_inner_diameter_mm)}
    out["scale"] = scale
    camera = {}
    if spec.stored_fps is not None:
        camera["capture_fps"] = float(spec.capture_fps)
    if spec.readout_s > 0:
        camera["readout_ms"] = float(spec.readout_s * 1e3)
    if camera:
        out["camera"] = camera
    if spec.marks_mm:
        out["marks"] = {"points_px": [[float(spec.axis_x), float(spec.z0_y_px + z * spec.px_per_mm)]
                                      for z in spec.marks_mm]}
    return out
