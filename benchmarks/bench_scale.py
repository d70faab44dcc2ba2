"""Scale benchmark: ingest, info, profile, flag and one viewer step at 10k, 100k and 1M fixes,
against gpxpy.parse on the same files; and the batch speed-up over many logs.

    python benchmarks/bench_scale.py [--sizes 10000,100000,1000000] [--repeats 3]
        [--repeats-large 1] [--batch-logs 50] [--batch-fixes 5000,20000] [--batch-repeats 2]
        [--no-batch] [--no-tui] [--workdir DIR]

Logs: an invented survey drive (tangents, clothoid spirals, arcs of 40-600 m radius both ways,
a grade line) from ``survey.synthetic``, driven at 10 m/s, logged at 10 Hz with dual-frequency
receiver error, written as GPX 1.1 (ele, time) by ``survey.logwrite``. With ``--workdir`` the
logs are kept and reused between runs (the 1M log takes about a minute to make).

Every measurement runs in a fresh Python process, so its peak memory (``VmHWM`` of that child,
Linux) is its own; the time is the median over repeats of the measured call inside the child
(imports of the entry module excluded, everything it loads lazily included):

* ``gpxpy.parse``: ``gpxpy.parse(text)`` on the decoded file (the yardstick);
* ``read``: ``survey.readers.read_log`` (ingest only);
* ``info`` / ``profile`` / ``flag``: ``survey.cli.main`` with the same arguments as the
  command line (``profile`` writes CSV, ``flag`` uses ``--preset road-80`` and writes CSV);
* ``view step``: the viewer open on the log's profile (computed first, not timed), then the
  median of 50 "cursor one station right" key handlers plus the render of what they changed
  (chart panel, plan, readout), as in benchmarks/bench_tui.py. Its peak memory includes the
  profile computation.

Batch: ``--batch-logs`` logs with sizes spread evenly over ``--batch-fixes`` (min,max; the
default, 5,000-20,000 fixes, is 8 min to 33 min at 10 Hz), run with ``trackframe batch DIR -o
out.csv --preset road-80`` with ``-j 1`` and with ``-j 2`` (same logs, whole-process wall time,
both with one BLAS thread per process so the ratio is the workers' alone), and once more with
``-j 1`` in the default environment for comparison.

Targets (issue 7, this 2-core machine): ``info`` on 1M fixes <= 0.1x gpxpy.parse; the whole
``profile`` <= 0.3x gpxpy.parse and <= 1.5 GB peak; cost linear in N (1M <= 12x the 100k
figure); batch >= 1.7x faster on 2 workers than on 1.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

SPEED_MPS = 10.0
RATE_HZ = 10.0
LARGE = 1_000_000
STEPS = ("gpxpy.parse", "read", "info", "profile", "flag", "view step")
PEAK_LIMIT_MB = 1.5e9 / 2**20  # 1.5 GB (10^9 bytes) in MiB, the unit VmHWM kB / 1024 gives

_CHILD = r"""
import io, json, os, statistics, sys, time
step, path, out = sys.argv[1], sys.argv[2], sys.argv[3]
res = {}
if step == "gpxpy.parse":
    import gpxpy
    text = open(path, encoding="utf-8").read()
    t0 = time.perf_counter()
    g = gpxpy.parse(text)
    res["s"] = time.perf_counter() - t0
    res["n"] = sum(len(s.points) for t in g.tracks for s in t.segments)
elif step == "read":
    from survey.readers import read_log
    t0 = time.perf_counter()
    res["n"] = len(read_log(path))
    res["s"] = time.perf_counter() - t0
elif step in ("info", "profile", "flag"):
    from survey.cli import main
    argv = {"info": ["info", path],
            "profile": ["profile", path, "-o", out, "--force"],
            "flag": ["flag", path, "--preset", "road-80", "-o", out, "--force", "--no-marks"]}[step]
    sink = io.StringIO()
    real_out, real_err = sys.stdout, sys.stderr
    sys.stdout = sys.stderr = sink
    t0 = time.perf_counter()
    try:
        code = main(argv)
    finally:
        sys.stdout, sys.stderr = real_out, real_err
    res["s"] = time.perf_counter() - t0
    if code != 0:
        raise SystemExit(f"{step} exited {code}: {sink.getvalue()[-2000:]}")
