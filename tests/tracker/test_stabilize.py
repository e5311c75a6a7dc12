"""Registration of frames to the static scene (tracker.stabilize) against exact known shifts.

The scene is an analytic function (tube walls, a ruler with repeating ticks, marks across the
tube, the liquid surface) evaluated at (x − dx, y − dy), so each frame's true shift is exact.
"""

import numpy as np
import pytest

from tracker.stabilize import Stabilizer, _uint8_mad

H, W = 360, 480
# Gauss–Newton on eight 32-px patches with 1.5 DN noise: ~0.01 px per axis; 0.03 px is the
# tolerance (well under the 0.15 px centre budget the registration feeds into).
SHIFT_RMS_TOL_PX = 0.03
SHIFT_MAX_TOL_PX = 0.08


def _ramp(d):
    """Coverage of a pixel by a half-plane at signed distance d (px): a 1-px linear edge."""
    return np.clip(0.5 + d, 0.0, 1.0)


def _scene(dx, dy, *, gain=1.0, rng=None, noise=1.5, walls_only=False, blob=None):
    x = np.arange(W)[None, :] - dx
    y = np.arange(H)[:, None] - dy
    img = np.full((H, W), 190.0) + 0.02 * x + 0.0 * y

    def band(c, width, depth, coord):
        return (_ramp(width / 2 - np.abs(coord - c))) * depth

    img = img - band(180, 10, 110, x) - band(320, 10, 110, x)
    if not walls_only:
        in_ruler = _ramp(8 - np.abs(x - 380))
        minor = band(0, 1.5, 90, ((y + 2.0) % 8.0) - 4.0)          # a tick every 8 px
        major = band(0, 2.0, 60, ((y + 2.0) % 40.0) - 20.0) * _ramp(3 - np.abs(x - 372))
        img = img - in_ruler * (minor + major)
        img = img - band(120.0, 3, 100, y) * _ramp(70 - np.abs(x - 250))   # a mark
        img = img - band(40.0, 2, 80, y) * _ramp(70 - np.abs(x - 250))     # liquid surface
    if blob is not None:
        bx, by = blob
        img = img - 150.0 * _ramp(7 - np.hypot(np.arange(W)[None, :] - bx, np.arange(H)[:, None] - by))
    img = img * gain
    if rng is not None:
        img = img + rng.normal(0.0, noise, img.shape)
    return np.clip(np.round(img), 0, 255).astype(np.uint8)


def _run(shifts, *, gains=None, blobs=None, exclude=False, seed=0):
    rng = np.random.default_rng(seed)
    st = Stabilizer(_scene(0.0, 0.0, rng=rng))
    errors = []
    for k, (dx, dy) in enumerate(shifts):
        blob = None if blobs is None else blobs[k]
        frame = _scene(dx, dy, gain=1.0 if gains is None else gains[k], rng=rng, blob=blob)
        boxes = [(blob[0] - 12, blob[1] - 12, blob[0] + 12, blob[1] + 12)] if exclude and blob else []
        reg = st.register(frame, exclude_boxes=boxes)
        assert reg.ok
        errors.append((reg.dx_px - dx, reg.dy_px - dy))
    return np.array(errors)


def _wander(n, seed):
    rng = np.random.default_rng(seed)
    return np.cumsum(rng.normal(0.0, 0.6, (n, 2)), axis=0)


def test_handheld_wander():
    err = _run(_wander(40, 1))
    assert np.sqrt((err ** 2).mean(axis=0)).max() < SHIFT_RMS_TOL_PX
    assert np.abs(err).max() < SHIFT_MAX_TOL_PX


def test_tap_jolt_is_recovered():
    """A tap moves the view by 11 px within one frame: larger than half the ruler's tick period,
    so only the marks and the surface tell the right alias."""
    shifts = _wander(30, 2)
    shifts[15:] += np.array([5.0, -11.0])
    err = _run(shifts)
    assert np.abs(err).max() < SHIFT_MAX_TOL_PX


