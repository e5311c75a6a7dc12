"""``fallcam batch``: reprocess an archive of clips — parallel, resumable, never stopped by one clip.

The work per clip is the same as ``fallcam analyze`` (or any *worker* with its signature). This
module adds what an archive needs around it:

- **Inputs.** Every video file directly inside a folder (by extension, see
  :data:`VIDEO_EXTENSIONS`; broken files with those extensions included, so they are reported),
  or the rows of a manifest CSV (INTERFACE.md; a row's columns override the rig for that row and
  win over the command-line overrides, being the more specific).
- **One output folder per clip**, ``OUT/<label>/``: the manifest's ``label``, else the clip's
  file stem; names are made file-system safe and made unique in input order (``a``, ``a_2``).
  Each folder is staged and published whole (:func:`fallcam.atomic.atomic_output_dir`), so a
  failed or killed clip leaves no partial files.
- **Resumable.** The clip folder's ``summary.json`` carries ``batch_inputs``: a fingerprint of
  the clip (size, modification time, SHA-256 of the content), the rig file's content, the merged
  overrides, the worker and the fallcam version. On a re-run a clip with a matching fingerprint
  is *reused* (not recomputed); any change re-runs it.
- **Failures are rows, not aborts.** A clip that raises is recorded with its exit code (the
  CLI's mapping, INTERFACE.md) and message. A worker process that dies outright (a decoder
  crash, out of memory) breaks the process pool; the clips that were in flight are retried one
  at a time in a fresh process, and a clip that kills its process again is recorded as failed
  (exit 1). Finished clips are never lost: each was published when it finished.
- **Tables at the end**, written atomically: ``batch_summary.csv`` (one row per clip) and
  ``failures.csv`` (clip, exit_code, message; header only when nothing failed).
- **Where the work runs.** ``jobs`` local processes (:class:`concurrent.futures.ProcessPoolExecutor`),
  or a Dask distributed cluster given by its scheduler address (optional extra ``fallcam[dask]``;
  clips, rig and output folder must then be on storage the workers share).

Exit status (:attr:`BatchResult.exit_code`): 0 when every clip succeeded or at least one did
(the failures are listed in ``failures.csv`` and counted on stderr by the CLI); when every clip
failed, the exit code of the first failure in input order.
"""

from __future__ import annotations

import csv
import dataclasses
import hashlib
import io
import json
import os
import re
import time
import traceback
from collections import deque
from collections.abc import Callable, Iterable, Mapping
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path
from typing import Any

import fallcam
from fallcam.atomic import atomic_output_dir, atomic_write_json, atomic_write_text, remove_stale_partials
from fallcam.errors import EXIT_INTERNAL, EXIT_OK, UsageError

__all__ = [
    "BATCH_SUMMARY_COLUMNS",
    "FAILURE_COLUMNS",
    "VIDEO_EXTENSIONS",
    "BatchResult",
    "ClipOutcome",
    "run_batch",
]

VIDEO_EXTENSIONS = (".mp4", ".mov", ".mkv", ".avi", ".m4v", ".webm")
"""File extensions (lower case) that ``batch DIR`` takes as clips."""

FAILURE_COLUMNS = ("clip", "label", "exit_code", "message", "traceback_file")
"""Columns of ``failures.csv``."""

BATCH_SUMMARY_COLUMNS = (
    "clip", "label", "status", "exit_code", "message", "out_dir", "seconds",
    "capture_fps", "px_per_mm", "n_tracks", "direction",
    "terminal_velocity_m_s", "terminal_velocity_u_m_s", "terminal_reached",
    "viscosity_pa_s", "viscosity_u_pa_s", "viscosity_U_pa_s",
    "reynolds_number", "wall_factor", "n_warnings",
)
"""Columns of ``batch_summary.csv``: one row per clip; the result columns are those of the
clip's first sphere passage (track 0), ``n_tracks`` says how many there were; ``n_warnings``
counts clip-level and per-track warnings."""

