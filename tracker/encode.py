"""Writing clips: frames with exact presentation times → H.264 / HEVC / MJPEG in MP4, MOV, MKV, AVI.

Used by the synthetic renderer, the overlay video and the tests. Frames are streamed to the
encoder one at a time (memory flat in clip length) and written to a temporary file that is
renamed into place only when the clip is complete, so a failed write never leaves a half clip.

Time. Every frame gets the presentation time the caller gives, rounded to the container's time
base: 1/90000 s for MP4/MOV (the usual video timescale: 24, 25, 30, 60, 120, 240 and 29.97 fps
are exact; the movie timescale is set to match, so a non-zero first time is exact too), 1 ms for
MKV (Matroska's standard timestamp scale, which FFmpeg's muxer always uses) and one frame period
for AVI (AVI has no timestamps, only a fixed rate; skipped periods are stored as empty chunks, so
dropped frames survive but irregular spacing cannot be stored).

Luma. Grey frames are written full range (JPEG range, flagged in the stream), so the decoded Y
plane equals the grey level written, up to the codec's loss (none at ``crf=0`` for H.264). RGB
frames go through FFmpeg's BT.601 RGB → YUV conversion.

Rotation. ``rotation_deg`` is the clockwise angle by which a player turns the *stored* frame to
show it: the number phone files carry and media-inspection tools print ("Rotation: 90" for a
phone filmed upright in portrait, whose sensor stores landscape frames). It is written the way
phones write it, as the display matrix of the track header (``tkhd``) in MP4/MOV, including the
translation that keeps the turned picture in the positive quadrant; for 90° on a W × H stored
frame the matrix is ``[0 1 0; -1 0 0; H 0 1]`` (a, b, u; c, d, v; x, y, w). MKV stores the same
rotation as the projection roll FFmpeg derives from that matrix. :func:`tracker.video.probe`
reads it back and applies it once.

PyAV (≥ 18) sets the matrix directly (``VideoStream.set_display_matrix``), so the written file
is not patched afterwards; the tests read the ``tkhd`` bytes back.

Slow motion. ``capture_fps_metadata`` writes the capture-rate tag Android phones add to
high-frame-rate files (key ``com.android.capture.fps``). FFmpeg writes it as text in an ``mdta``
metadata box (``movflags=use_metadata_tags``); Android stores a 32-bit float there (from memory).
FFmpeg's reader, and so :mod:`tracker.video`, gives both forms as the same metadata string
(tested with a float-typed copy of the tag).

Quiet. PyAV keeps FFmpeg's log (and so x264's) off by default; x265 prints on its own and is
set to ``log-level=error``.

Repeatable. The same frames give the same file. On a CPU with AVX-512, the libx264 bundled with
PyAV (18.x) wrote a different file from the same frames now and then, also on one thread (seen:
1 to 3 encodes in 8 under load, 2 of 4 in one quiet process), and so a test clip, and what was
measured on it, changed from run to run; with its macroblock-tree pass off, or its code capped
at AVX2, every encode was the same. The cap is kept (``asm=AVX2``, on Linux where ``/proc/cpuinfo`` lists
AVX-512, which implies AVX2): capped, x264 wrote byte for byte the file it wrote uncapped most of
the time, in the same time (measured on a 110-frame test clip, 16 encodes under load).
"""

from __future__ import annotations

import functools
import math
import os
import pathlib
from collections.abc import Iterable, Sequence
from fractions import Fraction

import av
import numpy as np

from tracker.video import ANDROID_CAPTURE_FPS_KEY

__all__ = ["write_clip", "CONTAINER_CODECS", "MP4_TIME_BASE", "MKV_TIME_BASE"]

