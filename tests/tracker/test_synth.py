"""Tests of the synthetic-footage renderer (tracker.synth) against exact truths.

Rendered frames are measured with a centroid that inverts the renderer's compositing
(alpha = (B − I)/(B − V), B the static scene, V the ball's own level read at its centre), so the
checks do not depend on the renderer's internals. Clips are tiny; one is encoded with H.264.
"""

import json
import math

import av
import numpy as np
import pytest

from tracker import synth
from tracker.scale import Scale
from tracker.synth import ClipSpec, Drop

# --- tolerances -----------------------------------------------------------------------------
CENTROID_TOL_PX = 0.03      # 8-bit rounding of a noise-free 12–20 px ball moves its centroid
                            # by ~0.01 px; 4×4 supersampling adds ≤ 0.003 px (measured)
SHIFT_TOL_DN = 1.0          # noise-free frame vs the shifted scene: one rounding step
FD_VELOCITY_REL = 0.005     # ±3-frame central difference of centroids: 2 × 0.03 px / 16 px
BBO_TABLE_ABS = 1e-5        # physics-references.md §5 prints v/v∞ to 5 decimals (±5e-6)
SHEET_REL = 1e-4            # check values printed to 5 significant digits (§5 t99.9, z99.9, #23)
SHEET6_REL = 1e-6           # #27 printed to 6 decimals
EXACT_REL = 1e-9            # the same number computed two ways: only float rounding differs
ASYMPTOTE_REL = 1e-4        # v at 2500 τ vs v∞(1 − κ/√s): the next term is O(1/s) of the
                            # tail, ~3e-6 of v here
CHORD_TOL_PX = 0.3          # Σ alpha along a column = 20 px chord; rounding of ~30 pixels
OCCLUDED_LEAK_DN = 5.0      # band centre row behind defocus (σ 0.6 px): ≤ 3 % of the ball shows
FLICKER_REL = 0.03          # sinusoid fit over 240 rows of an 8-bit picture
GAIN_ABS = 0.01             # mean gain over the rows / the dipped gain, 8-bit ratios near 190 DN
BUBBLE_TOL_PX = 0.3         # |I − B| centroid of a ring: its rim and core are both symmetric
PTS_TOL_S = 0.6 / 90000     # MP4 stores times in ticks of 1/90000 s (tracker.encode)
TICK_TOL_PX = 0.1           # a < 1 px wide tick sampled by pixel areas is pixel-locked by up to
                            # ~0.06 px (measured); the plane factors move the far tick by ~11 px
ENCODED_CENTROID_TOL_PX = 0.3   # crf 18 H.264 with 1.5 DN noise, 12 px ball, crude centroid
NOISY_CENTROID_TOL_PX = 0.1     # 1.5 DN noise over a ~300 px box: centroid scatter ~0.02 px
RS_CENTROID_TOL_PX = 0.05       # rolling shutter stretches the streak (~8 %): more rounded
                                # edge pixels than CENTROID_TOL_PX allows for; measured ≤ 0.02
RS_TIME_TOL_S = 2e-6            # 0.05 px of centroid ↔ 0.05/240 × 15 ms = 3e-6 s of row time
SHADED_MASK_TOL_PX = 0.6        # a thresholded top-lit ball is lopsided towards its light
EXTENT_TOL_PX = 2.0             # thresholded extent: ±1 px at each end (defocus, rounding)
STRETCH_REL = 0.02              # second moments of a 12 px ellipse sampled on pixels
NOISE_REL = 0.05                # ≥ 5000 samples: σ known to ±1 %; plus the level's spread

# steel (AISI 52100) in pure glycerol at 20 °C, physics-references.md §5 worked examples
RHO_S, RHO_F, MU = 7810.0, 1261.0, 1.410


def tiny(**kw) -> ClipSpec:
    """A small noise-free clip: 96 × 240 px, 4 px/mm, 3 mm ball falling from z = 2 mm."""
    base = dict(width_px=96, height_px=240, capture_fps=60.0, duration_s=0.4, px_per_mm=4.0,
                z0_y_px=20.0, noise_dn=0.0, highlight=False, terminal_velocity_mm_s=40.0,
                tau_s=0.02, drops=(Drop(release_t_s=0.0, z0_mm=2.0),), tube_inner_diameter_mm=14.0,
                tube_wall_mm=1.5)
    base.update(kw)
    return ClipSpec(**base)


def alpha_centroid(img: np.ndarray, bg: np.ndarray, x: float, y: float, rx: float,
                   ry: float) -> tuple[float, float]:
    """Centroid of the coverage alpha = (B − I)/(B − V) in a box around (x, y).

    B is the scene rounded to 8 bits like the frames, so that a noise-free frame gives exactly
    0 outside the ball (a smooth background's rounding residual is coherent over many rows).
    """
    img = img.astype(float)
    bg = np.rint(bg)
    level = img[int(round(y)), int(round(x))]
    y0, y1 = int(math.floor(y - ry)), int(math.ceil(y + ry)) + 1
    x0, x1 = int(math.floor(x - rx)), int(math.ceil(x + rx)) + 1
    b = bg[y0:y1, x0:x1]
    a = (b - img[y0:y1, x0:x1]) / (b - level)
    ys, xs = np.mgrid[y0:y1, x0:x1]
    return float((a * xs).sum() / a.sum()), float((a * ys).sum() / a.sum())