_BATCH_INPUTS_KEY = "batch_inputs"
_SUMMARY_CSV = "batch_summary.csv"
_FAILURES_CSV = "failures.csv"
_TRACEBACK_DIR = "tracebacks"
_CRASH_MESSAGE = ("worker process ended abruptly while analysing this clip (a crash in a decoder "
                  "or out of memory?)")
_HASH_CHUNK_BYTES = 1 << 20
_DASK_CONNECT_TIMEOUT = "10s"  # how long to try reaching the scheduler before giving up

Worker = Callable[..., Mapping[str, Any]]
"""``worker(clip_path, rig, out_dir) -> summary dict`` (writes ``summary.json`` in ``out_dir``)."""


@dataclasses.dataclass(frozen=True)
class _ClipJob:
    """One clip to process (pickled to the worker process)."""

    clip_path: Path
    label: str
    out_dir: Path
    rig: Any
    inputs: Mapping[str, Any]  # fingerprint parts known before hashing the clip


@dataclasses.dataclass(frozen=True)
class ClipOutcome:
    """What happened to one clip of a batch.

    Attributes
    ----------
    clip : str
        The clip path as listed (folder entry or manifest row, resolved).
    label : str
        Name of the clip's output folder under the batch output folder.
    status : str
        ``"ok"`` (analysed now), ``"reused"`` (finished earlier with the same inputs) or
        ``"failed"``.
    exit_code : int
        0, or the exit code ``fallcam analyze`` would have given for this clip.
    message : str
        Empty, or the one-line error message.
    out_dir : str
        The clip's output folder.
    seconds : float
        Wall time spent on this clip in this run, s.
    summary : dict or None
        The clip's summary (``summary.json``) when it succeeded.
    traceback_file : str
        For internal errors (exit 1) the file holding the traceback, else empty.
    """

    clip: str
    label: str
    status: str
    exit_code: int
    message: str
    out_dir: str
    seconds: float
    summary: dict[str, Any] | None = None
    traceback_file: str = ""

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly form, without the full summary (see ``out_dir/summary.json``)."""
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "summary"}


@dataclasses.dataclass(frozen=True)
class BatchResult:
    """Result of :func:`run_batch`.

    Attributes
    ----------
    out_dir : str
        The batch output folder.
    outcomes : tuple of ClipOutcome
        One per clip, in input order.
    summary_csv, failures_csv : str
        Paths of ``batch_summary.csv`` and ``failures.csv``.
    exit_code : int
        0 when at least one clip succeeded (or was reused); otherwise the first failure's code.
    """

    out_dir: str
    outcomes: tuple[ClipOutcome, ...]
    summary_csv: str
    failures_csv: str
    exit_code: int

    @property
    def n_ok(self) -> int:
        """Clips analysed in this run."""
        return sum(o.status == "ok" for o in self.outcomes)

    @property
    def n_reused(self) -> int:
        """Clips skipped because their results were already there with the same inputs."""
        return sum(o.status == "reused" for o in self.outcomes)

    @property
    def n_failed(self) -> int:
        """Clips that failed."""
        return sum(o.status == "failed" for o in self.outcomes)

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly form (per-clip rows without their full summaries)."""
        return {
            "out_dir": self.out_dir,
            "n_clips": len(self.outcomes),
            "n_ok": self.n_ok,
            "n_reused": self.n_reused,
            "n_failed": self.n_failed,
            "exit_code": self.exit_code,
            "summary_csv": self.summary_csv,
            "failures_csv": self.failures_csv,
            "clips": [o.to_dict() for o in self.outcomes],
        }


# ---------------------------------------------------------------------------------------------
# Inputs


def _safe_name(text: str) -> str:
    name = re.sub(r"[^A-Za-z0-9._-]+", "_", text).strip("._")
    return name or "clip"