# suffix → (FFmpeg muxer, codecs it accepts here)
CONTAINER_CODECS: dict[str, tuple[str, tuple[str, ...]]] = {
    ".mp4": ("mp4", ("h264", "hevc")),
    ".mov": ("mov", ("h264", "hevc", "mjpeg")),
    ".mkv": ("matroska", ("h264", "hevc", "mjpeg")),
    ".avi": ("avi", ("mjpeg",)),  # H.264/HEVC in AVI lose presentation order (no pts)
}
_ENCODERS = {"h264": "libx264", "hevc": "libx265", "mjpeg": "mjpeg"}
_DEFAULT_PIX_FMT = {"h264": "yuv420p", "hevc": "yuv420p", "mjpeg": "yuvj420p"}
MP4_TIME_BASE = Fraction(1, 90000)  # MP4/MOV timescale: 11 µs ticks
MKV_TIME_BASE = Fraction(1, 1000)  # Matroska TimestampScale 1 ms (FFmpeg's fixed choice)
_AVI_GRID_TOLERANCE = 0.01  # AVI times must lie within 1 % of a frame period of the fixed grid
_MJPEG_DEFAULT_QSCALE = 3  # JPEG quantiser scale (2 best … 31 worst); 3 ≈ a good webcam
_CRF_RANGE = {"h264": (0, 51), "hevc": (0, 51), "mjpeg": (2, 31)}
_JPEG_RANGE = 2  # AVCOL_RANGE_JPEG: full-range luma 0–255
_PRESET_CODECS = ("h264", "hevc")


def write_clip(
    path: str | os.PathLike[str],
    frames: Iterable[np.ndarray],
    times_s: Sequence[float] | np.ndarray,
    *,
    codec: str = "h264",
    fps_hint: float | None = None,
    rotation_deg: int = 0,
    capture_fps_metadata: float | None = None,
    crf: float | None = None,
    bit_rate: int | None = None,
    gop: int | None = None,
    pix_fmt: str | None = None,
    preset: str | None = None,
) -> None:
    """Encode frames with exact presentation times into a video file.

    Parameters
    ----------
    path : str or path-like
        Output file; its suffix picks the container: ``.mp4``, ``.mov``, ``.mkv`` or ``.avi``.
        Written atomically (temporary file, then rename).
    frames : iterable of numpy.ndarray
        uint8 frames in the *stored* (sensor) orientation, all the same shape: ``(H, W)`` grey or
        ``(H, W, 3)`` RGB, with H and W even (4:2:0 chroma). Consumed one at a time.
    times_s : sequence of float, shape (n_frames,)
        Presentation time of each frame in seconds, ≥ 0 and strictly increasing, any spacing.
        Rounded to the container's time base (see module docstring); the rounded ticks must stay
        strictly increasing.
    codec : {"h264", "hevc", "mjpeg"}
        Encoder: libx264, libx265 or FFmpeg's MJPEG. MP4 takes h264/hevc, MOV and MKV all three,
        AVI only mjpeg (the webcam case).
    fps_hint : float, optional
        Nominal frame rate in frames per second, written as the stream's nominal rate and used by
        the encoder's rate control; for AVI it *is* the fixed rate. Default: from the median
        interval of ``times_s`` (30 for a single frame).
    rotation_deg : {0, 90, 180, 270}
        Clockwise rotation a player applies to the stored frame to display it, written as a
        phone-style display matrix (MP4/MOV/MKV; AVI cannot carry it).
    capture_fps_metadata : float, optional
        Capture rate in frames per second for the ``com.android.capture.fps`` tag of slow-motion
        files (MP4/MOV/MKV).
    crf : float, optional
        Constant-quality setting: x264/x265 CRF (0–51, 0 is lossless for H.264; encoder default
        23/28), or for mjpeg the JPEG quantiser scale (2–31, default 3). Exclusive with
        ``bit_rate``.
    bit_rate : int, optional
        Target bit rate in bit/s instead of constant quality.
    gop : int, optional
        Maximum distance between key frames, in frames (h264/hevc; MJPEG is intra-only).
    pix_fmt : str, optional
        Stored pixel format, one the encoder supports, e.g. ``"yuv420p10le"`` for a 10-bit (HDR
        style) file. Default ``yuv420p`` (h264/hevc), ``yuvj420p`` (mjpeg).
    preset : str, optional
        x264/x265 speed preset (``"ultrafast"`` … ``"veryslow"``); default: the encoder's own
        (``"medium"``).

    Raises
    ------
    ValueError
        Unsupported suffix, codec, combination or pixel format; bad times, rotation, frame shape,
        dtype or count. The message names the argument, the value and what is expected.
    """
    out = pathlib.Path(path)
    suffix = out.suffix.lower()
    muxer = _check_container_codec(suffix, codec)
    times = _check_times(times_s)
    rate = _rate(fps_hint, times)
    time_base = _time_base(suffix, rate)
    pts = _ticks(times, time_base, suffix, rate)
    _check_rotation(rotation_deg, suffix)
    fmt = _check_pix_fmt(pix_fmt, codec)
    codec_options, container_options = _options(
        codec, suffix, crf=crf, bit_rate=bit_rate, gop=gop, preset=preset,
        capture_fps_metadata=capture_fps_metadata,
    )

    tmp = out.with_name(f".{out.name}.{os.getpid()}.partial")
    try:
        with av.open(str(tmp), "w", format=muxer, options=container_options) as container:
            stream = container.add_stream(_ENCODERS[codec], rate=rate, options=codec_options)
            _encode_all(container, stream, frames, pts, time_base, fmt=fmt, codec=codec,
                        suffix=suffix, rotation_deg=rotation_deg, bit_rate=bit_rate, gop=gop,
                        capture_fps_metadata=capture_fps_metadata)
        os.replace(tmp, out)
    finally:
        tmp.unlink(missing_ok=True)


