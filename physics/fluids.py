"""Reference liquids: water (IAPWS) and glycerol–water (Cheng 2008, Volk & Kähler 2018).

Models (sources as in physics-references.md §6):

- **water** at p = 0.101325 MPa: density from IAPWS-95 (Wagner & Pruß, J. Phys. Chem. Ref. Data 31
  (2002) 387), viscosity from the IAPWS Formulation 2008 (Huber et al., J. Phys. Chem. Ref. Data 38
  (2009) 101), both through the ``iapws`` package; liquid from 0 °C to 99.97 °C.
- **glycerol-water**: viscosity from Cheng, Ind. Eng. Chem. Res. 47 (2008) 3285, eqs. 6, 21, 22
  (stated validity 0–100 % mass fraction, 0–100 °C; optionally with the IAPWS value as the water
  term); density from Volk & Kähler, Exp. Fluids 59:75 (2018) (data basis 15–30 °C, accuracy
  < 0.07 % there, "assumed a good approximation" 0–100 °C).
- **glycerol**: glycerol-water with mass fraction 1.

Temperatures are in °C, viscosities in Pa·s (SI) at the public boundary, densities in kg/m³.
Validity-range problems are returned as strings in ``warnings``; non-physical input raises
``ValueError`` naming the parameter.
"""

from __future__ import annotations

import functools
import math
from dataclasses import asdict, dataclass, field

import iapws
import numpy as np
from iapws._iapws import _Viscosity
from scipy.optimize import brentq

from physics.drag import require_positive

__all__ = [
    "FLUID_NAMES",
    "FluidState",
    "GlycerolFraction",
    "fluid_state",
    "water_viscosity_pa_s",
    "iapws2008_viscosity_pa_s",
    "cheng_water_viscosity_pa_s",
    "cheng_glycerol_viscosity_pa_s",
    "cheng_viscosity_pa_s",
    "volk_density_kg_m3",
    "glycerol_fraction_for_viscosity",
]

FLUID_NAMES = ("water", "glycerol-water", "glycerol")

_P_ATM_MPA = 0.101325
_KELVIN = 273.15
_WATER_T_MIN_C = 0.0
_WATER_T_MAX_C = 99.97  # boiling point at 0.101325 MPa (IAPWS-95: liquid up to 99.974 °C)
# Hard limits for the glycerol-water formulas: our own choice, 50 K beyond Cheng's stated
# 0–100 °C range; inside it only a warning is given, outside the correlations are not used at all.
_GLY_T_HARD_MIN_C = -50.0
_GLY_T_HARD_MAX_C = 150.0
_CHENG_T_RANGE_C = (0.0, 100.0)
_VOLK_T_BASIS_C = (15.0, 30.0)
_DT_K = 1e-3  # central-difference step for d ln μ / dT (relative error ~1e-8 for these smooth formulas)
_DW = 1e-5  # central-difference step in mass fraction for ln μ (smooth in w)
# Density: secant over ±1 wt% — Volk's contraction term sin(w^1.31 π)^0.81 has an infinite slope
# at w = 1, so a local derivative there is meaningless; the secant 0.99 → 1 at 20 °C is the
# sheet's "≈ 2.25 kg/m³ per wt%" (§6.6), and u(w) is usually 0.1–1 wt%.
_DW_RHO = 1e-2

# Model uncertainties of the references themselves (relative, k = 1).
# Cheng reproduces the Segur & Oberstar (Dow) table within ±3.5 % (sheet §6.1); taken as the
# half-width of a rectangular distribution (common practice) → u = 3.5 %/√3.
_CHENG_U_REL = 0.035 / math.sqrt(3.0)
_CHENG_U_NOTE = ("Cheng (2008) agrees with Segur & Oberstar (1951) within ±3.5 %; taken as a "
                 "rectangular half-width → u_rel = 2.0 % (common practice)")
# IAPWS 2008: expanded uncertainty about 1 % for liquid water at 0.1 MPa (from memory: IAPWS
# R12-08 uncertainty figure), taken as k = 2 → u_rel = 0.5 %.
_IAPWS_MU_U_REL = 0.005
_IAPWS_MU_U_NOTE = ("IAPWS 2008 viscosity: about 1 % expanded uncertainty at 0.1 MPa (from memory: "
                    "IAPWS R12-08), taken as k = 2 → u_rel = 0.5 %")
