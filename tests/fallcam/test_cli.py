"""The ``fallcam`` command line, in-process through ``main(argv)``: exit codes, the one-line error
format, JSON output, staging of outputs; plus one subprocess smoke test of the installed command.

Where a test needs ``fallcam analyze`` to behave in a set way (succeed, be interrupted, hit a bug)
it installs a stand-in ``fallcam.analyze`` module; the real analysis is exercised by the tests
that use clips rendered by ``tracker.synth`` (these skip until ``fallcam.analyze`` exists).
"""

import importlib.util
import json
import os
import re
import subprocess
import sys
import sysconfig
import tempfile
import types
from pathlib import Path

import pytest

import fallcam
from fallcam.atomic import atomic_write_json
from fallcam.cli import format_pm, main
from tracker.errors import ClipError

_spec = importlib.util.spec_from_file_location("clip_folder", Path(__file__).with_name("_clip_folder.py"))
clip_folder = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(clip_folder)

RIG_TEXT = """\
# our own scenario: 2.5 mm steel ball in glycerol, 44 mm tube
[liquid]
model = "glycerol"
temperature_c = 21.0
temperature_u_c = 0.1

[ball]
diameter_mm = 2.5
diameter_u_mm = 0.002
material = "steel-52100"

[tube]
inner_diameter_mm = 44.0

[scale]
points_px = [[320.0, 40.0], [320.0, 440.0]]
distance_mm = 100.0

[marks]
points_px = [[320.0, 140.0], [320.0, 400.0]]
"""

SUMMARY = {
    "clip": "drop.mp4", "capture_fps": 60.0, "timestamps": "container", "px_per_mm": 4.0,
    "tracks": [{
        "id": 0, "direction": "down", "n_points": 200, "terminal_velocity_m_s": 0.0101234,
        "terminal_velocity_u_m_s": 0.0000123, "terminal_reached": True,
        "viscosity_pa_s": 1.41234, "viscosity_u_pa_s": 0.0117, "viscosity_U_pa_s": 0.0234,
        "reynolds_number": 0.0181, "wall_factor": 0.8871, "warnings": ["ball 0.4 mm off the axis"],
    }],
    "warnings": ["rolling shutter not given"],
}


@pytest.fixture
def rig(tmp_path):
    path = tmp_path / "rig.toml"
    path.write_text(RIG_TEXT, encoding="utf-8")
    return path


@pytest.fixture
def clip(tmp_path):
    path = tmp_path / "drop.mp4"
    path.write_bytes(b"stand-in clip")
    return path


def _error_lines(err):
    """The error output must be one 'fallcam: error:' line plus at most one 'hint:' line."""
    lines = err.splitlines()
    assert 1 <= len(lines) <= 2, err
    assert lines[0].startswith("fallcam: error: "), err
    if len(lines) == 2:
        assert lines[1].startswith("hint: "), err
    return lines


def _analyze_writes_then(behaviour, clip_path, out_dir, overlay, progress, command=None):
    out = Path(out_dir)
    (out / "trajectory.csv").write_text("frame,t_s\n0,0.0\n", encoding="utf-8")
    if behaviour == "interrupt":
        raise KeyboardInterrupt
    if behaviour == "bug":
        raise ZeroDivisionError("division by zero")
    if behaviour == "clip":
        raise ClipError(f"{clip_path}: truncated after 3 frames; expected a complete video file")
    if progress is not None:
        progress(10, 10)
    summary = dict(SUMMARY, clip=str(clip_path), overlay=overlay, command=command)
    atomic_write_json(out / "summary.json", summary)
    return summary


# module-level stand-ins (batch pickles the worker into its processes)
def _analyze_ok(clip_path, rig, out_dir, *, overlay=False, progress=None, command=None):
    return _analyze_writes_then("ok", clip_path, out_dir, overlay, progress, command)


def _analyze_interrupt(clip_path, rig, out_dir, *, overlay=False, progress=None, command=None):
    return _analyze_writes_then("interrupt", clip_path, out_dir, overlay, progress, command)


def _analyze_bug(clip_path, rig, out_dir, *, overlay=False, progress=None, command=None):
    return _analyze_writes_then("bug", clip_path, out_dir, overlay, progress, command)


def _analyze_clip_error(clip_path, rig, out_dir, *, overlay=False, progress=None, command=None):
    return _analyze_writes_then("clip", clip_path, out_dir, overlay, progress, command)