def _encode_all(container, stream, frames, pts, time_base, *, fmt, codec, suffix, rotation_deg,
                bit_rate, gop, capture_fps_metadata) -> None:
    """Configure the stream from the first frame, then encode and mux every frame."""
    n_expected = len(pts)
    index = -1
    shape = None
    for index, frame in enumerate(frames):
        if index >= n_expected:
            raise ValueError(f"frames: more frames than times_s ({n_expected}); expected one time per frame")
        arr = _check_frame(frame, index, shape)
        if shape is None:
            shape = arr.shape
            height, width = shape[:2]
            stream.width, stream.height, stream.pix_fmt = width, height, fmt
            stream.codec_context.time_base = time_base
            stream.time_base = time_base
            stream.codec_context.color_range = _JPEG_RANGE
            if bit_rate is not None:
                stream.codec_context.bit_rate = int(bit_rate)
            if gop is not None:
                stream.codec_context.gop_size = int(gop)
            if codec == "hevc" and suffix in (".mp4", ".mov"):
                stream.codec_tag = "hvc1"  # the tag phones write; FFmpeg's default is hev1
            if rotation_deg:
                stream.set_display_matrix(_display_matrix(rotation_deg, width, height))
            if capture_fps_metadata is not None:
                container.metadata[ANDROID_CAPTURE_FPS_KEY] = f"{float(capture_fps_metadata):.6f}"
        video_frame = av.VideoFrame.from_ndarray(arr, format="gray" if arr.ndim == 2 else "rgb24")
        video_frame = video_frame.reformat(format=fmt, src_color_range="JPEG", dst_color_range="JPEG")
        video_frame.pts = int(pts[index])
        video_frame.time_base = time_base
        for packet in stream.encode(video_frame):
            container.mux(packet)
    if index + 1 != n_expected:
        raise ValueError(f"frames: got {index + 1} frames for {n_expected} times_s; expected one frame "
                         "per time")
    for packet in stream.encode(None):
        container.mux(packet)


def _check_container_codec(suffix: str, codec: str) -> str:
    if suffix not in CONTAINER_CODECS:
        raise ValueError(f"path suffix {suffix!r}: unsupported container; expected one of "
                         f"{', '.join(CONTAINER_CODECS)}")
    if codec not in _ENCODERS:
        raise ValueError(f"codec = {codec!r}: unsupported; expected one of {', '.join(_ENCODERS)}")
    muxer, codecs = CONTAINER_CODECS[suffix]
    if codec not in codecs:
        raise ValueError(f"codec = {codec!r} in {suffix}: unsupported combination; {suffix} takes "
                         f"{', '.join(codecs)}")
    return muxer