# Volk & Kähler: accuracy < 0.07 % in 15–30 °C (published), taken as a rectangular half-width.
_VOLK_U_REL = 0.0007 / math.sqrt(3.0)
# IAPWS-95 liquid density near ambient: about 1 ppm (from memory: Wagner & Pruß 2002).
_IAPWS95_RHO_U_REL = 1e-6

# Refractive index at 589 nm, 20 °C, and dn/dT (sheet §6.7, published: International Tables for
# Crystallography Vol. C, Table 3.3.2.1). Mixtures: linear in mass fraction (derived, assuming
# near-linearity); an error of 0.005 in n changes a tube-front scale factor by about 1e-4.
_N_WATER_20, _DN_DT_WATER = 1.333, -1.0e-4
_N_GLYCEROL_20, _DN_DT_GLYCEROL = 1.473, -2.2e-4


@dataclass(frozen=True)
class FluidState:
    """Density and viscosity of a reference liquid at one temperature (and composition).

    Attributes
    ----------
    model : str
        ``"water"``, ``"glycerol-water"`` or ``"glycerol"``.
    temperature_c : float
        Temperature, °C.
    density_kg_m3 : float
        Density, kg/m³.
    viscosity_pa_s : float
        Dynamic viscosity, Pa·s.
    dlnmu_dT_per_K : float
        d ln μ / dT at this state, 1/K (negative: e.g. −0.0923 for glycerol at 20 °C).
    glycerol_mass_fraction : float
        Glycerol mass fraction w (0 for water).
    reference_u_rel : float
        Relative standard uncertainty (k = 1) of ``viscosity_pa_s`` from the model itself.
    reference_u_note : str
        Where ``reference_u_rel`` comes from.
    density_u_rel : float
        Relative standard uncertainty (k = 1) of ``density_kg_m3`` from the model itself.
    drho_dT_kg_m3_per_K : float
        ∂ρ/∂T at fixed composition, kg/m³/K.
    drho_dw_kg_m3 : float
        ∂ρ/∂w at fixed temperature, kg/m³ per unit mass fraction (0 for water); a secant over
        ±0.01 in w, because the density model's slope is infinite at w = 1.
    dlnmu_dw : float
        ∂ ln μ / ∂w at fixed temperature, per unit mass fraction (0 for water).
    refractive_index : float
        Refractive index at about 589 nm (IAPWS formulation for water; linear mixing of
        sheet §6.7 values for glycerol-water).
    warnings : list of str
        Validity-range messages.
    source : str
        The formulations used.
    """

    model: str
    temperature_c: float
    density_kg_m3: float
    viscosity_pa_s: float
    dlnmu_dT_per_K: float
    glycerol_mass_fraction: float
    reference_u_rel: float
    reference_u_note: str
    density_u_rel: float
    drho_dT_kg_m3_per_K: float
    drho_dw_kg_m3: float
    dlnmu_dw: float
    refractive_index: float
    warnings: list[str] = field(default_factory=list)
    source: str = ""

    def density_u_kg_m3(self, temperature_u_c: float = 0.0,
                        glycerol_mass_fraction_u: float = 0.0) -> float:
        """Standard uncertainty of the model density, kg/m³.

        Combines the model's own uncertainty with u(T) and u(w) through ∂ρ/∂T and ∂ρ/∂w
        (JCGM 100 law of propagation, inputs uncorrelated).

        Parameters
        ----------
        temperature_u_c : float
            u(T), K.
        glycerol_mass_fraction_u : float
            u(w), mass fraction.

        Returns
        -------
        float
            u(ρ), kg/m³.
        """
        return math.sqrt((self.density_u_rel * self.density_kg_m3) ** 2
                         + (self.drho_dT_kg_m3_per_K * temperature_u_c) ** 2
                         + (self.drho_dw_kg_m3 * glycerol_mass_fraction_u) ** 2)

    def viscosity_u_pa_s(self, temperature_u_c: float = 0.0,
                         glycerol_mass_fraction_u: float = 0.0) -> float:
        """Standard uncertainty of the model viscosity, Pa·s.

        Combines ``reference_u_rel`` with u(T)·d ln μ/dT and u(w)·∂ ln μ/∂w.

        Parameters
        ----------
        temperature_u_c : float
            u(T), K.
        glycerol_mass_fraction_u : float
            u(w), mass fraction.

        Returns
        -------
        float
            u(μ), Pa·s.
        """
        u_rel = math.sqrt(self.reference_u_rel ** 2
                          + (self.dlnmu_dT_per_K * temperature_u_c) ** 2
                          + (self.dlnmu_dw * glycerol_mass_fraction_u) ** 2)
        return u_rel * self.viscosity_pa_s

    def to_dict(self) -> dict:
        """Return a JSON-friendly dict (plain floats and strings)."""
        out = asdict(self)
        for key, value in out.items():
            if isinstance(value, (float, np.floating)):
                out[key] = float(value)
        out["warnings"] = list(self.warnings)
        return out


