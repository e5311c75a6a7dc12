"""Lens distortion: the Brown–Conrady model (OpenCV convention) and its calibration from a clip.

Phone wide-angle lenses bend straight lines outward-in (barrel distortion), more and more
towards the frame edges: a millimetre near the edge covers fewer pixels than one at the centre,
so a scale taken from two points and a track running elsewhere in the frame disagree. A
:class:`LensModel` maps *measured* (distorted) pixel positions of the displayed frame to *ideal*
(undistorted, pinhole) pixel positions; :class:`tracker.scale.Scale` applies it in ``to_mm`` —
the one place where pixels become millimetres — and to its own scale points.

Model (physics-references.md §10; Brown–Conrady, as in OpenCV, from memory): with the camera
matrix K (focal lengths f_x, f_y and principal point c_x, c_y, px) an ideal point has normalized
coordinates x = (u − c_x)/f_x, y = (v − c_y)/f_y, r² = x² + y², and is seen at

    x_d = x (1 + k1 r² + k2 r⁴ + k3 r⁶) + 2 p1 x y + p2 (r² + 2 x²)
    y_d = y (1 + k1 r² + k2 r⁴ + k3 r⁶) + p1 (r² + 2 y²) + 2 p2 x y

(u_d = f_x x_d + c_x, v_d = f_y y_d + c_y). Undistortion inverts this iteratively
(``cv2.undistortPoints`` with P = K and :data:`UNDISTORT_CRITERIA`: up to 100 iterations,
|Δ| < 1e-12 in normalized units, which keeps the round trip below 1e-6 px at the corners of a
phone frame with a few % of distortion; the tests check ≤ 0.01 px). Coordinates: displayed frame
(rotation applied), origin at the top-left pixel's centre — the same convention as the corner
detector, so a calibration made with :func:`calibrate_clip` applies as it is.

A calibration holds only for the frame size (and zoom) it was made at: ``image_size_px`` is part
of the model and the tracker refuses a clip of another size.

:func:`calibrate_clip` finds a printed checkerboard (inner corners ``COLS × ROWS``, squares of
known size) in up to :data:`MAX_VIEWS` frames spread through a clip, refines the corners to
sub-pixel precision and runs Zhang's method (``cv2.calibrateCamera``).
"""

from __future__ import annotations

import math
import pathlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import cv2
import numpy as np

from tracker.errors import TrackingError

__all__ = ["LensModel", "LensCalibration", "LensMismatchError", "calibrate_clip",
           "reach_fraction", "UNDISTORT_CRITERIA", "MAX_VIEWS", "MIN_VIEWS", "MAX_RMS_PX",
           "WARN_RMS_PX", "OUTER_REACH_WARN"]

#: Termination of the iterative undistortion: at most 100 iterations or a step below 1e-12
#: (normalized coordinates). OpenCV's default (5 iterations) leaves ~0.1–1 px at the corners of
#: a strongly distorted frame.
UNDISTORT_CRITERIA = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 100, 1e-12)
#: Views used for the calibration at most (spread through the clip).
MAX_VIEWS = 30
#: Fewer views with the board found than this: no calibration (exit 4 on the command line).
MIN_VIEWS = 5
#: A calibration whose RMS reprojection error exceeds this is refused (exit 4 on the command line):
#: the board was misread (a wrong --board picks a sub-board whose corners shift between views) or
#: the views are blurred; above WARN_RMS_PX a warning. A sharp printed board gives ~0.1–0.3 px
#: (common practice, no source).
MAX_RMS_PX = 1.0
WARN_RMS_PX = 0.5
#: A view whose own RMS exceeds this many times the median (and _VIEW_OUTLIER_MIN_PX) is left out.
_VIEW_OUTLIER_FACTOR = 3.0
_VIEW_OUTLIER_MIN_PX = 0.5
#: Frames tried for the board: up to this many times MAX_VIEWS, evenly through the clip.
_TRY_FACTOR = 3
#: Detection runs on a copy at most this wide (speed); corners are refined at full size.
_DETECT_MAX_WIDTH_PX = 960
#: Coverage grid (cells per axis) for the coverage figures.
_GRID = 8
#: Warn when detected corners reach less than this fraction of the way from the frame centre
#: to its corners (the model is then extrapolated in the outer part of the frame).
OUTER_REACH_WARN = 0.8