def _track_ok(clip_path, rig, out_dir, *, progress=None, command=None):
    atomic_write_json(Path(out_dir) / "tracks.json", {"ok": True})
    return {"n_points": 120, "tracks": [{"id": 0}], "px_per_mm": 4.0, "warnings": []}


_STAND_INS = {"ok": _analyze_ok, "interrupt": _analyze_interrupt, "bug": _analyze_bug,
              "clip": _analyze_clip_error}


def _stand_in_analyze(monkeypatch, behaviour="ok"):
    """Install a stand-in fallcam.analyze whose analyze_clip writes two files, then behaves."""
    module = types.ModuleType("fallcam.analyze")
    module.analyze_clip = _STAND_INS[behaviour]
    module.track_clip_to_dir = _track_ok
    monkeypatch.setitem(sys.modules, "fallcam.analyze", module)


# ---------------------------------------------------------------------------------------------
# Help, version, parser errors


def test_help_and_version(capsys):
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    for command in ("analyze", "track", "series", "batch", "plan", "fluid", "demo"):
        assert command in out
    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"fallcam {fallcam.__version__}"


@pytest.mark.parametrize("command", ["analyze", "track", "series", "batch", "plan", "fluid", "demo"])
def test_every_command_has_help_and_common_options(capsys, command):
    assert main([command, "--help"]) == 0
    out = capsys.readouterr().out
    for option in ("--quiet", "--debug", "--json"):
        assert option in out
    if command in ("analyze", "track", "series", "batch", "plan"):
        # rig overrides come from fallcam.rig.OVERRIDES
        assert "--ball-diameter-mm" in out and "--temperature-c" in out and "--capture-fps" in out
    if command == "analyze":
        assert "--overlay" in out


@pytest.mark.parametrize(("argv", "message", "hint"), [
    ([], "fallcam: error: the following arguments are required: command", "hint: see 'fallcam --help'"),
    (["anlyze", "x"], "fallcam: error: argument command: invalid choice: 'anlyze'",
     "hint: did you mean 'fallcam analyze'?"),
    (["analyze", "clip.mp4"], "fallcam: error: analyze: the following arguments are required: --rig, --out",
     "hint: see 'fallcam analyze --help'"),
    (["analyze", "c.mp4", "--rig", "r.toml", "--out", "o", "--ball-diameter-mm", "two"],
     "fallcam: error: analyze: argument --ball-diameter-mm: invalid float value: 'two'", None),
    (["plan", "--rig", "r.toml", "--wall-model", "stokes"],
     "fallcam: error: plan: argument --wall-model: invalid choice: 'stokes'", None),
    (["batch", "d", "--rig", "r.toml", "--out", "o", "--jobs", "0"],
     "fallcam: error: batch: argument --jobs: 0 is not allowed; expected a whole number ≥ 1", None),
    (["fluid", "honey"], "fallcam: error: fluid: argument NAME: invalid choice: 'honey'", None),
    (["analyze", "c.mp4", "--rig", "r.toml", "--out", "o", "--frobnicate"],
     "fallcam: error: unrecognized arguments: --frobnicate", None),
])
def test_command_line_errors_exit_2_with_one_line(capsys, argv, message, hint):
    assert main(argv) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = _error_lines(captured.err)
    assert lines[0].startswith(message)
    if hint is not None:
        assert lines[1] == hint


# ---------------------------------------------------------------------------------------------
# Rig and clip errors (exit 2 and 3), before any output is written


@pytest.mark.parametrize(("rig_text", "extra", "message"), [
    (None, [], r"rig\.toml: rig file not found$"),
    (RIG_TEXT.replace("diameter_mm = 2.5", "diamter_mm = 2.5"), [],
     r"rig\.toml: unknown key \[ball\] diamter_mm; did you mean diameter_mm\?$"),
    (RIG_TEXT.replace("[tube]", "[tube"), [], r"rig\.toml: not valid TOML: .*\(at line 12, column 6\)$"),
    (RIG_TEXT, ["--ball-diameter-mm", "-1"], r"command line: ball_diameter_mm = -1"),
    (RIG_TEXT, ["--ball-diameter-mm", "50"], r"must be smaller than \[tube\] inner_diameter_mm = 44"),
])
def test_rig_errors_exit_2(tmp_path, capsys, clip, rig_text, extra, message):
    rig = tmp_path / "rig.toml"
    if rig_text is not None:
        rig.write_text(rig_text, encoding="utf-8")
    out_dir = tmp_path / "out"
    assert main(["analyze", str(clip), "--rig", str(rig), "--out", str(out_dir), *extra]) == 2
    lines = _error_lines(capsys.readouterr().err)
    assert lines[0].startswith("fallcam: error: ")
    assert re.search(message, lines[0]), lines[0]
    assert not out_dir.exists()