def _check_finite(name: str, value: float) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} = {value!r} must be a number") from None
    if not math.isfinite(x):
        raise ValueError(f"{name} = {value!r} must be a finite number")
    return x


def _check_water_temperature(temperature_c: float) -> float:
    t = _check_finite("temperature_c", temperature_c)
    if not (_WATER_T_MIN_C <= t <= _WATER_T_MAX_C):
        raise ValueError(
            f"temperature_c = {t:g} °C is outside liquid water at 0.101325 MPa; expected "
            f"{_WATER_T_MIN_C:g} to {_WATER_T_MAX_C:g} °C"
        )
    return t


@functools.lru_cache(maxsize=256)
def _iapws95_state(temperature_c: float) -> tuple[float, float, float, float]:
    """(ρ kg/m³, μ Pa·s, thermal expansion 1/K, n) of liquid water at 0.101325 MPa."""
    st = iapws.IAPWS95(T=temperature_c + _KELVIN, P=_P_ATM_MPA)
    return float(st.rho), float(st.mu), float(st.alfav), float(st.n)


def iapws2008_viscosity_pa_s(density_kg_m3: float, temperature_k: float) -> float:
    """IAPWS Formulation 2008 viscosity of water at a given density and temperature.

    Parameters
    ----------
    density_kg_m3 : float
        Density, kg/m³.
    temperature_k : float
        Temperature, K.

    Returns
    -------
    float
        Viscosity, Pa·s (Huber et al. 2009, via ``iapws``; critical enhancement included).
    """
    rho = require_positive("density_kg_m3", density_kg_m3, "a density in kg/m³ > 0")
    t = require_positive("temperature_k", temperature_k, "a temperature in K > 0")
    return float(_Viscosity(rho, t))


def water_viscosity_pa_s(temperature_c: float) -> float:
    """IAPWS 2008 viscosity of liquid water at 0.101325 MPa (density from IAPWS-95).

    Parameters
    ----------
    temperature_c : float
        Temperature, °C, 0 … 99.97.

    Returns
    -------
    float
        Viscosity, Pa·s.
    """
    return _iapws95_state(_check_water_temperature(temperature_c))[1]


def _water_dlnmu_dT(temperature_c: float) -> float:
    """d ln μ/dT along the 0.101325 MPa isobar: ∂μ/∂T|ρ + ∂μ/∂ρ|T · dρ/dT (dρ/dT = −ρ α_v)."""
    rho, mu, alpha_v, _ = _iapws95_state(temperature_c)
    t_k = temperature_c + _KELVIN
    h_t, h_rho = 1e-3, 1e-6 * rho  # steps: 1 mK and 1 ppm of the density
    visc = iapws2008_viscosity_pa_s
    dmu_dt = (visc(rho, t_k + h_t) - visc(rho, t_k - h_t)) / (2 * h_t)
    dmu_drho = (visc(rho + h_rho, t_k) - visc(rho - h_rho, t_k)) / (2 * h_rho)
    return float((dmu_dt + dmu_drho * (-rho * alpha_v)) / mu)


