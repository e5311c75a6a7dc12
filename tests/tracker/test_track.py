"""Tracking whole clips (tracker.track) against exact ground truth.

Clips are rendered at test time by ``tracker.synth`` (seeded), encoded with a real codec into a
module-scoped temporary folder (each clip once, shared by the tests that need it), tracked with
``track_clip`` and compared with ``Truth.position_px`` evaluated at the tracker's own ``t_s``
(rolling-shutter offsets included). Velocities are straight-line fits (numpy.polyfit) of z_mm
against t_s over the constant-speed part (after the 99.9 % settling time).
"""

import json
import math
import re

import matplotlib.image
import numpy as np
import pytest

from tracker import encode, synth
from tracker.errors import ClipError, TrackingError
from tracker.scale import Scale
from tracker.track import EXTRA_COLUMNS, TRAJECTORY_COLUMNS, save_check_picture, track_clip

# Position error (RMS of both axes against truth, px), the targets of issue 2 §5.
POS_RMS_CLEAN_PX = 0.15        # clean 1080p H.264, 12 px sphere (measured ~0.04)
POS_RMS_HARD_PX = 0.40         # noise 4 DN, crf 35, 4 px sphere (measured ~0.17)
# Velocity against truth (relative), issue 2 §5.
V_RTOL_CLEAN = 0.002
V_RTOL_HARD = 0.005
# Honest uncertainty: RMS of the actual errors over RMS of the stated pos_u_px. A factor of 2
# either way (the stated value comes from the track's own scatter plus a 0.02 px floor).
POS_U_RATIO_RANGE = (0.5, 2.0)

_CLIPS: dict = {}


def _spec(name: str) -> synth.ClipSpec:
    hd = dict(width_px=1280, height_px=720)
    rng = np.random.default_rng(5)
    vfr = (0.0,) + tuple(np.cumsum(rng.uniform(0.012, 0.022, 70)))
    specs = {
        "clean-1080p": synth.ClipSpec(width_px=1920, height_px=1080, duration_s=1.0, seed=2, crf=18),
        "hard-4px": synth.ClipSpec(**hd, duration_s=1.5, px_per_mm=2.0, ball_diameter_mm=2.0,
                                   noise_dn=4.0, crf=35, seed=3),
        "clean-720p": synth.ClipSpec(**hd, duration_s=1.2, seed=20),
        "portrait": synth.ClipSpec(width_px=720, height_px=1280, duration_s=1.2, rotation_deg=90, seed=4),
        "variable-frame-rate": synth.ClipSpec(**hd, frame_times_s=vfr, seed=5),
        "slow-motion": synth.ClipSpec(**hd, duration_s=0.5, capture_fps=240.0, stored_fps=30.0,
                                      terminal_velocity_mm_s=150.0, seed=6),
        "rolling-shutter": synth.ClipSpec(**hd, duration_s=1.2, readout_s=0.012,
                                          terminal_velocity_mm_s=80.0, seed=7),
        "mjpeg-webcam": synth.ClipSpec(width_px=640, height_px=480, duration_s=1.5, codec="mjpeg",
                                       container="avi", crf=None, seed=8),
        "bubble": synth.ClipSpec(**hd, duration_s=1.2, bubble=True, seed=9),
        "two-drops": synth.ClipSpec(**hd, duration_s=2.2, terminal_velocity_mm_s=80.0, seed=10,
                                    drops=(synth.Drop(release_t_s=0.05),
                                           synth.Drop(release_t_s=1.1, lateral_mm=3.0))),
        "handheld-shake": synth.ClipSpec(**hd, duration_s=1.5, shake_px=3.0, jolt_t_s=(0.7,), seed=11),
        "bright-on-dark": synth.ClipSpec(**hd, duration_s=1.2, polarity="bright", seed=12),
        "scale-on-tube-front": synth.ClipSpec(**hd, duration_s=1.2, scale_plane="tube-front", seed=13),
        "hand-dip-flicker-marks": synth.ClipSpec(**hd, duration_s=1.5, hand=True, exposure_dip=True,
                                                 flicker=0.05, marks_mm=(30.0, 60.0),
                                                 marks_occlude=True, seed=14),
        "rising-ball": synth.ClipSpec(**hd, duration_s=1.2, seed=15, surface_z_mm=-60.0,
                                      drops=(synth.Drop(release_t_s=0.0, z0_mm=150.0, direction="up"),)),
        "no-ball": synth.ClipSpec(width_px=640, height_px=480, duration_s=1.0, drops=(), flicker=0.05,
                                  shake_px=1.0, seed=16),
    }
    return specs[name]