def _unique_labels(names: Iterable[str]) -> list[str]:
    seen = {_SUMMARY_CSV, _FAILURES_CSV, _TRACEBACK_DIR}  # names the batch itself uses
    labels = []
    for raw in names:
        base = _safe_name(raw)
        label, n = base, 1
        while label.lower() in seen:  # case-insensitive: folders must also differ on macOS/Windows
            n += 1
            label = f"{base}_{n}"
        seen.add(label.lower())
        labels.append(label)
    return labels


def _list_inputs(source: Path) -> list[tuple[Path, str, dict[str, Any]]]:
    """(clip path, wanted label, row overrides) for a folder or a manifest."""
    if source.is_dir():
        clips = sorted(p for p in source.iterdir()
                       if p.suffix.lower() in VIDEO_EXTENSIONS and not p.name.startswith(".")
                       and not p.is_dir())
        if not clips:
            raise UsageError(
                f"batch: no video files in folder {source} (looked for {', '.join(VIDEO_EXTENSIONS)})",
                hint="give a folder of clips or a manifest CSV")
        return [(p, p.stem, {}) for p in clips]
    if source.is_file() and source.suffix.lower() == ".csv":
        from fallcam.rig import load_manifest

        return [(row.clip_path, row.label, row.overrides()) for row in load_manifest(source)]
    if not source.exists():
        raise UsageError(f"batch: source {source} does not exist; expected a folder of clips or a manifest .csv")
    raise UsageError(f"batch: source {source} is neither a folder nor a .csv manifest; "
                     "expected a folder of clips or a manifest .csv")


def _file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        while chunk := handle.read(_HASH_CHUNK_BYTES):
            digest.update(chunk)
    return digest.hexdigest()


def _worker_name(worker: Worker) -> str:
    return f"{getattr(worker, '__module__', '?')}.{getattr(worker, '__qualname__', repr(worker))}"


# ---------------------------------------------------------------------------------------------
# Work on one clip (runs in a worker process or on a Dask worker)


def _read_summary(folder: Path) -> dict[str, Any] | None:
    try:
        with (folder / "summary.json").open(encoding="utf-8") as handle:
            data = json.load(handle)
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def _clip_inputs(job: _ClipJob) -> dict[str, Any]:
    """Complete the fingerprint with the clip's size, mtime and content hash."""
    stat = job.clip_path.stat()
    inputs = dict(job.inputs)
    inputs.update(clip_size_bytes=stat.st_size, clip_mtime_ns=stat.st_mtime_ns,
                  clip_sha256=_file_sha256(job.clip_path))
    canonical = json.dumps(inputs, sort_keys=True, separators=(",", ":"))
    inputs["fingerprint"] = hashlib.sha256(canonical.encode("utf-8")).hexdigest()
    return inputs


def _save_traceback(job: _ClipJob, exc: BaseException) -> str:
    folder = job.out_dir.parent / _TRACEBACK_DIR
    try:
        folder.mkdir(parents=True, exist_ok=True)
        path = atomic_write_text(folder / f"{job.label}.txt",
                                 "".join(traceback.format_exception(exc)))
    except OSError:
        return ""
    return str(path)


def _process_clip(job: _ClipJob, worker: Worker) -> ClipOutcome:
    """Reuse, or run the worker into a staged folder; never raises for a bad clip."""
    from fallcam.cli import error_line, exit_code_for, require_clip

    start = time.perf_counter()

    def outcome(status: str, code: int = EXIT_OK, message: str = "",
                summary: dict[str, Any] | None = None, traceback_file: str = "") -> ClipOutcome:
        return ClipOutcome(clip=str(job.clip_path), label=job.label, status=status, exit_code=code,
                           message=message, out_dir=str(job.out_dir),
                           seconds=round(time.perf_counter() - start, 3), summary=summary,
                           traceback_file=traceback_file)

    try:
        require_clip(job.clip_path)
        inputs = _clip_inputs(job)
        previous = _read_summary(job.out_dir) or {}
        if (previous.get(_BATCH_INPUTS_KEY) or {}).get("fingerprint") == inputs["fingerprint"]:
            return outcome("reused", summary=previous)
        with atomic_output_dir(job.out_dir, replace=True) as staging:
            returned = worker(job.clip_path, job.rig, staging)
            summary = _read_summary(staging) or dict(returned)
            summary[_BATCH_INPUTS_KEY] = inputs
            atomic_write_json(staging / "summary.json", summary)
        return outcome("ok", summary=summary)
    except Exception as exc:  # a bad clip is a row of the failures table, never an abort
        code = exit_code_for(exc)
        saved = _save_traceback(job, exc) if code == EXIT_INTERNAL else ""
        return outcome("failed", code, error_line(exc), traceback_file=saved)


