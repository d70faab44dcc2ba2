"""Run every benchmark in this folder, one after another, and print their tables.

    python benchmarks/run_all.py [--quick] [--only NAME ...]

Every ``bench_*.py`` here runs as its own process (heavy ones take minutes at 1M fixes; the
machine's cores are better left to one benchmark at a time). ``--quick`` passes small sizes to
the benchmarks known to take size options (a smoke run of a few minutes, not for the record).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent

#: Small sizes per benchmark for --quick (others run with their defaults).
QUICK = {
    "bench_scale.py": ["--sizes", "10000,100000", "--repeats", "1", "--batch-logs", "10"],
    "bench_ingest.py": ["--fixes", "10000", "100000", "--repeats", "1"],
    "bench_readers.py": ["--fixes", "100000", "--repeats", "1"],
    "bench_sections.py": ["--stations", "100000"],
    "bench_tui.py": ["--fixes", "100000"],
}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="small sizes (smoke run)")
    ap.add_argument("--only", nargs="+", metavar="NAME", help="e.g. bench_scale bench_readers")
    args = ap.parse_args(argv)
    scripts = sorted(HERE.glob("bench_*.py"))
    if args.only:
        wanted = {n if n.endswith(".py") else n + ".py" for n in args.only}
        scripts = [s for s in scripts if s.name in wanted]
    failed = []
    for script in scripts:
        extra = QUICK.get(script.name, []) if args.quick else []
        print(f"\n## {script.name} {' '.join(extra)}".rstrip(), flush=True)
        t0 = time.perf_counter()
        code = subprocess.call([sys.executable, str(script), *extra], cwd=HERE.parent)
        print(f"({script.name}: exit {code}, {time.perf_counter() - t0:.0f} s)", flush=True)
        if code:
            failed.append(script.name)
    if failed:
        print(f"\nfailed: {', '.join(failed)}")
    return 1 if failed else 0


if __name__ == "__main__":
    raise SystemExit(main())