def frames_of(spec: ClipSpec) -> list:
    return list(synth.render(spec))


# ============================================================================================
# Laws of motion and truth
# ============================================================================================

def test_exponential_truth_is_the_closed_form_and_its_derivative():
    spec = tiny()
    tr = synth.truth(spec)
    tau, vt = spec.tau_s, spec.terminal_velocity_mm_s
    t = np.linspace(0.001, 0.4, 57)
    z_exact = 2.0 + vt * (t - tau * (1 - np.exp(-t / tau)))
    np.testing.assert_allclose(tr.z_mm(t, 0), z_exact, rtol=0, atol=1e-12)
    h = 1e-6
    fd = (tr.z_mm(t + h, 0) - tr.z_mm(t - h, 0)) / (2 * h)
    np.testing.assert_allclose(tr.v_mm_s(t, 0), fd, rtol=1e-6)
    assert tr.v_mm_s(-0.1, 0) == 0.0 and tr.z_mm(-0.1, 0) == 2.0
    # physics-references.md §5 (derived): t99.9 = 6.9078 τ, z99.9 = 5.9088 v∞ τ
    t999 = tr.settling_time_s(0, 0.999)
    assert t999 == pytest.approx(6.9078 * tau, rel=SHEET_REL)
    assert float(tr.z_mm(t999, 0)) - 2.0 == pytest.approx(5.9088 * vt * tau, rel=SHEET_REL)


def test_truth_table_columns_and_rising_ball():
    spec = tiny(drops=(Drop(release_t_s=0.05, z0_mm=50.0, direction="up", lateral_mm=1.0),),
                horizontal_magnification=1.4)
    tr = synth.truth(spec)
    f = tr.frames
    for col in ("frame", "t_s", "pts_s", "track", "x_px", "y_px", "z_mm", "v_mm_s",
                "shake_dx_px", "shake_dy_px", "t_row_s", "diameter_h_px", "diameter_v_px"):
        assert col in f.columns
    moving = f[f.t_s > 0.05]
    assert np.all(np.diff(moving.z_mm) < 0) and np.all(moving.v_mm_s < 0)
    assert tr.direction(0) == "up" and tr.terminal_velocity_mm_s(0) == 40.0
    np.testing.assert_allclose(f.y_px, 20.0 + 4.0 * f.z_mm, atol=1e-12)
    np.testing.assert_allclose(f.x_px, spec.axis_x + 1.0 * 4.0 * 1.4, atol=1e-12)
    assert f.diameter_h_px.iloc[0] == pytest.approx(3.0 * 4.0 * 1.4)
    x, y = tr.position_px(np.array([0.1, 0.2, 0.3]), 0)
    assert x.shape == y.shape == (3,)
    json.dumps(tr.to_dict())     # JSON-friendly


def test_mark_crossing_times_hit_the_marks():
    spec = tiny(marks_mm=(10.0, 30.0, -5.0))
    tr = synth.truth(spec)
    tc = tr.mark_crossing_t_s(0)
    np.testing.assert_allclose(tr.z_mm(tc[:2], 0), [10.0, 30.0], atol=1e-9)
    assert math.isnan(tc[2])         # above the release point: never crossed


def test_two_drops_are_two_tracks_in_release_order():
    spec = tiny(duration_s=1.2, drops=(Drop(release_t_s=0.7, z0_mm=-3.0), Drop(release_t_s=0.0)))
    tr = synth.truth(spec)
    assert tr.release_t_s(0) == 0.0 and tr.release_t_s(1) == 0.7
    assert set(tr.frames.track) == {0, 1}
    with pytest.raises(ValueError, match=r"track = 2: expected an integer 0 … 1"):
        tr.z_mm(0.1, 2)
    # both balls are drawn where their tracks say while both are in view
    bg = synth.scene_image(spec)
    f = frames_of(spec)[54]                      # t = 0.9 s
    for k in (0, 1):
        x, y = (float(v) for v in tr.position_px(f.t_s, k))
        cx, cy = alpha_centroid(f.image, bg, x, y, 11, 13)
        assert abs(cx - x) < CENTROID_TOL_PX and abs(cy - y) < CENTROID_TOL_PX


# --- BBO / Basset ----------------------------------------------------------------------------

def _tau_s(d_m: float) -> float:
    """τ = (ρ_s + ρ_f/2) d² / (18 μ), physics-references.md §5."""
    return (RHO_S + RHO_F / 2) * d_m ** 2 / (18 * MU)


