"""``fallcam series``: several clips of one liquid and tube (repeats, ball sizes).

Each manifest row is analysed like ``fallcam analyze`` (its own folder under ``clips/``); every
passage that reached a terminal-speed plateau becomes a drop of :func:`physics.series.analyze_series`
(per-ball table, v against d², pooled viscosity, outliers, regime and consistency warnings).
The pooled value gets a budget of its own: the scatter of the drops (ball-to-ball terms, from
the series) combined with the terms all drops share (liquid density, gravity, scale, time base,
temperature, wall and inertia models), taken from the per-clip budgets.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any, Callable

from fallcam.analyze import analyze_clip
from fallcam.atomic import atomic_write_json, atomic_write_text, json_ready
from fallcam.rig import load_manifest, load_rig
from tracker.errors import ClipError, TrackingError

Progress = Callable[[int, "int | None"], None]

#: Budget rows every drop of a series shares (one liquid, tube, scale, clock and model choice).
COMMON_TERMS = ("rho_f_kg_m3", "tube_d_m", "g_m_s2", "scale_distance_m", "time_base",
                "temperature_K", "wall_model", "inertia_model")


def _pooled_budget(pooled_value: float, pooled_u: float, budgets: list[dict[str, Any]]) -> dict[str, Any]:
    """Budget of the pooled viscosity: drop scatter + the terms shared by all drops."""
    rows: list[dict[str, Any]] = [{
        "quantity": "drop-to-drop scatter (speeds and diameters, pooled)", "symbol": "pooled",
        "value": pooled_value, "unit": "Pa·s", "standard_uncertainty": pooled_u,
        "sensitivity_rel": 1.0, "contribution_rel": pooled_u / pooled_value}]
    for symbol in COMMON_TERMS:
        found = [r for b in budgets for r in b.get("rows", []) if r.get("symbol") == symbol]
        if found:
            contrib = sum(abs(r["contribution_rel"]) for r in found) / len(found)
            rows.append({**found[0], "contribution_rel": contrib})
    total = math.sqrt(sum(r["contribution_rel"] ** 2 for r in rows))
    for r in rows:
        r["share"] = (r["contribution_rel"] / total) ** 2 if total > 0 else 0.0
    dominant = max(rows, key=lambda r: r["share"])["quantity"]
    return {"rows": rows, "combined_u_rel": total, "k": 2.0, "expanded_U_rel": 2.0 * total,
            "dominant": dominant, "mu_pa_s": pooled_value}


def run_series(manifest_path: str | os.PathLike[str], rig_path: str | os.PathLike[str],
               out_dir: str | os.PathLike[str], *, overrides: dict[str, Any] | None = None,
               progress: Progress | None = None, command: str | None = None) -> dict[str, Any]:
    """Analyse every clip of a manifest and the series they form.

    Writes ``clips/<label>/…`` (as ``analyze``), ``series_drops.csv`` (one row per drop),
    ``series_balls.csv`` (per-ball table), ``v_vs_d2.png``, ``report.html``, ``series.json``.
    Clips that fail are listed under ``failures`` with their reason; the series goes on.

    Returns
    -------
    dict
        What ``series.json`` holds: the :class:`physics.series.SeriesResult` as a dict plus
        ``pooled_budget``, ``failures``, ``clips`` and ``reference``.
    """
    from fallcam import plots, report
    from fallcam.errors import NoResultError
    from physics import series as pseries

    rows = load_manifest(manifest_path)
    out = Path(out_dir)
    (out / "clips").mkdir(parents=True, exist_ok=True)
    drops: list[Any] = []
    clips: list[dict[str, Any]] = []
    failures: list[dict[str, Any]] = []
    budgets: list[dict[str, Any]] = []
    rig = None
    for i, row in enumerate(rows):
        rig_row = load_rig(rig_path, {**(overrides or {}), **row.overrides()},
                           overrides_source=f"manifest row {row.line}")
        rig = rig or rig_row
        label = row.label or Path(row.clip).stem
        try:
            summary = analyze_clip(row.clip_path, rig_row, out / "clips" / label, figures=True,
                                   command=command)
        except (ClipError, TrackingError) as exc:
            failures.append({"clip": row.clip, "label": label, "message": str(exc)})
            continue
        finally:
            if progress is not None:
                progress(i + 1, len(rows))
        clips.append({"clip": row.clip, "label": label, "folder": f"clips/{label}",
                      "n_tracks": len(summary["tracks"])})
        for tr in summary["tracks"]:
            if tr.get("terminal_velocity_m_s") is None:
                failures.append({"clip": row.clip, "label": label,
                                 "message": f"track {tr['id']}: no terminal-speed plateau"})
                continue
            if tr.get("budget"):
                budgets.append(tr["budget"])
            ball = rig_row.ball
            drops.append(pseries.Drop(
                ball=f"{ball.diameter_mm:.3f} mm {ball.material or ''}".strip(),
                d_m=ball.diameter_mm * 1e-3, v_m_s=tr["terminal_velocity_m_s"],
                rho_s_kg_m3=ball.density_kg_m3, u_d_m=(ball.diameter_u_mm or 0.0) * 1e-3,
                u_v_m_s=tr["terminal_velocity_u_m_s"],
                label=label if len(summary["tracks"]) == 1 else f"{label}#{tr['id']}"))
    if rig is None or not drops:
        raise NoResultError(f"{manifest_path}: no clip of the series gave a terminal velocity "
                            f"({len(failures)} failure(s); see the per-clip folders)")
    if not rig.can_infer_viscosity():
        raise NoResultError(f"{rig_path}: a series needs the liquid density and tube; the rig lacks "
                            + ", ".join(rig.missing_for_viscosity()))
    result = pseries.analyze_series(
        drops, rho_f_kg_m3=rig.liquid.density_kg_m3,
        tube_d_m=None if rig.tube.inner_diameter_mm is None else rig.tube.inner_diameter_mm * 1e-3,
        g_m_s2=rig.gravity_m_s2(), wall=rig.analysis.wall_model, drag=rig.analysis.drag_model)
    data = result.to_dict()
    pooled_budget = _pooled_budget(result.pooled.value, result.pooled.u, budgets)
    data.update({
        "manifest": str(manifest_path), "rig": rig.to_dict(), "clips": clips, "failures": failures,
        "budget": pooled_budget, "coverage_factor_k": pooled_budget["k"], "command": command,
        "reference": None if rig.liquid.state is None else rig.liquid.state.to_dict(),
    })
    import pandas as pd

    atomic_write_text(out / "series_drops.csv", pd.DataFrame(data["drops"]).to_csv(index=False))
    atomic_write_text(out / "series_balls.csv",
                      pd.DataFrame([{k: v for k, v in b.items() if k != "warnings"} for b in data["balls"]])
                      .to_csv(index=False))
    fig = plots.series_plot(result.balls, result, out / "v_vs_d2.png", rho_f_kg_m3=rig.liquid.density_kg_m3)
    report.write_series_report(data, out, {"v_vs_d2": fig})
    data["outputs"] = {"drops_csv": "series_drops.csv", "balls_csv": "series_balls.csv",
                       "plot": "v_vs_d2.png", "report_html": "report.html"}
    data = json_ready(data)
    atomic_write_json(out / "series.json", data)
    return data
