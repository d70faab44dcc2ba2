"""Time and peak memory of build_profile on long logs (issue 7 target for the whole command:
about 15 s and <= 1.5 GB peak at 1,000,000 fixes on the 2-core machine).

Run:  /tmp/v/bin/python benchmarks/bench_profile.py [N ...]   (default: 100000 1000000)
Each size runs in its own process (clean peak-memory reading); prints one table. build_s is wall
time, cpu_s the process CPU time (steadier than wall time when other jobs share the machine);
csv_s is writing the CSV (survey.profile_export.write_csv); peak_MB includes making the synthetic
log.
The log is the synthetic road alignment driven over and over at 80 km/h, 10 Hz, dual-frequency
error with per-fix accuracy, cleaned by survey.clean.clean_track first (not timed).
"""

from __future__ import annotations

import resource
import subprocess
import sys
import time


def one(n: int) -> None:
    import numpy as np

    from survey import synthetic as S
    from survey.clean import clean_track
    from survey.frame import LocalFrame
    from survey.profile_build import build_profile

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
    t0, c0 = time.perf_counter(), time.process_time()
    p = build_profile(track, np.column_stack([e, nn, u]), frame)
    secs, cpu = time.perf_counter() - t0, time.process_time() - c0
    import os
    import tempfile

    from survey.profile_export import write_csv

    with tempfile.TemporaryDirectory() as tmp:
        t1 = time.perf_counter()
        write_csv(p, os.path.join(tmp, "p.csv"))
        csv_s = time.perf_counter() - t1
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"{n:>9d} {len(p):>9d} {secs:8.1f} {cpu:8.1f} {csv_s:6.1f} {peak:9.0f}")


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--one":
        one(int(sys.argv[2]))
        raise SystemExit(0)
    sizes = [int(a) for a in sys.argv[1:]] or [100_000, 1_000_000]
    print(f"{'fixes':>9s} {'stations':>9s} {'build_s':>8s} {'cpu_s':>8s} {'csv_s':>6s} {'peak_MB':>9s}")
    sys.stdout.flush()
    for n in sizes:
        subprocess.run([sys.executable, __file__, "--one", str(n)], check=False)
