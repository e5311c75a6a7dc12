"""Seeded synthetic trajectories with exact ground truth, for tests and demonstrations.

A trajectory is a sphere's position along the fall axis, ``z_mm`` (positive downward), at the
times ``t_s`` a camera would record, with the flaws of real tracking:

- approach to terminal speed: none (constant speed from release), exponential with a given time
  constant, or the full equation of motion with the Basset history force
  (:class:`physics.transient.TransientModel`, algebraic approach);
- position noise correlated from frame to frame like compressed, blurred video: a stationary
  AR(1) process e_k = ρ e_{k−1} + √(1 − ρ²) σ η_k (marginal standard deviation σ);
- variable frame intervals (phone video), wild outliers, and tracking gaps.

Randomness comes only from the ``rng`` argument (``np.random.default_rng(seed)``).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from physics.transient import TransientModel

__all__ = ["SyntheticTrajectory", "synthetic_trajectory", "ar1_noise"]


def ar1_noise(rng: np.random.Generator, n: int, sigma: float, rho: float) -> NDArray[np.float64]:
    """Stationary AR(1) noise with marginal standard deviation ``sigma`` and lag-1 correlation ``rho``.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of randomness.
    n : int
        Number of samples.
    sigma : float
        Marginal standard deviation (any unit; the result has the same unit).
    rho : float
        Lag-1 correlation, −1 < ρ < 1.

    Returns
    -------
    ndarray of shape (n,)
    """
    if not -1.0 < rho < 1.0:
        raise ValueError(f"rho = {rho!r} must lie strictly between -1 and 1 (lag-1 correlation)")
    eta = rng.standard_normal(n) * sigma
    e = np.empty(n)
    if n == 0:
        return e
    e[0] = eta[0]
    innov = eta * math.sqrt(1.0 - rho**2)
    for k in range(1, n):
        e[k] = rho * e[k - 1] + innov[k]
    return e


@dataclass(frozen=True, eq=False)
class SyntheticTrajectory:
    """A synthetic track and its truth.

    Attributes
    ----------
    t_s : ndarray of shape (n,)
        Recorded times, s.
    z_mm : ndarray of shape (n,)
        Recorded positions (truth + noise + outliers), mm, positive downward.
    z_u_mm : ndarray of shape (n,) or None
        Per-point standard uncertainty as a tracker would state it (the marginal σ; it does not
        know about the correlation), mm; None for noise-free tracks.
    z_true_mm : ndarray of shape (n,)
        True positions, mm.
    v_true_mm_s : ndarray of shape (n,)
        True velocity along z, mm/s (positive downward).
    outlier : ndarray of bool, shape (n,)
        Points displaced as wild outliers.
    v_terminal_m_s : float
        True terminal speed, m/s, positive.
    direction : str
        ``"down"`` or ``"up"``.
    release_s : float
        Release time (start of motion), s.
    model : TransientModel or None
        Equation-of-motion model when used; None for the kinematic (exponential/constant) case.
    tau_s : float
        Time constant of the approach (0: constant speed from release), s.
    """

    t_s: NDArray[np.float64]
    z_mm: NDArray[np.float64]
    z_u_mm: NDArray[np.float64] | None
    z_true_mm: NDArray[np.float64]
    v_true_mm_s: NDArray[np.float64]
    outlier: NDArray[np.bool_]
    v_terminal_m_s: float
    direction: str
    release_s: float
    model: TransientModel | None
    tau_s: float

    def deficit_time_s(self, deficit: float) -> float:
        """Time since release at which 1 − v/v_t falls to ``deficit`` (0 < deficit < 1), s."""
        if not 0.0 < deficit < 1.0:
            raise ValueError(f"deficit = {deficit!r} must lie strictly between 0 and 1")
        if self.model is not None:
            return self.model.time_to_fraction(1.0 - deficit)
        return self.tau_s * math.log(1.0 / deficit)

    def to_frame(self, track: int = 0) -> pd.DataFrame:
        """The track as a trajectory DataFrame (columns ``frame, t_s, z_mm, z_u_mm, track``)."""
        out = pd.DataFrame({"frame": np.arange(self.t_s.size), "t_s": self.t_s, "z_mm": self.z_mm})
        if self.z_u_mm is not None:
            out["z_u_mm"] = self.z_u_mm
        out["track"] = track
        return out


def synthetic_trajectory(
    rng: np.random.Generator,
    *,
    fps: float,
    duration_s: float,
    v_terminal_mm_s: float | None = None,
    tau_s: float = 0.0,
    model: TransientModel | None = None,
    release_s: float = 0.0,
    start_s: float = 0.0,
    z_release_mm: float = 0.0,
    direction: str = "down",
    noise_mm: float = 0.0,
    noise_rho: float = 0.0,
    interval_jitter: float = 0.0,
    n_outliers: int = 0,
    outlier_mm: float = 1.0,
    gaps_s: Sequence[tuple[float, float]] = (),
) -> SyntheticTrajectory:
    """Render a synthetic trajectory with known truth.

    Parameters
    ----------
    rng : numpy.random.Generator
        Seeded generator; the only source of randomness.
    fps : float
        Mean frame rate, frames per second of physical time.
    duration_s : float
        Length of the record, s (frames at start_s + k/fps, k = 0 … ⌊duration·fps⌋).
    v_terminal_mm_s : float, optional
        Terminal speed, mm/s (positive) for the kinematic approach; ignored when ``model`` is given.
    tau_s : float, default 0
        Exponential time constant of the kinematic approach, s (0: constant speed from release).
    model : TransientModel, optional
        Equation-of-motion approach (with or without history force); sets speed and direction.
    release_s : float, default 0
        Release time, s; before it the sphere rests at ``z_release_mm``.
    start_s : float, default 0
        Time of the first frame, s.
    z_release_mm : float, default 0
        Position at release, mm.
    direction : {"down", "up"}
        Motion direction for the kinematic approach.
    noise_mm : float, default 0
        Marginal standard deviation of the position noise, mm.
    noise_rho : float, default 0
        Lag-1 correlation of the AR(1) position noise.
    interval_jitter : float, default 0
        Relative standard deviation of the frame intervals (variable frame rate), e.g. 0.02.
    n_outliers : int, default 0
        Number of wild points; each is displaced by ±outlier_mm·(1 + U(0, 1)).
    outlier_mm : float, default 1
        Outlier displacement scale, mm.
    gaps_s : sequence of (float, float)
        Time intervals [from, to) with no detection (tracking lost).

    Returns
    -------
    SyntheticTrajectory
    """
    n = int(math.floor(duration_s * fps)) + 1
    if n < 2:
        raise ValueError(f"duration_s = {duration_s!r} at fps = {fps!r} gives fewer than 2 frames")
    steps = np.full(n - 1, 1.0 / fps)
    if interval_jitter > 0:
        steps *= np.clip(1.0 + interval_jitter * rng.standard_normal(n - 1), 0.2, None)
    t = start_s + np.concatenate([[0.0], np.cumsum(steps)])
    since = t - release_s
    if model is not None:
        sign = 1.0 if model.direction == "down" else -1.0
        dist_mm = model.distance_m(since) * 1000.0
        speed_mm_s = model.speed_m_s(since) * 1000.0
        v_t_m_s, tau, direction_out = model.v_terminal_m_s, model.tau_s, model.direction
    else:
        if v_terminal_mm_s is None or v_terminal_mm_s <= 0:
            raise ValueError(f"v_terminal_mm_s = {v_terminal_mm_s!r}: give a positive speed or a model")
        if direction not in ("down", "up"):
            raise ValueError(f"direction = {direction!r}; expected 'down' or 'up'")
        sign = 1.0 if direction == "down" else -1.0
        theta = np.maximum(since, 0.0)
        if tau_s > 0:
            dist_mm = v_terminal_mm_s * (theta + tau_s * np.expm1(-theta / tau_s))
            speed_mm_s = -v_terminal_mm_s * np.expm1(-theta / tau_s)
        else:
            dist_mm = v_terminal_mm_s * theta
            speed_mm_s = np.where(since > 0, v_terminal_mm_s, 0.0)
        v_t_m_s, tau, direction_out = v_terminal_mm_s / 1000.0, tau_s, direction
    z_true = z_release_mm + sign * dist_mm
    z = z_true + (ar1_noise(rng, n, noise_mm, noise_rho) if noise_mm > 0 else 0.0)
    outlier = np.zeros(n, dtype=bool)
    if n_outliers > 0:
        idx = rng.choice(n, size=n_outliers, replace=False)
        z[idx] += rng.choice([-1.0, 1.0], size=n_outliers) * outlier_mm * (1.0 + rng.random(n_outliers))
        outlier[idx] = True
    keep = np.ones(n, dtype=bool)
    for lo, hi in gaps_s:
        keep &= ~((t >= lo) & (t < hi))
    return SyntheticTrajectory(
        t_s=t[keep],
        z_mm=z[keep],
        z_u_mm=np.full(int(keep.sum()), noise_mm) if noise_mm > 0 else None,
        z_true_mm=z_true[keep],
        v_true_mm_s=sign * speed_mm_s[keep],
        outlier=outlier[keep],
        v_terminal_m_s=float(v_t_m_s),
        direction=direction_out,
        release_s=float(release_s),
        model=model,
        tau_s=float(tau),
    )