class LensMismatchError(ValueError):
    """A lens calibration applied to a clip of another frame size (a rig problem: exit 2)."""


def _pair(name: str, value: Any, n: int, *, positive: bool = False) -> tuple[float, ...]:
    try:
        vals = tuple(float(v) for v in value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} = {value!r} must be a list of {n} numbers") from None
    if len(vals) != n or not all(math.isfinite(v) for v in vals):
        raise ValueError(f"{name} = {value!r} must be a list of {n} finite numbers")
    if positive and min(vals) <= 0:
        raise ValueError(f"{name} = {value!r} must be > 0")
    return vals


@dataclass(frozen=True)
class LensModel:
    """Brown–Conrady lens model of the displayed frame (OpenCV convention).

    Attributes
    ----------
    image_size_px : (int, int)
        Width and height of the displayed frame the calibration was made at, px.
    focal_length_px : (float, float)
        f_x, f_y, px.
    principal_point_px : (float, float)
        c_x, c_y, px (displayed frame, origin at the top-left pixel's centre).
    radial_coefficients : (float, float, float)
        k1, k2, k3.
    tangential_coefficients : (float, float)
        p1, p2.
    """

    image_size_px: tuple[int, int]
    focal_length_px: tuple[float, float]
    principal_point_px: tuple[float, float]
    radial_coefficients: tuple[float, float, float]
    tangential_coefficients: tuple[float, float] = (0.0, 0.0)

    def __post_init__(self) -> None:
        size = self.image_size_px
        if (not isinstance(size, (tuple, list)) or len(size) != 2
                or not all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) and v >= 8
                           for v in size)):
            raise ValueError(f"image_size_px = {size!r} must be [width, height], whole pixels ≥ 8")
        object.__setattr__(self, "image_size_px", (int(size[0]), int(size[1])))
        object.__setattr__(self, "focal_length_px",
                           _pair("focal_length_px", self.focal_length_px, 2, positive=True))
        pp = _pair("principal_point_px", self.principal_point_px, 2)
        w, h = self.image_size_px
        if not (0.0 <= pp[0] <= w - 1 and 0.0 <= pp[1] <= h - 1):
            raise ValueError(f"principal_point_px = {list(pp)} must lie inside the "
                             f"{w}×{h} frame (0 … {w - 1}, 0 … {h - 1} px)")
        object.__setattr__(self, "principal_point_px", pp)
        object.__setattr__(self, "radial_coefficients",
                           _pair("radial_coefficients", self.radial_coefficients, 3))
        object.__setattr__(self, "tangential_coefficients",
                           _pair("tangential_coefficients", self.tangential_coefficients, 2))
        fold = self._fold_radius_fraction()
        if fold is not None:
            raise ValueError(
                f"radial_coefficients = {list(self.radial_coefficients)} fold the image back on "
                f"itself at {100 * fold:.0f} % of the way from the centre to the frame corner; "
                "expected a distortion that grows monotonically over the whole frame")

    # -- matrices ------------------------------------------------------------------------------
    def camera_matrix(self) -> np.ndarray:
        """K, 3 × 3."""
        fx, fy = self.focal_length_px
        cx, cy = self.principal_point_px
        return np.array([[fx, 0.0, cx], [0.0, fy, cy], [0.0, 0.0, 1.0]])

    def dist_coeffs(self) -> np.ndarray:
        """(k1, k2, p1, p2, k3), OpenCV's order."""
        k1, k2, k3 = self.radial_coefficients
        p1, p2 = self.tangential_coefficients
        return np.array([k1, k2, p1, p2, k3])

    @property
    def is_identity(self) -> bool:
        """True when every coefficient is zero (the model changes nothing)."""
        return not any(self.radial_coefficients) and not any(self.tangential_coefficients)

    # -- mapping -------------------------------------------------------------------------------
    def undistort_px(self, x_px: Any, y_px: Any) -> tuple[np.ndarray, np.ndarray]:
        """Measured (distorted) pixel positions → ideal (undistorted) pixel positions.

        Parameters
        ----------
        x_px, y_px : float or array-like of the same shape
            Positions in the displayed frame, px.

        Returns
        -------
        (ndarray, ndarray)
            Ideal positions (same camera matrix), px, in the input's shape.
        """
        x = np.asarray(x_px, dtype=float)
        y = np.asarray(y_px, dtype=float)
        shape = np.broadcast_shapes(x.shape, y.shape)
        pts = np.stack(np.broadcast_arrays(x, y), axis=-1).reshape(-1, 1, 2)
        if pts.shape[0] == 0:
            return np.zeros(shape), np.zeros(shape)
        k = self.camera_matrix()
        out = cv2.undistortPoints(pts, k, self.dist_coeffs(), R=None, P=k,
                                  criteria=UNDISTORT_CRITERIA).reshape(-1, 2)
        return out[:, 0].reshape(shape), out[:, 1].reshape(shape)

    def distort_px(self, x_px: Any, y_px: Any) -> tuple[np.ndarray, np.ndarray]:
        """Ideal pixel positions → where the lens shows them (the forward model, closed form).

        Parameters
        ----------
        x_px, y_px : float or array-like of the same shape
            Ideal positions, px.

        Returns
        -------
        (ndarray, ndarray)
            Distorted positions, px.
        """
        fx, fy = self.focal_length_px
        cx, cy = self.principal_point_px
        k1, k2, k3 = self.radial_coefficients
        p1, p2 = self.tangential_coefficients
        x = (np.asarray(x_px, dtype=float) - cx) / fx
        y = (np.asarray(y_px, dtype=float) - cy) / fy
        r2 = x * x + y * y
        radial = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3))
        xd = x * radial + 2.0 * p1 * x * y + p2 * (r2 + 2.0 * x * x)
        yd = y * radial + p1 * (r2 + 2.0 * y * y) + 2.0 * p2 * x * y
        return xd * fx + cx, yd * fy + cy

    def _fold_radius_fraction(self) -> float | None:
        """Where r_d(r) stops growing before the frame corner is reached (None: monotonic)."""
        k1, k2, k3 = self.radial_coefficients
        w, h = self.image_size_px
        cx, cy = self.principal_point_px
        fx, fy = self.focal_length_px
        corners = [((u - cx) / fx, (v - cy) / fy) for u in (0.0, w - 1.0) for v in (0.0, h - 1.0)]
        rd_max = max(math.hypot(*c) for c in corners)
        r = np.linspace(0.0, 4.0 * rd_max + 1.0, 40001)
        rd = r * (1.0 + k1 * r ** 2 + k2 * r ** 4 + k3 * r ** 6)
        reached = np.nonzero(rd >= rd_max)[0]
        stop = int(reached[0]) if reached.size else r.size
        falling = np.nonzero(np.diff(rd[: stop + 1]) <= 0)[0]
        if falling.size:
            return float(rd[falling[0]] / rd_max)
        if not reached.size:
            return 1.0
        return None

    # -- records -------------------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dict with the rig-file key names."""
        return {"image_size_px": list(self.image_size_px),
                "focal_length_px": list(self.focal_length_px),
                "principal_point_px": list(self.principal_point_px),
                "radial_coefficients": list(self.radial_coefficients),
                "tangential_coefficients": list(self.tangential_coefficients)}

    @classmethod
    def from_dict(cls, table: Mapping[str, Any]) -> LensModel:
        """Build from a ``[lens]`` table (rig-file key names; ``tangential_coefficients``
        optional). Raises ValueError naming the key for a bad value."""
        return cls(tuple(table["image_size_px"]), tuple(table["focal_length_px"]),
                   tuple(table["principal_point_px"]), tuple(table["radial_coefficients"]),
                   tuple(table.get("tangential_coefficients", (0.0, 0.0))))

    def to_toml(self, comment: str = "") -> str:
        """The ``[lens]`` table as rig-file TOML text (ends with a newline)."""
        def nums(values: Sequence[float]) -> str:
            return "[" + ", ".join(f"{float(v):.10g}" for v in values) + "]"

        head = "[lens]" + (f"                               # {comment}" if comment else "")
        w, h = self.image_size_px
        return (f"{head}\n"
                f"image_size_px = [{w}, {h}]         # frame size the calibration was made at\n"
                f"focal_length_px = {nums(self.focal_length_px)}\n"
                f"principal_point_px = {nums(self.principal_point_px)}\n"
                f"radial_coefficients = {nums(self.radial_coefficients)}      # k1, k2, k3\n"
                f"tangential_coefficients = {nums(self.tangential_coefficients)}          # p1, p2\n")

    def check_frame(self, width_px: int, height_px: int, clip_name: str) -> None:
        """Raise :class:`LensMismatchError` when the clip's displayed size is not the model's."""
        if (int(width_px), int(height_px)) != self.image_size_px:
            w, h = self.image_size_px
            raise LensMismatchError(
                f"{clip_name} is {width_px}×{height_px} px but the [lens] calibration was made at "
                f"{w}×{h} px (image_size_px); a calibration holds only for the frame size and zoom it was made at "
                "(calibrate again with `fallcam lens` at this size)")


