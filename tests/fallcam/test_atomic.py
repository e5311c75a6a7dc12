"""Atomic result files: a failure or Ctrl-C never leaves a half-written file or folder."""

import json
import os
import stat

import numpy as np
import pytest

from fallcam.atomic import (
    atomic_output_dir,
    atomic_write_bytes,
    atomic_write_json,
    atomic_write_text,
    json_ready,
    remove_stale_partials,
)


def _visible_and_hidden(folder):
    return sorted(p.name for p in folder.iterdir())


def test_write_text_replaces_whole_file_and_leaves_no_temp(tmp_path):
    target = tmp_path / "summary.json"
    target.write_text("old")
    atomic_write_text(target, "new content")
    assert target.read_text() == "new content"
    assert _visible_and_hidden(tmp_path) == ["summary.json"]


def test_written_file_gets_normal_permissions_not_private_temp_ones(tmp_path):
    path = atomic_write_bytes(tmp_path / "a.bin", b"x")
    umask = os.umask(0o022)
    os.umask(umask)
    assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~umask


def test_failed_write_keeps_old_file_and_removes_temp(tmp_path, monkeypatch):
    target = tmp_path / "table.csv"
    target.write_text("complete old table")

    def failing_replace(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", failing_replace)
    with pytest.raises(OSError, match="No space left"):
        atomic_write_text(target, "half")
    monkeypatch.undo()
    assert target.read_text() == "complete old table"
    assert _visible_and_hidden(tmp_path) == ["table.csv"]


def test_json_is_strict_with_numpy_and_nonfinite_values(tmp_path):
    data = {"a": np.float64(1.5), "b": np.int64(3), "c": np.array([1.0, np.nan]), "d": float("inf"),
            "e": (1, 2), "f": tmp_path, "g": None, "h": True}
    path = atomic_write_json(tmp_path / "s.json", data)
    text = path.read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text
    assert json.loads(text) == {"a": 1.5, "b": 3, "c": [1.0, None], "d": None, "e": [1, 2],
                                "f": str(tmp_path), "g": None, "h": True}


def test_json_ready_rejects_unknown_types_by_name():
    with pytest.raises(TypeError, match="value of type object cannot be written as JSON"):
        json_ready({"x": object()})


def test_output_dir_publishes_only_on_success(tmp_path):
    final = tmp_path / "out"
    with atomic_output_dir(final) as staging:
        (staging / "summary.json").write_text("{}")
        (staging / "plots").mkdir()
        (staging / "plots" / "a.png").write_bytes(b"png")
        assert not final.exists()
    assert sorted(p.relative_to(final).as_posix() for p in final.rglob("*")) == [
        "plots", "plots/a.png", "summary.json"]
    assert _visible_and_hidden(tmp_path) == ["out"]


@pytest.mark.parametrize("error", [RuntimeError("boom"), KeyboardInterrupt()])
def test_output_dir_failure_leaves_final_untouched(tmp_path, error):
    final = tmp_path / "out"
    final.mkdir()
    (final / "summary.json").write_text("previous run")
    (final / "notes.txt").write_text("user file")
    with pytest.raises(type(error)):
        with atomic_output_dir(final) as staging:
            (staging / "summary.json").write_text("half")
            (staging / "trajectory.csv").write_text("partial")
            raise error
    assert (final / "summary.json").read_text() == "previous run"
    assert _visible_and_hidden(final) == ["notes.txt", "summary.json"]
    assert _visible_and_hidden(tmp_path) == ["out"]


def test_merge_mode_keeps_other_files_and_replaces_same_names(tmp_path):
    final = tmp_path / "out"
    (final / "plots").mkdir(parents=True)
    (final / "notes.txt").write_text("user file")
    (final / "summary.json").write_text("old")
    (final / "plots" / "old.png").write_text("old plot")
    with atomic_output_dir(final) as staging:
        (staging / "summary.json").write_text("new")
        (staging / "plots").mkdir()
        (staging / "plots" / "new.png").write_text("new plot")
    assert (final / "summary.json").read_text() == "new"
    assert (final / "notes.txt").read_text() == "user file"
    assert _visible_and_hidden(final / "plots") == ["new.png", "old.png"]


def test_replace_mode_drops_files_of_the_older_run(tmp_path):
    final = tmp_path / "clip1"
    final.mkdir()
    (final / "overlay.mp4").write_text("from an older run")
    with atomic_output_dir(final, replace=True) as staging:
        (staging / "summary.json").write_text("new")
    assert _visible_and_hidden(final) == ["summary.json"]
    assert _visible_and_hidden(tmp_path) == ["clip1"]


def test_stale_partials_are_removed_and_nothing_else(tmp_path):
    (tmp_path / ".clip1.partial-abc").mkdir()
    (tmp_path / ".summary.json.partial-xyz").write_text("half")
    (tmp_path / "clip1").mkdir()
    (tmp_path / ".hidden").write_text("user")
    removed = remove_stale_partials(tmp_path)
    assert sorted(p.name for p in removed) == [".clip1.partial-abc", ".summary.json.partial-xyz"]
    assert _visible_and_hidden(tmp_path) == [".hidden", "clip1"]
    assert remove_stale_partials(tmp_path / "missing") == []
