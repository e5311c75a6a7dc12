"""Our own demo scenario: rendered clips with known truth, and ``fallcam demo``.

The scenario (invented, for demos only — never a test oracle): the *Wrenfield teaching lab*
drops AISI 52100 steel balls (2.000 mm and 3.000 mm, grade G10) into a 40.0 mm bore glass tube of
99 % glycerol at 21.0 °C, filmed with a phone held upright (portrait, 60 fps) 450 mm from the
tube, with a scale of two tape marks 100 mm apart placed beside the tube in the ball's plane and
two rubber-band timing marks. The liquid's viscosity comes from the published glycerol–water
model (Cheng 2008) and the terminal speed from fallcam's own forward model (wall + inertia), so
the demo report can be read against the value the clip was rendered with.

:func:`write_sample_clips` regenerates the committed ``sample_clips/`` folder;
:func:`run_demo` renders a fresh clip into a folder and analyses it.
"""

from __future__ import annotations

import dataclasses
import tomllib
from pathlib import Path
from typing import Any, Callable

from fallcam.atomic import atomic_write_text

Progress = Callable[[int, "int | None"], None]

LAB = "Wrenfield teaching lab"
GLYCEROL_MASS_FRACTION = 0.99
TEMPERATURE_C = 21.0
TUBE_INNER_DIAMETER_MM = 40.0
BALL_DENSITY_KG_M3 = 7810.0  # AISI 52100 (physics.materials, published data page)
PX_PER_MM = 6.0
#: The sample clips: (file stem, ball diameter mm, seed, release time s, duration s).
SAMPLE_DROPS = (
    ("wrenfield_2mm_a", 2.0, 11, 0.25, 5.0),
    ("wrenfield_2mm_b", 2.0, 12, 0.30, 5.0),
    ("wrenfield_3mm_a", 3.0, 13, 0.20, 3.0),
)


def truth_state(ball_diameter_mm: float) -> dict[str, float]:
    """The liquid and the terminal speed the scenario's clips are rendered with."""
    from physics import fluids, viscosity

    state = fluids.fluid_state("glycerol-water", TEMPERATURE_C, GLYCEROL_MASS_FRACTION)
    d_m = ball_diameter_mm * 1e-3
    pred = viscosity.terminal_velocity(state.viscosity_pa_s, d_m, BALL_DENSITY_KG_M3,
                                       state.density_kg_m3, tube_d_m=TUBE_INNER_DIAMETER_MM * 1e-3)
    tau_s = (BALL_DENSITY_KG_M3 + 0.5 * state.density_kg_m3) * d_m**2 / (18 * state.viscosity_pa_s)
    return {"viscosity_pa_s": state.viscosity_pa_s, "density_kg_m3": state.density_kg_m3,
            "terminal_velocity_mm_s": pred.v_m_s * 1e3, "tau_s": tau_s}


def clip_spec(ball_diameter_mm: float = 2.0, *, seed: int = 1, release_t_s: float = 0.25,
              duration_s: float = 5.0) -> Any:
    """A :class:`tracker.synth.ClipSpec` of one drop in the scenario (portrait phone clip)."""
    from tracker import synth

    st = truth_state(ball_diameter_mm)
    return synth.ClipSpec(
        width_px=540, height_px=960, capture_fps=60.0, duration_s=duration_s, px_per_mm=PX_PER_MM,
        horizontal_magnification=1.3, ball_diameter_mm=ball_diameter_mm, polarity="dark",
        highlight=True, terminal_velocity_mm_s=st["terminal_velocity_mm_s"], tau_s=st["tau_s"],
        motion="exponential", drops=(synth.Drop(release_t_s=release_t_s, z0_mm=-12.0),),
        rotation_deg=90, noise_dn=2.0, marks_mm=(10.0, 40.0), surface_z_mm=-14.0,
        tube_inner_diameter_mm=TUBE_INNER_DIAMETER_MM, camera_distance_mm=450.0, crf=23, seed=seed)