elif step == "view step":
    import asyncio
    from survey.design import Limits
    from survey.pipeline import run_profile
    profile = run_profile(path).profile
    res["n"] = len(profile)

    sys.path.insert(0, "benchmarks")
    from bench_tui import direct_steps

    async def go():
        from tui.app import TrackApp
        app = TrackApp(log_path=path, profile=profile, limits=Limits(sharp_radius_m=50.0, twist_per_m=0.01))
        async with app.run_test(size=(120, 40)) as pilot:
            for _ in range(20000):
                if app.model is not None:
                    break
                await pilot.pause(0.005)
            await pilot.pause()
            app.model.zoom(1 / 64)
            app.model.goto(int(0.37 * app.model.n))
            app.model.zoom(1.0)
            await pilot.pause()
            return direct_steps(app, 50)  # handler + repaint of what changed (bench_tui.py)

    res["s"] = statistics.median(asyncio.run(go()))
# VmHWM: this process's own peak RSS. (ru_maxrss would do, but Linux carries the parent's high
# water mark into a child across vfork + exec, so a big parent would inflate it.)
with open("/proc/self/status") as fh:
    res["maxrss_kb"] = next(int(l.split()[1]) for l in fh if l.startswith("VmHWM:"))
print(json.dumps(res))
"""


# ---------------------------------------------------------------------------------------------
# Logs


def survey_drive(length_m: float, rng: np.random.Generator):
    """An invented drive of at least ``length_m``: tangent / spiral / arc / spiral groups with
    radii 40-600 m on alternating sides, on a gentle grade line."""
    from survey import synthetic as syn

    pieces, total = syn.random_drive_pieces(length_m, rng)
    return syn.alignment_curve(pieces, [(total, 0.02, -0.02)], start_heading_rad=0.4)


def write_log(path: Path, fixes: int, seed: int = 3) -> None:
    """A GPX 1.1 log of exactly ``fixes`` fixes of the invented Hollin Vale survey drive."""
    from survey import synthetic as syn
    from survey.frame import LocalFrame
    from survey.logwrite import gpx_text, write_text

    rng = np.random.default_rng(seed)
    curve = survey_drive(fixes / RATE_HZ * SPEED_MPS * 1.02 + 100.0, rng)
    traj = syn.sample_path(curve, SPEED_MPS, RATE_HZ, t0_s=1_790_000_000.0, name="Hollin Vale drive")
    fixes_all = syn.add_gnss_error(traj, "dual", rng)
    frame = LocalFrame.enu(46.9, 7.4, 550.0)  # invented survey origin
    track = syn.fixes_to_track(fixes_all, frame.inverse, path=path.name).take(np.arange(fixes))
    write_text(str(path), gpx_text(track, name="Hollin Vale survey drive (invented)", creator="Hollin Vale crew"))


def ensure_log(workdir: Path, fixes: int, seed: int = 3) -> Path:
    path = workdir / f"hollin_vale_{fixes}_s{seed}.gpx"
    if not path.exists():
        t0 = time.perf_counter()
        write_log(path, fixes, seed)
        print(f"  wrote {path.name} ({path.stat().st_size / 1e6:.1f} MB) in {time.perf_counter() - t0:.0f} s", flush=True)
    return path


# ---------------------------------------------------------------------------------------------
# Measuring


def run_child(step: str, log: Path, out: Path) -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", _CHILD, step, str(log), str(out)], capture_output=True, text=True, cwd=ROOT, env=env)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"{step} on {log.name} failed:\n{proc.stderr[-3000:]}{proc.stdout[-1000:]}")
    res = json.loads(proc.stdout.strip().splitlines()[-1])
    res["wall"] = wall
    return res


def measure(step: str, log: Path, out: Path, repeats: int) -> dict:
    runs = [run_child(step, log, out) for _ in range(repeats)]
    return {
        "s": statistics.median(r["s"] for r in runs),
        "wall": statistics.median(r["wall"] for r in runs),
        "peak_mb": max(r["maxrss_kb"] for r in runs) / 1024,
        "runs": len(runs),
    }


def _busy_jiffies() -> int:
    """CPU time all processes on the machine have used since boot, in clock ticks (/proc/stat)."""
    with open("/proc/stat") as fh:
        user, nice, system, _idle, _iowait, irq, softirq, steal = (int(v) for v in fh.readline().split()[1:9])
    return user + nice + system + irq + softirq + steal


def timed_command(argv: list[str], env: dict) -> tuple[float, float]:
    """(wall s, other processes' load in cores during the run) of a command run to completion.

    The machine is shared: the second figure (machine-wide busy CPU time minus this command's
    own, over the wall time) shows whether someone else's work was competing for the cores.
    """
    tick = os.sysconf("SC_CLK_TCK")
    before_all, before_ours = _busy_jiffies(), os.times()
    t0 = time.perf_counter()
    proc = subprocess.run(argv, capture_output=True, text=True, cwd=ROOT, env=env)
    wall = time.perf_counter() - t0
    after_all, after_ours = _busy_jiffies(), os.times()
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(argv[2:5])} exited {proc.returncode}:\n{proc.stderr[-3000:]}")
    ours = (after_ours.children_user + after_ours.children_system) - (before_ours.children_user + before_ours.children_system)
    others = max(0.0, (after_all - before_all) / tick - ours) / wall
    return wall, others


def batch_speedup(workdir: Path, logs: int, lo: int, hi: int, repeats: int) -> dict:
    folder = workdir / f"batch_{logs}_{lo}_{hi}"
    folder.mkdir(exist_ok=True)
    sizes = np.linspace(lo, hi, logs).astype(int)
    rng = np.random.default_rng(11)
    rng.shuffle(sizes)
    for i, n in enumerate(sizes):
        p = folder / f"crew{i:02d}_run.gpx"
        if not p.exists():
            write_log(p, int(n), seed=100 + i)
    out = workdir / "batch_out.csv"
    base = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    # "-j 1" runs the logs in the command's own process, whose BLAS may use threads; the local
    # pool's workers use one BLAS thread each (survey.batch.WORKER_THREAD_ENV). So that the
    # ratio measures the workers and nothing else, both timed runs get that same setting; one
    # more run shows "-j 1" in the default environment for comparison.
    from survey.batch import WORKER_THREAD_ENV

    pinned = {**base, **WORKER_THREAD_ENV}

    def argv(jobs: int) -> list[str]:
        return [sys.executable, "-m", "survey.cli", "batch", str(folder), "--preset", "road-80", "-o", str(out), "--force", "-j", str(jobs)]

    runs: dict[str, list[tuple[float, float]]] = {"t1": [], "t2": []}
    for _ in range(repeats):  # interleaved, so a burst of outside load hits both alike
        runs["t1"].append(timed_command(argv(1), pinned))
        runs["t2"].append(timed_command(argv(2), pinned))
    default = timed_command(argv(1), base)
    # Fastest run of each: outside load only ever adds time.
    best = {k: min(v) for k, v in runs.items()}
    return {
        "logs": logs, "fixes": int(sizes.sum()), "lo": lo, "hi": hi, "repeats": repeats,
        "t1": best["t1"][0], "t2": best["t2"][0], "load1": best["t1"][1], "load2": best["t2"][1],
        "t1_default": default[0], "load_default": default[1],
        "all": {k: [round(w, 1) for w, _ in v] for k, v in runs.items()},
    }


# ---------------------------------------------------------------------------------------------
# Report


def _ok(flag: bool | None) -> str:
    return "" if flag is None else ("yes" if flag else "NO")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sizes", default="10000,100000,1000000", help="comma-separated fix counts")
    ap.add_argument("--repeats", type=int, default=3, help="runs per measurement below 1M fixes")
    ap.add_argument("--repeats-large", type=int, default=1, help="runs per measurement at >= 1M fixes")
    ap.add_argument("--steps", default=",".join(STEPS), help=f"subset of: {', '.join(STEPS)}")
    ap.add_argument("--no-tui", action="store_true", help="skip the viewer step")
    ap.add_argument("--batch-logs", type=int, default=50)
    ap.add_argument("--batch-fixes", default="5000,20000", metavar="MIN,MAX")
    ap.add_argument("--batch-repeats", type=int, default=2, help="interleaved runs of -j 1 and -j 2 (fastest counts)")
    ap.add_argument("--no-batch", action="store_true")
    ap.add_argument("--workdir", help="keep generated logs here and reuse them")
    args = ap.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",") if s]
    steps = [s for s in args.steps.split(",") if s]
    if args.no_tui:
        steps = [s for s in steps if s != "view step"]
    unknown = set(steps) - set(STEPS)
    if unknown:
        ap.error(f"unknown step(s): {', '.join(sorted(unknown))}")

    tmp = None
    if args.workdir:
        workdir = Path(args.workdir)
        workdir.mkdir(parents=True, exist_ok=True)
    else:
        tmp = tempfile.mkdtemp(prefix="tf-scale-")
        workdir = Path(tmp)
    try:
        results: dict[tuple[int, str], dict] = {}
        for n in sizes:
            log = ensure_log(workdir, n)
            reps = args.repeats_large if n >= LARGE else args.repeats
            for step in steps:
                results[n, step] = r = measure(step, log, workdir / "out.csv", reps)
                print(f"  {n:>9,} {step:<12} {r['s']:9.4f} s  peak {r['peak_mb']:7.0f} MB  ({r['runs']} run(s))", flush=True)
        batch = None
        if not args.no_batch:
            lo, hi = (int(v) for v in args.batch_fixes.split(","))
            batch = batch_speedup(workdir, args.batch_logs, lo, hi, args.batch_repeats)
    finally:
        if tmp:
            shutil.rmtree(tmp, ignore_errors=True)

    print()
    print("Median time of the measured call in a fresh process (peak = that process's VmHWM); "
          "x gpxpy = time / gpxpy.parse time on the same file; view step = one cursor step + redraw")
    hdr = ("fixes", "step", "time s", "us/fix", "peak MB", "x gpxpy", "target", "ok")
    print("| " + " | ".join(hdr) + " |")
    print("|" + "|".join("---" for _ in hdr) + "|")
    for n in sizes:
        base = results.get((n, "gpxpy.parse"))
        for step in steps:
            r = results[n, step]
            ratio = r["s"] / base["s"] if base and step not in ("gpxpy.parse", "view step") else None
            target, ok = "", None
            if step == "info" and ratio is not None:
                target, ok = "<= 0.1x (at 1M)", ratio <= 0.1 if n >= LARGE else None
            elif step == "profile" and ratio is not None:
                target = "<= 0.3x, <= 1.5 GB (at 1M)"
                ok = (ratio <= 0.3 and r["peak_mb"] <= PEAK_LIMIT_MB) if n >= LARGE else None
            elif step == "view step":
                target, ok = "<= 30 ms (issue 5)", r["s"] <= 0.030
            us = "" if step == "view step" else f"{r['s'] / n * 1e6:.1f}"
            t = f"{r['s'] * 1e3:.2f} ms" if step == "view step" else f"{r['s']:.3f}"
            print(f"| {n:,} | {step} | {t} | {us} | {r['peak_mb']:.0f} | "
                  f"{'' if ratio is None else f'{ratio:.3f}'} | {target} | {_ok(ok)} |")

    small, big = [s for s in sizes if s < LARGE], [s for s in sizes if s >= LARGE]
    if small and big:
        a, b = max(small), min(big)
        print()
        print(f"Linearity: time at {b:,} fixes / time at {a:,} fixes (linear = {b / a:g}; target <= {1.2 * b / a:g})")
        print("| step | " + f"{a:,} s | {b:,} s | ratio | ok |")
        print("|---|---|---|---|---|")
        for step in steps:
            if step == "view step":
                continue
            ra, rb = results[a, step]["s"], results[b, step]["s"]
            print(f"| {step} | {ra:.3f} | {rb:.3f} | {rb / ra:.1f} | {_ok(rb / ra <= 1.2 * b / a)} |")

    if batch:
        sp = batch["t1"] / batch["t2"]
        print()
        print(f"Batch: trackframe batch on {batch['logs']} logs ({batch['lo']:,}-{batch['hi']:,} fixes each, "
              f"{batch['fixes']:,} in all), whole-process wall time, {os.cpu_count()} cores")
        print(f"Fastest of {batch['repeats']} interleaved run(s) each (all runs: -j 1 {batch['all']['t1']} s, "
              f"-j 2 {batch['all']['t2']} s); 'others' = cores busy with other people's work during that run")
        print("| logs | -j 1 s (others) | -j 2 s (others) | speed-up | target | ok | -j 1 s, threaded BLAS (others) |")
        print("|---|---|---|---|---|---|---|")
        print(f"| {batch['logs']} | {batch['t1']:.1f} ({batch['load1']:.2f}) | {batch['t2']:.1f} ({batch['load2']:.2f}) | "
              f"{sp:.2f}x | >= 1.7x | {_ok(sp >= 1.7)} | {batch['t1_default']:.1f} ({batch['load_default']:.2f}) |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