@pytest.fixture(scope="module")
def clip(tmp_path_factory):
    """Render, encode and track a named synthetic clip once per module."""
    folder = tmp_path_factory.mktemp("clips")

    def get(name: str, *, track: bool = True):
        if name not in _CLIPS:
            spec = _spec(name)
            path = folder / f"{name}.{spec.container}"
            truth = synth.write_clip(spec, path)
            rig = synth.rig_dict(spec)
            _CLIPS[name] = {"spec": spec, "path": path, "truth": truth, "rig": rig,
                            "scale": Scale.from_rig(rig), "result": None}
        entry = _CLIPS[name]
        if track and entry["result"] is None:
            camera = entry["rig"].get("camera", {})
            entry["result"] = track_clip(entry["path"], entry["scale"],
                                         capture_fps=camera.get("capture_fps"),
                                         readout_ms=camera.get("readout_ms", 0.0),
                                         expect_direction="down")
        return entry

    yield get
    _CLIPS.clear()


def _errors(entry, track=0, truth_track=None):
    traj = entry["result"].trajectory
    g = traj[traj["track"] == track]
    x, y = entry["truth"].position_px(g["t_s"].to_numpy(), track if truth_track is None else truth_track)
    return g, g["x_px"].to_numpy() - x, g["y_px"].to_numpy() - y


def _velocity_error(entry, track=0):
    truth = entry["truth"]
    traj = entry["result"].trajectory
    g = traj[traj["track"] == track]
    start = truth.release_t_s(track) + truth.settling_time_s(track)
    g = g[g["t_s"] > start]
    assert len(g) >= 20, f"only {len(g)} points on the constant-speed part"
    v = np.polyfit(g["t_s"], g["z_mm"], 1)[0]
    sign = 1.0 if truth.direction(track) == "down" else -1.0
    v_true = sign * truth.terminal_velocity_mm_s(track)
    return (v - v_true) / v_true


@pytest.mark.parametrize("name, limit", [("clean-1080p", POS_RMS_CLEAN_PX), ("hard-4px", POS_RMS_HARD_PX)])
def test_position_error_against_truth(clip, name, limit):
    entry = clip(name)
    g, ex, ey = _errors(entry)
    assert entry["result"].trajectory["track"].nunique() == 1
    assert len(g) >= 30
    rms = math.sqrt(float(np.mean(ex ** 2 + ey ** 2)) / 2.0)
    assert rms <= limit, f"{name}: RMS {rms:.3f} px"
    # the stated uncertainty is honest
    ratio = rms / math.sqrt(float(np.mean(g["pos_u_px"] ** 2)))
    assert POS_U_RATIO_RANGE[0] <= ratio <= POS_U_RATIO_RANGE[1], f"{name}: actual/stated {ratio:.2f}"
    # apparent size: no horizontal magnification in these clips, so both diameters are the
    # sphere's; the optics' and codec's blur widens a 4 px sphere by ~1 px (it is "apparent")
    spec = entry["spec"]
    d_true = spec.ball_diameter_mm * spec.px_per_mm
    size_tol = 0.05 * d_true + 0.3 if d_true >= 6 else 0.35 * d_true
    assert abs(float(g["diameter_h_px"].median()) - d_true) < size_tol
    assert abs(float(g["diameter_v_px"].median()) - d_true) < size_tol


