"""Figures of one analysed clip and of a series of balls, written as PNG files.

Every figure is drawn on a fresh :class:`matplotlib.figure.Figure` with the Agg canvas (no
pyplot state, safe in worker processes) and is meant to stay readable when printed in
greyscale: tracks differ by marker and line style as well as by colour, and shaded regions carry
hatching. Axes carry their units; titles say what is shown.

Inputs are the trajectory DataFrame of DEVELOPERS.md (columns ``t_s``, ``z_mm``, ``track`` and the
workflow's ``v_mm_s``, ``in_plateau``) and the summary dict of ``fallcam analyze``
(``summary.json``), read with ``.get`` for the optional parts.
"""

from __future__ import annotations

import dataclasses
import io
import math
import multiprocessing
import os
import signal
import sys
import threading
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.transforms import blended_transform_factory

from fallcam.atomic import atomic_write_bytes
from fallcam.report import finite_or_none, format_measurement
from tracker.video import GAP_FACTOR

__all__ = ["clip_figures", "plateau_residuals_um", "position_time", "residuals", "series_plot",
           "velocity_time"]

# Okabe–Ito colours (distinguishable with colour-vision deficiency); in greyscale the tracks are
# told apart by the marker and line style that go with each colour.
_TRACK_STYLES = (
    {"color": "#0072B2", "marker": "o", "linestyle": "-"},
    {"color": "#D55E00", "marker": "s", "linestyle": "--"},
    {"color": "#009E73", "marker": "^", "linestyle": "-."},
    {"color": "#CC79A7", "marker": "D", "linestyle": ":"},
    {"color": "#E69F00", "marker": "v", "linestyle": (0, (5, 1, 1, 1))},
)
_PLATEAU_HATCHES = ("//", "\\\\", "||", "--", "++")
_FIGSIZE_IN = (7.5, 4.8)
_DPI = 150
_PNG_COMPRESS_LEVEL = 3
_MARKERS_PER_TRACK = 24  # enough markers to tell tracks apart in greyscale, few enough to read
_LABEL_GAP = 0.085  # axes fraction taken by a two-line 8 pt margin label on a 4.8 in figure
_VELOCITY_BINS = 12  # block means on the plateau: few enough to see a drift through the noise

_REQUIRED_COLUMNS = ("t_s", "z_mm", "track")

# Fixed layout, inches: left (tick labels and a 10 pt axis label), right (no margin labels), top
# (a 12 pt title), bottom (tick labels and the axis label), one 8 pt legend row, the gap between
# two stacked panels (the upper one's axis label, the lower one's title).
_LEFT_IN = 0.85
_RIGHT_IN = 0.25
_TOP_IN = 0.42
_BOTTOM_IN = 0.55
_LEGEND_ROW_IN = 0.165
_LEGEND_PAD_IN = 0.12
_PANEL_GAP_IN = 0.85
_SHARED_X_GAP_IN = 0.45    # stacked panels sharing the x axis: only the lower one's title
_LEGEND_HEADROOM = 1.45    # series plot: y range over the largest speed (+2u), room for the legend
# Width of one 8 pt character (DejaVu Sans, average) and the offset of the margin labels, inches.
_CHAR_IN_8PT = 0.068
_MARGIN_LABEL_PAD_IN = 0.4


