"""Sub-pixel centre, size and acquisition (tracker.detect) on frames with exact ground truth.

Frames are drawn here by supersampling (the same idea as trackpy's ``artificial.py``): a pixel's
value is the area-average of the scene over the pixel, so the true centre is known exactly.
"""

import numpy as np
import pytest

from tracker.detect import Background, _area_downsample, measure

SS = 8                 # supersampling per axis for the drawn frames
BACKLIGHT_DN = 200.0
BALL_DN = 25.0
# A dark disc of ≥ 4 px with 1.5 DN noise: the occupancy centroid is exact up to noise
# (~0.01 px, see the ladder below); 0.02 px leaves room for the noise of 40 draws.
BIAS_TOL_PX = 0.02
RMS_TOL_PX = 0.03


def _occupancy(h, w, cx, cy, r, *, hmag=1.0, blur_px=0.0):
    """Area fraction of each pixel covered by a disc (ellipse when hmag ≠ 1), averaged over a
    vertical motion of length blur_px centred on (cx, cy)."""
    ys = (np.arange(h * SS) + 0.5) / SS - 0.5
    xs = (np.arange(w * SS) + 0.5) / SS - 0.5
    occ = np.zeros((h * SS, w * SS))
    n_sub = max(1, int(round(blur_px * 4)) + 1)
    for k in range(n_sub):
        oy = cy + (0.0 if n_sub == 1 else (k / (n_sub - 1) - 0.5) * blur_px)
        occ += (((xs[None, :] - cx) / (r * hmag)) ** 2 + ((ys[:, None] - oy) / r) ** 2) <= 1.0
    occ /= n_sub
    return occ.reshape(h, SS, w, SS).mean(axis=(1, 3))


def _background(h, w):
    """Back-light with a gentle gradient and a dark vertical band (a tube wall)."""
    img = BACKLIGHT_DN + 0.3 * np.arange(w)[None, :] - 0.1 * np.arange(h)[:, None]
    img[:, 4:7] = 60.0
    return img


def _frame(rng, cx, cy, r, *, h=60, w=60, noise=1.5, highlight=False, blur_px=0.0, hmag=1.0,
           bright=False):
    occ = _occupancy(h, w, cx, cy, r, hmag=hmag, blur_px=blur_px)
    bg = _background(h, w)
    if bright:
        bg = np.full((h, w), 20.0)
        # shaded sphere lit from above: brighter at the top, linear across the disc
        yy = np.arange(h)[:, None] - cy
        ball = 170.0 - 50.0 * np.clip(yy / r, -1, 1) + 0 * np.arange(w)[None, :]
        img = bg * (1 - occ) + ball * occ
    else:
        img = bg * (1 - occ) + BALL_DN * occ
        if highlight:
            # specular spot of a lamp ~45° off the camera axis: ~0.4 r from the centre
            spot = _occupancy(h, w, cx - 0.3 * r, cy - 0.3 * r, 0.2 * r)
            img = img + 170.0 * spot
    img = img + rng.normal(0.0, noise, img.shape)
    frame = np.clip(np.round(img), 0, 255).astype(np.uint8)
    return frame, np.clip(np.round(bg), 0, 255).astype(np.uint8)


def _errors(case, n=40, seed=1):
    rng = np.random.default_rng(seed)
    errs, sizes = [], []
    for _ in range(n):
        cx, cy = 30 + rng.random(), 30 + rng.random()
        kw = {k: v for k, v in case.items() if k != "r"}
        frame, bg_img = _frame(rng, cx, cy, case["r"], **kw)
        bg = Background(bg_img)
        half_w = case["r"] * case.get("hmag", 1.0)
        half_h = case["r"] + case.get("blur_px", 0.0) / 2
        m, why = measure(frame, bg, (0.0, 0.0), cx + rng.normal(0, 0.7), cy + rng.normal(0, 0.7),
                         "bright" if case.get("bright") else "dark",
                         half_width_px=half_w, half_height_px=half_h)
        assert m is not None, why
        errs.append((m.x_px - cx, m.y_px - cy))
        sizes.append((m.diameter_h_px, m.diameter_v_px, m.blur_px, m.hole_fraction))
    return np.array(errs), np.array(sizes)


