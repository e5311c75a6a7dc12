"""The synthetic-trajectory generator produces what it claims: its truth is the test oracle of
the plateau, terminal and marks tests, so it is checked on its own first."""

import numpy as np
import pytest

from physics.trajectories import ar1_noise, synthetic_trajectory

# 20 000 AR(1) samples: the sample SD scatters by ≤ 1.2 % (ρ ≤ 0.8: ~3500 effective samples) and
# the lag-1 estimate by √((1 − ρ²)/n) ≤ 0.007, so these tolerances are ≥ 4 standard errors.
SD_RTOL = 0.05
LAG1_ATOL = 0.03


@pytest.mark.parametrize("rho", [0.0, 0.5, 0.8])
def test_ar1_noise_has_the_stated_sd_and_correlation(rho):
    e = ar1_noise(np.random.default_rng(11), 20_000, 0.03, rho)
    assert np.std(e) == pytest.approx(0.03, rel=SD_RTOL)
    lag1 = np.corrcoef(e[1:], e[:-1])[0, 1]
    assert lag1 == pytest.approx(rho, abs=LAG1_ATOL)


def test_ar1_noise_rejects_nonstationary_correlation():
    with pytest.raises(ValueError, match="rho = 1.0 must lie strictly between -1 and 1"):
        ar1_noise(np.random.default_rng(0), 10, 1.0, 1.0)


def test_exponential_truth_is_consistent():
    tr = synthetic_trajectory(np.random.default_rng(1), fps=200, duration_s=3.0, v_terminal_mm_s=12.0,
                              tau_s=0.25, release_s=0.5)
    # the velocity column is the derivative of the position column: central differences err by
    # h² v''/6 ≤ (5 ms)² · 12/0.25² mm/s³ / 6 = 8e-4 mm/s away from the release, where the
    # acceleration jumps (two samples each side are skipped)
    v_num = np.gradient(tr.z_true_mm, tr.t_s)
    smooth = (np.abs(tr.t_s - 0.5) > 0.011) & (tr.t_s > tr.t_s[1]) & (tr.t_s < tr.t_s[-2])
    assert np.max(np.abs(v_num[smooth] - tr.v_true_mm_s[smooth])) < 1e-3
    assert np.all(tr.z_true_mm[tr.t_s <= 0.5] == 0.0)
    assert tr.v_true_mm_s[-1] == pytest.approx(12.0 * (1 - np.exp(-2.5 / 0.25)), rel=1e-12)
    assert tr.deficit_time_s(1e-3) == pytest.approx(0.25 * np.log(1e3), rel=1e-12)


def test_seeded_generator_is_reproducible_and_flaws_are_applied():
    kw = dict(fps=100, duration_s=4.0, v_terminal_mm_s=10.0, tau_s=0.1, noise_mm=0.02, noise_rho=0.6,
              interval_jitter=0.02, n_outliers=4, outlier_mm=1.0, gaps_s=[(1.0, 1.5)])
    a = synthetic_trajectory(np.random.default_rng(5), **kw)
    b = synthetic_trajectory(np.random.default_rng(5), **kw)
    assert np.array_equal(a.z_mm, b.z_mm) and np.array_equal(a.t_s, b.t_s)
    assert np.all(np.diff(a.t_s) > 0)
    assert not np.any((a.t_s >= 1.0) & (a.t_s < 1.5))
    assert a.outlier.sum() <= 4  # an outlier inside the gap is removed with it
    assert np.all(np.abs(a.z_mm - a.z_true_mm)[a.outlier] >= 1.0 - 5 * 0.02)
    frame = a.to_frame(track=2)
    assert list(frame.columns) == ["frame", "t_s", "z_mm", "z_u_mm", "track"]
    assert set(frame["track"]) == {2}


def test_rising_sphere_moves_up():
    tr = synthetic_trajectory(np.random.default_rng(2), fps=50, duration_s=2.0, v_terminal_mm_s=5.0,
                              direction="up", z_release_mm=100.0)
    assert tr.direction == "up"
    assert tr.z_true_mm[-1] == pytest.approx(100.0 - 10.0)


@pytest.mark.parametrize(
    ("kw", "message"),
    [
        (dict(v_terminal_mm_s=None), "give a positive speed or a model"),
        (dict(v_terminal_mm_s=1.0, direction="sideways"), "direction = 'sideways'; expected 'down' or 'up'"),
        (dict(v_terminal_mm_s=1.0, duration_s=0.0), "gives fewer than 2 frames"),
    ],
)
def test_generator_errors(kw, message):
    args = dict(fps=30.0, duration_s=1.0) | kw
    with pytest.raises(ValueError, match=message):
        synthetic_trajectory(np.random.default_rng(0), **args)