@pytest.mark.parametrize("command", ["analyze", "track"])
def test_missing_clip_exits_3_and_writes_nothing(tmp_path, capsys, rig, command):
    out_dir = tmp_path / "out"
    missing = tmp_path / "nothing.mp4"
    assert main([command, str(missing), "--rig", str(rig), "--out", str(out_dir)]) == 3
    lines = _error_lines(capsys.readouterr().err)
    assert lines[0] == f"fallcam: error: {missing}: clip not found"
    assert not out_dir.exists()


@pytest.mark.parametrize("command", ["analyze", "batch"])
def test_out_that_is_a_file_exits_2(tmp_path, capsys, rig, clip, command):
    taken = tmp_path / "taken"
    taken.write_text("a file the user keeps", encoding="utf-8")
    source = clip if command == "analyze" else tmp_path
    assert main([command, str(source), "--rig", str(rig), "--out", str(taken)]) == 2
    line = _error_lines(capsys.readouterr().err)[0]
    assert line == f"fallcam: error: --out {taken}: exists and is not a folder; expected a folder for the results"
    assert taken.read_text(encoding="utf-8") == "a file the user keeps"


def test_folder_given_as_clip_exits_3(tmp_path, capsys, rig):
    assert main(["analyze", str(tmp_path), "--rig", str(rig), "--out", str(tmp_path / "o")]) == 3
    assert _error_lines(capsys.readouterr().err)[0].endswith("is not a file; expected a video file")


# ---------------------------------------------------------------------------------------------
# analyze output: human, --json, --quiet, staging


def test_analyze_prints_short_summary(tmp_path, capsys, monkeypatch, rig, clip):
    _stand_in_analyze(monkeypatch)
    out_dir = tmp_path / "out"
    assert main(["analyze", str(clip), "--rig", str(rig), "--out", str(out_dir)]) == 0
    out = capsys.readouterr().out
    assert "v_t = 10.123 ± 0.012 mm/s" in out
    assert "viscosity = 1.412 ± 0.023 Pa·s (U, k = 2)" in out
    assert "Re = 0.0181, wall factor = 0.8871" in out
    assert "  warning: ball 0.4 mm off the axis" in out
    assert "warning: rolling shutter not given" in out
    assert len(out.splitlines()) <= 8
    assert sorted(p.name for p in out_dir.iterdir()) == ["summary.json", "trajectory.csv"]
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []


def test_analyze_json_prints_only_the_summary(tmp_path, capsys, monkeypatch, rig, clip):
    _stand_in_analyze(monkeypatch)
    out_dir = tmp_path / "out"
    assert main(["analyze", str(clip), "--rig", str(rig), "--out", str(out_dir), "--json", "--overlay"]) == 0
    captured = capsys.readouterr()
    data = json.loads(captured.out)
    assert data["tracks"][0]["viscosity_pa_s"] == 1.41234
    assert data["overlay"] is True
    assert data["command"] == f"fallcam analyze {clip} --rig {rig} --out {out_dir} --json --overlay"
    assert captured.err == ""
    assert json.loads((out_dir / "summary.json").read_text()) == data


def test_quiet_prints_nothing_on_success(tmp_path, capsys, monkeypatch, rig, clip):
    _stand_in_analyze(monkeypatch)
    assert main(["analyze", str(clip), "--rig", str(rig), "--out", str(tmp_path / "o"), "--quiet"]) == 0
    assert capsys.readouterr() == ("", "")


