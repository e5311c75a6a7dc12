"""The self-contained ``report.html`` of an analysis or a series.

One HTML file with inline CSS and the figures embedded as base64 PNG: no external assets, so it
can be mailed, archived or printed as it is. It shows the headline numbers with their
uncertainties, the corrections applied, the GUM budget with its dominant term, the timing-mark
check and stopwatch comparison, the comparison with a reference liquid, every warning, the clip's
timing facts, the safety cautions and the versions and inputs that produced it.

Every string taken from the summary is escaped with :func:`html.escape`. The summary is read with
``.get`` throughout (see ``summary.json`` in INTERFACE.md): parts that are missing are left out or
shown as "—".
"""

from __future__ import annotations

import base64
import html
import json
import math
import os
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from fallcam.atomic import atomic_write_text
from fallcam.safety import SAFETY_CAUTIONS

__all__ = ["finite_or_none", "format_measurement", "write_report", "write_series_report"]

REPORT_NAME = "report.html"

_FIGURE_CAPTIONS = {
    "position_time": "Depth of the sphere against time. Hatched columns: the plateau used for the "
                     "terminal-velocity fit; dotted lines: timing marks (× where crossed); "
                     "cross-hatched bands: excluded zones.",
    "velocity_time": "Local velocity against time with the terminal velocity and its band "
                     "v_t ± 2u; dash-dotted line: start of the plateau. Lower panel: deviation "
                     "from v_t on the plateau.",
    "residuals": "Residuals of the straight-line fit over the plateau. Structure (waves, a trend) "
                 "means the speed was not constant; a large lag-1 autocorrelation means "
                 "frame-to-frame correlated errors.",
    "series": "Terminal velocity against squared ball diameter with the fit through the origin "
              "(and with an intercept), error bars ±2u; lower panel: residuals.",
}

_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, Helvetica, Arial, sans-serif;
       color: #111; max-width: 60rem; margin: 1.5rem auto; padding: 0 1rem; line-height: 1.4; }
