"""GUM uncertainty budget for the viscosity (JCGM 100) and its Monte Carlo check (JCGM 101).

Measurement model (physics-references.md §9), evaluated by the same force-balance solver that
:func:`physics.viscosity.infer_viscosity` uses (:func:`physics.viscosity.force_balance`)::

    v'  = v · (L / L₀) / c_t                          scale distance L, time-base factor c_t
    μ   = force_balance(v', d, ρ_s, ρ_f, D, g; f_w × c_w, φ × c_φ)
    μ_T = μ · exp(−(d ln μ/dT) · (T − T₀))             stated at the nominal temperature T₀

with c_w = c_φ = c_t = 1 the wall-model, inertia-model and time-base factors whose standard
uncertainties carry the model spreads and the clock error. Sensitivity coefficients are central
differences of this function at x_i ± u(x_i) (JCGM 100 5.1.3 note 2, from memory), so no hand
formula can drift from the solver. Combined standard uncertainty by the law of propagation for
uncorrelated inputs (published: GUM summary), effective degrees of freedom by
Welch–Satterthwaite (published: GUM G.6.4, eq. G.2b, as quoted), coverage factor
k = t_95.45(ν_eff) (2 for infinite ν_eff; published: GUM 2.3.6 / NIST e-Handbook 2.5.7).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import numpy.typing as npt
from scipy.special import stdtrit  # Student t quantile (scipy.stats.t.ppf)

from physics._results import ResultDict
from physics.drag import drag_law_spread, require_positive, wall_model_spread
from physics.gravity import STANDARD_GRAVITY_M_S2
from physics.viscosity import force_balance, infer_viscosity

__all__ = [
    "BudgetRow",
    "MonteCarloResult",
    "QUANTITIES",
    "UncertaintyBudget",
    "ViscosityInputs",
    "monte_carlo",
    "viscosity_budget",
]

Array = npt.NDArray[np.float64]

#: Coverage probability that k = 2 stands for with infinite degrees of freedom (normal, ±2σ).
COVERAGE_PROBABILITY = 0.9545
#: Monte Carlo interval: probabilistically symmetric 95 % (JCGM 101 default, from memory).
MC_COVERAGE = 0.95
#: A term whose second-order part (half the curvature over ±u) exceeds this fraction of its
#: first-order contribution makes the linear budget questionable: warn, prefer Monte Carlo.
NONLINEARITY_WARN = 0.1
#: Below this many effective degrees of freedom the budget says so.
DOF_WARN = 10.0
_KELVIN = 273.15

#: Symbols of the budget's input quantities, with a readable name and unit.
QUANTITIES: dict[str, tuple[str, str]] = {
    "v_m_s": ("terminal velocity", "m/s"),
    "d_m": ("ball diameter", "m"),
    "rho_s_kg_m3": ("ball density", "kg/m³"),
    "rho_f_kg_m3": ("liquid density", "kg/m³"),
    "tube_d_m": ("tube inner diameter", "m"),
    "g_m_s2": ("gravity", "m/s²"),
    "scale_distance_m": ("scale distance", "m"),
    "time_base": ("time base", "1"),
    "rolling_shutter": ("rolling shutter (readout not given)", "1"),
    "temperature_K": ("liquid temperature", "K"),
    "wall_model": ("wall-factor model", "1"),
    "inertia_model": ("inertia-correction model", "1"),
    "apparatus_factor": ("apparatus factor (calibration)", "1"),
}


@dataclass(frozen=True)
class ViscosityInputs:
    """Input estimates and standard uncertainties (k = 1) of a viscosity measurement.

    Attributes
    ----------
    v_m_s, u_v_m_s : float
        Terminal speed and the fit's standard uncertainty, m/s.
    d_m, u_d_m : float
        Ball diameter, m (u from a micrometer, or an ISO 3290-1 grade via physics.materials).
    rho_s_kg_m3, u_rho_s_kg_m3 : float
        Ball density, kg/m³.
    rho_f_kg_m3, u_rho_f_kg_m3 : float
        Liquid density, kg/m³.
    tube_d_m, u_tube_d_m : float or None, float
        Tube inner diameter, m (None: no wall factor, no wall-model term).
    g_m_s2, u_g_m_s2 : float
        Gravity, m/s².
    scale_distance_m, u_scale_distance_m : float or None, float
        Distance between the two scale marks, m; its relative uncertainty acts on v.
    u_time_base_rel : float
        Relative standard uncertainty of the clip's time base (acts on v).
    u_rolling_shutter_rel : float
        Relative standard uncertainty of v from an unknown rolling-shutter readout (acts on v;
        a budget row only when > 0).
    temperature_c, u_temperature_c : float or None, float
        Liquid temperature, °C, when the result is stated at that temperature or compared
        with a model; needs ``dlnmu_dT_per_K``.
    dlnmu_dT_per_K : float or None
        d ln μ / dT of the liquid, K⁻¹ (e.g. from physics.fluids; −0.0923 for glycerol at 20 °C).
    u_wall_model_rel : float or None
        Relative u of the wall factor; None: from the spread of wall models
        (:func:`physics.drag.wall_model_spread`).
    u_inertia_rel : float or None
        Relative u of the inertia factor φ; None: from the spread of drag laws
        (:func:`physics.drag.drag_law_spread`).
    dof : mapping of str to float
        Degrees of freedom by symbol (keys of :data:`QUANTITIES`), e.g. ``{"v_m_s": 14}`` for a
        Type A term; missing keys are infinite.
    rectangular : tuple of str
        Symbols whose standard uncertainty describes a rectangular distribution (half-width
        √3·u); only the Monte Carlo sampling uses the shape.
    apparatus_factor, u_apparatus_factor : float or None, float
        Factor K_app from an earlier calibration run in a reference liquid
        (:mod:`physics.calibration`) multiplying μ, and its standard uncertainty; None: none.
    """

    v_m_s: float
    u_v_m_s: float
    d_m: float
    u_d_m: float
    rho_s_kg_m3: float
    u_rho_s_kg_m3: float
    rho_f_kg_m3: float
    u_rho_f_kg_m3: float
    tube_d_m: float | None = None
    u_tube_d_m: float = 0.0
    g_m_s2: float = STANDARD_GRAVITY_M_S2
    u_g_m_s2: float = 0.0
    scale_distance_m: float | None = None
    u_scale_distance_m: float = 0.0
    u_time_base_rel: float = 0.0
    u_rolling_shutter_rel: float = 0.0
    temperature_c: float | None = None
    u_temperature_c: float = 0.0
    dlnmu_dT_per_K: float | None = None
    u_wall_model_rel: float | None = None
    u_inertia_rel: float | None = None
    dof: Mapping[str, float] = field(default_factory=dict)
    rectangular: tuple[str, ...] = ()
    apparatus_factor: float | None = None
    u_apparatus_factor: float = 0.0


@dataclass(frozen=True)
class BudgetRow:
    """One line of the uncertainty budget.

    Attributes
    ----------
    quantity : str
        Readable name, e.g. "ball diameter".
    symbol : str
        Key with unit, e.g. "d_m" (see :data:`QUANTITIES`).
    value : float
        Input estimate x_i, in ``unit``.
    unit : str
        Unit of value and standard_uncertainty ("1" for dimensionless factors).
    standard_uncertainty : float
        u(x_i), same unit.
    sensitivity : float
        c_i = ∂μ/∂x_i, Pa·s per unit.
    sensitivity_rel : float
        c'_i = ∂ln μ/∂ln x_i (dimensionless).
    contribution_rel : float
        |c_i| u(x_i) / μ.
    share : float
        Fraction of the combined variance, (c_i u_i)² / u_c².
    dof : float or None
        Degrees of freedom (None: infinite).
    """

    quantity: str
    symbol: str
    value: float
    unit: str
    standard_uncertainty: float
    sensitivity: float
    sensitivity_rel: float
    contribution_rel: float
    share: float
    dof: float | None


@dataclass(frozen=True)
class UncertaintyBudget(ResultDict):
    """GUM budget of the viscosity.

    Attributes
    ----------
    mu_pa_s : float
        Viscosity estimate, Pa·s.
    combined_u_pa_s, combined_u_rel : float
        Combined standard uncertainty u_c, absolute and relative to μ.
    dof_eff : float or None
        Welch–Satterthwaite effective degrees of freedom (None: infinite).
    k : float
        Coverage factor, t_95.45(ν_eff) (2 for infinite ν_eff).
    coverage_probability : float
        0.9545.
    expanded_U_pa_s, expanded_U_rel : float
        U = k u_c, absolute and relative.
    rows : list of BudgetRow
        Contributions, largest first.
    dominant : str
        Quantity with the largest share.
    warnings : list of str
        Non-linearity, few degrees of freedom, unpropagated inputs.
    """

    mu_pa_s: float
    combined_u_pa_s: float
    combined_u_rel: float
    dof_eff: float | None
    k: float
    coverage_probability: float
    expanded_U_pa_s: float
    expanded_U_rel: float
    rows: list[BudgetRow]
    dominant: str
    warnings: list[str] = field(default_factory=list)


def _nominal(inputs: ViscosityInputs, wall: str, drag: str) -> dict[str, tuple[float, float]]:
    """Symbol → (estimate, standard uncertainty) of every input that enters the model."""
    values: dict[str, tuple[float, float]] = {
        "v_m_s": (require_positive("v_m_s", inputs.v_m_s, "a terminal speed in m/s > 0"), inputs.u_v_m_s),
        "d_m": (require_positive("d_m", inputs.d_m, "a ball diameter in metres > 0"), inputs.u_d_m),
        "rho_s_kg_m3": (float(inputs.rho_s_kg_m3), inputs.u_rho_s_kg_m3),
        "rho_f_kg_m3": (float(inputs.rho_f_kg_m3), inputs.u_rho_f_kg_m3),
        "g_m_s2": (require_positive("g_m_s2", inputs.g_m_s2, "a gravitational acceleration in m/s² > 0"), inputs.u_g_m_s2),
        "time_base": (1.0, inputs.u_time_base_rel),
    }
    if inputs.u_rolling_shutter_rel > 0.0:
        values["rolling_shutter"] = (1.0, inputs.u_rolling_shutter_rel)
    nominal = infer_viscosity(
        inputs.v_m_s, inputs.d_m, inputs.rho_s_kg_m3, inputs.rho_f_kg_m3,
        tube_d_m=inputs.tube_d_m, g_m_s2=inputs.g_m_s2, wall=wall, drag=drag,
    )
    if inputs.tube_d_m is not None:
        values["tube_d_m"] = (float(inputs.tube_d_m), inputs.u_tube_d_m)
        u_wall = (
            wall_model_spread(inputs.d_m / inputs.tube_d_m, wall)
            if inputs.u_wall_model_rel is None
            else inputs.u_wall_model_rel
        )
        values["wall_model"] = (1.0, u_wall)
    u_inertia = (
        drag_law_spread(nominal.reynolds_number, drag) if inputs.u_inertia_rel is None else inputs.u_inertia_rel
    )
    values["inertia_model"] = (1.0, u_inertia)
    if inputs.scale_distance_m is not None:
        values["scale_distance_m"] = (
            require_positive("scale_distance_m", inputs.scale_distance_m, "a scale distance in metres > 0"),
            inputs.u_scale_distance_m,
        )
    if inputs.dlnmu_dT_per_K is not None:
        if inputs.temperature_c is None:
            raise ValueError("temperature_c = None while dlnmu_dT_per_K is given; expected the liquid temperature in °C")
        values["temperature_K"] = (float(inputs.temperature_c) + _KELVIN, inputs.u_temperature_c)
    if inputs.apparatus_factor is not None:
        values["apparatus_factor"] = (
            require_positive("apparatus_factor", inputs.apparatus_factor, "a calibration factor > 0"),
            inputs.u_apparatus_factor,
        )
    for symbol, (_, u) in values.items():
        if not (math.isfinite(float(u)) and float(u) >= 0.0):
            raise ValueError(f"standard uncertainty of {symbol} = {u!r} is not allowed; expected a number ≥ 0")
    return values


def _model(
    x: Mapping[str, float | Array], x0: Mapping[str, tuple[float, float]], inputs: ViscosityInputs, wall: str, drag: str
) -> Array:
    """μ (Pa·s) of the measurement model at input values ``x`` (scalars or arrays)."""
    v = np.asarray(x["v_m_s"], dtype=float) / np.asarray(x["time_base"], dtype=float)
    if "rolling_shutter" in x:
        v = v / np.asarray(x["rolling_shutter"], dtype=float)
    if "scale_distance_m" in x:
        v = v * np.asarray(x["scale_distance_m"], dtype=float) / x0["scale_distance_m"][0]
    sol = force_balance(
        v, x["d_m"], x["rho_s_kg_m3"], x["rho_f_kg_m3"],
        tube_d_m=x.get("tube_d_m"), g_m_s2=x["g_m_s2"], wall=wall, drag=drag,
        wall_factor_scale=x.get("wall_model", 1.0), inertia_scale=x["inertia_model"],
    )
    mu = sol.mu_pa_s
    if "temperature_K" in x:
        dT = np.asarray(x["temperature_K"], dtype=float) - x0["temperature_K"][0]
        mu = mu * np.exp(-float(inputs.dlnmu_dT_per_K or 0.0) * dT)
    if "apparatus_factor" in x:
        mu = mu * np.asarray(x["apparatus_factor"], dtype=float)
    return np.asarray(mu, dtype=float)


def viscosity_budget(
    inputs: ViscosityInputs, *, wall: str = "haberman-sayre", drag: str = "clift-grace-weber"
) -> UncertaintyBudget:
    """GUM (JCGM 100) uncertainty budget of the viscosity.

    Parameters
    ----------
    inputs : ViscosityInputs
        Estimates, standard uncertainties, degrees of freedom.
    wall, drag : str
        Wall model and drag law, as in :func:`physics.viscosity.infer_viscosity`.

    Returns
    -------
    UncertaintyBudget
        Rows only for inputs with a non-zero standard uncertainty.

    Notes
    -----
    Sensitivities are central differences of the model at x_i ± u(x_i); for a model linear
    over that span they equal the derivative. Half the curvature term,
    |f(x+u) − 2f(x) + f(x−u)|/2, is compared with the first-order contribution and a warning
    suggests :func:`monte_carlo` when it exceeds 10 %. Inputs are treated as uncorrelated.
    """
    x0 = _nominal(inputs, wall, drag)
    point = {k: v for k, (v, _) in x0.items()}
    mu0 = float(_model(point, x0, inputs, wall, drag))
    warnings: list[str] = []
    if inputs.dlnmu_dT_per_K is None and inputs.u_temperature_c > 0.0:
        warnings.append(
            "u_temperature_c is given without dlnmu_dT_per_K: the temperature term is not in the budget"
        )
    unknown = set(inputs.dof) - set(QUANTITIES)
    if unknown:
        raise ValueError(f"dof keys {sorted(unknown)} are unknown; expected symbols among {', '.join(QUANTITIES)}")
    raw: list[tuple[str, float, float, float, float | None]] = []
    for symbol, (value, u) in x0.items():
        if u == 0.0:
            continue
        up = float(_model({**point, symbol: value + u}, x0, inputs, wall, drag))
        down = float(_model({**point, symbol: value - u}, x0, inputs, wall, drag))
        c = (up - down) / (2.0 * u)
        curvature = abs(up - 2.0 * mu0 + down) / 2.0
        if curvature > NONLINEARITY_WARN * abs(c) * u:
            warnings.append(
                f"the model is non-linear in {QUANTITIES[symbol][0]} over ±u: use the Monte Carlo result"
            )
        dof = inputs.dof.get(symbol)
        raw.append((symbol, value, u, c, None if dof is None or math.isinf(dof) else float(dof)))
    variance = sum((c * u) ** 2 for _, _, u, c, _ in raw)
    u_c = math.sqrt(variance)
    ws = sum((c * u) ** 4 / dof for _, _, u, c, dof in raw if dof is not None)
    dof_eff = None if ws == 0.0 else variance**2 / ws
    k = 2.0 if dof_eff is None else float(stdtrit(dof_eff, 0.5 + COVERAGE_PROBABILITY / 2.0))
    if dof_eff is not None and dof_eff < DOF_WARN:
        warnings.append(f"only {dof_eff:.1f} effective degrees of freedom: k = {k:.2f} instead of 2; repeat the drop")
    rows = [
        BudgetRow(
            quantity=QUANTITIES[symbol][0],
            symbol=symbol,
            value=value,
            unit=QUANTITIES[symbol][1],
            standard_uncertainty=float(u),
            sensitivity=c,
            sensitivity_rel=c * value / mu0,
            contribution_rel=abs(c) * u / mu0,
            share=(c * u) ** 2 / variance if variance > 0.0 else 0.0,
            dof=dof,
        )
        for symbol, value, u, c, dof in raw
    ]
    rows.sort(key=lambda r: r.share, reverse=True)
    return UncertaintyBudget(
        mu_pa_s=mu0,
        combined_u_pa_s=u_c,
        combined_u_rel=u_c / mu0,
        dof_eff=dof_eff,
        k=k,
        coverage_probability=COVERAGE_PROBABILITY,
        expanded_U_pa_s=k * u_c,
        expanded_U_rel=k * u_c / mu0,
        rows=rows,
        dominant=rows[0].quantity if rows else "",
        warnings=warnings,
    )


@dataclass(frozen=True)
class MonteCarloResult(ResultDict):
    """Propagation of distributions (JCGM 101) through the viscosity model.

    Attributes
    ----------
    mu_pa_s : float
        Mean of the output sample, Pa·s.
    u_pa_s, u_rel : float
        Standard deviation of the sample, absolute and relative to the mean.
    interval_low_pa_s, interval_high_pa_s : float
        Probabilistically symmetric 95 % coverage interval.
    coverage_probability : float
        0.95.
    n_samples : int
        Number of draws.
    seed : int
        Seed of ``numpy.random.default_rng``.
    """

    mu_pa_s: float
    u_pa_s: float
    u_rel: float
    interval_low_pa_s: float
    interval_high_pa_s: float
    coverage_probability: float
    n_samples: int
    seed: int


def monte_carlo(
    inputs: ViscosityInputs,
    *,
    wall: str = "haberman-sayre",
    drag: str = "clift-grace-weber",
    n_samples: int = 200_000,
    seed: int = 0,
) -> MonteCarloResult:
    """Monte Carlo propagation (JCGM 101) of the same model as :func:`viscosity_budget`.

    Parameters
    ----------
    inputs : ViscosityInputs
        As for the budget; symbols listed in ``inputs.rectangular`` are drawn from a rectangular
        distribution of half-width √3·u, the others from a normal distribution.
    wall, drag : str
        Wall model and drag law.
    n_samples : int
        Number of draws (≥ 1000).
    seed : int
        Seed for ``numpy.random.default_rng``; the result is reproducible.

    Returns
    -------
    MonteCarloResult
    """
    if int(n_samples) < 1000:
        raise ValueError(f"n_samples = {n_samples!r} is too small; expected at least 1000 draws")
    unknown = set(inputs.rectangular) - set(QUANTITIES)
    if unknown:
        raise ValueError(f"rectangular names {sorted(unknown)} are unknown; expected symbols among {', '.join(QUANTITIES)}")
    x0 = _nominal(inputs, wall, drag)
    rng = np.random.default_rng(seed)
    draws: dict[str, float | Array] = {}
    for symbol, (value, u) in x0.items():
        if u == 0.0:
            draws[symbol] = value
        elif symbol in inputs.rectangular:
            half = math.sqrt(3.0) * u
            draws[symbol] = rng.uniform(value - half, value + half, int(n_samples))
        else:
            draws[symbol] = rng.normal(value, u, int(n_samples))
    mu = _model(draws, x0, inputs, wall, drag)
    mean = float(np.mean(mu))
    std = float(np.std(mu, ddof=1))
    low, high = np.quantile(mu, [(1.0 - MC_COVERAGE) / 2.0, (1.0 + MC_COVERAGE) / 2.0])
    return MonteCarloResult(mean, std, std / mean, float(low), float(high), MC_COVERAGE, int(n_samples), int(seed))
