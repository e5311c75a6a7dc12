"""The lens model of ``tracker.lens`` and its use by ``tracker.scale.Scale``.

Truth: ``cv2.projectPoints`` (OpenCV's own forward Brown–Conrady projection) of known ideal
points; the undistortion must map its output back onto them.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from tracker.lens import LensMismatchError, LensModel
from tracker.scale import Scale

PHONE = LensModel((1920, 1080), (1450.0, 1452.0), (962.0, 538.5), (-0.12, 0.05, -0.01),
                  (0.0007, -0.0004))


def _project(model, x_px, y_px):
    """OpenCV's projection of ideal pixel positions (z = 1 plane, identity pose)."""
    fx, fy = model.focal_length_px
    cx, cy = model.principal_point_px
    pts = np.stack([(x_px - cx) / fx, (y_px - cy) / fy, np.ones_like(x_px)], axis=-1).reshape(-1, 3)
    img, _ = cv2.projectPoints(pts, np.zeros(3), np.zeros(3), model.camera_matrix(), model.dist_coeffs())
    return img[:, 0, 0].reshape(x_px.shape), img[:, 0, 1].reshape(x_px.shape)


@pytest.mark.parametrize("model", [
    PHONE,
    LensModel((640, 480), (540.0, 538.0), (322.0, 237.5), (-0.28, 0.09, 0.0), (0.0008, -0.0006)),
    LensModel((1080, 1920), (1500.0, 1500.0), (539.5, 959.5), (0.08, -0.02, 0.0)),   # pincushion
], ids=["phone", "wide", "pincushion"])
def test_undistortion_inverts_opencv_projection_across_the_frame(model):
    w, h = model.image_size_px
    # ideal points whose images fill the frame, corners included
    xs, ys = np.meshgrid(np.linspace(-0.02 * w, 1.02 * w, 61), np.linspace(-0.02 * h, 1.02 * h, 41))
    xd, yd = _project(model, xs, ys)
    inside = (xd >= 0) & (xd <= w - 1) & (yd >= 0) & (yd <= h - 1)
    assert inside.sum() > 1500
    xu, yu = model.undistort_px(xd, yd)
    err = np.hypot(xu - xs, yu - ys)
    assert float(err.max()) <= 0.01
    # the closed-form forward model is OpenCV's
    fx, fy = model.distort_px(xs, ys)
    assert float(np.max(np.hypot(fx - xd, fy - yd))) < 1e-6
    # the frame corners move by a visible amount (the test is not trivial)
    cx, cy = model.distort_px(np.array([0.0]), np.array([0.0]))
    assert float(np.hypot(cx[0], cy[0])) > 5.0


def test_model_validation_names_the_key():
    with pytest.raises(ValueError, match=r"image_size_px = .* whole pixels"):
        LensModel((1920.5, 1080), (1450.0, 1450.0), (960.0, 540.0), (0.0, 0.0, 0.0))
    with pytest.raises(ValueError, match=r"focal_length_px = .* must be > 0"):
        LensModel((1920, 1080), (0.0, 1450.0), (960.0, 540.0), (0.0, 0.0, 0.0))
    with pytest.raises(ValueError, match=r"principal_point_px = .* inside the 1920×1080 frame"):
        LensModel((1920, 1080), (1450.0, 1450.0), (2000.0, 540.0), (0.0, 0.0, 0.0))
    with pytest.raises(ValueError, match=r"radial_coefficients = .* must be a list of 3"):
        LensModel((1920, 1080), (1450.0, 1450.0), (960.0, 540.0), (0.1, 0.0))
    with pytest.raises(ValueError, match=r"fold the image back on itself at \d+ %"):
        LensModel((640, 480), (300.0, 300.0), (320.0, 240.0), (-0.5, 0.0, 0.0))


def test_mismatched_frame_size_is_refused():
    PHONE.check_frame(1920, 1080, "a.mp4")
    with pytest.raises(LensMismatchError, match=r"a\.mp4 is 1280×720 px .* made at 1920×1080 px"):
        PHONE.check_frame(1280, 720, "a.mp4")


def test_scale_with_lens_undistorts_points_and_positions():
    ideal_p1, ideal_p2 = (1500.0, 100.0), (1500.0, 1000.0)      # 900 px apart near the right edge
    (x1, x2), (y1, y2) = PHONE.distort_px(np.array([ideal_p1[0], ideal_p2[0]]),
                                          np.array([ideal_p1[1], ideal_p2[1]]))
    plain = Scale.from_points((x1, y1), (x2, y2), 300.0)
    corrected = Scale.from_points((x1, y1), (x2, y2), 300.0, lens=PHONE)
    assert corrected.px_per_mm == pytest.approx(3.0, rel=1e-9)
    assert plain.px_per_mm < 2.95                          # barrel: the span looks shorter
    assert corrected.p1_px == pytest.approx((x1, y1))       # given points kept as given
    # a ball at ideal (1500, 700) is 200 mm below the upper point
    bx, by = PHONE.distort_px(np.array([1500.0]), np.array([700.0]))
    z, lat = corrected.to_mm(bx, by)
    assert float(z[0]) == pytest.approx(200.0, abs=1e-6) and float(lat[0]) == pytest.approx(0.0, abs=1e-6)
    d = corrected.to_dict()
    assert d["lens_corrected"] and d["lens"]["radial_coefficients"] == [-0.12, 0.05, -0.01]
    assert plain.to_dict()["lens_corrected"] is False
    with pytest.raises(ValueError, match="lens = "):
        Scale.from_points((x1, y1), (x2, y2), 300.0, lens={"k1": 0.1})