# physics-references.md §5 table "Exact unbounded-liquid solution" and check value #22
# (computed there by numerical Laplace inversion, three methods agreeing)
@pytest.mark.parametrize("d_m, t_s, expected", [
    (2e-3, 5 * _tau_s(2e-3), 0.76480),     # #22, t = 5τ
    (2e-3, 10 * _tau_s(2e-3), 0.84341),    # §5 table, t = 10τ
    (2e-3, 0.1, 0.94617),                  # §5 table
    (2e-3, 1.0, 0.98311),                  # #22, t = 1 s
    (1e-3, 0.1, 0.97326),                  # §5 table
    (1e-3, 1.0, 0.99156),                  # §5 table
    (6e-3, 0.1, 0.82641),                  # §5 table
])
def test_bbo_solution_matches_reference_values(d_m, t_s, expected):
    s = t_s / _tau_s(d_m)
    sol = synth.basset_solution(RHO_F / RHO_S, s)
    assert float(sol.velocity_fraction(s)) == pytest.approx(expected, abs=BBO_TABLE_ABS)


def test_bbo_tail_asymptote():
    # #23 (derived in §5): 1 − v/v∞ → a √(ρ_f/(π μ t)); a = 1 mm, t = 1 s → 0.016872
    a_m, t_s = 1e-3, 1.0
    s = t_s / _tau_s(2 * a_m)
    kappa = synth.bbo_kappa(RHO_F / RHO_S)
    assert kappa / math.sqrt(s) == pytest.approx(0.016872, rel=SHEET_REL)
    assert a_m * math.sqrt(RHO_F / (math.pi * MU * t_s)) == pytest.approx(kappa / math.sqrt(s),
                                                                          rel=EXACT_REL)
    # the numerical solution approaches the asymptote; the next term is O(1/s) relative
    sol = synth.basset_solution(RHO_F / RHO_S, 40 * s)
    ratio = [(1 - float(sol.velocity_fraction(x))) / (kappa / math.sqrt(x)) for x in (s, 10 * s, 40 * s)]
    assert abs(ratio[0] - 1) < 2e-3
    assert abs(ratio[2] - 1) < abs(ratio[1] - 1) < abs(ratio[0] - 1)


def test_bbo_without_history_is_the_exponential_law():
    sol = synth.basset_solution(0.0, 30.0)        # κ = 0: no Basset force
    s = np.linspace(0.0, 30.0, 301)
    np.testing.assert_allclose(sol.velocity_fraction(s), -np.expm1(-s), atol=2e-6)
    np.testing.assert_allclose(sol.distance_fraction(s), s + np.expm1(-s), atol=2e-6)


def test_basset_truth_is_consistent_and_slower_than_exponential():
    spec_b = tiny(motion="basset", duration_s=1.0)
    spec_e = tiny(duration_s=1.0)
    tb, te = synth.truth(spec_b), synth.truth(spec_e)
    t = np.linspace(0.01, 0.9, 40)
    h = 1e-6
    fd = (tb.z_mm(t + h, 0) - tb.z_mm(t - h, 0)) / (2 * h)
    np.testing.assert_allclose(tb.v_mm_s(t, 0), fd, rtol=1e-5)
    assert np.all(tb.v_mm_s(t, 0) < te.v_mm_s(t, 0))
    assert tb.settling_time_s(0) > 100 * te.settling_time_s(0)   # algebraic tail
    # asking beyond the solved range solves further instead of extrapolating
    assert float(tb.v_mm_s(50.0, 0)) == pytest.approx(
        40.0 * (1 - synth.bbo_kappa(spec_b.density_ratio) / math.sqrt(50.0 / 0.02)),
        rel=ASYMPTOTE_REL)


# ============================================================================================
# Rendered pixels against the truth
# ============================================================================================

def test_rendered_centroid_follows_truth_and_its_velocity():
    spec = tiny()
    tr = synth.truth(spec)
    bg = synth.scene_image(spec)
    got = []
    for f in synth.render(spec):
        x, y = (float(v) for v in tr.position_px(f.t_s, 0))
        got.append(alpha_centroid(f.image, bg, x, y, 11, 13) + (x, y, f.t_s))
    got = np.array(got)
    t = got[:, 4]
    late = (t - 0.0) > 10 * spec.tau_s          # no acceleration within the exposure
    assert np.max(np.abs(got[late, 0] - got[late, 2])) < CENTROID_TOL_PX
    assert np.max(np.abs(got[late, 1] - got[late, 3])) < CENTROID_TOL_PX
    # velocity from ±3-frame differences of the rendered centroids vs the truth
    i = np.nonzero(late)[0][3:-3]
    v_fd = (got[i + 3, 1] - got[i - 3, 1]) / (t[i + 3] - t[i - 3]) / spec.px_per_mm
    np.testing.assert_allclose(v_fd, tr.v_mm_s(t[i], 0), rtol=FD_VELOCITY_REL)


