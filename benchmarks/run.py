"""fallcam benchmarks: every figure is a ratio measured side by side in this one run.

    python benchmarks/run.py [--quick] [--workdir DIR]

1. Throughput on a 1080p60 H.264 clip at a phone-like bitrate (noisy, ~18 Mbit/s):
   decode-only (PyAV, decode to grey, nothing else, with the decoder threaded as
   ``tracker.video`` threads it; PyAV's defaults printed for reference) against ``tracker.track.track_clip`` and
   ``fallcam.analyze.analyze_clip`` (with and without figures) on the same file, interleaved, best
   of five rounds each (this shared machine varies by ±5 % from one run to the next); also the
   ``fallcam analyze`` command against decode-only, each in a fresh process (imports included).
   Targets: track ÷ decode ≥ 0.85, analyze ÷ decode ≥ 0.85.
2. Peak memory of tracking a 4K clip at two lengths (each in a fresh process): flat in length.
3. ``fallcam batch`` speed-up with 2 workers against 1 on the same clips. Target ≥ 1.7 on 2 cores.
   Printed twice: against one worker as it runs by default (which already decodes on every
   core, so it bounds the speed-up) and against one worker pinned to one core (parallel scaling).

CPU time (process + children) is printed beside wall time: on a shared machine the CPU ratio is
the steadier one. Clips are rendered by :mod:`tracker.synth` into the work folder (not committed).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def _cpu() -> float:
    s, c = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return s.ru_utime + s.ru_stime + c.ru_utime + c.ru_stime


def timed(fn, repeats: int = 2) -> tuple[float, float]:
    """Best wall and CPU seconds over ``repeats`` runs."""
    best_wall = best_cpu = float("inf")
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), _cpu()
        fn()
        best_wall = min(best_wall, time.perf_counter() - w0)
        best_cpu = min(best_cpu, _cpu() - c0)
    return best_wall, best_cpu


def decode_only(path: Path, settings: str = "fallcam") -> int:
    """Decode every frame to a grey array and nothing else. ``settings``: "fallcam" threads the
    decoder as tracker.video does (the fair denominator); "pyav" keeps PyAV's defaults."""
    import av

    from tracker.video import configure_decoder

    n = 0
    with av.open(str(path)) as container:
        stream = container.streams.video[0]
        if settings == "fallcam":
            configure_decoder(stream)
        else:
            stream.thread_type = "AUTO"
        for frame in container.decode(stream):
            frame.to_ndarray(format="gray")
            n += 1
    return n


def phone_spec(width: int, height: int, duration_s: float, seed: int, bit_rate: int | None):
    from tracker import synth

    return synth.ClipSpec(width_px=width, height_px=height, capture_fps=60.0, duration_s=duration_s,
                          px_per_mm=height / 120.0, ball_diameter_mm=2.0,
                          terminal_velocity_mm_s=80.0 / duration_s, tau_s=0.002,
                          drops=(synth.Drop(release_t_s=0.1, z0_mm=-5.0),), noise_dn=4.0,
                          marks_mm=(20.0, 80.0), bit_rate=bit_rate, crf=None if bit_rate else 20,
                          seed=seed)


def write_rig(spec, path: Path) -> Path:
    from tracker import synth

    from fallcam.demo import rig_toml

    tables = synth.rig_dict(spec)
    tables["liquid"] = {"model": "glycerol-water", "glycerol_mass_fraction": 0.99, "temperature_c": 21.0}
    tables["ball"] = {"diameter_mm": spec.ball_diameter_mm, "material": "steel-52100"}
    tables["tube"] = {"inner_diameter_mm": 40.0}
    path.write_text(rig_toml(tables), encoding="utf-8")
    return path


