"""GPX ingest benchmark: gpxpy.parse vs our bulk path vs our safe path.

    python benchmarks/bench_ingest.py [--fixes 10000 100000 1000000] [--repeats 3] [--no-hdop]

Writes a realistic GPX 1.1 file per size into a temporary folder (one trk, a few trkseg, every
fix with ele, a time with fractional seconds and, by default, hdop and sat), then runs each
reader in a fresh subprocess so its peak memory (ru_maxrss of that child) is its own. Prints
median wall time, per-fix microseconds, peak RSS and the ratio ours/gpxpy.

Target (issue): at 1,000,000 fixes the bulk path takes <= 0.1x the time of gpxpy.parse and less
peak memory.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

READERS = ("gpxpy", "bulk", "safe")

_CHILD = r"""
import json, resource, sys, time
path, reader = sys.argv[1], sys.argv[2]
data = open(path, "rb").read()
import gpxpy  # imports stay outside the timed part (both sides import numpy/lxml)
from survey.readers.gpx import read_gpx
t0 = time.perf_counter()
if reader == "gpxpy":
    gpx = gpxpy.parse(data.decode("utf-8"))
    n = sum(len(s.points) for t in gpx.tracks for s in t.segments)
else:
    n = len(read_gpx(path, data, mode=reader))
dt = time.perf_counter() - t0
print(json.dumps({"s": dt, "n": n, "maxrss_kb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss}))
"""


def write_gpx(path: Path, n: int, hdop: bool = True, seed: int = 7) -> None:
    """Write an invented survey run of ``n`` fixes (1 Hz, a wandering walk near 46.5 N 8.1 E)."""
    rng = np.random.default_rng(seed)
    lat = 46.5 + np.cumsum(rng.normal(0, 2e-6, n))
    lon = 8.1 + np.cumsum(rng.normal(0, 3e-6, n))
    ele = 1200 + np.cumsum(rng.normal(0, 0.05, n))
    t0 = np.datetime64("2024-06-03T07:15:00", "ms")
    t = t0 + (np.arange(n) * 1000 + rng.integers(0, 1000, n)).astype("timedelta64[ms]")
    stamps = np.datetime_as_string(t, unit="ms")
    hd = rng.uniform(0.6, 2.5, n)
    sat = rng.integers(5, 14, n)
    seg_every = max(n // 4, 1)
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write('<?xml version="1.0" encoding="UTF-8"?>\n'
                 '<gpx version="1.1" creator="Larchwood Trail Crew logger" '
                 'xmlns="http://www.topografix.com/GPX/1/1">\n'
                 '  <metadata><name>Larchwood ridge survey</name></metadata>\n'
                 '  <trk>\n    <name>Larchwood ridge, run 1</name>\n    <trkseg>\n')
        lines = []
        for i in range(n):
            if i and i % seg_every == 0:
                lines.append("    </trkseg>\n    <trkseg>\n")
            extra = f"<sat>{sat[i]}</sat><hdop>{hd[i]:.1f}</hdop>" if hdop else ""
            lines.append(f'      <trkpt lat="{lat[i]:.8f}" lon="{lon[i]:.8f}"><ele>{ele[i]:.2f}</ele>'
                         f"<time>{stamps[i]}Z</time>{extra}</trkpt>\n")
            if len(lines) > 50000:
                fh.write("".join(lines))
                lines.clear()
        fh.write("".join(lines))
        fh.write("    </trkseg>\n  </trk>\n</gpx>\n")


def run_child(path: Path, reader: str) -> dict:
    repo = Path(__file__).resolve().parents[1]
    out = subprocess.run([sys.executable, "-c", _CHILD, str(path), reader], capture_output=True,
                         text=True, cwd=repo, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--fixes", type=int, nargs="+", default=[10_000, 100_000, 1_000_000])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--no-hdop", action="store_true", help="leave out <sat>/<hdop>")
    ap.add_argument("--readers", nargs="+", default=list(READERS), choices=READERS)
    args = ap.parse_args(argv)
    rows = []
    with tempfile.TemporaryDirectory(prefix="tf-bench-") as tmp:
        for n in args.fixes:
            path = Path(tmp) / f"run_{n}.gpx"
            write_gpx(path, n, hdop=not args.no_hdop)
            mb = path.stat().st_size / 1e6
            res = {}
            for reader in args.readers:
                runs = [run_child(path, reader) for _ in range(args.repeats)]
                if any(r["n"] != n for r in runs):
                    raise SystemExit(f"{reader} read {runs[0]['n']} fixes, expected {n}")
                res[reader] = (statistics.median(r["s"] for r in runs), max(r["maxrss_kb"] for r in runs) / 1024)
            for reader, (s, rss) in res.items():
                ratio_t = s / res["gpxpy"][0] if "gpxpy" in res else float("nan")
                ratio_m = rss / res["gpxpy"][1] if "gpxpy" in res else float("nan")
                rows.append((n, mb, reader, s, s / n * 1e6, rss, ratio_t, ratio_m))
            path.unlink()
    print(f"GPX ingest, median of {args.repeats} run(s), each in a fresh process (peak RSS = child ru_maxrss)")
    hdr = ("fixes", "file MB", "reader", "time s", "us/fix", "peak MB", "time/gpxpy", "mem/gpxpy")
    print("| " + " | ".join(hdr) + " |")
    print("|" + "|".join("---" for _ in hdr) + "|")
    for n, mb, reader, s, us, rss, rt, rm in rows:
        print(f"| {n:,} | {mb:.1f} | {reader} | {s:.3f} | {us:.2f} | {rss:.0f} | {rt:.3f} | {rm:.2f} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
