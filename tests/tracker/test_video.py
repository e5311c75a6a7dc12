"""tracker.video: per-frame times, rotation, slow motion, luma, duplicates, gaps and bad files.

Clips are written at test time with tracker.encode.write_clip (or bare PyAV for files write_clip
deliberately cannot make); truths are the arrays and times handed to the encoder.
"""

import json
import struct
import threading
import time
import tracemalloc

import av
import numpy as np
import pytest

from tracker import video
from tracker.encode import MKV_TIME_BASE, MP4_TIME_BASE, write_clip
from tracker.errors import ClipError
from tracker.video import ClipInfo, Frame, iter_frames, probe, read_clip

W, H = 64, 48  # stored (sensor) frame size of the small test clips
TIME_EPS_S = 1e-9  # float64 arithmetic on tick counts, far below any time base


def _noise(n, seed=0, shape=(H, W)):
    rng = np.random.default_rng(seed)
    return [rng.integers(0, 256, shape, dtype=np.uint8) for _ in range(n)]


def _read(path, **kwargs):
    """The way the tracker reads: probe and decoder start at once (the decoder learns the
    ClipInfo late, also on the damaged-file paths)."""
    info, frames = read_clip(path, **kwargs)
    return info, list(frames)


def _decoding_threads():
    return [t for t in threading.enumerate() if t.name == "fallcam-decode"]


# ---- time -----------------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("name", "codec", "time_base"),
    [("v.mp4", "h264", MP4_TIME_BASE), ("v.mov", "hevc", MP4_TIME_BASE),
     ("v.mkv", "h264", MKV_TIME_BASE), ("v.mov", "mjpeg", MP4_TIME_BASE)],
)
def test_irregular_frame_times_round_trip_within_the_time_base(tmp_path, name, codec, time_base):
    rng = np.random.default_rng(11)
    times = 0.5 + np.cumsum(rng.uniform(1 / 240, 1 / 20, 45))  # VFR phone-like, non-zero start
    path = tmp_path / name
    write_clip(path, _noise(45), times, codec=codec)
    info, frames = _read(path)
    t = np.array([f.t_s for f in frames])
    assert info.timestamps == "container" and info.capture_fps_source == "container pts"
    assert info.n_frames == len(frames) == 45
    assert [f.index for f in frames] == list(range(45))
    # each time is rounded to the time base once when written: error ≤ half a tick, twice (t and t0)
    assert np.abs(t - (times - times[0])).max() <= float(time_base) + TIME_EPS_S
    # independent decoder pass: bare PyAV presentation times in decode-output order
    with av.open(str(path)) as container:
        bare = np.array([f.time for f in container.decode(video=0)])
    np.testing.assert_allclose(t, bare - bare[0], atol=TIME_EPS_S, rtol=0)


def test_b_frame_clip_comes_out_in_presentation_order(tmp_path):
    yy, xx = np.mgrid[0:H, 0:W]
    frames = [np.where((xx - 8 - i) ** 2 + (yy - 24) ** 2 < 49, 230, 30).astype(np.uint8) for i in range(40)]
    times = np.arange(40) / 60
    path = tmp_path / "b.mp4"
    write_clip(path, frames, times)
    with av.open(str(path)) as container:
        file_order = [p.pts for p in container.demux(video=0) if p.size]
    assert file_order != sorted(file_order)  # the file really has reordered (B) frames
    info, decoded = _read(path)
    np.testing.assert_allclose([f.t_s for f in decoded], times, atol=float(MP4_TIME_BASE))
    # the disc moves right 1 px per frame: presentation order puts its centroid in sequence
    cx = [float((f.luma > 128).nonzero()[1].mean()) for f in decoded]
    assert np.all(np.diff(cx) > 0.5)