def _check_times(times_s) -> np.ndarray:
    times = np.asarray(times_s, dtype=float)
    if times.ndim != 1 or times.size == 0:
        raise ValueError(f"times_s with shape {times.shape}: expected a non-empty 1-D sequence of seconds")
    if not np.all(np.isfinite(times)) or times[0] < 0:
        raise ValueError(f"times_s starts {times[:3].tolist()}…: expected finite times ≥ 0 s")
    steps = np.diff(times)
    if np.any(steps <= 0):
        i = int(np.argmax(steps <= 0))
        raise ValueError(f"times_s[{i}] = {float(times[i])!r}, times_s[{i + 1}] = {float(times[i + 1])!r}: "
                         "expected strictly increasing times")
    return times


def _rate(fps_hint: float | None, times: np.ndarray) -> Fraction:
    if fps_hint is None:
        if times.size < 2:
            return Fraction(30)
        fps = 1.0 / float(np.median(np.diff(times)))
    else:
        fps = float(fps_hint)
        if not (math.isfinite(fps) and fps > 0):
            raise ValueError(f"fps_hint = {fps_hint!r}: expected a positive frame rate in frames per second")
    return Fraction(fps).limit_denominator(1001)  # 29.97 → 30000/1001


def _time_base(suffix: str, rate: Fraction) -> Fraction:
    if suffix == ".avi":
        return 1 / rate
    if suffix == ".mkv":
        return MKV_TIME_BASE
    return MP4_TIME_BASE


def _ticks(times: np.ndarray, time_base: Fraction, suffix: str, rate: Fraction) -> np.ndarray:
    """Presentation times in ticks of the time base; must stay strictly increasing."""
    exact = times / float(time_base)
    ticks = np.rint(exact).astype(np.int64)
    if suffix == ".avi":
        off = np.abs(exact - ticks)
        if np.any(off > _AVI_GRID_TOLERANCE):
            i = int(np.argmax(off))
            raise ValueError(f"times_s[{i}] = {float(times[i])!r}: AVI stores a fixed rate of "
                             f"{float(rate):g} fps, "
                             f"this time is {off[i] * float(time_base):.2g} s off that grid; expected "
                             "multiples of 1/fps_hint (use .mp4/.mov/.mkv for irregular times)")
    steps = np.diff(ticks)
    if np.any(steps <= 0):
        i = int(np.argmax(steps <= 0))
        raise ValueError(f"times_s[{i}] = {float(times[i])!r} and times_s[{i + 1}] = "
                         f"{float(times[i + 1])!r} fall on the same tick of the {suffix} time base "
                         f"({float(time_base):.3g} s); expected frames at least "
                         "one tick apart")
    return ticks


def _check_rotation(rotation_deg: int, suffix: str) -> None:
    if rotation_deg not in (0, 90, 180, 270):
        raise ValueError(f"rotation_deg = {rotation_deg!r}: expected 0, 90, 180 or 270 (clockwise)")
    if rotation_deg and suffix == ".avi":
        raise ValueError(f"rotation_deg = {rotation_deg} in .avi: AVI cannot carry rotation metadata; "
                         "expected 0 or a .mp4/.mov/.mkv path")


def _check_pix_fmt(pix_fmt: str | None, codec: str) -> str:
    fmt = _DEFAULT_PIX_FMT[codec] if pix_fmt is None else pix_fmt
    supported = [f.name for f in av.codec.Codec(_ENCODERS[codec], "w").video_formats]
    if fmt not in supported:
        raise ValueError(f"pix_fmt = {fmt!r}: not supported by the {codec} encoder; expected one of "
                         f"{', '.join(supported)}")
    return fmt