def test_overrides_reach_the_rig(tmp_path, capsys, monkeypatch, rig, clip):
    seen = {}

    def analyze_clip(clip_path, rig, out_dir, *, overlay=False, progress=None, command=None):
        seen["rig"] = rig
        return dict(SUMMARY)

    module = types.ModuleType("fallcam.analyze")
    module.analyze_clip = analyze_clip
    monkeypatch.setitem(sys.modules, "fallcam.analyze", module)
    argv = ["analyze", str(clip), "--rig", str(rig), "--out", str(tmp_path / "o"), "--quiet",
            "--ball-diameter-mm", "2.0", "--temperature-c", "21.3", "--capture-fps", "240"]
    assert main(argv) == 0
    loaded = seen["rig"]
    assert loaded.ball.diameter_mm == 2.0
    assert loaded.liquid.temperature_c == 21.3
    assert loaded.camera.capture_fps == 240.0
    assert loaded.overrides == {"ball_diameter_mm": 2.0, "temperature_c": 21.3, "capture_fps": 240.0}


@pytest.mark.parametrize(("behaviour", "code", "message"), [
    ("clip", 3, "drop.mp4: truncated after 3 frames; expected a complete video file"),
    ("interrupt", 130, "interrupted; no partial results were written"),
])
def test_failed_run_leaves_previous_results_untouched(tmp_path, capsys, monkeypatch, rig, clip,
                                                      behaviour, code, message):
    _stand_in_analyze(monkeypatch, behaviour)
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    (out_dir / "summary.json").write_text("previous run", encoding="utf-8")
    assert main(["analyze", str(clip), "--rig", str(rig), "--out", str(out_dir)]) == code
    lines = _error_lines(capsys.readouterr().err)
    assert lines[0].endswith(message)
    # the stand-in wrote trajectory.csv before failing: it must not appear, nor any temp name
    assert sorted(p.name for p in out_dir.iterdir()) == ["summary.json"]
    assert (out_dir / "summary.json").read_text() == "previous run"
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_internal_error_saves_traceback_in_out_dir(tmp_path, capsys, monkeypatch, rig, clip):
    _stand_in_analyze(monkeypatch, "bug")
    out_dir = tmp_path / "out"
    assert main(["analyze", str(clip), "--rig", str(rig), "--out", str(out_dir)]) == 1
    lines = _error_lines(capsys.readouterr().err)
    prefix = "fallcam: error: internal error: ZeroDivisionError: division by zero (traceback saved to "
    assert lines[0].startswith(prefix) and lines[0].endswith(")")
    saved = Path(lines[0][len(prefix):-1])
    assert saved.parent == out_dir
    assert "ZeroDivisionError" in saved.read_text() and "analyze_clip" in saved.read_text()
    assert lines[1] == "hint: this is a bug in fallcam; please report it with the traceback file"
    # only the traceback was written, no partial results
    assert [p.name for p in out_dir.iterdir()] == [saved.name]


def test_internal_error_without_out_dir_goes_to_temp_dir(tmp_path, capsys, monkeypatch, rig):
    import fallcam.plan

    def broken_plan(*args, **kwargs):
        raise RuntimeError("plan exploded")

    monkeypatch.setattr(fallcam.plan, "plan", broken_plan)
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    assert main(["plan", "--rig", str(rig)]) == 1
    line = _error_lines(capsys.readouterr().err)[0]
    assert "internal error: RuntimeError: plan exploded (traceback saved to " + str(tmp_path) in line
    assert len(list(tmp_path.glob("fallcam-traceback-*.txt"))) == 1


def test_debug_prints_the_traceback(tmp_path, capsys, monkeypatch, rig, clip):
    _stand_in_analyze(monkeypatch, "bug")
    out_dir = tmp_path / "out"
    assert main(["analyze", str(clip), "--rig", str(rig), "--out", str(out_dir), "--debug"]) == 1
    err = capsys.readouterr().err
    assert err.startswith("Traceback (most recent call last):")
    assert "fallcam: error: internal error: ZeroDivisionError: division by zero\n" in err
    assert not out_dir.exists()


def test_track_command(tmp_path, capsys, monkeypatch, rig, clip):
    _stand_in_analyze(monkeypatch)
    out_dir = tmp_path / "out"
    assert main(["track", str(clip), "--rig", str(rig), "--out", str(out_dir)]) == 0
    assert "120 detections in 1 passage(s), 4 px/mm" in capsys.readouterr().out
    assert (out_dir / "tracks.json").exists()