@pytest.mark.parametrize("case", [
    pytest.param(dict(r=2.0), id="4px-disc"),
    pytest.param(dict(r=3.0), id="6px-disc"),
    pytest.param(dict(r=6.0), id="12px-disc"),
    pytest.param(dict(r=6.0, highlight=True), id="highlight"),
    pytest.param(dict(r=3.0, blur_px=4.0), id="motion-blur"),
    pytest.param(dict(r=4.0, hmag=1.47), id="magnified-sideways"),
    pytest.param(dict(r=6.0, bright=True), id="bright-shaded"),
    pytest.param(dict(r=2.0, noise=4.0), id="4px-noisy"),
])
def test_centre_is_unbiased(case):
    errs, _ = _errors(case)
    bias = np.abs(errs.mean(axis=0))
    rms = np.sqrt((errs ** 2).mean(axis=0))
    assert bias.max() < BIAS_TOL_PX, f"bias {bias}"
    assert rms.max() < RMS_TOL_PX, f"rms {rms}"


# Sizes: the second moment of the occupancy gives the width to ~2 %; the area gives the height
# through the blur (a long streak's partly covered ends add ~5 %); the blur length follows from
# the excess vertical moment (±0.6 px, it is the square root of a difference).
SIZE_RTOL = 0.03
SIZE_RTOL_BLURRED = 0.06
BLUR_ATOL_PX = 0.6


@pytest.mark.parametrize("r, hmag, blur", [(3.0, 1.0, 0.0), (4.0, 1.47, 0.0), (4.0, 1.0, 5.0)])
def test_apparent_diameters_and_blur(r, hmag, blur):
    _, sizes = _errors(dict(r=r, hmag=hmag, blur_px=blur, noise=1.0), n=10)
    d_h, d_v, b = np.median(sizes[:, :3], axis=0)
    np.testing.assert_allclose(d_h, 2 * r * hmag, rtol=SIZE_RTOL)
    np.testing.assert_allclose(d_v, 2 * r, rtol=SIZE_RTOL_BLURRED if blur else SIZE_RTOL)
    assert abs(b - blur) < BLUR_ATOL_PX


def test_bubble_has_large_hole_highlight_small():
    """A bubble (bright core, dark rim) leaves a large filled hole; a highlight a small one."""
    rng = np.random.default_rng(3)
    h = w = 60
    bg = _background(h, w)
    occ = _occupancy(h, w, 30.3, 30.6, 6.0)
    core = _occupancy(h, w, 30.3, 30.6, 3.6)
    bubble = bg * (1 - occ) + 40.0 * (occ - core) + 240.0 * core + rng.normal(0, 1.5, (h, w))
    frame = np.clip(np.round(bubble), 0, 255).astype(np.uint8)
    m, _ = measure(frame, Background(bg.astype(np.uint8)), (0.0, 0.0), 30.0, 31.0, "dark",
                   half_width_px=6, half_height_px=6)
    assert m is not None and m.hole_fraction > 0.25
    _, sizes = _errors(dict(r=6.0, highlight=True), n=3)
    assert sizes[:, 3].max() < 0.1


def test_shift_and_gain_are_taken_out():
    """The frame moved by a sub-pixel shift and got 20 % darker: the centre is still exact in the
    frame and the gain is measured."""
    rng = np.random.default_rng(4)
    h = w = 60
    sx, sy = 0.4, -0.3
    bg_img = _background(h, w)
    # the scene seen through the shifted camera: background sampled at (x - sx, y - sy)
    ys, xs = np.mgrid[0:h, 0:w].astype(float)
    shifted_bg = BACKLIGHT_DN + 0.3 * (xs - sx) - 0.1 * (ys - sy)
    shifted_bg[:, 4:7] = 60.0
    occ = _occupancy(h, w, 30.25, 29.6, 4.0)
    img = 0.8 * (shifted_bg * (1 - occ) + BALL_DN * occ) + rng.normal(0, 1.0, (h, w))
    frame = np.clip(np.round(img), 0, 255).astype(np.uint8)
    m, _ = measure(frame, Background(bg_img.astype(np.uint8)), (sx, sy), 30.0, 30.0, "dark",
                   half_width_px=4, half_height_px=4)
    assert m is not None
    assert abs(m.x_px - 30.25) < BIAS_TOL_PX and abs(m.y_px - 29.6) < BIAS_TOL_PX
    assert abs(m.gain - 0.8) < 0.01