@pytest.mark.parametrize("name, rtol", [
    ("clean-720p", V_RTOL_CLEAN),
    ("clean-1080p", V_RTOL_CLEAN),
    ("portrait", V_RTOL_HARD),
    ("variable-frame-rate", V_RTOL_HARD),
    ("slow-motion", V_RTOL_HARD),
    ("rolling-shutter", V_RTOL_HARD),
    ("mjpeg-webcam", V_RTOL_HARD),
    ("bubble", V_RTOL_HARD),
    ("handheld-shake", V_RTOL_HARD),
    ("bright-on-dark", V_RTOL_HARD),
    ("scale-on-tube-front", V_RTOL_HARD),
    ("hand-dip-flicker-marks", V_RTOL_HARD),
    ("hard-4px", V_RTOL_HARD),
])
def test_velocity_against_truth(clip, name, rtol):
    entry = clip(name)
    traj = entry["result"].trajectory
    assert traj["track"].nunique() == 1, f"{name}: tracks {sorted(traj['track'].unique())}"
    err = _velocity_error(entry)
    assert abs(err) <= rtol, f"{name}: velocity off by {err:+.4%}"


def test_two_drops_are_two_passages_in_time_order(clip):
    entry = clip("two-drops")
    traj = entry["result"].trajectory
    assert sorted(traj["track"].unique()) == [0, 1]
    starts = traj.groupby("track")["t_s"].min()
    assert starts[0] < starts[1]
    for tid in (0, 1):
        _, ex, ey = _errors(entry, tid)
        assert math.sqrt(float(np.mean(ex ** 2 + ey ** 2)) / 2.0) <= POS_RMS_CLEAN_PX
        assert abs(_velocity_error(entry, tid)) <= V_RTOL_HARD


def test_bubble_is_not_the_sphere(clip):
    entry = clip("bubble")
    _, ex, ey = _errors(entry)
    assert np.abs(ex).max() < 0.5 and np.abs(ey).max() < 0.5
    assert any("moving up" in w for w in entry["result"].warnings)


def test_rolling_shutter_times_use_the_sensor_row(clip):
    """t_s = frame time + stored_row / stored_height × readout; with the naive frame times the
    fitted velocity would be off by ~0.5 % (readout 12 ms, 320 px/s over 720 rows)."""
    entry = clip("rolling-shutter")
    result = entry["result"]
    traj = result.trajectory
    frame_t = entry["truth"].frames.groupby("frame")["t_s"].first()
    row = result.clip.stored_row(traj["x_px"] + traj["shake_dx_px"], traj["y_px"] + traj["shake_dy_px"])
    expected = frame_t.loc[traj["frame"]].to_numpy() + np.asarray(row) / result.clip.stored_height_px * 0.012
    np.testing.assert_allclose(traj["t_s"], expected, atol=1e-9)
    naive = traj.assign(t_s=frame_t.loc[traj["frame"]].to_numpy())
    truth = entry["truth"]
    g = naive[naive["t_s"] > truth.release_t_s(0) + truth.settling_time_s(0)]
    v_naive = np.polyfit(g["t_s"], g["z_mm"], 1)[0]
    assert abs(v_naive / truth.terminal_velocity_mm_s(0) - 1) > 0.003
    assert abs(_velocity_error(entry)) < 0.001


def test_shake_is_registered(clip):
    """Positions are in the scene frame of the first frame: relative to the unshaken truth they
    are off only by the camera's shift in that first frame."""
    entry = clip("handheld-shake")
    g, ex, ey = _errors(entry)
    shake0 = entry["truth"].frames.sort_values("frame").iloc[0]
    ex = ex - shake0["shake_dx_px"]
    ey = ey - shake0["shake_dy_px"]
    assert math.sqrt(float(np.mean(ex ** 2 + ey ** 2)) / 2.0) <= POS_RMS_CLEAN_PX
    assert float(g["shake_dy_px"].abs().max()) > 3.0
    assert any("camera moved" in w for w in entry["result"].warnings)