@pytest.mark.parametrize("v_mm_s, exposure_s", [(40.0, 1e-6), (120.0, 1 / 120), (360.0, 1 / 120)])
def test_motion_blur_centroid_is_the_mid_exposure_position(v_mm_s, exposure_s):
    # constant velocity: release long before the clip starts, τ tiny; 5 mm ball (20 px)
    spec = tiny(terminal_velocity_mm_s=v_mm_s, tau_s=1e-4, exposure_s=exposure_s,
                ball_diameter_mm=5.0, drops=(Drop(release_t_s=-1.0, z0_mm=-v_mm_s + 8.0),),
                duration_s=0.1)
    tr = synth.truth(spec)
    bg = synth.scene_image(spec)
    blur_px = v_mm_s * exposure_s * spec.px_per_mm
    for f in frames_of(spec):
        x, y = (float(v) for v in tr.position_px(f.t_s, 0))
        if not (20 < y < 210):
            continue
        cx, cy = alpha_centroid(f.image, bg, x, y, 14, 14 + blur_px / 2)
        assert abs(cy - y) < CENTROID_TOL_PX and abs(cx - x) < CENTROID_TOL_PX
        # along the column through the centre: coverage integrates to the 20 px chord whatever
        # the blur, and the streak reaches diameter + blur (+ ~1.1 px defocus tail each side)
        xi = int(round(x))
        col = f.image[:, xi].astype(float)
        a = (bg[:, xi] - col) / (bg[:, xi] - col[int(round(y))])
        assert a.sum() == pytest.approx(20.0, abs=CHORD_TOL_PX)
        assert 20.0 + blur_px - 1.0 <= (a > 0.03).sum() <= 20.0 + blur_px + 3.0


def display_to_stored_rc(x, y, rotation_deg, width_px, height_px):
    """Stored (row, col) of a displayed (x, y): the display is the stored frame turned clockwise."""
    return {0: (y, x), 90: (width_px - 1 - x, y), 180: (height_px - 1 - y, width_px - 1 - x),
            270: (x, height_px - 1 - y)}[rotation_deg]