def rig_tables(spec: Any) -> dict[str, dict[str, Any]]:
    """The rig of the scenario for a rendered clip (INTERFACE.md key names)."""
    from tracker import synth

    tables = synth.rig_dict(spec)
    tables["liquid"] = {"model": "glycerol-water", "glycerol_mass_fraction": GLYCEROL_MASS_FRACTION,
                        "glycerol_mass_fraction_u": 0.001, "temperature_c": TEMPERATURE_C,
                        "temperature_u_c": 0.1}
    tables["ball"] = {"diameter_mm": spec.ball_diameter_mm, "material": "steel-52100",
                      "density_kg_m3": BALL_DENSITY_KG_M3, "density_u_kg_m3": 10.0, "grade": "G10"}
    tables["tube"] = {"inner_diameter_mm": TUBE_INNER_DIAMETER_MM, "inner_diameter_u_mm": 0.05,
                      "liquid_depth_mm": 300.0}
    tables["site"] = {"latitude_deg": 52.2, "altitude_m": 20.0}
    order = ("liquid", "ball", "tube", "scale", "camera", "marks", "site")
    return {k: tables[k] for k in order if k in tables}


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(round(float(value), 4)) if isinstance(value, float) else str(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} to TOML")


def rig_toml(tables: dict[str, dict[str, Any]], header: str = "") -> str:
    """Format rig tables as TOML (scalars, strings and nested lists only), checked by reading back."""
    lines = [f"# {line}" for line in header.splitlines()]
    for name, table in tables.items():
        lines += ["", f"[{name}]"]
        lines += [f"{key} = {_toml_value(value)}" for key, value in table.items() if value is not None]
    text = "\n".join(lines).lstrip("\n") + "\n"
    tomllib.loads(text)
    return text


def _header(spec: Any) -> str:
    return (f"{LAB}: {spec.ball_diameter_mm:.3f} mm 52100 steel ball (G10) in 99 % glycerol at "
            f"{TEMPERATURE_C} °C,\n{TUBE_INNER_DIAMETER_MM} mm bore tube, portrait phone clip at 60 fps. "
            "Demo scenario of our own (rendered by tracker.synth).")


def write_sample_clips(folder: str | Path) -> list[Path]:
    """Regenerate ``sample_clips/``: the clips, one rig file and a series manifest."""
    from tracker import synth

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    rows = ["clip,ball_diameter_mm,label"]
    rig_spec = None
    for stem, d_mm, seed, release, duration in SAMPLE_DROPS:
        spec = clip_spec(d_mm, seed=seed, release_t_s=release, duration_s=duration)
        rig_spec = rig_spec or spec
        path = folder / f"{stem}.mp4"
        synth.write_clip(spec, path)
        written.append(path)
        rows.append(f"{path.name},{d_mm:.3f},{stem}")
    atomic_write_text(folder / "wrenfield.toml", rig_toml(rig_tables(rig_spec), _header(rig_spec)))
    atomic_write_text(folder / "wrenfield_series.csv", "\n".join(rows) + "\n")
    return [*written, folder / "wrenfield.toml", folder / "wrenfield_series.csv"]


def run_demo(out_dir: str | Path, *, progress: Progress | None = None, seed: int = 7) -> dict[str, Any]:
    """``fallcam demo``: render a clip of the scenario into ``out_dir`` and analyse it there.

    Writes ``demo_clip.mp4``, ``demo_rig.toml`` and everything ``fallcam analyze`` writes; the
    returned summary carries ``demo`` with the values the clip was rendered with.
    """
    from fallcam.analyze import analyze_clip
    from fallcam.atomic import atomic_write_json, json_ready
    from fallcam.rig import load_rig
    from tracker import synth

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    spec = clip_spec(2.0, seed=seed)
    clip = out / "demo_clip.mp4"
    synth.write_clip(spec, clip)
    rig_path = out / "demo_rig.toml"
    atomic_write_text(rig_path, rig_toml(rig_tables(spec), _header(spec)))
    summary = analyze_clip(clip, load_rig(rig_path), out, progress=progress,
                           command=f"fallcam analyze {clip.name} --rig {rig_path.name} --out .")
    truth = truth_state(spec.ball_diameter_mm)
    summary["demo"] = {"scenario": LAB, "rendered_with": truth,
                       "clip_spec": {k: v for k, v in dataclasses.asdict(spec).items()
                                     if isinstance(v, (int, float, str, bool))}}
    atomic_write_json(out / "summary.json", json_ready(summary))
    return summary
