"""Overlay video: same frames and frame times as the source, drawings where the data say, in the
displayed orientation, scaled down when wide; checked on small clips written at test time."""

import numpy as np
import pandas as pd
import pytest

from fallcam.overlay import MAX_WIDTH_PX, write_overlay
from tracker.encode import write_clip
from tracker.errors import ClipError
from tracker.video import iter_frames, probe

# two ticks of the MP4 time base (1/90000 s): both clips store their times on that grid
TIME_TOL_S = 2.0 / 90000.0
BACKGROUND = 30  # grey level of the test scene
BALL_LEVEL = 200
BALL_RADIUS_PX = 5.0
# luma of the overlay colours (BT.601): yellow marks ≈ 211, green ring ≈ 145; a drawing is
# "there" when the local maximum rises this far above the background, far beyond codec noise
DRAWN_RISE = 40


def _scene(width: int, height: int, centre: tuple[float, float] | None) -> np.ndarray:
    img = np.full((height, width), BACKGROUND, np.uint8)
    if centre is not None:
        yy, xx = np.mgrid[0:height, 0:width]
        img[(xx - centre[0]) ** 2 + (yy - centre[1]) ** 2 <= BALL_RADIUS_PX**2] = BALL_LEVEL
    return img


def _centres(n: int) -> np.ndarray:
    return np.column_stack((np.full(n, 80.0), 20.0 + 3.0 * np.arange(n)))


def _traj(n: int, skip: tuple[int, ...] = ()) -> pd.DataFrame:
    xy = _centres(n)
    keep = [k for k in range(n) if k not in skip]
    return pd.DataFrame({"frame": keep, "t_s": 0.0, "x_px": xy[keep, 0], "y_px": xy[keep, 1],
                         "diameter_v_px": 2 * BALL_RADIUS_PX, "track": 0,
                         "in_plateau": [k >= 10 for k in keep]})


def _summary(mark_y_px: float = 60.0) -> dict:
    return {"rig": {"marks": {"points_px": [[80.0, mark_y_px]]}},
            "scale": {"p1_px": [140.0, 10.0], "p2_px": [140.0, 110.0]},
            "tracks": [{"id": 0, "marks": [{"index": 0, "crossing_s": 0.5}]}]}


@pytest.fixture(scope="module")
def vfr_clip(tmp_path_factory):
    """24 frames of 160 × 120 at irregular times (variable frame rate), ball moving down."""
    rng = np.random.default_rng(4)
    n = 24
    times = np.concatenate(([0.0], np.cumsum(rng.uniform(1 / 35, 1 / 25, n - 1))))
    path = tmp_path_factory.mktemp("overlay") / "vfr.mp4"
    write_clip(path, (_scene(160, 120, tuple(c)) for c in _centres(n)), times, crf=10)
    return path, times


def test_same_frames_and_times_as_the_source(vfr_clip, tmp_path):
    clip, times = vfr_clip
    out = write_overlay(clip, _traj(len(times)), _summary(), tmp_path / "overlay.mp4")
    assert out == tmp_path / "overlay.mp4"
    info = probe(out)
    assert info.codec == "h264" and info.rotation_deg == 0
    got = np.array([f.t_s for f in iter_frames(out)])
    assert got.shape == times.shape
    np.testing.assert_allclose(got, times - times[0], atol=TIME_TOL_S, rtol=0)
    assert [p.name for p in tmp_path.iterdir()] == ["overlay.mp4"]  # no temporary file left


def _peak(luma: np.ndarray, x: float, y: float) -> int:
    """Brightest pixel in the 3 × 3 neighbourhood of (x, y)."""
    r, c = int(round(y)), int(round(x))
    return int(luma[r - 1:r + 2, c - 1:c + 2].max())


