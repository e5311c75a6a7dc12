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