def test_wrong_direction_is_kept_with_a_warning(clip):
    entry = clip("rising-ball")
    result = entry["result"]
    assert result.trajectory["track"].nunique() == 1
    assert ("sphere moves up in the displayed frame although it is denser than the liquid — check "
            "the clip's rotation") in result.warnings
    assert abs(_velocity_error(entry)) <= V_RTOL_HARD


def test_no_ball_raises(clip):
    entry = clip("no-ball", track=False)
    with pytest.raises(TrackingError, match=r"^no-ball\.mp4: no moving sphere found in 60 frames; "
                                            r"expected a dark sphere on a bright background or a "
                                            r"bright one on a dark background$"):
        track_clip(entry["path"], entry["scale"])


def test_trajectory_contract_and_outputs(clip, tmp_path):
    entry = clip("clean-720p")
    result = entry["result"]
    traj = result.trajectory
    assert tuple(traj.columns) == TRAJECTORY_COLUMNS + EXTRA_COLUMNS
    assert traj["frame"].dtype == np.int64 and traj["track"].dtype == np.int64
    assert traj.equals(traj.sort_values(["track", "t_s"]).reset_index(drop=True))
    np.testing.assert_allclose(traj["z_u_mm"], traj["pos_u_px"] / entry["scale"].px_per_mm)
    z, lat = entry["scale"].to_mm(traj["x_px"], traj["y_px"])
    np.testing.assert_allclose(traj["z_mm"], z)
    np.testing.assert_allclose(traj["lateral_mm"], lat)
    d = result.to_dict()
    json.dumps(d)
    assert d["tracks"][0]["direction"] == "down" and d["n_points"] == len(traj)
    png = tmp_path / "check.png"
    save_check_picture(result, png)
    img = matplotlib.image.imread(png)
    assert img.shape[0] > 400 and img.shape[1] > 300
    assert result.composite is not None and result.composite.shape == (720, 1280)


def test_progress_is_reported(clip):
    entry = clip("mjpeg-webcam", track=False)
    calls = []
    track_clip(entry["path"], entry["scale"], progress=lambda n, total: calls.append((n, total)))
    assert [n for n, _ in calls] == list(range(1, len(calls) + 1))
    assert calls[-1] == (90, 90)


# ------------------------------------------------------------------ clips drawn here
def _disc(h, w, cx, cy, r, ss=4):
    ys = (np.arange(h * ss) + 0.5) / ss - 0.5
    xs = (np.arange(w * ss) + 0.5) / ss - 0.5
    occ = ((xs[None, :] - cx) ** 2 + (ys[:, None] - cy) ** 2) <= r * r
    return occ.reshape(h, ss, w, ss).mean(axis=(1, 3))


def _drawn_clip(path, positions, *, codec="h264", fps=30.0, repeat=()):
    """A dark disc of radius 5 px on a back-light at the given (x, y) per frame; frames whose index
    is in ``repeat`` are exact copies of the previous one."""
    rng = np.random.default_rng(7)
    h, w = 240, 320
    bg = 200.0 + 0.05 * np.arange(w)[None, :] + np.zeros((h, 1))
    bg[:, 40:46] = 70.0
    bg[:, 270:276] = 70.0
    bg[::20, 280:300] = 60.0
    frames, last = [], None
    for k, (x, y) in enumerate(positions):
        if k in repeat and last is not None:
            frames.append(last)
            continue
        img = bg.copy()
        if x is not None:
            occ = _disc(h, w, x, y, 5.0)
            img = img * (1 - occ) + 25.0 * occ
        last = np.clip(np.round(img + rng.normal(0, 1.5, img.shape)), 0, 255).astype(np.uint8)
        frames.append(last)
    encode.write_clip(path, frames, np.arange(len(frames)) / fps, codec=codec, crf=12 if codec != "mjpeg" else None)


def test_ball_at_rest_ends_the_track(tmp_path):
    """Falling at 3 px/frame, then lying on the bottom for 2 s: the stop ends the passage."""
    pos = [(160.0, 20.0 + 3.0 * k) for k in range(50)] + [(160.0, 170.0)] * 60
    path = tmp_path / "rest.mp4"
    _drawn_clip(path, pos)
    result = track_clip(path, Scale.from_points((290.0, 20.0), (290.0, 220.0), 50.0))
    traj = result.trajectory
    assert traj["track"].nunique() == 1
    assert traj["frame"].max() <= 52
    assert any("came to rest" in w for w in result.warnings)