def test_interval_statistics_and_gaps(tmp_path):
    steps = np.full(30, 1 / 30)
    steps[[9, 20]] = 2 / 30  # two dropped frames
    steps[25] = 3 / 30  # two more in a row
    times = np.concatenate([[0.0], np.cumsum(steps)])
    path = tmp_path / "gaps.mp4"
    write_clip(path, _noise(len(times)), times)
    info = probe(path)
    tick = float(MP4_TIME_BASE)
    assert info.n_gaps == 3
    assert info.frame_interval_s["median"] == pytest.approx(1 / 30, abs=tick)
    assert info.frame_interval_s["min"] == pytest.approx(1 / 30, abs=tick)
    assert info.frame_interval_s["max"] == pytest.approx(3 / 30, abs=tick)
    assert info.stored_fps == pytest.approx(30, rel=1e-4)
    assert info.duration_s == pytest.approx(times[-1] + 1 / 30, abs=2 * tick)
    assert any("3 gap(s)" in w for w in info.warnings)


def test_webcam_mjpeg_avi_with_repeated_and_dropped_frames(tmp_path):
    ticks = [0, 1, 2, 3, 4, 5, 7, 8, 9, 10, 11, 12]  # tick 6 dropped
    frames = _noise(len(ticks), seed=2)
    frames[3] = frames[2].copy()  # the camera delivered the same picture twice
    path = tmp_path / "webcam.avi"
    write_clip(path, frames, np.array(ticks) / 30, codec="mjpeg", fps_hint=30)
    info, decoded = _read(path)
    assert (info.container, info.codec) == ("avi", "mjpeg")
    assert info.n_duplicates == 1 and info.n_gaps == 1
    assert [f.index for f in decoded if f.duplicate] == [3]
    np.testing.assert_allclose([f.t_s for f in decoded], np.array(ticks) / 30, atol=TIME_EPS_S)
    assert any("repeat the previous one byte for byte" in w for w in info.warnings)
    assert not any("synthesized" in w for w in info.warnings)  # the gap shows real timing


def test_repeated_frames_at_perfectly_regular_times_look_synthesized(tmp_path):
    frames = _noise(12, seed=4)
    frames[6] = frames[5].copy()
    path = tmp_path / "cfr.avi"
    write_clip(path, frames, np.arange(12) / 25, codec="mjpeg", fps_hint=25)
    info = probe(path)
    assert any("timestamps look synthesized" in w for w in info.warnings)


def test_h264_duplicates_are_flagged_after_decoding(tmp_path):
    frames = _noise(20, seed=6)
    frames[7] = frames[6].copy()
    frames[13] = frames[12].copy()
    frames[14] = frames[12].copy()
    path = tmp_path / "dup.mp4"
    write_clip(path, frames, np.arange(20) / 30)
    info, decoded = _read(path)
    assert [f.index for f in decoded if f.duplicate] == [7, 13, 14]
    assert info.n_duplicates == 0  # inter-coded repeats differ as packets (documented)


# ---- slow motion ----------------------------------------------------------------------------------

SLOW_N = 24
STORED_TIMES = np.arange(SLOW_N) / 30  # stored as a 30 fps file


@pytest.mark.parametrize(("name", "tick_s"),
                         [("slow.mp4", float(MP4_TIME_BASE)), ("slow.mkv", float(MKV_TIME_BASE))])
def test_slow_motion_rescale_from_the_capture_rate_tag(tmp_path, name, tick_s):
    path = tmp_path / name
    write_clip(path, _noise(SLOW_N), STORED_TIMES, capture_fps_metadata=240)
    info, frames = _read(path)
    assert info.capture_fps_source == "metadata"
    assert info.capture_fps == pytest.approx(240)
    # the stored rate comes from the rounded timestamps: one tick over the clip's stored span
    assert info.time_scale == pytest.approx(30 / 240, rel=tick_s / STORED_TIMES[-1])
    assert any("slow-motion file" in w for w in info.warnings)
    np.testing.assert_allclose([f.t_s for f in frames], np.arange(SLOW_N) / 240, atol=tick_s)