def bench_throughput(work: Path, duration_s: float, rounds: int = 5) -> dict:
    from tracker import synth
    from tracker.track import track_clip

    from fallcam.analyze import analyze_clip
    from fallcam.rig import load_rig

    spec = phone_spec(1920, 1080, duration_s, seed=3, bit_rate=18_000_000)
    clip = work / "phone_1080p60.mp4"
    if not clip.exists():
        synth.write_clip(spec, clip)
    rig_path = write_rig(spec, work / "phone.toml")
    rig = load_rig(rig_path)
    n = decode_only(clip)
    command = [sys.executable, "-c", "import sys; from fallcam.cli import main; sys.exit(main(sys.argv[1:]))",
               "analyze", str(clip), "--rig", str(rig_path), "--out", str(work / "analyze_cmd"), "--quiet"]
    mbit = clip.stat().st_size * 8 / duration_s / 1e6
    tasks = {
        "decode-only": lambda: decode_only(clip),
        "decode-only, PyAV defaults": lambda: decode_only(clip, "pyav"),
        "track": lambda: track_clip(clip, rig.scale(), expect_direction="down",
                                    ball_diameter_mm=rig.ball.diameter_mm),
        "analyze (no figures)": lambda: analyze_clip(clip, rig, work / "analyze_out", figures=False),
        "analyze (figures + report)": lambda: analyze_clip(clip, rig, work / "analyze_out_fig"),
        # what a user waits for: each a fresh process, imports included
        "decode-only, own process": lambda: subprocess.run(
            [sys.executable, "-c", _DECODE_JOB + "decode(sys.argv[1])", str(clip)], check=True),
        "fallcam analyze command": lambda: subprocess.run(command, check=True),
    }
    # interleaved rounds, best of each: a load change on the machine hits every task alike
    rows = {name: (float("inf"), float("inf")) for name in tasks}
    for _ in range(rounds):
        for name, fn in tasks.items():
            w, c = timed(fn, repeats=1)
            rows[name] = (min(rows[name][0], w), min(rows[name][1], c))
    dec = rows["decode-only"]
    print(f"\n1. throughput, 1080p60 H.264, {n} frames, {mbit:.1f} Mbit/s")
    print(f"   {'':28s} {'wall s':>8s} {'fps':>7s} {'÷ decode (wall)':>16s} {'÷ decode (CPU)':>15s}")
    for name, (w, c) in rows.items():
        print(f"   {name:28s} {w:8.2f} {n / w:7.1f} {dec[0] / w:16.3f} {dec[1] / c:15.3f}")
    own, cmd = rows["decode-only, own process"], rows["fallcam analyze command"]
    print(f"   the command against decode-only, each in its own process: {own[0] / cmd[0]:.3f} (wall), "
          f"{own[1] / cmd[1]:.3f} (CPU); the imports (~1 s) are a fixed cost per command")
    return {name: {"wall_s": w, "cpu_s": c, "ratio_wall": dec[0] / w, "ratio_cpu": dec[1] / c}
            for name, (w, c) in rows.items()}


_DECODE_JOB = ("import sys\nimport av\nfrom tracker.video import configure_decoder\n"
               "def decode(path):\n    with av.open(path) as c:\n        s = c.streams.video[0]\n"
               "        configure_decoder(s)\n        for f in c.decode(s):\n"
               "            f.to_ndarray(format='gray')\n")

_HWM = ("def hwm():\n    for line in open('/proc/self/status'):\n"
        "        if line.startswith('VmHWM:'):\n            return int(line.split()[1]) / 1024\n")


def _peak_rss_mb(clip: Path, rig_path: Path, what: str) -> float:
    """Peak resident memory of one job in a fresh process (VmHWM: ru_maxrss would carry over the
    parent's high-water mark across exec)."""
    job = {
        "track": ("from fallcam.rig import load_rig\nfrom tracker.track import track_clip\n"
                  "rig = load_rig(sys.argv[2])\n"
                  "track_clip(sys.argv[1], rig.scale(), expect_direction='down', "
                  "ball_diameter_mm=rig.ball.diameter_mm)\n"),
        "decode": _DECODE_JOB + "decode(sys.argv[1])\n",
    }[what]
    code = "import sys\n" + _HWM + job + "print(hwm())"
    out = subprocess.run([sys.executable, "-c", code, str(clip), str(rig_path)], check=True,
                         capture_output=True, text=True)
    return float(out.stdout.strip().splitlines()[-1])


