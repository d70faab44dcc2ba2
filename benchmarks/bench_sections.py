"""Section detection and findings export time on large closed-form road profiles.

    python benchmarks/bench_sections.py [--stations 100000 1000000] [--xlsx-max 200000]

The profile is a road of random straights and arcs (R 60-600 m, both sides) built by
tests/test_sections_support.road_profile, with noise on the curvature (sd 2e-4 1/m) and random
torsion so all three automatic kinds fire (limits: sharp 150 m, twist 0.03 1/m, design 80 km/h).
Prints stations, sections found, detection time and the time of ``write_findings`` per format
(XLSX only up to ``--xlsx-max`` stations: its profile sheet holds every station).
"""

from __future__ import annotations

import argparse
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from survey.design import Limits  # noqa: E402
from survey.export import RunInfo, write_findings  # noqa: E402
from survey.sections import detect_sections  # noqa: E402
from test_sections_support import road_profile  # noqa: E402

FORMATS = (".csv", ".geojson", ".gpx", ".xlsx")


def random_road(n: int, rng: np.random.Generator):
    pieces, total = [], 0
    while total < n - 1:
        length = min(int(rng.integers(50, 400)), n - 1 - total)
        radius = float(rng.choice([math.inf, 60, 120, 250, 600]))
        pieces.append((length, radius, int(rng.choice([-1, 1]))))
        total += length
    clean = road_profile(pieces, curvature_sd_per_m=2e-4)
    kappa = np.abs(clean.curvature_per_m + rng.normal(0, 2e-4, len(clean)))
    return road_profile(pieces, curvature_per_m=kappa, curvature_sd_per_m=2e-4, torsion_per_m=rng.normal(0, 0.01, len(clean)))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--stations", type=int, nargs="+", default=[100_000, 1_000_000])
    ap.add_argument("--xlsx-max", type=int, default=200_000)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(1)
    limits = Limits(sharp_radius_m=150, twist_per_m=0.03, design_speed_kmh=80)
    rows = []
    for n in args.stations:
        profile = random_road(n, rng)
        t0 = time.perf_counter()
        sections = detect_sections(profile, limits)
        detect_s = time.perf_counter() - t0
        run = RunInfo("bench.gpx", "0" * 64, profile.frame, limits.as_dict())
        times = {}
        with tempfile.TemporaryDirectory() as d:
            for ext in FORMATS:
                if ext == ".xlsx" and n > args.xlsx_max:
                    times[ext] = math.nan
                    continue
                t0 = time.perf_counter()
                write_findings(Path(d) / f"out{ext}", sections, profile, run)
                times[ext] = time.perf_counter() - t0
        rows.append((n, len(sections), detect_s, times))
    hdr = ("stations", "sections", "detect s", *(f"{ext[1:]} s" for ext in FORMATS))
    print("| " + " | ".join(hdr) + " |")
    print("|" + "|".join("---" for _ in hdr) + "|")
    for n, k, d, times in rows:
        cells = ["skipped" if math.isnan(times[e]) else f"{times[e]:.3f}" for e in FORMATS]
        print(f"| {n:,} | {k:,} | {d:.3f} | " + " | ".join(cells) + " |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
