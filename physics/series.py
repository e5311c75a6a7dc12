"""Several balls and repeats: per-ball statistics, v against d², pooled viscosity, outliers.

Plain inputs (a sequence of :class:`Drop`), no file I/O. What the series adds to single drops
(physics-references.md §1, §8, §9; user-needs.md §1.9, §1.10):

* per ball: mean speed, standard deviation, n and the Type A standard uncertainty s/√n, the
  viscosity from the full force balance (:func:`physics.viscosity.infer_viscosity`), Re and a
  characteristic shear rate v/d;
* outliers among the repeats of one ball (robust z-score above 3, e.g. a bubble on the ball or
  an off-axis drop) are flagged and left out;
* v against d² fitted with and without intercept (weighted least squares), the slope's
  viscosity, and the log–log exponent of v against d (2 expected for a Newtonian liquid). The
  fitted speed is the measured one corrected for walls and inertia, v φ / f_w — the speed a
  Stokes sphere in unbounded liquid would have — so that a Newtonian liquid gives an exact
  line through the origin even when the larger balls leave the Stokes regime;
* the pooled viscosity (weighted mean) with a χ² / Birge-ratio consistency check: balls of
  different size that disagree beyond their uncertainties point to a non-Newtonian liquid or
  to uncorrected walls.

The per-ball uncertainties used for pooling hold only the ball-to-ball terms (speed and
diameter); terms common to all balls (liquid density, gravity, scale, temperature, models) do not
average out and belong in the budget of the pooled value (:mod:`physics.uncertainty`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np
import numpy.typing as npt
from scipy.special import chdtrc  # chi-squared survival function (scipy.stats.chi2.sf)

from physics._results import ResultDict
from physics.drag import STOKES_RE_MAX, require_positive
from physics.gravity import STANDARD_GRAVITY_M_S2
from physics.uncertainty import ViscosityInputs, viscosity_budget
from physics.viscosity import infer_viscosity

__all__ = [
    "BallSummary",
    "Drop",
    "DropRow",
    "LineFit",
    "PooledMean",
    "PowerLawFit",
    "SeriesResult",
    "analyze_series",
    "robust_z",
    "weighted_mean",
]

Array = npt.NDArray[np.float64]

#: Robust z-score above which a repeat is an outlier (task brief; Iglewicz & Hoaglin's modified
#: z-score uses 3.5, from memory).
OUTLIER_Z = 3.0
#: 0.6745 = Φ⁻¹(0.75): makes the median absolute deviation a consistent estimator of σ.
_MAD_TO_SIGMA = 0.6745
#: √(π/2): makes the mean absolute deviation a consistent estimator of σ (fallback when MAD = 0).
_MEAN_AD_TO_SIGMA = math.sqrt(math.pi / 2.0)
#: Significance level of the χ² consistency test of the per-ball viscosities.
CONSISTENCY_ALPHA = 0.05
#: Coverage factor for "beyond its uncertainty" statements (intercept, exponent).
_K_TEST = 2.0


@dataclass(frozen=True)
class Drop:
    """One drop (one clip, one passage) of a series.

    Attributes
    ----------
    ball : str
        Ball label; drops with the same label are repeats of the same ball size and material.
    d_m : float
        Ball diameter, m.
    v_m_s : float
        Terminal speed, m/s (positive).
    rho_s_kg_m3 : float
        Ball density, kg/m³.
    u_d_m : float
        Standard uncertainty of the diameter, m.
    u_v_m_s : float
        Standard uncertainty of this drop's speed fit, m/s.
    label : str
        Name of the drop (clip), for messages.
    """

    ball: str
    d_m: float
    v_m_s: float
    rho_s_kg_m3: float
    u_d_m: float = 0.0
    u_v_m_s: float = 0.0
    label: str = ""


@dataclass(frozen=True)
class PooledMean(ResultDict):
    """Weighted mean with a consistency check.

    Attributes
    ----------
    value : float
        Σ w_i x_i / Σ w_i, w_i = 1/u_i².
    u : float
        Standard uncertainty, the internal one inflated by the Birge ratio when that exceeds 1
        (common practice, e.g. in constant evaluations).
    u_internal : float
        (Σ w_i)^(-1/2).
    chi2 : float
        Σ w_i (x_i − mean)².
    dof : int
        n − 1.
    birge_ratio : float
        √(χ²/dof) (1 when dof = 0).
    p_value : float or None
        P(χ²_dof ≥ χ²); None when dof = 0.
    consistent : bool
        False when p_value < 0.05.
    """

    value: float
    u: float
    u_internal: float
    chi2: float
    dof: int
    birge_ratio: float
    p_value: float | None
    consistent: bool


def weighted_mean(values: Sequence[float] | Array, u: Sequence[float] | Array) -> PooledMean:
    """Inverse-variance weighted mean with χ², Birge ratio and consistency verdict.

    Parameters
    ----------
    values : array_like, shape (n,)
        Estimates (any unit).
    u : array_like, shape (n,)
        Their standard uncertainties (same unit, > 0).

    Returns
    -------
    PooledMean
    """
    x = np.asarray(values, dtype=float)
    s = np.asarray(u, dtype=float)
    if x.ndim != 1 or x.size == 0 or s.shape != x.shape:
        raise ValueError(f"values and u have shapes {x.shape} and {s.shape}; expected two 1-D arrays of equal, non-zero length")
    if not np.all(np.isfinite(x)):
        raise ValueError(f"values = {x.tolist()!r} contain a non-finite number; expected finite estimates")
    if not np.all(np.isfinite(s) & (s > 0.0)):
        raise ValueError(f"u = {s.tolist()!r} contain a value ≤ 0; expected positive standard uncertainties")
    w = 1.0 / s**2
    mean = float(np.sum(w * x) / np.sum(w))
    u_int = float(1.0 / math.sqrt(np.sum(w)))
    chi2 = float(np.sum(w * (x - mean) ** 2))
    dof = x.size - 1
    if dof == 0:
        return PooledMean(mean, u_int, u_int, chi2, 0, 1.0, None, True)
    birge = math.sqrt(chi2 / dof)
    p = float(chdtrc(dof, chi2))
    return PooledMean(mean, u_int * max(1.0, birge), u_int, chi2, dof, birge, p, p >= CONSISTENCY_ALPHA)


def robust_z(groups: Sequence[Sequence[float]]) -> list[Array]:
    """Robust z-scores of repeated measurements, with a scale pooled over all groups.

    Parameters
    ----------
    groups : sequence of array_like
        One array per ball: the repeated speeds (or any positive quantity) of that ball.

    Returns
    -------
    list of ndarray
        One array of z-scores per group, same shapes.

    Notes
    -----
    Criterion: for each value, its relative deviation from the median of the *other* values of
    its group, r_i = x_i / median(others) − 1 (leave-one-out, so the value cannot hide its own
    deviation and no deviation is zero by construction); the scale is the median absolute
    deviation of all r_i of all groups with at least 3 values, divided by 0.6745 (a consistent
    estimate of σ for normal scatter, robust to a minority of outliers); z_i = r_i / scale.
    Relative deviations let balls of different speed share one scale (release and temperature
    scatter is relative). Groups with fewer than 3 values get z = 0 (no robust reference). If
    the median absolute deviation is zero, the mean absolute deviation × √(π/2) is the scale.
    """
    arrays = [np.asarray(g, dtype=float) for g in groups]
    rel: list[Array] = []
    for x in arrays:
        if x.size < 3:
            rel.append(np.zeros_like(x))
            continue
        others = np.median(np.broadcast_to(x, (x.size, x.size))[~np.eye(x.size, dtype=bool)].reshape(x.size, -1), axis=1)
        rel.append(x / others - 1.0)
    tested = [r for r, x in zip(rel, arrays) if x.size >= 3]
    if not tested:
        return rel
    pooled = np.abs(np.concatenate(tested))
    scale = float(np.median(pooled)) / _MAD_TO_SIGMA
    if scale == 0.0:
        scale = _MEAN_AD_TO_SIGMA * float(np.mean(pooled))
    if scale == 0.0:
        return [np.zeros_like(r) for r in rel]
    return [r / scale for r in rel]


@dataclass(frozen=True)
class DropRow:
    """A drop as seen by the series: its robust z within its ball, and the outlier verdict.

    Attributes
    ----------
    label : str
        Drop name.
    ball : str
        Ball label.
    v_m_s : float
        Speed, m/s.
    robust_z : float
        Robust z-score among the repeats of its ball.
    outlier : bool
        True when |robust_z| > the threshold; the drop is then left out of the ball's statistics.
    """

    label: str
    ball: str
    v_m_s: float
    robust_z: float
    outlier: bool


@dataclass(frozen=True)
class BallSummary:
    """Statistics and viscosity of one ball (size and material).

    Attributes
    ----------
    ball : str
        Label.
    n : int
        Drops used (outliers left out).
    n_outliers : int
        Drops flagged as outliers.
    d_m, u_d_m : float
        Diameter and its standard uncertainty, m.
    rho_s_kg_m3 : float
        Ball density, kg/m³.
    v_mean_m_s : float
        Mean speed of the drops used, m/s.
    v_corrected_m_s : float
        v_mean φ / f_w: the Stokes-equivalent speed in unbounded liquid used in the v–d² fit, m/s.
    v_std_m_s : float or None
        Sample standard deviation (None for a single drop), m/s.
    u_v_type_a_m_s : float or None
        Type A standard uncertainty s/√n (None for a single drop), m/s.
    u_v_m_s : float
        Standard uncertainty of the mean speed used: s/√n, but not below the drops' own fit
        uncertainties (rms) / √n; a single drop's own fit uncertainty.
    dof : int or None
        n − 1 (None for a single drop).
    mu_pa_s : float
        Viscosity from the full force balance (wall and inertia corrected), Pa·s.
    u_mu_pa_s : float
        Its ball-to-ball standard uncertainty (speed and diameter terms only), Pa·s.
    reynolds_number : float
        Re at the unbounded speed.
    wall_factor : float or None
        f_w applied.
    inertia_factor_phi : float
        φ of the drag law.
    shear_rate_per_s : float
        Characteristic shear rate v/d, s⁻¹ (user-needs §1.10: report it with apparent viscosities).
    warnings : list of str
        From the viscosity inference and the ball's own checks.
    """

    ball: str
    n: int
    n_outliers: int
    d_m: float
    u_d_m: float
    rho_s_kg_m3: float
    v_mean_m_s: float
    v_corrected_m_s: float
    v_std_m_s: float | None
    u_v_type_a_m_s: float | None
    u_v_m_s: float
    dof: int | None
    mu_pa_s: float
    u_mu_pa_s: float
    reynolds_number: float
    wall_factor: float | None
    inertia_factor_phi: float
    shear_rate_per_s: float
    warnings: list[str] = field(default_factory=list)


@dataclass(frozen=True)
class LineFit:
    """Weighted straight-line fit of the corrected speed v φ / f_w against d².

    Attributes
    ----------
    through_origin : bool
        True for v = b d², False for v = a + b d².
    slope_m_s_per_m2 : float
        b, (m/s) per m².
    u_slope_m_s_per_m2 : float
        Standard uncertainty of b (scaled by the Birge ratio when above 1).
    intercept_m_s : float or None
        a, m/s (None through the origin).
    u_intercept_m_s : float or None
        Standard uncertainty of a.
    chi2 : float
        Weighted sum of squared residuals.
    dof : int
        Points minus parameters.
    birge_ratio : float
        √(χ²/dof) (1 when dof = 0).
    mu_pa_s, u_mu_pa_s : float
        Viscosity from the slope, |Δρ_ref| g / (18 b), and its standard uncertainty, Pa·s.
    """

    through_origin: bool
    slope_m_s_per_m2: float
    u_slope_m_s_per_m2: float
    intercept_m_s: float | None
    u_intercept_m_s: float | None
    chi2: float
    dof: int
    birge_ratio: float
    mu_pa_s: float
    u_mu_pa_s: float


@dataclass(frozen=True)
class PowerLawFit:
    """Weighted fit of ln(v φ / f_w) against ln d: v ∝ d^n.

    Attributes
    ----------
    exponent : float
        n (2 for a Newtonian liquid; below 2 for a shear-thinning one).
    u_exponent : float
        Standard uncertainty of n (Birge-scaled).
    chi2 : float
        Weighted sum of squared residuals.
    dof : int
        Points minus 2.
    """

    exponent: float
    u_exponent: float
    chi2: float
    dof: int


@dataclass(frozen=True)
class SeriesResult(ResultDict):
    """Everything the series analysis found.

    Attributes
    ----------
    balls : list of BallSummary
        One per ball, by increasing diameter.
    drops : list of DropRow
        One per input drop, in input order.
    pooled : PooledMean
        Weighted mean of the per-ball viscosities, Pa·s, with the consistency check.
    fit_through_origin, fit_with_intercept : LineFit or None
        Corrected speed v φ / f_w against d² (None with fewer than two ball sizes).
    power_law : PowerLawFit or None
        ln(v φ / f_w) against ln d (None with fewer than two sizes).
    delta_rho_ref_kg_m3 : float
        |ρ_s − ρ_f| of the smallest ball; speeds of balls of other materials are scaled by
        Δρ_ref/Δρ before fitting, so for one material the fit is v φ / f_w against d².
    velocities_wall_corrected : bool
        True when the fitted speeds include the wall factor (a tube diameter was given);
        the inertia factor φ is always included.
    warnings : list of str
        Outliers, regime, consistency and fit caveats.
    """

    balls: list[BallSummary]
    drops: list[DropRow]
    pooled: PooledMean
    fit_through_origin: LineFit | None
    fit_with_intercept: LineFit | None
    power_law: PowerLawFit | None
    delta_rho_ref_kg_m3: float
    velocities_wall_corrected: bool
    warnings: list[str] = field(default_factory=list)


def _wls(x: Array, y: Array, sigma: Array, intercept: bool) -> tuple[Array, Array, float, int]:
    """Weighted least squares y = [a +] b x; returns params ([a,] b), covariance, χ², dof.

    The covariance comes from the given σ and is scaled by χ²/dof when that exceeds 1.
    """
    design = np.column_stack([np.ones_like(x), x]) if intercept else x[:, None]
    w = 1.0 / sigma
    params, *_ = np.linalg.lstsq(design * w[:, None], y * w, rcond=None)
    cov = np.linalg.inv((design * w[:, None]).T @ (design * w[:, None]))
    chi2 = float(np.sum(((y - design @ params) * w) ** 2))
    dof = x.size - design.shape[1]
    if dof > 0 and chi2 / dof > 1.0:
        cov = cov * (chi2 / dof)
    return params, cov, chi2, dof


def _line_fit(d2: Array, y: Array, u_y: Array, intercept: bool, drho_g: float) -> LineFit:
    params, cov, chi2, dof = _wls(d2, y, u_y, intercept)
    slope, u_slope = float(params[-1]), math.sqrt(float(cov[-1, -1]))
    birge = math.sqrt(chi2 / dof) if dof > 0 else 1.0
    mu = drho_g / (18.0 * slope)
    return LineFit(
        through_origin=not intercept,
        slope_m_s_per_m2=slope,
        u_slope_m_s_per_m2=u_slope,
        intercept_m_s=float(params[0]) if intercept else None,
        u_intercept_m_s=math.sqrt(float(cov[0, 0])) if intercept else None,
        chi2=chi2,
        dof=dof,
        birge_ratio=birge,
        mu_pa_s=mu,
        u_mu_pa_s=abs(mu) * u_slope / abs(slope),
    )


def _ball_summary(
    name: str,
    group: list[Drop],
    rho_f_kg_m3: float,
    tube_d_m: float | None,
    g_m_s2: float,
    wall: str,
    drag: str,
) -> BallSummary:
    v = np.array([dr.v_m_s for dr in group], dtype=float)
    u_fit = np.array([dr.u_v_m_s for dr in group], dtype=float)
    d_values = np.array([dr.d_m for dr in group], dtype=float)
    d = float(np.mean(d_values))
    u_d = float(np.sqrt(np.mean(np.array([dr.u_d_m for dr in group]) ** 2)))
    rho_s = float(np.mean([dr.rho_s_kg_m3 for dr in group]))
    warnings: list[str] = []
    if np.ptp(d_values) > 2.0 * u_d:
        warnings.append(
            f"ball {name!r}: its drops give diameters from {d_values.min() * 1e3:.4g} to {d_values.max() * 1e3:.4g} mm; "
            "the mean is used"
        )
    n = v.size
    u_floor = float(np.sqrt(np.mean(u_fit**2)) / math.sqrt(n))
    if n >= 2:
        std = float(np.std(v, ddof=1))
        u_a: float | None = std / math.sqrt(n)
        u_v = max(std / math.sqrt(n), u_floor)
        dof: int | None = n - 1
    else:
        std, u_a, u_v, dof = None, None, u_floor, None
    v_mean = float(np.mean(v))
    result = infer_viscosity(v_mean, d, rho_s, rho_f_kg_m3, tube_d_m=tube_d_m, g_m_s2=g_m_s2, wall=wall, drag=drag)
    budget = viscosity_budget(
        ViscosityInputs(
            v_m_s=v_mean, u_v_m_s=u_v, d_m=d, u_d_m=u_d,
            rho_s_kg_m3=rho_s, u_rho_s_kg_m3=0.0, rho_f_kg_m3=rho_f_kg_m3, u_rho_f_kg_m3=0.0,
            tube_d_m=tube_d_m, g_m_s2=g_m_s2, u_wall_model_rel=0.0, u_inertia_rel=0.0,
            dof={} if dof is None else {"v_m_s": float(dof)},
        ),
        wall=wall, drag=drag,
    )
    if budget.combined_u_pa_s == 0.0:
        raise ValueError(
            f"ball {name!r} has no uncertainty (one drop with u_v_m_s = 0 and u_d_m = 0); "
            "expected repeats or a speed uncertainty from the fit"
        )
    warnings.extend(f"ball {name!r}: {w}" for w in result.warnings)
    if result.reynolds_number > STOKES_RE_MAX:
        warnings.append(
            f"ball {name!r}: Re = {result.reynolds_number:.3g} leaves the Stokes regime (Re ≤ {STOKES_RE_MAX}); "
            f"its viscosity leans on the {drag} inertia correction (φ = {result.inertia_factor_phi:.4f})"
        )
    return BallSummary(
        ball=name, n=n, n_outliers=0, d_m=d, u_d_m=u_d, rho_s_kg_m3=rho_s,
        v_mean_m_s=v_mean, v_corrected_m_s=v_mean * result.inertia_factor_phi / (result.wall_factor or 1.0), v_std_m_s=std, u_v_type_a_m_s=u_a, u_v_m_s=u_v, dof=dof,
        mu_pa_s=result.mu_pa_s, u_mu_pa_s=budget.combined_u_pa_s,
        reynolds_number=result.reynolds_number, wall_factor=result.wall_factor,
        inertia_factor_phi=result.inertia_factor_phi, shear_rate_per_s=v_mean / d, warnings=warnings,
    )


def analyze_series(
    drops: Sequence[Drop],
    *,
    rho_f_kg_m3: float,
    tube_d_m: float | None = None,
    g_m_s2: float = STANDARD_GRAVITY_M_S2,
    wall: str = "haberman-sayre",
    drag: str = "clift-grace-weber",
    outlier_z: float = OUTLIER_Z,
) -> SeriesResult:
    """Analyse a series of drops of one or several balls in one liquid and tube.

    Parameters
    ----------
    drops : sequence of Drop
        At least one drop; repeats share a ``ball`` label.
    rho_f_kg_m3 : float
        Liquid density, kg/m³.
    tube_d_m : float, optional
        Tube inner diameter, m (None: walls uncorrected, with a warning in the fits).
    g_m_s2 : float
        Gravity, m/s².
    wall, drag : str
        Wall model and drag law for the per-ball viscosities.
    outlier_z : float
        Robust z-score above which a repeat is flagged and left out (default 3).

    Returns
    -------
    SeriesResult
    """
    if len(drops) == 0:
        raise ValueError("drops = [] is empty; expected at least one Drop")
    rho_f = require_positive("rho_f_kg_m3", rho_f_kg_m3, "a liquid density in kg/m³ > 0")
    require_positive("outlier_z", outlier_z, "a robust z-score threshold > 0")
    for i, dr in enumerate(drops):
        name = dr.label or f"drop {i}"
        require_positive(f"{name}: d_m", dr.d_m, "a ball diameter in metres > 0")
        require_positive(f"{name}: v_m_s", dr.v_m_s, "a terminal speed in m/s > 0")
        require_positive(f"{name}: rho_s_kg_m3", dr.rho_s_kg_m3, "a ball density in kg/m³ > 0")
        for attr in ("u_d_m", "u_v_m_s"):
            value = getattr(dr, attr)
            if not (math.isfinite(value) and value >= 0.0):
                raise ValueError(f"{name}: {attr} = {value!r} is not allowed; expected a standard uncertainty ≥ 0")
    warnings: list[str] = []
    groups: dict[str, list[int]] = {}
    for i, dr in enumerate(drops):
        groups.setdefault(dr.ball, []).append(i)
    z_all = np.zeros(len(drops))
    scores = robust_z([[drops[i].v_m_s for i in indices] for indices in groups.values()])
    for indices, z in zip(groups.values(), scores):
        z_all[indices] = z
    outlier = np.abs(z_all) > outlier_z
    rows = [
        DropRow(dr.label or f"drop {i}", dr.ball, float(dr.v_m_s), float(z_all[i]), bool(outlier[i]))
        for i, dr in enumerate(drops)
    ]
    for row in rows:
        if row.outlier:
            warnings.append(
                f"{row.label} (ball {row.ball!r}) is an outlier, robust z = {row.robust_z:+.1f}: "
                "a bubble on the ball or an off-axis drop? Left out"
            )
    balls: list[BallSummary] = []
    for name, indices in groups.items():
        kept = [drops[i] for i in indices if not outlier[i]]
        summary = _ball_summary(name, kept, rho_f, tube_d_m, g_m_s2, wall, drag)
        balls.append(replace(summary, n_outliers=int(np.sum(outlier[indices]))))
    balls.sort(key=lambda b: b.d_m)
    for ball in balls:
        warnings.extend(ball.warnings)
    pooled = weighted_mean([b.mu_pa_s for b in balls], [b.u_mu_pa_s for b in balls])
    if not pooled.consistent:
        warnings.append(
            f"the balls' viscosities disagree beyond their uncertainties (χ²/ν = {pooled.chi2:.1f}/{pooled.dof}, "
            f"p = {pooled.p_value:.2g}): the liquid may be non-Newtonian or the walls uncorrected"
        )
    drho = np.array([abs(b.rho_s_kg_m3 - rho_f) for b in balls])
    drho_ref = float(drho[0])
    d = np.array([b.d_m for b in balls])
    f_w = np.array([b.wall_factor if b.wall_factor is not None else 1.0 for b in balls])
    to_corrected = np.array([b.inertia_factor_phi for b in balls]) / f_w * (drho_ref / drho)
    y = np.array([b.v_mean_m_s for b in balls]) * to_corrected
    u_y = np.hypot(
        np.array([b.u_v_m_s for b in balls]) * to_corrected,
        2.0 * y * np.array([b.u_d_m for b in balls]) / d,
    )
    fit0 = fit1 = None
    power = None
    if np.unique(d).size < 2:
        warnings.append("only one ball size: no v–d² fit and no exponent")
    elif np.any(u_y == 0.0):
        warnings.append("a ball has no speed or diameter uncertainty: no weighted v–d² fit")
    else:
        drho_g = drho_ref * g_m_s2
        fit0 = _line_fit(d**2, y, u_y, False, drho_g)
        fit1 = _line_fit(d**2, y, u_y, True, drho_g)
        params, cov, chi2, dof = _wls(np.log(d), np.log(y), u_y / y, True)
        power = PowerLawFit(float(params[1]), math.sqrt(float(cov[1, 1])), chi2, dof)
        if tube_d_m is None:
            warnings.append("no tube diameter: speeds in the v–d² fit are not wall corrected")
        intercept, u_intercept = fit1.intercept_m_s or 0.0, fit1.u_intercept_m_s or 0.0
        if fit1.dof > 0 and abs(intercept) > _K_TEST * u_intercept:
            warnings.append(
                f"the v–d² line has a non-zero intercept ({intercept * 1e3:.3g} ± {u_intercept * 1e3:.2g} mm/s): "
                "walls, inertia or a non-Newtonian liquid"
            )
        if dof > 0 and abs(power.exponent - 2.0) > _K_TEST * power.u_exponent:
            warnings.append(
                f"corrected speed ∝ d^{power.exponent:.3f} ± {power.u_exponent:.3f}, not d²: the liquid may be "
                "non-Newtonian, or walls or inertia are not fully corrected"
            )
    return SeriesResult(
        balls=balls,
        drops=rows,
        pooled=pooled,
        fit_through_origin=fit0,
        fit_with_intercept=fit1,
        power_law=power,
        delta_rho_ref_kg_m3=drho_ref,
        velocities_wall_corrected=tube_d_m is not None,
        warnings=warnings,
    )
