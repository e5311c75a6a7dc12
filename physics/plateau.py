"""Plateau: the stretch of a trajectory over which the speed is constant within its noise.

The plateau is found from the data alone; no "five time constants" rule is used, because with the
history force the approach is algebraic, not exponential (physics-references.md §5).

**Criterion** (with significance level α, default 0.01, c = z₁₋α/₂ = 2.576):

1. Points inside the exclusion zones (entry splash, within about one tube diameter of the bottom
   or the surface, §3: given as z positions) and wild outliers are set aside. An outlier is a
   point that both one-sided predictions — robust quadratics (Tukey bisquare) through the 6
   points before it and the 6 after it — miss by more than 6 robust standard deviations
   (1.4826 × MAD of each side's residuals), in two passes (the first pass's candidates are left
   out of the neighbourhoods of the second). Asking both sides keeps the kink at a sudden release
   from being flagged.
2. Local velocity v_j: least-squares slope in a centred window of m points around every point
   (m odd, ≈ n/15, 7 … 41). Relative deficit d_j = (v_p − v_j)/v_p along the direction of motion
   (positive: slower than the plateau speed v_p).
3. Its standard error s_j comes from an AR(1) model of the position noise (σ̂, ρ̂ bias-corrected)
   fitted to the residuals of the straight-line fit over the current plateau, plus the
   uncertainty of v_p. The **detectable deficit** δ* = c · s / v_p (reported) is the smallest
   speed difference a single window resolves.
4. The approach to terminal speed is monotone, so the deficits before the plateau's middle are
   replaced by their weighted isotonic regressions (non-increasing for a ball that starts slow,
   non-decreasing for one pushed in faster), and those after it, in reverse time, likewise (slowing
   down at the bottom). The plateau starts after the last point whose monotone deficit exceeds
   c·s_j in magnitude and ends before the first such point at the far end.
5. Steps 2–4 repeat with the new plateau (v_p and noise re-estimated) until it no longer changes.
6. Global check: a quadratic fitted over the whole plateau must have a curvature within c HAC
   standard errors of zero (:func:`physics.terminal.hac_covariance`); otherwise the plateau is
   trimmed by half a window at the side that deviates more, and checked again. When the plateau
   ends before the record does, the speed of the remaining points (at least one window) is
   compared with the plateau speed (AR(1) standard errors): still rising beyond the record-wide
   level (Bonferroni over the n/m windows scanned, α/(2n/m)) means no plateau ("still accelerating
   when it left the view"), falling beyond c keeps the trimmed end with a warning (bottom effect),
   anything else restores the end.
7. Remnant of the approach. A deficit just below the detection level still biases a straight-line
   fit over a long plateau by about its own standard uncertainty, because the first points have
   the largest leverage. So, when an approach was seen (step 4 moved the start), z(t) from the
   motion onset to the plateau end is fitted by a + b t + B exp(−(t − t₀)/λ), and the start moves
   to the earliest point s' from which that fitted remnant shifts the slope over [s', end] by at
   most κ = 0.1 of its standard error (AR(1) model). The exponential remnant is exact for an
   exponential approach and a local approximation otherwise (an algebraic Basset tail decays more
   slowly; step 6 and the transient fit guard that case).

The plateau is found when it keeps at least three windows (3m points, ≥ 21) and passes step 6.
"No plateau" is a result with a reason, not an exception. The **settling time** is then
start − onset: the time the ball needed until neither a window test (step 4) nor the remnant
criterion (step 7) could tell its speed from the terminal speed.

The onset is the point from which every 7-point window up to the plateau shows a speed beyond c
standard errors; when the ball already moves at the first point the settling time is a lower
bound and flagged as such.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import isotonic_regression
from scipy.special import ndtri  # standard normal quantile (scipy.stats.norm.ppf)

from physics._results import ResultDict
from physics.terminal import fit_line, hac_covariance, sliding_line_weights, trajectory_arrays

__all__ = ["Plateau", "find_plateau"]

_OUTLIER_HALF = 6  # neighbours in each one-sided robust quadratic
_OUTLIER_K = 6.0  # outlier threshold in robust standard deviations of a one-sided prediction
_BISQUARE_C = 4.685  # Tukey bisquare tuning constant (95 % efficiency under Gaussian noise)
_MAD_TO_SD = 1.4826  # MAD → standard deviation for Gaussian noise
_MIN_WINDOW, _MAX_WINDOW = 7, 41
_WINDOWS_PER_RECORD = 15
_MIN_WINDOWS_IN_PLATEAU = 3
_MAX_ITER = 10
_MIN_PLATEAU_POINTS = 21
_FLOOR_REL = 1e-9
_REMNANT_KAPPA = 0.1  # the approach's remnant may bias the plateau speed by at most κ u_v
_LAMBDA_GRID = 120  # log-spaced decay times tried for the remnant
_ACCELERATING = "still accelerating when it left the view: the speed keeps rising to the end of the usable record"


@dataclass(frozen=True, eq=False)
class Plateau(ResultDict):
    """Where the speed is constant within its noise.

    Attributes
    ----------
    found : bool
        Whether a plateau passing the criterion exists.
    reason : str
        Why not, when ``found`` is False (empty otherwise).
    start_s, end_s : float or None
        First and last plateau time, s.
    start_mm, end_mm : float or None
        Positions at those times, mm.
    mask : ndarray of bool, shape (n,)
        Plateau points (outliers excluded), aligned with the input.
    outlier_mask : ndarray of bool, shape (n,)
        Points flagged as wild outliers.
    excluded_mask : ndarray of bool, shape (n,)
        Points inside the exclusion zones.
    direction : str or None
        ``"down"`` or ``"up"``; None when the ball does not move.
    n_points : int
        Points in the plateau.
    plateau_speed_mm_s : float or None
        Speed of the straight line over the plateau, mm/s (a first look; the reported terminal
        velocity comes from :func:`physics.terminal.fit_terminal_velocity`).
    motion_start_s : float or None
        First time the ball is seen moving, s.
    settling_time_s : float or None
        ``start_s − motion_start_s``, s.
    settling_distance_mm : float or None
        Distance travelled in that time, mm.
    settling_is_lower_bound : bool
        True when the ball already moved at the first usable point.
    detectable_deficit : float or None
        δ* = c·s/v_p: smallest relative speed deficit one window resolves.
    remaining_deficit : float or None
        Relative speed deficit of the approach's fitted remnant at ``start_s`` (step 7); None
        when no approach was seen.
    approach_time_constant_s : float or None
        Decay time λ of the fitted remnant, s (an effective time constant, not τ of §5).
    window_points : int
        m, points per local-velocity window.
    alpha : float
        Significance level of the tests.
    curvature_z : float or None
        Curvature of z(t) over the plateau in HAC standard errors (|·| ≤ c when found).
    noise_mm : float or None
        Marginal standard deviation of the position noise (AR(1) model), mm.
    noise_lag1 : float or None
        Lag-1 correlation of the position noise (bias-corrected).
    criterion : str
        The statistical criterion, in words.
    warnings : list of str
        Notes (many outliers, few points, …).
    """

    found: bool
    reason: str
    start_s: float | None
    end_s: float | None
    start_mm: float | None
    end_mm: float | None
    mask: NDArray[np.bool_]
    outlier_mask: NDArray[np.bool_]
    excluded_mask: NDArray[np.bool_]
    direction: str | None
    n_points: int
    plateau_speed_mm_s: float | None
    motion_start_s: float | None
    settling_time_s: float | None
    settling_distance_mm: float | None
    settling_is_lower_bound: bool
    detectable_deficit: float | None
    remaining_deficit: float | None
    approach_time_constant_s: float | None
    window_points: int
    alpha: float
    curvature_z: float | None
    noise_mm: float | None
    noise_lag1: float | None
    criterion: str
    warnings: list[str] = field(default_factory=list)


def _criterion(alpha: float, m: int) -> str:
    c = ndtri(1 - alpha / 2)
    return (
        f"local speed in {m}-point windows within {c:.3g} standard errors (AR(1) noise model) of the "
        f"plateau speed after monotone (isotonic) smoothing of the deficits, and curvature of z(t) over "
        f"the plateau within {c:.3g} HAC standard errors of zero (alpha = {alpha:g})"
    )


# ----------------------------------------------------------------------------- outliers


def _one_sided_residual(
    t_ref: NDArray[np.float64], z_ref: NDArray[np.float64], t_q: NDArray[np.float64], z_q: NDArray[np.float64],
    side: int,
) -> NDArray[np.float64]:
    """Residual of each query point from a robust quadratic through the h reference points
    strictly before it (side −1) or after it (side +1); NaN where that side has fewer than h."""
    h, n = _OUTLIER_HALF, t_ref.size
    if side < 0:
        pos = np.searchsorted(t_ref, t_q, side="left")
        nb, valid = pos[:, None] - np.arange(1, h + 1)[None, :], pos - h >= 0
    else:
        pos = np.searchsorted(t_ref, t_q, side="right")
        nb, valid = pos[:, None] + np.arange(h)[None, :], pos + h - 1 <= n - 1
    nb = np.clip(nb, 0, n - 1)
    scale = float(np.median(np.diff(t_ref))) * h
    u = (t_ref[nb] - t_q[:, None]) / scale
    y = z_ref[nb]
    w = np.ones_like(u)
    powers = [np.ones_like(u), u, u**2, u**3, u**4]
    for _ in range(5):
        mom = [np.sum(w * p, axis=1) for p in powers]
        a = np.stack([np.stack(mom[i : i + 3], axis=-1) for i in range(3)], axis=-2)
        rhs = np.stack([np.sum(w * powers[i] * y, axis=1) for i in range(3)], axis=-1)
        beta = np.linalg.solve(a + 1e-9 * np.eye(3), rhs[..., None])[..., 0]
        r = y - (beta[:, :1] + beta[:, 1:2] * u + beta[:, 2:3] * u**2)
        sd = _MAD_TO_SD * np.median(np.abs(r), axis=1, keepdims=True)
        sd = np.where(sd > 0, sd, np.max(sd) if np.max(sd) > 0 else 1.0)
        q = np.clip(r / (_BISQUARE_C * sd), -1.0, 1.0)
        w = (1.0 - q**2) ** 2
    return np.where(valid, z_q - beta[:, 0], np.nan)


def _missed_by_both_sides(
    t_ref: NDArray[np.float64], z_ref: NDArray[np.float64], t: NDArray[np.float64], z: NDArray[np.float64]
) -> NDArray[np.bool_]:
    misses = []
    for side in (-1, 1):
        r = _one_sided_residual(t_ref, z_ref, t, z, side)
        ok = np.isfinite(r)
        centre = np.median(r[ok])
        spread = _MAD_TO_SD * np.median(np.abs(r[ok] - centre))
        miss = np.abs(r - centre) > _OUTLIER_K * spread if spread > 0 else np.abs(r - centre) > 0
        misses.append(np.where(ok, miss, True))  # a missing side defers to the other one
    return misses[0] & misses[1]


def _outliers(t: NDArray[np.float64], z: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Wild points: missed by more than 6 robust SDs by both one-sided robust predictions.

    Two passes: the candidates of the first are left out of the neighbourhoods of the second,
    so that a wild point does not drag its neighbours' predictions along.
    """
    if t.size < 2 * _OUTLIER_HALF + 2:
        return np.zeros(t.size, dtype=bool)
    candidates = _missed_by_both_sides(t, z, t, z)
    keep = ~candidates
    if not candidates.any() or keep.sum() < 2 * _OUTLIER_HALF + 2:
        return candidates
    return _missed_by_both_sides(t[keep], z[keep], t, z)


