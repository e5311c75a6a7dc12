"""Lens distortion end to end, in process: ``fallcam lens`` on a rendered checkerboard clip, and
``fallcam analyze`` on a falling-ball clip seen through a known barrel distortion.

Truth:
- the checkerboard views are rendered from a known camera matrix and distortion: every output
  pixel is traced back through the exact inverse of the Brown–Conrady model (a fixed-point
  iteration in this file, converged to 1e-12, independent of the code under test) onto the board
  plane, and the board's colour is averaged over 4 × 4 sub-samples per pixel, so the image is an
  anti-aliased picture of the true board whose corners sit exactly where ``cv2.projectPoints``
  puts them; the views are encoded with H.264;
- the falling-ball clip is ``tracker.synth``'s (exact ground truth in ideal pixels), warped by
  ``cv2.remap`` with the exact inverse map onto the distorted frame, encoded with H.264; the
  terminal velocity stays that of the undistorted clip.
"""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest

from fallcam.cli import main
from fallcam.rig import load_rig
from tracker import encode, synth

# --- the exact model used to render -----------------------------------------------------------


def _distort_norm(x, y, k, p):
    k1, k2, k3 = k
    p1, p2 = p
    r2 = x * x + y * y
    radial = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3))
    return (x * radial + 2 * p1 * x * y + p2 * (r2 + 2 * x * x),
            y * radial + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y)


def _undistort_norm(xd, yd, k, p):
    """Exact inverse by fixed-point iteration (the forward residual is checked)."""
    x, y = xd.copy(), yd.copy()
    for _ in range(200):
        fx, fy = _distort_norm(x, y, k, p)
        dx, dy = xd - fx, yd - fy
        x += dx
        y += dy
        if max(float(np.max(np.abs(dx))), float(np.max(np.abs(dy)))) < 1e-13:
            break
    fx, fy = _distort_norm(x, y, k, p)
    assert max(float(np.max(np.abs(fx - xd))), float(np.max(np.abs(fy - yd)))) < 1e-12
    return x, y


def _ideal_from_distorted_px(u, v, f, c, k, p):
    x, y = _undistort_norm((u - c[0]) / f[0], (v - c[1]) / f[1], k, p)
    return x * f[0] + c[0], y * f[1] + c[1]


# --- checkerboard clip ------------------------------------------------------------------------

CAL_SIZE = (640, 480)
CAL_F = (540.0, 538.0)
CAL_C = (322.0, 237.5)
CAL_K = (-0.28, 0.09, 0.0)   # strong wide-angle barrel: −12.5 % at the corners
CAL_P = (0.0008, -0.0006)
BOARD = (9, 6)               # inner corners
SQUARE_MM = 20.0
SUB = 4                      # sub-samples per pixel and axis


def _rotation(rx_deg, ry_deg, rz_deg):
    r, _ = cv2.Rodrigues(np.radians([rx_deg, ry_deg, rz_deg]))
    return r