# ============================================================================================
# Calibration from a clip
# ============================================================================================

@dataclass(frozen=True)
class LensCalibration:
    """Result of :func:`calibrate_clip`.

    Attributes
    ----------
    lens : LensModel
    rms_px : float
        RMS reprojection error over all corners of the views used, px.
    n_views : int
        Views (frames with the board found) used.
    n_frames : int
        Frames in the clip.
    n_tried : int
        Frames searched for the board.
    n_found : int
        Of those, frames where the board was found.
    frames_used : list of int
        Frame indices of the views used.
    coverage_fraction : float
        Fraction of the cells of an 8 × 8 grid over the frame holding a detected corner.
    outer_coverage_fraction : float
        The same for the 28 cells of the grid's outer ring.
    reach_fraction : float
        How far the farthest corner got from the frame centre towards the frame corner (0 … 1).
    board : (int, int)
        Inner corners per row and column (COLS, ROWS).
    square_mm : float
        Side of a square, mm.
    per_view_rms_px : list of float
        RMS reprojection error of each view used, px.
    warnings : list of str
    """

    lens: LensModel
    rms_px: float
    n_views: int
    n_frames: int
    n_tried: int
    n_found: int
    frames_used: list[int]
    coverage_fraction: float
    outer_coverage_fraction: float
    reach_fraction: float
    board: tuple[int, int]
    square_mm: float
    per_view_rms_px: list[float] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dict."""
        return {"lens": self.lens.to_dict(), "rms_px": float(self.rms_px),
                "n_views": int(self.n_views), "n_frames": int(self.n_frames),
                "n_tried": int(self.n_tried), "n_found": int(self.n_found),
                "frames_used": [int(i) for i in self.frames_used],
                "coverage_fraction": float(self.coverage_fraction),
                "outer_coverage_fraction": float(self.outer_coverage_fraction),
                "reach_fraction": float(self.reach_fraction),
                "board": list(self.board), "square_mm": float(self.square_mm),
                "per_view_rms_px": [float(v) for v in self.per_view_rms_px],
                "warnings": list(self.warnings)}

    def to_toml(self, clip_name: str) -> str:
        """The ``[lens]`` table with a comment naming the clip and the fit."""
        return self.lens.to_toml(f"from `fallcam lens {clip_name}`: RMS {self.rms_px:.3f} px, "
                                 f"{self.n_views} views")


def _find_board(luma: np.ndarray, board: tuple[int, int]) -> np.ndarray | None:
    """Sub-pixel inner corners of the board in one frame (N × 1 × 2 float32), or None."""
    h, w = luma.shape
    factor = min(1.0, _DETECT_MAX_WIDTH_PX / w)
    small = luma if factor == 1.0 else cv2.resize(luma, (round(w * factor), round(h * factor)),
                                                  interpolation=cv2.INTER_AREA)
    flags = cv2.CALIB_CB_ADAPTIVE_THRESH | cv2.CALIB_CB_NORMALIZE_IMAGE | cv2.CALIB_CB_FAST_CHECK
    found, corners = cv2.findChessboardCorners(small, board, flags=flags)
    if not found:
        return None
    corners = corners.astype(np.float32)
    if factor != 1.0:  # pixel centres: x_full = (x_small + 0.5) / factor − 0.5
        corners = (corners + 0.5) / np.float32(factor) - 0.5
    # search window: a third of the smallest corner spacing, at least 3 px
    grid = corners.reshape(board[1], board[0], 2)
    spacing = min(float(np.min(np.linalg.norm(np.diff(grid, axis=1), axis=2))),
                  float(np.min(np.linalg.norm(np.diff(grid, axis=0), axis=2))))
    win = int(max(3, min(15, spacing / 3.0)))
    cv2.cornerSubPix(luma, corners, (win, win), (-1, -1),
                     (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 100, 1e-4))
    return corners


def _calibrate(obj: np.ndarray, image_points: list[np.ndarray], size: tuple[int, int]
               ) -> tuple[float, np.ndarray, np.ndarray, list[float]]:
    """Zhang's method on the views: (RMS px, K, distortion (k1, k2, p1, p2, k3), per-view RMS px)."""
    rms, k, dist, rvecs, tvecs = cv2.calibrateCamera(
        [obj] * len(image_points), image_points, size, None, None,
        criteria=(cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 200, 1e-12))
    dist = np.asarray(dist, float).ravel()
    per_view = []
    for pts, rv, tv in zip(image_points, rvecs, tvecs):
        proj, _ = cv2.projectPoints(obj, rv, tv, k, dist)
        diff = proj.reshape(-1, 2) - np.asarray(pts, float).reshape(-1, 2)
        per_view.append(float(np.sqrt(np.mean(np.sum(diff ** 2, axis=1)))))
    return float(rms), k, dist, per_view


