"""Reading clips: per-frame presentation times, rotation, slow motion and the luma plane (PyAV).

Two entry points. :func:`probe` makes one fast pass over the packets of the video stream (no
decoding, except the first frame for its rotation and pixel format) and returns a
:class:`ClipInfo`: timing source, frame-interval statistics, gaps, slow-motion rescale, rotation,
warnings. :func:`iter_frames` then decodes the clip sequentially from the start (never seeking,
so "frame n" is well defined on variable-rate files) and yields one :class:`Frame` at a time:
memory stays flat in clip length. :func:`read_clip` does both at once: the decoder opens and
warms up in a background thread while the packets are scanned (the usual way in).

Time. Each frame's time comes from its own presentation timestamp, ``t_s = (pts − pts0) ×
time_base × time_scale``, never from a nominal frame rate, unless the file has no usable
timestamps (then ``timestamps = "nominal"`` and a loud warning). Frames come out of the decoder
in presentation order, which differs from file order when the codec uses B-frames.

Slow motion. Phones store high-frame-rate captures as ordinary ~30 fps files. When a capture
rate is known (``capture_fps`` from the user or rig, else the ``com.android.capture.fps`` tag)
and differs from the stored rate by more than :data:`SAME_RATE_TOLERANCE`, physical time =
stored time × ``time_scale`` with ``time_scale = stored_fps / capture_fps``. Within that
tolerance the file is taken as real time and its timestamps are used as they are.

Rotation. ``rotation_deg`` is the clockwise angle a player turns the stored frame by to display
it (from the display matrix, which FFmpeg reads from the MP4/MOV ``tkhd`` or the MKV projection;
see :mod:`tracker.encode`). It is applied exactly once, on the luma plane, so every coordinate
downstream is in the displayed frame; the turn is ``numpy.rot90(stored, -rotation_deg // 90)``,
done with ``cv2.rotate`` (a 1080p quarter turn costs ≈0.6 ms there against ≈9 ms for a numpy
transposed copy, and decoding one frame ≈10 ms). Rolling-shutter timing needs the
sensor row instead: :meth:`ClipInfo.stored_row` maps displayed (x, y) back to it.

Luma. For planar YUV (and grey) the Y plane is taken directly from the decoded frame (line-size
stride handled; one copy, which is also the rotation); deeper formats (10-bit HDR phone video)
are shifted down to 8 bit with a warning; anything else is converted to grey once.

Every failure to read the file becomes :class:`tracker.errors.ClipError` with a one-line reason.
"""

from __future__ import annotations

import math
import os
import pathlib
import queue
import re
import threading
from collections.abc import Callable, Iterator
from dataclasses import asdict, dataclass
from fractions import Fraction
from typing import Any

import av
import cv2
import numpy as np

from tracker.errors import ClipError

__all__ = [
    "ClipInfo",
    "Frame",
    "probe",
    "iter_frames",
    "read_clip",
    "ANDROID_CAPTURE_FPS_KEY",
    "SAME_RATE_TOLERANCE",
    "DISAGREEMENT_TOLERANCE",
    "GAP_FACTOR",
    "MAX_PLAUSIBLE_FPS",
    "MIN_READABLE_FRACTION",
]

ANDROID_CAPTURE_FPS_KEY = "com.android.capture.fps"
SAME_RATE_TOLERANCE = 0.03  # capture rate within 3 % of the stored rate: a real-time file (VFR jitter)
DISAGREEMENT_TOLERANCE = 0.01  # warn when the user's and the file's capture rates differ by > 1 %
GAP_FACTOR = 1.5  # an interval longer than 1.5 × the typical one means at least one frame was dropped
MAX_PLAUSIBLE_FPS = 10_000.0  # above this a frame rate is a bogus header value (user-needs §2.3)
MIN_READABLE_FRACTION = 0.5  # a truncated file with less than half of its declared length is unusable
_HIGH_DEPTH_LSB_FORMAT = re.compile(r"^(yuvj?|gray)\w*?(9|10|12|14|16)(le|be)$")  # LSB-aligned samples
_HDR_TRANSFERS = {16: "PQ (SMPTE ST 2084)", 18: "HLG (ARIB STD-B67)"}  # AVColorTransferCharacteristic
_CV2_ROTATE = {90: cv2.ROTATE_90_CLOCKWISE, 180: cv2.ROTATE_180, 270: cv2.ROTATE_90_COUNTERCLOCKWISE}
_DUPLICATE_ROW_STEP = 16  # duplicate check: compare every 16th row first, all rows only if those match
_MP4_BOX_TYPES = (b"ftyp", b"mdat", b"moov", b"free", b"wide", b"skip")
_SUPPORTED_HINT = "a video file FFmpeg can read (MP4, MOV, MKV or AVI with H.264, HEVC or MJPEG)"


