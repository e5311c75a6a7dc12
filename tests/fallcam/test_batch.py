"""``fallcam batch``: every good clip finishes, every bad one is listed, re-runs are resumable,
a crashing worker loses nothing, and the same work runs on a Dask cluster on loopback.

Most tests use a stand-in worker (the ``worker=`` seam) that reacts to the clip's bytes the way
the analysis reacts to such files (an empty file or text is an unusable clip, exit 3; a clip
without a ball, exit 4), so the batch machinery is tested in well under a second per run. The
real analysis over rendered clips is in :func:`test_real_analysis_over_a_mixed_folder`.
"""

import csv
import importlib.util
import json
import os
import sys
from pathlib import Path

import pytest

from fallcam.batch import BATCH_SUMMARY_COLUMNS, FAILURE_COLUMNS, run_batch
from fallcam.errors import UsageError
from tracker.errors import ClipError, TrackingError

_spec = importlib.util.spec_from_file_location("clip_folder", Path(__file__).with_name("_clip_folder.py"))
clip_folder = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(clip_folder)

RIG_TEXT = """\
[liquid]
density_kg_m3 = 1260.0
temperature_c = 21.0

[ball]
diameter_mm = 2.5
density_kg_m3 = 7810.0

[tube]
inner_diameter_mm = 44.0

[scale]
points_px = [[320.0, 40.0], [320.0, 440.0]]
distance_mm = 100.0
"""

CALLS = "calls.log"  # the stand-in worker appends each clip name it analyses here