# ----------------------------------------------------------------------------- noise model


def _noise_floor(z: NDArray[np.float64]) -> float:
    """Smallest noise SD taken seriously, mm: 1e-9 of the travel, far below any tracking noise
    (~1e-3 mm) and far above double-precision rounding, so exact synthetic lines stay lines."""
    return _FLOOR_REL * max(float(np.ptp(z)), 1.0)


def _ar1_model(resid: NDArray[np.float64], floor: float, n_params: int = 2) -> tuple[float, float]:
    """Marginal SD (at least ``floor``) and bias-corrected lag-1 correlation of residuals."""
    n = resid.size
    ss = float(resid @ resid)
    sigma = max(float(np.sqrt(ss / max(n - n_params, 1))), floor)
    if ss == 0 or n < 4:
        return sigma, 0.0
    rho = float(resid[1:] @ resid[:-1]) / ss
    rho = min(rho + (n_params + (n_params + 2) * rho) / n, 0.97)
    return sigma, max(rho, -0.97)


def _weight_products(weights: NDArray[np.float64]) -> NDArray[np.float64]:
    """c[j, k] = Σ_i w_ji w_j(i+k) (k ≥ 1 doubled): window-slope variance is σ² Σ_k c[j, k] ρ^k."""
    n, m = weights.shape
    out = np.empty((n, m))
    out[:, 0] = np.sum(weights**2, axis=1)
    for k in range(1, m):
        out[:, k] = 2.0 * np.sum(weights[:, k:] * weights[:, :-k], axis=1)
    return out


