"""An overlay video for checking the tracking by eye.

Every frame of the clip, in its displayed orientation, with the detected centre (a ring just
outside the ball and a cross at the centre), the trail of each passage so far (thin orange before
and after the plateau, thick green on the plateau used for the fit), the timing marks (yellow
lines; the crossing time appears once the ball has crossed), the two scale points (cyan) and the
frame's time. Written as H.264 through :func:`tracker.encode.write_clip` with the same frame times
as the source, so it plays like the original and can be stepped frame by frame.

The clip is decoded twice (once for the frame times the encoder needs up front, once to draw):
memory stays flat in clip length. Frames wider than :data:`MAX_WIDTH_PX` are scaled down.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import cv2
import numpy as np
import pandas as pd

from fallcam.report import finite_or_none
from tracker.encode import write_clip
from tracker.video import ClipInfo, iter_frames, read_clip

__all__ = ["MAX_WIDTH_PX", "write_overlay"]

MAX_WIDTH_PX = 1280
_RING_GAP_PX = 3.0  # the ring is drawn this far outside the ball's edge, so the ball stays visible
_DEFAULT_RADIUS_PX = 6.0  # ring radius when the trajectory has no diameter column
_SHIFT = 4  # cv2 fixed-point drawing: coordinates in 1/16 px
_DASH_PX = (14.0, 10.0)  # dash and gap of the timing-mark lines, overlay px
_PRESET = "veryfast"  # x264 speed preset: a checking video, speed matters more than file size
_GREEN = (40, 220, 40)
_ORANGE = (255, 150, 0)
_YELLOW = (255, 230, 0)
_CYAN = (0, 210, 255)
_WHITE = (255, 255, 255)
_FONT = cv2.FONT_HERSHEY_SIMPLEX


def write_overlay(clip_path: str | os.PathLike, traj: pd.DataFrame, summary: Mapping[str, Any],
                  out_path: str | os.PathLike, *,
                  progress: Callable[[int, int], None] | None = None) -> Path:
    """Write the overlay video of an analysed clip.

    Parameters
    ----------
    clip_path : str or path-like
        The source clip.
    traj : pandas.DataFrame
        Trajectory of the clip (DEVELOPERS.md columns): ``frame``, ``x_px``, ``y_px``, ``track``
        are required; ``in_plateau`` (bool) and ``diameter_v_px`` (px) are used when present.
    summary : mapping
        Summary of the analysis: ``rig.marks.points_px`` (timing marks, displayed frame, px),
        ``scale.p1_px`` / ``p2_px`` and per track ``marks[].crossing_s`` are drawn when present.
    out_path : str or path-like
        Output file, ``.mp4`` (or ``.mov`` / ``.mkv``); written atomically by the encoder.
    progress : callable, optional
        ``progress(n_done, n_total)`` in frames; the clip is read twice, so ``n_total`` is twice
        its frame count.

    Returns
    -------
    pathlib.Path
        The written file.

    Raises
    ------
    tracker.errors.ClipError
        The clip cannot be read.
    ValueError
        A required trajectory column is missing, or the output suffix is not a video container
        that takes H.264.
    """
    missing = [c for c in ("frame", "x_px", "y_px", "track") if c not in traj.columns]
    if missing:
        raise ValueError(f"trajectory: missing column(s) {', '.join(missing)}; expected frame, "
                         "x_px, y_px, track (DEVELOPERS.md)")
    info, first_pass = read_clip(clip_path)
    n_total = 2 * info.n_frames
    times_s = []
    for frame in first_pass:
        # stored (file) times: the overlay plays at the speed of the source, slow motion included
        times_s.append(frame.t_s / info.time_scale)
        if progress is not None:
            progress(len(times_s), n_total)
    layout = _Layout.for_size(info.width_px, info.height_px)
    tracks = _tracks(traj, layout)
    marks = _marks(summary, layout)
    scale_points = [layout.point(p) for p in _scale_points(summary)]
    crossings = _crossings(summary)

    def frames() -> Iterator[np.ndarray]:
        for frame in iter_frames(clip_path, info=info):
            rgb = cv2.cvtColor(layout.fit(frame.luma), cv2.COLOR_GRAY2RGB)
            _draw_frame(rgb, frame.index, frame.t_s, tracks, marks, scale_points, crossings,
                        layout)
            if progress is not None:
                progress(info.n_frames + frame.index + 1, n_total)
            yield rgb

    out = Path(out_path)
    write_clip(out, frames(), times_s, codec="h264", rotation_deg=0, fps_hint=_fps_hint(info),
               preset=_PRESET)
    return out


# ------------------------------------------------------------------------------ geometry


@dataclass(frozen=True)
class _Layout:
    """Scaling from the displayed frame to the overlay frame (even size for 4:2:0 H.264)."""

    scale: float
    width_in: int
    height_in: int
    width_out: int
    height_out: int
    thickness: int
    font_scale: float

    @classmethod
    def for_size(cls, width: int, height: int) -> _Layout:
        scale = min(1.0, MAX_WIDTH_PX / width)
        w_scaled, h_scaled = round(width * scale), round(height * scale)
        w_out, h_out = w_scaled + w_scaled % 2, h_scaled + h_scaled % 2  # pad to even
        return cls(scale=scale, width_in=width, height_in=height, width_out=w_out,
                   height_out=h_out, thickness=max(1, round(w_out / 640)),
                   font_scale=min(0.9, max(0.35, w_out / 1000)))

    def fit(self, luma: np.ndarray) -> np.ndarray:
        """Scale (area-averaged) and pad the luma plane to the overlay size."""
        img = luma
        if self.scale < 1.0:
            w_scaled = round(self.width_in * self.scale)
            h_scaled = round(self.height_in * self.scale)
            # area averaging is needed against aliasing only for strong reductions (4K → 720p);
            # for milder ones bilinear looks the same and is several times faster
            method = cv2.INTER_AREA if self.scale < 0.5 else cv2.INTER_LINEAR
            img = cv2.resize(luma, (w_scaled, h_scaled), interpolation=method)
        pad_b, pad_r = self.height_out - img.shape[0], self.width_out - img.shape[1]
        if pad_b or pad_r:
            img = cv2.copyMakeBorder(img, 0, pad_b, 0, pad_r, cv2.BORDER_REPLICATE)
        return img

    def coords(self, x_px: np.ndarray, y_px: np.ndarray) -> np.ndarray:
        """Displayed-frame px (origin at the top-left pixel's centre) → overlay px, shape (n, 2)."""
        return np.column_stack(((np.asarray(x_px, float) + 0.5) * self.scale - 0.5,
                                (np.asarray(y_px, float) + 0.5) * self.scale - 0.5))

    def point(self, xy: Sequence[float]) -> np.ndarray:
        return self.coords(np.array([xy[0]]), np.array([xy[1]]))[0]


def _fixed(xy: np.ndarray) -> np.ndarray:
    """Overlay px → cv2 fixed-point integer coordinates."""
    return np.rint(np.asarray(xy, float) * (1 << _SHIFT)).astype(np.int32)


@dataclass(frozen=True)
class _Track:
    track_id: int
    frames: np.ndarray  # (n,) int, sorted
    xy: np.ndarray  # (n, 2) overlay px
    radius: np.ndarray  # (n,) overlay px
    in_plateau: np.ndarray  # (n,) bool
    runs: list[tuple[int, int, bool]]  # contiguous [start, end) index runs with one plateau flag


def _tracks(traj: pd.DataFrame, layout: _Layout) -> list[_Track]:
    out = []
    for track_id, rows in traj.sort_values(["track", "frame"]).groupby("track", sort=True):
        ok = np.isfinite(rows["x_px"].to_numpy(float)) & np.isfinite(rows["y_px"].to_numpy(float))
        rows = rows[ok]
        if rows.empty:
            continue
        flag = (rows["in_plateau"].to_numpy(bool) if "in_plateau" in rows
                else np.zeros(len(rows), bool))
        if "diameter_v_px" in rows:
            diam = rows["diameter_v_px"].to_numpy(float)
            radius = np.where(np.isfinite(diam), 0.5 * diam, _DEFAULT_RADIUS_PX)
        else:
            radius = np.full(len(rows), _DEFAULT_RADIUS_PX)
        change = np.flatnonzero(np.diff(flag.astype(np.int8))) + 1
        bounds = [0, *change.tolist(), len(rows)]
        runs = [(a, b, bool(flag[a])) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]
        out.append(_Track(track_id=int(track_id), frames=rows["frame"].to_numpy(np.int64),
                          xy=layout.coords(rows["x_px"], rows["y_px"]),
                          radius=(radius + _RING_GAP_PX) * layout.scale, in_plateau=flag,
                          runs=runs))
    return out


def _marks(summary: Mapping[str, Any], layout: _Layout) -> list[np.ndarray]:
    points = ((summary.get("rig") or {}).get("marks") or {}).get("points_px") or []
    return [layout.point(p) for p in points if _is_point(p)]


def _scale_points(summary: Mapping[str, Any]) -> list[Sequence[float]]:
    scale = summary.get("scale") or {}
    return [p for p in (scale.get("p1_px"), scale.get("p2_px")) if _is_point(p)]


def _is_point(p: Any) -> bool:
    return isinstance(p, Sequence) and len(p) == 2 and all(
        finite_or_none(c) is not None for c in p)


def _crossings(summary: Mapping[str, Any]) -> dict[int, float]:
    """Earliest crossing time (physical s) of each mark index over all tracks."""
    out: dict[int, float] = {}
    for track in summary.get("tracks") or []:
        for mark in track.get("marks") or []:
            t = finite_or_none(mark.get("crossing_s"))
            if t is not None:
                index = int(mark.get("index", 0))
                out[index] = min(out.get(index, math.inf), t)
    return out


def _fps_hint(info: ClipInfo) -> float | None:
    fps = info.stored_fps
    return float(fps) if math.isfinite(fps) and fps > 0 else None


# ------------------------------------------------------------------------------ drawing


def _draw_frame(rgb: np.ndarray, index: int, t_s: float, tracks: Sequence[_Track],
                marks: Sequence[np.ndarray], scale_points: Sequence[np.ndarray],
                crossings: Mapping[int, float], layout: _Layout) -> None:
    """Draw marks, scale points, trails, the current centres and the time onto ``rgb``."""
    th, fs = layout.thickness, layout.font_scale
    width = rgb.shape[1]
    for i, xy in enumerate(marks):
        # dashed, so that the real mark on the tube stays visible between the dashes
        for x0 in np.arange(0.0, width, _DASH_PX[0] + _DASH_PX[1]):
            a, b = _fixed([x0, xy[1]]), _fixed([min(x0 + _DASH_PX[0], width - 1.0), xy[1]])
            cv2.line(rgb, (int(a[0]), int(a[1])), (int(b[0]), int(b[1])), _YELLOW, th,
                     cv2.LINE_AA, _SHIFT)
        crossed = crossings.get(i)
        label = f"mark {i + 1}" + (f"  {crossed:.3f} s" if crossed is not None and t_s >= crossed
                                   else "")
        _text(rgb, label, (4, int(round(xy[1])) - 4), _YELLOW, fs * 0.8)
    for xy in scale_points:
        _cross(rgb, xy, 6.0 * max(1.0, layout.scale * 2), _CYAN, th)
        _text(rgb, "scale", (int(round(xy[0])) + 8, int(round(xy[1])) + 4), _CYAN, fs * 0.7)
    status = []
    for track in tracks:
        n_seen = int(np.searchsorted(track.frames, index, side="right"))
        if n_seen == 0:
            continue
        for start, end, plateau in track.runs:
            stop = min(end, n_seen)
            if stop - start >= 2:
                cv2.polylines(rgb, [_fixed(track.xy[start:stop])], False,
                              _GREEN if plateau else _ORANGE, 2 * th if plateau else th,
                              cv2.LINE_AA, _SHIFT)
        k = n_seen - 1
        if track.frames[k] != index:
            continue  # no detection in this frame: trail only
        colour = _GREEN if track.in_plateau[k] else _ORANGE
        centre = track.xy[k]
        cv2.circle(rgb, tuple(int(c) for c in _fixed(centre)),
                   int(_fixed([track.radius[k], 0.0])[0]), colour, th, cv2.LINE_AA, _SHIFT)
        _cross(rgb, centre, 3.0, colour, 1)
        _text(rgb, f"track {track.track_id}", (int(round(centre[0] + track.radius[k])) + 4,
                                                int(round(centre[1]))), colour, fs * 0.7)
        status.append(f"track {track.track_id}: {'PLATEAU' if track.in_plateau[k] else 'approach'}")
    _text(rgb, f"t = {t_s:.3f} s   frame {index}", (6, int(22 * fs + 6)), _WHITE, fs,
          background=True)
    if status:
        colour = _GREEN if any(s.endswith("PLATEAU") for s in status) else _ORANGE
        _text(rgb, "   ".join(status), (6, int(48 * fs + 10)), colour, fs * 0.8, background=True)


def _cross(rgb: np.ndarray, xy: np.ndarray, half: float, colour: tuple[int, int, int],
           th: int) -> None:
    x, y = xy
    for a, b in (((x - half, y), (x + half, y)), ((x, y - half), (x, y + half))):
        cv2.line(rgb, tuple(int(c) for c in _fixed(a)), tuple(int(c) for c in _fixed(b)), colour,
                 th, cv2.LINE_AA, _SHIFT)


def _text(rgb: np.ndarray, text: str, org: tuple[int, int], colour: tuple[int, int, int],
          scale: float, *, background: bool = False) -> None:
    """Text with a dark outline (or a dark box), readable on light and dark scenes alike."""
    thickness = 1 if scale < 0.6 else 2
    if background:
        (w, h), base = cv2.getTextSize(text, _FONT, scale, thickness)
        cv2.rectangle(rgb, (org[0] - 3, org[1] - h - 3), (org[0] + w + 3, org[1] + base + 1),
                      (0, 0, 0), cv2.FILLED)
    else:
        cv2.putText(rgb, text, org, _FONT, scale, (0, 0, 0), thickness + 2, cv2.LINE_AA)
    cv2.putText(rgb, text, org, _FONT, scale, colour, thickness, cv2.LINE_AA)