def cheng_water_viscosity_pa_s(temperature_c: float | np.ndarray) -> np.ndarray:
    """Cheng (2008) eq. 21: μ_w = 1.790 exp[(−1230 − T) T / (36100 + 360 T)] mPa·s.

    Parameters
    ----------
    temperature_c : float or ndarray of shape (n,)
        Temperature, °C.

    Returns
    -------
    ndarray
        Viscosity of water, Pa·s, same shape as the input.
    """
    t = np.asarray(temperature_c, dtype=float)
    return 1.790e-3 * np.exp((-1230.0 - t) * t / (36100.0 + 360.0 * t))


def cheng_glycerol_viscosity_pa_s(temperature_c: float | np.ndarray) -> np.ndarray:
    """Cheng (2008) eq. 22: μ_g = 12100 exp[(−1233 + T) T / (9900 + 70 T)] mPa·s.

    Parameters
    ----------
    temperature_c : float or ndarray of shape (n,)
        Temperature, °C.

    Returns
    -------
    ndarray
        Viscosity of glycerol, Pa·s, same shape as the input.
    """
    t = np.asarray(temperature_c, dtype=float)
    return 12.100 * np.exp((-1233.0 + t) * t / (9900.0 + 70.0 * t))


def _water_term(temperature_c: np.ndarray, water_term: str) -> np.ndarray:
    if water_term == "cheng":
        return cheng_water_viscosity_pa_s(temperature_c)
    if water_term == "iapws":
        flat = np.ravel(temperature_c)
        values = [water_viscosity_pa_s(float(t)) for t in flat]
        return np.reshape(np.asarray(values, dtype=float), np.shape(temperature_c))
    raise ValueError(f"water_term = {water_term!r} is unknown; expected 'cheng' or 'iapws'")


def cheng_viscosity_pa_s(glycerol_mass_fraction: float | np.ndarray,
                         temperature_c: float | np.ndarray, *,
                         water_term: str = "cheng") -> np.ndarray:
    """Cheng (2008) viscosity of a glycerol–water mixture, eq. 6 with eqs. 21–22.

    μ = μ_w^α μ_g^(1−α), α = 1 − w + a b w (1 − w) / [a w + b (1 − w)],
    a = 0.705 − 0.0017 T, b = (4.9 + 0.036 T) a^2.5.

    Parameters
    ----------
    glycerol_mass_fraction : float or ndarray
        Glycerol mass fraction w, 0 … 1.
    temperature_c : float or ndarray
        Temperature, °C (broadcast against w).
    water_term : {"cheng", "iapws"}
        Water viscosity from Cheng's eq. 21 (as published) or from IAPWS 2008.

    Returns
    -------
    ndarray
        Viscosity, Pa·s, broadcast shape of the inputs. No range checks here (see
        :func:`fluid_state`).
    """
    w = np.asarray(glycerol_mass_fraction, dtype=float)
    t = np.asarray(temperature_c, dtype=float)
    a = 0.705 - 0.0017 * t
    b = (4.9 + 0.036 * t) * a ** 2.5
    alpha = 1.0 - w + a * b * w * (1.0 - w) / (a * w + b * (1.0 - w))
    ln_mu_w = np.log(_water_term(t, water_term))
    ln_mu_g = np.log(cheng_glycerol_viscosity_pa_s(t))
    return np.exp(alpha * ln_mu_w + (1.0 - alpha) * ln_mu_g)


def volk_density_kg_m3(glycerol_mass_fraction: float | np.ndarray,
                       temperature_c: float | np.ndarray) -> np.ndarray:
    """Volk & Kähler (2018) density of a glycerol–water mixture.

    ρ_g = 1273 − 0.612 T, ρ_w = 1000 [1 − |(T − 3.98)/615|^1.71], ideal (volume-additive) mixing
    ρ_ideal = ρ_w + (ρ_g − ρ_w) w / [w + (ρ_g/ρ_w)(1 − w)] (the paper's form rewritten to be
    finite at w = 0), contraction κ = 1 + A sin(w^1.31 π)^0.81,
    A = 1.78e-6 T² − 1.82e-4 T + 1.41e-2, ρ = κ ρ_ideal.

    Parameters
    ----------
    glycerol_mass_fraction : float or ndarray
        Glycerol mass fraction w, 0 … 1.
    temperature_c : float or ndarray
        Temperature, °C (broadcast against w).

    Returns
    -------
    ndarray
        Density, kg/m³.
    """
    w = np.asarray(glycerol_mass_fraction, dtype=float)
    t = np.asarray(temperature_c, dtype=float)
    rho_g = 1273.0 - 0.612 * t
    rho_w = 1000.0 * (1.0 - np.abs((t - 3.98) / 615.0) ** 1.71)
    rho_ideal = rho_w + (rho_g - rho_w) * w / (w + (rho_g / rho_w) * (1.0 - w))
    amp = 1.78e-6 * t ** 2 - 1.82e-4 * t + 1.41e-2
    # sin(w^1.31 π) is ≥ 0 on [0, 1]; clip the rounding residue at w = 1 so the power stays real
    kappa = 1.0 + amp * np.clip(np.sin(w ** 1.31 * np.pi), 0.0, None) ** 0.81
    return kappa * rho_ideal