def test_slow_ball_is_not_taken_for_one_at_rest(tmp_path):
    """A ball moving at 2.1 px/s (a viscous liquid, a small scale) stays within a pixel for half a
    second at a time: that is not a stop (before the fix its last half second was cut off, and
    the passage then seemed to end in view)."""
    pos = [(None, None)] + [(160.0, 60.0 + 0.07 * k) for k in range(300)]
    path = tmp_path / "slow.mp4"
    _drawn_clip(path, pos)
    result = track_clip(path, Scale.from_points((290.0, 20.0), (290.0, 220.0), 50.0))
    traj = result.trajectory
    assert traj["track"].nunique() == 1
    assert traj["frame"].max() == 300
    assert not any("came to rest" in w for w in result.warnings)


def test_sphere_that_never_leaves_its_first_place_is_warned_about(tmp_path):
    """Lying in view in the first frame and then moving 2.1 px/s, the sphere never gets clear of
    its own image in the background model within the clip: its positions are biased and the user
    is told so (measured on such a clip: v_t −0.7 % against a stated u of 0.08 %)."""
    pos = [(160.0, 100.0 + 0.07 * k) for k in range(360)]
    path = tmp_path / "creep.mp4"
    _drawn_clip(path, pos)
    result = track_clip(path, Scale.from_points((290.0, 20.0), (290.0, 220.0), 50.0),
                        ball_diameter_mm=2.5)
    assert any("lay in view in the first frame and never moved clear" in w for w in result.warnings)


def test_duplicate_frames_are_skipped(tmp_path):
    repeat = {10, 11, 25}
    pos = [(160.0, 20.0 + 3.0 * k) for k in range(50)]
    path = tmp_path / "dup.avi"
    _drawn_clip(path, pos, codec="mjpeg", repeat=repeat)
    result = track_clip(path, Scale.from_points((290.0, 20.0), (290.0, 220.0), 50.0))
    frames = set(result.trajectory["frame"])
    assert not frames & repeat
    assert len(frames) >= 40
    assert any("3 repeated frame(s) skipped" in w for w in result.warnings)


def test_bad_arguments(tmp_path):
    scale = Scale.from_points((0.0, 0.0), (0.0, 100.0), 10.0)
    with pytest.raises(ValueError, match=r"readout_ms = -1\.0: expected a finite time ≥ 0 in ms"):
        track_clip(tmp_path / "x.mp4", scale, readout_ms=-1.0)
    with pytest.raises(ValueError, match=r"expect_direction = 'sideways': expected 'down', 'up' or None"):
        track_clip(tmp_path / "x.mp4", scale, expect_direction="sideways")
    with pytest.raises(ClipError, match=r"x\.mp4: no such file"):
        track_clip(tmp_path / "x.mp4", scale)


def test_slow_ball_at_rest_in_the_first_frame(tmp_path):
    """A 4 mm bead lies in view on a plain background when the clip starts, then rises slowly
    (0.5 px per frame). It is the only texture in the first frame: registration patches on it
    would follow it as "camera motion" (before the fix: 30+ px of false shift and a velocity off by
    more than 0.4 %). Given the ball's diameter, the registration leaves it alone."""
    spec = synth.ClipSpec(width_px=360, height_px=640, capture_fps=30.0, duration_s=8.0,
                          px_per_mm=640 / 90.0, ball_diameter_mm=4.0, terminal_velocity_mm_s=2.3,
                          tau_s=0.05, noise_dn=2.0, seed=4,
                          drops=(synth.Drop(release_t_s=0.5, z0_mm=60.0, direction="up"),))
    path = tmp_path / "resting.mp4"
    truth = synth.write_clip(spec, path)
    result = track_clip(path, Scale.from_rig(synth.rig_dict(spec)), ball_diameter_mm=4.0)
    entry = {"truth": truth, "spec": spec, "result": result}
    assert not any("could not be registered" in w or "camera moved" in w or "never moved clear" in w
                   for w in result.warnings)
    assert abs(_velocity_error(entry)) < V_RTOL_CLEAN / 4


