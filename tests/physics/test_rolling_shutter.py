"""Rolling-shutter formulas against the reference sheet's check values (§11, rows 25–26)."""

import pytest

from physics import rolling_shutter as rs

#: rows 25/26 list 7 significant figures; 1e-6 relative as the sheet suggests
REL = 1e-6


def test_row25_apparent_velocity_and_its_inverse():
    """#25 (derived, physics-references §11): v = 0.10 m/s, T_r = 30 ms, H = 0.30 m."""
    c = rs.readout_coefficient(0.030, 0.30)
    assert c == pytest.approx(0.1, rel=REL)
    v_app = rs.apparent_velocity(0.10, c)
    assert v_app == pytest.approx(0.1010101, rel=REL)
    assert rs.corrected_velocity(v_app, c) == pytest.approx(0.100000, rel=REL)


def test_row26_apparent_free_fall_acceleration():
    """#26 (derived, physics-references §11): v = 2 m/s, c = 0.1 s/m → a_app/g = 1.953125."""
    g = 9.80665
    assert rs.apparent_acceleration(g, 2.0, 0.1) / g == pytest.approx(1.953125, rel=REL)


@pytest.mark.parametrize(("v", "expected_bias"), [(0.010, 0.00100), (0.100, 0.01010)])
def test_section11_bias_sizes(v, expected_bias):
    """§11 check values (computed): T_r = 30 ms, H = 0.30 m → +0.100 % at 10 mm/s, +1.010 % at 100 mm/s."""
    c = rs.readout_coefficient(0.030, 0.30)
    # the sheet quotes the bias to 0.001 % (half a unit of its last digit as tolerance)
    assert rs.apparent_velocity(v, c) / v - 1.0 == pytest.approx(expected_bias, abs=5e-6)


def test_motion_against_the_readout_reads_slower():
    c = rs.readout_coefficient(0.030, 0.30)
    assert abs(rs.apparent_velocity(-0.10, c)) < 0.10


@pytest.mark.parametrize(("call", "match"), [
    (lambda: rs.readout_coefficient(-1.0, 0.3), "readout_s must be ≥ 0"),
    (lambda: rs.readout_coefficient(0.03, 0.0), "field_height_m must be > 0"),
    (lambda: rs.apparent_velocity(20.0, 0.1), "outruns the readout"),
])
def test_bad_input(call, match):
    with pytest.raises(ValueError, match=match):
        call()


@pytest.mark.parametrize("direction", [1.0, -1.0])
def test_velocity_bias_on_points_matches_row25(direction):
    """#25 (derived, physics-references §11) on sampled points: a ball at 0.10 m/s along (or
    against) the readout, T_r = 30 ms over a 0.30 m field, seen at 30 frames/s. Each point is
    where the ball was when its row was read: z = v (t + T_r z/H) → z = v t / (1 − c v). The
    least-squares speed with plain frame times is v_app = 0.1010101 m/s along the readout, so the
    bias is +1.010101 %; against it (rows read upwards along the fall) v/(1 + c v): −0.990099 %."""
    import numpy as np

    v_mm_s, readout_s, field_mm = 100.0 * direction, 0.030, 300.0
    t = np.arange(9) / 30.0
    c = readout_s / field_mm
    z = v_mm_s * t / (1.0 - c * v_mm_s) + (0.0 if direction > 0 else field_mm)   # start at the far end
    bias = rs.velocity_bias(t, z, z / field_mm, readout_s)
    expected = 0.1010101 / 0.10 - 1.0 if direction > 0 else 0.0990099 / 0.10 - 1.0
    assert bias == pytest.approx(expected, rel=1e-5)
    # across the readout (every point on one row) there is no bias
    assert rs.velocity_bias(t, z, np.full_like(t, 0.5), readout_s) == pytest.approx(0.0, abs=1e-12)
