"""Rolling-shutter bias of a speed measured from video (physics-references §11).

A rolling-shutter sensor exposes its rows one after another: row r of a frame is captured
T_r · r / N_rows after row 0. Write c = T_r / H_fov (seconds per metre of field height along the
readout direction). An object moving at v along the readout direction is then recorded at

    v_app = v / (1 − c v),           a_app = a / (1 − c v)³ (free fall, derived),

and the correction is v = v_app / (1 + c v_app) (signed, positive along the readout). fallcam's
tracker avoids the bias altogether by time-stamping each detection with its own row
(``[camera] readout_ms``); these formulas size the effect when the readout is unknown
(``fallcam plan``) and check the tracker in the tests. :func:`velocity_bias` sizes it on the
measured points themselves (``fallcam analyze`` without ``readout_ms``: a budget term).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["apparent_acceleration", "apparent_velocity", "corrected_velocity", "readout_coefficient",
           "velocity_bias"]


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


def velocity_bias(t_s: ArrayLike, z_mm: ArrayLike, row_fraction: ArrayLike, readout_s: float) -> float:
    """Relative error of a least-squares speed taken with plain frame times, for a rolling
    shutter of readout time ``readout_s``: (slope of z against t) ÷ (slope of z against the rows'
    own times t + row_fraction · readout_s) − 1.

    Parameters
    ----------
    t_s : array_like of shape (n,)
        Frame times of the points, s.
    z_mm : array_like of shape (n,)
        Positions along the fall, mm.
    row_fraction : array_like of shape (n,)
        Each point's sensor row over the number of rows (0 at the first row read, 1 at the last).
    readout_s : float
        Readout time, first to last row, s (≥ 0).

    Returns
    -------
    float
        Signed relative error (≈ c v along the readout, −c v against it; 0 across it); 0 with
        fewer than 2 distinct times or no motion.
    """
    if not (readout_s >= 0.0 and math.isfinite(readout_s)):
        raise ValueError(f"readout_s must be ≥ 0 (got {readout_s!r})")
    t = np.asarray(t_s, dtype=float)
    z = np.asarray(z_mm, dtype=float)
    t_row = t + np.asarray(row_fraction, dtype=float) * readout_s
    if t.size < 2 or np.ptp(t) <= 0 or np.ptp(t_row) <= 0:
        return 0.0

    def slope(x: np.ndarray) -> float:
        xc = x - x.mean()
        return float(xc @ (z - z.mean())) / float(xc @ xc)

    true = slope(t_row)
    return slope(t) / true - 1.0 if true != 0.0 else 0.0
