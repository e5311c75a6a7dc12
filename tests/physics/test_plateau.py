"""Plateau finder on synthetic trajectories with exact truth: where terminal speed is reached,
no plateau when there is none, outliers, gaps, exclusion zones, rising spheres."""

import json

import numpy as np
import pytest

from physics.plateau import find_plateau
from physics.terminal import fit_terminal_velocity
from physics.trajectories import synthetic_trajectory
from physics.transient import transient_model

# The stated criterion's remnant tolerance (physics/plateau.py, step 7): the approach left in the
# plateau may shift the fitted slope by at most κ of its standard error.
KAPPA = 0.1
# Required accuracy of the plateau start against the true settling time (task H4).
START_RTOL = 0.10
# Noise-free: the terminal velocity must come out within 0.1 % (task H4); it is ~1e-9 here.
NOISE_FREE_RTOL = 1e-3


def _slope_se_ar1(t: np.ndarray, sigma: float, rho: float) -> float:
    """Exact standard error of an OLS slope under stationary AR(1) noise (index lags)."""
    tc = t - t.mean()
    w = tc / (tc @ tc)
    var = w @ w + 2 * sum(rho**k * (w[k:] @ w[:-k]) for k in range(1, min(len(w), 80)))
    return sigma * np.sqrt(var)


def true_settling_s(tr, sigma: float, rho: float, end: int | None = None) -> float:
    """True settling time, measured from release.

    Definition (the "noise-detectable level" of this test): the earliest start s such that a
    straight line fitted to the *true* positions over [s, end] has a slope within κ = 0.1
    standard errors (true AR(1) noise of this trajectory) of the true terminal velocity. For an
    exponential approach the slope bias falls monotonically with s, so this is the time at which
    1 − v/v_t has dropped to the level whose remnant is statistically invisible in the fit. It is
    computed here from the noise-free positions, independently of the code under test.
    """
    t, z = tr.t_s, tr.z_true_mm
    end = t.size if end is None else end
    v_t = tr.v_terminal_m_s * 1e3 * (1 if tr.direction == "down" else -1)
    for s in range(np.searchsorted(t, tr.release_s), end - 20):
        slope = np.polyfit(t[s:end], z[s:end], 1)[0]
        if abs(slope - v_t) <= KAPPA * _slope_se_ar1(t[s:end], sigma, rho):
            return float(t[s] - tr.release_s)
    raise AssertionError("the record never settles")


SCENARIOS = {
    # fps, duration, v_t (mm/s), τ (s), σ (mm), ρ — phone slow motion and normal video
    "120fps-tau0.2": (120.0, 5.0, 20.0, 0.2, 0.02, 0.7),
    "240fps-tau0.1": (240.0, 3.0, 20.0, 0.1, 0.01, 0.5),
}


@pytest.mark.parametrize("name", list(SCENARIOS))
def test_plateau_start_within_10_percent_of_the_true_settling_time(name):
    fps, duration, v_t, tau, sigma, rho = SCENARIOS[name]
    for seed in range(10):
        tr = synthetic_trajectory(np.random.default_rng(seed), fps=fps, duration_s=duration,
                                  v_terminal_mm_s=v_t, tau_s=tau, release_s=0.3, noise_mm=sigma,
                                  noise_rho=rho)
        plateau = find_plateau(tr.t_s, tr.z_mm)
        truth = true_settling_s(tr, sigma, rho)
        assert plateau.found, plateau.reason
        assert plateau.start_s - tr.release_s == pytest.approx(truth, rel=START_RTOL), f"seed {seed}"
        # the settling time counts from the seen onset, a few frames after the release
        assert plateau.settling_time_s == pytest.approx(truth, rel=START_RTOL), f"seed {seed}"
        assert not plateau.settling_is_lower_bound
        assert plateau.end_s == tr.t_s[-1]


def test_noise_free_exponential_gives_v_t_within_0_1_percent():
    tr = synthetic_trajectory(np.random.default_rng(0), fps=60.0, duration_s=6.0, v_terminal_mm_s=15.0,
                              tau_s=0.05, release_s=0.2)
    plateau = find_plateau(tr.t_s, tr.z_mm)
    assert plateau.found
    fit = fit_terminal_velocity(tr.t_s, tr.z_mm, plateau.mask)
    assert fit.v_m_s == pytest.approx(0.015, rel=NOISE_FREE_RTOL)


def test_constant_speed_from_the_first_frame_has_a_lower_bound_settling_time():
    tr = synthetic_trajectory(np.random.default_rng(3), fps=60.0, duration_s=4.0, v_terminal_mm_s=10.0,
                              release_s=-1.0, noise_mm=0.02, noise_rho=0.6)
    plateau = find_plateau(tr.t_s, tr.z_mm)
    assert plateau.found
    assert plateau.start_s == tr.t_s[0] and plateau.end_s == tr.t_s[-1]
    assert plateau.settling_is_lower_bound and plateau.settling_time_s == 0.0
    assert plateau.remaining_deficit is None