@dataclass(frozen=True)
class ClipInfo:
    """What a clip is and how its frames map to physical time.

    Attributes
    ----------
    path : str
        The file.
    container, codec, pixel_format : str
        FFmpeg's demuxer name, decoder name and the decoded pixel format (e.g. ``"yuv420p"``).
    width_px, height_px : int
        Size of the *displayed* frame (rotation applied): what :class:`Frame.luma` has.
    stored_width_px, stored_height_px : int
        Size of the stored (sensor) frame.
    rotation_deg : int
        Clockwise rotation from stored to displayed frame: 0, 90, 180 or 270.
    n_frames : int
        Readable frames (video packets) in presentation order.
    duration_s : float
        Physical time covered: first to last frame plus one median interval, s.
    stored_fps : float
        Stored frame rate, frames per stored second, from the container timestamps: 1 / mean of
        the intervals that are not gaps (robust like the median, and not quantized by a coarse time
        base); the nominal header rate when ``timestamps == "nominal"``.
    capture_fps : float
        Frames per physical second actually used: ``stored_fps / time_scale``.
    time_scale : float
        Physical time = stored time × ``time_scale`` (1 for real-time files).
    capture_fps_source : str
        ``"container pts"`` (real time, from the timestamps), ``"user"`` (``capture_fps``
        argument), ``"metadata"`` (``com.android.capture.fps``) or ``"nominal rate"``.
    timestamps : str
        ``"container"`` (per-frame presentation times) or ``"nominal"`` (index / rate).
    frame_interval_s : dict
        ``{"min", "median", "max"}`` of the physical frame intervals, s.
    n_duplicates : int
        Frames whose packet is byte-identical to the previous one (found without decoding: for
        intra-only codecs such as MJPEG these are exactly the repeated pictures; for H.264/HEVC a
        repeated picture shows only after decoding, see :attr:`Frame.duplicate`).
    n_gaps : int
        Intervals longer than :data:`GAP_FACTOR` × the typical interval ``1 / capture_fps``
        (dropped frames).
    truncated : bool
        The file ends before its header says (cut or interrupted); the readable frames are used.
    warnings : list of str
        Everything a user should know about the timing and the file, one sentence each.
    """

    path: str
    container: str
    codec: str
    pixel_format: str
    width_px: int
    height_px: int
    stored_width_px: int
    stored_height_px: int
    rotation_deg: int
    n_frames: int
    duration_s: float
    stored_fps: float
    capture_fps: float
    time_scale: float
    capture_fps_source: str
    timestamps: str
    frame_interval_s: dict
    n_duplicates: int
    n_gaps: int
    truncated: bool
    warnings: list[str]

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly copy (plain ``int``/``float``/``str``/``bool``, lists and dicts)."""
        out = asdict(self)
        out["frame_interval_s"] = {k: float(v) for k, v in self.frame_interval_s.items()}
        out["warnings"] = list(self.warnings)
        return out

    def stored_row_col(self, x_px, y_px) -> tuple[Any, Any]:
        """Map displayed-frame coordinates to the stored (sensor) frame.

        Parameters
        ----------
        x_px, y_px : float or array_like
            Position in the displayed frame, px (origin at the top-left pixel's centre, y down).
            Arrays broadcast together.

        Returns
        -------
        row_px, col_px : float or numpy.ndarray
            Row (down) and column (right) in the stored frame, px, same origin convention; floats
            for scalar input. The rolling-shutter readout runs along ``row_px``.
        """
        x = np.asarray(x_px, dtype=float)
        y = np.asarray(y_px, dtype=float)
        last_row = self.stored_height_px - 1
        last_col = self.stored_width_px - 1
        row, col = {
            0: (y, x),
            90: (last_row - x, y),
            180: (last_row - y, last_col - x),
            270: (x, last_col - y),
        }[self.rotation_deg]
        row, col = np.broadcast_arrays(row, col)
        if row.ndim == 0:
            return float(row), float(col)
        return row.copy(), col.copy()

    def stored_row(self, x_px, y_px) -> Any:
        """Sensor row of a displayed-frame position, px (see :meth:`stored_row_col`).

        Rolling-shutter time of a point: ``t_frame + stored_row / stored_height_px × readout``.
        """
        return self.stored_row_col(x_px, y_px)[0]


@dataclass(frozen=True, eq=False)
class Frame:
    """One decoded frame.

    Attributes
    ----------
    index : int
        0-based position in presentation order (duplicates included).
    t_s : float
        Physical time from the clip's first frame, s.
    luma : numpy.ndarray, shape (height_px, width_px), uint8
        Luma plane in the *displayed* orientation, C-contiguous, owned by this frame.
    duplicate : bool
        Luma byte-identical to the previous frame's (a repeated, not a new, picture).
    """

    index: int
    t_s: float
    luma: np.ndarray
    duplicate: bool


def probe(path: str | pathlib.Path, *, capture_fps: float | None = None) -> ClipInfo:
    """Read a clip's timing, geometry and metadata in one pass over its packets.

    Parameters
    ----------
    path : str or path-like
        The clip.
    capture_fps : float, optional
        Capture rate stated by the user or rig, frames per physical second (slow motion). It
        overrides the file's capture-rate tag (with a warning when they differ by more than
        :data:`DISAGREEMENT_TOLERANCE`).

    Returns
    -------
    ClipInfo

    Raises
    ------
    tracker.errors.ClipError
        Missing, empty, unreadable, truncated beyond use (fewer than 2 frames, or less than
        :data:`MIN_READABLE_FRACTION` of the length its header declares), no video stream,
        unsupported codec or rotation, no timestamps and no frame rate.
    ValueError
        ``capture_fps`` not a positive finite number.
    """
    clip = _check_path(path)
    user_fps = _check_capture_fps(capture_fps)
    with _open(clip) as container:
        stream = _video_stream(container, clip)
        scan = _scan(container, stream, clip)
        header = _Header(
            tags={**container.metadata, **stream.metadata},
            nominal_fps=_nominal_fps(stream),
            duration_s=_declared_duration_s(container, stream),
            n_frames=int(stream.frames or 0),
            container=container.format.name,
            codec=stream.codec_context.name,
        )
    warnings: list[str] = []
    timing = _timing(scan, header, user_fps, clip, warnings)
    truncated = _integrity(scan, header, timing, clip, warnings)
    n_gaps = _timing_warnings(scan, timing, warnings)
    first = scan.first
    rotation = _rotation_deg(first, clip)
    _picture_warnings(first, warnings)
    stored_w, stored_h = first.width, first.height
    width, height = (stored_h, stored_w) if rotation in (90, 270) else (stored_w, stored_h)
    steps = timing.physical_steps_s
    median_step = float(np.median(steps))
    return ClipInfo(
        path=str(clip), container=header.container, codec=header.codec, pixel_format=first.format.name,
        width_px=width, height_px=height, stored_width_px=stored_w, stored_height_px=stored_h,
        rotation_deg=rotation, n_frames=scan.n_frames, duration_s=float(np.sum(steps)) + median_step,
        stored_fps=timing.stored_fps, capture_fps=timing.capture_fps, time_scale=timing.time_scale,
        capture_fps_source=timing.source, timestamps=timing.timestamps,
        frame_interval_s={"min": float(steps.min()), "median": median_step, "max": float(steps.max())},
        n_duplicates=scan.n_duplicates, n_gaps=n_gaps, truncated=truncated, warnings=warnings,
    )


def iter_frames(
    path: str | pathlib.Path, *, capture_fps: float | None = None, info: ClipInfo | None = None
) -> Iterator[Frame]:
    """Decode a clip sequentially and yield its frames in presentation order.

    Parameters
    ----------
    path : str or path-like
        The clip.
    capture_fps : float, optional
        As for :func:`probe`; only when ``info`` is not given.
    info : ClipInfo, optional
        The result of :func:`probe` for this file (saves the packet pass).

    Returns
    -------
    iterator of Frame
        Decoded by a background thread up to ``PREFETCH_BYTES`` of frames ahead of the consumer
        (plus the decoder's own buffers), so decoding goes on while the caller works on a frame.
        Closing the iterator early (or an exception in the caller) stops that thread.

    Raises
    ------
    tracker.errors.ClipError
        As :func:`probe`, at call time; during iteration when a frame cannot be decoded (except
        at the cut end of a truncated file), or the frame size or the timestamps break mid-clip.
    ValueError
        Both ``capture_fps`` and ``info`` given, or ``info`` is for another file.
    """
    if info is None:
        return read_clip(path, capture_fps=capture_fps)[1]
    if capture_fps is not None:
        raise ValueError(f"capture_fps = {capture_fps!r} with info: give capture_fps to probe() instead")
    if pathlib.Path(info.path).resolve() != pathlib.Path(path).resolve():
        raise ValueError(f"info is for {info.path!r}, not {str(path)!r}: expected probe() of the same file")
    frames = _decode(pathlib.Path(path), lambda: info)
    return _Prefetch(frames, PREFETCH_FRAMES) if PREFETCH_FRAMES > 0 else frames


def read_clip(path: str | pathlib.Path, *,
              capture_fps: float | None = None) -> tuple[ClipInfo, Iterator[Frame]]:
    """:func:`probe` a clip and decode it, the decoder opening while the packets are scanned.

    Opening the file for decoding and decoding its first frames (~0.1 s for 1080p) take about as
    long as the probe's packet pass; here they run at once, in the decoding thread and in the
    caller's.

    Parameters
    ----------
    path, capture_fps
        As for :func:`probe`.

    Returns
    -------
    info : ClipInfo
        As :func:`probe` returns it.
    frames : iterator of Frame
        As :func:`iter_frames` returns it. Iterate it to the end or ``close()`` it (it is also a
        context manager): until then a thread holds the file open.

    Raises
    ------
    tracker.errors.ClipError, ValueError
        As :func:`probe`, at call time (the decoding thread is stopped first).
    """
    if PREFETCH_FRAMES <= 0:
        info = probe(path, capture_fps=capture_fps)
        return info, _decode(pathlib.Path(path), lambda: info)
    known = _Pending()
    frames = _Prefetch(_decode(pathlib.Path(path), known.get), PREFETCH_FRAMES, on_close=known.cancel)
    try:
        info = probe(path, capture_fps=capture_fps)
    except BaseException:
        frames.close()  # the probe's error is the one to report, not what the thread met
        raise
    known.set(info)
    return info, frames


#: Frames decoded ahead of the consumer by :func:`iter_frames`' background thread: as many as
#: fit in ``PREFETCH_BYTES``, at least ``PREFETCH_FRAMES`` (0 turns the thread off) and at most
#: ``PREFETCH_MAX_FRAMES``. FFmpeg's frame threads keep only a few frames in flight and idle while
#: the caller works on one; decoding ahead in a thread keeps them busy (PyAV releases the GIL
#: while it decodes). The budget covers the tracker's set-up on the first frame (~0.1 s, ~20
#: frames of 1080p decoding), during which 4 frames ahead stalled the decoder: a 1080p clip is
#: tracked ~0.04 s sooner with 24 (median of 10 paired runs); a 4K clip holds 5 (~40 MB).
PREFETCH_FRAMES = 4
PREFETCH_BYTES = 48 * 2**20
PREFETCH_MAX_FRAMES = 32
_END = object()


def _prefetch_depth(frame_bytes: int, least: int) -> int:
    """Frames of ``frame_bytes`` each to decode ahead: see :data:`PREFETCH_BYTES`."""
    return max(least, min(PREFETCH_MAX_FRAMES, PREFETCH_BYTES // max(frame_bytes, 1)))


def _produce(frames: Iterator[Frame], q: queue.Queue, room: threading.Semaphore, places: int,
             least: int, stop: threading.Event) -> None:
    """The decoding thread of :class:`_Prefetch`: frames, then the end or the exception. Each
    item takes one of ``room``'s ``places`` (the consumer gives it back); once the frame size is
    known, the places beyond :func:`_prefetch_depth` are taken for good."""

    def put(item) -> bool:
        while not stop.is_set():
            if room.acquire(timeout=0.05):
                q.put(item)
                return True
        return False

    try:
        sized = False
        for frame in frames:
            if not sized:
                sized = True
                for _ in range(places - _prefetch_depth(frame.luma.nbytes, least)):
                    room.acquire()   # nothing is queued yet: never blocks
            if not put(frame):
                break
        else:
            put(_END)
    except _Cancelled:
        pass
    except BaseException as exc:  # noqa: BLE001 - handed to the consumer
        put(exc)
    finally:
        frames.close()


class _Cancelled(Exception):
    """The caller stopped before the decoding thread learnt the clip's ClipInfo."""


class _Pending:
    """The ClipInfo the decoding thread waits for while :func:`read_clip`'s caller probes."""

    def __init__(self) -> None:
        self._ready = threading.Event()
        self._info: ClipInfo | None = None

    def set(self, info: ClipInfo) -> None:
        self._info = info
        self._ready.set()

    def cancel(self) -> None:
        self._ready.set()

    def get(self) -> ClipInfo:
        self._ready.wait()
        if self._info is None:
            raise _Cancelled
        return self._info


class _Prefetch(Iterator[Frame]):
    """``frames`` run in a background thread started at once, at least ``depth`` items ahead of
    the consumer and as many more as :data:`PREFETCH_BYTES` holds; exceptions are re-raised in
    the consumer, in order. The end of the frames, an exception, :meth:`close` or dropping the
    reader stops the thread (``on_close`` first)."""

    def __init__(self, frames: Iterator[Frame], depth: int, on_close: Any = None) -> None:
        self._queue: queue.Queue = queue.Queue()
        places = max(depth, PREFETCH_MAX_FRAMES)
        self._room = threading.Semaphore(places)
        self._stop = threading.Event()
        self._on_close = on_close
        self._closed = False
        # the thread holds the queue and the flags, not this reader: dropped, it is collected
        self._worker = threading.Thread(target=_produce,
                                        args=(frames, self._queue, self._room, places, depth,
                                              self._stop),
                                        name="fallcam-decode", daemon=True)
        self._worker.start()

    def __next__(self) -> Frame:
        if self._closed:
            raise StopIteration
        item = self._queue.get()
        self._room.release()
        if item is _END:
            self.close()
            raise StopIteration
        if isinstance(item, BaseException):
            self.close()
            raise item
        return item

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        self._stop.set()
        if self._on_close is not None:
            self._on_close()
        self._worker.join()

    def __enter__(self) -> _Prefetch:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __del__(self) -> None:
        # dropped unfinished: tell the thread to stop, without waiting (at interpreter exit a
        # daemon thread may never run again to be joined); it closes the file within 0.05 s
        self._stop.set()
        if self._on_close is not None:
            self._on_close()


# ---------------------------------------------------------------------------------------------
# internals


@dataclass
class _Scan:
    pts: list  # presentation timestamps of the readable video packets (file order; None if absent)
    time_base: Fraction
    n_duplicates: int
    cut: bool  # a hard sign of truncation: demux error or a damaged (partial) packet
    first: av.VideoFrame

    @property
    def n_frames(self) -> int:
        return len(self.pts)


@dataclass(frozen=True)
class _Header:
    tags: dict  # container + stream metadata
    nominal_fps: float | None  # plausible header frame rate (a hint only)
    duration_s: float | None  # declared length of the video stream
    n_frames: int  # declared frame count (0: not stated)
    container: str
    codec: str


@dataclass(frozen=True)
class _Timing:
    timestamps: str  # "container" | "nominal"
    stored_steps_s: np.ndarray  # intervals in stored seconds, presentation order
    stored_fps: float
    time_scale: float
    capture_fps: float
    source: str

    @property
    def physical_steps_s(self) -> np.ndarray:
        return self.stored_steps_s * self.time_scale


def _timing(scan: _Scan, header: _Header, user_fps, clip, warnings: list[str]) -> _Timing:
    """Stored intervals from the container timestamps (or the nominal rate), then slow motion."""
    pts = scan.pts
    if None not in pts and len(set(pts)) == len(pts):
        timestamps = "container"
        ticks = np.sort(np.asarray(pts, dtype=np.int64))
        steps = np.diff(ticks) * float(scan.time_base)
        median = float(np.median(steps))
        # the mean of the intervals that are not gaps: as robust as the median, but not quantized by
        # coarse time bases (MKV's 1 ms, QuickTime's 1/600 s give 33/34 ms or 2/3-tick alternations)
        stored_fps = 1.0 / float(np.mean(steps[steps <= GAP_FACTOR * median]))
    else:
        timestamps = "nominal"
        reason = "missing" if None in pts else "repeated"
        stored_fps = header.nominal_fps or user_fps
        if stored_fps is None:
            raise ClipError(f"clip {clip}: presentation timestamps are {reason} and the file states no "
                            "usable frame rate; expected a clip with timestamps or a stated capture_fps")
        steps = np.full(scan.n_frames - 1, 1.0 / stored_fps)
    time_scale, capture, source = _capture_rate(stored_fps, user_fps, header.tags, timestamps, warnings)
    if timestamps == "nominal":
        origin = {"user": "capture_fps as given", "metadata": f"the {ANDROID_CAPTURE_FPS_KEY} tag",
                  "nominal rate": "the nominal rate in the file header"}[source]
        warnings.insert(0, f"NO USABLE TIMESTAMPS: presentation times are {reason} in this file, so "
                           f"frame i is timed at i / {capture:g} fps ({origin}); dropped or repeated "
                           "frames cannot be seen and times may be wrong")
    return _Timing(timestamps=timestamps, stored_steps_s=steps, stored_fps=float(stored_fps),
                   time_scale=float(time_scale), capture_fps=float(capture), source=source)


def _integrity(scan: _Scan, header: _Header, timing: _Timing, clip, warnings: list[str]) -> bool:
    """Is the file cut short? Raise when too little of it is left, warn otherwise."""
    steps = timing.stored_steps_s
    readable_s = float(np.sum(steps)) + float(np.median(steps))
    declared_s = header.duration_s
    tolerance_s = max(3.0 / timing.stored_fps, 0.02 * (declared_s or 0.0))  # last-frame durations vary
    truncated = scan.cut or (declared_s is not None and readable_s < declared_s - tolerance_s)
    if not truncated:
        return False
    if header.n_frames > scan.n_frames:
        fraction = scan.n_frames / header.n_frames
    elif declared_s:
        fraction = min(readable_s / declared_s, 1.0)
    else:
        fraction = None
    if fraction is not None and fraction < MIN_READABLE_FRACTION:
        raise ClipError(f"clip {clip}: truncated: only {scan.n_frames} frames ({fraction:.0%} of the "
                        "length its header declares) are readable; expected a complete file")
    share = f" ({fraction:.0%} of its declared length)" if fraction is not None else ""
    warnings.append(f"file is truncated (cut short or recording interrupted): using the "
                    f"{scan.n_frames} frames that can be read{share}")
    return True


def _timing_warnings(scan: _Scan, timing: _Timing, warnings: list[str]) -> int:
    """Gaps, repeated frames, implausible rates; returns the number of gaps."""
    steps = timing.physical_steps_s
    typical_step = 1.0 / timing.capture_fps
    n_gaps = int(np.count_nonzero(steps > GAP_FACTOR * typical_step))
    if n_gaps:
        warnings.append(f"{n_gaps} gap(s) where the frame interval exceeds {GAP_FACTOR:g}× the typical "
                        f"{typical_step * 1e3:.3g} ms (longest {float(steps.max()) * 1e3:.3g} ms): "
                        "frames were dropped; times stay those of the file")
    if scan.n_duplicates:
        warnings.append(f"{scan.n_duplicates} frame(s) repeat the previous one byte for byte (the camera "
                        "delivered the same picture twice)")
        regular = n_gaps == 0 and np.ptp(timing.stored_steps_s) <= 2.0 * float(scan.time_base)
        if timing.timestamps == "container" and regular:
            warnings.append("repeated frames at perfectly regular times: the timestamps look synthesized "
                            "from a nominal rate rather than measured, so the true frame times are unknown")
    for label, value in (("stored", timing.stored_fps), ("capture", timing.capture_fps)):
        if not (math.isfinite(value) and 0 < value <= MAX_PLAUSIBLE_FPS):
            warnings.append(f"implausible {label} frame rate {value:g} fps (expected 0 < fps ≤ "
                            f"{MAX_PLAUSIBLE_FPS:g}): check the file's timing and capture_fps")
    return n_gaps


def _picture_warnings(first, warnings: list[str]) -> None:
    fmt = first.format
    if _luma_mode(fmt)[0] == "deep":
        warnings.append(f"HDR/10-bit video ({fmt.name}): luma is reduced to 8 bit by dropping the "
                        f"{fmt.components[0].bits - 8} low bits")
    if first.color_trc in _HDR_TRANSFERS:
        warnings.append(f"HDR transfer {_HDR_TRANSFERS[first.color_trc]}: luma is not SDR gamma-coded; "
                        "tracking works, brightness levels are not comparable with SDR clips")


def _check_path(path) -> pathlib.Path:
    clip = pathlib.Path(path)
    if not clip.exists():
        raise ClipError(f"clip {clip}: no such file; expected {_SUPPORTED_HINT}")
    if not clip.is_file():
        raise ClipError(f"clip {clip}: not a regular file; expected {_SUPPORTED_HINT}")
    if clip.stat().st_size == 0:
        raise ClipError(f"clip {clip}: file is empty (0 bytes); expected {_SUPPORTED_HINT}")
    return clip


def _check_capture_fps(capture_fps) -> float | None:
    if capture_fps is None:
        return None
    try:
        value = float(capture_fps)
    except (TypeError, ValueError):
        value = math.nan
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"capture_fps = {capture_fps!r}: expected a positive frame rate in frames per "
                         "second")
    return value


