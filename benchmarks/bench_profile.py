"""Time and peak memory of build_profile on long logs (issue 7 target for the whole command:
<= 0.3x gpxpy.parse and <= 1.5 GB peak at 1,000,000 fixes on the 2-core machine; the whole
command is measured by benchmarks/bench_scale.py).

Run:  /tmp/v/bin/python benchmarks/bench_profile.py [N ...]   (default: 100000 1000000)
      /tmp/v/bin/python benchmarks/bench_profile.py --split N  (where the time goes, one size)
      /tmp/v/bin/python benchmarks/bench_profile.py --split-log LOG  (the same on a log file, read
          and run through survey.pipeline.run_profile as ``trackframe profile`` does; reading
          is included in the total)

Each size runs in its own process (clean peak-memory reading); prints one table. build_s is wall
time, cpu_s the process CPU time (steadier than wall time when other jobs share the machine);
csv_s is writing the CSV (survey.profile_export.write_csv); peak_MB includes making the synthetic
log.
The log is the synthetic road alignment driven over and over at 80 km/h, 10 Hz, dual-frequency
error with per-fix accuracy, cleaned by survey.clean.clean_track first (not timed).

``--split`` wraps the main stages and kernels and prints their inclusive wall time and call
count over one build_profile + write_csv (nested rows overlap; the wrappers add well under 1 %).
"""

from __future__ import annotations

import functools
import resource
import subprocess
import sys
import time

#: (module, attribute) of the stages and kernels ``--split`` times, in pipeline order.
SPLIT = (
    ("survey.profile_build", "screen_outliers"), ("survey.profile_build", "_fit_models"),
    ("survey.profile_build", "smooth_stretch"), ("survey.smooth", "build_system"),
    ("survey.smooth", "factor"), ("survey.smooth", "fitted"), ("survey.smooth", "resmooth_path"),
    ("survey.smooth", "solve_columns"), ("survey.smooth", "local_grade"),
    ("survey.profile_build", "_uncertainty"), ("survey.smooth", "noise_draws"),
    ("survey.smooth", "turn_refit_draws"), ("survey.smooth", "apply_turn_prior"),
    ("survey.profile_build", "_chainage_table"), ("survey.profile_build", "_stations"),
    ("survey.smooth", "evaluate_intervals"), ("survey.smooth", "_interval_sums"),
    ("survey.profile_build", "_finish"), ("survey.profile_export", "write_csv"),
)


def make_log(n: int):
    import numpy as np

    from survey import synthetic as S
    from survey.clean import clean_track
    from survey.frame import LocalFrame

    frame = LocalFrame.enu(46.5, 7.6, 800.0)  # invented site
    traj = S.road_alignment(rate_hz=10.0)
    reps = int(np.ceil(n / len(traj)))
    step_t = traj.time_s[-1] + 0.1
    shift = traj.enu_m[-1] - traj.enu_m[0] + np.array([2.2, 0.0, 0.0])
    t = np.concatenate([traj.time_s + i * step_t for i in range(reps)])[:n]
    enu = np.concatenate([traj.enu_m + i * shift for i in range(reps)])[:n]
    fixes = S.Fixes(t, enu, np.zeros(n), np.arange(n))
    fixes = S.add_gnss_error(fixes, "dual", np.random.default_rng(0))
    track, _ = clean_track(S.fixes_to_track(fixes, frame.inverse))
    e, nn, u = frame.forward(track.lat_deg, track.lon_deg, track.height_m)
    return track, np.column_stack([e, nn, u]), frame


def one(n: int) -> None:
    import os
    import tempfile

    from survey.profile_build import build_profile
    from survey.profile_export import write_csv

    track, enu, frame = make_log(n)
    t0, c0 = time.perf_counter(), time.process_time()
    p = build_profile(track, enu, frame)
    secs, cpu = time.perf_counter() - t0, time.process_time() - c0
    with tempfile.TemporaryDirectory() as tmp:
        t1 = time.perf_counter()
        write_csv(p, os.path.join(tmp, "p.csv"))
        csv_s = time.perf_counter() - t1
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"{n:>9d} {len(p):>9d} {secs:8.1f} {cpu:8.1f} {csv_s:6.1f} {peak:9.0f}")


def split(n: int, log: str | None = None) -> None:
    import importlib
    import os
    import tempfile

    from threadpoolctl import threadpool_limits

    totals: dict[str, list] = {}

    def wrap(mod, name):
        f = getattr(mod, name)

        @functools.wraps(f)
        def timed(*a, **k):
            t0 = time.perf_counter()
            try:
                return f(*a, **k)
            finally:
                row = totals.setdefault(name, [0, 0.0])
                row[0] += 1
                row[1] += time.perf_counter() - t0

        setattr(mod, name, timed)

    for modname, name in SPLIT:
        wrap(importlib.import_module(modname), name)
    from survey.profile_build import build_profile
    from survey.profile_export import write_csv

    if log is None:
        track, enu, frame = make_log(n)
    with threadpool_limits(limits=1, user_api="blas"), tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        if log is None:
            p = build_profile(track, enu, frame)
        else:
            from survey import pipeline

            p = pipeline.run_profile(log).profile
        write_csv(p, os.path.join(tmp, "p.csv"))
        total = time.perf_counter() - t0
    what = f"{log}: " if log else f"{n} fixes -> "
    print(f"{what}{len(p)} stations, build_profile + write_csv {total:.2f} s wall (one BLAS thread)")
    print(f"{'stage':24s} {'calls':>6s} {'wall_s':>7s}")
    for _, name in SPLIT:
        if name in totals:
            print(f"{name:24s} {totals[name][0]:6d} {totals[name][1]:7.2f}")


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--one":
        one(int(sys.argv[2]))
        raise SystemExit(0)
    if len(sys.argv) > 2 and sys.argv[1] == "--split-log":
        split(0, sys.argv[2])
        raise SystemExit(0)
    if len(sys.argv) > 1 and sys.argv[1] == "--split":
        split(int(sys.argv[2]) if len(sys.argv) > 2 else 1_000_000)
        raise SystemExit(0)
    sizes = [int(a) for a in sys.argv[1:]] or [100_000, 1_000_000]
    print(f"{'fixes':>9s} {'stations':>9s} {'build_s':>8s} {'cpu_s':>8s} {'csv_s':>6s} {'peak_MB':>9s}")
    sys.stdout.flush()
    for n in sizes:
        subprocess.run([sys.executable, __file__, "--one", str(n)], check=False)
