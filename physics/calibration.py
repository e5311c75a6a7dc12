"""Apparatus calibration with a reference liquid of known viscosity.

The practice of the standards (physics-references.md §8: ISO 12058-1 determines its ball
constant with a reference liquid, from memory; common practice, no source, for a whole optical +
timing chain): run the apparatus in a liquid whose viscosity is known at the run's temperature
and form the apparatus factor

    K_app = μ_ref / μ_measured,

then multiply later results obtained **with the same tube, ball size, optics and analysis
settings** (wall model, drag law) by K_app. What K_app absorbs: everything that is the same in
both runs — scale and refraction error, residual wall-model error, time-base error. Its
uncertainty is what does not cancel:

    u²(K)/K² = u²(μ_ref)/μ_ref² + u²(μ̄_measured)/μ̄_measured²,

with u(μ_ref) the reference's own uncertainty (model ±3–5 % for glycerol, §6.3, plus the
calibration run's temperature through d ln μ/dT) and u(μ̄_measured) the repeatability of the
calibration runs. When the factor is applied, the later run's budget must likewise keep only the
terms that do not cancel (its repeatability, its temperature, a different liquid density).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from physics._results import ResultDict
from physics.drag import require_positive
from physics.series import weighted_mean

__all__ = [
    "ApparatusCalibration",
    "CalibratedViscosity",
    "apply_calibration",
    "calibrate_apparatus",
]

#: An apparatus factor further than this from 1 points to a mistake rather than a small
#: systematic error (common practice, no source).
FACTOR_WARN = 0.05
#: Relative difference of tube or ball diameter above which the factor is not the same
#: apparatus's (common practice, no source).
SAME_SIZE_TOL = 0.01


@dataclass(frozen=True)
class ApparatusCalibration(ResultDict):
    """Apparatus factor from runs in a reference liquid.

    Attributes
    ----------
    factor : float
        K_app = μ_ref / μ̄_measured.
    u_factor : float
        Standard uncertainty of K_app.
    mu_ref_pa_s, u_mu_ref_pa_s : float
        Reference viscosity at the calibration temperature and its standard uncertainty, Pa·s.
    mu_measured_pa_s, u_mu_measured_pa_s : float
        Mean of the calibration runs and its standard uncertainty, Pa·s.
    n_runs : int
        Number of calibration runs.
    tube_d_m, d_m : float or None
        Tube inner diameter and ball diameter of the calibration, m (None: not recorded).
    warnings : list of str
        Factor far from 1, inconsistent runs.
    """

    factor: float
    u_factor: float
    mu_ref_pa_s: float
    u_mu_ref_pa_s: float
    mu_measured_pa_s: float
    u_mu_measured_pa_s: float
    n_runs: int
    tube_d_m: float | None
    d_m: float | None
    warnings: list[str] = field(default_factory=list)


def calibrate_apparatus(
    mu_ref_pa_s: float,
    u_mu_ref_pa_s: float,
    mu_measured_pa_s: Sequence[float],
    u_mu_measured_pa_s: Sequence[float] | None = None,
    *,
    tube_d_m: float | None = None,
    d_m: float | None = None,
) -> ApparatusCalibration:
    """Apparatus factor K_app = μ_ref / μ_measured from one or more calibration runs.

    Parameters
    ----------
    mu_ref_pa_s : float
        Viscosity of the reference liquid at the calibration temperature, Pa·s.
    u_mu_ref_pa_s : float
        Its standard uncertainty, Pa·s (model uncertainty and temperature), ≥ 0.
    mu_measured_pa_s : sequence of float, shape (n,)
        Viscosities the apparatus measured in the reference liquid (same analysis settings as
        the later runs), Pa·s.
    u_mu_measured_pa_s : sequence of float, shape (n,), optional
        Per-run standard uncertainties of the terms that do not cancel (speed fit,
        repeatability), Pa·s. Given: weighted mean with Birge-ratio inflation. Not given:
        arithmetic mean with the Type A uncertainty s/√n (needs n ≥ 2).
    tube_d_m, d_m : float, optional
        Tube inner diameter and ball diameter of the calibration, m, recorded so that
        :func:`apply_calibration` can check it is used on the same apparatus.

    Returns
    -------
    ApparatusCalibration
    """
    mu_ref = require_positive("mu_ref_pa_s", mu_ref_pa_s, "a reference viscosity in Pa·s > 0")
    u_ref = float(u_mu_ref_pa_s)
    if not (math.isfinite(u_ref) and u_ref >= 0.0):
        raise ValueError(f"u_mu_ref_pa_s = {u_mu_ref_pa_s!r} is not allowed; expected a standard uncertainty ≥ 0")
    runs = np.asarray(mu_measured_pa_s, dtype=float)
    if runs.ndim != 1 or runs.size == 0 or not np.all(np.isfinite(runs) & (runs > 0.0)):
        raise ValueError(
            f"mu_measured_pa_s = {np.ravel(runs).tolist()!r} is not allowed; expected one or more viscosities in Pa·s > 0"
        )
    warnings: list[str] = []
    if u_mu_measured_pa_s is not None:
        pooled = weighted_mean(runs, np.asarray(u_mu_measured_pa_s, dtype=float))
        mean, u_mean = pooled.value, pooled.u
        if not pooled.consistent:
            warnings.append(
                f"the calibration runs disagree beyond their uncertainties (Birge ratio {pooled.birge_ratio:.2f}); "
                "the factor's uncertainty is inflated accordingly"
            )
    elif runs.size >= 2:
        mean = float(np.mean(runs))
        u_mean = float(np.std(runs, ddof=1)) / math.sqrt(runs.size)
    else:
        raise ValueError(
            "u_mu_measured_pa_s = None with a single calibration run; expected its standard uncertainty or at least two runs"
        )
    factor = mu_ref / mean
    u_factor = factor * math.hypot(u_ref / mu_ref, u_mean / mean)
    if abs(factor - 1.0) > FACTOR_WARN:
        warnings.append(
            f"apparatus factor {factor:.4f} differs from 1 by more than {FACTOR_WARN * 100:g} %: check scale, temperature, "
            "densities and wall correction before relying on it"
        )
    return ApparatusCalibration(
        factor=factor,
        u_factor=u_factor,
        mu_ref_pa_s=mu_ref,
        u_mu_ref_pa_s=u_ref,
        mu_measured_pa_s=mean,
        u_mu_measured_pa_s=u_mean,
        n_runs=int(runs.size),
        tube_d_m=None if tube_d_m is None else require_positive("tube_d_m", tube_d_m, "a tube inner diameter in metres > 0"),
        d_m=None if d_m is None else require_positive("d_m", d_m, "a ball diameter in metres > 0"),
        warnings=warnings,
    )


@dataclass(frozen=True)
class CalibratedViscosity(ResultDict):
    """A viscosity with the apparatus factor applied.

    Attributes
    ----------
    mu_pa_s : float
        K_app × μ, Pa·s.
    u_mu_pa_s : float
        √((K u_μ)² + (μ u_K)²), Pa·s.
    mu_uncalibrated_pa_s : float
        μ before the factor, Pa·s.
    factor, u_factor : float
        K_app and its standard uncertainty.
    warnings : list of str
        Different tube or ball than in the calibration.
    """

    mu_pa_s: float
    u_mu_pa_s: float
    mu_uncalibrated_pa_s: float
    factor: float
    u_factor: float
    warnings: list[str] = field(default_factory=list)


def _size_warning(what: str, calibrated: float | None, used: float | None) -> list[str]:
    if calibrated is None or used is None:
        return []
    used_m = require_positive(what, used, "a diameter in metres > 0")
    if abs(used_m / calibrated - 1.0) > SAME_SIZE_TOL:
        return [
            f"{what} = {used_m * 1e3:.4g} mm differs from the calibration's {calibrated * 1e3:.4g} mm: "
            "the apparatus factor belongs to a different set-up"
        ]
    return []


def apply_calibration(
    calibration: ApparatusCalibration,
    mu_pa_s: float,
    u_mu_pa_s: float,
    *,
    tube_d_m: float | None = None,
    d_m: float | None = None,
) -> CalibratedViscosity:
    """Apply an apparatus factor to a later result from the same apparatus.

    Parameters
    ----------
    calibration : ApparatusCalibration
        From :func:`calibrate_apparatus`.
    mu_pa_s : float
        Viscosity measured with the same settings, Pa·s.
    u_mu_pa_s : float
        Its standard uncertainty without the terms the factor absorbs, Pa·s.
    tube_d_m, d_m : float, optional
        Tube and ball diameter of this run, m; compared with the calibration's (1 % tolerance).

    Returns
    -------
    CalibratedViscosity
    """
    mu = require_positive("mu_pa_s", mu_pa_s, "a viscosity in Pa·s > 0")
    u_mu = float(u_mu_pa_s)
    if not (math.isfinite(u_mu) and u_mu >= 0.0):
        raise ValueError(f"u_mu_pa_s = {u_mu_pa_s!r} is not allowed; expected a standard uncertainty ≥ 0")
    k, u_k = calibration.factor, calibration.u_factor
    warnings = _size_warning("tube_d_m", calibration.tube_d_m, tube_d_m) + _size_warning("d_m", calibration.d_m, d_m)
    return CalibratedViscosity(k * mu, math.hypot(k * u_mu, mu * u_k), mu, k, u_k, warnings)
