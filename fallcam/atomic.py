"""Atomic result files: write to a temporary name in the same folder, then rename.

A failing run (an exception, Ctrl-C, a killed worker) must never leave a half-written result file
(INTERFACE.md, "Exit codes and errors"). Two levels are offered:

- :func:`atomic_write_bytes`, :func:`atomic_write_text`, :func:`atomic_write_json` replace one
  file: the new content goes to a hidden temporary file beside the target, is flushed to disk and
  then moved over the target with :func:`os.replace` (atomic on POSIX and Windows when both names
  are on the same file system, which a sibling name guarantees).
- :func:`atomic_output_dir` stages a whole output folder: the caller writes every file into a
  hidden sibling folder; only when the ``with`` block ends without an exception are the files
  moved into the final folder. On any exception (``KeyboardInterrupt`` included) the staging
  folder is deleted and the final folder is left as it was.

Staging folders and temporary files are named ``.<name>.partial-<random>`` so that a run that was
killed outright (no chance to clean up) leaves only hidden names, which
:func:`remove_stale_partials` deletes on the next run.
"""

from __future__ import annotations

import contextlib
import functools
import json
import math
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

__all__ = [
    "PARTIAL_MARK",
    "atomic_output_dir",
    "atomic_write_bytes",
    "atomic_write_json",
    "atomic_write_text",
    "json_ready",
    "remove_stale_partials",
]

PARTIAL_MARK = ".partial-"
"""Infix of every temporary name made here: ``.<final name>.partial-<random>``."""


def _partial_prefix(final: Path) -> str:
    return f".{final.name}{PARTIAL_MARK}"


