"""A folder of real clips for the command-line and batch tests: good, no ball, and broken files.

Not collected by pytest (no ``test_`` prefix); the test files load it by path because tests run
with ``--import-mode=importlib``. Clips are rendered by ``tracker.synth`` (seeded) and encoded
with H.264, small (320 × 480, 60 frames/s, 2 s) to keep the tests fast. Our own scenario: a
2.5 mm steel ball in a glycerol mixture of ours in a 44 mm tube.
"""

from __future__ import annotations

from pathlib import Path

from tracker import synth

GOOD_SPEC = synth.ClipSpec(width_px=320, height_px=480, duration_s=1.8, ball_diameter_mm=2.5,
                           terminal_velocity_mm_s=80.0, tube_inner_diameter_mm=44.0, seed=11)
NO_BALL_SPEC = synth.ClipSpec(width_px=320, height_px=480, duration_s=1.0, drops=(), seed=12)
LIQUID = {"density_kg_m3": 1255.0, "temperature_c": 21.0}
BALL = {"density_kg_m3": 7810.0}


def _toml_value(value: object) -> str:
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return repr(float(value)) if isinstance(value, float) else repr(value)


def rig_toml(tables: dict) -> str:
    """TOML text of a rig given as {table: {key: value}} (numbers, strings, nested lists)."""
    lines = []
    for table, keys in tables.items():
        lines.append(f"[{table}]")
        lines.extend(f"{key} = {_toml_value(value)}" for key, value in keys.items())
        lines.append("")
    return "\n".join(lines)


def make_clip_folder(folder: Path) -> dict[str, Path]:
    """Write the clips and a matching rig file into ``folder``.

    Returns
    -------
    dict
        ``rig``, ``good`` (a falling ball), ``noball`` (readable, no sphere), ``empty``
        (0 bytes), ``truncated`` (the good clip cut in half: the MP4 index at the end is lost),
        ``text`` (lab notes renamed .mp4) → paths.
    """
    folder.mkdir(parents=True, exist_ok=True)
    paths = {name: folder / f"{name}.mp4" for name in ("good", "noball", "empty", "truncated", "text")}
    synth.write_clip(GOOD_SPEC, paths["good"])
    synth.write_clip(NO_BALL_SPEC, paths["noball"])
    paths["empty"].write_bytes(b"")
    data = paths["good"].read_bytes()
    paths["truncated"].write_bytes(data[: len(data) // 2])
    paths["text"].write_text("drop 1: 2.5 mm ball, 21.0 C\ndrop 2: 2.5 mm ball, 21.1 C\n", encoding="utf-8")
    rig = folder.parent / "rig.toml"
    rig.write_text(rig_toml(synth.rig_dict(GOOD_SPEC, liquid=LIQUID, ball=BALL)), encoding="utf-8")
    paths["rig"] = rig
    return paths