def _open(clip: pathlib.Path):
    try:
        return av.open(str(clip), metadata_errors="replace")
    except av.FFmpegError as exc:
        try:
            with clip.open("rb") as fh:
                head = fh.read(8)
        except OSError:
            head = b""
        if head[4:8] in _MP4_BOX_TYPES:
            raise ClipError(f"clip {clip}: MP4/MOV file without a readable index ('moov' box): the "
                            "recording was interrupted or the file cut short; expected a complete "
                            "file") from None
        reason = getattr(exc, "strerror", None) or str(exc)
        raise ClipError(f"clip {clip}: not a readable video ({reason}); expected {_SUPPORTED_HINT}") from None


def _video_stream(container, clip: pathlib.Path):
    streams = [s for s in container.streams.video
               if not s.disposition & av.stream.Disposition.attached_pic]
    if not streams:
        kinds = sorted({s.type for s in container.streams}) or ["nothing"]
        raise ClipError(f"clip {clip}: no video stream (contains {', '.join(kinds)}); expected a clip "
                        "with a video track")
    stream = streams[0]
    if stream.codec_context is None:
        raise ClipError(f"clip {clip}: unsupported video codec (no decoder for it in this FFmpeg "
                        "build); expected H.264, HEVC or MJPEG")
    return stream


