"""NMEA and CSV reader speed and peak memory.

    python benchmarks/bench_readers.py [--fixes 100000 1000000] [--repeats 3]

Cases (files written once into a temporary folder; an invented logger near 48.1 N 11.5 E):

* NMEA 0183 at 20 Hz, each epoch RMC + GGA + GSA + GSV (checksummed, CRLF), so half the
  sentences are ones the reader must classify and skip;
* CSV with ISO 8601 UTC times, height, speed in km/h and HDOP;
* CSV with UNIX epoch seconds and height.

Each run is a fresh Python process that reads the file's bytes and then times only the reader
call (``survey.readers.nmea.read_nmea`` / ``survey.readers.csvlog.read_csv``); its peak memory is
that process's VmHWM (Linux), so it includes the file's bytes and the interpreter (~30 MB).
Prints median time, microseconds per fix, MB/s and peak memory.
"""

from __future__ import annotations

import argparse
import functools
import json
import operator
import os
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

_CHILD = r"""
import json, sys, time
kind, path = sys.argv[1], sys.argv[2]
data = open(path, "rb").read()
if kind == "nmea":
    from survey.readers.nmea import read_nmea as reader
else:
    from survey.readers.csvlog import read_csv as reader
t0 = time.perf_counter()
n = len(reader(path, data))
dt = time.perf_counter() - t0
with open("/proc/self/status") as fh:
    hwm = next(int(l.split()[1]) for l in fh if l.startswith("VmHWM:"))
print(json.dumps({"s": dt, "n": n, "hwm_kb": hwm}))
"""


def _checksummed(body: str) -> str:
    """NMEA 0183 sentence: XOR of the bytes between '$' and '*', two hex digits."""
    return f"${body}*{functools.reduce(operator.xor, body.encode('ascii'), 0):02X}"


def nmea_text(n: int) -> str:
    out = []
    # 20 Hz from midnight keeps up to 1.7 million epochs within the one date the RMC sentences give
    for i in range(n):
        t = i / 20
        ts = f"{int(t // 3600):02d}{int(t // 60 % 60):02d}{t % 60:05.2f}"
        lat = f"{4807 + i * 1e-5:.5f}"  # minutes stay below 60 up to 5 million fixes
        out.append(_checksummed(f"GPRMC,{ts},A,{lat},N,01131.00000,E,12.0,0.0,010524,,,A"))
        out.append(_checksummed(f"GPGGA,{ts},{lat},N,01131.00000,E,1,08,0.9,545.4,M,46.9,M,,"))
        out.append(_checksummed("GPGSA,A,3,04,05,,09,12,,,24,,,,,2.5,1.3,2.1"))
        out.append(_checksummed("GPGSV,3,1,11,03,03,111,00,04,15,270,00,06,01,010,00,13,06,292,00"))
    return "\r\n".join(out) + "\r\n"


def csv_iso_text(n: int) -> str:
    rows = ["time,lat,lon,alt,speed_kmh,hdop"]
    for i in range(n):
        s = i / 10
        rows.append(
            f"2024-05-01T{12 + int(s // 3600) % 12:02d}:{int(s // 60) % 60:02d}:{s % 60:06.3f}Z,"
            f"{48 + i * 1e-6:.8f},{11.5 + i * 1e-6:.8f},{500 + i * 0.001:.3f},36.0,0.9"
        )
    return "\n".join(rows) + "\n"


def csv_epoch_text(n: int) -> str:
    rows = ["time,lat,lon,alt"]
    rows += [f"{1714564800 + i * 0.1:.1f},{48 + i * 1e-6:.8f},{11.5 + i * 1e-6:.8f},{500 + i * 0.001:.3f}" for i in range(n)]
    return "\n".join(rows) + "\n"


CASES = (
    ("NMEA RMC+GGA+GSA+GSV, 20 Hz", "nmea", ".nmea", nmea_text),
    ("CSV, ISO 8601 times", "csv", ".csv", csv_iso_text),
    ("CSV, epoch seconds", "csv", ".csv", csv_epoch_text),
)


def run_child(kind: str, path: Path) -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    out = subprocess.run([sys.executable, "-c", _CHILD, kind, str(path)], capture_output=True, text=True, cwd=ROOT, env=env)
    if out.returncode != 0:
        raise SystemExit(f"{path.name}: {out.stderr[-2000:]}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--fixes", type=int, nargs="+", default=[100_000, 1_000_000])
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)
    rows = []
    with tempfile.TemporaryDirectory(prefix="tf-readers-") as tmp:
        for n in args.fixes:
            for i, (name, kind, ext, make) in enumerate(CASES):
                path = Path(tmp) / f"case{i}_{n}{ext}"
                path.write_text(make(n), encoding="ascii", newline="")
                runs = [run_child(kind, path) for _ in range(args.repeats)]
                if any(r["n"] != n for r in runs):
                    raise SystemExit(f"{name}: read {runs[0]['n']} fixes, expected {n}")
                s = statistics.median(r["s"] for r in runs)
                mb = path.stat().st_size / 1e6
                rows.append((name, n, mb, s, s / n * 1e6, mb / s, max(r["hwm_kb"] for r in runs) / 1024))
                path.unlink()
    print(f"Reader speed, median of {args.repeats} run(s), each in a fresh process (peak = VmHWM)")
    hdr = ("case", "fixes", "file MB", "time s", "us/fix", "MB/s", "peak MB")
    print("| " + " | ".join(hdr) + " |")
    print("|" + "|".join("---" for _ in hdr) + "|")
    for name, n, mb, s, us, rate, peak in rows:
        print(f"| {name} | {n:,} | {mb:.1f} | {s:.3f} | {us:.2f} | {rate:.0f} | {peak:.0f} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