def _lying_in_view(tmp_path, name, direction, release_t_s=0.5, **spec):
    """A 360 × 640, 8 s clip of a sphere lying in view when it starts, released at 0.5 s."""
    z0_mm = 60.0 if direction == "up" else 15.0       # above the bottom, or just below the surface
    spec = synth.ClipSpec(width_px=360, height_px=640, capture_fps=30.0, duration_s=8.0,
                          px_per_mm=640 / 90.0, tau_s=0.05, noise_dn=2.0,
                          drops=(synth.Drop(release_t_s=release_t_s, z0_mm=z0_mm, direction=direction),),
                          **spec)
    path = tmp_path / f"{name}.mp4"
    return spec, synth.write_clip(spec, path), path


def _worst_point_px(result, truth):
    traj = result.trajectory
    assert traj["track"].nunique() == 1
    x, y = truth.position_px(traj["t_s"].to_numpy(), 0)
    return float(np.max(np.hypot(traj["x_px"] - x, traj["y_px"] - y)))


def test_bright_bead_resting_in_the_first_frame_is_healed(tmp_path):
    """A bright bead lies in view when the clip starts and rises slowly. Where it lay, the
    background model shows a bright blob: once it moves off, that imprint is followed for a while
    as a dark object, and the bead's own passage is picked up only two diameters on, with the
    trail it left in the model below it. The imprint must still be healed (before the fix it was
    not, since no passage started over it: the first points sat 0.8–1.0 px ahead of the truth)."""
    spec, truth, path = _lying_in_view(tmp_path, "bright_resting", "up", ball_diameter_mm=4.0,
                                       polarity="bright", terminal_velocity_mm_s=2.3, seed=12)
    result = track_clip(path, Scale.from_rig(synth.rig_dict(spec)), expect_direction="up",
                        ball_diameter_mm=4.0)
    # a top-lit bright sphere carries a constant vertical offset of up to 0.24 px (DEVELOPERS.md)
    assert _worst_point_px(result, truth) < 0.3    # measured 0.16
    assert not any("never moved clear" in w for w in result.warnings)
    # a crude fit of a short passage: −0.068 … +0.062 % over random states 12–16
    assert abs(_velocity_error({"truth": truth, "spec": spec, "result": result})) < V_RTOL_CLEAN / 2


def test_ball_held_below_the_surface_in_the_first_frame(tmp_path):
    """A ball lies in view just below the liquid surface when the clip starts (let go from
    tweezers), then falls. Half a diameter above it, the surface line must not hide it from the
    first-frame blob search (before the fix it did: the ball's image stayed in the background
    model, and its first points sat up to 0.28 px ahead of the truth)."""
    spec, truth, path = _lying_in_view(tmp_path, "held", "down", ball_diameter_mm=3.0,
                                       terminal_velocity_mm_s=3.0, seed=22)
    result = track_clip(path, Scale.from_rig(synth.rig_dict(spec)), expect_direction="down",
                        ball_diameter_mm=3.0)
    assert _worst_point_px(result, truth) < 0.15    # measured 0.08
    assert abs(_velocity_error({"truth": truth, "spec": spec, "result": result})) < V_RTOL_CLEAN / 4