@pytest.mark.parametrize("rotation_deg", [0, 90, 180, 270])
def test_displayed_image_is_the_stored_image_turned_clockwise(rotation_deg):
    spec = tiny(rotation_deg=rotation_deg, duration_s=0.1, noise_dn=1.5)
    tr = synth.truth(spec)
    bg_stored = np.rot90(synth.scene_image(spec), k=rotation_deg // 90)
    for f in frames_of(spec):
        assert f.image.shape == (240, 96)
        assert f.stored.shape == ((240, 96) if rotation_deg in (0, 180) else (96, 240))
        np.testing.assert_array_equal(f.image, np.rot90(f.stored, k=-(rotation_deg // 90)))
        if f.index == 4:
            x, y = (float(v) for v in tr.position_px(f.t_s, 0))
            r, c = display_to_stored_rc(x, y, rotation_deg, 96, 240)
            ry, rx = (13, 11) if rotation_deg in (0, 180) else (11, 13)
            cc, cr = alpha_centroid(f.stored, bg_stored, c, r, rx, ry)
            assert abs(cr - r) < NOISY_CENTROID_TOL_PX and abs(cc - c) < NOISY_CENTROID_TOL_PX


@pytest.mark.parametrize("rotation_deg", [0, 90])
def test_rolling_shutter_rows_are_exposed_at_their_own_time(rotation_deg):
    fps = 60.0
    readout = 0.9 / fps
    spec = tiny(rotation_deg=rotation_deg, readout_s=readout, terminal_velocity_mm_s=300.0,
                tau_s=1e-4, drops=(Drop(release_t_s=-1.0, z0_mm=-295.0, lateral_mm=3.0),),
                duration_s=0.12)
    tr = synth.truth(spec)
    h_stored = spec.stored_shape[0]
    bg_stored = np.rot90(synth.scene_image(spec), k=rotation_deg // 90)
    rows = tr.frames.set_index("frame")
    checked = 0
    for f in frames_of(spec):
        x0, y0 = (float(v) for v in tr.position_px(f.t_s, 0))
        xo, yo = rows.loc[f.index, ["x_row_px", "y_row_px"]]     # where to look
        if not (30 < yo < 200):
            continue
        r0, c0 = display_to_stored_rc(xo, yo, rotation_deg, 96, 240)
        ry, rx = (20, 11) if rotation_deg == 0 else (11, 20)
        cc, cr = alpha_centroid(f.stored, bg_stored, c0, r0, rx, ry)
        # the measured centre's own row fixes its time; the truth there is where it is seen
        t_row = f.t_s + cr / h_stored * readout
        x, y = (float(v) for v in tr.position_px(t_row, 0))
        r, c = display_to_stored_rc(x, y, rotation_deg, 96, 240)
        assert abs(cr - r) < RS_CENTROID_TOL_PX and abs(cc - c) < RS_CENTROID_TOL_PX
        assert rows.loc[f.index, "t_row_s"] == pytest.approx(t_row, abs=RS_TIME_TOL_S)
        # meaningful: the row delay moves the ball by several pixels
        assert abs(y - y0) > 3.0
        checked += 1
    assert checked >= 3


def test_bright_ball_on_dark_background():
    spec = tiny(polarity="bright", duration_s=0.3, horizontal_magnification=1.47)
    tr = synth.truth(spec)
    bg = synth.scene_image(spec)
    f = frames_of(spec)[-1]
    x, y = (float(v) for v in tr.position_px(f.t_s, 0))
    assert bg[int(y), int(x)] < 30 and f.image[int(round(y)), int(round(x))] > 120
    mask = (f.image.astype(float) - bg) > 40
    ys, xs = np.nonzero(mask)
    # extent: 12 px tall, 12 × 1.47 px wide, plus a little blur and defocus
    assert np.ptp(ys) + 1 == pytest.approx(12 + 40 * 4 / 120, abs=EXTENT_TOL_PX)
    assert np.ptp(xs) + 1 == pytest.approx(12 * 1.47, abs=EXTENT_TOL_PX)
    assert abs(xs.mean() - x) < SHADED_MASK_TOL_PX and abs(ys.mean() - y) < SHADED_MASK_TOL_PX


def test_horizontal_magnification_stretches_only_x():
    spec = tiny(horizontal_magnification=1.47, exposure_s=1e-6, tau_s=1e-4, duration_s=0.05,
                drops=(Drop(release_t_s=10.0, z0_mm=20.0),))    # held still in view
    bg = synth.scene_image(spec)
    f = frames_of(spec)[0]
    x, y = spec.axis_x, 20.0 + 20.0 * 4.0
    level = float(f.image[int(y), int(round(x))])
    y0, x0 = int(y) - 10, int(x) - 12
    a = (bg[y0:y0 + 21, x0:x0 + 26] - f.image[y0:y0 + 21, x0:x0 + 26]) / (bg[y0:y0 + 21, x0:x0 + 26] - level)
    ys, xs = np.mgrid[y0:y0 + 21, x0:x0 + 26]
    var_x = (a * (xs - x) ** 2).sum() / a.sum()
    var_y = (a * (ys - y) ** 2).sum() / a.sum()
    # a uniform ellipse has variance (semi-axis)²/4 per axis; defocus adds σ² to both
    sig2 = spec.defocus_px ** 2
    assert (var_x - sig2) / (var_y - sig2) == pytest.approx(1.47 ** 2, rel=STRETCH_REL)


# ============================================================================================
# Timing: slow motion, variable frame rate
# ============================================================================================

def test_slow_motion_pts_are_stretched_physical_times():
    spec = tiny(capture_fps=240.0, stored_fps=30.0, duration_s=0.05)
    fr = frames_of(spec)
    t = np.array([f.t_s for f in fr])
    pts = np.array([f.pts_s for f in fr])
    np.testing.assert_allclose(np.diff(t), 1 / 240, rtol=1e-12)
    np.testing.assert_allclose(np.diff(pts), 1 / 30, rtol=1e-12)
    np.testing.assert_allclose(pts, t * 8.0, rtol=1e-12)
    tr = synth.truth(spec)
    np.testing.assert_allclose(tr.frames.pts_s, tr.frames.t_s * 8.0, rtol=1e-12)
    assert synth.rig_dict(spec)["camera"] == {"capture_fps": 240.0}
    assert "camera" not in synth.rig_dict(tiny())


def test_variable_frame_rate_times_are_used_exactly():
    rng = np.random.default_rng(7)
    steps = 1 / 30 + rng.uniform(-0.004, 0.004, 14)
    steps[6] = 3 / 30                                       # a dropped-frames gap
    times = tuple(float(v) for v in np.concatenate([[0.0], np.cumsum(steps)]))
    spec = tiny(frame_times_s=times, terminal_velocity_mm_s=30.0, exposure_s=1 / 200)
    tr = synth.truth(spec)
    bg = synth.scene_image(spec)
    fr = frames_of(spec)
    assert [f.t_s for f in fr] == list(times) == list(tr.frames.t_s)
    assert [f.pts_s for f in fr] == list(times)
    for f in fr[3:]:
        x, y = (float(v) for v in tr.position_px(f.t_s, 0))
        if y < 220:
            cx, cy = alpha_centroid(f.image, bg, x, y, 11, 13)
            assert abs(cy - y) < CENTROID_TOL_PX


# ============================================================================================
# Scene, scale and rig
# ============================================================================================

# physics-references.md §10 check values / #27: L = 0.50 m, t = 2.5 mm, n_w = 1.47,
# R_i = 24.5 mm, n_l = 1.473 → factor 1.036667 (front marks), 0.983554 (ruler at L + R_o)
@pytest.mark.parametrize("plane, expected", [("ball-plane", 1.0), ("tube-front", 1.036667),
                                             ("in-air", 0.983554)])
def test_ruler_is_drawn_at_its_own_scale_and_the_rig_reads_back(plane, expected):
    spec = ClipSpec(width_px=240, height_px=400, z0_y_px=30.0, px_per_mm=3.0, scale_plane=plane,
                    camera_distance_mm=500.0, tube_wall_mm=2.5, wall_refractive_index=1.47,
                    tube_inner_diameter_mm=49.0, liquid_refractive_index=1.473,
                    ruler_offset_mm=27.0, axis_x_px=70.0, noise_dn=0.0, duration_s=0.05)
    assert synth.scale_factor(spec) == pytest.approx(expected, rel=SHEET6_REL)
    rig = synth.rig_dict(spec)
    (x1, y1), (x2, y2) = rig["scale"]["points_px"]
    assert x1 == x2 and y1 == 30.0
    assert (y2 - y1) / rig["scale"]["distance_mm"] == pytest.approx(
        3.0 * synth.scale_factor(spec), rel=EXACT_REL)
    # the ticks really are in the picture at those rows: darkness-weighted row of each 10 mm
    # tick, in a column 6 px into the ruler strip that only the long (10 mm) ticks reach
    img = synth.scene_image(spec)
    col = int(round(x1 + 5.5))
    profile = img[:, col].max() - img[:, col]
    for y_tick in (y1, y2):
        sl = slice(int(y_tick) - 2, int(y_tick) + 3)
        rows = np.arange(400)[sl]
        assert float((profile[sl] * rows).sum() / profile[sl].sum()) == pytest.approx(
            y_tick, abs=TICK_TOL_PX)
    # tracker.scale turns these tables back into the ball-plane scale of the spec
    assert Scale.from_rig(rig).px_per_mm == pytest.approx(3.0, rel=EXACT_REL)
    if plane != "ball-plane":
        assert rig["scale"]["camera_distance_mm"] == 500.0


@pytest.mark.parametrize("drop, meniscus_row", [
    (Drop(release_t_s=0.0, z0_mm=20.0), 20 + 17 * 4),          # 3 mm above a falling release
    (Drop(release_t_s=0.0, z0_mm=50.0, direction="up"), None),  # rising only: above the view
])
def test_liquid_surface_is_drawn_above_the_release(drop, meniscus_row):
    column = synth.scene_image(tiny(drops=(drop,)))[:, int(round(tiny().axis_x))]
    dips = np.nonzero(column < np.median(column) - 30.0)[0]
    assert list(dips) == ([] if meniscus_row is None else [meniscus_row - 1, meniscus_row,
                                                            meniscus_row + 1])


def test_rig_dict_tables():
    spec = tiny(readout_s=0.01, marks_mm=(10.0, 40.0))
    rig = synth.rig_dict(spec, liquid={"density_kg_m3": 1258.0}, ball={"density_kg_m3": 7810.0})
    assert rig["liquid"] == {"density_kg_m3": 1258.0}
    assert rig["ball"] == {"diameter_mm": 3.0, "density_kg_m3": 7810.0}
    assert rig["tube"] == {"inner_diameter_mm": 14.0}
    assert rig["camera"] == {"readout_ms": 10.0}
    assert rig["marks"]["points_px"] == [[spec.axis_x, 60.0], [spec.axis_x, 180.0]]
    assert "liquid" not in synth.rig_dict(spec)
    json.dumps(rig)


@pytest.mark.parametrize("occlude", [True, False])
def test_marks_in_front_hide_the_ball(occlude):
    # bright ball (≥ 100 DN) against a mark at 60 DN: visible unless the mark is in front
    spec = tiny(marks_mm=(30.0,), marks_occlude=occlude, duration_s=0.9, polarity="bright")
    tr = synth.truth(spec)
    scene = synth.scene_image(spec)
    t_cross = float(tr.mark_crossing_t_s(0)[0])
    f = min(frames_of(spec), key=lambda fr: abs(fr.t_s - t_cross))
    band = 20 + 30 * 4                       # the centre row of the 3.2 px band
    x = int(round(spec.axis_x))
    diff = np.abs(f.image[band, x - 3:x + 4].astype(float) - scene[band, x - 3:x + 4])
    if occlude:
        assert diff.max() < OCCLUDED_LEAK_DN
    else:
        assert diff.min() > 40.0


# ============================================================================================
# Camera: shake, flicker, exposure
# ============================================================================================

def test_shake_moves_the_whole_view_by_the_truth_offset():
    spec = tiny(shake_px=2.5, jolt_t_s=(0.1,), duration_s=0.4)
    tr = synth.truth(spec)
    scene = synth.scene_image(spec)
    per_frame = tr.frames.set_index("frame")
    dx = per_frame.shake_dx_px.to_numpy()
    assert np.ptp(dx) > 1.0 and np.all(np.round(dx * 32) == dx * 32)
    import cv2
    for f in frames_of(spec)[::5]:
        sdx, sdy = per_frame.loc[f.index, ["shake_dx_px", "shake_dy_px"]]
        m = np.array([[1.0, 0.0, sdx], [0.0, 1.0, sdy]])
        shifted = cv2.warpAffine(scene, m, (96, 240), flags=cv2.INTER_LINEAR,
                                 borderMode=cv2.BORDER_REPLICATE)
        x, y = (float(v) for v in tr.position_px(f.t_s, 0))
        keep = np.ones((240, 96), bool)
        keep[:8], keep[-8:], keep[:, :8], keep[:, -8:] = False, False, False, False
        keep[max(0, int(y + sdy) - 12):int(y + sdy) + 13] = False
        assert np.max(np.abs(f.image[keep] - shifted[keep])) <= SHIFT_TOL_DN + 0.5
        if 20 < y < 215:
            cx, cy = alpha_centroid(f.image, shifted, x + sdx, y + sdy, 11, 13)
            assert abs(cx - x - sdx) < CENTROID_TOL_PX and abs(cy - y - sdy) < CENTROID_TOL_PX


def test_flicker_bands_follow_the_rolling_shutter():
    fps, mains = 60.0, 50.0
    readout, exposure = 0.9 / fps, 1 / 500
    spec = tiny(flicker=0.1, mains_hz=mains, readout_s=readout, exposure_s=exposure,
                drops=(Drop(release_t_s=5.0, z0_mm=-40.0),), duration_s=0.05)
    scene = synth.scene_image(spec)
    f = frames_of(spec)[1]
    gain = (f.image[:, 10:30].astype(float) / scene[:, 10:30]).mean(axis=1)
    # light at 2 × mains, seen by row r at t + r/H × readout: a sinusoid along the rows
    w = 2 * math.pi * 2 * mains * readout / 240
    r = np.arange(240)
    design = np.column_stack([np.ones(240), np.sin(w * r), np.cos(w * r)])
    coef, *_ = np.linalg.lstsq(design, gain, rcond=None)
    amp = math.hypot(coef[1], coef[2])
    # averaging over the exposure scales the amplitude by sinc(2 mains · exposure)
    assert amp == pytest.approx(0.1 * np.sinc(2 * mains * exposure), rel=FLICKER_REL)
    assert coef[0] == pytest.approx(1.0, abs=GAIN_ABS)


def test_exposure_dip_and_hand_around_release():
    # release at z = 40 mm (row 180) so that tweezers and part of the hand are in this small view
    spec = tiny(hand=True, exposure_dip=True, duration_s=1.3,
                drops=(Drop(release_t_s=0.7, z0_mm=40.0),))
    scene = synth.scene_image(spec)
    tr = synth.truth(spec)
    hand_rows = tr.distractors[tr.distractors.kind == "hand"]
    assert len(hand_rows) > 10 and hand_rows.t_s.min() < 0.7 < hand_rows.t_s.max()
    for f in frames_of(spec):
        ratio = f.image / scene
        gain = np.median(ratio[150:, :30])       # a corner the hand never reaches
        covered = np.mean(ratio < 0.5 * gain)    # pixels far darker than the lit scene
        if f.t_s < 0.05 or f.t_s > 1.25:         # hand away, full gain
            assert covered < 0.01                # the ball alone covers ~0.5 % of the frame
            assert gain == pytest.approx(1.0, abs=GAIN_ABS)
        if abs(f.t_s - 0.7) < 0.02:              # hand in place, gain dipped by 25 %
            assert covered > 0.1
            assert gain == pytest.approx(0.75, abs=GAIN_ABS)


def test_bubble_rises_where_the_truth_says():
    spec = tiny(bubble=True, duration_s=0.8, bubble_speed_mm_s=40.0, tube_inner_diameter_mm=20.0,
                drops=(Drop(release_t_s=5.0, z0_mm=-40.0),))
    tr = synth.truth(spec)
    scene = synth.scene_image(spec)
    b = tr.distractors[tr.distractors.kind == "bubble"].set_index("frame")
    assert len(b) > 10 and np.all(np.diff(b.y_px) < 0)
    for f in frames_of(spec)[10::10]:
        x, y = b.loc[f.index, ["x_px", "y_px"]]
        d = np.abs(f.image.astype(float) - scene)
        y0, x0 = int(y) - 8, int(x) - 8
        w = d[y0:y0 + 17, x0:x0 + 17]
        ys, xs = np.mgrid[y0:y0 + 17, x0:x0 + 17]
        assert abs((w * ys).sum() / w.sum() - y) < BUBBLE_TOL_PX
        assert abs((w * xs).sum() / w.sum() - x) < BUBBLE_TOL_PX


# ============================================================================================
# Determinism, validation, encoding
# ============================================================================================

def test_same_seed_same_pixels_other_seed_other_noise():
    kw = dict(noise_dn=2.0, shake_px=1.0, bubble=True, duration_s=0.1)
    a = [f.image for f in synth.render(tiny(seed=3, **kw))]
    b = [f.image for f in synth.render(tiny(seed=3, **kw))]
    c = [f.image for f in synth.render(tiny(seed=4, **kw))]
    assert all(np.array_equal(x, y) for x, y in zip(a, b))
    assert not any(np.array_equal(x, y) for x, y in zip(a, c))


def test_noise_has_read_and_shot_parts():
    # a 10 mm ball held still in view (released after the clip): frame differences are pure
    # noise, √2 σ; σ(I) = noise_dn √(0.09 + 0.91 I/128) on the dark ball and the back-light
    spec = tiny(noise_dn=2.0, duration_s=0.2, ball_diameter_mm=10.0, seed=5,
                drops=(Drop(release_t_s=9.0, z0_mm=25.0),))
    fr = [f.image.astype(float) for f in synth.render(spec)]
    diff = np.array([b - a for a, b in zip(fr, fr[1:])]) / math.sqrt(2)
    y, x = 20 + 25 * 4, int(round(spec.axis_x))
    ball = diff[:, y - 10:y + 11, x - 10:x + 11]
    back = diff[:, 170:230, 2:20]
    level_ball = fr[0][y - 10:y + 11, x - 10:x + 11].mean()
    level_back = fr[0][170:230, 2:20].mean()
    for d, level in ((ball, level_ball), (back, level_back)):
        # rounding to 8 bits adds 1/12 DN² of variance
        expected = math.sqrt(4.0 * (0.09 + 0.91 * level / 128) + 1 / 12)
        assert np.std(d) == pytest.approx(expected, rel=NOISE_REL)
    assert np.std(ball) < 0.6 * np.std(back)     # shot noise: ≈ 0.48 expected


def test_duplicate_frames_repeat_the_previous_picture():
    spec = tiny(noise_dn=1.5, duplicate_frames=(3, 4, 9), duration_s=0.2)
    fr = frames_of(spec)
    for i in range(1, len(fr)):
        same = np.array_equal(fr[i].image, fr[i - 1].image)
        assert same == (i in (3, 4, 9))
    assert fr[4].t_s == pytest.approx(4 / 60) and fr[4].pts_s == pytest.approx(4 / 60)
    f = synth.truth(spec).frames
    assert list(f[f.duplicate].frame) == [3, 4, 9]


@pytest.mark.parametrize("kw, message", [
    (dict(px_per_mm=-1.0), r"ClipSpec.px_per_mm = -1.0: expected a finite number > 0 px/mm"),
    (dict(polarity="grey"), r"ClipSpec.polarity = 'grey': expected one of dark, bright"),
    (dict(rotation_deg=45), r"ClipSpec.rotation_deg = 45: expected 0, 90, 180 or 270"),
    (dict(readout_s=0.05), r"ClipSpec.readout_s = 0.05 s: expected at most the shortest frame"),
    (dict(exposure_s=0.05), r"ClipSpec.exposure_s = 0.05 s: expected at most the shortest frame"),
    (dict(frame_times_s=(0.0, 0.1, 0.1)), r"ClipSpec.frame_times_s: step 0 s at index 2"),
    (dict(motion="magic"), r"ClipSpec.motion = 'magic': expected one of exponential, basset"),
    (dict(z0_y_px=500.0), r"ClipSpec.z0_y_px = 500.0: the upper scale point must be inside"),
    (dict(width_px=5), r"ClipSpec.width_px = 5: expected an integer number of pixels ≥ 8"),
    (dict(duplicate_frames=(0,)), r"ClipSpec.duplicate_frames = \(0,\): expected a tuple of frame"),
    (dict(z0_y_px=236.0), r"ClipSpec.z0_y_px = 236: leaves less than 1 mm of ruler below"),
])
def test_bad_spec_is_rejected_with_one_line(kw, message):
    with pytest.raises(ValueError, match=message):
        tiny(**kw)


def test_bad_drop_and_fraction_are_rejected():
    with pytest.raises(ValueError, match=r"Drop.direction = 'sideways': expected one of down, up"):
        Drop(release_t_s=0.0, direction="sideways")
    with pytest.raises(ValueError, match=r"fraction = 1.0: expected 0 < fraction < 1"):
        synth.truth(tiny()).settling_time_s(0, 1.0)


def test_write_clip_rejects_a_mismatched_suffix(tmp_path):
    with pytest.raises(ValueError, match=r"suffix does not match ClipSpec.container = 'mp4'"):
        synth.write_clip(tiny(), tmp_path / "clip.mkv")


def test_encoded_portrait_vfr_clip_keeps_times_rotation_and_ball(tmp_path):
    rng = np.random.default_rng(11)
    times = tuple(float(v) for v in np.cumsum(np.r_[0.0, 1 / 30 + rng.uniform(-0.003, 0.003, 11)]))
    spec = tiny(rotation_deg=90, frame_times_s=times, noise_dn=1.5, crf=18,
                terminal_velocity_mm_s=60.0, exposure_s=1 / 200)
    path = tmp_path / "portrait.mp4"
    tr = synth.write_clip(spec, path)
    bg = synth.scene_image(spec)
    with av.open(str(path)) as container:
        stream = container.streams.video[0]
        decoded = [(float(fr.pts * fr.time_base), round(-fr.rotation) % 360,
                    fr.to_ndarray(format="gray")) for fr in container.decode(stream)]
    assert len(decoded) == len(times)
    np.testing.assert_allclose([d[0] for d in decoded], times, atol=PTS_TOL_S)
    assert {d[1] for d in decoded} == {90}
    assert decoded[0][2].shape == (96, 240)                    # stored landscape
    for (pts, _, stored), t in zip(decoded[2:], times[2:]):
        shown = np.rot90(stored, k=-1)
        x, y = (float(v) for v in tr.position_px(t, 0))
        if y < 215:
            cx, cy = alpha_centroid(shown, bg, x, y, 11, 13)
            assert abs(cx - x) < ENCODED_CENTROID_TOL_PX and abs(cy - y) < ENCODED_CENTROID_TOL_PX