def _poses():
    """Board poses (R, t) whose whole board, with its white margin, is in view; they reach the
    frame's corners and edges and vary in tilt."""
    w, h = CAL_SIZE
    kmat = np.array([[CAL_F[0], 0, CAL_C[0]], [0, CAL_F[1], CAL_C[1]], [0, 0, 1]])
    cols, rows = BOARD
    centre = np.array([(cols - 1) / 2 * SQUARE_MM, (rows - 1) / 2 * SQUARE_MM, 0.0])
    outline = np.array([[x, y, 0.0] for x in (-1.6 * SQUARE_MM, (cols + 0.6) * SQUARE_MM)
                        for y in (-1.6 * SQUARE_MM, (rows + 0.6) * SQUARE_MM)])
    targets = [(0.0, 0.0, 520, (0, 0, 0)), (-1, -1, 560, (12, -15, 5)), (1, -1, 560, (-12, -15, -6)),
               (-1, 1, 560, (-14, 12, 4)), (1, 1, 560, (14, 14, -5)), (0, -1, 600, (20, 0, 0)),
               (0, 1, 600, (-20, 0, 3)), (-1, 0, 600, (0, 22, -3)), (1, 0, 600, (0, -22, 2)),
               (0.0, 0.0, 420, (25, 10, 8)), (-0.6, -0.6, 460, (-10, 25, 0)),
               (0.6, 0.6, 460, (10, -25, -10)), (0.6, -0.6, 700, (0, 0, 20)),
               (-0.6, 0.6, 700, (28, -8, -15)), (0.0, 0.0, 650, (-28, -20, 0))]
    poses = []
    for ax, ay, z, angles in targets:
        r = _rotation(*angles)
        for shrink in np.linspace(1.0, 0.0, 41):
            u = CAL_C[0] + ax * shrink * 0.5 * w
            v = CAL_C[1] + ay * shrink * 0.5 * h
            ray = np.linalg.solve(kmat, [u, v, 1.0])
            t = z * ray - r @ centre
            img, _ = cv2.projectPoints(outline, cv2.Rodrigues(r)[0], t, kmat,
                                       np.array([CAL_K[0], CAL_K[1], CAL_P[0], CAL_P[1], CAL_K[2]]))
            img = img.reshape(-1, 2)
            if img[:, 0].min() > 2 and img[:, 0].max() < w - 3 and img[:, 1].min() > 2 \
                    and img[:, 1].max() < h - 3:
                poses.append((r, t))
                break
        else:  # pragma: no cover - the targets above all fit
            raise AssertionError(f"pose {ax, ay, z, angles} does not fit")
    return poses


def _render_views(poses):
    w, h = CAL_SIZE
    offs = (np.arange(SUB) + 0.5) / SUB - 0.5
    us = (np.arange(w)[None, :, None, None] + offs[None, None, None, :]) * np.ones((h, 1, SUB, 1))
    vs = (np.arange(h)[:, None, None, None] + offs[None, None, :, None]) * np.ones((1, w, 1, SUB))
    xn, yn = _undistort_norm((us - CAL_C[0]) / CAL_F[0], (vs - CAL_C[1]) / CAL_F[1], CAL_K, CAL_P)
    rays = np.stack([xn.ravel(), yn.ravel(), np.ones(xn.size)])
    cols, rows = BOARD
    frames = []
    for r, t in poses:
        hom = np.column_stack([r[:, 0], r[:, 1], t])          # board (X, Y, 1) → ray (up to scale)
        b = np.linalg.solve(hom, rays)
        ok = b[2] > 0
        bx, by = b[0] / b[2], b[1] / b[2]
        i, j = np.floor(bx / SQUARE_MM), np.floor(by / SQUARE_MM)
        on_board = (i >= -1) & (i <= cols - 1) & (j >= -1) & (j <= rows - 1)
        margin = ((bx > -2.0 * SQUARE_MM) & (bx < (cols + 1) * SQUARE_MM)
                  & (by > -2.0 * SQUARE_MM) & (by < (rows + 1) * SQUARE_MM))
        val = np.full(bx.shape, 95.0)
        val[margin] = 225.0
        dark = on_board & ((i + j) % 2 == 0)
        val[dark] = 25.0
        val[~ok] = 95.0
        img = val.reshape(h, w, SUB, SUB).mean(axis=(2, 3))
        frames.append(np.clip(np.rint(img), 0, 255).astype(np.uint8))
    return frames


@pytest.fixture(scope="module")
def board_clip(tmp_path_factory):
    folder = tmp_path_factory.mktemp("board")
    frames = _render_views(_poses())
    rng = np.random.default_rng(7)
    blank = np.full((CAL_SIZE[1], CAL_SIZE[0]), 95, np.uint8)
    # two frames without the board (hand moving it), then the views; a little sensor noise
    seq = [blank, blank] + frames
    seq = [np.clip(f + rng.normal(0.0, 1.0, f.shape), 0, 255).astype(np.uint8) for f in seq]
    path = folder / "board.mp4"
    encode.write_clip(path, seq, np.arange(len(seq)) / 10.0, codec="h264", fps_hint=10.0, crf=14)
    return path


def _grid_px(step=16):
    w, h = CAL_SIZE
    xs = np.unique(np.r_[np.arange(0, w, step), w - 1.0])
    ys = np.unique(np.r_[np.arange(0, h, step), h - 1.0])
    return np.meshgrid(xs.astype(float), ys.astype(float))


