"""Timing marks: when the sphere crossed each mark, whether it was at terminal speed there, and
what a hand-held stopwatch between two marks would have given.

The classic lab times a ball between two rubber bands and *assumes* it is at terminal speed by
the first one (user-needs.md §1.1) and that the stopwatch's resolution is the timing error
(§1.8). From the video track this module answers both: the crossing time of each mark (from a
local straight-line fit around the crossing, with its uncertainty), the local speed there and
its deficit below the terminal velocity, and — between consecutive marks — the transit time, the
speed a stopwatch would give, and the hand-timing scatter of about 0.10 s per start-and-stop
interval (Am. J. Phys. 87(2), 110 (2019), "Manual timing in physics experiments") beside the
video's own timing uncertainty.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from physics._results import ResultDict
from physics.plateau import Plateau
from physics.terminal import MM_PER_M, TerminalFit, fit_line, trajectory_arrays

__all__ = [
    "HAND_TIMING_U_S",
    "TERMINAL_BAND_K",
    "MarkResult",
    "StopwatchInterval",
    "mark_crossings",
    "stopwatch_comparison",
]

#: Random error of a hand-timed start-and-stop interval, s (published: Am. J. Phys. 87(2), 110
#: (2019), from 4304 stopwatch reaction times: biases cancel on average, ≈0.10 s per interval).
HAND_TIMING_U_S = 0.10
#: Coverage factor of the band around v_t that a local speed must fall in to count as terminal.
TERMINAL_BAND_K = 2.0
_RECENTRE = 3  # local fits around a crossing (the first one starts at the first point past the mark)


@dataclass(frozen=True)
class MarkResult(ResultDict):
    """One timing mark.

    Attributes
    ----------
    index : int
        Position of the mark in the input list (0-based).
    z_mm : float
        Mark position along the fall axis, mm.
    crossed : bool
        Whether the track crosses the mark.
    crossing_s : float or None
        Interpolated crossing time, s.
    crossing_u_s : float or None
        Its standard uncertainty (local fit; covariance from the plateau's AR(1) noise model), s.
    local_speed_m_s : float or None
        Speed at the mark from the local fit, m/s.
    local_speed_u_m_s : float or None
        Its standard uncertainty, m/s.
    terminal_at_mark : bool
        True when the mark lies at or after the plateau start (in the direction of motion) *and*
        the local speed lies within k = 2 combined standard uncertainties of v_t.
    velocity_deficit : float or None
        (v_t − local speed)/v_t: fraction below terminal speed at the mark (negative: faster).
    note : str
        Why a field is missing, or what limits the result.
    """

    index: int
    z_mm: float
    crossed: bool
    crossing_s: float | None
    crossing_u_s: float | None
    local_speed_m_s: float | None
    local_speed_u_m_s: float | None
    terminal_at_mark: bool
    velocity_deficit: float | None
    note: str = ""


def _local_covariance(t_window: NDArray[np.float64], plateau: Plateau, fallback: NDArray[np.float64]) -> NDArray[np.float64]:
    """Covariance of (z at the window's mean time, slope) of a local line under the plateau's
    AR(1) noise model — better determined than a long-run variance from a few dozen residuals.
    Falls back to the local HAC covariance when the plateau has no noise model."""
    if plateau.noise_mm is None or plateau.noise_lag1 is None:
        return fallback
    tc = t_window - t_window.mean()
    x = np.column_stack([np.ones_like(tc), tc])
    lag = np.abs(np.arange(tc.size)[:, None] - np.arange(tc.size)[None, :])
    r = plateau.noise_mm**2 * plateau.noise_lag1**lag
    bread = np.linalg.inv(x.T @ x)
    return bread @ x.T @ r @ x @ bread


def mark_crossings(
    t_s: ArrayLike | pd.DataFrame,
    z_mm: ArrayLike | None = None,
    marks_z_mm: Sequence[float] = (),
    *,
    terminal: TerminalFit,
    plateau: Plateau,
    window: int | None = None,
) -> list[MarkResult]:
    """Crossing time, terminal-speed check and velocity deficit at each timing mark.

    Parameters
    ----------
    t_s : array_like of shape (n,) or pandas.DataFrame
        Times, s (or a one-track trajectory DataFrame; then omit ``z_mm``).
    z_mm : array_like of shape (n,), optional
        Positions along the fall axis, mm, positive downward.
    marks_z_mm : sequence of float
        Mark positions on the same axis, mm (any order; results keep the input order).
    terminal : TerminalFit
        Terminal-velocity fit of this track.
    plateau : Plateau
        Plateau of this track (its outlier mask is honoured; its start decides "after the
        plateau start").
    window : int, optional
        Points in the local fit around each crossing (odd, ≥ 5); default the plateau's window.

    Returns
    -------
    list of MarkResult
        One per mark. A mark outside the tracked range is returned with ``crossed`` False.
    """
    t, z, _ = trajectory_arrays(t_s, z_mm)
    if plateau.mask.shape != t.shape:
        raise ValueError(
            f"plateau belongs to a track of {plateau.mask.size} points, the trajectory has {t.size}"
        )
    w = plateau.window_points if window is None else window
    if not isinstance(w, (int, np.integer)) or w < 5 or w % 2 == 0:
        raise ValueError(f"window = {w!r} must be an odd integer ≥ 5 (points)")
    keep = ~plateau.outlier_mask
    tk, zk = t[keep], z[keep]
    sign = 1.0 if terminal.direction == "down" else -1.0
    v_t = terminal.v_m_s
    results = []
    for i, mark in enumerate(float(m) for m in marks_z_mm):
        ahead = np.flatnonzero(sign * (zk - mark) >= 0)
        if ahead.size == 0 or ahead[0] == 0 or tk.size < w:
            where = "beyond the end" if ahead.size == 0 else "before the start"
            results.append(MarkResult(i, mark, False, None, None, None, None, False, None,
                                      f"mark at z = {mark:.4g} mm lies {where} of the tracked range "
                                      f"({zk.min():.4g} … {zk.max():.4g} mm)"))
            continue
        # centre the local window on the crossing; re-centring on the fitted crossing removes the
        # bias of starting from the first noisy point past the mark (correlated noise is then
        # ahead of the truth all around it)
        centre = float(tk[ahead[0]])
        for _ in range(_RECENTRE):
            k = int(np.searchsorted(tk, centre))
            lo = int(np.clip(k - w // 2, 0, tk.size - w))
            fit = fit_line(tk[lo : lo + w], zk[lo : lo + w])
            if fit.slope_mm_s * sign <= 0:
                break
            centre = fit.t_ref_s + (mark - fit.z_ref_mm) / fit.slope_mm_s
        b = fit.slope_mm_s
        cov = _local_covariance(tk[lo : lo + w], plateau, fit.cov_hac)
        if b * sign <= 0:
            results.append(MarkResult(i, mark, False, None, None, None, None, False, None,
                                      f"no motion towards the mark at z = {mark:.4g} mm in the local fit"))
            continue
        dt = (mark - fit.z_ref_mm) / b
        grad = np.array([-1.0 / b, -dt / b])
        crossing_u = float(np.sqrt(max(grad @ cov @ grad, 0.0)))
        speed = abs(b) / MM_PER_M
        speed_u = float(np.sqrt(cov[1, 1])) / MM_PER_M
        deficit = (v_t - speed) / v_t
        band = TERMINAL_BAND_K * math.hypot(speed_u, terminal.u_v_m_s)
        after_start = plateau.found and plateau.start_mm is not None and sign * (mark - plateau.start_mm) >= 0
        note = "" if plateau.found else "no plateau: terminal speed not established on this track"
        results.append(MarkResult(
            index=i,
            z_mm=mark,
            crossed=True,
            crossing_s=fit.t_ref_s + dt,
            crossing_u_s=crossing_u,
            local_speed_m_s=speed,
            local_speed_u_m_s=speed_u,
            terminal_at_mark=bool(after_start and abs(speed - v_t) <= band),
            velocity_deficit=deficit,
            note=note,
        ))
    return results


@dataclass(frozen=True)
class StopwatchInterval(ResultDict):
    """What a stopwatch between two consecutive marks would have given.

    Attributes
    ----------
    from_index, to_index : int
        Mark indices (input order) of the interval.
    distance_mm : float
        Distance between the marks, mm (the scale's own uncertainty is not included).
    transit_s : float
        Transit time from the video track, s.
    transit_u_s : float
        Video timing uncertainty of the transit (the two crossing uncertainties in quadrature), s.
    stopwatch_speed_m_s : float
        distance / transit: the mean speed a perfect stopwatch would give, m/s.
    hand_timing_u_s : float
        Hand-timing scatter of one start-and-stop interval, s (0.10 s, Am. J. Phys. 87(2), 110).
    hand_speed_u_m_s : float
        The speed uncertainty that scatter causes, m/s.
    video_speed_u_m_s : float
        The speed uncertainty from the video timing, m/s.
    relative_to_terminal : float or None
        stopwatch speed / v_t − 1 (negative when the ball was still accelerating), or None.
    """

    from_index: int
    to_index: int
    distance_mm: float
    transit_s: float
    transit_u_s: float
    stopwatch_speed_m_s: float
    hand_timing_u_s: float
    hand_speed_u_m_s: float
    video_speed_u_m_s: float
    relative_to_terminal: float | None = field(default=None)


def stopwatch_comparison(
    marks: Sequence[MarkResult], *, terminal: TerminalFit | None = None
) -> list[StopwatchInterval]:
    """Transit times and stopwatch speeds between consecutive crossed marks.

    Parameters
    ----------
    marks : sequence of MarkResult
        From :func:`mark_crossings`; ordered by crossing time here, uncrossed marks skipped.
    terminal : TerminalFit, optional
        When given, each interval's speed is compared with v_t.

    Returns
    -------
    list of StopwatchInterval
        One per pair of consecutive crossed marks (empty with fewer than two).
    """
    crossed = sorted((m for m in marks if m.crossed and m.crossing_s is not None), key=lambda m: m.crossing_s)
    out = []
    for a, b in zip(crossed, crossed[1:]):
        transit = float(b.crossing_s) - float(a.crossing_s)
        if transit <= 0:
            continue
        u = math.hypot(a.crossing_u_s or 0.0, b.crossing_u_s or 0.0)
        distance = abs(b.z_mm - a.z_mm)
        speed = distance / transit / MM_PER_M
        out.append(StopwatchInterval(
            from_index=a.index,
            to_index=b.index,
            distance_mm=distance,
            transit_s=transit,
            transit_u_s=u,
            stopwatch_speed_m_s=speed,
            hand_timing_u_s=HAND_TIMING_U_S,
            hand_speed_u_m_s=speed * HAND_TIMING_U_S / transit,
            video_speed_u_m_s=speed * u / transit,
            relative_to_terminal=None if terminal is None else speed / terminal.v_m_s - 1.0,
        ))
    return out
