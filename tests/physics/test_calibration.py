"""Apparatus calibration with a reference liquid: the factor removes a systematic error of the
set-up (here a scale 2 % off) from later runs in the same tube with the same ball."""

import json
import math

import numpy as np
import pytest

from physics.calibration import apply_calibration, calibrate_apparatus
from physics.viscosity import infer_viscosity, terminal_velocity

D_BALL = 2e-3
TUBE = 40e-3
RHO_S = 7810.0
SCALE_ERROR = 1.02  # the apparatus reads every speed 2 % too high (a mis-measured scale distance)
# A scale error is a pure factor on μ for Stokes drag; with inertia (Re ≈ 0.02, φ − 1 ≈ 0.4 %)
# it leaks into φ by ≈ 2 % × (φ − 1) × 2 ≈ 2e-4, and differently in two liquids: 5e-4 bound.
TRANSFER_RTOL = 5e-4


def measured_viscosity(mu_true, rho_f, noise=0.0):
    v_true = terminal_velocity(mu_true, D_BALL, RHO_S, rho_f, tube_d_m=TUBE).v_m_s
    return infer_viscosity(SCALE_ERROR * v_true * (1.0 + noise), D_BALL, RHO_S, rho_f, tube_d_m=TUBE).mu_pa_s


def test_factor_removes_a_systematic_error_of_the_apparatus():
    # calibration in a reference liquid (1.20 Pa·s, ρ 1258), then a run in another liquid
    runs = [measured_viscosity(1.20, 1258.0, e) for e in (-0.002, 0.0, 0.002)]
    cal = calibrate_apparatus(1.20, 0.01, runs, tube_d_m=TUBE, d_m=D_BALL)
    assert cal.factor == pytest.approx(SCALE_ERROR, rel=2e-3)
    later = measured_viscosity(0.65, 1230.0)
    assert later == pytest.approx(0.65 / SCALE_ERROR, rel=2e-3)  # the uncalibrated error
    corrected = apply_calibration(cal, later, 0.0, tube_d_m=TUBE, d_m=D_BALL)
    # the mean of the three runs is off by the noise's average (0 here, to first order)
    assert corrected.mu_pa_s == pytest.approx(0.65, rel=TRANSFER_RTOL)
    assert corrected.warnings == [] and cal.warnings == []


def test_factor_uncertainty_from_reference_and_repeatability():
    # u²(K)/K² = u²(μ_ref)/μ_ref² + (s/√n)²/μ̄² (derived, module docstring)
    runs = [1.00, 1.02, 0.98, 1.01]
    cal = calibrate_apparatus(1.05, 0.021, runs)
    mean = float(np.mean(runs))
    u_mean = float(np.std(runs, ddof=1)) / 2.0
    assert cal.mu_measured_pa_s == pytest.approx(mean) and cal.u_mu_measured_pa_s == pytest.approx(u_mean)
    assert cal.factor == pytest.approx(1.05 / mean)
    assert cal.u_factor == pytest.approx(cal.factor * math.hypot(0.02, u_mean / mean), rel=1e-12)
    assert cal.n_runs == 4


def test_factor_with_per_run_uncertainties_uses_the_weighted_mean():
    cal = calibrate_apparatus(1.0, 0.0, [0.99, 1.01], [0.01, 0.02])
    # weights 1/u²: (0.99·10⁴ + 1.01·2500) / 12500 = 0.994; u = 1/√12500 (Birge ratio 0.89 < 1)
    assert cal.mu_measured_pa_s == pytest.approx(0.994, rel=1e-12)
    assert cal.u_mu_measured_pa_s == pytest.approx(1.0 / math.sqrt(12500.0), rel=1e-12)


def test_inconsistent_runs_are_reported():
    cal = calibrate_apparatus(1.0, 0.0, [0.90, 1.00, 1.10], [0.005, 0.005, 0.005])
    assert any("disagree beyond their uncertainties" in w for w in cal.warnings)
    assert cal.u_mu_measured_pa_s > 0.005 / math.sqrt(3.0)


def test_applied_uncertainty_combines_factor_and_result():
    cal = calibrate_apparatus(1.0, 0.01, [1.0], [0.0 + 1e-9])
    out = apply_calibration(cal, 2.0, 0.02)
    assert out.mu_pa_s == pytest.approx(2.0 * cal.factor)
    assert out.u_mu_pa_s == pytest.approx(math.hypot(cal.factor * 0.02, 2.0 * cal.u_factor), rel=1e-12)
    assert out.mu_uncalibrated_pa_s == 2.0
    json.dumps(out.to_dict())
    json.dumps(cal.to_dict())


def test_warnings_for_a_suspicious_factor_and_another_set_up():
    cal = calibrate_apparatus(1.2, 0.01, [1.0, 1.01], tube_d_m=TUBE, d_m=D_BALL)
    assert any("differs from 1 by more than 5 %" in w for w in cal.warnings)
    out = apply_calibration(cal, 1.0, 0.01, tube_d_m=50e-3, d_m=3e-3)
    assert any("tube_d_m = 50 mm differs from the calibration's 40 mm" in w for w in out.warnings)
    assert any("d_m = 3 mm differs from the calibration's 2 mm" in w for w in out.warnings)


@pytest.mark.parametrize(
    ("args", "kwargs", "match"),
    [
        ((0.0, 0.01, [1.0, 1.1]), {}, r"mu_ref_pa_s = 0\.0 is not allowed; expected a reference viscosity in Pa·s > 0"),
        ((1.0, -0.01, [1.0, 1.1]), {}, r"u_mu_ref_pa_s = -0\.01 is not allowed; expected a standard uncertainty ≥ 0"),
        ((1.0, 0.01, []), {}, r"mu_measured_pa_s = \[\] is not allowed; expected one or more viscosities in Pa·s > 0"),
        ((1.0, 0.01, [1.0, -1.0]), {}, r"mu_measured_pa_s = \[1\.0, -1\.0\] is not allowed"),
        ((1.0, 0.01, [1.0]), {}, r"u_mu_measured_pa_s = None with a single calibration run; expected its standard uncertainty"),
        ((1.0, 0.01, [1.0, 1.1]), {"tube_d_m": 0.0}, r"tube_d_m = 0\.0 is not allowed"),
    ],
)
def test_calibrate_apparatus_rejects_bad_input(args, kwargs, match):
    with pytest.raises(ValueError, match=match):
        calibrate_apparatus(*args, **kwargs)


def test_apply_calibration_rejects_bad_input():
    cal = calibrate_apparatus(1.0, 0.01, [1.0, 1.01])
    with pytest.raises(ValueError, match=r"mu_pa_s = -1\.0 is not allowed; expected a viscosity in Pa·s > 0"):
        apply_calibration(cal, -1.0, 0.01)
    with pytest.raises(ValueError, match=r"u_mu_pa_s = nan is not allowed; expected a standard uncertainty ≥ 0"):
        apply_calibration(cal, 1.0, float("nan"))
