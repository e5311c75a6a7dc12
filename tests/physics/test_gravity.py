"""Local gravity: WGS 84 normal gravity with free-air correction (check row #24)."""

import pytest

from physics.gravity import STANDARD_GRAVITY_M_S2, local_gravity, normal_gravity_wgs84

# Row #24 asks for 1e-7 relative; the values are printed to 7 significant figures (≤ 5e-8).
GRAVITY_RTOL = 1e-7


@pytest.mark.parametrize(
    ("latitude_deg", "altitude_m", "expected"),
    [
        # #24 computed: WGS 84 formula (published)
        (0.0, 0.0, 9.780325),
        (45.0, 0.0, 9.806198),
        (90.0, 0.0, 9.832185),
        (45.0, 500.0, 9.804655),
        # §12 further check values (computed, WGS 84)
        (30.0, 0.0, 9.793247),
        (50.0, 0.0, 9.810702),
        (60.0, 0.0, 9.819177),
        (-45.0, 0.0, 9.806198),
    ],
)
def test_wgs84_check_values(latitude_deg, altitude_m, expected):
    assert local_gravity(latitude_deg=latitude_deg, altitude_m=altitude_m) == pytest.approx(expected, rel=GRAVITY_RTOL)


def test_equator_and_pole_values_of_the_ellipsoid():
    # published: 9.7803253359 and 9.8321849379 m/s² (geodesy package documentation)
    assert normal_gravity_wgs84(0.0) == pytest.approx(9.7803253359, rel=1e-12)
    assert normal_gravity_wgs84(90.0) == pytest.approx(9.8321849379, rel=1e-10)


def test_default_is_standard_gravity_and_a_given_value_is_used():
    assert local_gravity() == STANDARD_GRAVITY_M_S2 == 9.80665
    assert local_gravity(gravity_m_s2=9.8123) == 9.8123


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"gravity_m_s2": 9.81, "latitude_deg": 45.0}, r"gravity_m_s2 = 9\.81 and latitude_deg = 45\.0 are both given; expected only one"),
        ({"altitude_m": 300.0}, r"altitude_m = 300\.0 was given without latitude_deg; expected latitude_deg too"),
        ({"latitude_deg": 95.0}, r"latitude_deg = 95\.0 is not allowed; expected degrees in \[-90, 90\]"),
        ({"gravity_m_s2": 981.0}, r"gravity_m_s2 = 981\.0 is not allowed; expected a local gravity in m/s² between 9\.70 and 9\.90"),
        ({"gravity_m_s2": -9.81}, r"gravity_m_s2 = -9\.81 is not allowed"),
        ({"latitude_deg": 45.0, "altitude_m": 20000.0}, r"altitude_m = 20000\.0 is not allowed; expected metres between -1000 and 10000"),
    ],
)
def test_local_gravity_rejects_bad_input(kwargs, match):
    with pytest.raises(ValueError, match=match):
        local_gravity(**kwargs)