def test_exposure_dip_does_not_bias():
    shifts = _wander(20, 3)
    gains = np.where(np.arange(20) % 5 == 0, 0.7, 1.0)
    err = _run(shifts, gains=gains)
    assert np.abs(err).max() < SHIFT_MAX_TOL_PX


@pytest.mark.parametrize("exclude", [True, False], ids=["excluded", "rejected-as-outlier"])
def test_object_passing_a_patch(exclude):
    """A dark ball crossing the registration patches: excluded by the tracker's box, or dropped
    as an outlier patch."""
    st = Stabilizer(_scene(0.0, 0.0))
    cx, cy = st.centres[0]
    shifts = _wander(20, 4) * 0.3
    blobs = [(cx + 2.0, cy - 20.0 + 2.0 * k) for k in range(20)]
    err = _run(shifts, blobs=blobs, exclude=exclude)
    assert np.abs(err).max() < SHIFT_MAX_TOL_PX


def test_scene_without_horizontal_structure_is_weak_in_y():
    st = Stabilizer(_scene(0.0, 0.0, walls_only=True))
    assert st.weak_axes == ["y"]
    assert Stabilizer(_scene(0.0, 0.0)).weak_axes == []


def test_no_patch_on_a_sphere_resting_in_the_reference():
    """A ball (14 px) lying in the first frame is not static scene: with its expected diameter
    the patch choice avoids it, and still finds the walls, ruler and marks."""
    blob = (250.0, 200.0)
    plain = Stabilizer(_scene(0.0, 0.0, blob=blob))
    on_ball = np.hypot(plain.centres[:, 0] - blob[0], plain.centres[:, 1] - blob[1]) < 16 + 7
    assert on_ball.any()  # the ball is the most textured spot: without the hint it gets a patch
    st = Stabilizer(_scene(0.0, 0.0, blob=blob), avoid_diameter_px=14.0)
    assert len(st.avoided) == 1
    x0, y0, x1, y1 = st.avoided[0]
    assert x0 < blob[0] < x1 and y0 < blob[1] < y1 and 10 <= x1 - x0 <= 20
    assert np.all(np.hypot(st.centres[:, 0] - blob[0], st.centres[:, 1] - blob[1]) > 16 + 7)
    assert st.weak_axes == [] and len(st.centres) >= 4
    # nothing but the ball: no patch at all, both axes held at zero shift
    bare = np.full((H, W), 180, np.uint8)
    yy, xx = np.mgrid[0:H, 0:W]
    bare[np.hypot(xx - blob[0], yy - blob[1]) < 7] = 30
    st = Stabilizer(bare, avoid_diameter_px=14.0)
    assert st.weak_axes == ["x", "y"]
    moved = np.full((H, W), 180, np.uint8)
    moved[np.hypot(xx - blob[0], yy - blob[1] + 3.0) < 7] = 30   # the ball rose by 3 px
    reg = st.register(moved)
    assert (reg.dx_px, reg.dy_px) == (0.0, 0.0)


def test_bad_reference():
    with pytest.raises(ValueError, match=r"reference: expected a 2-D grey image, got shape \(8, 8, 3\)"):
        Stabilizer(np.zeros((8, 8, 3), np.uint8))


def test_the_histogram_mad_is_numpys():
    """The first-frame blob search takes the spread of its top-hat image from a histogram: the
    same number numpy.median gives, ties and averaged middle values included."""
    rng = np.random.default_rng(3)
    images = [rng.integers(0, 256, (31, 17)), rng.integers(0, 3, (10, 10)),   # even count, ties
              np.clip(rng.normal(4, 3, (48, 64)), 0, 255), rng.choice([0, 255], (7, 8)),
              np.full((5, 5), 9), np.array([[0, 1]])]                          # a half-integer median
    for image in images:
        image = image.astype(np.uint8)
        want = float(np.median(np.abs(image.astype(np.float32) - float(np.median(image)))))
        assert _uint8_mad(image) == want
