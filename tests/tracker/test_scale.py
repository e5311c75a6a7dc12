"""Two-point scale: orientation, refraction correction (check value #27) and uncertainty."""

import json
import math

import numpy as np
import pytest

from tracker.scale import Scale

# ---- check value #27 and the §10 table (derived: paraxial L_eff = L + t/n_w + R_i/n_l) --------
# rel tol 1e-5 as the sheet suggests; the table gives 6–7 digits.
REFRACTION_REL = 1e-5
SECTION_10_TABLE = [
    # L mm, t mm, n_w, R_i mm, n_l, L_eff mm, factor front marks, factor ruler at L + R_o
    (500.0, 2.5, 1.47, 24.5, 1.473, 518.333, 1.036667, 0.983554),  # row 27
    (1000.0, 2.5, 1.47, 24.5, 1.473, 1018.333, 1.018333, 0.991561),
    (500.0, 2.5, 1.47, 24.5, 1.333, 520.082, 1.040163, 0.986873),
    (300.0, 2.0, 1.47, 18.0, 1.473, 313.580, 1.045267, 0.979937),
]
P1, P2 = (550.0, 60.0), (550.0, 660.0)  # 600 px apart, vertical


def _optics(cam, wall, n_w, r_i, n_l):
    return dict(camera_distance_mm=cam, tube_wall_mm=wall, wall_refractive_index=n_w,
                liquid_refractive_index=n_l, tube_inner_diameter_mm=2 * r_i)


@pytest.mark.parametrize("cam, wall, n_w, r_i, n_l, l_eff, f_front, f_ruler", SECTION_10_TABLE)
def test_check_27_refraction_factors(cam, wall, n_w, r_i, n_l, l_eff, f_front, f_ruler):
    front = Scale.from_points(P1, P2, 300.0, plane="tube-front", **_optics(cam, wall, n_w, r_i, n_l))
    assert front.effective_distance_mm == pytest.approx(l_eff, rel=REFRACTION_REL)
    assert front.refraction_factor == pytest.approx(f_front, rel=REFRACTION_REL)
    # a ruler beside the tube in the axial plane: ruler_offset = R_o = R_i + t behind the front
    ruler = Scale.from_points(P1, P2, 300.0, plane="in-air", ruler_offset_mm=r_i + wall,
                              **_optics(cam, wall, n_w, r_i, n_l))
    assert ruler.refraction_factor == pytest.approx(f_ruler, rel=REFRACTION_REL)


def test_effective_px_per_mm_divides_by_the_factor():
    plain = Scale.from_points(P1, P2, 300.0)
    front = Scale.from_points(P1, P2, 300.0, plane="tube-front", **_optics(500.0, 2.5, 1.47, 24.5, 1.473))
    assert plain.refraction_factor == 1.0 and plain.px_per_mm == pytest.approx(2.0)
    assert front.px_per_mm == pytest.approx(2.0 / 1.036667, rel=REFRACTION_REL)
    # the same pixel displacement is a longer true ball displacement
    z_plain, _ = plain.to_mm(550.0, 360.0)
    z_front, _ = front.to_mm(550.0, 360.0)
    assert z_front / z_plain == pytest.approx(front.refraction_factor, rel=1e-12)


# ---- orientation: +z downward from the upper point, lateral + to the right ----------------------
@pytest.mark.parametrize("p1, p2", [(P1, P2), (P2, P1)], ids=["p1-above", "p1-below"])
def test_to_mm_orientation_either_order(p1, p2):
    sc = Scale.from_points(p1, p2, 300.0)
    z, lat = sc.to_mm(np.array([550.0, 550.0, 560.0, 540.0]), np.array([60.0, 660.0, 360.0, 360.0]))
    np.testing.assert_allclose(z, [0.0, 300.0, 150.0, 150.0], atol=1e-12)
    np.testing.assert_allclose(lat, [0.0, 0.0, 5.0, -5.0], atol=1e-12)