def test_slow_motion_rescale_from_the_user(tmp_path):
    path = tmp_path / "slow.mp4"
    write_clip(path, _noise(SLOW_N), STORED_TIMES)
    info, frames = _read(path, capture_fps=120)
    assert (info.capture_fps_source, info.capture_fps) == ("user", 120.0)
    assert info.time_scale == pytest.approx(0.25)
    assert info.duration_s == pytest.approx(SLOW_N / 120)
    assert info.frame_interval_s["median"] == pytest.approx(1 / 120)
    np.testing.assert_allclose([f.t_s for f in frames], np.arange(SLOW_N) / 120, atol=1e-9)
    assert info.warnings == []


def _retype_tag_as_float32(path, text=b"240.000000"):
    """Rewrite the text value of the capture-rate tag as Android's float32 (mdta data type 23),
    fixing the sizes of the boxes around it (moov is last in the file, so no offsets move)."""
    data = bytearray(path.read_bytes())
    old = b"data" + struct.pack(">II", 1, 0) + text
    at = data.index(old) - 4  # start of the 'data' box
    new = b"data" + struct.pack(">II", 23, 0) + struct.pack(">f", float(text))
    delta = len(new) - len(old)

    def grow(start, end):
        while start < end:
            size, kind = struct.unpack(">I4s", data[start:start + 8])
            if start <= at < start + size:
                struct.pack_into(">I", data, start, size + delta)
                if start != at:  # a container of the data box: moov, udta, meta, ilst, ilst item
                    grow(start + 8 + (4 if kind == b"meta" else 0), start + size)
                return
            start += size

    grow(0, len(data))
    data[at + 4:at + 4 + len(old)] = new
    path.write_bytes(bytes(data))


def test_android_float32_capture_rate_tag_is_read(tmp_path):
    path = tmp_path / "android.mp4"
    write_clip(path, _noise(SLOW_N), STORED_TIMES, capture_fps_metadata=240)
    _retype_tag_as_float32(path)
    assert b"240.000000" not in path.read_bytes()
    info = probe(path)
    assert (info.capture_fps_source, info.capture_fps) == ("metadata", 240.0)


@pytest.mark.parametrize(
    ("user_fps", "warned"),
    [(120.0, True), (241.2, False)],  # 50 % off → warn; 0.5 % off → within DISAGREEMENT_TOLERANCE
)
def test_user_capture_rate_wins_and_disagreement_is_warned(tmp_path, user_fps, warned):
    path = tmp_path / "slow.mp4"
    write_clip(path, _noise(SLOW_N), STORED_TIMES, capture_fps_metadata=240)
    info = probe(path, capture_fps=user_fps)
    assert info.capture_fps_source == "user" and info.capture_fps == user_fps
    assert any("disagrees with the file's com.android.capture.fps 240" in w for w in info.warnings) is warned


def test_absurd_capture_rate_is_warned(tmp_path):
    path = tmp_path / "slow.mp4"
    write_clip(path, _noise(SLOW_N), STORED_TIMES)
    info = probe(path, capture_fps=50_000)
    assert any("implausible capture frame rate 50000 fps" in w for w in info.warnings)


@pytest.mark.parametrize("stated", [("user", 30.5), ("metadata", 30.0)])
def test_capture_rate_equal_to_stored_rate_keeps_container_time(tmp_path, stated):
    source, fps = stated
    path = tmp_path / "realtime.mp4"
    write_clip(path, _noise(SLOW_N), STORED_TIMES,
               capture_fps_metadata=fps if source == "metadata" else None)
    info, frames = _read(path, capture_fps=fps if source == "user" else None)
    assert (info.time_scale, info.capture_fps_source) == (1.0, "container pts")
    np.testing.assert_allclose([f.t_s for f in frames], STORED_TIMES, atol=float(MP4_TIME_BASE))


# ---- rotation -------------------------------------------------------------------------------------

