"""Approach to terminal velocity: equation of motion, its solution, and a fit to a trajectory.

Equation of motion of a sphere released from rest in quiescent liquid (Basset–Boussinesq–Oseen
form, physics-references.md §5; from memory: Basset 1888, Maxey & Riley 1983):

    (m_s + C_A m_f) dv/dt = (m_s − m_f) g − 6π μ a K_w v − 6 a² √(π ρ_f μ) ∫₀ᵗ (dv/ds) / √(t − s) ds

with C_A = 1/2 (added mass of a sphere), K_w = 1/f_w the wall drag multiplier (``wall_factor``
= f_w = v/v∞ ≤ 1) and the last term the Basset history force. Two models:

- ``history=False`` — the textbook exponential: v = v_t (1 − e^(−t/τ)), τ = (ρ_s + ρ_f/2) d² f_w /
  (18 μ), v_t = f_w v∞ (Stokes). Times to a fraction p: t_p = τ ln(1/(1 − p)) (6.91 τ for 0.1 %).
- ``history=True`` — the full equation. Its Laplace transform gives
  V(p) = (F/M) / [p (p + β√p + 1/τ)], β = 6π a² √(ρ_f μ)/M, M = m_s + m_f/2 (derived, §5). In
  dimensionless time θ = t/τ, with β̃ = β√τ and r₁, r₂ the roots of s² + β̃ s + 1 (s = √(pτ)),
  partial fractions in s invert it in closed form (derived here):
  v/v_t = 1 + [W(r₁, θ)/r₁ − W(r₂, θ)/r₂] / (r₁ − r₂),  W(r, θ) = e^(r²θ) erfc(−r√θ),
  evaluated with the Faddeeva function, and likewise the distance. The sheet's Laplace-inversion
  values (#22) are reproduced to 5 digits. The approach is algebraic,
  1 − v/v_t ≈ a f_w √(ρ_f/(π μ t)), so 0.1 % takes far longer than 6.9 τ: about
  a²ρ_f/(π μ (10⁻³)²) — minutes for a 2 mm ball in glycerol (§5: "do not trust t₉₉ = 4.6τ").

Limits (stated, not modelled): drag is Stokes drag (Re ≪ 1; a warning is returned above
Re = 0.1); the history force is that of *unbounded* liquid — in a tube the wall cuts the t^(−1/2)
tail off after roughly R²/ν and convective inertia after ν/v_t² (§5), so with ``history=True``
times and distances to a fraction are upper bounds for a real tube.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import brentq, least_squares
from scipy.special import wofz

from physics._results import ResultDict
from physics.drag import STOKES_RE_MAX, require_positive
from physics.terminal import MM_PER_M, fit_line, hac_covariance, trajectory_arrays
from physics.viscosity import reynolds_number, stokes_terminal_velocity

__all__ = [
    "ADDED_MASS_COEFFICIENT",
    "TransientModel",
    "TransientFit",
    "transient_model",
    "time_to_fraction",
    "distance_to_fraction",
    "basset_tail_deficit",
    "fit_transient",
]

ADDED_MASS_COEFFICIENT = 0.5  # C_A of a sphere (from memory: any hydrodynamics text, e.g. Lamb)
_DEGENERATE_DISC = 1e-6  # |β̃² − 4| below this: double root, evaluated by symmetric offsets
_DEGENERATE_STEP = 1e-3  # relative offset of β̃ used there (error O(step²) = 1e-6)
#: Release times tried on a grid across the record (as fractions −0.5 … 0.5 of its span) and how
#: many of the best of them are refined by least squares.
_RELEASE_GRID = 11
_REFINED_STARTS = 3
# Earliest release time allowed, in spans of the fitted points before the first one.
_RELEASE_BOUND_SPANS = 1.0
_LABEL = "transient estimate"


def _dimensionless_ratio(theta: NDArray[np.float64], beta: float) -> NDArray[np.float64]:
    """v/v_t at dimensionless times θ = t/τ ≥ 0 for history coefficient β̃ = β√τ > 0."""
    if abs(beta**2 - 4.0) < _DEGENERATE_DISC:
        h = _DEGENERATE_STEP * beta
        return 0.5 * (_dimensionless_ratio(theta, beta + h) + _dimensionless_ratio(theta, beta - h))
    disc = np.sqrt(complex(beta**2 - 4.0))
    r1, r2 = (-beta + disc) / 2.0, (-beta - disc) / 2.0
    sq = np.sqrt(theta)
    w1, w2 = wofz(-1j * r1 * sq), wofz(-1j * r2 * sq)
    return np.real(1.0 + (w1 / r1 - w2 / r2) / (r1 - r2))


def _dimensionless_distance(theta: NDArray[np.float64], beta: float) -> NDArray[np.float64]:
    """z/(v_t τ) at dimensionless times θ ≥ 0 for history coefficient β̃ > 0."""
    if abs(beta**2 - 4.0) < _DEGENERATE_DISC:
        h = _DEGENERATE_STEP * beta
        return 0.5 * (_dimensionless_distance(theta, beta + h) + _dimensionless_distance(theta, beta - h))
    disc = np.sqrt(complex(beta**2 - 4.0))
    r1, r2 = (-beta + disc) / 2.0, (-beta - disc) / 2.0
    sq = np.sqrt(theta)
    c = 2.0 * sq / math.sqrt(math.pi)

    def g4(r: complex) -> NDArray[np.complex128]:
        # inverse Laplace transform of 1/(s⁴ (s − r)), s = √p (derived by partial fractions)
        return wofz(-1j * r * sq) / r**3 - (1.0 / r**3 + c / r**2 + theta / r)

    return np.real((g4(r1) - g4(r2)) / (r1 - r2))


@dataclass(frozen=True)
class TransientModel(ResultDict):
    """Solution of the equation of motion for a sphere released from rest.

    Build it with :func:`transient_model`. Times are counted from the release.

    Attributes
    ----------
    d_m : float
        Ball diameter, m.
    rho_s_kg_m3, rho_f_kg_m3 : float
        Ball and liquid density, kg/m³.
    mu_pa_s : float
        Liquid viscosity, Pa·s.
    g_m_s2 : float
        Gravitational acceleration, m/s².
    wall_factor : float
        f_w = v/v∞ of the steady drag (1 in unbounded liquid).
    history : bool
        Whether the Basset history force is included.
    tau_s : float
        Time constant τ = (ρ_s + C_A ρ_f) d² f_w / (18 μ), s.
    v_terminal_m_s : float
        Terminal speed f_w · v∞(Stokes), m/s, positive.
    direction : str
        ``"down"`` when ρ_s > ρ_f, ``"up"`` otherwise.
    beta_tilde : float
        Dimensionless history coefficient β√τ = √(4.5 ρ_f f_w / (ρ_s + ρ_f/2)) (0 without history).
    model : str
        Human-readable model name (say which model a distance comes from).
    """

    d_m: float
    rho_s_kg_m3: float
    rho_f_kg_m3: float
    mu_pa_s: float
    g_m_s2: float
    wall_factor: float
    history: bool
    tau_s: float
    v_terminal_m_s: float
    direction: str
    beta_tilde: float
    model: str

    def velocity_ratio(self, t_s: ArrayLike) -> NDArray[np.float64]:
        """v/v_t at times ``t_s`` since release (array of shape (n,), s; 0 before release)."""
        theta = np.maximum(np.asarray(t_s, dtype=float), 0.0) / self.tau_s
        if not self.history:
            return -np.expm1(-theta)
        return _dimensionless_ratio(theta, self.beta_tilde)

    def speed_m_s(self, t_s: ArrayLike) -> NDArray[np.float64]:
        """Speed (positive) at times ``t_s`` since release, shape (n,), m/s."""
        return self.v_terminal_m_s * self.velocity_ratio(t_s)

    def distance_m(self, t_s: ArrayLike) -> NDArray[np.float64]:
        """Distance travelled (positive) since release at times ``t_s`` (shape (n,), s), m."""
        theta = np.maximum(np.asarray(t_s, dtype=float), 0.0) / self.tau_s
        if not self.history:
            scaled = theta + np.expm1(-theta)
        else:
            scaled = _dimensionless_distance(theta, self.beta_tilde)
        return self.v_terminal_m_s * self.tau_s * scaled

    def time_to_fraction(self, p: float) -> float:
        """Time from release until the speed reaches the fraction ``p`` of v_t (0 < p < 1), s."""
        if not (0.0 < p < 1.0):
            raise ValueError(f"p = {p!r} must lie strictly between 0 and 1 (a fraction of terminal speed)")
        if not self.history:
            return self.tau_s * math.log(1.0 / (1.0 - p))
        # bracket from the exponential time (a lower bound) and the algebraic tail (near the root)
        lo = math.log(1.0 / (1.0 - p))
        hi = max(2.0 * lo, 2.0 * (self.beta_tilde / ((1.0 - p) * math.sqrt(math.pi))) ** 2)

        def gap(theta: float) -> float:
            return float(_dimensionless_ratio(np.array([theta]), self.beta_tilde)[0]) - p

        while gap(lo) > 0:
            lo /= 2.0
        while gap(hi) < 0:
            hi *= 2.0
        return self.tau_s * brentq(gap, lo, hi, xtol=1e-12 * hi, rtol=1e-12)

    def distance_to_fraction(self, p: float) -> float:
        """Distance from release until the speed reaches the fraction ``p`` of v_t, m."""
        return float(self.distance_m(np.array([self.time_to_fraction(p)]))[0])


def transient_model(
    *,
    d_m: float,
    rho_s_kg_m3: float,
    rho_f_kg_m3: float,
    mu_pa_s: float,
    g_m_s2: float,
    wall_factor: float = 1.0,
    history: bool = True,
) -> TransientModel:
    """Build the approach model for a sphere released from rest.

    Parameters
    ----------
    d_m : float
        Ball diameter, m.
    rho_s_kg_m3, rho_f_kg_m3 : float
        Ball and liquid density, kg/m³ (ρ_s < ρ_f: a rising sphere).
    mu_pa_s : float
        Viscosity, Pa·s.
    g_m_s2 : float
        Gravitational acceleration, m/s².
    wall_factor : float, default 1.0
        f_w = v/v∞ (0 < f_w ≤ 1), applied to the steady (Stokes) drag only.
    history : bool, default True
        Include the Basset history force (unbounded liquid).

    Returns
    -------
    TransientModel
    """
    d = require_positive("d_m", d_m, "a ball diameter in metres > 0")
    rho_s = require_positive("rho_s_kg_m3", rho_s_kg_m3, "a ball density in kg/m³ > 0")
    rho_f = require_positive("rho_f_kg_m3", rho_f_kg_m3, "a liquid density in kg/m³ > 0")
    mu = require_positive("mu_pa_s", mu_pa_s, "a viscosity in Pa·s > 0")
    g = require_positive("g_m_s2", g_m_s2, "a gravitational acceleration in m/s² > 0")
    f_w = require_positive("wall_factor", wall_factor, "a wall factor v/v∞ in (0, 1]")
    if f_w > 1.0:
        raise ValueError(f"wall_factor = {wall_factor!r} is not allowed; expected a wall factor v/v∞ in (0, 1]")
    v_t = f_w * stokes_terminal_velocity(mu, d, rho_s, rho_f, g)
    tau = (rho_s + ADDED_MASS_COEFFICIENT * rho_f) * d**2 * f_w / (18.0 * mu)
    # β√τ = 6πa²√(ρ_f μ)/M · √τ, simplified: √(4.5 ρ_f f_w / (ρ_s + ρ_f/2)) for C_A = 1/2
    beta_t = math.sqrt(4.5 * rho_f * f_w / (rho_s + ADDED_MASS_COEFFICIENT * rho_f)) if history else 0.0
    model = (
        "Basset-Boussinesq-Oseen with history force (unbounded liquid), Stokes drag, added mass 1/2"
        if history
        else "exponential approach (no history force), Stokes drag, added mass 1/2"
    )
    if f_w < 1.0:
        model += f", wall factor {f_w:.4g} on the steady drag"
    return TransientModel(
        d_m=d,
        rho_s_kg_m3=rho_s,
        rho_f_kg_m3=rho_f,
        mu_pa_s=mu,
        g_m_s2=g,
        wall_factor=f_w,
        history=bool(history),
        tau_s=tau,
        v_terminal_m_s=v_t,
        direction="down" if rho_s > rho_f else "up",
        beta_tilde=beta_t,
        model=model,
    )


def time_to_fraction(p: float, **model: Any) -> float:
    """Time from release to reach the fraction ``p`` of terminal speed, s.

    Parameters
    ----------
    p : float
        Fraction of v_t, 0 < p < 1 (0.999 for "within 0.1 %").
    **model
        Keyword arguments of :func:`transient_model` (``d_m``, ``rho_s_kg_m3``, ``rho_f_kg_m3``,
        ``mu_pa_s``, ``g_m_s2``, ``wall_factor``, ``history``).

    Returns
    -------
    float
        Seconds. With ``history=False`` this is τ ln(1/(1 − p)); with ``history=True`` (the
        default) it follows the algebraic Basset tail and is far longer (an upper bound in a
        tube, see the module notes).
    """
    return transient_model(**model).time_to_fraction(p)


def distance_to_fraction(p: float, **model: Any) -> float:
    """Distance from release to reach the fraction ``p`` of terminal speed, m.

    Parameters
    ----------
    p : float
        Fraction of v_t, 0 < p < 1.
    **model
        Keyword arguments of :func:`transient_model`; ``history`` chooses the model (default:
        with the Basset history force).

    Returns
    -------
    float
        Metres travelled from release until v = p v_t.
    """
    return transient_model(**model).distance_to_fraction(p)


def basset_tail_deficit(t_s: ArrayLike, *, d_m: float, rho_f_kg_m3: float, mu_pa_s: float) -> NDArray[np.float64]:
    """Large-time asymptote of the velocity deficit with history force, unbounded liquid.

    1 − v/v∞ ≈ a √(ρ_f / (π μ t)) (derived from the Laplace transform, physics-references.md §5).

    Parameters
    ----------
    t_s : array_like of shape (n,)
        Time since release, s (> 0).
    d_m : float
        Ball diameter, m.
    rho_f_kg_m3 : float
        Liquid density, kg/m³.
    mu_pa_s : float
        Viscosity, Pa·s.

    Returns
    -------
    ndarray of shape (n,)
        Fractional deficit (dimensionless).
    """
    d = require_positive("d_m", d_m, "a ball diameter in metres > 0")
    rho_f = require_positive("rho_f_kg_m3", rho_f_kg_m3, "a liquid density in kg/m³ > 0")
    mu = require_positive("mu_pa_s", mu_pa_s, "a viscosity in Pa·s > 0")
    t = np.asarray(t_s, dtype=float)
    if np.any(t <= 0):
        raise ValueError("t_s must be positive (time since release, s) for the tail asymptote")
    return 0.5 * d * np.sqrt(rho_f / (math.pi * mu * t))


# ----------------------------------------------------------------------------- fit


@dataclass(frozen=True)
class TransientFit(ResultDict):
    """Fit of the equation of motion to the approach — the "transient estimate".

    Attributes
    ----------
    label : str
        Always ``"transient estimate"``: a cross-check of, or fallback for, the plateau result.
    model : str
        Which equation of motion was fitted.
    mu_pa_s, u_mu_pa_s : float
        Viscosity and its standard uncertainty (HAC sandwich, statistical only), Pa·s.
    v_m_s, u_v_m_s : float
        Terminal speed implied by the fitted viscosity (f_w × Stokes v∞) and its uncertainty, m/s.
    direction : str
        ``"down"`` or ``"up"``.
    tau_s, u_tau_s : float
        Time constant τ and its uncertainty, s.
    t_release_s, u_t_release_s : float
        Fitted release time on the clip's clock and its uncertainty, s.
    z_release_mm : float
        Fitted position at release, mm.
    time_to_99_s : float
        Time from release to 99 % of v_t in the fitted model, s.
    reynolds_number : float
        ρ_f v_t d / μ at the fitted state.
    n_points : int
        Points fitted.
    residual_rms_mm : float
        Root-mean-square residual, mm.
    converged : bool
        Whether the optimiser reported convergence.
    warnings : list of str
        Validity notes (Stokes drag at large Re, unresolved τ, release outside the view, …).
    """

    label: str
    model: str
    mu_pa_s: float
    u_mu_pa_s: float
    v_m_s: float
    u_v_m_s: float
    direction: str
    tau_s: float
    u_tau_s: float
    t_release_s: float
    u_t_release_s: float
    z_release_mm: float
    time_to_99_s: float
    reynolds_number: float
    n_points: int
    residual_rms_mm: float
    converged: bool
    warnings: list[str] = field(default_factory=list)


def fit_transient(
    t_s: ArrayLike | pd.DataFrame,
    z_mm: ArrayLike | None = None,
    *,
    d_m: float,
    rho_s_kg_m3: float,
    rho_f_kg_m3: float,
    g_m_s2: float,
    wall_factor: float = 1.0,
    history: bool = True,
    mask: ArrayLike | None = None,
    z_u_mm: ArrayLike | None = None,
) -> TransientFit:
    """Fit the equation of motion to the approach and estimate the viscosity from it.

    The free parameters are the release time t₀, the position at release z₀ and the viscosity μ
    (fitted as ln μ); the driving force (weight − buoyancy), added mass and drag form are fixed
    by the inputs. The model position is z₀ ± 1000·distance_m(t − t₀) (z₀ before release).
    Least squares (trust region) from a coarse grid of release times; uncertainties from the
    sandwich covariance with the correlation-robust long-run variance of
    :func:`physics.terminal.hac_covariance`.

    Parameters
    ----------
    t_s : array_like of shape (n,) or pandas.DataFrame
        Times, s (or a one-track trajectory DataFrame; then omit ``z_mm``).
    z_mm : array_like of shape (n,), optional
        Positions, mm, positive downward.
    d_m : float
        Ball diameter, m.
    rho_s_kg_m3, rho_f_kg_m3 : float
        Ball and liquid density, kg/m³.
    g_m_s2 : float
        Gravitational acceleration, m/s².
    wall_factor : float, default 1.0
        f_w = v/v∞ of the steady drag (from :mod:`physics.drag`).
    history : bool, default True
        Include the Basset history force.
    mask : array_like of bool, shape (n,), optional
        Points to use (e.g. without outliers and excluded end zones); default all.
    z_u_mm : array_like of shape (n,), optional
        Position uncertainties, mm (weights 1/u²).

    Returns
    -------
    TransientFit
        Labelled ``"transient estimate"``.

    Raises
    ------
    ValueError
        Bad input, fewer than 6 points, or a motion direction that contradicts the densities.
    """
    t, z, zu = trajectory_arrays(t_s, z_mm, z_u_mm)
    use = np.ones(t.size, dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
    if use.shape != t.shape:
        raise ValueError(f"mask must have shape {t.shape} (got {use.shape})")
    t, z = t[use], z[use]
    zu = None if zu is None else zu[use]
    n = t.size
    if n < 6:
        raise ValueError(f"fit_transient needs at least 6 points (got {n})")
    base = dict(d_m=d_m, rho_s_kg_m3=rho_s_kg_m3, rho_f_kg_m3=rho_f_kg_m3, g_m_s2=g_m_s2,
                wall_factor=wall_factor, history=history)
    probe = transient_model(mu_pa_s=1.0, **base)
    sign = 1.0 if probe.direction == "down" else -1.0
    late = fit_line(t[-max(n // 3, 4):], z[-max(n // 3, 4):])
    if late.slope_mm_s * sign <= 0:
        moving = "up" if late.slope_mm_s < 0 else "down"
        raise ValueError(
            f"the trajectory moves {moving} at its end but rho_s_kg_m3 = {rho_s_kg_m3!r} and "
            f"rho_f_kg_m3 = {rho_f_kg_m3!r} make the ball go {probe.direction}"
        )
    w = np.ones(n) if zu is None else 1.0 / zu**2
    sw = np.sqrt(w)
    # μ·v_t is fixed by the inputs (Stokes: v_t ∝ 1/μ), so the late slope gives a starting μ.
    mu0 = probe.v_terminal_m_s / (abs(late.slope_mm_s) / MM_PER_M)

    def position(params: NDArray[np.float64]) -> NDArray[np.float64]:
        t0, z0, ln_mu = params
        model = transient_model(mu_pa_s=math.exp(ln_mu), **base)
        return z0 + sign * MM_PER_M * model.distance_m(t - t0)

    def residual(params: NDArray[np.float64]) -> NDArray[np.float64]:
        return sw * (z - position(params))

    span = t[-1] - t[0]
    starts = []
    for t0 in t[0] + span * np.linspace(-0.5, 0.5, _RELEASE_GRID):
        shape = position(np.array([t0, 0.0, math.log(mu0)]))
        z0 = float(np.sum(w * (z - shape)) / np.sum(w))
        x0 = np.array([t0, z0, math.log(mu0)])
        starts.append((float(np.sum(residual(x0) ** 2)), x0))
    # refine only the most promising release times: each refinement costs hundreds of model runs
    # a release long before the first point is not identifiable (the trajectory is a straight
    # line; with the history force's slow tail the optimiser would wander hundreds of seconds
    # back): it is bounded to one span before the first point
    lower = np.array([t[0] - _RELEASE_BOUND_SPANS * span, -np.inf, -np.inf])
    upper = np.array([t[-1], np.inf, np.inf])
    best: Any = None
    for _, x0 in sorted(starts, key=lambda s: s[0])[:_REFINED_STARTS]:
        sol = least_squares(residual, np.clip(x0, lower, upper), x_scale="jac", method="trf",
                            bounds=(lower, upper))
        if best is None or sol.cost < best.cost:
            best = sol
    params = best.x
    jac = best.jac / sw[:, None]  # unweighted Jacobian of the model residual
    resid = z - position(params)
    bread = np.linalg.pinv(jac.T @ (jac * w[:, None]))
    cov, _ = hac_covariance(jac, resid, bread, w)
    t0, z0, ln_mu = (float(v) for v in params)
    mu = math.exp(ln_mu)
    u_ln_mu = math.sqrt(max(cov[2, 2], 0.0))
    fitted = transient_model(mu_pa_s=mu, **base)
    re = reynolds_number(fitted.v_terminal_m_s, fitted.d_m, fitted.rho_f_kg_m3, mu)
    warnings: list[str] = []
    if re > STOKES_RE_MAX:
        warnings.append(
            f"Re = {re:.3g} > {STOKES_RE_MAX}: the transient model uses Stokes drag; inertia "
            f"(Oseen: +{300 * re / 16:.2g} % drag) is not modelled, so the transient estimate is biased"
        )
    dt_med = float(np.median(np.diff(t)))
    if fitted.tau_s < dt_med:
        warnings.append(
            f"tau = {fitted.tau_s * 1e3:.3g} ms is shorter than the frame interval ({dt_med * 1e3:.3g} ms): "
            "the exponential part of the approach is not resolved"
        )
    if t0 < t[0]:
        warnings.append(f"release {t[0] - t0:.3g} s before the first point: extrapolated, not seen")
    if history and fitted.wall_factor < 1.0:
        warnings.append(
            "history force taken for unbounded liquid; the tube wall shortens its t^(-1/2) tail, "
            "so the transient estimate is an approximation"
        )
    return TransientFit(
        label=_LABEL,
        model=fitted.model,
        mu_pa_s=mu,
        u_mu_pa_s=mu * u_ln_mu,
        v_m_s=fitted.v_terminal_m_s,
        u_v_m_s=fitted.v_terminal_m_s * u_ln_mu,
        direction=fitted.direction,
        tau_s=fitted.tau_s,
        u_tau_s=fitted.tau_s * u_ln_mu,
        t_release_s=t0,
        u_t_release_s=math.sqrt(max(cov[0, 0], 0.0)),
        z_release_mm=z0,
        time_to_99_s=fitted.time_to_fraction(0.99),
        reynolds_number=re,
        n_points=n,
        residual_rms_mm=float(np.sqrt(np.mean(resid**2))),
        converged=bool(best.success),
        warnings=warnings,
    )