def _scan(container, stream, clip: pathlib.Path) -> _Scan:
    """Pass over the video packets: timestamps, repeated packets, integrity; decode frame 0."""
    pts: list = []
    n_duplicates = 0
    cut = False
    first = None
    previous = None
    try:
        for packet in container.demux(stream):
            if packet.size == 0:
                continue
            if packet.is_corrupt:
                cut = True
                continue
            if first is None:
                first = _first_frame(stream, packet, clip)
            if packet.is_discard:
                continue
            pts.append(packet.pts)
            if (previous is not None and previous.size == packet.size
                    and np.array_equal(np.frombuffer(previous, np.uint8), np.frombuffer(packet, np.uint8))):
                n_duplicates += 1
            previous = packet
    except av.FFmpegError:
        cut = True
    if len(pts) < 2:
        raise ClipError(f"clip {clip}: only {len(pts)} readable frame(s) (truncated, damaged or too "
                        "short); expected a clip of at least 2 frames")
    if first is None:
        first = _first_frame(stream, None, clip)
    return _Scan(pts=pts, time_base=stream.time_base or Fraction(1), n_duplicates=n_duplicates,
                 cut=cut, first=first)


def _first_frame(stream, packet, clip: pathlib.Path):
    """Feed one packet (None: flush) to the decoder; the first decoded frame or None."""
    try:
        frames = stream.decode(packet)
    except av.FFmpegError as exc:
        reason = getattr(exc, "strerror", None) or str(exc)
        raise ClipError(f"clip {clip}: the first frame cannot be decoded ({reason}); expected "
                        f"{_SUPPORTED_HINT}") from None
    if not frames and packet is None:
        raise ClipError(f"clip {clip}: no frame could be decoded; expected {_SUPPORTED_HINT}")
    return frames[0] if frames else None