# Where the stored top-left pixel lands in the displayed frame for each clockwise display rotation
# (a phone held upright in portrait stores landscape frames tagged 90: top-left → top-right).
STORED_TOP_LEFT_SHOWN_AT = {0: "top-left", 90: "top-right", 180: "bottom-right", 270: "bottom-left"}


def _corner(luma, name):
    row = 0 if name.startswith("top") else luma.shape[0] - 1
    col = 0 if name.endswith("left") else luma.shape[1] - 1
    return luma[row, col]


@pytest.mark.parametrize("name", ["rot.mp4", "rot.mkv"])
@pytest.mark.parametrize("rotation_deg", [0, 90, 180, 270])
def test_rotation_round_trip_with_an_asymmetric_frame(tmp_path, name, rotation_deg):
    stored = np.full((H, W), 50, np.uint8)
    stored[0, 0] = 255  # the marker corner
    stored[4:12, 4:28] = 200  # a wide bar near the top-left: asymmetric under every turn
    stored[1:, 1:] = np.maximum(stored[1:, 1:], np.random.default_rng(1).integers(0, 40, (H - 1, W - 1)))
    path = tmp_path / name
    write_clip(path, [stored, stored], [0.0, 0.04], rotation_deg=rotation_deg, crf=0)  # lossless
    info, frames = _read(path)
    luma = frames[0].luma
    assert info.rotation_deg == rotation_deg
    assert (info.stored_width_px, info.stored_height_px) == (W, H)
    assert luma.shape == (info.height_px, info.width_px)
    assert luma.shape == ((W, H) if rotation_deg in (90, 270) else (H, W))
    assert _corner(luma, STORED_TOP_LEFT_SHOWN_AT[rotation_deg]) == 255
    # every displayed pixel maps back to the stored pixel it came from (rolling-shutter rows)
    ys, xs = np.mgrid[0:info.height_px, 0:info.width_px]
    rows, cols = info.stored_row_col(xs, ys)
    np.testing.assert_array_equal(stored[rows.astype(int), cols.astype(int)], luma)
    assert luma.flags.c_contiguous and luma.flags.owndata


def test_rotation_written_by_pyav_itself_is_read_with_our_sign(tmp_path):
    """PyAV's set_display_rotation takes counter-clockwise degrees: -90 is a 90° clockwise turn."""
    path = tmp_path / "pyav_rot.mp4"
    with av.open(str(path), "w") as container:
        stream = container.add_stream("libx264", rate=30)
        stream.width, stream.height, stream.pix_fmt = W, H, "yuv420p"
        stream.set_display_rotation(-90)
        for i in range(3):
            frame = av.VideoFrame.from_ndarray(np.zeros((H, W), np.uint8), format="gray")
            frame = frame.reformat(format="yuv420p")
            frame.pts = i
            for packet in stream.encode(frame):
                container.mux(packet)
        for packet in stream.encode(None):
            container.mux(packet)
    info = probe(path)
    assert (info.rotation_deg, info.width_px, info.height_px) == (90, H, W)


def test_stored_row_col_for_scalars_and_arrays():
    info = ClipInfo(path="x", container="c", codec="h264", pixel_format="yuv420p", width_px=48,
                    height_px=64, stored_width_px=64, stored_height_px=48, rotation_deg=90,
                    n_frames=2, duration_s=0.1, stored_fps=30.0, capture_fps=30.0, time_scale=1.0,
                    capture_fps_source="container pts", timestamps="container",
                    frame_interval_s={"min": 0.03, "median": 0.03, "max": 0.03},
                    n_duplicates=0, n_gaps=0, truncated=False, warnings=[])
    # displayed top-right (x = 47, y = 0) is the stored top-left; sub-pixel positions map linearly
    assert info.stored_row_col(47.0, 0.0) == (0.0, 0.0)
    assert info.stored_row(46.5, 10.25) == pytest.approx(0.5)
    rows, cols = info.stored_row_col(np.array([47.0, 0.0]), 5.0)
    np.testing.assert_array_equal(rows, [0.0, 47.0])
    np.testing.assert_array_equal(cols, [5.0, 5.0])


