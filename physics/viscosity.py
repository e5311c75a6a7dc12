"""Viscosity from a terminal velocity by the full force balance, and the forward model.

Force balance on a sphere at terminal speed (physics-references.md §1, §4):

    |ρ_s − ρ_f| g π d³/6 = C_D(Re) · ½ ρ_f v∞² · π d²/4,    Re = ρ_f v∞ d / μ,

with v∞ = v / f_w(d/D) the speed in unbounded liquid (wall factor applied to the measured
speed first). The measured speed fixes C_D without μ, C_D = 4 |Δρ| g d / (3 ρ_f v∞²); the drag
law C_D(Re) = (24/Re) φ(Re) is then solved for Re by bracketed root finding on ln Re (a root
exists in [Re_Stokes, Re_max] because φ ≥ 1 and C_D falls monotonically there), and
μ = ρ_f v∞ d / Re. With the Stokes law this is exactly μ = |Δρ| g d² f_w / (18 v); with Oseen
it reproduces the closed form μ = μ_Stokes − (3/16) ρ_f v∞ d. Combining the creeping-flow wall
factor and the inertia factor as a product is an approximation valid for small Re and λ
(common practice, no source).

Rising spheres (ρ_s < ρ_f) use |Δρ|; speeds are positive, the direction is reported.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, NamedTuple

import numpy as np
import numpy.typing as npt

from physics._results import ResultDict
from physics.drag import (
    DRAG_LAWS,
    WALL_MODELS,
    drag_coefficient,
    inertia_factor,
    require_positive,
    require_positive_array,
    wall_factor,
    wall_factor_value,
)
from physics.gravity import STANDARD_GRAVITY_M_S2

__all__ = [
    "ForceBalance",
    "TerminalVelocityPrediction",
    "ViscosityResult",
    "force_balance",
    "infer_viscosity",
    "reynolds_number",
    "stokes_terminal_velocity",
    "stokes_viscosity",
    "terminal_velocity",
]

Array = npt.NDArray[np.float64]

#: Above this Re the creeping-flow wall factor becomes Re dependent (physics-references.md §2:
#: "Re above ~0.1–0.2", from memory; Chhabra, Agarwal & Chaudhary 2003 published scope).
WALL_FACTOR_RE_MAX = 0.2

#: The root search stops when the bracket on ln Re is this narrow (double precision of ln Re ~ 1e-15).
_LN_RE_TOL = 1e-14
_MAX_ITERATIONS = 200


#: Rounding allowance on the log residual of the force balance (a few ulps of ln(C_D Re²)).
_LN_ROUNDING = 1e-12

def _density_difference(rho_s_kg_m3: Any, rho_f_kg_m3: Any) -> tuple[Array, Array, Array]:
    rho_s = require_positive_array("rho_s_kg_m3", rho_s_kg_m3, "a ball density in kg/m³ > 0")
    rho_f = require_positive_array("rho_f_kg_m3", rho_f_kg_m3, "a liquid density in kg/m³ > 0")
    drho = np.abs(rho_s - rho_f)
    if np.any(drho == 0.0):
        raise ValueError(
            f"rho_s_kg_m3 = {float(np.ravel(rho_s)[0])!r} equals rho_f_kg_m3: a neutrally buoyant ball has no "
            "terminal velocity; expected a ball denser or lighter than the liquid"
        )
    return rho_s, rho_f, drho


def stokes_terminal_velocity(
    mu_pa_s: float, d_m: float, rho_s_kg_m3: float, rho_f_kg_m3: float, g_m_s2: float = STANDARD_GRAVITY_M_S2
) -> float:
    """Stokes terminal speed in unbounded liquid, v∞ = |ρ_s − ρ_f| g d² / (18 μ).

    Parameters
    ----------
    mu_pa_s : float
        Dynamic viscosity, Pa·s.
    d_m : float
        Ball diameter, m.
    rho_s_kg_m3, rho_f_kg_m3 : float
        Ball and liquid density, kg/m³.
    g_m_s2 : float
        Gravitational acceleration, m/s².

    Returns
    -------
    float
        Speed in m/s (positive; the ball falls when ρ_s > ρ_f and rises otherwise).
    """
    mu = require_positive("mu_pa_s", mu_pa_s, "a viscosity in Pa·s > 0")
    d = require_positive("d_m", d_m, "a ball diameter in metres > 0")
    g = require_positive("g_m_s2", g_m_s2, "a gravitational acceleration in m/s² > 0")
    drho = float(_density_difference(rho_s_kg_m3, rho_f_kg_m3)[2])
    return drho * g * d**2 / (18.0 * mu)


def stokes_viscosity(
    v_m_s: float, d_m: float, rho_s_kg_m3: float, rho_f_kg_m3: float, g_m_s2: float = STANDARD_GRAVITY_M_S2
) -> float:
    """Uncorrected Stokes viscosity μ = |ρ_s − ρ_f| g d² / (18 v).

    Parameters
    ----------
    v_m_s : float
        Terminal speed, m/s (positive).
    d_m : float
        Ball diameter, m.
    rho_s_kg_m3, rho_f_kg_m3 : float
        Ball and liquid density, kg/m³.
    g_m_s2 : float
        Gravitational acceleration, m/s².

    Returns
    -------
    float
        μ in Pa·s, with no wall or inertia correction (prefactor 2/9 in radius form, not 1/9 or 4/9).
    """
    v = require_positive("v_m_s", v_m_s, "a terminal speed in m/s > 0")
    d = require_positive("d_m", d_m, "a ball diameter in metres > 0")
    g = require_positive("g_m_s2", g_m_s2, "a gravitational acceleration in m/s² > 0")
    drho = float(_density_difference(rho_s_kg_m3, rho_f_kg_m3)[2])
    return drho * g * d**2 / (18.0 * v)


def reynolds_number(v_m_s: float, d_m: float, rho_f_kg_m3: float, mu_pa_s: float) -> float:
    """Sphere Reynolds number, diameter based: Re = ρ_f v d / μ.

    Parameters
    ----------
    v_m_s : float
        Speed, m/s.
    d_m : float
        Ball diameter, m.
    rho_f_kg_m3 : float
        Liquid density, kg/m³.
    mu_pa_s : float
        Dynamic viscosity, Pa·s.

    Returns
    -------
    float
        Re (dimensionless).
    """
    v = require_positive("v_m_s", v_m_s, "a speed in m/s > 0")
    d = require_positive("d_m", d_m, "a ball diameter in metres > 0")
    rho_f = require_positive("rho_f_kg_m3", rho_f_kg_m3, "a liquid density in kg/m³ > 0")
    mu = require_positive("mu_pa_s", mu_pa_s, "a viscosity in Pa·s > 0")
    return rho_f * v * d / mu


def _root_ln(residual: Callable[[Array], Array], lo: Array, hi: Array) -> Array:
    """Root of ``residual`` in ln Re on the bracket [lo, hi] (elementwise), Illinois method.

    Regula falsi with the Illinois modification: the root stays bracketed at every step, as in
    bisection, but convergence is superlinear. The caller guarantees a sign change.
    """
    a, b = np.log(lo), np.log(hi)
    fa, fb = residual(lo), residual(hi)
    for _ in range(_MAX_ITERATIONS):
        done = (fb == 0.0) | (np.abs(b - a) <= _LN_RE_TOL * np.maximum(1.0, np.abs(b)))
        if np.all(done):
            break
        denom = fb - fa
        c = np.where(denom != 0.0, b - fb * (b - a) / np.where(denom != 0.0, denom, 1.0), 0.5 * (a + b))
        c = np.where(done, b, c)
        fc = residual(np.exp(c))
        flip = np.sign(fc) != np.sign(fb)
        a_new = np.where(flip, b, a)
        fa_new = np.where(flip, fb, 0.5 * fa)
        a, fa = np.where(done, a, a_new), np.where(done, fa, fa_new)
        b, fb = np.where(done, b, c), np.where(done, fb, fc)
    return np.exp(b)


def _check_names(wall: str, drag: str) -> None:
    if wall not in WALL_MODELS:
        raise ValueError(f"wall = {wall!r} is unknown; expected one of {', '.join(WALL_MODELS)}")
    if drag not in DRAG_LAWS:
        raise ValueError(f"drag = {drag!r} is unknown; expected one of {', '.join(DRAG_LAWS)}")


class ForceBalance(NamedTuple):
    """Solution of the force balance (arrays of the broadcast input shape).

    Attributes
    ----------
    mu_pa_s : ndarray
        Dynamic viscosity, Pa·s.
    reynolds_number : ndarray
        Re = ρ_f v∞ d / μ at the unbounded speed, where the drag law is evaluated.
    wall_factor : ndarray
        f_w applied (1 without a tube).
    inertia_factor_phi : ndarray
        φ = C_D Re / 24 at the solution (1 for Stokes).
    v_unbounded_m_s : ndarray
        v∞ = v / f_w, m/s.
    """

    mu_pa_s: Array
    reynolds_number: Array
    wall_factor: Array
    inertia_factor_phi: Array
    v_unbounded_m_s: Array


def force_balance(
    v_m_s: float | Array,
    d_m: float | Array,
    rho_s_kg_m3: float | Array,
    rho_f_kg_m3: float | Array,
    *,
    tube_d_m: float | Array | None = None,
    g_m_s2: float | Array = STANDARD_GRAVITY_M_S2,
    wall: str = "haberman-sayre",
    drag: str = "clift-grace-weber",
    wall_factor_scale: float | Array = 1.0,
    inertia_scale: float | Array = 1.0,
) -> ForceBalance:
    """Solve the force balance for μ (vectorised; the model behind :func:`infer_viscosity`).

    Parameters
    ----------
    v_m_s : float or ndarray, shape (n,)
        Measured terminal speed in the tube, m/s (positive).
    d_m : float or ndarray, shape (n,)
        Ball diameter, m.
    rho_s_kg_m3, rho_f_kg_m3 : float or ndarray, shape (n,)
        Ball and liquid density, kg/m³.
    tube_d_m : float or ndarray, optional
        Tube inner diameter, m; None for unbounded liquid (no wall factor).
    g_m_s2 : float or ndarray
        Gravitational acceleration, m/s².
    wall : str
        Wall-factor model (:data:`physics.drag.WALL_MODELS`).
    drag : str
        Drag law (:data:`physics.drag.DRAG_LAWS`).
    wall_factor_scale : float or ndarray
        Multiplier on f_w (1 = the model as is); lets the uncertainty budget perturb the wall
        model through this same function.
    inertia_scale : float or ndarray
        Multiplier on φ (1 = the law as is), for the inertia-model uncertainty.

    Returns
    -------
    ForceBalance
        Arrays broadcast over the inputs. No validity warnings here; see :func:`infer_viscosity`.

    Raises
    ------
    ValueError
        Non-physical input, or a speed so high that Re would exceed the range where the drag
        curve is monotonic (1000; 2 for Proudman–Pearson).
    """
    _check_names(wall, drag)
    v = require_positive_array("v_m_s", v_m_s, "a terminal speed in m/s > 0")
    d = require_positive_array("d_m", d_m, "a ball diameter in metres > 0")
    g = require_positive_array("g_m_s2", g_m_s2, "a gravitational acceleration in m/s² > 0")
    _, rho_f, drho = _density_difference(rho_s_kg_m3, rho_f_kg_m3)
    s_w = require_positive_array("wall_factor_scale", wall_factor_scale, "a positive multiplier")
    s_phi = require_positive_array("inertia_scale", inertia_scale, "a positive multiplier")
    if tube_d_m is None:
        f_w: Array = np.ones_like(v * d)
    else:
        tube = require_positive_array("tube_d_m", tube_d_m, "a tube inner diameter in metres > 0")
        f_w = np.asarray(wall_factor_value(d / tube, wall), dtype=float) * s_w
    v_inf = v / f_w
    cd_target = 4.0 * drho * g * d / (3.0 * rho_f * v_inf**2)
    cd_b, s_phi_b = np.broadcast_arrays(cd_target, s_phi)
    shape = cd_b.shape
    cd_target = np.atleast_1d(cd_b).astype(float).ravel()
    s_phi_b = np.atleast_1d(s_phi_b).astype(float).ravel()

    def residual(re: Array) -> Array:
        return np.log(24.0 * s_phi_b * np.asarray(inertia_factor(re, drag)) / re) - np.log(cd_target)

    re_max = DRAG_LAWS[drag].re_solve_max
    lo = 24.0 / cd_target * np.minimum(1.0, s_phi_b)
    hi = np.full_like(lo, re_max)
    bad = (lo >= hi) | (residual(hi) > 0.0)
    if np.any(bad):
        v_bad = float(np.broadcast_to(v, shape).ravel()[np.argmax(bad)])
        raise ValueError(
            f"v_m_s = {v_bad!r} is too fast for this ball and liquid: the {drag} drag curve balances the forces at "
            f"no Re ≤ {re_max:g}; expected a slower sphere (a more viscous liquid or a smaller ball)"
        )
    re = _root_ln(residual, lo, hi).reshape(shape)
    mu = rho_f * v_inf * d / re
    phi = np.asarray(s_phi * np.asarray(inertia_factor(re, drag)), dtype=float)
    return ForceBalance(
        np.broadcast_to(mu, shape).astype(float),
        re,
        np.broadcast_to(f_w, shape).astype(float),
        np.broadcast_to(phi, shape).astype(float),
        np.broadcast_to(v_inf, shape).astype(float),
    )


def _regime_warnings(re: float, drag: str, tube_d_m: float | None, lam: float) -> list[str]:
    warnings = list(drag_coefficient(re, drag).warnings)
    if tube_d_m is not None and re > WALL_FACTOR_RE_MAX:
        warnings.append(
            f"Re = {re:.3g} > {WALL_FACTOR_RE_MAX}: the creeping-flow wall factor (d/D = {lam:.3f}) also depends on Re "
            "there, and wall and inertia corrections are combined as a product (an approximation)"
        )
    return warnings


@dataclass(frozen=True)
class ViscosityResult(ResultDict):
    """Viscosity inferred from a terminal speed, with every correction named.

    Attributes
    ----------
    mu_pa_s : float
        Dynamic viscosity from the full force balance, Pa·s.
    stokes_viscosity_pa_s : float
        Bare Stokes value |Δρ| g d²/(18 v) from the measured speed, no corrections, Pa·s.
    reynolds_number : float
        Re = ρ_f v∞ d / μ at the unbounded speed (where the drag law is evaluated).
    wall_factor : float or None
        f_w = v / v∞ applied, None without a tube.
    inertia_factor_phi : float
        φ = C_D Re/24 of the drag law at the solution (1 for Stokes).
    v_m_s : float
        Measured speed, m/s.
    v_unbounded_m_s : float
        v / f_w, m/s.
    direction : str
        "down" (ρ_s > ρ_f) or "up".
    wall_model : str or None
        Wall model used (None without a tube).
    drag_law : str
        Drag law used.
    g_m_s2 : float
        Gravity used, m/s².
    corrections : dict of str to float
        Every factor applied, by name: ``wall_factor`` (f_w) and ``inertia_factor_phi`` (φ,
        absent for the Stokes law).
    warnings : list of str
        Validity-range problems.
    """

    mu_pa_s: float
    stokes_viscosity_pa_s: float
    reynolds_number: float
    wall_factor: float | None
    inertia_factor_phi: float
    v_m_s: float
    v_unbounded_m_s: float
    direction: str
    wall_model: str | None
    drag_law: str
    g_m_s2: float
    corrections: dict[str, float] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)


def infer_viscosity(
    v_m_s: float,
    d_m: float,
    rho_s_kg_m3: float,
    rho_f_kg_m3: float,
    *,
    tube_d_m: float | None = None,
    g_m_s2: float = STANDARD_GRAVITY_M_S2,
    wall: str = "haberman-sayre",
    drag: str = "clift-grace-weber",
) -> ViscosityResult:
    """Viscosity from a measured terminal speed: wall factor, then the full force balance.

    Parameters
    ----------
    v_m_s : float
        Terminal speed measured in the tube, m/s (positive, whether falling or rising).
    d_m : float
        Ball diameter, m.
    rho_s_kg_m3, rho_f_kg_m3 : float
        Ball and liquid density, kg/m³ (ρ_s < ρ_f: a rising sphere).
    tube_d_m : float, optional
        Tube inner diameter, m. None: unbounded liquid, no wall factor.
    g_m_s2 : float
        Local gravitational acceleration, m/s² (:func:`physics.gravity.local_gravity`).
    wall : str
        Wall model: "haberman-sayre" (default), "faxen", "bohlin", "francis", "ladenburg".
    drag : str
        Drag law: "clift-grace-weber" (default), "oseen", "proudman-pearson",
        "schiller-naumann", "stokes".

    Returns
    -------
    ViscosityResult

    Raises
    ------
    ValueError
        Non-positive sizes, speeds or densities, equal densities, d/D ≥ 1, unknown model names,
        or a speed beyond the invertible range of the drag curve.

    Examples
    --------
    >>> r = infer_viscosity(9.271029e-3, 2e-3, 7810, 1261, tube_d_m=50e-3, drag="stokes")
    >>> round(r.mu_pa_s, 4)
    1.41
    """
    v = require_positive("v_m_s", v_m_s, "a terminal speed in m/s > 0")
    d = require_positive("d_m", d_m, "a ball diameter in metres > 0")
    g = require_positive("g_m_s2", g_m_s2, "a gravitational acceleration in m/s² > 0")
    _check_names(wall, drag)
    warnings: list[str] = []
    lam = 0.0
    if tube_d_m is not None:
        tube = require_positive("tube_d_m", tube_d_m, "a tube inner diameter in metres > 0")
        lam = d / tube
        if lam >= 1.0:
            raise ValueError(f"tube_d_m = {tube_d_m!r} is not larger than d_m = {d_m!r}; expected a tube wider than the ball")
        warnings.extend(wall_factor(lam, wall).warnings)
    sol = force_balance(v, d, rho_s_kg_m3, rho_f_kg_m3, tube_d_m=tube_d_m, g_m_s2=g, wall=wall, drag=drag)
    mu, re = float(sol.mu_pa_s), float(sol.reynolds_number)
    f_w, phi = float(sol.wall_factor), float(sol.inertia_factor_phi)
    warnings.extend(_regime_warnings(re, drag, tube_d_m, lam))
    corrections: dict[str, float] = {}
    if tube_d_m is not None:
        corrections["wall_factor"] = f_w
    if drag != "stokes":
        corrections["inertia_factor_phi"] = phi
    return ViscosityResult(
        mu_pa_s=mu,
        stokes_viscosity_pa_s=stokes_viscosity(v, d, rho_s_kg_m3, rho_f_kg_m3, g),
        reynolds_number=re,
        wall_factor=f_w if tube_d_m is not None else None,
        inertia_factor_phi=phi,
        v_m_s=v,
        v_unbounded_m_s=float(sol.v_unbounded_m_s),
        direction="down" if float(rho_s_kg_m3) > float(rho_f_kg_m3) else "up",
        wall_model=wall if tube_d_m is not None else None,
        drag_law=drag,
        g_m_s2=g,
        corrections=corrections,
        warnings=warnings,
    )


@dataclass(frozen=True)
class TerminalVelocityPrediction(ResultDict):
    """Terminal speed predicted for a known viscosity (forward model, e.g. for ``fallcam plan``).

    Attributes
    ----------
    v_m_s : float
        Predicted speed in the tube, m/s.
    v_unbounded_m_s : float
        Speed in unbounded liquid with the drag law, m/s.
    v_stokes_m_s : float
        Bare Stokes speed in unbounded liquid, m/s.
    reynolds_number : float
        Re = ρ_f v∞ d / μ.
    wall_factor : float or None
        f_w (None without a tube).
    inertia_factor_phi : float
        φ of the drag law at the solution.
    direction : str
        "down" or "up".
    corrections : dict of str to float
        Factors applied, as in :class:`ViscosityResult`.
    warnings : list of str
        Validity problems (large d/D, Re beyond the law or beyond the creeping-flow wall factor).
    """

    v_m_s: float
    v_unbounded_m_s: float
    v_stokes_m_s: float
    reynolds_number: float
    wall_factor: float | None
    inertia_factor_phi: float
    direction: str
    corrections: dict[str, float] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)


def terminal_velocity(
    mu_pa_s: float,
    d_m: float,
    rho_s_kg_m3: float,
    rho_f_kg_m3: float,
    *,
    tube_d_m: float | None = None,
    g_m_s2: float = STANDARD_GRAVITY_M_S2,
    wall: str = "haberman-sayre",
    drag: str = "clift-grace-weber",
) -> TerminalVelocityPrediction:
    """Terminal speed of a sphere for a given viscosity: the inverse of :func:`infer_viscosity`.

    Parameters
    ----------
    mu_pa_s : float
        Dynamic viscosity, Pa·s.
    d_m : float
        Ball diameter, m.
    rho_s_kg_m3, rho_f_kg_m3 : float
        Ball and liquid density, kg/m³.
    tube_d_m : float, optional
        Tube inner diameter, m (None: unbounded liquid).
    g_m_s2 : float
        Gravitational acceleration, m/s².
    wall, drag : str
        Wall model and drag law, as in :func:`infer_viscosity`.

    Returns
    -------
    TerminalVelocityPrediction

    Notes
    -----
    Solves C_D(Re) Re² = (4/3) Ar, Ar = ρ_f |Δρ| g d³ / μ², for Re by bracketed root finding on
    ln Re (24 φ(Re) Re increases with Re; the root lies in [Re_S/φ(Re_S), Re_S] with
    Re_S = Ar/18 the Stokes value), then v∞ = Re μ / (ρ_f d) and v = f_w v∞.
    """
    mu = require_positive("mu_pa_s", mu_pa_s, "a viscosity in Pa·s > 0")
    d = require_positive("d_m", d_m, "a ball diameter in metres > 0")
    g = require_positive("g_m_s2", g_m_s2, "a gravitational acceleration in m/s² > 0")
    _check_names(wall, drag)
    _, rho_f_arr, drho_arr = _density_difference(rho_s_kg_m3, rho_f_kg_m3)
    rho_f, drho = float(rho_f_arr), float(drho_arr)
    warnings: list[str] = []
    f_w: float | None = None
    lam = 0.0
    if tube_d_m is not None:
        tube = require_positive("tube_d_m", tube_d_m, "a tube inner diameter in metres > 0")
        lam = d / tube
        if lam >= 1.0:
            raise ValueError(f"tube_d_m = {tube_d_m!r} is not larger than d_m = {d_m!r}; expected a tube wider than the ball")
        wf = wall_factor(lam, wall)
        f_w = wf.value
        warnings.extend(wf.warnings)
    archimedes = rho_f * drho * g * d**3 / mu**2
    target = math.log(4.0 * archimedes / 3.0)

    def residual(re: Array) -> Array:
        return np.log(24.0 * np.asarray(inertia_factor(re, drag)) * re) - target

    re_max = DRAG_LAWS[drag].re_solve_max
    hi = min(archimedes / 18.0, re_max)
    r_hi = float(residual(np.array([hi]))[0])
    if r_hi < -_LN_ROUNDING:
        raise ValueError(
            f"mu_pa_s = {mu_pa_s!r} gives Re > {re_max:g} for this ball and liquid, beyond the {drag} drag curve's "
            "invertible range; expected a more viscous liquid or a smaller ball"
        )
    lo = hi / float(inertia_factor(hi, drag))
    # Stokes drag (φ ≡ 1): the upper bracket is the solution itself, up to rounding
    re = hi if abs(r_hi) <= _LN_ROUNDING else float(_root_ln(residual, np.array([lo]), np.array([hi]))[0])
    phi = float(inertia_factor(re, drag))
    v_inf = re * mu / (rho_f * d)
    warnings.extend(_regime_warnings(re, drag, tube_d_m, lam))
    corrections: dict[str, float] = {}
    if f_w is not None:
        corrections["wall_factor"] = f_w
    if drag != "stokes":
        corrections["inertia_factor_phi"] = phi
    return TerminalVelocityPrediction(
        v_m_s=v_inf * (f_w if f_w is not None else 1.0),
        v_unbounded_m_s=v_inf,
        v_stokes_m_s=drho * g * d**2 / (18.0 * mu),
        reynolds_number=re,
        wall_factor=f_w,
        inertia_factor_phi=phi,
        direction="down" if float(rho_s_kg_m3) > float(rho_f_kg_m3) else "up",
        corrections=corrections,
        warnings=warnings,
    )