def _nominal_fps(stream) -> float | None:
    """The header's frame rate, if plausible (a hint only: used when timestamps are unusable)."""
    for rate in (stream.average_rate, stream.guessed_rate):
        if rate and 0 < float(rate) <= MAX_PLAUSIBLE_FPS:
            return float(rate)
    return None


def _declared_duration_s(container, stream) -> float | None:
    """Length of the video stream according to the file's header, s (None if not stated)."""
    if stream.duration and stream.time_base:
        return float(stream.duration * stream.time_base)
    if container.duration and len(container.streams) == 1:
        return container.duration / av.time_base
    return None


def _capture_rate(stored_fps, user_fps, tags, timestamps, warnings):
    """Return (time_scale, capture_fps, source) and add the warnings about it."""
    meta_fps = _metadata_capture_fps(tags)
    both = user_fps is not None and meta_fps is not None
    if both and abs(user_fps / meta_fps - 1) > DISAGREEMENT_TOLERANCE:
        warnings.append(f"capture_fps {user_fps:g} disagrees with the file's {ANDROID_CAPTURE_FPS_KEY} "
                        f"{meta_fps:g}: using {user_fps:g} as stated")
    if user_fps is not None:
        capture, source = user_fps, "user"
    elif meta_fps is not None:
        capture, source = meta_fps, "metadata"
    else:
        base = "container pts" if timestamps == "container" else "nominal rate"
        return 1.0, stored_fps, base
    same_rate = abs(capture / stored_fps - 1) <= SAME_RATE_TOLERANCE
    if same_rate and not (source == "user" and timestamps == "nominal"):
        base = "container pts" if timestamps == "container" else "nominal rate"
        return 1.0, stored_fps, base  # real-time file: its own times are the measurement
    time_scale = stored_fps / capture
    if source == "metadata":
        warnings.append(f"slow-motion file: stored at {stored_fps:.4g} fps, captured at {capture:g} fps "
                        f"according to its {ANDROID_CAPTURE_FPS_KEY} tag; physical time = stored time "
                        f"× {time_scale:.6g} (give capture_fps to override)")
    return time_scale, capture, source


