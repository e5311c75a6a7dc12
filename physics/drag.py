"""Drag on a sphere: wall factors of a cylindrical tube, drag curves C_D(Re), end effects.

Everything here is creeping-flow or standard-drag-curve physics from the project's reference
sheet (``physics-references.md`` §2–§4); each formula names its source and validity range.
Quantities are SI and dimensionless; the Reynolds number is **diameter based**,
Re = ρ_f v d / μ, throughout.

Validity problems are returned as strings in a result's ``warnings`` list; non-physical input
(negative size, d/D ≥ 1, unknown model name) raises :class:`ValueError` naming the parameter.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from physics._results import ResultDict

__all__ = [
    "DRAG_LAWS",
    "STOKES_RE_MAX",
    "WALL_FLAG_LAMBDA",
    "WALL_MODELS",
    "WALL_WARN_LAMBDA",
    "DragCoefficient",
    "DragLaw",
    "EndEffect",
    "WallFactor",
    "WallModel",
    "bottom_exclusion_mm",
    "drag_coefficient",
    "drag_law_spread",
    "end_effect_screening",
    "inertia_factor",
    "ladenburg_end_factor",
    "plane_wall_drag_factor",
    "require_positive",
    "require_positive_array",
    "wall_factor",
    "wall_factor_value",
    "wall_model_spread",
]

ArrayLike = float | npt.NDArray[np.float64]

#: Upper end of the Stokes regime used for warnings, Re (diameter based). Common practice (lab
#: sheets check Re against 0.1); there the Oseen term 3Re/16 is 1.9 % (computed: Oseen).
STOKES_RE_MAX = 0.1

#: Diameter ratio above which the wall correction is large (> 26 % on v): warn.
#: Common practice, no source (physics-references.md §2, recommendation for the tool).
WALL_WARN_LAMBDA = 0.1
#: Diameter ratio above which a measurement is flagged (common practice, no source; §2).
WALL_FLAG_LAMBDA = 0.3

#: Tanner (1963): beyond one tube radius from a closed end the extra drag is below this fraction
#: of the wall-corrected drag (published: abstract, via scilit; authorship from memory).
TANNER_BOUND = 4.5e-3
#: Slowest axial decay rate of a Stokes disturbance in a pipe, exp(-4.47 z/R) (from memory).
PIPE_DECAY_RATE = 4.47


def require_positive(name: str, value: Any, expected: str = "a positive number") -> float:
    """Return ``value`` as a float, or raise if it is not a positive finite number.

    Parameters
    ----------
    name : str
        Parameter name used in the message (with its unit suffix, e.g. ``"d_m"``).
    value : float
        The value to check.
    expected : str
        What the caller expects, for the message (e.g. ``"a diameter in metres > 0"``).

    Returns
    -------
    float
        ``float(value)``.

    Raises
    ------
    ValueError
        One line naming the parameter, the bad value and the expectation.
    """
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} = {value!r} is not a number; expected {expected}") from None
    if not (math.isfinite(x) and x > 0.0):
        raise ValueError(f"{name} = {value!r} is not allowed; expected {expected}")
    return x


def require_positive_array(name: str, value: Any, expected: str = "positive numbers") -> npt.NDArray[np.float64]:
    """Return ``value`` as a float array, or raise if any element is not positive and finite.

    Parameters
    ----------
    name : str
        Parameter name used in the message.
    value : float or array_like, shape (n,)
        Values to check.
    expected : str
        What the caller expects, for the message.

    Returns
    -------
    ndarray
        ``np.asarray(value, dtype=float)`` (0-d for a scalar).

    Raises
    ------
    ValueError
        Naming the parameter and the first bad element.
    """
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"{name} = {value!r} is not numeric; expected {expected}") from None
    ok = np.isfinite(arr) & (arr > 0.0)
    if not np.all(ok):
        bad = arr[~ok].ravel()[0] if arr.ndim else arr
        raise ValueError(f"{name} = {float(bad)!r} is not allowed; expected {expected}")
    return arr


def _check_ratio(lam: float) -> float:
    """Validate a diameter ratio d/D (0 ≤ λ < 1)."""
    try:
        x = float(lam)
    except (TypeError, ValueError):
        raise ValueError(f"lam = {lam!r} is not a number; expected a diameter ratio d/D in [0, 1)") from None
    if not (math.isfinite(x) and 0.0 <= x < 1.0):
        raise ValueError(f"lam = {lam!r} is not allowed; expected a diameter ratio d/D in [0, 1) (ball narrower than the tube)")
    return x


# --------------------------------------------------------------------------------------------
# Wall factors f_w(λ) = v / v∞ for a sphere on the axis of a cylinder, creeping flow
# --------------------------------------------------------------------------------------------


def _haberman_sayre(lam: ArrayLike) -> ArrayLike:
    return (1 - 2.105 * lam + 2.0865 * lam**3 - 1.7068 * lam**5 + 0.72603 * lam**6) / (1 - 0.75857 * lam**5)


def _faxen(lam: ArrayLike) -> ArrayLike:
    return 1 - 2.10444 * lam + 2.08877 * lam**3 - 0.94813 * lam**5


def _bohlin(lam: ArrayLike) -> ArrayLike:
    return 1 - 2.10443 * lam + 2.08877 * lam**3 - 0.94813 * lam**5 - 1.372 * lam**6 + 3.87 * lam**8 - 4.19 * lam**10


def _francis(lam: ArrayLike) -> ArrayLike:
    return ((1 - lam) / (1 - 0.475 * lam)) ** 4


def _ladenburg(lam: ArrayLike) -> ArrayLike:
    return 1 / (1 + 2.4 * lam)


@dataclass(frozen=True)
class WallModel:
    """A wall-factor formula with its validity range.

    Attributes
    ----------
    name : str
        Model name used on the command line and in rig files.
    lam_max : float
        Largest diameter ratio d/D for which the formula is recommended.
    source : str
        Citation and source tag as in the reference sheet.
    """

    name: str
    lam_max: float
    source: str


#: Wall-factor models by name. Coefficients: physics-references.md §2 (all "from memory" there;
#: no published table could be checked).
WALL_MODELS: dict[str, WallModel] = {
    "haberman-sayre": WallModel(
        "haberman-sayre", 0.6, "Haberman & Sayre 1958, DTMB Report 1143 (from memory)"
    ),
    "faxen": WallModel("faxen", 0.3, "Faxén 1922, coefficients as in Happel & Brenner 1965 (from memory)"),
    "bohlin": WallModel("bohlin", 0.6, "Bohlin 1960, Trans. R. Inst. Technol. Stockholm 155 (from memory)"),
    "francis": WallModel("francis", 0.9, "Francis 1933, Physics 4, 403; semi-empirical (from memory)"),
    "ladenburg": WallModel("ladenburg", 0.05, "Ladenburg 1907, Ann. Phys. 23, 447, factor 1 + 2.4 d/D (from memory)"),
}

_WALL_FUNCS = {
    "haberman-sayre": _haberman_sayre,
    "faxen": _faxen,
    "bohlin": _bohlin,
    "francis": _francis,
    "ladenburg": _ladenburg,
}

#: Models whose spread around the chosen one is the wall-model uncertainty (§2 recommendation).
_WALL_SPREAD_MODELS = ("haberman-sayre", "bohlin", "francis")


def _wall_model(model: str) -> WallModel:
    if model not in WALL_MODELS:
        raise ValueError(f"wall model {model!r} is unknown; expected one of {', '.join(WALL_MODELS)}")
    return WALL_MODELS[model]


def wall_factor_value(lam: ArrayLike, model: str = "haberman-sayre") -> ArrayLike:
    """Wall factor f_w = v / v∞ as a bare number (vectorised, no warnings).

    Parameters
    ----------
    lam : float or ndarray, shape (n,)
        Diameter ratio λ = d/D, 0 ≤ λ < 1.
    model : str
        One of :data:`WALL_MODELS`.

    Returns
    -------
    float or ndarray, shape (n,)
        f_w (dimensionless, ≤ 1). Multiply an unbounded velocity by it to get the velocity in the tube.

    Raises
    ------
    ValueError
        Unknown model, λ outside [0, 1), or a formula that gives a non-positive factor there
        (Bohlin's series beyond λ ≈ 0.73).
    """
    _wall_model(model)
    arr = np.asarray(lam, dtype=float)
    if arr.ndim == 0:
        _check_ratio(float(arr))
    elif not np.all(np.isfinite(arr) & (arr >= 0.0) & (arr < 1.0)):
        bad = arr[~(np.isfinite(arr) & (arr >= 0.0) & (arr < 1.0))][0]
        _check_ratio(float(bad))
    value = _WALL_FUNCS[model](arr)
    if np.any(value <= 0.0):
        worst = float(np.max(arr[value <= 0.0])) if arr.ndim else float(arr)
        raise ValueError(
            f"lam = {worst:.4g} is outside the {model} wall formula (factor ≤ 0); "
            f"expected d/D ≤ {WALL_MODELS[model].lam_max} or the 'francis' model"
        )
    return float(value) if np.ndim(value) == 0 else value


@dataclass(frozen=True)
class WallFactor(ResultDict):
    """Wall factor of a sphere on the axis of a cylindrical tube (creeping flow).

    Attributes
    ----------
    value : float
        f_w = v / v∞ (dimensionless, < 1).
    drag_multiplier : float
        K_w = 1 / f_w, the factor by which the tube raises the drag.
    model : str
        Formula used (:data:`WALL_MODELS`).
    diameter_ratio : float
        λ = d/D.
    source : str
        Citation of the formula.
    warnings : list of str
        Validity problems (large correction, λ beyond the model's range).
    """

    value: float
    drag_multiplier: float
    model: str
    diameter_ratio: float
    source: str
    warnings: list[str] = field(default_factory=list)


def wall_factor(lam: float, model: str = "haberman-sayre") -> WallFactor:
    """Wall factor f_w(λ) = v/v∞ with validity warnings.

    Parameters
    ----------
    lam : float
        Diameter ratio λ = d/D of ball to tube inner diameter, 0 ≤ λ < 1.
    model : str
        ``"haberman-sayre"`` (default), ``"faxen"``, ``"bohlin"``, ``"francis"`` or
        ``"ladenburg"`` (factor 1 + 2.4 λ).

    Returns
    -------
    WallFactor
        The factor with its warnings: above λ = 0.1 the correction exceeds 26 %; above 0.3 the
        measurement is flagged (common practice, no source); beyond each model's own range
        (Ladenburg 0.05, Faxén 0.3, Haberman–Sayre/Bohlin 0.6, Francis 0.9) a warning names it.

    Raises
    ------
    ValueError
        λ outside [0, 1) or an unknown model.

    Notes
    -----
    Creeping flow, sphere on the axis, far from the ends. At Re above ≈ 0.2 the wall factor
    also depends on Re (Chhabra, Agarwal & Chaudhary 2003); the caller warns about that.
    """
    x = _check_ratio(lam)
    spec = _wall_model(model)
    value = float(wall_factor_value(x, model))
    warnings: list[str] = []
    if x > WALL_FLAG_LAMBDA:
        warnings.append(
            f"d/D = {x:.3f} exceeds {WALL_FLAG_LAMBDA}: the wall factor ({value:.3f}) dominates the result; "
            "use a wider tube or a smaller ball (common practice: flag above 0.3)"
        )
    elif x > WALL_WARN_LAMBDA:
        warnings.append(
            f"d/D = {x:.3f} exceeds {WALL_WARN_LAMBDA}: the wall correction changes the speed by "
            f"{(1 / value - 1) * 100:.0f} %; its model uncertainty matters (common practice: warn above 0.1)"
        )
    if x > spec.lam_max:
        warnings.append(
            f"the {model} wall formula is meant for d/D ≤ {spec.lam_max}, got {x:.3f}; "
            + ("use haberman-sayre or bohlin" if spec.lam_max < 0.6 else "use francis")
        )
    return WallFactor(value, 1.0 / value, model, x, spec.source, warnings)


def wall_model_spread(lam: float, model: str = "haberman-sayre") -> float:
    """Relative standard uncertainty of the wall factor from the spread of wall models.

    Parameters
    ----------
    lam : float
        Diameter ratio d/D.
    model : str
        The model actually used.

    Returns
    -------
    float
        u(f_w)/f_w: the largest relative deviation of Haberman–Sayre, Bohlin and Francis from
        the chosen model, taken as the half-width of a rectangular distribution, divided by √3
        (GUM 4.3.7, from memory). Models that are undefined at λ are skipped.

    Notes
    -----
    The reference sheet recommends reporting the spread between Haberman–Sayre and
    Bohlin/Francis as a model-uncertainty term (common practice, no source).
    """
    x = _check_ratio(lam)
    chosen = float(wall_factor_value(x, model))
    deviations = [0.0]
    for other in _WALL_SPREAD_MODELS:
        try:
            deviations.append(abs(float(wall_factor_value(x, other)) / chosen - 1.0))
        except ValueError:
            continue
    return max(deviations) / math.sqrt(3.0)


# --------------------------------------------------------------------------------------------
# Drag curves C_D(Re) = (24/Re) φ(Re)
# --------------------------------------------------------------------------------------------


def _phi_stokes(re: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    return np.ones_like(re)


def _phi_oseen(re: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    return 1.0 + 3.0 * re / 16.0


def _phi_proudman_pearson(re: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    return 1.0 + 3.0 * re / 16.0 + (9.0 / 160.0) * re**2 * np.log(re / 2.0)


def _phi_schiller_naumann(re: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    return 1.0 + 0.15 * re**0.687


def _phi_clift_grace_weber(re: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    # Table 5.2 of Clift, Grace & Weber (1978), published via two open code reproductions;
    # below Re = 0.01 the Oseen form, for continuity (physics-references.md §4). Each piece is
    # evaluated only where it applies.
    phi = np.empty_like(re)
    low = re < 0.01
    phi[low] = 1.0 + 3.0 * re[low] / 16.0
    mid = ~low & (re <= 20.0)
    r = re[mid]
    phi[mid] = 1.0 + 0.1315 * r ** (0.82 - 0.05 * np.log10(r))
    upper = (re > 20.0) & (re <= 260.0)
    phi[upper] = 1.0 + 0.1935 * re[upper] ** 0.6305
    for lo, hi, coefficients in _CGW_LOG_PIECES:
        m = (re > lo) & (re <= hi)
        phi[m] = 10.0 ** np.polyval(coefficients, np.log10(re[m])) * re[m] / 24.0
    return phi


#: log10 C_D = polynomial in w = log10 Re (highest power first) on (lo, hi]; the last piece is
#: extended beyond 3.38e5, where the table ends (the drag law's range says so).
_CGW_LOG_PIECES = (
    (260.0, 1.5e3, (0.1558, -1.1242, 1.6435)),
    (1.5e3, 1.2e4, (0.1049, -0.9295, 2.5558, -2.4571)),
    (1.2e4, 4.4e4, (-0.0636, 0.6370, -1.9181)),
    (4.4e4, np.inf, (-0.1546, 1.5809, -4.3390)),
)


@dataclass(frozen=True)
class DragLaw:
    """A drag correlation C_D(Re) = (24/Re) φ(Re) with its validity range.

    Attributes
    ----------
    name : str
        Law name used on the command line and in rig files.
    re_min, re_max : float
        Range of Re (diameter based) where the law is recommended.
    re_solve_max : float
        Largest Re where C_D falls monotonically, the upper end of the bracket when the force
        balance is inverted.
    source : str
        Citation and source tag.
    """

    name: str
    re_min: float
    re_max: float
    re_solve_max: float
    source: str


#: Drag laws by name (physics-references.md §4).
DRAG_LAWS: dict[str, DragLaw] = {
    "stokes": DragLaw("stokes", 0.0, STOKES_RE_MAX, 1.0e3, "Stokes 1851, C_D = 24/Re"),
    "oseen": DragLaw("oseen", 0.0, 0.5, 1.0e3, "Oseen 1910, (24/Re)(1 + 3Re/16) (from memory)"),
    "proudman-pearson": DragLaw(
        "proudman-pearson", 0.0, 0.5, 2.0,
        "Proudman & Pearson 1957, J. Fluid Mech. 2, 237 (from memory); diverges above Re ≈ 2",
    ),
    "schiller-naumann": DragLaw(
        "schiller-naumann", 0.2, 800.0, 1.0e3,
        "Schiller & Naumann 1933, Z. VDI 77, 318 (published via CFD documentation); over-corrects below Re ≈ 0.2",
    ),
    "clift-grace-weber": DragLaw(
        "clift-grace-weber", 0.0, 3.38e5, 1.0e3,
        "Clift, Grace & Weber 1978, Table 5.2 (published via code reproductions); Oseen form below Re = 0.01",
    ),
}

_PHI_FUNCS = {
    "stokes": _phi_stokes,
    "oseen": _phi_oseen,
    "proudman-pearson": _phi_proudman_pearson,
    "schiller-naumann": _phi_schiller_naumann,
    "clift-grace-weber": _phi_clift_grace_weber,
}


def _drag_law(law: str) -> DragLaw:
    if law not in DRAG_LAWS:
        raise ValueError(f"drag law {law!r} is unknown; expected one of {', '.join(DRAG_LAWS)}")
    return DRAG_LAWS[law]


def inertia_factor(re: ArrayLike, law: str = "clift-grace-weber") -> ArrayLike:
    """Inertia factor φ(Re) = C_D Re / 24, the drag relative to Stokes drag (vectorised).

    Parameters
    ----------
    re : float or ndarray, shape (n,)
        Reynolds number ρ_f v d / μ (diameter based), > 0.
    law : str
        One of :data:`DRAG_LAWS`.

    Returns
    -------
    float or ndarray, shape (n,)
        φ ≥ 1 (1 for Stokes). No range checks beyond Re > 0; use :func:`drag_coefficient`
        for warnings.
    """
    _drag_law(law)
    arr = np.asarray(re, dtype=float)
    if not np.all(np.isfinite(arr) & (arr > 0.0)):
        raise ValueError(f"re = {re!r} is not allowed; expected a positive Reynolds number")
    phi = _PHI_FUNCS[law](np.atleast_1d(arr))
    return float(phi[0]) if arr.ndim == 0 else phi


def _law_range_warning(re: float, law: str) -> list[str]:
    spec = DRAG_LAWS[law]
    if re > spec.re_max:
        return [f"Re = {re:.3g} is beyond the {law} drag law's range (Re ≤ {spec.re_max:g}); choose clift-grace-weber"]
    if re < spec.re_min:
        return [
            f"Re = {re:.3g} is below the {law} drag law's range (Re ≥ {spec.re_min:g}); "
            "it over-corrects there, choose oseen or clift-grace-weber"
        ]
    return []


@dataclass(frozen=True)
class DragCoefficient(ResultDict):
    """Drag coefficient of a rigid sphere at one Reynolds number.

    Attributes
    ----------
    value : float
        C_D = F / (½ ρ_f v² π d²/4).
    inertia_factor_phi : float
        φ = C_D Re/24, drag relative to Stokes drag.
    reynolds_number : float
        Re (diameter based).
    law : str
        Correlation used.
    source : str
        Citation of the correlation.
    warnings : list of str
        Re outside the law's range.
    """

    value: float
    inertia_factor_phi: float
    reynolds_number: float
    law: str
    source: str
    warnings: list[str] = field(default_factory=list)


def drag_coefficient(re: float, law: str = "clift-grace-weber") -> DragCoefficient:
    """Drag coefficient C_D(Re) of a rigid sphere, with a validity warning.

    Parameters
    ----------
    re : float
        Reynolds number ρ_f v d / μ (diameter based), > 0.
    law : str
        ``"stokes"`` (24/Re), ``"oseen"`` ((24/Re)(1 + 3Re/16)), ``"proudman-pearson"``,
        ``"schiller-naumann"`` ((24/Re)(1 + 0.15 Re^0.687)) or ``"clift-grace-weber"``
        (the standard drag curve of Clift, Grace & Weber 1978, Table 5.2).

    Returns
    -------
    DragCoefficient

    Raises
    ------
    ValueError
        Re not positive, or an unknown law.
    """
    x = require_positive("re", re, "a positive Reynolds number")
    spec = _drag_law(law)
    phi = float(inertia_factor(x, law))
    return DragCoefficient(24.0 * phi / x, phi, x, law, spec.source, _law_range_warning(x, law))


def drag_law_spread(re: float, law: str = "clift-grace-weber") -> float:
    """Relative standard uncertainty of the inertia factor φ from the spread of drag laws.

    Parameters
    ----------
    re : float
        Reynolds number (diameter based) at which the chosen law is used.
    law : str
        The law actually used.

    Returns
    -------
    float
        u(φ)/φ: the largest relative deviation from the chosen law's φ among the laws
        (other than Stokes) whose range contains Re, taken as the half-width of a rectangular
        distribution and divided by √3. With ``law="stokes"`` it therefore measures the
        neglected inertia correction.
    """
    x = require_positive("re", re, "a positive Reynolds number")
    chosen = float(inertia_factor(x, law))
    deviations = [0.0]
    for name, spec in DRAG_LAWS.items():
        if name != "stokes" and spec.re_min <= x <= spec.re_max:
            deviations.append(abs(float(inertia_factor(x, name)) / chosen - 1.0))
    return max(deviations) / math.sqrt(3.0)


# --------------------------------------------------------------------------------------------
# End effects
# --------------------------------------------------------------------------------------------


def bottom_exclusion_mm(tube_inner_diameter_mm: float) -> float:
    """Length above the bottom (and below the free surface) to leave out of the fit, mm.

    Parameters
    ----------
    tube_inner_diameter_mm : float
        Tube inner diameter D, mm.

    Returns
    -------
    float
        1 D in mm. Rule: discard positions closer than one tube diameter to the bottom and to
        the free surface (common practice, no source; twice Tanner's one-radius bound, where the
        extra drag is already < 0.45 %, physics-references.md §3).
    """
    return require_positive("tube_inner_diameter_mm", tube_inner_diameter_mm, "a tube inner diameter in mm > 0")


def plane_wall_drag_factor(a_over_h: float) -> float:
    """Drag multiplier K⊥ of a sphere approaching a rigid plane in unbounded liquid.

    Parameters
    ----------
    a_over_h : float
        x = a/h, sphere radius over the distance from its centre to the plane, 0 < x < 1.

    Returns
    -------
    float
        K⊥ = 1 / (1 − 9/8 x + 1/2 x³ − 57/100 x⁴ + 1/5 x⁵ + 7/200 x¹¹ − 1/25 x¹²)
        (Schäffer et al. 2007, Langmuir; published via a code comment). First order
        (Lorentz 1907, from memory): 1 + 9/8 x. Unscreened: inside a tube the end effect is much
        smaller, see :func:`end_effect_screening`.

    Raises
    ------
    ValueError
        x outside (0, 1) (the sphere would touch or cross the plane).
    """
    x = require_positive("a_over_h", a_over_h, "a/h in (0, 1): sphere radius over centre-to-plane distance")
    if x >= 1.0:
        raise ValueError(f"a_over_h = {a_over_h!r} is not allowed; expected a/h in (0, 1) (sphere clear of the plane)")
    return 1.0 / (1 - 9 / 8 * x + 0.5 * x**3 - 0.57 * x**4 + 0.2 * x**5 + 0.035 * x**11 - 0.04 * x**12)


def ladenburg_end_factor(d_m: float, liquid_height_m: float) -> float:
    """Ladenburg's end correction factor 1 + 3.3 r/h (for reporting only).

    Parameters
    ----------
    d_m : float
        Ball diameter, m.
    liquid_height_m : float
        Height h of the liquid column, m (some texts use the distance to the bottom).

    Returns
    -------
    float
        1 + 3.3 (d/2)/h: v∞ = v (1 + 2.4 r/R)(1 + 3.3 r/h) (Ladenburg 1907; published via a Q&A
        page reproducing the factor). Do **not** apply it inside a tube: Tanner (1963) showed the
        end drag is screened and lies well below Ladenburg's curve.
    """
    d = require_positive("d_m", d_m, "a ball diameter in metres > 0")
    h = require_positive("liquid_height_m", liquid_height_m, "a liquid column height in metres > 0")
    return 1.0 + 3.3 * (d / 2.0) / h


@dataclass(frozen=True)
class EndEffect(ResultDict):
    """Screening statement for the bottom or free-surface end effect inside a tube.

    Attributes
    ----------
    distance_to_end_m : float
        Distance of the ball centre from the end (bottom or surface), m.
    tube_radius_m : float
        Tube inner radius R, m.
    screened : bool
        True when the distance exceeds one tube radius (Tanner's bound applies).
    extra_drag_bound : float or None
        Upper bound on the extra drag relative to the wall-corrected drag when screened
        (Tanner 1963: 4.5e-3), else None.
    pipe_decay_estimate : float
        exp(−4.47 z/R): order of magnitude of the residual disturbance (from memory: slowest
        Stokes eigenmode in a pipe).
    statement : str
        One sentence for the report.
    warnings : list of str
        Set when the ball is closer than one tube radius (or one diameter) to the end.
    """

    distance_to_end_m: float
    tube_radius_m: float
    screened: bool
    extra_drag_bound: float | None
    pipe_decay_estimate: float
    statement: str
    warnings: list[str] = field(default_factory=list)


def end_effect_screening(distance_to_end_m: float, tube_d_m: float) -> EndEffect:
    """Whether the end of the liquid column (bottom or surface) disturbs the ball's speed.

    Parameters
    ----------
    distance_to_end_m : float
        Distance from the ball centre to the bottom or to the free surface, m (≥ 0).
    tube_d_m : float
        Tube inner diameter D, m.

    Returns
    -------
    EndEffect
        Screened (> one radius): extra drag < 4.5e-3 of the wall-corrected drag (Tanner 1963,
        J. Fluid Mech. 17, 161; numbers published in the abstract, authorship from memory).
        Closer than one radius: a warning (about 1.5× the drag at 0.25 R). Between one radius
        and one diameter: a note that the point lies in the 1 D exclusion zone
        (common practice).
    """
    dist = float(distance_to_end_m)
    if not (math.isfinite(dist) and dist >= 0.0):
        raise ValueError(f"distance_to_end_m = {distance_to_end_m!r} is not allowed; expected a distance in metres ≥ 0")
    tube_d = require_positive("tube_d_m", tube_d_m, "a tube inner diameter in metres > 0")
    radius = tube_d / 2.0
    decay = math.exp(-PIPE_DECAY_RATE * dist / radius)
    warnings: list[str] = []
    if dist > radius:
        statement = (
            f"ball {dist * 1e3:.1f} mm from the end, more than one tube radius ({radius * 1e3:.1f} mm): "
            f"extra end drag < {TANNER_BOUND * 100:g} % of the wall-corrected drag (Tanner 1963)"
        )
        if dist < tube_d:
            warnings.append(
                f"ball within one tube diameter ({tube_d * 1e3:.1f} mm) of the end: inside the 1 D exclusion zone (common practice)"
            )
        return EndEffect(dist, radius, True, TANNER_BOUND, decay, statement, warnings)
    statement = (
        f"ball {dist * 1e3:.1f} mm from the end, within one tube radius ({radius * 1e3:.1f} mm): "
        "end drag is not negligible (Tanner 1963: about 1.5 times the wall-corrected drag at 0.25 R)"
    )
    warnings.append(statement + "; leave these positions out of the fit")
    return EndEffect(dist, radius, False, None, decay, statement, warnings)