h1 { font-size: 1.5rem; margin-bottom: 0.2rem; }
h2 { font-size: 1.2rem; border-bottom: 2px solid #333; padding-bottom: 0.15rem; margin-top: 2rem; }
h3 { font-size: 1.05rem; margin-bottom: 0.3rem; }
.meta { color: #444; font-size: 0.9rem; }
.warnings { border: 3px solid #b00; background: #fff3f3; padding: 0.6rem 1rem; margin: 1rem 0; }
.warnings h2 { border: none; margin: 0 0 0.3rem 0; color: #b00; }
.warnings li { margin: 0.2rem 0; }
.ok { border: 2px solid #060; background: #f2fbf2; padding: 0.4rem 1rem; margin: 1rem 0; }
.cards { display: flex; flex-wrap: wrap; gap: 0.6rem; margin: 0.6rem 0; }
.card { border: 1.5px solid #333; padding: 0.4rem 0.8rem; min-width: 15rem; flex: 1 1 15rem; }
.card .label { font-size: 0.8rem; color: #444; }
.card .value { font-size: 1.2rem; font-weight: 600; overflow-wrap: anywhere; }
.card .note { font-size: 0.78rem; color: #444; }
table { border-collapse: collapse; margin: 0.5rem 0 1rem 0; font-size: 0.9rem; }
th, td { border: 1px solid #999; padding: 0.2rem 0.5rem; text-align: left; vertical-align: top; }
th { background: #eee; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.dominant td { font-weight: 700; background: #fff6d6; }
.bar { display: inline-block; height: 0.8rem; background: #555; border: 1px solid #000;
       vertical-align: middle; }
.bartrack { display: inline-block; width: 8rem; border: 1px solid #999; line-height: 0; }
figure { margin: 1rem 0; page-break-inside: avoid; break-inside: avoid; }
figure img { max-width: 100%; border: 1px solid #ccc; }
figcaption { font-size: 0.85rem; color: #333; }
ul.safety li { margin: 0.15rem 0; }
code, pre { font-family: ui-monospace, Menlo, Consolas, monospace; font-size: 0.85rem; }
pre { white-space: pre-wrap; word-break: break-all; background: #f6f6f6; padding: 0.4rem; }
@media print {
  body { max-width: none; margin: 0; font-size: 10pt; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  h2 { page-break-after: avoid; break-after: avoid; }
  table, .card, .warnings { page-break-inside: avoid; break-inside: avoid; }
}
"""


# ------------------------------------------------------------------------------ public API


def format_measurement(value: float | None, u: float | None, *, digits: int = 2) -> str:
    """Format a value with its uncertainty, the uncertainty rounded to ``digits`` significant
    digits and the value to the same decimal place.

    Parameters
    ----------
    value : float or None
        The measured value (any unit; the caller scales it).
    u : float or None
        Its uncertainty in the same unit; ``None``, zero or non-finite gives the value alone with
        five significant digits.
    digits : int, optional
        Significant digits of the uncertainty (2 by default, as GUM 7.2.6 suggests).

    Returns
    -------
    str
        E.g. ``"10.0123 ± 0.0045"``, ``"(3.21 ± 0.15)e-05"`` for very small or large values,
        ``"—"`` when the value is missing.
    """
    v = finite_or_none(value)
    if v is None:
        return "—"
    uu = finite_or_none(u)
    if uu is None or uu <= 0.0:
        return f"{v:.5g}"
    scale_exp = 0
    magnitude = max(abs(v), uu)
    if magnitude >= 1e5 or magnitude < 1e-3:
        scale_exp = math.floor(math.log10(magnitude))
        v, uu = v / 10.0**scale_exp, uu / 10.0**scale_exp
    decimals = max(0, digits - 1 - math.floor(math.log10(uu)))
    # rounding may carry the uncertainty to one more digit (0.0996 → 0.10): keep the rounded one
    text = f"{v:.{decimals}f} ± {uu:.{decimals}f}"
    return f"({text})e{scale_exp:+03d}" if scale_exp else text


def write_report(summary: Mapping[str, Any], out_dir: str | os.PathLike,
                 figure_paths: Mapping[str, str | os.PathLike] | None = None) -> Path:
    """Write ``report.html`` for one analysed clip.

    Parameters
    ----------
    summary : mapping
        The summary of ``fallcam analyze`` (the content of ``summary.json``).
    out_dir : str or path-like
        Folder to write into (must exist); the file is replaced atomically.
    figure_paths : mapping of str to path, optional
        PNG files to embed, keyed by name (``position_time``, ``velocity_time``, ``residuals``
        get their captions; other names are shown with the name as caption). Missing files are
        listed as missing instead of embedded.

    Returns
    -------
    pathlib.Path
        ``out_dir/report.html``.
    """
    clip = str(summary.get("clip") or "clip")
    parts = [_header(f"Falling-ball analysis: {Path(clip).name}", summary)]
    parts.append(_warnings_box(_all_warnings(summary)))
    tracks = list(summary.get("tracks") or [])
    if not tracks:
        parts.append("<h2>Results</h2><p>No sphere passage was found in this clip.</p>")
    for track in tracks:
        parts.append(_track_section(track, summary, several=len(tracks) > 1))
    parts.append(_reference_section(summary.get("reference"), tracks))
    parts.append(_figures_section(figure_paths or {}))
    parts.append(_clip_section(summary))
    parts.append(_safety_section())
    parts.append(_provenance_section(summary))
    return _write(out_dir, f"fallcam report: {Path(clip).name}", parts)


def write_series_report(series: Mapping[str, Any], out_dir: str | os.PathLike,
                        figure_paths: Mapping[str, str | os.PathLike] | None = None) -> Path:
    """Write ``report.html`` for ``fallcam series`` (several clips, balls and repeats).

    Parameters
    ----------
    series : mapping
        The fields of :class:`physics.series.SeriesResult` (its ``to_dict()``: ``balls``,
        ``drops``, ``pooled``, ``fit_through_origin``, ``fit_with_intercept``, ``power_law``,
        ``velocities_wall_corrected``, ``warnings``) plus what the workflow adds, all read with
        ``.get``: ``manifest`` (str), ``budget`` (GUM budget of the pooled viscosity, as in the
        analysis summary: its ``expanded_U_rel`` gives the stated uncertainty),
        ``coverage_factor_k`` (default 2), ``clips`` (one row per clip, e.g. from the batch
        table), ``reference``, ``command``, ``versions``, ``rig``, ``created_utc``.
    out_dir : str or path-like
        Folder to write into (must exist).
    figure_paths : mapping of str to path, optional
        PNG files to embed (``series`` gets its caption).

    Returns
    -------
    pathlib.Path
        ``out_dir/report.html``.
    """
    name = Path(str(series.get("manifest") or "series")).name
    parts = [_header(f"Falling-ball series: {name}", series)]
    parts.append(_warnings_box([str(w) for w in series.get("warnings") or []]))
    parts.append(_series_results(series))
    if series.get("budget"):
        parts.append("<h2>Uncertainty budget of the pooled viscosity</h2>")
        parts.append(_budget_table(series["budget"]))
    parts.append(_balls_table(series.get("balls") or []))
    parts.append(_drops_table(series.get("drops") or []))
    if series.get("clips"):
        parts.append(f"<h2>Clips</h2>{_rows_table(series['clips'])}")
    parts.append(_reference_section(series.get("reference"), []))
    parts.append(_figures_section(figure_paths or {}))
    parts.append(_safety_section())
    parts.append(_provenance_section(series))
    return _write(out_dir, f"fallcam series report: {name}", parts)


# ------------------------------------------------------------------------------ sections


def _write(out_dir: str | os.PathLike, title: str, parts: Iterable[str]) -> Path:
    body = "\n".join(p for p in parts if p)
    page = (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<title>{_e(title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n{body}\n"
        "</body>\n</html>\n"
    )
    return atomic_write_text(Path(out_dir) / REPORT_NAME, page)


def _header(title: str, summary: Mapping[str, Any]) -> str:
    bits = []
    if summary.get("created_utc"):
        bits.append(f"created {_e(summary['created_utc'])} (UTC)")
    version = summary.get("fallcam_version") or (summary.get("versions") or {}).get("fallcam")
    if version:
        bits.append(f"fallcam {_e(version)}")
    if summary.get("clip"):
        bits.append(f"clip <code>{_e(summary['clip'])}</code>")
    return f"<h1>{_e(title)}</h1>\n<p class=\"meta\">{' · '.join(bits)}</p>"


def _all_warnings(summary: Mapping[str, Any]) -> list[str]:
    out = [str(w) for w in summary.get("warnings") or []]
    tracks = summary.get("tracks") or []
    for track in tracks:
        prefix = f"track {track.get('id', '?')}: " if len(tracks) > 1 else ""
        out.extend(prefix + str(w) for w in track.get("warnings") or [])
    ref = summary.get("reference") or {}
    out.extend(f"reference liquid: {w}" for w in ref.get("warnings") or [])
    return out


def _warnings_box(warnings: Sequence[str]) -> str:
    if not warnings:
        return "<div class=\"ok\">No warnings.</div>"
    items = "".join(f"<li>{_e(w)}</li>" for w in warnings)
    return (f"<div class=\"warnings\" role=\"alert\"><h2>⚠ Warnings ({len(warnings)})</h2>"
            f"<ul>{items}</ul></div>")


def _track_section(track: Mapping[str, Any], summary: Mapping[str, Any], several: bool) -> str:
    title = f"Results, track {track.get('id', '?')}" if several else "Results"
    direction = track.get("direction") or "?"
    plateau = track.get("plateau") or {}
    parts = [f"<h2>{_e(title)}</h2>", "<div class=\"cards\">"]
    vt = finite_or_none(track.get("terminal_velocity_m_s"))
    vt_u = finite_or_none(track.get("terminal_velocity_u_m_s"))
    parts.append(_card("terminal velocity v_t",
                       f"{_milli(vt, vt_u)} mm/s" if vt is not None else "—",
                       f"{_e(direction)}ward; standard uncertainty (k = 1)"))
    mu = finite_or_none(track.get("viscosity_pa_s"))
    k = finite_or_none(track.get("coverage_factor_k")) or 2.0
    big_u = finite_or_none(track.get("viscosity_U_pa_s"))
    if big_u is None and finite_or_none(track.get("viscosity_u_pa_s")) is not None:
        big_u = k * float(track["viscosity_u_pa_s"])
    if mu is None:
        parts.append(_card("viscosity μ", "not computed",
                           "the rig lacks what the force balance needs (see warnings)"))
    else:
        parts.append(_card("viscosity μ", f"{format_measurement(mu, big_u)} Pa·s",
                           f"expanded uncertainty (k = {k:g})"))
    parts.append(_card("Reynolds number Re", _plain(track.get("reynolds_number")),
                       "sphere diameter based"))
    parts.append(_card("wall factor", _plain(track.get("wall_factor")),
                       "v measured / v in unbounded liquid"))
    parts.append("</div>")
    facts = [
        ("terminal speed reached", _yes_no(track.get("terminal_reached"))),
        ("points on this passage", _plain(track.get("n_points"), ".0f")),
    ]
    if plateau.get("found", True) and finite_or_none(plateau.get("start_s")) is not None:
        facts.append(("plateau", f"{_fmt(plateau.get('start_s'), '.3f')}–"
                                 f"{_fmt(plateau.get('end_s'), '.3f')} s, depth "
                                 f"{_fmt(plateau.get('start_mm'), '.1f')}–"
                                 f"{_fmt(plateau.get('end_mm'), '.1f')} mm"))
    elif plateau:
        facts.append(("plateau", f"not found: {_e(plateau.get('reason') or 'no reason given')}"))
    if finite_or_none(plateau.get("settling_time_s")) is not None:
        facts.append(("settling time (estimate)", f"{_fmt(plateau['settling_time_s'], '.3g')} s"))
    if finite_or_none(track.get("stokes_viscosity_pa_s")) is not None:
        facts.append(("Stokes viscosity, no corrections",
                      f"{_fmt(track['stokes_viscosity_pa_s'], '.5g')} Pa·s"))
    for key, label in (("lateral_offset_mm", "mean offset from the scale axis"),
                       ("lateral_drift_mm", "sideways drift over the passage")):
        if finite_or_none(track.get(key)) is not None:
            facts.append((label, f"{_fmt(track[key], '.2f')} mm"))
    if finite_or_none(track.get("distortion_sensitivity")) is not None:
        facts.append(("lens distortion sensitivity (no [lens] calibration)",
                      f"v<sub>t</sub> {100 * track['distortion_sensitivity']:+.2f} % per 1 % of barrel "
                      f"distortion at the frame corners; the plateau reaches "
                      f"{_fmt(100 * (track.get('edge_reach_fraction') or 0.0), '.0f')} % of the way "
                      "to the corners"))
    parts.append(_pairs_table(facts, escape_values=False))
    parts.append(_corrections_table(track.get("corrections") or {}))
    budget = track.get("budget")
    if budget:
        parts.append("<h3>Uncertainty budget of the viscosity (GUM)</h3>")
        parts.append(_budget_table(budget))
    parts.append(_marks_section(track))
    parts.append(_transient_section(track.get("transient")))
    return "\n".join(parts)


def _card(label: str, value: str, note: str) -> str:
    return (f"<div class=\"card\"><div class=\"label\">{_e(label)}</div>"
            f"<div class=\"value\">{value}</div><div class=\"note\">{note}</div></div>")


def _corrections_table(corrections: Mapping[str, Any]) -> str:
    if not corrections:
        return ""
    rows = []
    for name, value in corrections.items():
        x = finite_or_none(value)
        size = f"{100.0 * (x - 1.0):+.3f} %" if x is not None else "—"
        rows.append(f"<tr><td>{_e(name.replace('_', ' '))}</td><td class=\"num\">"
                    f"{_fmt(value, '.6g')}</td><td class=\"num\">{size}</td></tr>")
    return ("<h3>Corrections applied</h3><table><tr><th>correction</th><th>factor</th>"
            "<th>size (factor − 1)</th></tr>" + "".join(rows) + "</table>")


_KELVIN = 273.15


def _budget_table(budget: Mapping[str, Any]) -> str:
    rows = list(budget.get("rows") or [])
    if not rows:
        return "<p>No budget rows.</p>"
    shares = [finite_or_none(r.get("share")) or 0.0 for r in rows]
    dominant = budget.get("dominant")
    if dominant is None:
        dominant = rows[max(range(len(rows)), key=shares.__getitem__)].get("quantity")
    out = ["<table class=\"budget\"><tr><th>input quantity</th><th>value</th><th>unit</th>"
           "<th>standard uncertainty</th><th>relative sensitivity c′</th>"
           "<th>contribution to u(μ)/μ</th><th>share of variance</th></tr>"]
    for row, share in zip(rows, shares, strict=True):
        is_dom = row.get("quantity") == dominant
        name = _e(row.get("quantity"))
        if is_dom:
            name = f"▶ {name} <span class=\"tag\">(dominant)</span>"
        width = max(0.0, min(100.0, 100.0 * share))
        bar = (f"<span class=\"bartrack\"><span class=\"bar\" style=\"width:{width:.1f}%\">"
               "</span></span>")
        row_class = ' class="dominant"' if is_dom else ""
        value, unit = _fmt(row.get('value'), '.6g'), _e(row.get('unit'))
        sensitivity = _fmt(row.get('sensitivity_rel'), '+.4f')
        mu, t_k, c_t = (finite_or_none(budget.get("mu_pa_s")), finite_or_none(row.get("value")),
                        finite_or_none(row.get("sensitivity")))
        if row.get("symbol") == "temperature_K" and mu and t_k is not None and c_t is not None:
            # a temperature is read in °C and its effect per kelvin (T/μ·∂μ/∂T with T in K, ~ −26
            # for glycerol, is correct but tells a reader nothing)
            value, unit = f"{t_k - _KELVIN:.2f}", "°C"
            sensitivity = f"{100.0 * c_t / mu:+.2f} % per K"
        out.append(
            f"<tr{row_class}><td>{name}</td>"
            f"<td class=\"num\">{value}</td><td>{unit}</td>"
            f"<td class=\"num\">{_fmt(row.get('standard_uncertainty'), '.3g')}</td>"
            f"<td class=\"num\">{sensitivity}</td>"
            f"<td class=\"num\">{_pct(row.get('contribution_rel'), '.3f')}</td>"
            f"<td class=\"num\">{bar} {100.0 * share:.1f} %</td></tr>")
    k = finite_or_none(budget.get("k")) or 2.0
    out.append(f"<tr><td colspan=\"5\"><b>combined standard uncertainty u(μ)/μ</b></td>"
               f"<td class=\"num\"><b>{_pct(budget.get('combined_u_rel'), '.3f')}</b></td>"
               "<td></td></tr>")
    out.append(f"<tr><td colspan=\"5\"><b>expanded uncertainty U/μ (k = {k:g})</b></td>"
               f"<td class=\"num\"><b>{_pct(budget.get('expanded_U_rel'), '.3f')}</b></td>"
               "<td></td></tr></table>")
    dom_share = max(shares) if shares else 0.0
    out.append(f"<p>The largest term is <b>{_e(dominant)}</b> ({100.0 * dom_share:.0f} % of the "
               "variance): improving it first pays most.</p>")
    return "".join(out)


def _marks_section(track: Mapping[str, Any]) -> str:
    marks = list(track.get("marks") or [])
    stopwatch = (track.get("stopwatch") or {}).get("pairs") or []
    if not marks and not stopwatch:
        return ""
    parts = ["<h3>Timing marks: was the sphere at terminal speed?</h3>"]
    if marks:
        rows = ["<table><tr><th>mark</th><th>depth (mm)</th><th>crossing time (s)</th>"
                "<th>at terminal speed?</th><th>velocity deficit</th></tr>"]
        for m in marks:
            at = m.get("terminal_at_mark")
            verdict = "yes" if at else ("<b>NO: still accelerating</b>" if at is False else "—")
            rows.append(
                f"<tr><td>{int(m.get('index', 0)) + 1}</td>"
                f"<td class=\"num\">{_fmt(m.get('z_mm'), '.1f')}</td>"
                f"<td class=\"num\">{format_measurement(m.get('crossing_s'), m.get('crossing_u_s'))}"
                f"</td><td>{verdict}</td><td class=\"num\">{_pct(m.get('velocity_deficit'), '.2f')}"
                "</td></tr>")
        rows.append("</table>")
        parts.append("".join(rows))
    if stopwatch:
        rows = ["<p>What a stopwatch between the marks would have given, with a hand-timing "
                "scatter of about 0.10 s per interval (Am. J. Phys. 87(2), 110, 2019), beside "
                "the video's own timing:</p><table><tr><th>interval</th><th>transit time (s)</th>"
                "<th>velocity (mm/s)</th><th>u, hand timing</th><th>u, video timing</th></tr>"]
        for p in stopwatch:
            transit = finite_or_none(p.get("transit_s"))
            rows.append(
                f"<tr><td>mark {_index_label(p.get('from_index'))} → mark {_index_label(p.get('to_index'))}"
                f"</td><td class=\"num\">{_fmt(transit, '.4f')}</td>"
                f"<td class=\"num\">{_fmt(_scaled(p.get('stopwatch_speed_m_s'), 1000.0), '.5g')}</td>"
                f"<td class=\"num\">{_timing_u(p.get('hand_timing_u_s'), transit)}</td>"
                f"<td class=\"num\">{_timing_u(p.get('transit_u_s'), transit)}</td></tr>")
        rows.append("</table>")
        parts.append("".join(rows))
    return "".join(parts)


def _timing_u(u_s: Any, transit_s: float | None) -> str:
    u = finite_or_none(u_s)
    if u is None:
        return "—"
    rel = f" ({100.0 * u / transit_s:.2g} % of the time)" if transit_s else ""
    return f"{u:.2g} s{rel}"


def _transient_section(transient: Mapping[str, Any] | None) -> str:
    if not transient:
        return ""
    facts = [
        ("model", _e(transient.get("model") or "—")),
        ("fit converged", _yes_no(transient.get("converged"))),
        ("time constant τ", f"{_fmt(transient.get('tau_s'), '.3g')} s"),
        ("terminal velocity", f"{_fmt(_scaled(transient.get('v_m_s'), 1e3), '.5g')}"
                              " mm/s"),
        ("viscosity (transient estimate)", f"{_fmt(transient.get('mu_pa_s'), '.4g')} Pa·s"),
    ]
    return ("<h3>Cross-check: fit of the approach to terminal speed</h3>"
            + _pairs_table(facts, escape_values=False))


def _reference_section(reference: Mapping[str, Any] | None, tracks: Sequence[Mapping]) -> str:
    if not reference:
        return ""
    facts = [
        ("model", _e(reference.get("model") or "—")),
        ("temperature", f"{_fmt(reference.get('temperature_c'), '.2f')} °C"),
        ("density", f"{_fmt(reference.get('density_kg_m3'), '.6g')} kg/m³"),
        ("viscosity", f"{_fmt(reference.get('viscosity_pa_s'), '.5g')} Pa·s"),
        ("model uncertainty (relative)", _pct(reference.get("reference_u_rel"), ".2g")),
        ("source", _e(reference.get("source") or "—")),
    ]
    parts = ["<h2>Comparison with the reference liquid at the measured temperature</h2>",
             _pairs_table(facts, escape_values=False)]
    rows = []
    for track in tracks:
        comp = track.get("comparison") or {}
        mu = finite_or_none(track.get("viscosity_pa_s"))
        ref_mu = finite_or_none(comp.get("reference_viscosity_pa_s"))
        if mu is None or ref_mu is None:
            continue
        diff = f"{100.0 * (mu / ref_mu - 1.0):+.2f} %" if ref_mu else "—"
        rows.append(f"<tr><td>{_e(track.get('id'))}</td><td class=\"num\">{_fmt(mu, '.5g')}</td>"
                    f"<td class=\"num\">{_fmt(ref_mu, '.5g')}</td><td class=\"num\">{diff}</td>"
                    f"<td class=\"num\">{_fmt(comp.get('z_score'), '+.2f')}</td>"
                    f"<td class=\"num\">{_fmt(comp.get('glycerol_mass_fraction_explaining'), '.4f')}"
                    "</td></tr>")
    if rows:
        parts.append("<table><tr><th>track</th><th>measured μ (Pa·s)</th><th>reference μ (Pa·s)"
                     "</th><th>difference</th><th>z-score</th><th>glycerol mass fraction that "
                     "would explain it</th></tr>" + "".join(rows) + "</table>"
                     "<p>|z| &gt; 2 means the measurement and the reference disagree beyond their "
                     "combined uncertainties (a wrong temperature, water taken up by glycerol, or "
                     "an uncorrected effect).</p>")
    return "\n".join(parts)


def _figures_section(figure_paths: Mapping[str, str | os.PathLike]) -> str:
    if not figure_paths:
        return ""
    parts = ["<h2>Figures</h2>"]
    for name, path in figure_paths.items():
        caption = _FIGURE_CAPTIONS.get(name, name.replace("_", " "))
        p = Path(path)
        if not p.is_file():
            parts.append(f"<p>Figure {_e(name)} missing: <code>{_e(p)}</code></p>")
            continue
        data = base64.b64encode(p.read_bytes()).decode("ascii")
        parts.append(f"<figure><img alt=\"{_e(name)}\" src=\"data:image/png;base64,{data}\">"
                     f"<figcaption>{_e(caption)}</figcaption></figure>")
    return "\n".join(parts)


def _clip_section(summary: Mapping[str, Any]) -> str:
    info = summary.get("clip_info") or {}
    intervals = info.get("frame_interval_s") or {}
    timestamps = summary.get("timestamps") or info.get("timestamps")
    ts_note = {"container": "per-frame times from the file", "nominal":
               "NOMINAL frame rate (the file had no usable per-frame times)"}.get(
                   str(timestamps), "")
    capture_fps = summary.get("capture_fps") or info.get("capture_fps")
    facts = [
        ("container / codec",
         f"{_e(info.get('container') or '—')} / {_e(info.get('codec') or '—')}"),
        ("frame size (displayed)", f"{_fmt(info.get('width_px'), '.0f')} × "
                                   f"{_fmt(info.get('height_px'), '.0f')} px"),
        ("rotation applied", f"{_fmt(info.get('rotation_deg'), '.0f')}°"),
        ("frames / duration", f"{_fmt(info.get('n_frames'), '.0f')} frames, "
                              f"{_fmt(info.get('duration_s'), '.4g')} s of physical time"),
        ("timestamps", f"{_e(timestamps or '—')} ({_e(ts_note)})" if ts_note else
                       _e(timestamps or "—")),
        ("stored frame rate", f"{_fmt(info.get('stored_fps'), '.5g')} fps"),
        ("capture frame rate used", f"{_fmt(capture_fps, '.5g')} fps (source: "
                                    f"{_e(info.get('capture_fps_source') or '—')})"),
        ("time scale (physical / stored)", _fmt(info.get("time_scale"), ".6g")),
        ("frame intervals min / median / max",
         " / ".join(_fmt(_scaled(intervals.get(k), 1e3), ".4g") for k in ("min", "median", "max"))
         + " ms"),
        ("duplicated frames", _fmt(info.get("n_duplicates"), ".0f")),
        ("gaps (interval > 1.5 × median)", _fmt(info.get("n_gaps"), ".0f")),
    ]
    parts = ["<h2>The clip's timing</h2>", _pairs_table(facts, escape_values=False)]
    scale = summary.get("scale") or {}
    if scale or summary.get("px_per_mm") is not None:
        px_per_mm = scale.get("px_per_mm", summary.get("px_per_mm"))
        sfacts = [
            ("points (displayed frame)", f"{_e(_compact(scale.get('p1_px')))} → "
                                         f"{_e(_compact(scale.get('p2_px')))} px"),
            ("distance between them", f"{_fmt(scale.get('distance_mm'), '.6g')} ± "
                                      f"{_fmt(scale.get('distance_u_mm'), '.2g')} mm"),
            ("plane of the points", _e(scale.get("plane") or "—")),
            ("refraction factor", _fmt(scale.get("refraction_factor"), ".6g")),
            ("scale at the ball's plane", f"{format_measurement(px_per_mm, scale.get('px_per_mm_u'))}"
                                          " px/mm"),
            ("lens distortion correction", _e(_lens_text(scale))),
        ]
        parts.append("<h3>Scale</h3>" + _pairs_table(sfacts, escape_values=False))
    return "\n".join(parts)


def _lens_text(scale: Mapping[str, Any]) -> str:
    """One line on the lens-distortion correction (the rig's ``[lens]`` table)."""
    lens = scale.get("lens")
    if not scale.get("lens_corrected") or not isinstance(lens, Mapping):
        return "none (no [lens] table in the rig)"
    size = lens.get("image_size_px") or ["?", "?"]
    k = lens.get("radial_coefficients") or []
    p = lens.get("tangential_coefficients") or []
    f = lens.get("focal_length_px") or []
    c = lens.get("principal_point_px") or []
    return (f"applied (Brown–Conrady, calibrated at {size[0]}×{size[1]} px): "
            f"k1, k2, k3 = {', '.join(_plain(v, '.4g') for v in k)}; "
            f"p1, p2 = {', '.join(_plain(v, '.4g') for v in p)}; "
            f"f = {', '.join(_plain(v, '.6g') for v in f)} px; "
            f"c = {', '.join(_plain(v, '.6g') for v in c)} px")


def _safety_section() -> str:
    items = "".join(f"<li>{_e(c)}</li>" for c in SAFETY_CAUTIONS)
    return f"<h2>Safety</h2><ul class=\"safety\">{items}</ul>"


def _provenance_section(summary: Mapping[str, Any]) -> str:
    parts = ["<h2>How this report was made</h2>"]
    if summary.get("command"):
        parts.append(f"<p>Command:</p><pre>{_e(summary['command'])}</pre>")
    versions = summary.get("versions") or {}
    if versions:
        parts.append("<h3>Versions</h3>" + _pairs_table(
            [(str(k), _e(v)) for k, v in versions.items()], escape_values=False))
    rig = summary.get("rig")
    if rig:
        parts.append("<h3>Rig, as resolved (with where each value came from)</h3>")
        for table, content in rig.items():
            if isinstance(content, Mapping):
                if not content:
                    continue
                parts.append(f"<p><b>[{_e(table)}]</b></p>" + _pairs_table(
                    [(str(k), _e(_compact(v))) for k, v in content.items()],
                    escape_values=False))
            else:
                parts.append(_pairs_table([(str(table), _e(_compact(content)))],
                                          escape_values=False))
    outputs = summary.get("outputs") or {}
    if outputs:
        parts.append("<h3>Files written</h3><pre>" + _e(_compact(outputs, indent=2)) + "</pre>")
    return "\n".join(parts)


def _series_results(series: Mapping[str, Any]) -> str:
    pooled = series.get("pooled") or {}
    origin = series.get("fit_through_origin") or {}
    with_icpt = series.get("fit_with_intercept") or {}
    power = series.get("power_law") or {}
    k = finite_or_none(series.get("coverage_factor_k")) or 2.0
    mu = finite_or_none(pooled.get("value"))
    budget = series.get("budget") or {}
    if mu is not None and finite_or_none(budget.get("expanded_U_rel")) is not None:
        big_u = mu * float(budget["expanded_U_rel"])
        k = finite_or_none(budget.get("k")) or k
        note = f"weighted mean of the balls; expanded uncertainty (k = {k:g}) from the budget"
    else:
        big_u = _scaled(pooled.get("u"), k)
        note = (f"weighted mean of the balls; k = {k:g}, ball-to-ball terms only (no budget of "
                "the common terms)")
    parts = ["<h2>Results</h2><div class=\"cards\">",
             _card("pooled viscosity μ", f"{format_measurement(mu, big_u)} Pa·s", note)]
    if origin:
        parts.append(_card("viscosity from the slope of v against d²",
                           format_measurement(origin.get("mu_pa_s"),
                                              _scaled(origin.get("u_mu_pa_s"), k)) + " Pa·s",
                           f"weighted fit through the origin; k = {k:g}"))
    if power:
        parts.append(_card("exponent n of v ∝ dⁿ",
                           format_measurement(power.get("exponent"), power.get("u_exponent")),
                           "2 for a Newtonian liquid in the Stokes regime; standard uncertainty"))
    if finite_or_none(pooled.get("birge_ratio")) is not None:
        verdict = {True: "the balls agree", False: "<b>the balls disagree</b>"}.get(
            pooled.get("consistent"), "")
        p_value = finite_or_none(pooled.get("p_value"))
        parts.append(_card("consistency of the balls",
                           f"Birge ratio {_fmt(pooled['birge_ratio'], '.2f')}",
                           f"{verdict}" + (f" (χ² test p = {p_value:.2g})" if p_value is not None
                                           else "")))
    parts.append("</div>")
    if finite_or_none(with_icpt.get("intercept_m_s")) is not None:
        parts.append(
            "<p>Weighted fit with an intercept: "
            f"{_milli(with_icpt.get('intercept_m_s'), with_icpt.get('u_intercept_m_s'))}"
            " mm/s at d = 0 (standard uncertainty); an intercept beyond 2u hints at walls, inertia "
            f"or a non-Newtonian liquid. Slope viscosity with intercept: "
            f"{format_measurement(with_icpt.get('mu_pa_s'), _scaled(with_icpt.get('u_mu_pa_s'), k))}"
            f" Pa·s (k = {k:g}).</p>")
    if series.get("velocities_wall_corrected") is False:
        parts.append("<p><b>The speeds in the fit are not wall corrected</b> (no tube diameter "
                     "given).</p>")
    return "".join(parts)


def _balls_table(balls: Sequence[Mapping[str, Any]]) -> str:
    if not balls:
        return ""
    head = ("<h2>Per ball</h2><table><tr><th>ball</th><th>drops used (outliers)</th>"
            "<th>d ± u (mm)</th><th>mean v ± u (mm/s)</th><th>v corrected (mm/s)</th>"
            "<th>μ ± u (Pa·s)</th><th>Re</th><th>wall factor</th><th>inertia factor φ</th>"
            "<th>shear rate v/d (1/s)</th></tr>")
    rows = []
    for b in balls:
        rows.append(
            f"<tr><td>{_e(b.get('ball'))}</td><td class=\"num\">{_fmt(b.get('n'), '.0f')} "
            f"({_fmt(b.get('n_outliers'), '.0f')})</td>"
            f"<td class=\"num\">{_milli(b.get('d_m'), b.get('u_d_m'))}</td>"
            f"<td class=\"num\">{_milli(b.get('v_mean_m_s'), b.get('u_v_m_s'))}</td>"
            f"<td class=\"num\">{_fmt(_scaled(b.get('v_corrected_m_s'), 1e3), '.5g')}</td>"
            f"<td class=\"num\">{format_measurement(b.get('mu_pa_s'), b.get('u_mu_pa_s'))}</td>"
            f"<td class=\"num\">{_fmt(b.get('reynolds_number'), '.3g')}</td>"
            f"<td class=\"num\">{_fmt(b.get('wall_factor'), '.5f')}</td>"
            f"<td class=\"num\">{_fmt(b.get('inertia_factor_phi'), '.5f')}</td>"
            f"<td class=\"num\">{_fmt(b.get('shear_rate_per_s'), '.3g')}</td></tr>")
    return head + "".join(rows) + "</table>"


def _drops_table(drops: Sequence[Mapping[str, Any]]) -> str:
    if not drops:
        return ""
    rows = []
    for d in drops:
        flag = "<b>outlier, left out</b>" if d.get("outlier") else "used"
        rows.append(f"<tr><td>{_e(d.get('label'))}</td><td>{_e(d.get('ball'))}</td>"
                    f"<td class=\"num\">{_fmt(_scaled(d.get('v_m_s'), 1e3), '.5g')}</td>"
                    f"<td class=\"num\">{_fmt(d.get('robust_z'), '+.2f')}</td><td>{flag}</td></tr>")
    return ("<h2>Per drop</h2><table><tr><th>drop</th><th>ball</th><th>v (mm/s)</th>"
            "<th>robust z within its ball</th><th></th></tr>" + "".join(rows) + "</table>")


def _rows_table(rows: Sequence[Mapping[str, Any]]) -> str:
    """Table of result rows (column names carry their units), e.g. per ball or per clip."""
    columns: list[str] = []
    for row in rows:
        columns.extend(k for k in row if k not in columns)
    head = "".join(f"<th>{_e(c)}</th>" for c in columns)
    body = []
    for row in rows:
        cells = []
        for c in columns:
            value = row.get(c)
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                cells.append(f"<td>{_e(_compact(value))}</td>")
            else:
                cells.append(f"<td class=\"num\">{_fmt(value, '.6g')}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><tr>{head}</tr>{''.join(body)}</table>"


# ------------------------------------------------------------------------------ formatting


def _e(value: Any) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def finite_or_none(value: Any) -> float | None:
    """Read a number from a summary field: a finite float, or None for missing/non-numbers.

    Parameters
    ----------
    value : Any
        A summary value (number, None, string, bool, ...).

    Returns
    -------
    float or None
        ``float(value)`` when that is finite; None for None, booleans, NaN, ±inf and non-numbers.
    """
    if value is None or isinstance(value, bool):
        return None
    try:
        x = float(value)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _scaled(value: Any, factor: float) -> float | None:
    x = finite_or_none(value)
    return None if x is None else x * factor


def _fmt(value: Any, spec: str) -> str:
    x = finite_or_none(value)
    return "—" if x is None else format(x, spec)


def _pct(value: Any, spec: str) -> str:
    x = finite_or_none(value)
    return "—" if x is None else f"{format(100.0 * x, spec)} %"


def _plain(value: Any, spec: str = ".4g") -> str:
    return _fmt(value, spec)


def _milli(value: Any, u: Any) -> str:
    """Value ± u of an SI quantity shown in its milli unit (m → mm, m/s → mm/s)."""
    return format_measurement(_scaled(value, 1e3), _scaled(u, 1e3))


def _yes_no(value: Any) -> str:
    return {True: "yes", False: "<b>no</b>"}.get(value, "—") if isinstance(value, bool) else "—"


def _index_label(value: Any) -> str:
    x = finite_or_none(value)
    return "?" if x is None else str(int(x) + 1)


def _compact(value: Any, indent: int | None = None) -> str:
    if value is None:
        return "—"
    if isinstance(value, str):
        return value
    try:
        return json.dumps(value, ensure_ascii=False, indent=indent, default=str)
    except (TypeError, ValueError):
        return str(value)


def _pairs_table(pairs: Sequence[tuple[str, str]], *, escape_values: bool = True) -> str:
    rows = "".join(f"<tr><th>{_e(k)}</th><td>{_e(v) if escape_values else v}</td></tr>"
                   for k, v in pairs)
    return f"<table>{rows}</table>"