# ---------------------------------------------------------------------------------------------
# Executors


def _crashed(job: _ClipJob) -> ClipOutcome:
    return ClipOutcome(clip=str(job.clip_path), label=job.label, status="failed",
                       exit_code=EXIT_INTERNAL, message=_CRASH_MESSAGE, out_dir=str(job.out_dir),
                       seconds=0.0)


def _share_cores(threads: int) -> None:
    """Worker initialiser: cap the decoder's threads (and the processes that draw a clip's
    figures) so parallel clips share the cores. (OpenCV runs single-threaded: ``tracker`` sets
    that at import.)
    """
    from tracker.video import DECODE_THREADS_ENV

    os.environ[DECODE_THREADS_ENV] = str(threads)


def _run_local(jobs: list[_ClipJob], worker: Worker, n_jobs: int,
               report: Callable[[int, ClipOutcome], None]) -> None:
    """Run ``jobs`` on ``n_jobs`` local processes; isolate clips that kill their process."""
    from tracker.video import available_cores

    pending = deque(enumerate(jobs))
    suspects: deque[tuple[int, _ClipJob]] = deque()
    width = n_jobs
    while pending:
        pool = ProcessPoolExecutor(max_workers=min(width, len(pending)), initializer=_share_cores,
                                   initargs=(max(1, available_cores() // max(width, 1)),))
        in_flight: dict[Future[ClipOutcome], tuple[int, _ClipJob]] = {}
        try:
            while pending or in_flight:
                while pending and len(in_flight) < width:
                    index, job = pending.popleft()
                    in_flight[pool.submit(_process_clip, job, worker)] = (index, job)
                done, _ = wait(in_flight, return_when=FIRST_COMPLETED)
                broken = False
                for future in done:
                    index, job = in_flight.pop(future)
                    try:
                        report(index, future.result())
                    except BrokenProcessPool:
                        broken = True
                        in_flight[future] = (index, job)  # handled with the others below
                if broken:
                    for index, job in in_flight.values():
                        if width == 1:  # it ran alone: this clip killed the process
                            report(index, _crashed(job))
                        else:
                            suspects.append((index, job))
                    in_flight.clear()
                    break
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
        if not pending and suspects:
            pending, suspects, width = suspects, deque(), 1  # retry the suspects one at a time


def _run_dask(jobs: list[_ClipJob], worker: Worker, scheduler: str,
              report: Callable[[int, ClipOutcome], None]) -> None:
    """Run ``jobs`` on the Dask distributed cluster at ``scheduler``."""
    try:
        from distributed import Client, as_completed
    except ImportError as exc:
        raise UsageError(f"--scheduler {scheduler}: the Dask distributed package is not installed",
                         hint='pip install "fallcam[dask]"') from exc
    try:
        client = Client(scheduler, timeout=_DASK_CONNECT_TIMEOUT, set_as_default=False)
    except (OSError, TimeoutError) as exc:
        raise UsageError(f"--scheduler {scheduler}: cannot connect to a Dask scheduler there ({exc})",
                         hint="give the address the scheduler prints, e.g. tcp://10.0.0.5:8786") from exc
    with client:
        futures = {client.submit(_process_clip, job, worker, pure=False,
                                 key=f"fallcam-batch-{index}-{job.label}-{os.urandom(4).hex()}"): (index, job)
                   for index, job in enumerate(jobs)}
        for future in as_completed(futures, loop=client.loop):
            index, job = futures[future]
            try:
                result = future.result()
            except Exception as exc:  # worker lost (KilledWorker), connection dropped, ...
                result = dataclasses.replace(_crashed(job), message=f"Dask: {type(exc).__name__}: {exc}")
            report(index, result)


# ---------------------------------------------------------------------------------------------
# Tables


def _summary_row(outcome: ClipOutcome) -> dict[str, Any]:
    row: dict[str, Any] = {name: "" for name in BATCH_SUMMARY_COLUMNS}
    row.update(clip=outcome.clip, label=outcome.label, status=outcome.status,
               exit_code=outcome.exit_code, message=outcome.message, out_dir=outcome.out_dir,
               seconds=outcome.seconds)
    summary = outcome.summary
    if not summary:
        return row
    tracks = summary.get("tracks") or []
    first = tracks[0] if tracks else {}
    viscosity_U = first.get("viscosity_U_pa_s")
    if viscosity_U is None and first.get("viscosity_u_pa_s") is not None:
        viscosity_U = 2.0 * first["viscosity_u_pa_s"]  # k = 2 (INTERFACE: U reported with k = 2)
    n_warnings = len(summary.get("warnings") or []) + sum(len(t.get("warnings") or []) for t in tracks)
    row.update(capture_fps=summary.get("capture_fps"), px_per_mm=summary.get("px_per_mm"),
               n_tracks=len(tracks), direction=first.get("direction"),
               terminal_velocity_m_s=first.get("terminal_velocity_m_s"),
               terminal_velocity_u_m_s=first.get("terminal_velocity_u_m_s"),
               terminal_reached=first.get("terminal_reached"),
               viscosity_pa_s=first.get("viscosity_pa_s"), viscosity_u_pa_s=first.get("viscosity_u_pa_s"),
               viscosity_U_pa_s=viscosity_U, reynolds_number=first.get("reynolds_number"),
               wall_factor=first.get("wall_factor"), n_warnings=n_warnings)
    return {key: ("" if value is None else value) for key, value in row.items()}


def _csv_text(columns: tuple[str, ...], rows: Iterable[Mapping[str, Any]]) -> str:
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=columns, lineterminator="\n", extrasaction="ignore")
    writer.writeheader()
    writer.writerows(rows)
    return buffer.getvalue()


# ---------------------------------------------------------------------------------------------


def run_batch(source: str | os.PathLike[str], rig_path: str | os.PathLike[str],
              out_dir: str | os.PathLike[str], *, jobs: int = 1,
              overrides: Mapping[str, Any] | None = None, scheduler: str | None = None,
              progress: Callable[[int, int], None] | None = None,
              worker: Worker | None = None) -> BatchResult:
    """Process every clip of a folder or manifest; record failures; write the batch tables.

    Parameters
    ----------
    source : str or path-like
        A folder (its video files, by extension, non-recursive) or a manifest ``.csv``.
    rig_path : str or path-like
        The rig TOML shared by all clips.
    out_dir : str or path-like
        Batch output folder; gets one folder per clip, ``batch_summary.csv`` and ``failures.csv``.
    jobs : int, optional
        Number of local worker processes (≥ 1). Ignored with ``scheduler``.
    overrides : mapping, optional
        Rig overrides from the command line (flat names of :mod:`fallcam.rig`), applied to every
        clip; a manifest column overrides them for its row.
    scheduler : str, optional
        Address of a Dask distributed scheduler (``tcp://host:8786``) to run the clips on instead
        of local processes. Needs the ``fallcam[dask]`` extra.
    progress : callable, optional
        ``progress(n_done, n_total)`` after each clip.
    worker : callable, optional
        ``worker(clip_path, rig, out_dir) -> summary dict``, default
        :func:`fallcam.analyze.analyze_clip`. Must be picklable (a module-level function).

    Returns
    -------
    BatchResult
        Per-clip outcomes in input order, the table paths and the exit code.

    Raises
    ------
    fallcam.errors.UsageError
        Bad ``jobs``, source, rig file or scheduler address (exit 2) — problems of the whole
        batch. Problems of single clips (including a manifest row whose values the rig rejects)
        never raise; they are rows of ``failures.csv``.
    """
    if isinstance(jobs, bool) or not isinstance(jobs, int) or jobs < 1:
        raise UsageError(f"--jobs {jobs!r}: expected a whole number ≥ 1")
    from fallcam.rig import load_rig

    source_path, rig_file, out_root = Path(source), Path(rig_path), Path(out_dir)
    base_overrides = dict(overrides or {})
    load_rig(rig_file, base_overrides or None)  # a bad rig or command line stops the batch (exit 2)
    try:
        rig_sha256 = _file_sha256(rig_file)
    except OSError as exc:
        raise UsageError(f"--rig {rig_file}: cannot be read ({exc.strerror}); expected a readable TOML file") from exc
    listed = _list_inputs(source_path)
    labels = _unique_labels(label for _, label, _ in listed)
    if worker is None:
        from fallcam.analyze import analyze_clip as worker

    out_root.mkdir(parents=True, exist_ok=True)
    remove_stale_partials(out_root)
    outcomes: list[ClipOutcome | None] = [None] * len(listed)
    runnable: list[_ClipJob] = []
    rig_cache: dict[str, Any] = {}
    for index, ((clip_path, _, row_overrides), label) in enumerate(zip(listed, labels)):
        merged = {**base_overrides, **row_overrides}
        key = json.dumps(merged, sort_keys=True, default=str)
        clip_out = out_root / label
        try:
            if key not in rig_cache:
                rig_cache[key] = load_rig(rig_file, merged or None)
        except UsageError as exc:
            outcomes[index] = ClipOutcome(clip=str(clip_path), label=label, status="failed",
                                          exit_code=exc.exit_code, message=str(exc),
                                          out_dir=str(clip_out), seconds=0.0)
            continue
        inputs = {"rig_sha256": rig_sha256, "overrides": json.loads(key),
                  "worker": _worker_name(worker), "fallcam_version": fallcam.__version__}
        runnable.append(_ClipJob(clip_path=clip_path, label=label, out_dir=clip_out,
                                 rig=rig_cache[key], inputs=inputs))
    index_of = [i for i, o in enumerate(outcomes) if o is None]

    n_total = len(outcomes)
    n_done = n_total - len(runnable)
    if progress is not None:
        progress(n_done, n_total)

    def report(job_index: int, outcome: ClipOutcome) -> None:
        nonlocal n_done
        outcomes[index_of[job_index]] = outcome
        n_done += 1
        if progress is not None:
            progress(n_done, n_total)

    if runnable:
        if scheduler:
            _run_dask(runnable, worker, scheduler, report)
        else:
            _run_local(runnable, worker, jobs, report)

    remove_stale_partials(out_root)  # staging folders of worker processes that died
    final = tuple(o for o in outcomes if o is not None)
    summary_csv = atomic_write_text(out_root / _SUMMARY_CSV,
                                    _csv_text(BATCH_SUMMARY_COLUMNS, map(_summary_row, final)))
    failures_csv = atomic_write_text(out_root / _FAILURES_CSV, _csv_text(
        FAILURE_COLUMNS, (o.to_dict() for o in final if o.status == "failed")))
    failed = [o for o in final if o.status == "failed"]
    exit_code = failed[0].exit_code if failed and len(failed) == len(final) else EXIT_OK
    return BatchResult(out_dir=str(out_root), outcomes=final, summary_csv=str(summary_csv),
                       failures_csv=str(failures_csv), exit_code=exit_code)