# ---- luma -----------------------------------------------------------------------------------------

LUMA_TOL = 1.0  # flat grey fields survive every codec to within one grey level


@pytest.mark.parametrize(("name", "codec"), [("g.mp4", "h264"), ("g.mkv", "hevc"), ("g.avi", "mjpeg")])
def test_luma_equals_the_grey_level_written(tmp_path, name, codec):
    levels = [3, 17, 64, 128, 200, 252]
    frames = [np.full((H, W), v, np.uint8) for v in levels]
    path = tmp_path / name
    write_clip(path, frames, np.arange(len(levels)) / 30, codec=codec)
    _, decoded = _read(path)
    for level, frame in zip(levels, decoded, strict=True):
        assert frame.luma.dtype == np.uint8
        assert np.abs(frame.luma.astype(int) - level).max() <= LUMA_TOL


def test_lossless_luma_is_exact(tmp_path):
    frames = _noise(4, seed=9)
    path = tmp_path / "exact.mkv"
    write_clip(path, frames, np.arange(4) / 30, crf=0)
    _, decoded = _read(path)
    for written, frame in zip(frames, decoded, strict=True):
        np.testing.assert_array_equal(frame.luma, written)


TEN_BIT_TOL = 1.0  # 8-bit grey → 10-bit (×1023/255) → drop 2 bits: at most one level low


def test_ten_bit_hdr_clip_is_reduced_to_8_bit_with_a_warning(tmp_path):
    levels = [0, 40, 128, 255]
    frames = [np.full((H, W), v, np.uint8) for v in levels]
    path = tmp_path / "hdr.mp4"
    write_clip(path, frames, np.arange(4) / 30, codec="hevc", pix_fmt="yuv420p10le", crf=0)
    info, decoded = _read(path)
    assert info.pixel_format == "yuv420p10le"
    assert any("HDR/10-bit" in w for w in info.warnings)
    for level, frame in zip(levels, decoded, strict=True):
        assert np.abs(frame.luma.astype(int) - level).max() <= TEN_BIT_TOL


def test_pq_transfer_is_named_in_the_warnings(tmp_path):
    path = tmp_path / "pq.mkv"
    with av.open(str(path), "w") as container:
        stream = container.add_stream("libx265", rate=30, options={"x265-params": "log-level=error"})
        stream.width, stream.height, stream.pix_fmt = W, H, "yuv420p10le"
        stream.codec_context.color_trc = 16  # SMPTE ST 2084 (PQ), as HDR10 phone clips
        for i in range(3):
            frame = av.VideoFrame.from_ndarray(np.full((H, W), 100, np.uint8), format="gray")
            frame = frame.reformat(format="yuv420p10le")
            frame.pts = i
            for packet in stream.encode(frame):
                container.mux(packet)
        for packet in stream.encode(None):
            container.mux(packet)
    assert any(w.startswith("HDR transfer PQ (SMPTE ST 2084)") for w in probe(path).warnings)


def test_rgb_clip_luma_goes_through_one_grey_conversion(tmp_path):
    """A packed-RGB file (no Y plane) is converted to grey once; grey in → same grey out."""
    path = tmp_path / "rgb.mkv"
    level = 90
    with av.open(str(path), "w") as container:
        stream = container.add_stream("libx264rgb", rate=30, options={"qp": "0"})
        stream.width, stream.height, stream.pix_fmt = W, H, "bgr24"
        for i in range(3):
            frame = av.VideoFrame.from_ndarray(np.full((H, W, 3), level, np.uint8), format="bgr24")
            frame.pts = i
            for packet in stream.encode(frame):
                container.mux(packet)
        for packet in stream.encode(None):
            container.mux(packet)
    info, decoded = _read(path)
    assert info.pixel_format in ("bgr24", "gbrp")
    assert all(np.abs(f.luma.astype(int) - level).max() <= LUMA_TOL for f in decoded)