@functools.cache
def _umask() -> int:
    """The process umask (read once; ``tempfile`` makes private 0600/0700 names, results are not)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes) -> Path:
    """Write ``data`` to ``path`` so that readers see either the old file or the complete new one.

    Parameters
    ----------
    path : str or path-like
        Target file. Its folder must exist.
    data : bytes
        The complete new content.

    Returns
    -------
    pathlib.Path
        The target path.
    """
    final = Path(path)
    fd, tmp_name = tempfile.mkstemp(prefix=_partial_prefix(final), dir=final.parent)
    try:
        os.chmod(tmp_name, 0o666 & ~_umask())
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp_name, final)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp_name)
        raise
    return final


def atomic_write_text(path: str | os.PathLike[str], text: str, *, encoding: str = "utf-8") -> Path:
    """Write ``text`` to ``path`` atomically (see :func:`atomic_write_bytes`).

    Parameters
    ----------
    path : str or path-like
        Target file. Its folder must exist.
    text : str
        The complete new content.
    encoding : str, optional
        Text encoding, UTF-8 by default.

    Returns
    -------
    pathlib.Path
        The target path.
    """
    return atomic_write_bytes(path, text.encode(encoding))


def json_ready(obj: Any) -> Any:
    """Return ``obj`` with every value made strictly JSON-representable.

    NumPy scalars and arrays become Python numbers and lists, tuples become lists, paths become
    strings, and non-finite floats (NaN, ±inf, which strict JSON cannot carry) become ``None``.

    Parameters
    ----------
    obj : Any
        Nested dicts, lists, tuples, numbers, strings, ``None``, paths or NumPy values.

    Returns
    -------
    Any
        The same structure built from ``dict``, ``list``, ``str``, ``int``, ``float``, ``bool``
        and ``None`` only.

    Raises
    ------
    TypeError
        For a value of another type (names the type).
    """
    if isinstance(obj, dict):
        return {str(key): json_ready(value) for key, value in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_ready(value) for value in obj]
    if obj is None or isinstance(obj, (str, bool)):
        return obj
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    if hasattr(obj, "tolist") and hasattr(obj, "dtype"):  # NumPy scalar or array
        return json_ready(obj.tolist())
    if isinstance(obj, int):
        return int(obj)
    if isinstance(obj, float):
        return float(obj) if math.isfinite(obj) else None
    raise TypeError(f"json_ready: value of type {type(obj).__name__} cannot be written as JSON; "
                    "expected dict, list, str, number, bool or None")


def atomic_write_json(path: str | os.PathLike[str], obj: Any, *, indent: int = 2) -> Path:
    """Write ``obj`` as strict JSON (UTF-8, trailing newline) to ``path`` atomically.

    Parameters
    ----------
    path : str or path-like
        Target file. Its folder must exist.
    obj : Any
        JSON-like structure; passed through :func:`json_ready` first.
    indent : int, optional
        Indentation of the output.

    Returns
    -------
    pathlib.Path
        The target path.
    """
    text = json.dumps(json_ready(obj), indent=indent, ensure_ascii=False, allow_nan=False)
    return atomic_write_text(path, text + "\n")


def _move_into(src_dir: Path, dst_dir: Path) -> None:
    """Move every entry of ``src_dir`` into ``dst_dir``; files replace files of the same name."""
    dst_dir.mkdir(parents=True, exist_ok=True)
    for entry in sorted(src_dir.iterdir()):
        target = dst_dir / entry.name
        if entry.is_dir() and not entry.is_symlink():
            if target.is_dir() and not target.is_symlink():
                _move_into(entry, target)
                continue
            if target.exists() or target.is_symlink():
                _remove(target)
        os.replace(entry, target)


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    else:
        with contextlib.suppress(FileNotFoundError):
            path.unlink()


@contextlib.contextmanager
def atomic_output_dir(final_dir: str | os.PathLike[str], *, replace: bool = False) -> Iterator[Path]:
    """Stage an output folder and publish it only if the block succeeds.

    Parameters
    ----------
    final_dir : str or path-like
        The folder the results belong in. Its parent folders are created if needed.
    replace : bool, optional
        ``False`` (default): the staged files are moved into ``final_dir``, replacing files of the
        same name and keeping anything else that was there (safe when a user points ``--out`` at
        a folder holding other things). ``True``: ``final_dir`` as a whole is replaced by the
        staged folder (used for per-clip folders that this program owns, so that no file of an
        older run survives beside the new results).

    Yields
    ------
    pathlib.Path
        The staging folder (a hidden sibling of ``final_dir``). Write results there; paths
        recorded inside result files should be relative to it.

    Notes
    -----
    On success the files appear in ``final_dir`` by renames only (no copying). On any exception,
    ``KeyboardInterrupt`` included, the staging folder is deleted, ``final_dir`` is untouched and
    the exception propagates.
    """
    final = Path(final_dir)
    final.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=_partial_prefix(final), dir=final.parent))
    staging.chmod(0o777 & ~_umask())
    try:
        yield staging
        if replace:
            trash = None
            if final.exists() or final.is_symlink():
                trash = Path(tempfile.mkdtemp(prefix=_partial_prefix(final), dir=final.parent))
                os.replace(final, trash / final.name)
            os.replace(staging, final)
            if trash is not None:
                _remove(trash)
        else:
            _move_into(staging, final)
    finally:
        if staging.exists():
            _remove(staging)


def remove_stale_partials(folder: str | os.PathLike[str]) -> list[Path]:
    """Delete temporary files and staging folders left in ``folder`` by a killed run.

    Only hidden names containing ``.partial-`` (made by this module) are touched. Call this only
    when no other run writes into ``folder`` at the same time.

    Parameters
    ----------
    folder : str or path-like
        Folder to clean; a missing folder is fine.

    Returns
    -------
    list of pathlib.Path
        The paths removed.
    """
    root = Path(folder)
    if not root.is_dir():
        return []
    removed = []
    for entry in sorted(root.iterdir()):
        if entry.name.startswith(".") and PARTIAL_MARK in entry.name:
            _remove(entry)
            removed.append(entry)
    return removed