def test_refusals():
    rng = np.random.default_rng(5)
    frame, bg_img = _frame(rng, 30.2, 30.4, 4.0)
    bg = Background(bg_img)
    assert measure(frame, bg, (0.0, 0.0), 2.0, 30.0, "dark", half_width_px=4, half_height_px=4)[1] == "edge"
    empty = bg_img.copy()
    assert measure(empty, bg, (0.0, 0.0), 30.0, 30.0, "dark", half_width_px=4, half_height_px=4)[1] == "faint"
    # a dark band as dark as the ball crossing the footprint hides part of it
    hidden = frame.copy()
    bg_dark = bg_img.copy()
    bg_dark[31:34, :] = int(BALL_DN)
    hidden[31:34, :] = int(BALL_DN)
    m, why = measure(hidden, Background(bg_dark), (0.0, 0.0), 30.2, 30.4, "dark", half_width_px=4,
                     half_height_px=4, level_dn=BALL_DN, footprint_px=(8.0, 8.0))
    assert m is None and why == "occluded"


def test_bad_arguments():
    with pytest.raises(ValueError, match=r"polarity: got 'grey'; expected one of \('dark', 'bright'\)"):
        measure(np.zeros((20, 20), np.uint8), Background(np.zeros((20, 20), np.uint8)), (0.0, 0.0),
                10.0, 10.0, "grey", half_width_px=2, half_height_px=2)
    with pytest.raises(ValueError, match=r"first_luma: expected a 2-D grey image, got shape \(4, 4, 3\)"):
        Background(np.zeros((4, 4, 3), np.uint8))


def test_candidates_found_and_filtered():
    """Acquisition finds a dark and a bright compact object; ignores one cut by the border and a
    long thin line (a misregistered edge)."""
    rng = np.random.default_rng(6)
    h, w = 240, 320
    bg = _background(h, w)
    occ_dark = _occupancy(h, w, 100.3, 120.7, 5.0)
    occ_bright = _occupancy(h, w, 40.6, 60.2, 4.0)
    occ_cut = _occupancy(h, w, 318.0, 200.0, 6.0)
    img = bg * (1 - occ_dark) + BALL_DN * occ_dark
    img = img * (1 - occ_bright) + 255.0 * occ_bright
    img = img * (1 - occ_cut) + BALL_DN * occ_cut
    img[20:200, 150:151] -= 60.0
    frame = np.clip(np.round(img + rng.normal(0, 1.5, img.shape)), 0, 255).astype(np.uint8)
    background = Background(np.clip(np.round(bg), 0, 255).astype(np.uint8))
    cands = background.find_candidates(frame, (0.0, 0.0))
    found = {(c.polarity, round(c.x_px / 10), round(c.y_px / 10)) for c in cands}
    assert ("dark", 10, 12) in found
    assert ("bright", 4, 6) in found
    assert len(cands) == 2, cands
    # an excluded region is not searched
    near = background.find_candidates(frame, (0.0, 0.0), exclude_boxes=[(80, 100, 120, 140)])
    assert all(c.polarity == "bright" for c in near)


@pytest.mark.parametrize("factor", [1, 2, 3, 4, 6, 8])
def test_the_downsampled_frame_is_the_block_mean(factor):
    """The acquisition search's coarse frame: mean of factor × factor blocks, to half a DN per
    resizing step (8 = three halvings)."""
    image = np.random.default_rng(factor).integers(0, 256, (24 * 5, 24 * 7)).astype(np.uint8)
    small = _area_downsample(image, factor)
    h, w = image.shape[0] // factor, image.shape[1] // factor
    blocks = image.reshape(h, factor, w, factor).mean(axis=(1, 3))
    assert small.shape == (h, w) and small.dtype == np.uint8
    steps = {1: 0, 2: 1, 3: 1, 4: 2, 6: 2, 8: 3}[factor]
    assert np.abs(small - blocks).max() <= 0.5 * steps