def _after_similarity(x, y, x_ref, y_ref):
    """Distances left between (x, y) and (x_ref, y_ref) after the least-squares similarity."""
    z = (x - x.mean()) + 1j * (y - y.mean())
    z_ref = (x_ref - x_ref.mean()) + 1j * (y_ref - y_ref.mean())
    a = np.vdot(z.ravel(), z_ref.ravel()) / np.vdot(z.ravel(), z.ravel())
    return np.abs(a * z - z_ref)


def test_lens_command_recovers_the_true_distortion(board_clip, tmp_path, capsys):
    out = tmp_path / "lens.toml"
    code = main(["lens", str(board_clip), "--board", "9x6", "--square-mm", str(SQUARE_MM),
                 "--out", str(out), "--json", "--quiet"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    res = json.loads(captured.out)
    assert res["n_views"] == 15 and res["n_found"] == 15
    assert res["rms_px"] < 0.1
    # every view's own RMS is of the same order as the overall one (no view mismatched)
    assert len(res["per_view_rms_px"]) == 15 and max(res["per_view_rms_px"]) < 3 * res["rms_px"]
    lens = res["lens"]
    assert lens["image_size_px"] == list(CAL_SIZE)
    # the recovered model maps distorted points (the true lens's picture of a grid of ideal
    # points over the whole frame, corners included) back onto those ideal points
    from tracker.lens import LensModel

    model = LensModel.from_dict(lens)
    true = LensModel(CAL_SIZE, CAL_F, CAL_C, CAL_K, CAL_P)
    xd, yd = _grid_px()
    xi_true, yi_true = _ideal_from_distorted_px(xd, yd, CAL_F, CAL_C, CAL_K, CAL_P)
    xi, yi = model.undistort_px(xd, yd)
    # Ideal pixels are defined up to the camera matrix, which a calibration recovers only to a
    # fraction of a pixel: compare after the best-fit similarity (shift, rotation, uniform
    # scale), to which every length ratio — and so fallcam's scale — is blind. Anisotropy and
    # every distortion error stay in the residual.
    # Measured: the corners are located to ~0.05 px RMS (cornerSubPix on a tilted, distorted
    # board), which 15 views turn into 0.27–0.43 px (95th percentile; 12 noise realisations of
    # this clip) and 0.6–0.95 px at the frame's extreme corners, beyond the detected corners'
    # reach (the model is extrapolated there). The ~0.1 px aim over the whole frame is not
    # reached with 15 views at 640 × 480.
    err = _after_similarity(xi, yi, xi_true, yi_true)
    assert float(np.percentile(err, 95)) < 0.5, (float(np.percentile(err, 95)), lens)
    assert float(err.max()) < 1.0, (float(err.max()), lens)
    # What it leaves in a velocity: vertical stretches anywhere in the frame, the scale taken from
    # the stretch's own end points, the velocity a least-squares slope over the stretch (as the
    # plateau fit); measured ≤ 0.011 %, against up to 2.3 % with no correction.
    def velocity(model, x, ya, yb):
        y = np.linspace(ya, yb, 200)
        xi, yi = model.undistort_px(np.full_like(y, x), y)
        sx, sy = model.undistort_px([x, x], [ya, yb])
        return np.polyfit(np.arange(200.0), yi, 1)[0] / np.hypot(sx[1] - sx[0], sy[1] - sy[0])

    w, h = CAL_SIZE
    stretches = [(x, m, h - 1 - m) for x in np.linspace(20, w - 21, 9) for m in (20, 60, 120)]
    left = [velocity(model, *s) / velocity(true, *s) - 1.0 for s in stretches]
    # uncorrected: 199 steps over the stretch, the scale its measured length
    uncorrected = [(1.0 / 199.0) / velocity(true, *s) - 1.0 for s in stretches]
    assert max(abs(v) for v in left) < 0.0005, left
    assert max(abs(v) for v in uncorrected) > 0.02
    # without the correction the same points are off by up to tens of pixels
    raw = _after_similarity(xd, yd, xi_true, yi_true)
    assert float(raw.max()) > 20.0
    # and the distortion it removes is the true one (−12 % at the corners, ~40 px)
    assert float(np.hypot(*np.subtract(true.distort_px(0.0, 0.0), (0.0, 0.0)))) > 30
    # --out wrote a [lens] table that load_rig accepts, with the same numbers
    rig_path = tmp_path / "rig.toml"
    rig_path.write_text("[scale]\npoints_px = [[100.0, 60.0], [100.0, 420.0]]\ndistance_mm = 90.0\n\n"
                        + out.read_text(encoding="utf-8"), encoding="utf-8")
    rig = load_rig(rig_path)
    assert rig.lens is not None and rig.scale().lens_corrected
    assert rig.lens.focal_length_px == pytest.approx(tuple(lens["focal_length_px"]), rel=1e-9)
    assert rig.lens.radial_coefficients == pytest.approx(tuple(lens["radial_coefficients"]),
                                                         rel=1e-8, abs=1e-12)
    print(f"lens: rms {res['rms_px']:.4f} px, undistortion error p95 "
          f"{float(np.percentile(err, 95)):.3f} px, max {float(err.max()):.3f} px, velocity error "
          f"left ≤ {100 * max(abs(v) for v in left):.4f} % (uncorrected up to "
          f"{100 * max(abs(v) for v in uncorrected):.2f} %)")


def test_lens_command_prints_the_table_and_figures(board_clip, capsys):
    code = main(["lens", str(board_clip), "--board", "9x6", "--square-mm", "20"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    text = captured.out
    assert "RMS reprojection error" in text and "15 views used" in text
    assert "[lens]" in text and "radial_coefficients = [" in text
    assert "coverage" in text or "covered" in text


def test_lens_errors_have_their_exit_codes(board_clip, tmp_path, capsys):
    # missing clip → 3
    assert main(["lens", str(tmp_path / "nope.mp4"), "--board", "9x6", "--square-mm", "20"]) == 3
    assert capsys.readouterr().err.startswith("fallcam: error: ")
    # bad --board → 2 (nothing read)
    for board in ("9", "9x1", "ax6", "9x6x2"):
        assert main(["lens", str(board_clip), "--board", board, "--square-mm", "20"]) == 2
        err = capsys.readouterr().err
        assert err.startswith("fallcam: error: --board") and "Traceback" not in err
    assert main(["lens", str(board_clip), "--board", "9x6", "--square-mm", "-1"]) == 2
    capsys.readouterr()
    # a board of another size is never found → 4; --out is not written
    out = tmp_path / "lens.toml"
    code = main(["lens", str(board_clip), "--board", "7x5", "--square-mm", "20", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 4 and "checkerboard" in err and "0 of" in err
    assert not out.exists()
    # --out in a folder that does not exist → 2, before anything is read
    missing = tmp_path / "no_such_folder" / "lens.toml"
    assert main(["lens", str(board_clip), "--board", "9x6", "--square-mm", "20", "--out", str(missing)]) == 2
    assert "does not exist" in capsys.readouterr().err and not missing.parent.exists()
    # a file that is not a video → 3
    text = tmp_path / "notes.mp4"
    text.write_text("not a video\n", encoding="utf-8")
    assert main(["lens", str(text), "--board", "9x6", "--square-mm", "20"]) == 3
    assert len(capsys.readouterr().err.strip().splitlines()) <= 2


# --- falling ball seen through a barrel distortion --------------------------------------------

BALL_SIZE = (480, 640)                   # portrait phone frame, displayed
BALL_F = (500.0, 500.0)
BALL_C = ((BALL_SIZE[0] - 1) / 2.0, (BALL_SIZE[1] - 1) / 2.0)
BALL_K = (-0.10, 0.02, 0.0)              # a phone's barrel: −5.6 % at the corners
BALL_P = (0.0, 0.0)
BALL_SPEC = synth.ClipSpec(width_px=BALL_SIZE[0], height_px=BALL_SIZE[1], duration_s=1.9,
                           px_per_mm=4.0, axis_x_px=400.0, z0_y_px=80.0, ball_diameter_mm=2.5,
                           terminal_velocity_mm_s=80.0, tube_inner_diameter_mm=44.0, seed=23)
LIQUID = {"density_kg_m3": 1255.0, "temperature_c": 21.0}
BALL = {"density_kg_m3": 7810.0}


def _toml(tables):
    def value(v):
        if isinstance(v, str):
            return f'"{v}"'
        if isinstance(v, (list, tuple)):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return repr(float(v)) if isinstance(v, float) else repr(v)

    return "\n".join(f"[{t}]\n" + "\n".join(f"{k} = {value(v)}" for k, v in keys.items()) + "\n"
                     for t, keys in tables.items())


@pytest.fixture(scope="module")
def distorted_fall(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fall")
    w, h = BALL_SIZE
    u, v = np.meshgrid(np.arange(w, dtype=float), np.arange(h, dtype=float))
    map_x, map_y = _ideal_from_distorted_px(u, v, BALL_F, BALL_C, BALL_K, BALL_P)
    map_x, map_y = map_x.astype(np.float32), map_y.astype(np.float32)
    frames = (cv2.remap(f.image, map_x, map_y, cv2.INTER_CUBIC, borderMode=cv2.BORDER_REPLICATE)
              for f in synth.render(BALL_SPEC))
    clip = folder / "fall.mp4"
    encode.write_clip(clip, frames, synth.presentation_times_s(BALL_SPEC), codec="h264",
                      fps_hint=BALL_SPEC.capture_fps, crf=BALL_SPEC.crf)
    tables = synth.rig_dict(BALL_SPEC, liquid=LIQUID, ball=BALL)
    # the user reads the scale points off the (distorted) picture: the true lens's image of them
    ideal = np.asarray(tables["scale"]["points_px"], float)
    xd, yd = _distort_norm((ideal[:, 0] - BALL_C[0]) / BALL_F[0], (ideal[:, 1] - BALL_C[1]) / BALL_F[1],
                           BALL_K, BALL_P)
    tables["scale"]["points_px"] = [[float(x * BALL_F[0] + BALL_C[0]), float(y * BALL_F[1] + BALL_C[1])]
                                    for x, y in zip(xd, yd)]
    plain = folder / "plain.toml"
    plain.write_text(_toml(tables), encoding="utf-8")
    lens = {"image_size_px": list(BALL_SIZE), "focal_length_px": list(BALL_F),
            "principal_point_px": list(BALL_C), "radial_coefficients": list(BALL_K),
            "tangential_coefficients": list(BALL_P)}
    corrected = folder / "lens.toml"
    corrected.write_text(_toml({**tables, "lens": lens}), encoding="utf-8")
    return clip, plain, corrected


def _analyze(capsys, clip, rig, out):
    code = main(["analyze", str(clip), "--rig", str(rig), "--out", str(out), "--json", "--quiet"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return json.loads(captured.out)


def test_barrel_distortion_biases_v_t_and_the_lens_table_removes_it(distorted_fall, tmp_path, capsys):
    clip, plain, corrected = distorted_fall
    truth_v_m_s = BALL_SPEC.terminal_velocity_mm_s * 1e-3
    biased = _analyze(capsys, clip, plain, tmp_path / "plain")
    (track,) = biased["tracks"]
    bias = track["terminal_velocity_m_s"] / truth_v_m_s - 1.0
    assert abs(bias) > 0.005, bias                     # uncorrected: clearly wrong
    assert not biased["lens_corrected"] and biased["lens"] is None
    edge = [w for w in track["warnings"] if "no [lens] calibration" in w]
    assert len(edge) == 1 and "fallcam lens" in edge[0] and "to its corners" in edge[0]
    assert track["edge_reach_fraction"] > 0.8
    # the distortion sensitivity (v_t error per 1 % of barrel at the corners, from the geometry of
    # the plateau and the scale points alone) predicts the bias of this lens: −5.6 % at the corners
    k1, k2, _ = BALL_K
    r2 = (BALL_C[0] ** 2 + BALL_C[1] ** 2) / (BALL_F[0] * BALL_F[1])
    corner_barrel_pct = -100.0 * (k1 * r2 + k2 * r2 * r2)
    predicted = track["distortion_sensitivity"] * corner_barrel_pct
    assert abs(predicted - bias) < 0.25 * abs(bias), (predicted, bias)

    fixed = _analyze(capsys, clip, corrected, tmp_path / "lens")
    (track2,) = fixed["tracks"]
    err = track2["terminal_velocity_m_s"] / truth_v_m_s - 1.0
    assert abs(err) < 0.002, err
    assert fixed["lens_corrected"] and fixed["scale"]["lens_corrected"]
    assert fixed["lens"]["radial_coefficients"] == list(BALL_K)
    assert not any("no [lens] calibration" in w for w in track2["warnings"] + fixed["warnings"])
    # trajectory pixels stay as measured (the distorted frame); z_mm is corrected
    import pandas as pd

    a = pd.read_csv(tmp_path / "plain" / "trajectory.csv")
    b = pd.read_csv(tmp_path / "lens" / "trajectory.csv")
    assert np.allclose(a["y_px"], b["y_px"]) and not np.allclose(a["z_mm"], b["z_mm"], atol=0.05)
    html = (tmp_path / "lens" / "report.html").read_text(encoding="utf-8")
    assert "lens distortion correction" in html and "applied (Brown–Conrady" in html
    assert "none (no [lens] table in the rig)" in (tmp_path / "plain" / "report.html").read_text(
        encoding="utf-8")
    print(f"v_t: uncorrected {100 * bias:+.3f} % (predicted {100 * predicted:+.3f} %), "
          f"corrected {100 * err:+.4f} %, edge reach {track['edge_reach_fraction']:.3f}")


def test_track_records_the_lens_and_a_size_mismatch_exits_2(distorted_fall, tmp_path, capsys):
    clip, _, corrected = distorted_fall
    code = main(["track", str(clip), "--rig", str(corrected), "--out", str(tmp_path / "t"), "--quiet"])
    assert code == 0, capsys.readouterr().err
    tracking = json.loads((tmp_path / "t" / "tracking.json").read_text(encoding="utf-8"))
    assert tracking["lens_corrected"] is True and tracking["lens"]["image_size_px"] == list(BALL_SIZE)
    # the same calibration claimed for another frame size
    text = corrected.read_text(encoding="utf-8").replace("image_size_px = [480, 640]",
                                                         "image_size_px = [1080, 1920]")
    assert text != corrected.read_text(encoding="utf-8")
    wrong = tmp_path / "wrong.toml"
    wrong.write_text(text.replace("principal_point_px = [239.5, 319.5]",
                                  "principal_point_px = [539.5, 959.5]"), encoding="utf-8")
    out = tmp_path / "w"
    code = main(["analyze", str(clip), "--rig", str(wrong), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("fallcam: error: ")
    assert "480×640" in lines[0] and "1080×1920" in lines[0]
    assert not out.exists()


def test_lens_refuses_corners_that_do_not_fit(board_clip, tmp_path, capsys, monkeypatch):
    """Corners misread by ~2 px (a sub-board whose corners shift between views, a blurred or
    ghosted board): the RMS reprojection error is far above what a sharp board gives, and the
    calibration is refused (exit 4) rather than written; one bad view alone is left out."""
    import tracker.lens as lens_module

    find = lens_module._find_board
    rng = np.random.default_rng(3)
    misread = {"all": True, "count": 0}

    def noisy(luma, board):
        corners = find(luma, board)
        if corners is None:
            return None
        misread["count"] += 1
        if misread["all"] or misread["count"] == 4:     # every view, or only the fourth
            corners = corners + rng.normal(0.0, 2.0, corners.shape).astype(np.float32)
        return corners

    monkeypatch.setattr(lens_module, "_find_board", noisy)
    out = tmp_path / "lens.toml"
    code = main(["lens", str(board_clip), "--board", "9x6", "--square-mm", "20", "--out", str(out),
                 "--quiet"])
    err = capsys.readouterr().err
    assert code == 4 and "does not fit" in err and "--board" in err, err
    assert not out.exists()
    misread.update(all=False, count=0)
    code = main(["lens", str(board_clip), "--board", "9x6", "--square-mm", "20", "--json", "--quiet"])
    res = json.loads(capsys.readouterr().out)
    assert code == 0 and res["n_views"] == 14 and res["rms_px"] < 0.1
    assert any("1 view(s) left out" in w for w in res["warnings"])