def stand_in_worker(clip_path, rig, out_dir, *, overlay=False, progress=None):
    """Behave like the analysis on the stand-in clips (module level: it is pickled)."""
    clip = Path(clip_path)
    with (clip.parent / CALLS).open("a", encoding="utf-8") as log:
        log.write(clip.name + "\n")
    data = clip.read_bytes()
    out = Path(out_dir)
    (out / "trajectory.csv").write_text("frame,t_s\n", encoding="utf-8")  # written before failing
    if not data:
        raise ClipError(f"{clip}: empty file (0 bytes); expected a video file")
    if data.startswith(b"CRASH"):
        os._exit(9)  # the process dies outright, as in a decoder segfault
    if data.startswith(b"BUG"):
        raise RuntimeError("unexpected state")
    if data.startswith(b"NOBALL"):
        raise TrackingError(f"{clip}: no moving sphere found; expected a ball crossing the frame")
    if data.startswith(b"TRUNC"):
        raise ClipError(f"{clip}: truncated after 2 frames; expected a complete video file")
    if not data.startswith(b"GOOD"):
        raise ClipError(f"{clip}: not a video file (no container found)")
    speed = float(data[4:] or b"10") / 1000.0
    summary = {
        "clip": str(clip), "capture_fps": 60.0, "px_per_mm": 4.0,
        "tracks": [{"id": 0, "direction": "down", "terminal_velocity_m_s": speed,
                    "terminal_velocity_u_m_s": 1e-5, "terminal_reached": True,
                    "viscosity_pa_s": 1.4, "viscosity_u_pa_s": 0.01, "reynolds_number": 0.02,
                    "wall_factor": 0.88, "warnings": ["w1", "w2"]}],
        "warnings": ["clip warning"],
        "rig_seen": {"ball_diameter_mm": rig.ball.diameter_mm, "temperature_c": rig.liquid.temperature_c},
    }
    (out / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    return summary


@pytest.fixture
def rig(tmp_path):
    path = tmp_path / "rig.toml"
    path.write_text(RIG_TEXT, encoding="utf-8")
    return path


def _folder(tmp_path, files):
    folder = tmp_path / "clips"
    folder.mkdir()
    for name, data in files.items():
        (folder / name).write_bytes(data)
    return folder


def _calls(folder):
    log = folder / CALLS
    return log.read_text(encoding="utf-8").split() if log.exists() else []


def _read_csv(path):
    with open(path, newline="", encoding="utf-8") as handle:
        reader = csv.DictReader(handle)
        return reader.fieldnames, list(reader)


def _hidden(folder):
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


MIXED = {
    "good_a.mp4": b"GOOD10.5",
    "good_b.MOV": b"GOOD12",
    "empty.mp4": b"",
    "truncated.mkv": b"TRUNC",
    "text.mp4": b"these are my lab notes, renamed .mp4 by mistake\n",
    "noball.webm": b"NOBALL",
    "notes.txt": b"not a clip",
}


def test_mixed_folder_finishes_good_clips_and_lists_bad_ones(tmp_path, rig):
    folder = _folder(tmp_path, MIXED)
    (folder / ".hidden.mp4").write_bytes(b"GOOD")
    (folder / "folder.mp4").mkdir()
    out = tmp_path / "out"
    seen = []
    result = run_batch(folder, rig, out, jobs=2, worker=stand_in_worker,
                       progress=lambda done, total: seen.append((done, total)))
    status = {o.label: (o.status, o.exit_code) for o in result.outcomes}
    assert status == {"empty": ("failed", 3), "good_a": ("ok", 0), "good_b": ("ok", 0),
                      "noball": ("failed", 4), "text": ("failed", 3), "truncated": ("failed", 3)}
    assert result.exit_code == 0
    assert (result.n_ok, result.n_reused, result.n_failed) == (2, 0, 4)
    assert seen[0] == (0, 6) and seen[-1] == (6, 6) and [d for d, _ in seen] == sorted(d for d, _ in seen)

    columns, failures = _read_csv(out / "failures.csv")
    assert tuple(columns) == FAILURE_COLUMNS
    assert {r["label"]: (r["exit_code"], r["message"]) for r in failures} == {
        "empty": ("3", f"{folder / 'empty.mp4'}: empty file (0 bytes); expected a video file"),
        "noball": ("4", f"{folder / 'noball.webm'}: no moving sphere found; expected a ball crossing the frame"),
        "text": ("3", f"{folder / 'text.mp4'}: not a video file (no container found)"),
        "truncated": ("3", f"{folder / 'truncated.mkv'}: truncated after 2 frames; expected a complete video file"),
    }
    columns, rows = _read_csv(out / "batch_summary.csv")
    assert tuple(columns) == BATCH_SUMMARY_COLUMNS
    by_label = {r["label"]: r for r in rows}
    assert sorted(by_label) == sorted(status)
    assert float(by_label["good_a"]["terminal_velocity_m_s"]) == pytest.approx(0.0105)
    assert float(by_label["good_a"]["viscosity_U_pa_s"]) == pytest.approx(0.02)  # k = 2 × u
    assert by_label["good_a"]["n_warnings"] == "3"
    assert by_label["empty"]["terminal_velocity_m_s"] == ""

    # one folder per good clip with its summary; bad clips leave nothing, no temp names remain
    assert sorted(p.name for p in out.iterdir() if p.is_dir()) == ["good_a", "good_b"]
    assert sorted(p.name for p in (out / "good_a").iterdir()) == ["summary.json", "trajectory.csv"]
    summary = json.loads((out / "good_b" / "summary.json").read_text())
    assert len(summary["batch_inputs"]["fingerprint"]) == 64
    assert _hidden(out) == []


def test_rerun_reuses_finished_clips_and_reruns_changed_inputs(tmp_path, rig):
    folder = _folder(tmp_path, {"a.mp4": b"GOOD10", "b.mp4": b"GOOD11", "bad.mp4": b""})
    out = tmp_path / "out"

    def run(**kwargs):
        before = len(_calls(folder))
        result = run_batch(folder, rig, out, jobs=2, worker=stand_in_worker, **kwargs)
        return {o.label: o.status for o in result.outcomes}, sorted(_calls(folder)[before:])

    assert run() == ({"a": "ok", "b": "ok", "bad": "failed"}, ["a.mp4", "b.mp4", "bad.mp4"])
    # nothing changed: finished clips are reused, the failed one is tried again
    assert run() == ({"a": "reused", "b": "reused", "bad": "failed"}, ["bad.mp4"])
    # a clip's content changed: only that clip re-runs
    (folder / "a.mp4").write_bytes(b"GOOD20")
    assert run() == ({"a": "ok", "b": "reused", "bad": "failed"}, ["a.mp4", "bad.mp4"])
    assert json.loads((out / "a" / "summary.json").read_text())["tracks"][0]["terminal_velocity_m_s"] == 0.02
    # same content, new modification time: part of the fingerprint, so it re-runs
    os.utime(folder / "b.mp4", ns=(1_000_000_000, 1_000_000_000))
    assert run() == ({"a": "reused", "b": "ok", "bad": "failed"}, ["b.mp4", "bad.mp4"])
    # the rig changed: everything re-runs
    rig.write_text(RIG_TEXT.replace("temperature_c = 21.0", "temperature_c = 22.5"), encoding="utf-8")
    assert run() == ({"a": "ok", "b": "ok", "bad": "failed"}, ["a.mp4", "b.mp4", "bad.mp4"])
    assert json.loads((out / "a" / "summary.json").read_text())["rig_seen"]["temperature_c"] == 22.5
    # a command-line override changes the inputs too; repeating it reuses
    assert run(overrides={"temperature_c": 25.0})[0] == {"a": "ok", "b": "ok", "bad": "failed"}
    assert run(overrides={"temperature_c": 25.0})[0] == {"a": "reused", "b": "reused", "bad": "failed"}


@pytest.mark.parametrize("jobs", [1, 2])
def test_worker_crash_does_not_lose_finished_results(tmp_path, rig, jobs):
    folder = _folder(tmp_path, {"a.mp4": b"GOOD", "b.mp4": b"GOOD", "crash.mp4": b"CRASH",
                                "c.mp4": b"GOOD", "d.mp4": b"GOOD"})
    out = tmp_path / "out"
    result = run_batch(folder, rig, out, jobs=jobs, worker=stand_in_worker)
    status = {o.label: (o.status, o.exit_code) for o in result.outcomes}
    # a clip running beside the crash may have finished and published its folder before the pool
    # broke; its retry then finds the results and reuses them instead of redoing the work
    assert {label: (st if st != "reused" else "ok", code) for label, (st, code) in status.items()} == {
        "a": ("ok", 0), "b": ("ok", 0), "c": ("ok", 0), "d": ("ok", 0), "crash": ("failed", 1)}
    crashed = next(o for o in result.outcomes if o.label == "crash")
    assert crashed.message.startswith("worker process ended abruptly while analysing this clip")
    for label in "abcd":
        assert (out / label / "summary.json").exists()
    assert not (out / "crash").exists()
    assert _hidden(out) == []  # the dead process's staging folder was cleaned up
    assert result.exit_code == 0


def test_internal_error_is_recorded_with_its_traceback(tmp_path, rig):
    folder = _folder(tmp_path, {"a.mp4": b"GOOD", "bug.mp4": b"BUG"})
    out = tmp_path / "out"
    result = run_batch(folder, rig, out, worker=stand_in_worker)
    bug = next(o for o in result.outcomes if o.label == "bug")
    assert (bug.status, bug.exit_code) == ("failed", 1)
    assert bug.message == "internal error: RuntimeError: unexpected state"
    assert "RuntimeError: unexpected state" in Path(bug.traceback_file).read_text()
    assert _read_csv(out / "failures.csv")[1][0]["traceback_file"] == bug.traceback_file


def test_exit_code_is_first_failure_when_every_clip_fails(tmp_path, rig):
    folder = _folder(tmp_path, {"empty.mp4": b"", "noball.mp4": b"NOBALL"})
    result = run_batch(folder, rig, tmp_path / "out", worker=stand_in_worker)
    assert [o.exit_code for o in result.outcomes] == [3, 4]
    assert result.exit_code == 3


def test_same_stem_gets_distinct_folders(tmp_path, rig):
    folder = _folder(tmp_path, {"drop 1.mp4": b"GOOD1", "drop 1.MOV": b"GOOD2", "drop_1.mkv": b"GOOD3",
                                "failures.csv.mp4": b"GOOD4", "tracebacks.mp4": b"GOOD5"})
    result = run_batch(folder, rig, tmp_path / "out", worker=stand_in_worker)
    # names the batch uses itself (tables, traceback folder) are never given to a clip
    assert [o.label for o in result.outcomes] == ["drop_1", "drop_1_2", "drop_1_3", "failures.csv_2",
                                                  "tracebacks_2"]
    assert all(o.status == "ok" for o in result.outcomes)
    assert (tmp_path / "out" / "failures.csv").is_file()


def test_manifest_rows_override_the_rig_and_name_the_folders(tmp_path, rig):
    folder = _folder(tmp_path, {"drop.mp4": b"GOOD9"})
    manifest = folder / "runs.csv"
    manifest.write_text("clip,label,ball_diameter_mm,temperature_c\n"
                        "drop.mp4,small,2.0,\n"
                        "drop.mp4,large,3.0,19.5\n"
                        "drop.mp4,too_big,50.0,\n"
                        "gone.mp4,missing,,\n", encoding="utf-8")
    out = tmp_path / "out"
    result = run_batch(manifest, rig, out, worker=stand_in_worker, overrides={"temperature_c": 25.0})
    status = {o.label: (o.status, o.exit_code) for o in result.outcomes}
    assert status == {"small": ("ok", 0), "large": ("ok", 0), "too_big": ("failed", 2), "missing": ("failed", 3)}
    small = json.loads((out / "small" / "summary.json").read_text())["rig_seen"]
    large = json.loads((out / "large" / "summary.json").read_text())["rig_seen"]
    # the command line applies to every row; a row's own column wins for that row
    assert small == {"ball_diameter_mm": 2.0, "temperature_c": 25.0}
    assert large == {"ball_diameter_mm": 3.0, "temperature_c": 19.5}
    failed = {o.label: o.message for o in result.outcomes if o.status == "failed"}
    assert "must be smaller than [tube] inner_diameter_mm = 44" in failed["too_big"]
    assert failed["missing"] == f"{folder / 'gone.mp4'}: clip not found"


@pytest.mark.parametrize(("source", "kwargs", "match"), [
    ("nowhere", {}, r"batch: source .*nowhere does not exist; expected a folder of clips or a manifest \.csv"),
    ("rig.toml", {}, r"batch: source .*rig\.toml is neither a folder nor a \.csv manifest"),
    ("emptydir", {}, r"batch: no video files in folder .*emptydir \(looked for \.mp4, \.mov"),
    ("emptydir", {"jobs": 0}, r"--jobs 0: expected a whole number ≥ 1"),
])
def test_whole_batch_problems_are_usage_errors(tmp_path, rig, source, kwargs, match):
    (tmp_path / "emptydir").mkdir()
    (tmp_path / "emptydir" / "notes.txt").write_text("x")
    with pytest.raises(UsageError, match=match):
        run_batch(tmp_path / source, rig, tmp_path / "out", worker=stand_in_worker, **kwargs)


def test_bad_rig_stops_the_batch_before_any_clip(tmp_path):
    folder = _folder(tmp_path, {"a.mp4": b"GOOD"})
    with pytest.raises(UsageError, match=r"rig\.toml: rig file not found"):
        run_batch(folder, tmp_path / "rig.toml", tmp_path / "out", worker=stand_in_worker)
    assert _calls(folder) == []


def test_real_analysis_over_a_mixed_folder(tmp_path):
    pytest.importorskip("fallcam.analyze")
    clips = clip_folder.make_clip_folder(tmp_path / "clips")
    out = tmp_path / "out"
    result = run_batch(tmp_path / "clips", clips["rig"], out, jobs=2)
    assert {o.label: (o.status, o.exit_code) for o in result.outcomes} == {
        "good": ("ok", 0), "noball": ("failed", 4), "empty": ("failed", 3),
        "truncated": ("failed", 3), "text": ("failed", 3)}
    assert result.exit_code == 0
    summary = json.loads((out / "good" / "summary.json").read_text())
    assert summary["tracks"][0]["terminal_velocity_m_s"] == pytest.approx(0.080, rel=0.01)
    assert _read_csv(out / "batch_summary.csv")[1][[o.label for o in result.outcomes].index("good")]["status"] == "ok"
    rerun = run_batch(tmp_path / "clips", clips["rig"], out, jobs=2)
    assert {o.label: o.status for o in rerun.outcomes}["good"] == "reused"
    assert _hidden(out) == []


# ---------------------------------------------------------------------------------------------
# Dask distributed


def test_dask_local_cluster_runs_the_same_work(tmp_path, rig):
    distributed = pytest.importorskip("distributed")
    folder = _folder(tmp_path, {"a.mp4": b"GOOD10", "b.mp4": b"GOOD11", "empty.mp4": b"", "nb.mp4": b"NOBALL"})
    out = tmp_path / "out"
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  host="127.0.0.1", protocol="tcp", dashboard_address=None) as cluster:
        first = run_batch(folder, rig, out, worker=stand_in_worker, scheduler=cluster.scheduler_address)
        second = run_batch(folder, rig, out, worker=stand_in_worker, scheduler=cluster.scheduler_address)
    assert {o.label: (o.status, o.exit_code) for o in first.outcomes} == {
        "a": ("ok", 0), "b": ("ok", 0), "empty": ("failed", 3), "nb": ("failed", 4)}
    assert {o.label: o.status for o in second.outcomes} == {
        "a": "reused", "b": "reused", "empty": "failed", "nb": "failed"}
    assert (out / "a" / "summary.json").exists() and _hidden(out) == []


def test_dask_missing_package_is_a_usage_error_with_pip_hint(tmp_path, rig, monkeypatch):
    folder = _folder(tmp_path, {"a.mp4": b"GOOD"})
    monkeypatch.setitem(sys.modules, "distributed", None)  # import fails as if not installed
    with pytest.raises(UsageError, match="--scheduler tcp://127.0.0.1:1: the Dask distributed package is not installed") as info:
        run_batch(folder, rig, tmp_path / "out", worker=stand_in_worker, scheduler="tcp://127.0.0.1:1")
    assert info.value.hint == 'pip install "fallcam[dask]"'


def test_dask_unreachable_scheduler_is_a_usage_error(tmp_path, rig, monkeypatch):
    pytest.importorskip("distributed")
    import fallcam.batch

    folder = _folder(tmp_path, {"a.mp4": b"GOOD"})
    monkeypatch.setattr(fallcam.batch, "_DASK_CONNECT_TIMEOUT", "1s")  # keep the test short
    with pytest.raises(UsageError, match="--scheduler tcp://127.0.0.1:9: cannot connect to a Dask scheduler there"):
        run_batch(folder, rig, tmp_path / "out", worker=stand_in_worker, scheduler="tcp://127.0.0.1:9")
    assert _calls(folder) == []