def _check_fraction(value: float) -> float:
    w = _check_finite("glycerol_mass_fraction", value)
    if not 0.0 <= w <= 1.0:
        raise ValueError(f"glycerol_mass_fraction = {w:g} must lie between 0 and 1 (mass fraction)")
    return w


def _check_glycerol_temperature(temperature_c: float) -> tuple[float, list[str]]:
    t = _check_finite("temperature_c", temperature_c)
    if not _GLY_T_HARD_MIN_C <= t <= _GLY_T_HARD_MAX_C:
        raise ValueError(
            f"temperature_c = {t:g} °C is far outside the glycerol-water correlations (Cheng 2008 "
            f"valid 0–100 °C); expected {_GLY_T_HARD_MIN_C:g} to {_GLY_T_HARD_MAX_C:g} °C at most"
        )
    warnings = []
    lo, hi = _CHENG_T_RANGE_C
    if not lo <= t <= hi:
        warnings.append(f"temperature {t:g} °C is outside Cheng (2008)'s validity range "
                        f"{lo:g}–{hi:g} °C: glycerol-water viscosity extrapolated")
    lo, hi = _VOLK_T_BASIS_C
    if not lo <= t <= hi:
        warnings.append(f"temperature {t:g} °C is outside the 15–30 °C data basis of the Volk & "
                        f"Kähler (2018) density model (stated accuracy < 0.07 % only there)")
    return t, warnings


def _glycerol_water_state(model: str, t: float, w: float, warnings: list[str],
                          water_term: str) -> FluidState:
    mu = float(cheng_viscosity_pa_s(w, t, water_term=water_term))
    rho = float(volk_density_kg_m3(w, t))
    t_lo, t_hi = t - _DT_K, t + _DT_K
    if water_term == "iapws":  # stay inside liquid water at the ends of 0–99.97 °C
        t_lo, t_hi = max(t_lo, _WATER_T_MIN_C), min(t_hi, _WATER_T_MAX_C)
    dlnmu_dt = float((np.log(cheng_viscosity_pa_s(w, t_hi, water_term=water_term))
                      - np.log(cheng_viscosity_pa_s(w, t_lo, water_term=water_term)))
                     / (t_hi - t_lo))
    drho_dt = float((volk_density_kg_m3(w, t + _DT_K) - volk_density_kg_m3(w, t - _DT_K))
                    / (2 * _DT_K))
    # one-sided at the ends of [0, 1], central inside
    w_lo, w_hi = max(w - _DW, 0.0), min(w + _DW, 1.0)
    mus = cheng_viscosity_pa_s(np.array([w_lo, w_hi]), t, water_term=water_term)
    dlnmu_dw = float((math.log(mus[1]) - math.log(mus[0])) / (w_hi - w_lo))
    w_lo, w_hi = max(w - _DW_RHO, 0.0), min(w + _DW_RHO, 1.0)
    rhos = volk_density_kg_m3(np.array([w_lo, w_hi]), t)
    drho_dw = float((rhos[1] - rhos[0]) / (w_hi - w_lo))
    n = (w * (_N_GLYCEROL_20 + _DN_DT_GLYCEROL * (t - 20.0))
         + (1.0 - w) * (_N_WATER_20 + _DN_DT_WATER * (t - 20.0)))
    water = "IAPWS 2008" if water_term == "iapws" else "Cheng eq. 21"
    source = (f"viscosity: Cheng (2008) eqs. 6, 22 with water term {water}; density: Volk & "
              f"Kähler (2018)")
    return FluidState(model, t, rho, mu, dlnmu_dt, w, _CHENG_U_REL, _CHENG_U_NOTE, _VOLK_U_REL,
                      drho_dt, drho_dw, dlnmu_dw, n, warnings, source)