def _window_se(products: NDArray[np.float64], sigma: float, rho: float) -> NDArray[np.float64]:
    """Standard error of every window slope under AR(1) noise (lags counted in points), mm/s."""
    powers = rho ** np.arange(products.shape[1])
    return sigma * np.sqrt(np.maximum(products @ powers, 0.0))


# ----------------------------------------------------------------------------- steps


def _monotone_flags(d: NDArray[np.float64], se: NDArray[np.float64], c: float) -> NDArray[np.bool_]:
    """Flags of a deficit sequence that relaxes monotonically towards 0 (in sequence order)."""
    weights = 1.0 / se**2
    slow = isotonic_regression(d, weights=weights, increasing=False).x
    fast = isotonic_regression(d, weights=weights, increasing=True).x
    return (slow > c * se) | (fast < -c * se)


def _curvature_z(t: NDArray[np.float64], z: NDArray[np.float64]) -> float:
    """Curvature coefficient of a quadratic fit to z(t) in HAC standard errors."""
    dt = (t - t.mean()) / (t[-1] - t[0])
    x = np.column_stack([np.ones_like(dt), dt, dt**2])
    bread = np.linalg.pinv(x.T @ x)
    beta = bread @ (x.T @ z)
    cov, _ = hac_covariance(x, z - x @ beta, bread)
    var = max(cov[2, 2], _noise_floor(z) ** 2 * bread[2, 2])
    return float(beta[2] / np.sqrt(var))