def _options(codec, suffix, *, crf, bit_rate, gop, preset, capture_fps_metadata):
    """Encoder and muxer options, after checking each setting applies to this codec/container."""
    codec_options: dict[str, str] = {}
    container_options: dict[str, str] = {}
    if crf is not None and bit_rate is not None:
        raise ValueError(f"crf = {crf!r} and bit_rate = {bit_rate!r}: expected at most one of them")
    if bit_rate is not None and not (isinstance(bit_rate, (int, np.integer)) and bit_rate > 0):
        raise ValueError(f"bit_rate = {bit_rate!r}: expected a positive integer in bit/s")
    if gop is not None:
        if codec == "mjpeg":
            raise ValueError(f"gop = {gop!r} with codec 'mjpeg': MJPEG is intra-only; expected gop=None")
        if not (isinstance(gop, (int, np.integer)) and gop >= 1):
            raise ValueError(f"gop = {gop!r}: expected a positive integer number of frames")
    if preset is not None and codec not in _PRESET_CODECS:
        raise ValueError(f"preset = {preset!r} with codec {codec!r}: presets apply to h264/hevc only")
    if preset is not None:
        codec_options["preset"] = str(preset)
    if crf is not None:
        low, high = _CRF_RANGE[codec]
        if not (math.isfinite(float(crf)) and low <= float(crf) <= high):
            raise ValueError(f"crf = {crf!r} for {codec}: expected a value in [{low}, {high}]")
    if codec == "mjpeg":
        if bit_rate is None:  # fixed quantiser instead of FFmpeg's 200 kbit/s default
            q = str(round(float(crf))) if crf is not None else str(_MJPEG_DEFAULT_QSCALE)
            codec_options.update(qmin=q, qmax=q)
    elif crf is not None:
        codec_options["crf"] = f"{float(crf):g}"
    if codec == "h264" and _has_avx512():
        codec_options["x264-params"] = "asm=AVX2"  # repeatable output (module docstring)
    if codec == "hevc":
        codec_options["x265-params"] = "log-level=error"  # x265 prints to stderr by itself
    if capture_fps_metadata is not None:
        value = float(capture_fps_metadata)
        if suffix == ".avi":
            raise ValueError(f"capture_fps_metadata = {capture_fps_metadata!r} in .avi: AVI has no such tag; "
                             "expected a .mp4/.mov/.mkv path")
        if not (math.isfinite(value) and value > 0):
            raise ValueError(f"capture_fps_metadata = {capture_fps_metadata!r}: expected a positive "
                             "frame rate")
        if suffix in (".mp4", ".mov"):
            container_options["movflags"] = "use_metadata_tags"
    if suffix in (".mp4", ".mov"):  # movie timescale too, so a start offset (edit list) stays exact
        container_options["movie_timescale"] = str(MP4_TIME_BASE.denominator)
    return codec_options, container_options


@functools.cache
def _has_avx512() -> bool:
    try:
        with open("/proc/cpuinfo", encoding="ascii", errors="replace") as fh:
            return "avx512" in fh.read()
    except OSError:
        return False


def _check_frame(frame, index: int, shape) -> np.ndarray:
    arr = np.asarray(frame)
    if arr.dtype != np.uint8:
        raise ValueError(f"frames[{index}] has dtype {arr.dtype}: expected uint8")
    if not (arr.ndim == 2 or (arr.ndim == 3 and arr.shape[2] == 3)):
        raise ValueError(f"frames[{index}] has shape {arr.shape}: expected (H, W) grey or (H, W, 3) RGB")
    if shape is None:
        height, width = arr.shape[:2]
        if height % 2 or width % 2 or height < 2 or width < 2:
            raise ValueError(f"frames[0] is {width}×{height} px: expected even width and height "
                             "(4:2:0 chroma)")
    elif arr.shape != shape:
        raise ValueError(f"frames[{index}] has shape {arr.shape}: expected {shape} like frames[0]")
    return arr


def _display_matrix(rotation_deg: int, width_px: int, height_px: int) -> list[int]:
    """Phone-style display matrix (a b u c d v x y w; 16.16 fixed point, w in 2.30).

    Maps a stored pixel (x, y) to the displayed (x', y') = (a·x + c·y + tx, b·x + d·y + ty):
    a clockwise turn by ``rotation_deg`` followed by the shift back into the positive quadrant.
    """
    one = 1 << 16
    a, b, c, d, tx, ty = {
        90: (0, 1, -1, 0, height_px, 0),
        180: (-1, 0, 0, -1, width_px, height_px),
        270: (0, -1, 1, 0, 0, width_px),
    }[rotation_deg]
    return [a * one, b * one, 0, c * one, d * one, 0, tx * one, ty * one, 1 << 30]