def position_time(traj: pd.DataFrame, summary: Mapping[str, Any], path: str | os.PathLike) -> Path:
    """Plot the sphere's depth against time, with plateau, timing marks and excluded zones.

    Parameters
    ----------
    traj : pandas.DataFrame
        Trajectory, one row per detection, with at least ``t_s`` (s), ``z_mm`` (mm, positive
        downward) and ``track``; ``in_plateau`` (bool) is used when present.
    summary : mapping
        Summary of the analysis (``summary.json``). Per track, ``plateau`` ({``start_s``,
        ``end_s``, ``found``}, and optionally ``exclude_top_mm`` / ``exclude_bottom_mm``, the depths
        above / below which points were excluded), ``marks`` ([{``index``, ``z_mm``,
        ``crossing_s``}]) and ``terminal_velocity_m_s`` with ``direction`` are drawn when present.
    path : str or path-like
        PNG file to write (replaced atomically).

    Returns
    -------
    pathlib.Path
        The written file.
    """
    data = _checked_trajectory(traj)
    fig, ax = _new_axes()
    by_id = _tracks_by_id(summary)
    marks_seen: dict[int, float] = {}
    zones_seen: dict[str, tuple[float, float]] = {}
    for n, (track_id, rows) in enumerate(data.groupby("track", sort=True)):
        style = _style(n)
        track = by_id.get(int(track_id), {})
        t, z = rows["t_s"].to_numpy(float), rows["z_mm"].to_numpy(float)
        plateau = _plateau(track)
        if plateau is not None:
            ax.axvspan(plateau[0], plateau[1], facecolor=style["color"], alpha=0.10,
                       hatch=_PLATEAU_HATCHES[n % len(_PLATEAU_HATCHES)], edgecolor="0.45",
                       linewidth=0.0,
                       label=f"plateau, track {track_id}: {plateau[0]:.2f}–{plateau[1]:.2f} s")
        ax.plot(*_gaps_broken(t, z), color=style["color"], linestyle=style["linestyle"],
                linewidth=1.2, marker=style["marker"], markersize=3.5, markerfacecolor="white",
                markevery=max(1, len(t) // _MARKERS_PER_TRACK), label=f"track {track_id}")
        line = _plateau_line(rows, track)
        if line is not None:
            v_mm_s, z_mean, t_mean = line
            ax.plot(t, z_mean + v_mm_s * (t - t_mean), color="black", linestyle=(0, (2, 2)),
                    linewidth=0.9, zorder=1.9,
                    label=f"straight-line fit over the plateau, track {track_id}")
        for mark in track.get("marks") or []:
            z_mark = finite_or_none(mark.get("z_mm"))
            if z_mark is not None:
                marks_seen.setdefault(int(mark.get("index", len(marks_seen))), z_mark)
            crossing = finite_or_none(mark.get("crossing_s"))
            if z_mark is not None and crossing is not None:
                first = "mark crossing" not in ax.get_legend_handles_labels()[1]
                ax.plot([crossing], [z_mark], linestyle="none", marker="x", markersize=8,
                        markeredgewidth=1.6, color="black", zorder=3,
                        label="mark crossing" if first else None)
        for name, z0, z1 in _excluded_zones(track, z):  # one band per zone, over all tracks
            lo, hi = zones_seen.get(name, (z0, z1))
            zones_seen[name] = (min(lo, z0), max(hi, z1))
    labels = _draw_marks(ax, marks_seen) + _draw_zones(ax, zones_seen)
    ax.invert_yaxis()  # deeper is lower on the page, as in the tube
    _margin_labels(ax, labels)
    ax.set_xlabel("time t (s)")
    ax.set_ylabel("depth z (mm, downward from the upper scale point)")
    ax.set_title("Position of the sphere against time")
    ax.grid(True, color="0.85", linewidth=0.6)
    _legend_below(fig, ax)
    return _save(fig, path)


def velocity_time(traj: pd.DataFrame, summary: Mapping[str, Any], path: str | os.PathLike) -> Path:
    """Plot the local velocity against time, with the terminal band and the plateau start.

    The upper panel shows the whole passage; the lower panel zooms on the plateau and shows the
    deviation from the fitted terminal velocity in per cent, where the band v_t ± 2u is visible.

    Parameters
    ----------
    traj : pandas.DataFrame
        Trajectory with ``t_s`` (s), ``track`` and ``v_mm_s`` (mm/s, positive downward);
        ``in_plateau`` (bool) is used when present.
    summary : mapping
        Summary of the analysis; per track ``terminal_velocity_m_s``,
        ``terminal_velocity_u_m_s``, ``direction`` and ``plateau`` are used when present.
    path : str or path-like
        PNG file to write.

    Returns
    -------
    pathlib.Path
        The written file.

    Raises
    ------
    ValueError
        If the trajectory has no ``v_mm_s`` column.
    """
    data = _checked_trajectory(traj, extra=("v_mm_s",))
    fig = Figure(figsize=(_FIGSIZE_IN[0], _FIGSIZE_IN[1] * 1.35), dpi=_DPI)
    FigureCanvasAgg(fig)
    ax_full, ax_zoom = fig.subplots(2, 1, height_ratios=(3, 2))
    by_id = _tracks_by_id(summary)
    zoom_drawn = False
    zoom_extent = 0.0
    for n, (track_id, rows) in enumerate(data.groupby("track", sort=True)):
        style = _style(n)
        track = by_id.get(int(track_id), {})
        t, v = rows["t_s"].to_numpy(float), rows["v_mm_s"].to_numpy(float)
        ax_full.plot(*_gaps_broken(t, v), color=style["color"], linestyle=style["linestyle"],
                     linewidth=1.0, marker=style["marker"], markersize=3.5, markerfacecolor="white",
                     markevery=max(1, len(t) // _MARKERS_PER_TRACK), label=f"track {track_id}")
        vt = _signed_terminal_mm_s(track)
        u_vt = finite_or_none(track.get("terminal_velocity_u_m_s"))
        plateau = _plateau(track)
        if vt is not None:
            half = 2.0 * 1000.0 * u_vt if u_vt is not None else 0.0
            ax_full.axhline(vt, color="black", linestyle=(0, (2, 2)), linewidth=0.9,
                            label=f"terminal velocity, track {track_id}: "
                                  f"{format_measurement(abs(vt), half)} mm/s (±2u)")
        if plateau is not None:
            for ax in (ax_full, ax_zoom):
                ax.axvline(plateau[0], color=style["color"], linestyle="-.", linewidth=1.2)
            # the label goes on the side of the zero line, away from the terminal speed
            falling = vt is None or vt > 0.0
            ax_full.annotate(f"plateau start {plateau[0]:.2f} s",
                             xy=(plateau[0], 0.03 if falling else 0.97),
                             xycoords=ax_full.get_xaxis_transform(), xytext=(4, 0),
                             textcoords="offset points", fontsize=8, rotation=90,
                             va="bottom" if falling else "top")
        if vt is not None and plateau is not None and vt != 0.0:
            in_window = (t >= plateau[0]) & (t <= plateau[1]) & np.isfinite(v)
            blocks = _block_means(t[in_window], 100.0 * (v[in_window] - vt) / vt)  # + = faster
            if blocks is not None:
                t_mid, mean_pct, se_pct = blocks
                ax_zoom.errorbar(t_mid, mean_pct, yerr=2.0 * se_pct, color=style["color"],
                                 linestyle=style["linestyle"], linewidth=1.0,
                                 marker=style["marker"], markersize=5, markerfacecolor="white",
                                 ecolor="0.2", capsize=3,
                                 label=f"block means ± 2 s.e., track {track_id}")
                zoom_extent = max(zoom_extent, float(np.max(np.abs(mean_pct) + 2.0 * se_pct)))
            if u_vt is not None:
                band_pct = 100.0 * 2.0 * 1000.0 * u_vt / abs(vt)
                ax_zoom.fill_between(plateau, -band_pct, band_pct, facecolor="0.6", alpha=0.35,
                                     hatch="xx", edgecolor="0.35", linewidth=0.0,
                                     label=f"v_t ± 2u, track {track_id}")
                zoom_extent = max(zoom_extent, band_pct)
            zoom_drawn = blocks is not None or u_vt is not None
    ax_full.axhline(0.0, color="0.5", linewidth=0.6)
    _robust_ylim(ax_full, data["v_mm_s"].to_numpy(float))
    ax_full.set_xlabel("time t (s)")
    ax_full.set_ylabel("velocity v (mm/s, positive downward)")
    ax_full.set_title("Local velocity of the sphere against time")
    ax_full.grid(True, color="0.85", linewidth=0.6)
    if zoom_drawn:
        ax_zoom.axhline(0.0, color="black", linewidth=0.8)
        if zoom_extent > 0.0:
            ax_zoom.set_ylim(-1.6 * zoom_extent, 1.6 * zoom_extent)
        ax_zoom.set_xlabel("time t (s)")
        ax_zoom.set_ylabel("speed − v_t (% of v_t)")
        ax_zoom.set_title("On the plateau: block means of the local velocity against v_t",
                          fontsize=10)
        ax_zoom.grid(True, color="0.85", linewidth=0.6)
    else:
        ax_zoom.set_axis_off()
        ax_zoom.text(0.5, 0.5, "no plateau: no terminal velocity to compare with",
                     transform=ax_zoom.transAxes, ha="center", va="center")
    _legend_below(fig, ax_full, ax_zoom)
    return _save(fig, path)


def plateau_residuals_um(traj: pd.DataFrame, summary: Mapping[str, Any]
                         ) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """Residuals of the reported straight line over each track's plateau.

    The line has the reported terminal velocity as its slope (sign from ``direction``) and
    passes through the centroid of the plateau points, which is the least-squares intercept for
    that slope; so the residuals belong to the reported number, and a wrong slope shows as a trend.

    Parameters
    ----------
    traj : pandas.DataFrame
        Trajectory with ``t_s`` (s), ``z_mm`` (mm), ``track``; ``in_plateau`` selects the points
        when present, otherwise the plateau window ``[start_s, end_s]`` of the summary.
    summary : mapping
        Summary of the analysis; per track ``terminal_velocity_m_s``, ``direction``, ``plateau``.

    Returns
    -------
    dict of int to (ndarray, ndarray)
        For each track with a terminal velocity and at least two plateau points: times (s) and
        residuals z − line (µm), both of shape (n,). Tracks without them are absent.
    """
    data = _checked_trajectory(traj)
    by_id = _tracks_by_id(summary)
    out = {}
    for track_id, rows in data.groupby("track", sort=True):
        track = by_id.get(int(track_id), {})
        line = _plateau_line(rows, track)
        if line is None:
            continue
        v_mm_s, z_mean, t_mean = line
        sel = _plateau_rows(rows, track)
        t, z = sel["t_s"].to_numpy(float), sel["z_mm"].to_numpy(float)
        out[int(track_id)] = (t, 1000.0 * (z - (z_mean + v_mm_s * (t - t_mean))))
    return out


def residuals(traj: pd.DataFrame, summary: Mapping[str, Any], path: str | os.PathLike) -> Path:
    """Plot the residuals of the straight-line fit over the plateau, in micrometres.

    See :func:`plateau_residuals_um` for the line. The legend gives each track's RMS residual and
    lag-1 autocorrelation; a band of ±2 times the median per-point uncertainty ``z_u_mm`` is drawn
    when that column is present.

    Parameters
    ----------
    traj : pandas.DataFrame
        Trajectory with ``t_s`` (s), ``z_mm`` (mm), ``track``; ``in_plateau`` and ``z_u_mm`` are
        used when present.
    summary : mapping
        Summary of the analysis; per track ``terminal_velocity_m_s``, ``direction``, ``plateau``.
    path : str or path-like
        PNG file to write.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    data = _checked_trajectory(traj)
    fig, ax = _new_axes()
    by_id = _tracks_by_id(summary)
    series = plateau_residuals_um(data, summary)
    missing = []
    extent = 0.0
    for n, track_id in enumerate(sorted(int(i) for i in data["track"].unique())):
        style = _style(n)
        if track_id not in series:
            plateau = by_id.get(track_id, {}).get("plateau") or {}
            missing.append(f"track {track_id}: {plateau.get('reason') or 'no plateau'}")
            continue
        t, res_um = series[track_id]
        rms = float(np.sqrt(np.mean(res_um**2)))
        r1 = _lag1_autocorrelation(res_um)
        r1_text = f", lag-1 autocorrelation {r1:.2f}" if r1 is not None else ""
        ax.plot(*_gaps_broken(t, res_um), color=style["color"], linestyle=style["linestyle"],
                linewidth=0.8, marker=style["marker"], markersize=3, markerfacecolor="white",
                markevery=max(1, len(t) // _MARKERS_PER_TRACK),
                label=f"track {track_id}: RMS {rms:.3g} µm over {len(t)} points{r1_text}")
        extent = max(extent, float(np.max(np.abs(res_um))))
        rows = data[data["track"] == track_id]
        if "z_u_mm" in rows:
            z_u_um = 1000.0 * float(np.nanmedian(rows["z_u_mm"].to_numpy(float)))
            if math.isfinite(z_u_um):
                ax.fill_between([t[0], t[-1]], -2.0 * z_u_um, 2.0 * z_u_um, facecolor="0.6",
                                alpha=0.3, hatch="..", edgecolor="0.4", linewidth=0.0,
                                label=f"±2 u(z) per point, track {track_id}")
                extent = max(extent, 2.0 * z_u_um)
    ax.axhline(0.0, color="black", linewidth=0.8)
    if extent > 0.0:
        ax.set_ylim(-1.1 * extent, 1.1 * extent)
    if missing:
        ax.text(0.5, 0.5, "\n".join(missing), transform=ax.transAxes, ha="center", va="center",
                fontsize=9, bbox={"facecolor": "white", "edgecolor": "0.6"})
    if not series:
        ax.set_xticks([])
        ax.set_yticks([])
    ax.set_xlabel("time t (s)")
    ax.set_ylabel("residual z − fit (µm)")
    ax.set_title("Residuals of the straight-line fit over the plateau")
    ax.grid(True, color="0.85", linewidth=0.6)
    _legend_below(fig, ax, ncols=1)
    return _save(fig, path)


def series_plot(table: Any, fit: Any, path: str | os.PathLike, *,
                rho_f_kg_m3: float | None = None) -> Path:
    """Plot the corrected terminal velocity against squared ball diameter, with the fits.

    The points are the speeds the v–d² fit of :func:`physics.series.analyze_series` uses: the
    mean speed corrected for walls and inertia (v φ / f_w, ``v_corrected_m_s``) and, for balls of
    another material, scaled to the density difference of the smallest ball. Vertical error bars
    are ±2u of the speed, horizontal ones ±2u of d² from the diameter. The lower panel shows the
    residuals from the line through the origin.

    Parameters
    ----------
    table : sequence of physics.series.BallSummary or of mappings
        One row per ball with ``ball`` (label), ``d_m``, ``u_d_m`` (m), ``v_mean_m_s``,
        ``v_corrected_m_s``, ``u_v_m_s`` (m/s) and ``rho_s_kg_m3``.
    fit : physics.series.SeriesResult or mapping
        With ``fit_through_origin`` and ``fit_with_intercept`` (physics.series.LineFit or
        mappings: ``slope_m_s_per_m2``, ``intercept_m_s``, ``mu_pa_s``, ``u_mu_pa_s``; either may
        be None), optionally ``power_law`` (``exponent``, ``u_exponent``),
        ``delta_rho_ref_kg_m3`` and ``velocities_wall_corrected``.
    path : str or path-like
        PNG file to write.
    rho_f_kg_m3 : float, optional
        Liquid density, kg/m³; needed only when the balls are of different materials.

    Returns
    -------
    pathlib.Path
        The written file.

    Raises
    ------
    ValueError
        If the table is empty or a row lacks a number, or balls of several materials come
        without ``rho_f_kg_m3``.
    """
    rows = _series_rows(table)
    fit_d = _as_dict(fit)
    d_mm = np.array([1000.0 * r["d_m"] for r in rows])
    u_d_mm = np.array([1000.0 * (finite_or_none(r.get("u_d_m")) or 0.0) for r in rows])
    density = _density_factors(rows, fit_d, rho_f_kg_m3)
    v_mm_s = 1000.0 * np.array([r["v_corrected_m_s"] for r in rows]) * density
    to_corrected = np.array([r["v_corrected_m_s"] / r["v_mean_m_s"] for r in rows]) * density
    u_v_m_s = np.array([finite_or_none(r.get("u_v_m_s")) or 0.0 for r in rows])
    u_v_mm_s = 1000.0 * u_v_m_s * to_corrected
    d2_mm2, u_d2_mm2 = d_mm**2, 2.0 * d_mm * u_d_mm

    fig = Figure(figsize=(_FIGSIZE_IN[0], _FIGSIZE_IN[1] * 1.3), dpi=_DPI)
    FigureCanvasAgg(fig)
    ax, ax_res = fig.subplots(2, 1, sharex=True, height_ratios=(3, 1.4))
    span = np.linspace(0.0, 1.08 * float(d2_mm2.max()), 50)
    # slope b in (m/s)/m² → (mm/s)/mm²: × 1000 (speed m → mm) / 10⁶ (m² → mm²) = × 1e-3
    origin = _as_dict(fit_d["fit_through_origin"]) if fit_d.get("fit_through_origin") else None
    with_icpt = _as_dict(fit_d["fit_with_intercept"]) if fit_d.get("fit_with_intercept") else None
    b0 = finite_or_none(origin.get("slope_m_s_per_m2")) if origin else None
    if b0 is not None:
        ax.plot(span, 1e-3 * b0 * span, color="black", linestyle="-", linewidth=1.1,
                label=f"fit through the origin: μ = {_mu_text(origin)}")
    if with_icpt and finite_or_none(with_icpt.get("slope_m_s_per_m2")) is not None:
        a_mm_s = 1000.0 * (finite_or_none(with_icpt.get("intercept_m_s")) or 0.0)
        u_a = finite_or_none(with_icpt.get("u_intercept_m_s"))
        ax.plot(span, a_mm_s + 1e-3 * with_icpt["slope_m_s_per_m2"] * span, color="#D55E00",
                linestyle=(0, (4, 2)), linewidth=1.1,
                label=f"fit with intercept: μ = {_mu_text(with_icpt)}, intercept "
                      f"{format_measurement(a_mm_s, None if u_a is None else 1000.0 * u_a)} mm/s")
    ax.errorbar(d2_mm2, v_mm_s, xerr=2.0 * u_d2_mm2, yerr=2.0 * u_v_mm_s, linestyle="none",
                marker="o", markersize=6, color="#0072B2", markerfacecolor="white", ecolor="0.2",
                elinewidth=1.0, capsize=3, label="balls: mean of the repeats (error bars ±2u)")
    for r, x, y in zip(rows, d2_mm2, v_mm_s, strict=True):
        label = f"{r.get('ball', '')} (n = {r['n']})" if "n" in r else str(r.get("ball", ""))
        # off the rising line: below and to the right, or, near the right edge, above and to the
        # left (the legend keeps to the headroom above the largest ball)
        right = x > 0.75 * span[-1]
        ax.annotate(label, (x, y), xytext=(-10, 8) if right else (8, -12), textcoords="offset points",
                    fontsize=8, ha="right" if right else "left", va="bottom" if right else "baseline")
    power = fit_d.get("power_law")
    if power:
        power = _as_dict(power)
        ax.text(0.98, 0.04, "log–log slope: v ∝ dⁿ with n = "
                f"{format_measurement(power.get('exponent'), power.get('u_exponent'))} "
                "(2 for a Newtonian liquid)", transform=ax.transAxes, ha="right", va="bottom",
                fontsize=8, bbox={"facecolor": "white", "edgecolor": "0.6"})
    if b0 is not None:
        ax_res.errorbar(d2_mm2, v_mm_s - 1e-3 * b0 * d2_mm2, yerr=2.0 * u_v_mm_s,
                        linestyle="none", marker="o", markersize=5, color="#0072B2",
                        markerfacecolor="white", ecolor="0.2", elinewidth=1.0, capsize=3)
        ax_res.axhline(0.0, color="black", linewidth=0.8)
    else:
        ax_res.text(0.5, 0.5, "fewer than two ball sizes: no fit", transform=ax_res.transAxes,
                    ha="center", va="center")
    walls = "walls and inertia" if fit_d.get("velocities_wall_corrected", True) else "inertia"
    ax.set_xlim(0.0, span[-1])
    # headroom above the largest ball: the legend sits there, clear of the points and labels
    ax.set_ylim(0.0, _LEGEND_HEADROOM * float(np.max(v_mm_s + 2.0 * u_v_mm_s)))
    ax.set_ylabel(f"terminal velocity, {walls} corrected (mm/s)")
    ax.set_title("Terminal velocity against squared ball diameter")
    ax.grid(True, color="0.85", linewidth=0.6)
    ax.legend(loc="upper left", fontsize=8, framealpha=0.9)
    ax_res.set_xlabel("squared ball diameter d² (mm²)")
    ax_res.set_ylabel("v − fit (mm/s)")
    ax_res.set_title("Residuals from the fit through the origin", fontsize=10)
    ax_res.grid(True, color="0.85", linewidth=0.6)
    _arrange(fig, (ax, ax_res), legend_rows=0, gap_in=_SHARED_X_GAP_IN)
    return _save(fig, path)


def clip_figures(traj: pd.DataFrame, summary: Mapping[str, Any], out_dir: str | os.PathLike, *,
                 processes: int = 1) -> dict[str, Path]:
    """Draw the three figures of one analysed clip into ``out_dir``.

    Parameters
    ----------
    traj, summary
        As for :func:`position_time`.
    out_dir : path-like
        Existing folder; the files are ``position_time.png``, ``velocity_time.png`` and
        ``residuals.png``.
    processes : int
        Draw up to this many figures at once: all but one in child processes forked from this
        one (Linux only; elsewhere, in a daemonic process or while other Python threads run, they
        are drawn one after another).
        Drawing is CPU-bound and single-threaded in matplotlib: on two cores the three take
        ~0.19 s instead of ~0.26 s (measured on the demo clip).

    Returns
    -------
    dict
        Figure name → path written, in the order above.
    """
    out = Path(out_dir)
    # the costliest first: the children take the head of the list, this process the rest
    jobs: list[tuple[str, Callable[..., Path]]] = [
        ("velocity_time", velocity_time), ("position_time", position_time), ("residuals", residuals)]
    n_children = min(processes, len(jobs)) - 1 if _can_fork() else 0
    paths: dict[str, Path] = {}
    if n_children <= 0:
        for name, draw in jobs:
            paths[name] = draw(traj, summary, out / f"{name}.png")
    else:
        # Forked, the children inherit the imported modules and the data (nothing is imported
        # again). They run only matplotlib and the PNG encoder, none of the threaded libraries
        # (decoder, OpenCV) whose pools a fork leaves behind.
        with ProcessPoolExecutor(n_children, mp_context=multiprocessing.get_context("fork"),
                                 initializer=_ignore_interrupt) as pool:
            futures = {name: pool.submit(draw, traj, summary, out / f"{name}.png")
                       for name, draw in jobs[:n_children]}
            for name, draw in jobs[n_children:]:
                paths[name] = draw(traj, summary, out / f"{name}.png")
            for name, future in futures.items():
                paths[name] = future.result()
    return {name: paths[name] for name in ("position_time", "velocity_time", "residuals")}


# ----------------------------------------------------------------------------------- helpers


def _can_fork() -> bool:
    """Child processes may be forked here: on Linux (fork is unsafe on macOS, absent on
    Windows), from a process that may have children (a Dask worker process is daemonic) and
    runs no other Python thread (a threaded worker pool: a fork copies no thread but every lock
    another one holds)."""
    return (sys.platform.startswith("linux") and not multiprocessing.current_process().daemon
            and threading.active_count() == 1)


def _ignore_interrupt() -> None:
    """Child initialiser: Ctrl-C is the parent's to handle (it waits for the children, which
    finish their figure in a fraction of a second); a child would print a traceback."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _gaps_broken(t: np.ndarray, *ys: np.ndarray) -> tuple[np.ndarray, ...]:
    """``(t, *ys)`` with a NaN point inside every gap, where the line then breaks: no line is
    drawn where the sphere was not measured (hidden, or lost and bridged). A gap is an interval
    longer than :data:`tracker.video.GAP_FACTOR` times the median one, as for the clip's frames."""
    t = np.asarray(t, float)
    steps = np.diff(t)
    gaps = np.flatnonzero(steps > GAP_FACTOR * np.median(steps)) if len(steps) >= 2 else []
    if len(gaps) == 0:
        return (t, *ys)
    at = np.asarray(gaps) + 1
    return (np.insert(t, at, t[gaps] + 0.5 * steps[gaps]),
            *(np.insert(np.asarray(y, float), at, np.nan) for y in ys))


def _new_axes() -> tuple[Figure, Any]:
    fig = Figure(figsize=_FIGSIZE_IN, dpi=_DPI)
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot()


def _save(fig: Figure, path: str | os.PathLike) -> Path:
    buffer = io.BytesIO()
    # zlib level 3 instead of 6: a third less time per figure for files ~10 % larger
    fig.savefig(buffer, format="png", dpi=_DPI, pil_kwargs={"compress_level": _PNG_COMPRESS_LEVEL})
    out = Path(path)
    atomic_write_bytes(out, buffer.getvalue())
    return out


def _style(n: int) -> dict[str, Any]:
    return _TRACK_STYLES[n % len(_TRACK_STYLES)]


def _checked_trajectory(traj: pd.DataFrame, extra: Sequence[str] = ()) -> pd.DataFrame:
    missing = [c for c in (*_REQUIRED_COLUMNS, *extra) if c not in traj.columns]
    if missing:
        raise ValueError(f"trajectory: missing column(s) {', '.join(missing)}; expected the "
                         f"columns of DEVELOPERS.md ({', '.join((*_REQUIRED_COLUMNS, *extra))})")
    if traj.empty:
        raise ValueError("trajectory: 0 rows; expected at least one detection to plot")
    return traj.sort_values(["track", "t_s"])


def _tracks_by_id(summary: Mapping[str, Any]) -> dict[int, Mapping[str, Any]]:
    return {int(t.get("id", i)): t for i, t in enumerate(summary.get("tracks") or [])}


def _plateau(track: Mapping[str, Any]) -> tuple[float, float] | None:
    p = track.get("plateau") or {}
    start, end = finite_or_none(p.get("start_s")), finite_or_none(p.get("end_s"))
    if p.get("found", True) is False or start is None or end is None or end <= start:
        return None
    return start, end


def _signed_terminal_mm_s(track: Mapping[str, Any]) -> float | None:
    """Terminal velocity in the trajectory's sign convention (mm/s, positive downward)."""
    vt = finite_or_none(track.get("terminal_velocity_m_s"))
    if vt is None:
        return None
    return (-1.0 if track.get("direction") == "up" else 1.0) * 1000.0 * abs(vt)


def _plateau_rows(rows: pd.DataFrame, track: Mapping[str, Any]) -> pd.DataFrame:
    if "in_plateau" in rows:
        return rows[rows["in_plateau"].astype(bool)]
    plateau = _plateau(track)
    if plateau is None:
        return rows.iloc[0:0]
    return rows[(rows["t_s"] >= plateau[0]) & (rows["t_s"] <= plateau[1])]


def _plateau_line(rows: pd.DataFrame, track: Mapping[str, Any]) -> tuple[float, float, float] | None:
    """Reported straight line over the plateau: (slope mm/s, mean z mm, mean t s), or None."""
    vt = _signed_terminal_mm_s(track)
    sel = _plateau_rows(rows, track)
    if vt is None or len(sel) < 2:
        return None
    return vt, float(sel["z_mm"].mean()), float(sel["t_s"].mean())


def _excluded_zones(track: Mapping[str, Any], z: np.ndarray) -> list[tuple[str, float, float]]:
    p = track.get("plateau") or {}
    up = track.get("direction") == "up"
    zones = []
    top, bottom = finite_or_none(p.get("exclude_top_mm")), finite_or_none(p.get("exclude_bottom_mm"))
    z_lo, z_hi = float(np.nanmin(z)), float(np.nanmax(z))
    if top is not None:
        name = "near the surface" if up else "entry zone"
        zones.append((f"{name} (excluded)", min(z_lo, top), top))
    if bottom is not None:
        name = "release zone" if up else "within 1 D of the bottom"
        zones.append((f"{name} (excluded)", bottom, max(z_hi, bottom)))
    return zones


def _draw_marks(ax: Any, marks: Mapping[int, float]) -> list[tuple[float, str, str]]:
    """Draw the timing marks; return their margin labels (depth mm, text, colour)."""
    labels = []
    for index, z_mark in sorted(marks.items()):
        ax.axhline(z_mark, color="black", linestyle=":", linewidth=1.2)
        labels.append((z_mark, f"mark {index + 1}\nz = {z_mark:.1f} mm", "black"))
    return labels


def _draw_zones(ax: Any, zones: Mapping[str, tuple[float, float]]) -> list[tuple[float, str, str]]:
    """Draw the excluded zones; return their margin labels (depth mm, text, colour)."""
    labels = []
    for name, (z0, z1) in sorted(zones.items(), key=lambda item: item[1]):
        if z1 <= z0:
            continue
        ax.axhspan(z0, z1, facecolor="0.75", alpha=0.35, hatch="xx", edgecolor="0.5",
                   linewidth=0.0)
        labels.append((0.5 * (z0 + z1), name.replace(" (", "\n("), "0.25"))
    return labels


def _margin_labels(ax: Any, labels: Sequence[tuple[float, str, str]]) -> None:
    """Write labels in the right margin at their depths, pushed apart so that none overlap.

    A label moved away from its depth gets a thin leader line to it.
    """
    if not labels:
        return
    bottom, top = ax.get_ylim()  # (bottom, top) of the drawn axis, inverted or not

    def to_fraction(y: float) -> float:
        return (y - bottom) / (top - bottom)

    order = sorted(labels, key=lambda item: to_fraction(item[0]))
    want = [min(max(to_fraction(y), 0.0), 1.0) for y, _, _ in order]
    placed = list(want)
    for i in range(1, len(placed)):  # upward pass: keep a gap above the previous label
        placed[i] = max(placed[i], placed[i - 1] + _LABEL_GAP)
    overflow = placed[-1] - 1.0
    if overflow > 0.0:
        placed = [f - overflow for f in placed]
        for i in range(len(placed) - 2, -1, -1):  # downward pass after the shift
            placed[i] = min(placed[i], placed[i + 1] - _LABEL_GAP)
    anchor = blended_transform_factory(ax.transAxes, ax.transData)
    ax.figure._fallcam_right_in = _MARGIN_LABEL_PAD_IN + _CHAR_IN_8PT * max(
        len(line) for _, text, _ in labels for line in text.splitlines())
    for (y, text, colour), f_want, f_put in zip(order, want, placed, strict=True):
        moved = abs(f_put - f_want) > 0.01
        ax.annotate(text, xy=(1.0, y), xycoords=anchor, xytext=(1.03, f_put),
                    textcoords="axes fraction", va="center", ha="left", fontsize=8,
                    color=colour, annotation_clip=False,
                    arrowprops={"arrowstyle": "-", "linewidth": 0.6, "color": "0.4"}
                    if moved else None)


def _legend_below(fig: Figure, *axes: Any, ncols: int = 2) -> None:
    """One legend for the whole figure, below the axes, where it cannot hide data."""
    handles, labels = [], []
    for ax in axes:
        h, lab = ax.get_legend_handles_labels()
        handles.extend(h)
        labels.extend(lab)
    rows = 0
    if handles:
        rows = math.ceil(len(handles) / ncols)
        fig.legend(handles, labels, loc="lower center", bbox_to_anchor=(0.5, 0.0), ncols=ncols,
                   fontsize=8, frameon=False, borderaxespad=0.3)
    _arrange(fig, axes, legend_rows=rows)


def _arrange(fig: Figure, axes: Sequence[Any], *, legend_rows: int,
             gap_in: float = _PANEL_GAP_IN) -> None:
    """Fixed margins (inches) around the axes: room for tick labels, axis labels, titles, the
    legend rows below and any labels in the right margin. Cheaper than a layout engine (which
    measures every text of the figure before the real drawing) and the same on every run."""
    w_in, h_in = fig.get_size_inches()
    right_in = getattr(fig, "_fallcam_right_in", _RIGHT_IN)
    bottom_in = _BOTTOM_IN + legend_rows * _LEGEND_ROW_IN + (_LEGEND_PAD_IN if legend_rows else 0.0)
    shown = [ax for ax in axes if ax.axison]
    gaps_in = gap_in * max(len(axes) - 1, 0)
    axes_h_in = h_in - _TOP_IN - bottom_in - gaps_in
    fig.subplots_adjust(left=_LEFT_IN / w_in, right=1.0 - right_in / w_in, top=1.0 - _TOP_IN / h_in,
                        bottom=bottom_in / h_in,
                        hspace=gap_in / (axes_h_in / max(len(axes), 1)) if shown else 0.2)


def _robust_ylim(ax: Any, values: np.ndarray) -> None:
    """Keep a few wild local velocities (tracking glitches) from squashing the plot."""
    finite = values[np.isfinite(values)]
    if finite.size < 10:
        return
    lo, hi = np.percentile(finite, [0.5, 99.5])
    lo, hi = min(float(lo), 0.0), max(float(hi), 0.0)
    pad = 0.08 * (hi - lo) if hi > lo else 1.0
    ax.set_ylim(lo - pad, hi + pad)


def _block_means(t: np.ndarray, y: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Means of ``y`` over contiguous blocks of ``t``: (mid-times, means, standard errors)."""
    n_blocks = min(_VELOCITY_BINS, t.size // 3)
    if n_blocks < 1:
        return None
    parts = np.array_split(np.arange(t.size), n_blocks)
    t_mid = np.array([t[p].mean() for p in parts])
    mean = np.array([y[p].mean() for p in parts])
    se = np.array([y[p].std(ddof=1) / np.sqrt(p.size) for p in parts])
    return t_mid, mean, se


def _lag1_autocorrelation(x: np.ndarray) -> float | None:
    if x.size < 3:
        return None
    d = x - x.mean()
    denom = float(np.dot(d, d))
    return float(np.dot(d[:-1], d[1:]) / denom) if denom > 0.0 else None


def _as_dict(obj: Any) -> dict[str, Any]:
    if isinstance(obj, Mapping):
        return dict(obj)
    if hasattr(obj, "to_dict"):
        return dict(obj.to_dict())
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return dataclasses.asdict(obj)
    raise ValueError(f"series: got {type(obj).__name__}; expected a mapping or a result dataclass")


def _series_rows(table: Any) -> list[dict[str, Any]]:
    rows = [_as_dict(r) for r in table]
    if not rows:
        raise ValueError("series table: 0 rows; expected one row per ball")
    for i, r in enumerate(rows):
        for key in ("d_m", "v_mean_m_s", "v_corrected_m_s", "rho_s_kg_m3"):
            x = finite_or_none(r.get(key))
            if x is None or x <= 0.0:
                raise ValueError(f"series table row {i} ({r.get('ball', '?')}): {key} = "
                                 f"{r.get(key)!r}; expected a positive number")
    return rows


def _density_factors(rows: Sequence[Mapping[str, Any]], fit: Mapping[str, Any],
                     rho_f_kg_m3: float | None) -> np.ndarray:
    """Δρ_ref/Δρ per ball (1 for a single material), as physics.series scales its fit data."""
    rho_s = np.array([float(r["rho_s_kg_m3"]) for r in rows])
    if np.all(rho_s == rho_s[0]):
        return np.ones(len(rows))
    if rho_f_kg_m3 is None:
        raise ValueError("series_plot: rho_f_kg_m3 = None with balls of several densities; "
                         "expected the liquid density in kg/m³")
    drho = np.abs(rho_s - float(rho_f_kg_m3))
    ref = finite_or_none(fit.get("delta_rho_ref_kg_m3"))
    return (drho[int(np.argmin([r["d_m"] for r in rows]))] if ref is None else ref) / drho


def _mu_text(line: Mapping[str, Any]) -> str:
    return f"{format_measurement(line.get('mu_pa_s'), line.get('u_mu_pa_s'))} Pa·s (u, k = 1)"
