"""Local gravitational acceleration: a given value, or WGS 84 normal gravity at a latitude with
the free-air height correction, or standard gravity (physics-references.md §12)."""

from __future__ import annotations

import math

from physics.drag import require_positive

__all__ = [
    "FREE_AIR_GRADIENT_PER_S2",
    "STANDARD_GRAVITY_M_S2",
    "local_gravity",
    "normal_gravity_wgs84",
]

#: Standard gravity g_n (published: reference page; 3rd CGPM 1901, from memory).
STANDARD_GRAVITY_M_S2 = 9.80665

#: WGS 84 ellipsoidal gravity formula constants (published: reference page; equator value also
#: in an open geodesy package's documentation).
_G_EQUATOR_M_S2 = 9.7803253359
_K_WGS84 = 0.00193185265241
_E2_WGS84 = 0.00669437999013

#: Free-air gradient, s⁻² (published: NCAR gravity routine; another routine gives 3.0835e-6).
FREE_AIR_GRADIENT_PER_S2 = 3.086e-6

#: Plausible range for a value given by the user, m/s² (Earth's surface: 9.76–9.84 incl. height).
_G_RANGE_M_S2 = (9.70, 9.90)
#: Altitudes accepted, m (below the Dead Sea shore to above the highest summits).
_ALTITUDE_RANGE_M = (-1000.0, 10000.0)


def normal_gravity_wgs84(latitude_deg: float) -> float:
    """WGS 84 normal gravity on the ellipsoid.

    Parameters
    ----------
    latitude_deg : float
        Geodetic latitude φ in degrees, −90 … 90.

    Returns
    -------
    float
        g(φ) = 9.7803253359 (1 + 0.00193185265241 sin²φ) / √(1 − 0.00669437999013 sin²φ), m/s².

    Raises
    ------
    ValueError
        Latitude outside −90 … 90.
    """
    lat = float(latitude_deg)
    if not (math.isfinite(lat) and -90.0 <= lat <= 90.0):
        raise ValueError(f"latitude_deg = {latitude_deg!r} is not allowed; expected degrees in [-90, 90]")
    s2 = math.sin(math.radians(lat)) ** 2
    return _G_EQUATOR_M_S2 * (1.0 + _K_WGS84 * s2) / math.sqrt(1.0 - _E2_WGS84 * s2)


def local_gravity(
    gravity_m_s2: float | None = None,
    latitude_deg: float | None = None,
    altitude_m: float = 0.0,
) -> float:
    """Gravitational acceleration to use in the force balance.

    Parameters
    ----------
    gravity_m_s2 : float, optional
        A measured or looked-up local value, m/s²; used as given (9.70–9.90 accepted).
    latitude_deg : float, optional
        Latitude in degrees, when no value is given: WGS 84 normal gravity.
    altitude_m : float
        Height above the ellipsoid, m; free-air correction −3.086e-6 s⁻² × h. Needs
        ``latitude_deg``.

    Returns
    -------
    float
        g in m/s²; standard gravity 9.80665 when nothing is given. Local anomalies are usually
        below 1e-3 m/s² (from memory), i.e. the formula is good to ~0.01 %.

    Raises
    ------
    ValueError
        Both a value and a latitude, an altitude without a latitude, or values out of range.
    """
    if gravity_m_s2 is not None:
        if latitude_deg is not None:
            raise ValueError(
                f"gravity_m_s2 = {gravity_m_s2!r} and latitude_deg = {latitude_deg!r} are both given; expected only one of them"
            )
        g = require_positive("gravity_m_s2", gravity_m_s2, "a local gravity in m/s² between 9.70 and 9.90")
        if not _G_RANGE_M_S2[0] <= g <= _G_RANGE_M_S2[1]:
            raise ValueError(f"gravity_m_s2 = {gravity_m_s2!r} is not allowed; expected a local gravity in m/s² between 9.70 and 9.90")
        return g
    alt = float(altitude_m)
    if not (math.isfinite(alt) and _ALTITUDE_RANGE_M[0] <= alt <= _ALTITUDE_RANGE_M[1]):
        raise ValueError(f"altitude_m = {altitude_m!r} is not allowed; expected metres between -1000 and 10000")
    if latitude_deg is None:
        if alt != 0.0:
            raise ValueError(f"altitude_m = {altitude_m!r} was given without latitude_deg; expected latitude_deg too")
        return STANDARD_GRAVITY_M_S2
    return normal_gravity_wgs84(latitude_deg) - FREE_AIR_GRADIENT_PER_S2 * alt