def _spread(indices: Sequence[int], n: int) -> list[int]:
    """Up to n items of a sorted list, evenly spread over it."""
    if len(indices) <= n:
        return list(indices)
    picks = np.unique(np.round(np.linspace(0, len(indices) - 1, n)).astype(int))
    return [indices[i] for i in picks]


def _coverage(points: np.ndarray, width: int, height: int) -> tuple[float, float, float]:
    gx = np.clip((points[:, 0] + 0.5) / width * _GRID, 0, _GRID - 1).astype(int)
    gy = np.clip((points[:, 1] + 0.5) / height * _GRID, 0, _GRID - 1).astype(int)
    hit = np.zeros((_GRID, _GRID), bool)
    hit[gy, gx] = True
    ring = np.ones_like(hit)
    ring[1:-1, 1:-1] = False
    reach = reach_fraction(points[:, 0], points[:, 1], width, height)
    return float(hit.mean()), float(hit[ring].mean()), min(reach, 1.0)


def reach_fraction(x_px: Any, y_px: Any, width_px: int, height_px: int) -> float:
    """How far points get from the frame centre towards its corners: the largest distance from
    the centre over the half-diagonal (0 at the centre, 1 at the corner pixels' centres; 0 for
    no points). Lens distortion is radial, so this is the measure of "near the edge"."""
    cx, cy = (width_px - 1) / 2.0, (height_px - 1) / 2.0
    r = np.hypot(np.asarray(x_px, float) - cx, np.asarray(y_px, float) - cy)
    return float(np.max(r) / math.hypot(cx, cy)) if r.size else 0.0