# ---- memory and API ---------------------------------------------------------------------------------

def test_memory_stays_flat_while_streaming(tmp_path):
    shape = (240, 320)
    frame_bytes = shape[0] * shape[1]
    path = tmp_path / "long.mp4"
    write_clip(path, _noise(60, shape=shape), np.arange(60) / 30, preset="ultrafast")
    info = probe(path)
    tracemalloc.start()
    n = sum(1 for _ in iter_frames(path, info=info))
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert n == 60
    assert peak < 8 * frame_bytes  # holding the clip would take 60 frames


def test_clip_info_to_dict_is_json_friendly(tmp_path):
    path = tmp_path / "j.mp4"
    write_clip(path, _noise(5), np.arange(5) / 30)
    data = probe(path).to_dict()
    assert json.loads(json.dumps(data)) == data
    assert all(type(v) in (str, int, float, bool, dict, list) for v in data.values())


def test_frames_are_lazy_and_typed(tmp_path):
    path = tmp_path / "lazy.mp4"
    write_clip(path, _noise(10), np.arange(10) / 30)
    frames = iter_frames(path)
    first = next(frames)
    assert isinstance(first, Frame) and first.index == 0 and first.t_s == 0.0 and not first.duplicate
    frames.close()  # stopping early closes the file


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [({"capture_fps": 0}, "capture_fps = 0: expected a positive frame rate"),
     ({"capture_fps": float("nan")}, "capture_fps = nan: expected a positive frame rate"),
     ({"capture_fps": "fast"}, "capture_fps = 'fast': expected a positive frame rate")],
)
def test_bad_capture_fps(tmp_path, kwargs, match):
    path = tmp_path / "c.mp4"
    write_clip(path, _noise(3), [0.0, 0.04, 0.08])
    with pytest.raises(ValueError, match=match):
        probe(path, **kwargs)


def test_iter_frames_argument_checks(tmp_path):
    a, b = tmp_path / "a.mp4", tmp_path / "b.mp4"
    for path in (a, b):
        write_clip(path, _noise(3), [0.0, 0.04, 0.08])
    info = probe(a)
    with pytest.raises(ValueError, match="give capture_fps to probe"):
        iter_frames(a, info=info, capture_fps=240)
    with pytest.raises(ValueError, match="info is for .*a.mp4'?, not .*b.mp4"):
        iter_frames(b, info=info)


def test_read_clip_is_probe_then_iter_frames(tmp_path):
    rng = np.random.default_rng(4)
    times = np.cumsum(rng.uniform(1 / 120, 1 / 25, 30))
    path = tmp_path / "vfr.mp4"
    write_clip(path, _noise(30, seed=4), times, codec="h264", rotation_deg=90)
    info, frames = _read(path)
    sequential = probe(path)
    assert info == sequential
    for got, want in zip(frames, iter_frames(path, info=sequential), strict=True):
        assert (got.index, got.t_s, got.duplicate) == (want.index, want.t_s, want.duplicate)
        np.testing.assert_array_equal(got.luma, want.luma)
    assert not _decoding_threads()


def test_read_clip_stops_its_thread_however_it_ends(tmp_path):
    path = tmp_path / "c.mp4"
    write_clip(path, _noise(20), np.arange(20) / 30)
    info, frames = read_clip(path)  # closed before the first frame is taken
    frames.close()
    with read_clip(path)[1] as frames:  # left after two frames
        next(frames), next(frames)
    assert not _decoding_threads()
    assert list(frames) == []  # a closed reader is empty
    for frame in iter_frames(path):  # left by a loop, and dropped: its thread ends by itself
        break
    del frame
    for _ in range(100):
        if not _decoding_threads():
            break
        time.sleep(0.01)
    assert not _decoding_threads()
    # the probe fails: its error is raised, and the decoder that started with it is stopped
    text = tmp_path / "notes.mp4"
    text.write_text("not a video\n" * 100)
    with pytest.raises(ClipError, match="not a readable video"):
        read_clip(text)
    with pytest.raises(ValueError, match="capture_fps = -1"):
        read_clip(path, capture_fps=-1)
    assert not _decoding_threads()