def test_two_balls_lying_below_the_surface_do_not_move_the_camera(tmp_path):
    """Two balls lie side by side 3 mm below the liquid surface when the clip starts and are let
    go 1.5 s apart. Found as blobs, they carry no registration patch (before the fix the surface
    line beside them hid them from the blob search: the registration followed them as a camera
    motion of 18.6 px, and positions were off by as much)."""
    spec = synth.ClipSpec(width_px=360, height_px=640, capture_fps=30.0, duration_s=8.0,
                          px_per_mm=640 / 90.0, ball_diameter_mm=3.0, terminal_velocity_mm_s=4.0,
                          tau_s=0.05, noise_dn=2.0, seed=41,
                          drops=(synth.Drop(release_t_s=0.5, z0_mm=10.0, lateral_mm=-4.0),
                                 synth.Drop(release_t_s=2.0, z0_mm=10.0, lateral_mm=4.0)))
    path = tmp_path / "two_held.mp4"
    truth = synth.write_clip(spec, path)
    result = track_clip(path, Scale.from_rig(synth.rig_dict(spec)), expect_direction="down",
                        ball_diameter_mm=3.0)
    assert not any("camera moved" in w for w in result.warnings)
    traj = result.trajectory
    assert traj["track"].nunique() == 2
    for k in (0, 1):
        g = traj[traj["track"] == k]
        x, y = truth.position_px(g["t_s"].to_numpy(), k)
        assert float(np.max(np.hypot(g["x_px"] - x, g["y_px"] - y))) < 0.15    # measured 0.09
        assert abs(_velocity_error({"truth": truth, "spec": spec, "result": result}, k)) < V_RTOL_CLEAN / 4


@pytest.mark.parametrize(("release_t_s", "moved"), [
    (0.5, r"moved clear of where it lay at t = (\d\.\d) s of 8\.0 s"),
    (4.0, r"never moved clear of where it lay"),
])
def test_too_slow_to_leave_its_first_place_is_a_clear_error(tmp_path, release_t_s, moved):
    """Lying in view in the first frame and moving 3.7 diameters (or 1.6) in the clip, the sphere
    moves clear of its own image in the background model too late to leave enough points (or not
    at all): the error says so (before: a −0.8 % velocity from biased points, or "no moving sphere
    found"). When it clears depends on the noise: 5.1–7.4 s over random states 21–37, one of
    which (29) left a short passage to measure instead."""
    spec, _, path = _lying_in_view(tmp_path, "slow_bright", "up", release_t_s, ball_diameter_mm=3.0,
                                   polarity="bright", terminal_velocity_mm_s=1.5, seed=21)
    with pytest.raises(TrackingError, match=r"slow_bright\.mp4: no sphere was measured long enough: one "
                                            rf"lay in view in the first frame and {moved}, and points") as err:
        track_clip(path, Scale.from_rig(synth.rig_dict(spec)), expect_direction="up",
                   ball_diameter_mm=3.0)
    cleared = re.search(r"at t = (\d\.\d) s", str(err.value))
    if cleared:  # not before it has risen one diameter (2 s at 1.5 mm/s)
        assert release_t_s + 2.0 <= float(cleared.group(1)) < 8.0


def test_ball_passing_behind_a_label_is_one_passage(tmp_path):
    """A bright label stuck on the tube front hides the ball for a stretch of its fall. Half
    hidden, the ball's measured centre moves by several px and its height shrinks: those frames
    must be gaps, bridged, not points (before the fix: the passage broke in two at the label,
    and the first piece lost its plateau)."""
    spec = synth.ClipSpec(width_px=360, height_px=640, capture_fps=30.0, duration_s=8.0,
                          px_per_mm=5.0, ball_diameter_mm=2.0, terminal_velocity_mm_s=12.0,
                          tau_s=0.01, noise_dn=2.0, axis_x_px=180.0, seed=31,
                          drops=(synth.Drop(release_t_s=0.2, z0_mm=-3.0),))
    top, bottom = spec.z0_y_px + 20.0 * spec.px_per_mm, spec.z0_y_px + 35.0 * spec.px_per_mm
    rows = np.arange(spec.height_px, dtype=float)[:, None]    # pixel centres (DEVELOPERS.md)
    cols = np.arange(spec.width_px, dtype=float)[None, :]
    # anti-aliased box coverage: 15 mm tall, 30 mm wide, centred on the path
    cover = (np.clip(np.minimum(rows - top, bottom - rows) + 0.5, 0, 1)
             * np.clip(np.minimum(cols - (spec.axis_x_px - 75), spec.axis_x_px + 75 - cols) + 0.5, 0, 1))
    frames = (np.clip(np.round(f.image * (1 - cover) + 235.0 * cover), 0, 255).astype(np.uint8)
              for f in synth.render(spec))
    path = tmp_path / "label.mp4"
    encode.write_clip(path, frames, synth.presentation_times_s(spec), codec="h264",
                      fps_hint=spec.capture_fps, crf=spec.crf)
    truth = synth.truth(spec)
    result = track_clip(path, Scale.from_rig(synth.rig_dict(spec)), expect_direction="down",
                        ball_diameter_mm=2.0)
    traj = result.trajectory
    assert traj["track"].nunique() == 1, traj.groupby("track")["y_px"].agg(["min", "max"])
    x, y = truth.position_px(traj["t_s"].to_numpy(), 0)
    assert float(np.max(np.hypot(traj["x_px"] - x, traj["y_px"] - y))) < 0.25   # measured 0.10
    assert any("bridged" in w for w in result.warnings)
    assert abs(_velocity_error({"truth": truth, "spec": spec, "result": result})) < V_RTOL_CLEAN / 4