def test_still_accelerating_when_it_left_the_view_is_a_result_not_an_error():
    """Steel ball (2 mm) in glycerol with the Basset history force: 1 − v/v_t ≈ 0.017/√t, so in a
    0.6 s view the speed visibly keeps rising (physics-references.md §5)."""
    model = transient_model(d_m=2e-3, rho_s_kg_m3=7810, rho_f_kg_m3=1261, mu_pa_s=1.41, g_m_s2=9.80665)
    tr = synthetic_trajectory(np.random.default_rng(1), fps=240.0, duration_s=0.6, model=model,
                              release_s=0.05, noise_mm=0.003, noise_rho=0.6)
    plateau = find_plateau(tr.t_s, tr.z_mm)
    assert not plateau.found
    assert plateau.reason.startswith("still accelerating when it left the view")
    assert not plateau.mask.any() and plateau.start_s is None
    json.dumps(plateau.to_dict())


def test_few_wild_outliers_are_flagged_and_do_not_move_v_t():
    kw = dict(fps=120.0, duration_s=4.0, v_terminal_mm_s=20.0, tau_s=0.1, release_s=0.2, noise_mm=0.02,
              noise_rho=0.6)
    for seed in range(3):
        clean = synthetic_trajectory(np.random.default_rng(seed), **kw)
        rng = np.random.default_rng(100 + seed)
        z = clean.z_mm.copy()
        # five wild points, 25–100 σ, on one side in the last quarter (a tracker latching onto a
        # bubble below the ball): the worst place for the slope
        wild = rng.choice(np.arange(3 * clean.t_s.size // 4, clean.t_s.size), size=5, replace=False)
        z[wild] += rng.uniform(0.5, 2.0, 5)
        plateau = find_plateau(clean.t_s, z)
        assert set(np.flatnonzero(plateau.outlier_mask)) >= set(wild)
        assert plateau.outlier_mask.sum() <= 6  # at most one false flag
        assert not (plateau.mask & plateau.outlier_mask).any()
        with_outliers = fit_terminal_velocity(clean.t_s, z, plateau.mask)
        reference = fit_terminal_velocity(clean.t_s, clean.z_mm, find_plateau(clean.t_s, clean.z_mm).mask)
        assert abs(with_outliers.v_m_s - reference.v_m_s) <= reference.u_v_m_s
        # the same points without the outlier screen would have moved it (the test can fail)
        naive = fit_terminal_velocity(clean.t_s, z, plateau.mask | plateau.outlier_mask)
        assert abs(naive.v_m_s - reference.v_m_s) > reference.u_v_m_s


def test_tracking_gaps_are_tolerated():
    sigma, rho = 0.02, 0.7
    tr = synthetic_trajectory(np.random.default_rng(7), fps=120.0, duration_s=5.0, v_terminal_mm_s=20.0,
                              tau_s=0.2, release_s=0.3, noise_mm=sigma, noise_rho=rho,
                              gaps_s=[(2.0, 2.4), (3.5, 3.6)], interval_jitter=0.02)
    plateau = find_plateau(tr.t_s, tr.z_mm)
    assert plateau.found
    assert plateau.start_s - tr.release_s == pytest.approx(true_settling_s(tr, sigma, rho), rel=START_RTOL)
    fit = fit_terminal_velocity(tr.t_s, tr.z_mm, plateau.mask)
    assert abs(fit.v_m_s - 0.020) <= 2 * fit.u_v_m_s


def test_rising_sphere():
    sigma, rho = 0.01, 0.5
    tr = synthetic_trajectory(np.random.default_rng(2), fps=240.0, duration_s=3.0, v_terminal_mm_s=20.0,
                              tau_s=0.1, release_s=0.3, noise_mm=sigma, noise_rho=rho, direction="up",
                              z_release_mm=120.0)
    plateau = find_plateau(tr.to_frame())
    assert plateau.found and plateau.direction == "up"
    assert plateau.start_mm > plateau.end_mm
    assert plateau.start_s - tr.release_s == pytest.approx(true_settling_s(tr, sigma, rho), rel=START_RTOL)
    fit = fit_terminal_velocity(tr.t_s, tr.z_mm, plateau.mask)
    assert fit.direction == "up" and abs(fit.v_m_s - 0.020) <= 2 * fit.u_v_m_s


def _with_bottom_slowdown(tr, z_bottom_mm: float):
    """Positions of ``tr`` where the ball slows down below z_bottom (approach to a closed end)."""
    z = tr.z_mm.copy()
    t_b = np.interp(z_bottom_mm, tr.z_true_mm, tr.t_s)
    late = tr.t_s > t_b
    v = tr.v_terminal_m_s * 1e3
    lag_tau = 0.3  # the speed halves on a 0.3 s scale below the bottom zone's edge
    dt = tr.t_s[late] - t_b
    z[late] = z[late] - v * dt + v * (0.5 * dt + 0.5 * lag_tau * (1 - np.exp(-dt / lag_tau)))
    return z


def test_exclusion_zone_keeps_the_bottom_slowdown_out():
    tr = synthetic_trajectory(np.random.default_rng(5), fps=120.0, duration_s=5.0, v_terminal_mm_s=20.0,
                              tau_s=0.1, release_s=0.2, noise_mm=0.02, noise_rho=0.6)
    z = _with_bottom_slowdown(tr, 80.0)
    excluded = find_plateau(tr.t_s, z, exclude_bottom_mm=78.0, exclude_top_mm=0.5)
    assert excluded.found
    assert np.array_equal(excluded.excluded_mask, (z > 78.0) | (z < 0.5))
    assert excluded.end_mm <= 78.0
    fit = fit_terminal_velocity(tr.t_s, z, excluded.mask)
    assert abs(fit.v_m_s - 0.020) <= 2 * fit.u_v_m_s
    # without the exclusion the data themselves end the plateau and say why
    unexcluded = find_plateau(tr.t_s, z)
    assert unexcluded.found and unexcluded.end_mm < 85.0
    assert any("the speed drops after" in w for w in unexcluded.warnings)


def test_plateau_to_dict_is_json_friendly():
    tr = synthetic_trajectory(np.random.default_rng(0), fps=60.0, duration_s=3.0, v_terminal_mm_s=5.0,
                              tau_s=0.1, release_s=0.1, noise_mm=0.01, noise_rho=0.5)
    d = find_plateau(tr.t_s, tr.z_mm).to_dict()
    json.dumps(d)
    assert d["found"] is True and isinstance(d["mask"][0], bool) and isinstance(d["start_s"], float)
    assert "alpha = 0.01" in d["criterion"]


@pytest.mark.parametrize(
    ("z", "reason"),
    [
        (np.full(100, 3.0), "the sphere does not move"),
        (np.linspace(0, 1, 10), "too few usable points: 10 after exclusions and outliers"),
    ],
)
def test_degenerate_records_give_a_reason(z, reason):
    plateau = find_plateau(np.arange(z.size) / 30.0, z)
    assert not plateau.found and plateau.reason.startswith(reason)


@pytest.mark.parametrize(
    ("kw", "message"),
    [
        (dict(alpha=0.7), "alpha = 0.7 must lie between 0 and 0.5"),
        (dict(window=8), "window = 8 must be an odd integer ≥ 7"),
        (dict(exclude_top_mm=50.0, exclude_bottom_mm=10.0),
         "exclude_top_mm = 50.0 must lie above .* exclude_bottom_mm = 10.0"),
    ],
)
def test_bad_parameters_are_named(kw, message):
    t = np.arange(100) / 30.0
    with pytest.raises(ValueError, match=message):
        find_plateau(t, 2.0 * t, **kw)


def test_found_plateau_does_not_bias_the_terminal_velocity():
    """End to end over 200 seeded tracks (120 fps, τ = 0.2 s, AR(1) σ = 0.02 mm, ρ = 0.7): the
    plateau chosen from the data, fitted with the HAC uncertainty, still covers the true v_t with
    k = 2 about 95 % of the time (binomial SD 1.5 %, hence 0.91–0.98) and the mean error is a small
    fraction of u — the remnant step (κ = 0.1) keeps the approach out of the fit. Without it the
    mean error was about −1 u and the coverage about 81 %."""
    z_scores = []
    for seed in range(200):
        tr = synthetic_trajectory(np.random.default_rng(1000 + seed), fps=120.0, duration_s=5.0,
                                  v_terminal_mm_s=20.0, tau_s=0.2, release_s=0.3, noise_mm=0.02, noise_rho=0.7)
        plateau = find_plateau(tr.t_s, tr.z_mm)
        assert plateau.found, f"seed {1000 + seed}: {plateau.reason}"
        fit = fit_terminal_velocity(tr.t_s, tr.z_mm, plateau.mask)
        z_scores.append((fit.v_m_s - 0.020) / fit.u_v_m_s)
    z_scores = np.asarray(z_scores)
    assert 0.91 <= np.mean(np.abs(z_scores) <= 2) <= 0.98
    assert abs(z_scores.mean()) < 0.35