@pytest.mark.parametrize("budget_frames, ahead", [(7, 7), (0.5, video.PREFETCH_FRAMES),
                                                   (1000, video.PREFETCH_MAX_FRAMES)])
def test_the_reader_decodes_ahead_as_many_frames_as_its_budget_holds(tmp_path, monkeypatch,
                                                                      budget_frames, ahead):
    path = tmp_path / "c.mp4"
    write_clip(path, _noise(40), np.arange(40) / 30)
    monkeypatch.setattr(video, "PREFETCH_BYTES", int(budget_frames * H * W))
    with read_clip(path)[1] as frames:
        next(frames)
        deadline = time.monotonic() + 10.0
        while frames._queue.qsize() < ahead and time.monotonic() < deadline:
            time.sleep(0.01)
        time.sleep(0.3)      # and no further: the decoding thread waits for room
        assert frames._queue.qsize() == ahead
        assert len(list(frames)) == 39
    assert not _decoding_threads()


# ---- files without timestamps ---------------------------------------------------------------------

def _raw_h264(path, n=20):
    """A bare H.264 elementary stream: frames without presentation timestamps."""
    with av.open(str(path), "w", format="h264") as container:
        stream = container.add_stream("libx264", rate=30)
        stream.width, stream.height, stream.pix_fmt = W, H, "yuv420p"
        for i, image in enumerate(_noise(n)):
            frame = av.VideoFrame.from_ndarray(image, format="gray").reformat(format="yuv420p")
            frame.pts = i
            for packet in stream.encode(frame):
                container.mux(packet)
        for packet in stream.encode(None):
            container.mux(packet)


def test_missing_timestamps_fall_back_to_the_nominal_rate_loudly(tmp_path):
    path = tmp_path / "raw.h264"
    _raw_h264(path)
    info, frames = _read(path)
    assert info.timestamps == "nominal" and info.capture_fps_source == "nominal rate"
    assert info.warnings[0].startswith("NO USABLE TIMESTAMPS")
    np.testing.assert_allclose([f.t_s for f in frames], np.arange(20) / info.stored_fps, atol=TIME_EPS_S)


def test_missing_timestamps_with_a_stated_capture_rate(tmp_path):
    path = tmp_path / "raw.h264"
    _raw_h264(path)
    info, frames = _read(path, capture_fps=100)
    assert (info.timestamps, info.capture_fps_source, info.capture_fps) == ("nominal", "user", 100.0)
    assert "i / 100 fps (capture_fps as given)" in info.warnings[0]
    np.testing.assert_allclose([f.t_s for f in frames], np.arange(20) / 100, atol=TIME_EPS_S)


# ---- bad files --------------------------------------------------------------------------------------

def _cut(path, fraction):
    data = path.read_bytes()
    cut = path.with_name(f"cut_{path.name}")
    cut.write_bytes(data[: int(len(data) * fraction)])
    return cut


def _faststart_mp4(path, n=60):
    """An MP4 with its index in front (as some phones write): a cut leaves the index intact."""
    with av.open(str(path), "w", options={"movflags": "faststart"}) as container:
        stream = container.add_stream("libx264", rate=30)
        stream.width, stream.height, stream.pix_fmt = W, H, "yuv420p"
        for i, image in enumerate(_noise(n)):
            frame = av.VideoFrame.from_ndarray(image, format="gray").reformat(format="yuv420p")
            frame.pts = i
            for packet in stream.encode(frame):
                container.mux(packet)
        for packet in stream.encode(None):
            container.mux(packet)