def _metadata_capture_fps(tags: dict) -> float | None:
    for key, value in tags.items():
        if key.lower() == ANDROID_CAPTURE_FPS_KEY:
            try:
                fps = float(value)
            except ValueError:
                return None
            return fps if math.isfinite(fps) and fps > 0 else None
    return None


def _rotation_deg(frame, clip: pathlib.Path) -> int:
    """Clockwise display rotation from the frame's display matrix (PyAV gives counter-clockwise)."""
    rotation = round(-frame.rotation) % 360
    if rotation not in (0, 90, 180, 270):
        raise ClipError(f"clip {clip}: display rotation {rotation}°: unsupported; expected 0, 90, 180 "
                        "or 270")
    return rotation


def _luma_mode(fmt) -> tuple[str, Any]:
    """How to get 8-bit luma from frames of this pixel format.

    ``("plane", None)``: 8-bit Y alone in plane 0; ``("deep", (dtype, shift))``: 9–16-bit
    LSB-aligned Y alone in plane 0; ``("convert", None)``: anything else (RGB, packed YUV, …).
    """
    comps = fmt.components
    luma_alone = (not fmt.is_rgb and comps and comps[0].plane == 0
                  and sum(c.plane == 0 for c in comps) == 1)
    if luma_alone and comps[0].bits == 8:
        return "plane", None
    if luma_alone and _HIGH_DEPTH_LSB_FORMAT.match(fmt.name):
        dtype = ">u2" if fmt.name.endswith("be") else "<u2"
        return "deep", (np.dtype(dtype), comps[0].bits - 8)
    return "convert", None