@pytest.mark.parametrize(("value", "u", "unit", "scale", "expected"), [
    (0.0101234, 0.0000123, "mm/s", 1e3, "10.123 ± 0.012 mm/s"),
    (0.0101234, None, "mm/s", 1e3, "10.12 mm/s"),
    (1.41234, 0.0234, "Pa·s", 1.0, "1.412 ± 0.023 Pa·s"),
    (1234.4, 56.0, "", 1.0, "1234 ± 56"),
    (None, 0.1, "", 1.0, "n/a"),
])
def test_format_pm_rounds_uncertainty_to_two_digits(value, u, unit, scale, expected):
    assert format_pm(value, u, unit, scale) == expected


SERIES = {
    "clips": [{"label": "d2"}, {"label": "d3"}],
    "balls": [{"ball": "2.000 mm", "n": 3, "mu_pa_s": 1.4123, "u_mu_pa_s": 0.0061, "reynolds_number": 0.018},
              {"ball": "3.000 mm", "n": 3, "mu_pa_s": 1.4087, "u_mu_pa_s": 0.0072, "reynolds_number": 0.061}],
    "pooled": {"value": 1.4108, "u": 0.0047},
    "budget": {"expanded_U_rel": 0.0150, "k": 2.0, "dominant": "temperature"},
    "failures": [{"label": "d4", "message": "d4.mp4: no moving sphere found"}],
    "warnings": ["one ball only slightly larger"],
}


def _series_stand_in(manifest_path, rig_path, out_dir, *, overrides=None, progress=None, command=None):
    atomic_write_json(Path(out_dir) / "series.json", dict(SERIES, overrides=overrides, command=command))
    return dict(SERIES, overrides=overrides)


def _demo_stand_in(out_dir, *, progress=None):
    atomic_write_json(Path(out_dir) / "summary.json", SUMMARY)
    return dict(SUMMARY)