def test_drawings_are_where_the_data_put_them(vfr_clip, tmp_path):
    clip, times = vfr_clip
    out = write_overlay(clip, _traj(len(times), skip=(6,)), _summary(mark_y_px=60.0),
                        tmp_path / "overlay.mp4")
    frames = {f.index: f.luma for f in iter_frames(out)}
    source = {f.index: f.luma for f in iter_frames(clip)}
    # the timing mark: a dashed line across the frame at y = 60 (first dash at x = 0 … 14)
    assert _peak(frames[0], 7.0, 60.0) > BACKGROUND + DRAWN_RISE
    assert _peak(source[0], 7.0, 60.0) < BACKGROUND + 10
    ring_px = BALL_RADIUS_PX + 3.0  # ring drawn 3 px outside the ball's edge
    for k in (3, 12):
        x, y = _centres(len(times))[k]
        assert _peak(frames[k], x - ring_px, y) > BACKGROUND + DRAWN_RISE, f"no ring, frame {k}"
        assert _peak(source[k], x - ring_px, y) < BACKGROUND + 10
        # just outside the ring (and away from the trail and labels) the scene is untouched
        assert _peak(frames[k], x - ring_px - 6.0, y) < BACKGROUND + DRAWN_RISE / 2
    # frame 6 has no detection: no ring around where the ball is
    x, y = _centres(len(times))[6]
    assert _peak(frames[6], x - ring_px, y) < BACKGROUND + DRAWN_RISE


def test_progress_counts_both_passes(vfr_clip, tmp_path):
    clip, times = vfr_clip
    calls = []
    write_overlay(clip, _traj(len(times)), {}, tmp_path / "o.mp4",
                  progress=lambda done, total: calls.append((done, total)))
    n = len(times)
    assert calls[-1] == (2 * n, 2 * n)
    assert [d for d, _ in calls] == list(range(1, 2 * n + 1))


def test_rotated_slow_motion_clip(tmp_path):
    # stored 64 × 96 (W × H) turned 90° for display; 240 fps captured, stored at 30 fps
    n = 8
    stored_times = np.arange(n) / 30.0
    displayed = [_scene(96, 64, (20.0 + 8 * k, 30.0)) for k in range(n)]
    stored = [np.ascontiguousarray(np.rot90(img, k=1)) for img in displayed]
    clip = tmp_path / "portrait_slowmo.mp4"
    write_clip(clip, stored, stored_times, rotation_deg=90, capture_fps_metadata=240.0, crf=10)
    src = probe(clip)
    assert (src.width_px, src.height_px, src.rotation_deg) == (96, 64, 90)
    traj = pd.DataFrame({"frame": range(n), "x_px": 20.0 + 8 * np.arange(n), "y_px": 30.0,
                         "track": 0})
    out = write_overlay(clip, traj, {}, tmp_path / "overlay.mp4")
    info = probe(out)
    assert (info.width_px, info.height_px, info.rotation_deg) == (96, 64, 0)
    got = np.array([f.t_s for f in iter_frames(out)])
    np.testing.assert_allclose(got, stored_times, atol=TIME_TOL_S, rtol=0)  # plays as the file


def test_wide_clip_is_scaled_down(tmp_path):
    width, height, n = 1400, 96, 4
    clip = tmp_path / "wide.mp4"
    write_clip(clip, [_scene(width, height, None) for _ in range(n)], np.arange(n) / 25.0)
    out = write_overlay(clip, _traj(n).iloc[0:0], _summary(mark_y_px=40.0),
                        tmp_path / "overlay.mp4")
    info = probe(out)
    scale = MAX_WIDTH_PX / width
    assert info.width_px == MAX_WIDTH_PX
    assert info.height_px == 88  # 96 × 1280/1400 = 87.8 → 88 (even, for 4:2:0 chroma)
    luma = next(iter(iter_frames(out))).luma
    y_mark = (40.0 + 0.5) * scale - 0.5  # pixel-centre convention, scaled
    assert _peak(luma, 7.0, y_mark) > BACKGROUND + DRAWN_RISE
    assert _peak(luma, 7.0, y_mark + 8.0) < BACKGROUND + 10


def test_missing_trajectory_column_is_named(vfr_clip, tmp_path):
    clip, times = vfr_clip
    with pytest.raises(ValueError, match=r"trajectory: missing column\(s\) x_px"):
        write_overlay(clip, _traj(len(times)).drop(columns=["x_px"]), {}, tmp_path / "o.mp4")
    assert not list(tmp_path.iterdir())


def test_unreadable_clip_is_a_clip_error(tmp_path):
    fake = tmp_path / "notes.mp4"
    fake.write_text("not a video\n")
    with pytest.raises(ClipError, match="notes.mp4"):
        write_overlay(fake, _traj(3), {}, tmp_path / "o.mp4")
    assert not (tmp_path / "o.mp4").exists()