def _clip(tmp_path, name, n=60):
    path = tmp_path / name
    if name == "front.mp4":
        _faststart_mp4(path, n)
    else:
        write_clip(path, _noise(n), np.arange(n) / 30, codec="mjpeg" if name.endswith(".avi") else "h264")
    return path


@pytest.mark.parametrize(
    ("name", "fraction", "match"),
    [("c.mp4", 0.5, r"MP4/MOV file without a readable index \('moov' box\)"),
     ("c.mp4", 0.95, r"MP4/MOV file without a readable index \('moov' box\)"),
     ("c.mkv", 0.35, r"truncated: only \d+ frames \(\d+% of the length its header declares\)"),
     ("c.avi", 0.35, r"truncated: only \d+ frames \(\d+% of the length its header declares\)"),
     ("front.mp4", 0.35, r"truncated: only \d+ frames"),
     ("c.mkv", 0.01, r"only [01] readable frame\(s\) \(truncated, damaged or too short\)")],
)
def test_truncated_early_is_a_clip_error(tmp_path, name, fraction, match):
    cut = _cut(_clip(tmp_path, name), fraction)
    with pytest.raises(ClipError, match=match):
        probe(cut)


@pytest.mark.parametrize("name", ["c.mkv", "c.avi", "front.mp4"])
def test_truncated_near_the_end_yields_the_readable_frames_with_a_warning(tmp_path, name):
    cut = _cut(_clip(tmp_path, name), 0.85)
    info, frames = _read(cut)
    assert info.truncated
    assert any("file is truncated" in w for w in info.warnings)
    assert 40 <= len(frames) < 60 and len(frames) == info.n_frames
    np.testing.assert_allclose([f.t_s for f in frames], np.arange(len(frames)) / 30, atol=1e-3)


def test_single_frame_clip_is_too_short(tmp_path):
    path = tmp_path / "one.mp4"
    write_clip(path, _noise(1), [0.0])
    with pytest.raises(ClipError, match=r"only 1 readable frame\(s\).*expected a clip of at least 2 frames"):
        probe(path)


def test_missing_file(tmp_path):
    with pytest.raises(ClipError, match=r"clip .*nope.mp4: no such file; expected a video file"):
        probe(tmp_path / "nope.mp4")


def test_directory_is_not_a_clip(tmp_path):
    with pytest.raises(ClipError, match="not a regular file"):
        probe(tmp_path)


def test_zero_byte_file(tmp_path):
    path = tmp_path / "empty.mp4"
    path.touch()
    with pytest.raises(ClipError, match=r"file is empty \(0 bytes\)"):
        probe(path)


def test_text_file_renamed_mp4(tmp_path):
    path = tmp_path / "notes.mp4"
    path.write_text("ball 1: 3.2 s\nball 2: 3.1 s\n" * 20)
    with pytest.raises(ClipError, match=r"not a readable video \(Invalid data found when processing input\)"):
        probe(path)


def test_audio_only_file_has_no_video_stream(tmp_path):
    path = tmp_path / "voice.m4a"
    with av.open(str(path), "w") as container:
        stream = container.add_stream("aac", rate=44100)
        for i in range(5):
            frame = av.AudioFrame.from_ndarray(np.zeros((1, 1024), np.float32), format="fltp", layout="mono")
            frame.sample_rate, frame.pts = 44100, i * 1024
            for packet in stream.encode(frame):
                container.mux(packet)
        for packet in stream.encode(None):
            container.mux(packet)
    with pytest.raises(ClipError, match=r"no video stream \(contains audio\)"):
        probe(path)


def test_unknown_codec_is_unsupported(tmp_path):
    path = _clip(tmp_path, "c.avi", n=5)
    path.write_bytes(path.read_bytes().replace(b"MJPG", b"QZQZ"))  # a fourcc no decoder knows
    with pytest.raises(ClipError, match="unsupported video codec"):
        probe(path)