def _luma(frame, mode, rotation_deg: int) -> np.ndarray:
    """Displayed-orientation uint8 luma of a decoded frame, C-contiguous and owned."""
    kind, extra = mode
    if kind == "convert":
        y, fresh = frame.reformat(format="gray").to_ndarray(), True
    else:
        plane = frame.planes[0]
        dtype = np.dtype(np.uint8) if kind == "plane" else extra[0]
        rows = np.frombuffer(plane, dtype=dtype, count=plane.line_size * plane.height // dtype.itemsize)
        y = rows.reshape(plane.height, plane.line_size // dtype.itemsize)[:, : plane.width]
        fresh = False
        if kind == "deep":
            y8 = np.empty(y.shape, dtype=np.uint8)
            np.right_shift(y, extra[1], out=y8, casting="unsafe")
            y, fresh = y8, True
    if rotation_deg:
        return cv2.rotate(y, _CV2_ROTATE[rotation_deg])  # the one copy, rotated
    return y if fresh else np.array(y, order="C")  # the one copy, out of the decoder's buffer


#: Environment variable capping the decoder's threads (set by ``fallcam batch`` in its workers so
#: that N parallel clips share the cores instead of each decoding on all of them).
DECODE_THREADS_ENV = "FALLCAM_DECODE_THREADS"

#: Decoder threads per core. FFmpeg's own choice (cores + 1) keeps too few frames in flight to
#: keep the cores busy on a noisy phone clip; three per core decodes a 1080p60 H.264 clip at
#: 18 Mbit/s ~10 % faster on 2 cores (benchmarks/run.py compares decode-only with these settings).
DECODE_THREADS_PER_CORE = 3
#: ... but never more than this many: each frame thread holds a whole frame context (tens of MB at
#: 4K), and a large machine gains nothing from more.
DECODE_THREADS_MAX = 16


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity; all of the machine's where unknown)."""
    if hasattr(os, "sched_getaffinity"):
        return max(1, len(os.sched_getaffinity(0)))
    return os.cpu_count() or 1


def configure_decoder(stream) -> None:
    """Threading of a PyAV video stream's decoder, as fallcam decodes: frame and slice threads,
    ``DECODE_THREADS_PER_CORE`` per core this process may run on (at most
    ``DECODE_THREADS_MAX``), or ``$FALLCAM_DECODE_THREADS`` when set (a parallel batch gives each
    worker its share of the cores)."""
    threads = os.environ.get(DECODE_THREADS_ENV)
    if threads:
        stream.codec_context.thread_count = max(1, int(threads))
    else:
        stream.codec_context.thread_count = min(DECODE_THREADS_PER_CORE * available_cores(),
                                                DECODE_THREADS_MAX)
    stream.codec_context.thread_type = "AUTO"


def _same_picture(luma: np.ndarray, previous: np.ndarray | None) -> bool:
    """Byte-identical luma; a sparse row sample rejects the usual (different) case cheaply."""
    if previous is None:
        return False
    return bool(np.array_equal(luma[::_DUPLICATE_ROW_STEP], previous[::_DUPLICATE_ROW_STEP])
                and np.array_equal(luma, previous))


def _decode(clip: pathlib.Path, get_info: Callable[[], ClipInfo]) -> Iterator[Frame]:
    """Frames of ``clip``. ``get_info()`` is first called once the first frame is decoded or a
    packet fails (until then the caller may still be probing the clip)."""
    with _open(clip) as container:
        stream = _video_stream(container, clip)
        configure_decoder(stream)
        time_base = float(stream.time_base or 1)
        info: ClipInfo | None = None
        packets = container.demux(stream)
        mode_for = {}  # pixel format name → how to take its luma (decided once per format)
        pts0 = previous_pts = None
        previous = None
        index = 0
        while True:
            try:
                packet = next(packets)
                if packet.is_corrupt and (info := info or get_info()).truncated:
                    continue
                decoded = stream.decode(packet)
            except StopIteration:
                break
            except av.FFmpegError as exc:
                info = info or get_info()
                if info.truncated and index >= 2:
                    decoded = _drain(stream)  # the cut end: keep what the decoder still holds
                    packets = iter(())
                else:
                    reason = getattr(exc, "strerror", None) or str(exc)
                    raise ClipError(f"clip {clip}: decoding failed after {index} frames ({reason}); "
                                    "expected an undamaged file") from None
            for frame in decoded:
                if info is None:
                    info = get_info()
                if (frame.width, frame.height) != (info.stored_width_px, info.stored_height_px):
                    raise ClipError(f"clip {clip}: frame {index} is {frame.width}×{frame.height} px, "
                                    f"the clip started at {info.stored_width_px}×{info.stored_height_px}; "
                                    "expected one frame size throughout")
                if info.timestamps == "container":
                    if frame.pts is None or (previous_pts is not None and frame.pts <= previous_pts):
                        raise ClipError(f"clip {clip}: decoded frame {index} has presentation time "
                                        f"{frame.pts} after {previous_pts}; expected increasing times")
                    if pts0 is None:
                        pts0 = frame.pts
                    previous_pts = frame.pts
                    t_s = (frame.pts - pts0) * (time_base * info.time_scale)
                else:
                    t_s = index * (info.time_scale / info.stored_fps)
                mode = mode_for.get(frame.format.name)
                if mode is None:
                    mode = mode_for[frame.format.name] = _luma_mode(frame.format)
                luma = _luma(frame, mode, info.rotation_deg)
                yield Frame(index=index, t_s=t_s, luma=luma, duplicate=_same_picture(luma, previous))
                previous = luma
                index += 1


def _drain(stream) -> list:
    try:
        return stream.decode(None)
    except av.FFmpegError:
        return []