def fluid_state(name: str, temperature_c: float, glycerol_mass_fraction: float | None = None, *,
                water_term: str = "cheng") -> FluidState:
    """Density, viscosity and d ln μ/dT of a reference liquid.

    Parameters
    ----------
    name : {"water", "glycerol-water", "glycerol"}
        The model. ``"glycerol"`` is glycerol-water with w = 1.
    temperature_c : float
        Temperature, °C. Water: 0 … 99.97 °C (liquid at 0.101325 MPa). Glycerol-water: warnings
        outside 0–100 °C (Cheng) and 15–30 °C (Volk density data basis); ValueError beyond
        −50 … 150 °C.
    glycerol_mass_fraction : float, optional
        Mass fraction w, required for ``"glycerol-water"``; must be absent (or 0) for water and
        absent (or 1) for glycerol.
    water_term : {"cheng", "iapws"}
        For glycerol-water: Cheng's own water term (default, as published) or IAPWS 2008.

    Returns
    -------
    FluidState

    Raises
    ------
    ValueError
        Unknown name (lists the names), temperature outside the hard limits, fraction outside
        0–1 or inconsistent with the name.
    """
    if name not in FLUID_NAMES:
        raise ValueError(f"liquid model {name!r} is unknown; expected one of {', '.join(FLUID_NAMES)}")
    if name == "water":
        if glycerol_mass_fraction not in (None, 0, 0.0):
            raise ValueError(f"glycerol_mass_fraction = {glycerol_mass_fraction!r} does not apply "
                             "to model 'water'; use 'glycerol-water'")
        t = _check_water_temperature(temperature_c)
        rho, mu, alpha_v, n = _iapws95_state(t)
        return FluidState("water", t, rho, mu, _water_dlnmu_dT(t), 0.0, _IAPWS_MU_U_REL,
                          _IAPWS_MU_U_NOTE, _IAPWS95_RHO_U_REL, -rho * alpha_v, 0.0, 0.0, n, [],
                          "density: IAPWS-95; viscosity: IAPWS 2008; at 0.101325 MPa")
    if name == "glycerol":
        if glycerol_mass_fraction not in (None, 1, 1.0):
            raise ValueError(f"glycerol_mass_fraction = {glycerol_mass_fraction!r} does not apply "
                             "to model 'glycerol' (w = 1); use 'glycerol-water'")
        w = 1.0
    else:
        if glycerol_mass_fraction is None:
            raise ValueError("glycerol_mass_fraction is required for model 'glycerol-water'")
        w = _check_fraction(glycerol_mass_fraction)
    t, warnings = _check_glycerol_temperature(temperature_c)
    if water_term == "iapws":
        _check_water_temperature(t)
    return _glycerol_water_state(name, t, w, warnings, water_term)


@dataclass(frozen=True)
class GlycerolFraction:
    """The glycerol mass fraction that explains a measured viscosity (Cheng 2008 inverted).

    Attributes
    ----------
    ok : bool
        False when no fraction in 0–1 explains the viscosity; then ``reason`` says why and the
        fraction fields are None.
    glycerol_mass_fraction : float or None
        w such that μ_Cheng(w, T) = μ.
    glycerol_mass_fraction_u : float or None
        u(w) (k = 1) from u(μ) and u(T): u² = (u(μ)/μ / ∂lnμ/∂w)² + (u(T) ∂lnμ/∂T / ∂lnμ/∂w)².
    glycerol_mass_fraction_u_model : float or None
        u(w) caused by the model's own uncertainty (Cheng ±3.5 % → 2.0 %), reported separately.
    water_mass_fraction : float or None
        1 − w.
    viscosity_pa_s, viscosity_u_pa_s : float
        The measured viscosity and its standard uncertainty, Pa·s.
    temperature_c, temperature_u_c : float
        The temperature and its standard uncertainty, °C and K.
    dlnmu_dw, dlnmu_dT_per_K : float or None
        Sensitivities of the model at the solution.
    reason : str
        Why the inversion failed ("" when ok).
    warnings : list of str
        Validity-range messages of the model.
    source : str
        Model used.
    """

    ok: bool
    glycerol_mass_fraction: float | None
    glycerol_mass_fraction_u: float | None
    glycerol_mass_fraction_u_model: float | None
    water_mass_fraction: float | None
    viscosity_pa_s: float
    viscosity_u_pa_s: float
    temperature_c: float
    temperature_u_c: float
    dlnmu_dw: float | None
    dlnmu_dT_per_K: float | None
    reason: str = ""
    warnings: list[str] = field(default_factory=list)
    source: str = ""

    def to_dict(self) -> dict:
        """Return a JSON-friendly dict."""
        out = asdict(self)
        out["warnings"] = list(self.warnings)
        return out