@dataclass
class _State:
    s: int
    e: int
    v_p: float = 0.0
    sigma: float = 0.0
    rho: float = 0.0
    se_rel: NDArray[np.float64] = field(default_factory=lambda: np.ones(0))
    deficit: NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))


def _detect(
    t: NDArray[np.float64], z: NDArray[np.float64], v_loc: NDArray[np.float64],
    products: NDArray[np.float64], c: float, min_points: int,
) -> _State:
    """Steps 2–5: iterate local deficits, noise model and monotone flags until stable."""
    n = t.size
    st = _State(s=max(0, min(n // 2, n - min_points)), e=n - 1)  # start from the later half
    seen: set[tuple[int, int]] = set()
    for _ in range(_MAX_ITER):
        seen.add((st.s, st.e))
        if st.e - st.s + 1 < min_points:
            break
        line = fit_line(t[st.s : st.e + 1], z[st.s : st.e + 1])
        if line.slope_mm_s == 0:
            break
        st.v_p = line.slope_mm_s
        st.sigma, st.rho = _ar1_model(line.residuals_mm, _noise_floor(z))
        se = np.sqrt(_window_se(products, st.sigma, st.rho) ** 2 + line.cov_hac[1, 1])
        st.se_rel = se / abs(st.v_p)
        st.deficit = (st.v_p - v_loc) / st.v_p  # positive: slower than the plateau, either direction
        pivot = (st.s + st.e) // 2
        head = _monotone_flags(st.deficit[: pivot + 1], st.se_rel[: pivot + 1], c)
        tail = _monotone_flags(st.deficit[pivot:][::-1], st.se_rel[pivot:][::-1], c)[::-1]
        s = int(np.flatnonzero(head)[-1]) + 1 if head.any() else 0
        e = pivot + int(np.flatnonzero(tail)[0]) - 1 if tail.any() else n - 1
        st.s, st.e = s, e
        if (s, e) in seen:
            break
    return st


def _trim_curvature(
    t: NDArray[np.float64], z: NDArray[np.float64], st: _State, c: float, min_points: int, step: int
) -> float | None:
    """Step 6: trim the side that deviates more until the plateau has no significant curvature."""
    curv = None
    sign = 1.0 if st.v_p > 0 else -1.0
    while st.e - st.s + 1 >= min_points:
        curv = _curvature_z(t[st.s : st.e + 1], z[st.s : st.e + 1])
        if abs(curv) <= c:
            break
        speeding = curv * sign > 0  # speed rising over the stretch: slow start or fast end
        head = st.deficit[st.s] / st.se_rel[st.s]
        tail = st.deficit[st.e] / st.se_rel[st.e]
        if (head if speeding else -head) >= (-tail if speeding else tail):
            st.s += step
        else:
            st.e -= step
    return curv


def _slope_variance(t: NDArray[np.float64], sigma: float, rho: float) -> float:
    """Variance of a least-squares slope over times ``t`` under AR(1) noise (σ, ρ), mm²/s²."""
    tc = t - t.mean()
    w = tc / float(tc @ tc)
    var = float(w @ w)
    lags = min(w.size - 1, int(np.ceil(np.log(1e-6) / np.log(abs(rho)))) if 0 < abs(rho) < 1 else 0)
    for lag in range(1, lags + 1):
        var += 2.0 * rho**lag * float(w[lag:] @ w[:-lag])
    return sigma**2 * var


def _speed_change_z(t: NDArray[np.float64], z: NDArray[np.float64], st: _State, m: int) -> float:
    """Speed after the plateau minus the plateau speed, along the motion, in standard errors.

    The points after the plateau end (at least one window, reaching back into the plateau when
    fewer remain) are fitted by a line; its difference from the plateau line's slope is divided
    by the AR(1)-model standard errors of both (a curvature test over the whole record would lose
    its power to the misfit's own autocorrelation).
    """
    after = max(st.e + 1, t.size - m)
    plateau_line = fit_line(t[st.s : after], z[st.s : after])
    tail_line = fit_line(t[after:], z[after:]) if t.size - after >= 3 else plateau_line
    var = _slope_variance(t[after:], st.sigma, st.rho) + _slope_variance(t[st.s : after], st.sigma, st.rho)
    sign = 1.0 if st.v_p > 0 else -1.0
    return sign * (tail_line.slope_mm_s - plateau_line.slope_mm_s) / math.sqrt(var) if var > 0 else 0.0


def _remnant_start(
    t: NDArray[np.float64], z: NDArray[np.float64], s: int, e: int, first: int, min_points: int,
    sigma: float, rho: float,
) -> tuple[int, float | None, float | None]:
    """Step 7: start where the remnant of the approach biases the speed by < κ u_v.

    z(t) on [first, e] is fitted by a + b t + B exp(−(t − t_first)/λ) (λ on a log grid refined by
    parabolic interpolation; a, b, B linear). The remnant B exp(…) is projected on the straight-line
    slope over [s', e] for every candidate start s' and compared with κ times the AR(1) standard
    error of that slope. Returns the new start, λ (s) and the remnant's relative speed deficit there.
    """
    tt, zz = t[first : e + 1], z[first : e + 1]
    if s - first < 6:
        return s, None, None
    x0 = tt - tt[0]
    tc = tt - tt.mean()
    dt = float(np.median(np.diff(t)))
    grid = np.linspace(math.log(dt / 2.0), math.log(max(t[s] - t[first], 2.0 * dt)), _LAMBDA_GRID)

    def fit(ln_lams: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        ex = np.exp(-x0[None, :] / np.exp(ln_lams)[:, None])  # (g, n)
        g = ln_lams.size
        a = np.empty((g, 3, 3))
        a[:, 0, 0], a[:, 0, 1], a[:, 1, 1] = tt.size, 0.0, float(tc @ tc)
        a[:, 0, 2] = ex.sum(axis=1)
        a[:, 1, 2] = ex @ tc
        a[:, 2, 2] = np.sum(ex * ex, axis=1)
        a[:, 1, 0], a[:, 2, 0], a[:, 2, 1] = a[:, 0, 1], a[:, 0, 2], a[:, 1, 2]
        rhs = np.stack([np.full(g, zz.sum()), np.full(g, float(tc @ zz)), ex @ zz], axis=1)
        coef = np.linalg.solve(a + 1e-12 * np.eye(3), rhs[..., None])[..., 0]
        cost = float(zz @ zz) - np.sum(coef * rhs, axis=1)
        return cost, coef

    cost, _ = fit(grid)
    k = int(np.clip(np.argmin(cost), 1, grid.size - 2))
    c0, c1, c2 = cost[k - 1 : k + 2]
    curv = c0 - 2 * c1 + c2
    best = grid[k] + (0.5 * (c0 - c2) / curv * (grid[1] - grid[0]) if curv > 0 else 0.0)
    best = float(np.clip(best, grid[k - 1], grid[k + 1]))
    lam = math.exp(best)
    amp = float(fit(np.array([best]))[1][0, 2])
    remnant = amp * np.exp(-x0 / lam)
    # slope of the remnant over [s', e] for every s' (suffix sums, times centred on t[e])
    tr = tt - tt[-1]
    cnt = np.arange(tr.size, 0, -1, dtype=float)
    st_, stt = np.cumsum(tr[::-1])[::-1], np.cumsum((tr**2)[::-1])[::-1]
    sr, strr = np.cumsum(remnant[::-1])[::-1], np.cumsum((tr * remnant)[::-1])[::-1]
    den = cnt * stt - st_**2
    bias = (cnt * strr - st_ * sr) / np.where(den > 0, den, np.inf)
    u_v = math.sqrt(_slope_variance(t[s : e + 1], sigma, rho)) * ((e - s + 1) / cnt) ** 1.5
    last = tr.size - min_points
    bad = np.flatnonzero(np.abs(bias[: last + 1]) > _REMNANT_KAPPA * u_v[: last + 1])
    new_s = max(s, first + int(bad[-1]) + 1) if bad.size else s
    speed = abs(float(np.polyfit(tt[new_s - first :], zz[new_s - first :], 1)[0]))
    deficit = abs(amp) / lam * math.exp(-(t[new_s] - t[first]) / lam) / speed
    return new_s, lam, deficit


# ----------------------------------------------------------------------------- main


def find_plateau(
    t_s: ArrayLike | pd.DataFrame,
    z_mm: ArrayLike | None = None,
    z_u_mm: ArrayLike | None = None,
    *,
    exclude_top_mm: float | None = None,
    exclude_bottom_mm: float | None = None,
    alpha: float = 0.01,
    window: int | None = None,
) -> Plateau:
    """Find the stretch over which the sphere moves at constant speed within its noise.

    Parameters
    ----------
    t_s : array_like of shape (n,) or pandas.DataFrame
        Times, s, strictly increasing (or a one-track trajectory DataFrame; then omit ``z_mm``).
    z_mm : array_like of shape (n,), optional
        Positions along the fall axis, mm, positive downward (falling: increasing; rising:
        decreasing).
    z_u_mm : array_like of shape (n,), optional
        Per-point uncertainties, mm; only validated (the noise model is estimated from the
        residuals, which also see the frame-to-frame correlation the tracker cannot know).
    exclude_top_mm : float, optional
        Points with z < this (above it: entry splash, near the free surface) are set aside, mm.
    exclude_bottom_mm : float, optional
        Points with z > this (within about one tube diameter of the bottom, or the entry zone of
        a rising sphere) are set aside, mm.
    alpha : float, default 0.01
        Two-sided significance level of the tests (see the module notes for the criterion).
    window : int, optional
        Points per local-velocity window (odd, ≥ 7); default ≈ n/15 within 7 … 41.

    Returns
    -------
    Plateau
        ``found`` False with a ``reason`` when no stretch passes the criterion.
    """
    t, z, _ = trajectory_arrays(t_s, z_mm, z_u_mm)
    if not 0.0 < alpha < 0.5:
        raise ValueError(f"alpha = {alpha!r} must lie between 0 and 0.5 (a significance level)")
    if exclude_top_mm is not None and exclude_bottom_mm is not None and exclude_top_mm >= exclude_bottom_mm:
        raise ValueError(
            f"exclude_top_mm = {exclude_top_mm!r} must lie above (be smaller than) exclude_bottom_mm = "
            f"{exclude_bottom_mm!r}"
        )
    n_all = t.size
    c = float(ndtri(1 - alpha / 2))
    excluded = np.zeros(n_all, dtype=bool)
    if exclude_top_mm is not None:
        excluded |= z < exclude_top_mm
    if exclude_bottom_mm is not None:
        excluded |= z > exclude_bottom_mm
    usable = np.flatnonzero(~excluded)
    outlier = np.zeros(n_all, dtype=bool)
    outlier[usable] = _outliers(t[usable], z[usable])
    good = np.flatnonzero(~excluded & ~outlier)
    n = good.size
    if window is None:
        m = int(np.clip(n // _WINDOWS_PER_RECORD, _MIN_WINDOW, _MAX_WINDOW)) | 1
    else:
        if not isinstance(window, (int, np.integer)) or window < _MIN_WINDOW or window % 2 == 0:
            raise ValueError(f"window = {window!r} must be an odd integer ≥ {_MIN_WINDOW} (points)")
        m = int(window)
    min_points = max(_MIN_WINDOWS_IN_PLATEAU * m, _MIN_PLATEAU_POINTS)
    warnings: list[str] = []
    if outlier.any():
        warnings.append(f"{int(outlier.sum())} outlier(s) set aside")

    def result(found: bool, reason: str, **kw: Any) -> Plateau:
        base: dict[str, Any] = dict(
            start_s=None, end_s=None, start_mm=None, end_mm=None, mask=np.zeros(n_all, dtype=bool),
            direction=None, n_points=0, plateau_speed_mm_s=None, motion_start_s=None,
            settling_time_s=None, settling_distance_mm=None, settling_is_lower_bound=False,
            detectable_deficit=None, remaining_deficit=None, approach_time_constant_s=None,
            curvature_z=None, noise_mm=None, noise_lag1=None,
        )
        base.update(kw)
        return Plateau(found=found, reason=reason, outlier_mask=outlier, excluded_mask=excluded,
                       window_points=m, alpha=alpha, criterion=_criterion(alpha, m),
                       warnings=warnings, **base)

    if n < min_points + m:
        return result(False, f"too few usable points: {n} after exclusions and outliers, need more than {min_points + m}")
    tg, zg = t[good], z[good]
    if np.ptp(zg) == 0:
        return result(False, "the sphere does not move")
    index, weights = sliding_line_weights(tg, m)
    products = _weight_products(weights)
    v_loc = np.sum(weights * zg[index], axis=1)

    st = _detect(tg, zg, v_loc, products, c, min_points)
    if st.v_p == 0:
        return result(False, "the sphere does not move")
    sign = 1.0 if st.v_p > 0 else -1.0
    noise = dict(noise_mm=st.sigma, noise_lag1=st.rho, direction="down" if sign > 0 else "up")
    curv = _trim_curvature(tg, zg, st, c, min_points, max(m // 2, 1))
    if st.e - st.s + 1 < min_points or curv is None or abs(curv) > c:
        return result(False, _no_plateau_reason(tg, zg, m, c), curvature_z=curv, **noise)
    if st.e < n - 1:  # points after the plateau: a ball still speeding up there never reached it
        faster = _speed_change_z(tg, zg, st, m)
        # rejecting the whole plateau: Bonferroni over the n/m windows the end search scanned
        c_record = float(ndtri(1 - alpha / (2 * max(n / m, 1.0))))
        if faster > c_record:
            return result(False, _ACCELERATING, curvature_z=curv, **noise)
        if faster < -c:
            warnings.append(
                f"the speed drops after {tg[st.e]:.3g} s (z = {zg[st.e]:.4g} mm): bottom or wall effect? "
                "set exclude_bottom_mm (or exclude_top_mm for a rising sphere)"
            )
        else:
            st.e = n - 1  # the flags at the end were noise: the stretch to the end is consistent

    # first point seen moving: short-window speed beyond c standard errors in the direction of motion
    line = fit_line(tg[st.s : st.e + 1], zg[st.s : st.e + 1])
    sigma, rho = _ar1_model(line.residuals_mm, _noise_floor(zg))
    short_index, short_weights = sliding_line_weights(tg, _MIN_WINDOW)
    short_v = np.sum(short_weights * zg[short_index], axis=1)
    short_se = _window_se(_weight_products(short_weights), sigma, rho)
    still = np.flatnonzero(~(sign * short_v > c * short_se)[: st.s])
    onset = int(still[-1]) + 1 if still.size else 0  # moving from here on up to the plateau
    lower_bound = onset <= _MIN_WINDOW // 2
    if lower_bound:
        onset = 0
    first = 0 if lower_bound else min(onset + _MIN_WINDOW // 2, st.s)  # no resting point in the fit
    lam = remaining = None
    if st.s > first:  # an approach was seen: push the start past its remnant (step 7)
        st.s, lam, remaining = _remnant_start(tg, zg, st.s, st.e, first, min_points, sigma, rho)
        if st.e - st.s + 1 < min_points:  # the remnant fills the view: the approach never ended
            return result(False, _ACCELERATING, curvature_z=curv, **noise)
        curv = _curvature_z(tg[st.s : st.e + 1], zg[st.s : st.e + 1])
        line = fit_line(tg[st.s : st.e + 1], zg[st.s : st.e + 1])
        sigma, rho = _ar1_model(line.residuals_mm, _noise_floor(zg))
    mask = np.zeros(n_all, dtype=bool)
    mask[good[st.s : st.e + 1]] = True
    speed = abs(line.slope_mm_s)
    return result(
        True,
        "",
        start_s=float(tg[st.s]),
        end_s=float(tg[st.e]),
        start_mm=float(zg[st.s]),
        end_mm=float(zg[st.e]),
        mask=mask,
        n_points=st.e - st.s + 1,
        plateau_speed_mm_s=speed,
        motion_start_s=float(tg[onset]),
        settling_time_s=float(tg[st.s] - tg[onset]),
        settling_distance_mm=abs(float(zg[st.s] - zg[onset])),
        settling_is_lower_bound=lower_bound,
        detectable_deficit=c * float(np.median(_window_se(products, sigma, rho))) / speed,
        remaining_deficit=remaining,
        approach_time_constant_s=lam,
        curvature_z=curv,
        noise_mm=sigma,
        noise_lag1=rho,
        direction=noise["direction"],
    )


def _no_plateau_reason(t: NDArray[np.float64], z: NDArray[np.float64], m: int, c: float) -> str:
    """Explain a missing plateau from the trend of the speed over the last third of the record."""
    k = min(max(t.size // 3, 3 * m), t.size)
    tt, zz = t[-k:], z[-k:]
    line = fit_line(tt, zz)
    sign = 1.0 if line.slope_mm_s >= 0 else -1.0
    curv = _curvature_z(tt, zz)
    if curv * sign > c:
        return _ACCELERATING
    if curv * sign < -c:
        return "slowing down at the end of the usable record (bottom, wall or obstruction?): exclude that zone"
    return "the speed is not constant within its noise over any stretch of at least three windows"
