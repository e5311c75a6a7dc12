"""Rolling-shutter bias of a speed measured from video (physics-references §11).

A rolling-shutter sensor exposes its rows one after another: row r of a frame is captured
T_r · r / N_rows after row 0. Write c = T_r / H_fov (seconds per metre of field height along the
readout direction). An object moving at v along the readout direction is then recorded at

    v_app = v / (1 − c v),           a_app = a / (1 − c v)³ (free fall, derived),

and the correction is v = v_app / (1 + c v_app) (signed, positive along the readout). fallcam's
tracker avoids the bias altogether by time-stamping each detection with its own row
(``[camera] readout_ms``); these formulas size the effect when the readout is unknown
(``fallcam plan``) and check the tracker in the tests.
"""

from __future__ import annotations

import math

__all__ = ["apparent_acceleration", "apparent_velocity", "corrected_velocity", "readout_coefficient"]


def readout_coefficient(readout_s: float, field_height_m: float) -> float:
    """c = T_r / H_fov, s/m: readout time per metre of field along the readout direction.

    Raises
    ------
    ValueError
        For a negative readout time or a non-positive field height.
    """
    if not (readout_s >= 0.0 and math.isfinite(readout_s)):
        raise ValueError(f"readout_s must be ≥ 0 (got {readout_s!r})")
    if not (field_height_m > 0.0 and math.isfinite(field_height_m)):
        raise ValueError(f"field_height_m must be > 0 (got {field_height_m!r})")
    return readout_s / field_height_m


def apparent_velocity(v_m_s: float, c_s_m: float) -> float:
    """Recorded speed v / (1 − c v) of a true speed v along the readout direction (v < 0 against it)."""
    denom = 1.0 - c_s_m * v_m_s
    if denom <= 0.0:
        raise ValueError(f"v_m_s = {v_m_s!r} outruns the readout (c v = {c_s_m * v_m_s:.3g} ≥ 1)")
    return v_m_s / denom


def corrected_velocity(v_app_m_s: float, c_s_m: float) -> float:
    """True speed v_app / (1 + c v_app) from a speed recorded with plain frame times."""
    return v_app_m_s / (1.0 + c_s_m * v_app_m_s)


def apparent_acceleration(a_m_s2: float, v_m_s: float, c_s_m: float) -> float:
    """Recorded acceleration a / (1 − c v)³ at true speed v (from y = Y(s + c y), derived)."""
    denom = 1.0 - c_s_m * v_m_s
    if denom <= 0.0:
        raise ValueError(f"v_m_s = {v_m_s!r} outruns the readout (c v = {c_s_m * v_m_s:.3g} ≥ 1)")
    return a_m_s2 / denom**3