def test_series_and_demo_output(tmp_path, capsys, monkeypatch, rig):
    series = types.ModuleType("fallcam.series")
    series.run_series = _series_stand_in
    demo = types.ModuleType("fallcam.demo")
    demo.run_demo = _demo_stand_in
    monkeypatch.setitem(sys.modules, "fallcam.series", series)
    monkeypatch.setitem(sys.modules, "fallcam.demo", demo)
    manifest = tmp_path / "runs.csv"
    argv = ["series", str(manifest), "--rig", str(rig), "--out", str(tmp_path / "s"), "--temperature-c", "20.5"]
    assert main(argv) == 0
    out = capsys.readouterr().out
    assert f"{manifest}: 2 clip(s) analysed, 2 ball size(s), 1 failure(s)" in out
    assert "  2.000 mm: 3 drop(s), viscosity = 1.4123 ± 0.0061 Pa·s (u, k = 1), Re = 0.018" in out
    # U = expanded_U_rel × pooled value = 0.0150 × 1.4108 = 0.0212
    assert "pooled viscosity = 1.411 ± 0.021 Pa·s (U, k = 2); largest term: temperature" in out
    assert "  failed: d4: d4.mp4: no moving sphere found" in out
    assert json.loads((tmp_path / "s" / "series.json").read_text())["overrides"] == {"temperature_c": 20.5}
    assert main([*argv, "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["pooled"]["value"] == 1.4108
    assert main(["demo", "--out", str(tmp_path / "d")]) == 0
    assert "v_t = 10.123 ± 0.012 mm/s" in capsys.readouterr().out
    assert (tmp_path / "d" / "summary.json").exists()


# ---------------------------------------------------------------------------------------------
# fluid and plan


def test_fluid_water_json_matches_iapws_check_value(capsys):
    assert main(["fluid", "water", "--temperature-c", "20", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    # physics-references.md check #20 (IAPWS-95 + IAPWS 2008 at 0.101325 MPa, 20 °C)
    assert data["density_kg_m3"] == pytest.approx(998.207, rel=1e-5)
    assert data["viscosity_pa_s"] == pytest.approx(1.00160e-3, rel=1e-5)
    assert data["model"] == "water" and data["warnings"] == []


def test_fluid_glycerol_water_human_output(capsys):
    assert main(["fluid", "glycerol-water", "--temperature-c", "20", "--glycerol-mass-fraction", "0.5"]) == 0
    out = capsys.readouterr().out
    # check #16 (Cheng 2008, C_m = 0.5, 20 °C): 6.00225 mPa·s; #18 (Volk & Kähler 2018): 1126.11 kg/m³
    assert "viscosity  0.0060023 Pa·s" in out
    assert "density    1126.11 kg/m³" in out
    assert "d ln μ/dT" in out and "source" in out
    assert "validity   inside the model's stated range" in out


def test_fluid_outside_validity_is_a_warning_not_an_error(capsys):
    assert main(["fluid", "glycerol", "--temperature-c", "110"]) == 0
    assert "warning:" in capsys.readouterr().out


@pytest.mark.parametrize(("argv", "message"), [
    (["fluid", "glycerol-water"], "fluid glycerol-water: glycerol_mass_fraction is required for model 'glycerol-water'"),
    (["fluid", "water", "--temperature-c", "150"], "fluid water: temperature_c = 150"),
    (["fluid", "water", "--glycerol-mass-fraction", "0.3"], "fluid water: glycerol_mass_fraction = 0.3 does not apply"),
])
def test_fluid_errors_exit_2(capsys, argv, message):
    assert main(argv) == 2
    assert _error_lines(capsys.readouterr().err)[0].startswith(f"fallcam: error: {message}")


def test_plan_json_and_overrides(capsys, rig):
    assert main(["plan", "--rig", str(rig), "--json"]) == 0
    base = json.loads(capsys.readouterr().out)
    assert base["viscosity_source"] == "glycerol model at 21 °C"
    assert base["timed_stretch_source"] == "marks"
    assert main(["plan", "--rig", str(rig), "--json", "--ball-diameter-mm", "1.25"]) == 0
    half = json.loads(capsys.readouterr().out)
    assert half["ball_diameter_mm"] == 1.25
    # Stokes regime (Re ≈ 0.03): in unbounded liquid half the diameter gives a quarter of the
    # speed, up to the inertia factor φ (0.5 % here); the wall factor changes with d/D as well
    ratio = half["unbounded_velocity_m_s"] / base["unbounded_velocity_m_s"]
    assert ratio == pytest.approx(0.25, rel=0.01)
    assert half["wall_factor"] > base["wall_factor"]


def test_plan_human_output_and_missing_viscosity(tmp_path, capsys, rig):
    assert main(["plan", "--rig", str(rig), "--viscosity-pa-s", "1.2"]) == 0
    out = capsys.readouterr().out
    assert "viscosity           1.2 Pa·s (given on the command line)" in out
    assert "run-in to within 0.1 % of terminal speed" in out
    plain = tmp_path / "plain.toml"
    plain.write_text(RIG_TEXT.replace('model = "glycerol"', "density_kg_m3 = 1260.0"), encoding="utf-8")
    assert main(["plan", "--rig", str(plain)]) == 2
    lines = _error_lines(capsys.readouterr().err)
    assert "the liquid has no reference model or known viscosity" in lines[0]
    assert lines[1] == "hint: give --viscosity-pa-s X, or [liquid] model with temperature_c in the rig"
    assert main(["plan", "--rig", str(rig), "--target-u-percent", "0"]) == 2
    assert "--target-u-percent 0: expected a percentage between 0 and 100" in capsys.readouterr().err


# ---------------------------------------------------------------------------------------------
# batch through the command line (stand-in analyze; run_batch itself: test_batch.py)


def test_batch_lists_failures_and_exits_0_when_some_succeed(tmp_path, capsys, monkeypatch, rig):
    _stand_in_analyze(monkeypatch)
    folder = tmp_path / "clips"
    folder.mkdir()
    (folder / "good.mp4").write_bytes(b"ok")
    (folder / "missing_link.mp4").symlink_to(tmp_path / "gone.mp4")
    out_dir = tmp_path / "out"
    assert main(["batch", str(folder), "--rig", str(rig), "--out", str(out_dir)]) == 0
    out = capsys.readouterr().out
    assert "2 clip(s): 1 analysed, 0 reused (unchanged), 1 failed" in out
    assert "failed (exit 3): missing_link:" in out
    assert (out_dir / "good" / "summary.json").exists()
    assert main(["batch", str(folder), "--rig", str(rig), "--out", str(out_dir), "--json"]) == 0
    captured = capsys.readouterr()
    data = json.loads(captured.out)
    assert (data["n_reused"], data["n_failed"]) == (1, 1)
    assert captured.err.strip() == f"fallcam: 1 of 2 clip(s) failed; see {out_dir / 'failures.csv'}"


def test_batch_exit_code_is_first_failure_when_all_fail(tmp_path, capsys, monkeypatch, rig):
    _stand_in_analyze(monkeypatch, "clip")
    folder = tmp_path / "clips"
    folder.mkdir()
    (folder / "a.mp4").write_bytes(b"x")
    assert main(["batch", str(folder), "--rig", str(rig), "--out", str(tmp_path / "out"), "--quiet"]) == 3


def test_batch_empty_folder_is_a_usage_error(tmp_path, capsys, rig):
    assert main(["batch", str(tmp_path), "--rig", str(rig), "--out", str(tmp_path / "out")]) == 2
    lines = _error_lines(capsys.readouterr().err)
    assert lines[0].startswith(f"fallcam: error: batch: no video files in folder {tmp_path}")
    assert lines[1] == "hint: give a folder of clips or a manifest CSV"


# ---------------------------------------------------------------------------------------------
# The real analysis on rendered clips (runs once fallcam.analyze exists)


@pytest.fixture(scope="module")
def real_clips(tmp_path_factory):
    pytest.importorskip("fallcam.analyze")
    return clip_folder.make_clip_folder(tmp_path_factory.mktemp("real") / "clips")


@pytest.mark.parametrize(("name", "code", "message"), [
    ("empty", 3, "file is empty (0 bytes)"),
    ("truncated", 3, "without a readable index"),
    ("text", 3, "not a readable video"),
    ("noball", 4, ""),
])
def test_real_unusable_clips_exit_with_their_code(real_clips, tmp_path, capsys, name, code, message):
    out_dir = tmp_path / "out"
    argv = ["analyze", str(real_clips[name]), "--rig", str(real_clips["rig"]), "--out", str(out_dir)]
    assert main(argv) == code
    line = _error_lines(capsys.readouterr().err)[0]
    assert real_clips[name].name in line and message in line
    assert not out_dir.exists() or not any(out_dir.iterdir())


def test_real_clip_json_has_the_interface_keys(real_clips, tmp_path, capsys):
    out_dir = tmp_path / "out"
    argv = ["analyze", str(real_clips["good"]), "--rig", str(real_clips["rig"]), "--out", str(out_dir), "--json"]
    assert main(argv) == 0
    data = json.loads(capsys.readouterr().out)
    for key in ("clip", "capture_fps", "timestamps", "px_per_mm", "tracks"):
        assert key in data
    track = data["tracks"][0]
    for key in ("id", "direction", "n_points", "terminal_velocity_m_s", "terminal_velocity_u_m_s",
                "plateau", "terminal_reached", "marks", "viscosity_pa_s", "viscosity_u_pa_s",
                "reynolds_number", "wall_factor", "corrections", "warnings"):
        assert key in track
    # rendered at 80 mm/s terminal speed (tracker.synth ground truth); the CLI passes it through
    assert track["terminal_velocity_m_s"] == pytest.approx(0.080, rel=0.01)
    assert json.loads((out_dir / "summary.json").read_text()) == data
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


# ---------------------------------------------------------------------------------------------
# The installed command (one subprocess smoke test)


def test_installed_command_smoke():
    script = Path(sysconfig.get_path("scripts")) / "fallcam"
    assert script.exists(), f"console script not installed at {script}"
    help_run = subprocess.run([str(script), "--help"], capture_output=True, text=True, timeout=60, check=False)
    assert help_run.returncode == 0 and "usage: fallcam" in help_run.stdout
    fluid_run = subprocess.run([str(script), "fluid", "water", "--temperature-c", "20", "--json"],
                               capture_output=True, text=True, timeout=60, check=False)
    assert fluid_run.returncode == 0, fluid_run.stderr
    assert json.loads(fluid_run.stdout)["density_kg_m3"] == pytest.approx(998.207, rel=1e-5)
    bad_run = subprocess.run([str(script), "fluid", "mud"], capture_output=True, text=True, timeout=60, check=False)
    assert bad_run.returncode == 2
    assert bad_run.stderr.startswith("fallcam: error: fluid: argument NAME: invalid choice: 'mud'")
    # `fallcam … | head`: the reader has gone before anything is written → 141 (128 + SIGPIPE),
    # quietly, not an internal error
    read_end, write_end = os.pipe()
    os.close(read_end)
    try:
        piped = subprocess.run([str(script), "fluid", "water"], stdout=write_end, stderr=subprocess.PIPE,
                               text=True, timeout=60, check=False)
    finally:
        os.close(write_end)
    assert piped.returncode == 141 and piped.stderr == "", piped.stderr