@pytest.mark.parametrize("tilt_deg", [-10.0, -1.0, 1.5, 7.0])
def test_to_mm_on_a_tilted_axis(tilt_deg):
    th = math.radians(tilt_deg)
    upper = (400.0, 100.0)
    lower = (400.0 + 600 * math.sin(th), 100.0 + 600 * math.cos(th))
    sc = Scale.from_points(lower, upper, 300.0)
    assert sc.tilt_deg == pytest.approx(tilt_deg)
    # a point 240 px down the axis and 20 px to its right (axis turned towards +x)
    along = np.array([math.sin(th), math.cos(th)])
    right = np.array([math.cos(th), -math.sin(th)])
    pt = np.array(upper) + 240 * along + 20 * right
    z, lat = sc.to_mm(pt[0], pt[1])
    assert float(z) == pytest.approx(120.0, abs=1e-9)
    assert float(lat) == pytest.approx(10.0, abs=1e-9)
    has_warning = any("tilted" in w for w in sc.warnings)
    assert has_warning == (abs(tilt_deg) > 2.0)


def test_to_mm_keeps_array_shape():
    sc = Scale.from_points(P1, P2, 300.0)
    z, lat = sc.to_mm(np.full((3, 4), 550.0), np.full((3, 4), 360.0))
    assert z.shape == (3, 4) and lat.shape == (3, 4)


# ---- uncertainty ---------------------------------------------------------------------------------
def test_px_per_mm_u_formula():
    sc = Scale.from_points(P1, P2, 300.0, 0.5)
    click = 0.5 / math.sqrt(3)  # ±0.5 px rectangular per coordinate (common practice)
    expected_rel = math.hypot(math.sqrt(2) * click / 600.0, 0.5 / 300.0)
    assert sc.px_per_mm_u / sc.px_per_mm == pytest.approx(expected_rel, rel=1e-12)


def test_px_per_mm_u_matches_monte_carlo_clicks():
    # JCGM 101: ±0.5 px rectangular click errors on both coordinates of both points of a tilted,
    # short scale + normal error of the distance. 100 000 draws → std known to ≈ 0.3 %; 3 % also
    # covers the first-order treatment of the tilt.
    p1, p2, dist, dist_u = (300.0, 200.0), (318.0, 400.0), 50.0, 0.05
    sc = Scale.from_points(p1, p2, dist, dist_u)
    rng = np.random.default_rng(27)
    n = 100_000
    e = rng.uniform(-0.5, 0.5, size=(n, 4))
    span = np.hypot(p2[0] + e[:, 2] - p1[0] - e[:, 0], p2[1] + e[:, 3] - p1[1] - e[:, 1])
    ppm = span / rng.normal(dist, dist_u, n)
    assert np.std(ppm) == pytest.approx(sc.px_per_mm_u, rel=0.03)


def test_camera_distance_u_propagates_through_the_factor():
    opt = _optics(500.0, 2.5, 1.47, 24.5, 1.473)
    sc0 = Scale.from_points(P1, P2, 300.0, plane="tube-front", **opt)
    sc1 = Scale.from_points(P1, P2, 300.0, plane="tube-front", camera_distance_u_mm=10.0, **opt)
    h = 1e-3
    f_plus = Scale.from_points(P1, P2, 300.0, plane="tube-front", **{**opt, "camera_distance_mm": 500.0 + h}).refraction_factor
    f_minus = Scale.from_points(P1, P2, 300.0, plane="tube-front", **{**opt, "camera_distance_mm": 500.0 - h}).refraction_factor
    u_factor_rel = abs(f_plus - f_minus) / (2 * h) * 10.0 / sc0.refraction_factor
    expected = math.hypot(sc0.px_per_mm_u / sc0.px_per_mm, u_factor_rel)
    assert sc1.px_per_mm_u / sc1.px_per_mm == pytest.approx(expected, rel=1e-6)


# ---- warnings ----------------------------------------------------------------------------------
@pytest.mark.parametrize("travel_mm, warns", [(300.0, False), (600.0, False), (601.0, True), (-700.0, True)])
def test_check_span(travel_mm, warns):
    msg = Scale.from_points(P1, P2, 300.0).check_span(travel_mm)
    assert (msg is not None) == warns
    if warns:
        assert msg.startswith("scale points are 300 mm apart but the ball was tracked over")