def calibrate_clip(path: str | pathlib.Path, board: tuple[int, int], square_mm: float, *,
                   max_views: int = MAX_VIEWS,
                   progress: Callable[[int, int | None], None] | None = None) -> LensCalibration:
    """Calibrate the lens from a clip of a printed checkerboard moved around the view.

    Parameters
    ----------
    path : str or path-like
        The clip. Read with :func:`tracker.video.iter_frames`, so the rotation is applied as
        for the analysis and the model belongs to the displayed frame.
    board : (int, int)
        Inner corners per row and per column (COLS, ROWS), each ≥ 2.
    square_mm : float
        Side of a square, mm (> 0; it sets only the poses' scale, not the lens model).
    max_views : int
        Views used at most (≥ MIN_VIEWS), spread through the clip.
    progress : callable, optional
        ``progress(n_frames_done, n_frames_total)`` after each decoded frame.

    Returns
    -------
    LensCalibration

    Raises
    ------
    tracker.errors.ClipError
        The clip cannot be read.
    tracker.errors.TrackingError
        The board was found in fewer than MIN_VIEWS frames.
    ValueError
        Bad ``board``, ``square_mm`` or ``max_views``.
    """
    from tracker.video import read_clip

    cols, rows = board
    if not all(isinstance(v, int) and not isinstance(v, bool) and v >= 2 for v in (cols, rows)):
        raise ValueError(f"board = {board!r}: expected inner corners COLS × ROWS, whole numbers ≥ 2")
    if not (isinstance(square_mm, (int, float)) and math.isfinite(square_mm) and square_mm > 0):
        raise ValueError(f"square_mm = {square_mm!r}: expected a square size > 0 mm")
    if not (isinstance(max_views, int) and max_views >= MIN_VIEWS):
        raise ValueError(f"max_views = {max_views!r}: expected a whole number ≥ {MIN_VIEWS}")
    info, frames = read_clip(path)
    n_total = info.n_frames if info.n_frames > 0 else None
    n_try = max_views * _TRY_FACTOR
    wanted: set[int] | None = None
    if n_total is not None:
        wanted = set(np.unique(np.round(np.linspace(0, n_total - 1, min(n_try, n_total)))
                               .astype(int)).tolist())
    found: dict[int, np.ndarray] = {}
    n_frames = n_tried = 0
    for frame in frames:
        n_frames += 1
        if not frame.duplicate and (wanted is None or frame.index in wanted):
            n_tried += 1
            corners = _find_board(frame.luma, (cols, rows))
            if corners is not None:
                found[frame.index] = corners
        if progress is not None:
            progress(n_frames, n_total)
    name = pathlib.Path(path).name
    if len(found) < MIN_VIEWS:
        raise TrackingError(
            f"{name}: a {cols}×{rows} checkerboard (inner corners) was found in {len(found)} of "
            f"{n_tried} frames searched; expected at least {MIN_VIEWS} views (check --board: "
            "inner corners, not squares; keep the whole board in view and sharp)")
    used = _spread(sorted(found), max_views)
    obj = np.zeros((rows * cols, 3), np.float32)
    obj[:, :2] = np.mgrid[0:cols, 0:rows].T.reshape(-1, 2) * np.float32(square_mm)
    w, h = info.width_px, info.height_px
    warnings: list[str] = []
    rms, k, dist, per_view = _calibrate(obj, [found[i] for i in used], (w, h))
    # a view that does not fit the others (a blurred or ghosted frame, a corner order flipped) is
    # left out once, and the rest calibrated again
    bad = [i for i, r in zip(used, per_view) if r > max(_VIEW_OUTLIER_FACTOR * float(np.median(per_view)),
                                                         _VIEW_OUTLIER_MIN_PX)]
    if bad and len(used) - len(bad) >= MIN_VIEWS:
        used = [i for i in used if i not in bad]
        rms, k, dist, per_view = _calibrate(obj, [found[i] for i in used], (w, h))
        warnings.append(f"{len(bad)} view(s) left out for not fitting the others (frames "
                        f"{', '.join(str(i) for i in bad)}): blurred, or the board only partly seen")
    if rms > MAX_RMS_PX:
        raise TrackingError(
            f"{name}: the calibration does not fit: RMS reprojection error {rms:.2f} px over "
            f"{len(used)} views (expected well under {MAX_RMS_PX:g} px); check --board (inner "
            "corners per row and column of the printed board), focus and motion blur")
    if rms > WARN_RMS_PX:
        warnings.append(f"RMS reprojection error {rms:.2f} px is high for a sharp, flat board "
                        f"(under {WARN_RMS_PX:g} px is usual): blur, a bent board or a wrong --board")
    try:
        lens = LensModel((w, h), (float(k[0, 0]), float(k[1, 1])), (float(k[0, 2]), float(k[1, 2])),
                         (float(dist[0]), float(dist[1]), float(dist[4])),
                         (float(dist[2]), float(dist[3])))
    except ValueError as exc:
        raise TrackingError(f"{name}: the calibration gave an unusable lens model ({exc}); film "
                            "the board in more places, including the frame corners") from None
    all_pts = np.concatenate([found[i].reshape(-1, 2) for i in used])
    cover, outer, reach = _coverage(all_pts, w, h)
    if reach < OUTER_REACH_WARN or outer < 0.5:
        warnings.append(
            f"the board's corners reached only {100 * reach:.0f} % of the way from the frame "
            f"centre to its corners and {100 * outer:.0f} % of the frame's outer border cells: "
            "the lens model is extrapolated in the outer part of the frame; film the board near "
            "the edges and corners too")
    if len(found) < 10:
        warnings.append(f"only {len(found)} views with the board; 10 or more in different "
                        "positions and tilts give a steadier calibration")
    return LensCalibration(lens, rms, len(used), n_frames, n_tried, len(found), used,
                           cover, outer, reach, (cols, rows), float(square_mm), per_view, warnings)