def bench_memory(work: Path, durations: tuple[float, float]) -> dict:
    from tracker import synth

    res = {}
    print("\n2. peak memory of tracking a 4K (3840×2160) H.264 clip, fresh process each")
    for d in durations:
        spec = phone_spec(3840, 2160, d, seed=5, bit_rate=40_000_000)
        clip = work / f"uhd_{d:g}s.mp4"
        if not clip.exists():
            synth.write_clip(spec, clip)
        rig_path = write_rig(spec, work / f"uhd_{d:g}s.toml")
        res[d] = _peak_rss_mb(clip, rig_path, "track")
        dec = _peak_rss_mb(clip, rig_path, "decode")
        print(f"   {d:5.1f} s ({int(d * 60)} frames): peak RSS track {res[d]:7.1f} MB, "
              f"decode-only {dec:7.1f} MB, ratio {res[d] / dec:.2f}")
    a, b = durations
    print(f"   ratio peak({b:g} s) ÷ peak({a:g} s) = {res[b] / res[a]:.3f} for {b / a:.1f}× the length")
    return {f"{k:g}s": v for k, v in res.items()}


def bench_batch(work: Path, n_clips: int, duration_s: float) -> dict:
    from tracker import synth

    from fallcam.batch import run_batch

    folder = work / "batch_clips"
    folder.mkdir(exist_ok=True)
    spec = None
    for i in range(n_clips):
        spec = phone_spec(1280, 720, duration_s, seed=100 + i, bit_rate=None)
        clip = folder / f"drop_{i:02d}.mp4"
        if not clip.exists():
            synth.write_clip(spec, clip)
    rig_path = write_rig(spec, work / "batch.toml")
    runs = {}
    cores = sorted(os.sched_getaffinity(0))
    # "1 worker, 1 core": the same one-worker batch with this process (and so the pool it forks)
    # pinned to one core: the baseline of parallel scaling, where the default one-worker run
    # already spreads its decoding over every core
    for name, jobs, pin in (("1 worker", 1, None), ("1 worker, 1 core", 1, cores[:1]), ("2 workers", 2, None)):
        out = work / f"batch_out_{name.replace(' ', '').replace(',', '_')}"
        if out.exists():
            import shutil

            shutil.rmtree(out)
        if pin:
            os.sched_setaffinity(0, pin)
        try:
            w0, c0 = time.perf_counter(), _cpu()
            run_batch(folder, rig_path, out, jobs=jobs)
            runs[name] = (time.perf_counter() - w0, _cpu() - c0)
        finally:
            os.sched_setaffinity(0, cores)
    print(f"\n3. batch of {n_clips} 720p clips ({duration_s:g} s each), {os.cpu_count()} cores")
    for name, (w, c) in runs.items():
        print(f"   {name:18s} {w:7.2f} s wall, {c:7.2f} s CPU, {c / w:4.2f} cores busy")
    one, pinned, two = runs["1 worker"], runs["1 worker, 1 core"], runs["2 workers"]
    print(f"   speed-up of 2 workers over 1 worker:            {one[0] / two[0]:.2f} "
          f"(one worker alone already keeps {one[1] / one[0]:.2f} cores busy)")
    print(f"   speed-up of 2 workers over 1 worker on 1 core:  {pinned[0] / two[0]:.2f} (parallel scaling)")
    return {"jobs1_s": one[0], "jobs1_one_core_s": pinned[0], "jobs2_s": two[0],
            "speedup": one[0] / two[0], "speedup_vs_one_core": pinned[0] / two[0],
            "cores_busy_jobs1": one[1] / one[0]}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="shorter clips (a smoke run, not the figures)")
    ap.add_argument("--workdir", type=Path, default=None, help="keep rendered clips here between runs")
    args = ap.parse_args()
    work = args.workdir or Path(tempfile.mkdtemp(prefix="fallcam-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    print(f"fallcam benchmarks in {work}")
    results = {
        "throughput": bench_throughput(work, 2.0 if args.quick else 10.0),
        "memory_mb": bench_memory(work, (0.5, 1.5) if args.quick else (1.0, 4.0)),
        "batch": bench_batch(work, 4 if args.quick else 6, 2.0 if args.quick else 4.0),
    }
    (work / "results.json").write_text(json.dumps(results, indent=2), encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