def test_ball_plane_with_optics_keys_warns_they_are_ignored():
    sc = Scale.from_points(P1, P2, 300.0, camera_distance_mm=500.0, tube_inner_diameter_mm=49.0)
    assert sc.refraction_factor == 1.0
    assert sc.warnings == ["plane is ball-plane: camera_distance_mm ignored (no refraction correction)"]


# ---- bad input -----------------------------------------------------------------------------------
@pytest.mark.parametrize("missing", ["camera_distance_mm", "tube_wall_mm", "wall_refractive_index",
                                     "liquid_refractive_index", "tube_inner_diameter_mm"])
def test_missing_optics_key_is_named(missing):
    opt = _optics(500.0, 2.5, 1.47, 24.5, 1.473)
    del opt[missing]
    with pytest.raises(ValueError, match=rf"{missing} is required for plane = 'tube-front' \(refraction correction\)"):
        Scale.from_points(P1, P2, 300.0, plane="tube-front", **opt)


@pytest.mark.parametrize("args, kwargs, message", [
    ((P1, P1, 300.0), {}, r"p1_px and p2_px are the same point \(550.0, 60.0\); expected two distinct points"),
    ((P1, P2, 0.0), {}, r"distance_mm = 0 must be > 0 mm"),
    ((P1, P2, 300.0, -1.0), {}, r"distance_u_mm = -1 must be ≥ 0 mm"),
    ((P1, (1000.0, 100.0), 300.0), {}, r"lie 84.9° from vertical; expected two points along the fall axis"),
    ((P1, P2, 300.0), {"plane": "front"}, r"plane = 'front' is unknown; expected one of ball-plane, tube-front, in-air"),
    ((P1, (550.0,), 300.0), {}, r"p2_px = \(550.0,\) must be an \(x, y\) pair of pixel coordinates"),
    ((P1, (550.0, float("inf")), 300.0), {}, r"p2_px = \(550.0, inf\) must have finite coordinates"),
    ((P1, P2, 300.0), dict(plane="in-air", **_optics(500.0, 2.5, 1.47, 24.5, 1.473)), r"ruler_offset_mm is required for plane = 'in-air'"),
    ((P1, P2, 300.0), dict(plane="in-air", ruler_offset_mm=-600.0, **_optics(500.0, 2.5, 1.47, 24.5, 1.473)), r"ruler_offset_mm = -600 puts the ruler at or behind the camera"),
    ((P1, P2, 300.0), dict(plane="tube-front", **{**_optics(500.0, 2.5, 1.47, 24.5, 1.473), "wall_refractive_index": 0.9}), r"wall_refractive_index = 0.9 must be ≥ 1"),
])
def test_bad_input_raises(args, kwargs, message):
    with pytest.raises(ValueError, match=message):
        Scale.from_points(*args, **kwargs)


# ---- construction from rig tables and serialisation --------------------------------------------------
def test_from_rig_tables_equals_from_points():
    tables = {"scale": {"points_px": [list(P1), list(P2)], "distance_mm": 300.0, "distance_u_mm": 0.5,
                        "plane": "tube-front", "camera_distance_mm": 500.0, "tube_wall_mm": 2.5,
                        "wall_refractive_index": 1.47, "liquid_refractive_index": 1.473},
              "tube": {"inner_diameter_mm": 49.0}}
    a = Scale.from_rig(tables)
    b = Scale.from_points(P1, P2, 300.0, 0.5, plane="tube-front", **_optics(500.0, 2.5, 1.47, 24.5, 1.473))
    assert a == b


def test_to_dict_has_summary_keys_and_is_json():
    d = Scale.from_points(P1, P2, 300.0, 0.5).to_dict()
    for key in ("p1_px", "p2_px", "distance_mm", "distance_u_mm", "plane", "refraction_factor", "px_per_mm", "px_per_mm_u"):
        assert key in d
    json.dumps(d, allow_nan=False)