def glycerol_fraction_for_viscosity(mu_pa_s: float, temperature_c: float, *,
                                    mu_u_pa_s: float = 0.0, temperature_u_c: float = 0.0,
                                    water_term: str = "cheng") -> GlycerolFraction:
    """Glycerol mass fraction w that explains a measured viscosity at a measured temperature.

    Glycerol takes up water from the air: a measured viscosity below the pure-glycerol value at
    the measured temperature is usually explained by a little water. Solves μ_Cheng(w, T) = μ by
    bracketed root finding (μ_Cheng rises monotonically with w) and propagates u(μ) and u(T) to
    u(w) through the model's sensitivities (JCGM 100, first order).

    Parameters
    ----------
    mu_pa_s : float
        Measured viscosity, Pa·s (> 0).
    temperature_c : float
        Measured temperature, °C.
    mu_u_pa_s : float
        u(μ), Pa·s (≥ 0).
    temperature_u_c : float
        u(T), K (≥ 0).
    water_term : {"cheng", "iapws"}
        Water term of the Cheng formula.

    Returns
    -------
    GlycerolFraction
        ``ok`` False (with a reason) when μ lies outside μ(w = 0) … μ(w = 1) at that temperature.
    """
    mu = require_positive("mu_pa_s", mu_pa_s, "a viscosity in Pa·s > 0")
    u_mu = _check_finite("mu_u_pa_s", mu_u_pa_s)
    u_t = _check_finite("temperature_u_c", temperature_u_c)
    if u_mu < 0 or u_t < 0:
        raise ValueError(f"mu_u_pa_s = {u_mu:g} and temperature_u_c = {u_t:g} must be ≥ 0")
    t, warnings = _check_glycerol_temperature(temperature_c)
    if water_term == "iapws":
        _check_water_temperature(t)

    def ln_mu(w: float) -> float:
        return math.log(float(cheng_viscosity_pa_s(w, t, water_term=water_term)))

    lo, hi = ln_mu(0.0), ln_mu(1.0)
    target = math.log(mu)
    source = f"Cheng (2008) inverted at {t:g} °C"
    if not lo <= target <= hi:
        side = "above pure glycerol" if target > hi else "below pure water"
        reason = (f"viscosity {mu:.6g} Pa·s is {side} at {t:g} °C ({math.exp(lo):.4g}–"
                  f"{math.exp(hi):.4g} Pa·s); no glycerol-water mixture explains it")
        return GlycerolFraction(False, None, None, None, None, mu, u_mu, t, u_t, None, None,
                                reason, warnings, source)
    w = brentq(lambda x: ln_mu(x) - target, 0.0, 1.0, xtol=1e-13, rtol=1e-14)
    state = _glycerol_water_state("glycerol-water", t, w, [], water_term)
    dlnmu_dw = state.dlnmu_dw
    u_w = math.hypot(u_mu / mu, state.dlnmu_dT_per_K * u_t) / dlnmu_dw
    u_w_model = state.reference_u_rel / dlnmu_dw
    return GlycerolFraction(True, float(w), float(u_w), float(u_w_model), float(1.0 - w), mu, u_mu,
                            t, u_t, dlnmu_dw, state.dlnmu_dT_per_K, "", warnings, source)