def test_an_object_already_followed_is_not_picked_up_again(monkeypatch):
    """A coarse candidate just outside a followed sphere's window (its trail in the background, a
    blob touching it) whose measurement lands on the sphere itself must not start a second
    passage of the same sphere (before the fix: a slow bead was followed three times over, and
    the longer pieces were then dropped as its "reflections")."""
    import tracker.track as track_module
    from tracker.detect import Candidate

    h, w = 240, 320
    bg = 200.0 + 0.05 * np.arange(w)[None, :] + np.zeros((h, 1))
    bg[:, 40:46] = 70.0
    bg[:, 270:276] = 70.0

    def frame(y):
        occ = _disc(h, w, 160.0, y, 5.0)
        return np.clip(np.round(bg * (1 - occ) + 25.0 * occ), 0, 255).astype(np.uint8)

    loop = track_module._Loop(info=None)
    loop.step(0, 0.0, bg.astype(np.uint8))          # the empty scene first
    for k in range(1, 12):                          # the sphere enters and is followed
        loop.step(k, k / 30.0, frame(40.0 + 3.0 * k))
    assert len(loop.active) == 1 and loop.active[0].confirmed
    t, luma = 12 / 30.0, frame(76.0)
    box = loop.active[0].box(t, loop.shift, pad=2.0)
    beside = Candidate(160.0, box[3] + 3.0, "dark", 30.0, 30.0, 1.0)   # just below the window
    monkeypatch.setattr(loop.bg, "find_candidates", lambda *a, **k: [beside])
    loop._acquire(12, t, luma)
    assert len(loop.active) == 1


def test_a_confirmed_passage_stays_confirmed_when_points_are_dropped():
    """Healing a first-frame blob drops the points measured over it, which can leave a passage
    with fewer points than it takes to confirm one: it must not become tentative again (two
    missed frames would then end it, and an ended tentative passage is lost)."""
    import tracker.track as track_module
    from tracker.detect import Measurement

    def point(k):
        m = Measurement(x_px=100.0, y_px=10.0 * k, pos_u_px=0.05, diameter_h_px=12.0,
                        diameter_v_px=12.0, blur_px=0.0, contrast_dn=100.0, area_px=113.0,
                        hole_fraction=0.0, gain=1.0, noise_dn=1.0, level_dn=20.0,
                        touches_edge=False)
        return track_module._Point(k, k / 30.0, 100.0, 10.0 * k, 100.0, 10.0 * k, m, 0.0, 0.0)

    tr = track_module._Track("dark", point(0))
    for k in range(1, track_module._CONFIRM_POINTS - 1):
        tr.add(point(k))
    assert not tr.confirmed
    tr.add(point(track_module._CONFIRM_POINTS - 1))
    assert tr.confirmed
    tr.points = tr.points[-1:]
    assert tr.confirmed
