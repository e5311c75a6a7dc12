"""Terminal-velocity fit with an uncertainty that stays honest under correlated residuals.

This module is *the* millimetre → metre boundary of fallcam: it reads trajectories in ``z_mm``
and ``t_s`` and reports velocities in m/s (``MM_PER_M`` is applied here and nowhere else).
Per-point quantities that stay in trajectory units (residuals, the ``v_mm_s`` column from
:func:`local_velocity`) keep ``mm`` in their names.

Why a special uncertainty: positions from compressed, blurred video are correlated from frame to
frame (the block structure of the codec, blur, a slowly wandering threshold). A straight line
fitted to N such points has a slope uncertainty larger than the textbook
σ_v = σ_z √(12 / (N(N² − 1))) / Δt (physics-references.md §9), by roughly √((1 + ρ)/(1 − ρ)) for
AR(1) residuals with lag-1 correlation ρ — a factor 3 at ρ = 0.8. The fit therefore uses a
heteroskedasticity-and-autocorrelation-consistent (HAC) sandwich covariance:

- scores h_i = w_i x_i e_i of the (weighted) least-squares fit;
- AR(1) prewhitening of the scores (the idea of Andrews & Monahan 1992, Econometrica 60, 953 —
  from memory) with the residuals' lag-1 coefficient, corrected for its small-sample bias;
- Newey–West (Bartlett kernel) long-run covariance of the whitened scores with the AR(1) plug-in
  bandwidth of Andrews (1991, Econometrica 59, 817 — from memory):
  S = 1.1447 (α̂(1) n)^(1/3), α̂(1) = Σ 4ρ̂²σ̂⁴/((1 − ρ̂)⁶(1 + ρ̂)²) / Σ σ̂⁴/(1 − ρ̂)⁴;
- recolouring by 1/(1 − ρ)² and the sandwich (XᵀWX)⁻¹ n Ω (XᵀWX)⁻¹ · n/(n − p).

With few effective points (n(1 − ρ)/(1 + ρ) below ~40) any such estimate is itself noisy and
k = 2 covers less than 95 % (about 90 % at n = 60, ρ = 0.8); ``TerminalFit.effective_points``
reports the figure so that a budget can use a Student factor instead.

The Monte Carlo test in ``tests/physics/test_terminal.py`` checks that k = 2 intervals built this
way cover the true velocity 93–97 % of the time under AR(1) noise with ρ = 0.5–0.8, and that the
naive OLS interval does not.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from physics._results import ResultDict

__all__ = [
    "MM_PER_M",
    "LineFit",
    "TerminalFit",
    "trajectory_arrays",
    "hac_covariance",
    "fit_line",
    "fit_terminal_velocity",
    "sliding_line_weights",
    "local_velocity",
]

MM_PER_M = 1000.0
_MAX_PREWHITEN = 0.97  # cap on the prewhitening coefficient (Andrews & Monahan 1992 use 0.97)
_ANDREWS_BARTLETT = 1.1447  # Bartlett-kernel constant of the Andrews (1991) plug-in bandwidth
_MIN_FIT_POINTS = 4  # a line (2 parameters) and a long-run variance need p + 2 points
_FEW_POINTS_WARN = 20  # below this a HAC long-run variance is poorly determined


# ----------------------------------------------------------------------------- input handling


def trajectory_arrays(
    t_s: ArrayLike | pd.DataFrame,
    z_mm: ArrayLike | None = None,
    z_u_mm: ArrayLike | None = None,
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64] | None]:
    """Validate one track of a trajectory, given as arrays or as a trajectory DataFrame.

    Parameters
    ----------
    t_s : array_like of shape (n,) or pandas.DataFrame
        Time in seconds, strictly increasing. Or a DataFrame with the trajectory columns of
        DEVELOPERS.md (``t_s``, ``z_mm`` and optionally ``z_u_mm``; a ``track`` column, if
        present, must hold a single passage).
    z_mm : array_like of shape (n,), optional
        Position along the fall axis in mm, positive downward. Required with array input; must be
        omitted with DataFrame input.
    z_u_mm : array_like of shape (n,), optional
        Standard uncertainty of each position in mm (> 0). Taken from the DataFrame's ``z_u_mm``
        column when present and not given.

    Returns
    -------
    t_s : ndarray of shape (n,), seconds
    z_mm : ndarray of shape (n,), mm
    z_u_mm : ndarray of shape (n,), mm, or None

    Raises
    ------
    ValueError
        Naming the input and the expectation: missing columns, several tracks, mismatched
        lengths, non-finite values, time not strictly increasing, non-positive uncertainties.
    """
    if isinstance(t_s, pd.DataFrame):
        frame = t_s
        if z_mm is not None:
            raise ValueError("z_mm must not be given together with a trajectory DataFrame")
        missing = [c for c in ("t_s", "z_mm") if c not in frame.columns]
        if missing:
            raise ValueError(f"trajectory DataFrame lacks column(s) {missing}; expected t_s and z_mm")
        if "track" in frame.columns:
            tracks = pd.unique(frame["track"])
            if len(tracks) > 1:
                raise ValueError(
                    f"trajectory DataFrame holds {len(tracks)} tracks ({list(tracks)[:5]}); "
                    "pass one track at a time"
                )
        t = frame["t_s"].to_numpy(dtype=float)
        z = frame["z_mm"].to_numpy(dtype=float)
        if z_u_mm is None and "z_u_mm" in frame.columns:
            z_u_mm = frame["z_u_mm"].to_numpy(dtype=float)
    else:
        if z_mm is None:
            raise ValueError("z_mm is required when t_s is an array (or pass a trajectory DataFrame)")
        t = np.asarray(t_s, dtype=float)
        z = np.asarray(z_mm, dtype=float)
    if t.ndim != 1 or z.shape != t.shape:
        raise ValueError(f"t_s and z_mm must be 1-D of equal length (got shapes {t.shape} and {z.shape})")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(z))):
        raise ValueError("t_s and z_mm must be finite (got NaN or inf); drop lost frames instead")
    steps = np.diff(t)
    if np.any(steps <= 0):
        i = int(np.argmax(steps <= 0)) + 1
        raise ValueError(f"t_s must be strictly increasing (got t_s[{i}] = {float(t[i])!r} after {float(t[i - 1])!r})")
    zu: NDArray[np.float64] | None = None
    if z_u_mm is not None:
        zu = np.asarray(z_u_mm, dtype=float)
        if zu.shape != t.shape:
            raise ValueError(f"z_u_mm must have the shape of t_s {t.shape} (got {zu.shape})")
        if not np.all(np.isfinite(zu) & (zu > 0)):
            bad = zu[~(np.isfinite(zu) & (zu > 0))][0]
            raise ValueError(f"z_u_mm must be positive and finite (got {float(bad)!r})")
    return t, z, zu


def _mask_array(mask: ArrayLike | None, n: int) -> NDArray[np.bool_]:
    if mask is None:
        return np.ones(n, dtype=bool)
    m = np.asarray(mask)
    if m.shape != (n,) or m.dtype != bool:
        raise ValueError(f"mask must be a boolean array of shape ({n},) (got dtype {m.dtype}, shape {m.shape})")
    return m


# ----------------------------------------------------------------------------- HAC covariance


def _ar1(x: NDArray[np.float64]) -> tuple[float, float]:
    """Least-squares AR(1) coefficient and innovation variance of a 1-D series."""
    prev, cur = x[:-1], x[1:]
    den = float(prev @ prev)
    rho = float(cur @ prev) / den if den > 0 else 0.0
    rho = float(np.clip(rho, -_MAX_PREWHITEN, _MAX_PREWHITEN))
    innov = cur - rho * prev
    return rho, float(innov @ innov) / max(len(innov), 1)


def hac_covariance(
    design: ArrayLike,
    residuals: ArrayLike,
    bread: ArrayLike,
    weights: ArrayLike | None = None,
) -> tuple[NDArray[np.float64], float]:
    """Sandwich covariance with an AR(1)-prewhitened Newey–West long-run variance.

    Parameters
    ----------
    design : array_like of shape (n, p)
        Regressors (rows of the model's Jacobian) in time order.
    residuals : array_like of shape (n,)
        Data minus model, in time order.
    bread : array_like of shape (p, p)
        (XᵀWX)⁻¹ of the fit (pseudo-inverse when singular).
    weights : array_like of shape (n,), optional
        Least-squares weights w_i (default 1).

    Returns
    -------
    cov : ndarray of shape (p, p)
        Covariance of the parameters, in their units squared.
    bandwidth : float
        Bartlett bandwidth used, in points.

    Notes
    -----
    Scores h_i = w_i x_i e_i. Prewhitening: ρ̂ is the lag-1 coefficient of the standardised
    residuals √w_i e_i, corrected for its small-sample bias, ρ_c = ρ̂ + (p + (p + 2)ρ̂)/n, which is
    the known −(1 + 3ρ)/n for a fitted mean (p = 1) and −(2 + 4ρ)/n for mean and trend (p = 2)
    (Kendall 1954 and its regression extensions — from memory; the pattern for p > 2 is our
    extrapolation), capped at 0.97. Whitened scores h_i − ρ_c h_{i−1} (≈ x_i(e_i − ρ_c e_{i−1}) for
    slowly varying x) get a Newey–West (Bartlett) long-run covariance with the Andrews (1991)
    AR(1) plug-in bandwidth, which is recoloured by 1/(1 − ρ_c)². Lags are counted in points, so
    roughly even sampling is assumed (variable-frame-rate video varies by a few per cent).
    """
    x = np.asarray(design, dtype=float)
    e = np.asarray(residuals, dtype=float)
    b = np.asarray(bread, dtype=float)
    n, p = x.shape
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=float)
    if n < p + 2:
        raise ValueError(f"residuals must have at least {p + 2} points for a long-run covariance (got {n})")
    rho, _ = _ar1(e * np.sqrt(w))
    rho = float(min(rho + (p + (p + 2) * rho) / n, _MAX_PREWHITEN))
    h = x * (w * e)[:, None]
    hw = h[1:] - rho * h[:-1]
    m = hw.shape[0]
    # Andrews (1991) AR(1) plug-in bandwidth for the Bartlett kernel, on the whitened scores.
    num = den = 0.0
    for j in range(p):
        if not np.any(hw[:, j]):
            continue
        r, var = _ar1(hw[:, j])
        num += 4.0 * r**2 * var**2 / ((1 - r) ** 6 * (1 + r) ** 2)
        den += var**2 / (1 - r) ** 4
    bandwidth = float(_ANDREWS_BARTLETT * ((num / den if den > 0 else 0.0) * m) ** (1.0 / 3.0))
    omega = hw.T @ hw / m
    for lag in range(1, min(int(np.ceil(bandwidth)), m - 1) + 1):
        weight = 1.0 - lag / bandwidth
        if weight <= 0:
            break
        gamma = hw[lag:].T @ hw[:-lag] / m
        omega += weight * (gamma + gamma.T)
    omega /= (1.0 - rho) ** 2
    cov = b @ (n * omega) @ b.T * (n / max(n - p, 1))
    return 0.5 * (cov + cov.T), bandwidth


# ----------------------------------------------------------------------------- line fits


@dataclass(frozen=True, eq=False)
class LineFit:
    """Straight line z = z_ref + slope (t − t_ref) fitted by (weighted) least squares.

    Attributes
    ----------
    t_ref_s : float
        Reference time (weighted mean of the fitted times), s.
    z_ref_mm : float
        Fitted position at ``t_ref_s``, mm.
    slope_mm_s : float
        Fitted velocity along z, mm/s, positive downward.
    cov_hac : ndarray of shape (2, 2)
        HAC covariance of (z_ref_mm, slope_mm_s) (see the module notes), mm², mm²/s, mm²/s².
    cov_ols : ndarray of shape (2, 2)
        Textbook covariance assuming independent residuals, same units.
    residuals_mm : ndarray of shape (n,)
        Data minus line, mm.
    hac_bandwidth : float
        Bartlett bandwidth of the HAC estimate, points.
    """

    t_ref_s: float
    z_ref_mm: float
    slope_mm_s: float
    cov_hac: NDArray[np.float64]
    cov_ols: NDArray[np.float64]
    residuals_mm: NDArray[np.float64]
    hac_bandwidth: float

    def position_mm(self, t_s: ArrayLike) -> NDArray[np.float64]:
        """Line position at times ``t_s`` (array of shape (m,), s), mm."""
        return self.z_ref_mm + self.slope_mm_s * (np.asarray(t_s, dtype=float) - self.t_ref_s)


def fit_line(t_s: ArrayLike, z_mm: ArrayLike, z_u_mm: ArrayLike | None = None) -> LineFit:
    """Fit a straight line to positions with a HAC (correlation-robust) covariance.

    Parameters
    ----------
    t_s : array_like of shape (n,)
        Times, s, strictly increasing, n ≥ 4.
    z_mm : array_like of shape (n,)
        Positions, mm.
    z_u_mm : array_like of shape (n,), optional
        Standard uncertainties of the positions, mm; when given the fit is weighted by 1/u².

    Returns
    -------
    LineFit
    """
    t, z, zu = trajectory_arrays(t_s, z_mm, z_u_mm)
    n = t.size
    if n < _MIN_FIT_POINTS:
        raise ValueError(f"a line fit needs at least {_MIN_FIT_POINTS} points (got {n})")
    w = np.ones(n) if zu is None else 1.0 / zu**2
    t_ref = float(np.sum(w * t) / np.sum(w))
    x = np.column_stack([np.ones(n), t - t_ref])
    xtwx = x.T @ (x * w[:, None])
    bread = np.linalg.pinv(xtwx)
    beta = bread @ (x.T @ (w * z))
    resid = z - x @ beta
    sigma2 = float(np.sum(w * resid**2)) / max(n - 2, 1)
    cov_ols = bread * sigma2
    cov_hac, bandwidth = hac_covariance(x, resid, bread, w)
    return LineFit(
        t_ref_s=t_ref,
        z_ref_mm=float(beta[0]),
        slope_mm_s=float(beta[1]),
        cov_hac=cov_hac,
        cov_ols=cov_ols,
        residuals_mm=resid,
        hac_bandwidth=bandwidth,
    )


# ----------------------------------------------------------------------------- terminal fit


@dataclass(frozen=True)
class TerminalFit(ResultDict):
    """Terminal velocity from a straight-line fit over the plateau, in SI units.

    Attributes
    ----------
    v_m_s : float
        Terminal speed, m/s, positive.
    u_v_m_s : float
        Standard uncertainty (k = 1) of ``v_m_s`` from the HAC covariance, m/s.
    direction : str
        ``"down"`` (z increasing) or ``"up"`` (rising sphere).
    v_z_m_s : float
        Signed velocity along z, m/s, positive downward.
    u_v_ols_m_s : float
        Naive uncertainty assuming independent residuals, m/s (for comparison only: it
        under-states the uncertainty when residuals are correlated).
    n_points : int
        Points in the fit.
    start_s, end_s : float
        First and last fitted time, s.
    t_ref_s : float
        Reference time of the fit (weighted mean time), s.
    z_ref_mm : float
        Fitted position at ``t_ref_s``, mm (trajectory units).
    residual_rms_mm : float
        Root-mean-square residual, mm.
    lag1_autocorrelation : float
        Lag-1 autocorrelation of the residuals (0 for independent noise).
    durbin_watson : float
        Durbin–Watson statistic Σ(e_i − e_{i−1})²/Σe_i² (≈ 2(1 − ρ₁); 2 for independent noise).
    effective_points : float
        n (u_ols / u_hac)²: the number of independent points the data are worth.
    hac_bandwidth : float
        Bartlett bandwidth used, points.
    residuals_mm : tuple of float
        Residual of each fitted point (in mask order), mm.
    method : str
        How the uncertainty was obtained.
    warnings : list of str
        Validity notes (few points, strong correlation, …).
    """

    v_m_s: float
    u_v_m_s: float
    direction: str
    v_z_m_s: float
    u_v_ols_m_s: float
    n_points: int
    start_s: float
    end_s: float
    t_ref_s: float
    z_ref_mm: float
    residual_rms_mm: float
    lag1_autocorrelation: float
    durbin_watson: float
    effective_points: float
    hac_bandwidth: float
    residuals_mm: tuple[float, ...]
    method: str
    warnings: list[str] = field(default_factory=list)


def fit_terminal_velocity(
    t_s: ArrayLike | pd.DataFrame,
    z_mm: ArrayLike | None = None,
    mask: ArrayLike | None = None,
    z_u_mm: ArrayLike | None = None,
) -> TerminalFit:
    """Fit the terminal velocity over the plateau with a correlation-robust uncertainty.

    Parameters
    ----------
    t_s : array_like of shape (n,) or pandas.DataFrame
        Times, s (or a one-track trajectory DataFrame, then omit ``z_mm``).
    z_mm : array_like of shape (n,), optional
        Positions along the fall axis, mm, positive downward.
    mask : array_like of bool, shape (n,), optional
        Points to fit (typically ``Plateau.mask``); default all. At least 4 points.
    z_u_mm : array_like of shape (n,), optional
        Position standard uncertainties, mm; weights 1/u² when given.

    Returns
    -------
    TerminalFit
        Speed and its HAC standard uncertainty in m/s (this is the mm → m boundary).

    Raises
    ------
    ValueError
        Bad input (see :func:`trajectory_arrays`) or fewer than 4 points in ``mask``.
    """
    t, z, zu = trajectory_arrays(t_s, z_mm, z_u_mm)
    m = _mask_array(mask, t.size)
    if int(m.sum()) < _MIN_FIT_POINTS:
        raise ValueError(f"mask selects {int(m.sum())} points; a terminal-velocity fit needs at least {_MIN_FIT_POINTS}")
    fit = fit_line(t[m], z[m], None if zu is None else zu[m])
    e = fit.residuals_mm
    n = e.size
    ss = float(e @ e)
    lag1 = float(e[1:] @ e[:-1]) / ss if ss > 0 else 0.0
    dw = float(np.sum(np.diff(e) ** 2)) / ss if ss > 0 else 2.0
    u_hac = float(np.sqrt(fit.cov_hac[1, 1]))
    u_ols = float(np.sqrt(fit.cov_ols[1, 1]))
    eff = float(n * (u_ols / u_hac) ** 2) if u_hac > 0 else float(n)
    warnings: list[str] = []
    if n < _FEW_POINTS_WARN:
        warnings.append(
            f"only {n} points on the plateau: the correlation-robust uncertainty is itself uncertain"
        )
    if eff < 10:
        warnings.append(
            f"residuals strongly correlated (lag-1 autocorrelation {lag1:.2f}): the {n} points are "
            f"worth about {eff:.0f} independent ones"
        )
    v_z = fit.slope_mm_s / MM_PER_M
    return TerminalFit(
        v_m_s=abs(v_z),
        u_v_m_s=u_hac / MM_PER_M,
        direction="down" if v_z >= 0 else "up",
        v_z_m_s=v_z,
        u_v_ols_m_s=u_ols / MM_PER_M,
        n_points=n,
        start_s=float(t[m][0]),
        end_s=float(t[m][-1]),
        t_ref_s=fit.t_ref_s,
        z_ref_mm=fit.z_ref_mm,
        residual_rms_mm=float(np.sqrt(ss / n)),
        lag1_autocorrelation=lag1,
        durbin_watson=dw,
        effective_points=eff,
        hac_bandwidth=fit.hac_bandwidth,
        residuals_mm=tuple(float(v) for v in e),
        method=(
            "least-squares line; HAC standard uncertainty: VAR(1)-prewhitened Newey-West, "
            "Bartlett kernel, Andrews (1991) AR(1) plug-in bandwidth"
        ),
        warnings=warnings,
    )


# ----------------------------------------------------------------------------- local velocity


def sliding_line_weights(t_s: ArrayLike, window: int) -> tuple[NDArray[np.intp], NDArray[np.float64]]:
    """Least-squares slope weights of a centred sliding window for every point.

    The slope at point j is ``sum(weights[j] * z[index[j]])``. At the ends the window is shifted
    inward so that every point gets a full window.

    Parameters
    ----------
    t_s : array_like of shape (n,)
        Times, s, strictly increasing, n ≥ ``window``.
    window : int
        Odd number of points per window, ≥ 3.

    Returns
    -------
    index : ndarray of int, shape (n, window)
        Indices of the points in each window.
    weights : ndarray of shape (n, window)
        Slope weights, 1/s.
    """
    t = np.asarray(t_s, dtype=float)
    n = t.size
    if not isinstance(window, (int, np.integer)) or window < 3 or window % 2 == 0:
        raise ValueError(f"window must be an odd integer ≥ 3 points (got {window!r})")
    if n < window:
        raise ValueError(f"window = {window} points exceeds the {n} points of the trajectory")
    half = window // 2
    first = np.clip(np.arange(n) - half, 0, n - window)
    index = first[:, None] + np.arange(window)[None, :]
    tw = t[index]
    dt = tw - tw.mean(axis=1, keepdims=True)
    weights = dt / np.sum(dt**2, axis=1, keepdims=True)
    return index, weights


def local_velocity(t_s: ArrayLike, z_mm: ArrayLike, window: int = 9) -> NDArray[np.float64]:
    """Local velocity (the trajectory's ``v_mm_s`` column) from a sliding straight-line fit.

    Parameters
    ----------
    t_s : array_like of shape (n,)
        Times, s, strictly increasing.
    z_mm : array_like of shape (n,)
        Positions, mm, positive downward.
    window : int, default 9
        Odd number of points per centred window (shifted inward at the ends). A fit over a window
        instead of frame-to-frame differences keeps the noise down (user-needs.md §2.7).

    Returns
    -------
    ndarray of shape (n,)
        Velocity along z, mm/s, positive downward.
    """
    t, z, _ = trajectory_arrays(t_s, z_mm)
    index, weights = sliding_line_weights(t, window)
    return np.sum(weights * z[index], axis=1)
