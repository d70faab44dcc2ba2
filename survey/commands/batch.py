"""``trackframe batch PATHS... -o FINDINGS``: the ``flag`` pipeline over many logs, one findings file.

PATHS are log files, folders (their log files) or glob patterns. Every reading, limits and
detection option of ``trackframe flag`` applies to every log. Logs run in a local process pool
(``--jobs``, default every core) or on a Dask distributed cluster (``--dask ADDRESS``).

Exit status: 0 when every log succeeded, 1 when any log failed (each failure is listed on
stderr and in the findings file) or nothing could run, 2 for a usage error.
"""

from __future__ import annotations

import argparse
import sys
import textwrap

from ..errors import InputError
from .common import add_reading_arguments, log_kwargs
from .flag import add_flag_options, flag_epilog

# survey.batch (and through it the export and section code) is imported when the command runs,
# not when the CLI builds its parser: every other command starts faster for it.

def _jobs(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1: {text!r}")
    return value


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "batch",
        help="flag sections in many logs (files, folders, globs) into one findings file",
        description=textwrap.fill(
            "Run the flag pipeline on every log named by PATHS and write one combined findings "
            "file (.csv .xlsx .geojson, or - for CSV on stdout) whose first column names the log. "
            "A log that fails is listed with its error and the others go on. Exit status 0 if "
            "every log succeeded, 1 if any failed.",
            88,
        ),
        epilog=flag_epilog()
        + "\n\n"
        + textwrap.fill(
            "Running on a Dask cluster: start `dask scheduler` on a head node and `dask worker "
            "tcp://HEAD:8786` on each node (same trackframe installed, the logs on a shared path "
            "seen at the same absolute path), then run `trackframe batch ... --dask tcp://HEAD:8786`.",
            88,
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument(
        "paths",
        nargs="+",
        metavar="PATH",
        help="log file, folder (its .gpx .nmea .csv ... files) or quoted glob pattern such as 'logs/**/*.gpx'",
    )
    add_reading_arguments(p)
    groups = add_flag_options(p)
    groups["output"].add_argument(
        "-o", "--output", required=True, metavar="FILE", help="combined findings (.csv .xlsx .geojson) or - for CSV on stdout"
    )
    run_group = p.add_argument_group("running")
    where = run_group.add_mutually_exclusive_group()
    where.add_argument("-j", "--jobs", type=_jobs, metavar="N", help="local worker processes (default: one per core)")
    where.add_argument(
        "--dask",
        metavar="ADDRESS",
        help="run on an existing Dask distributed cluster, e.g. tcp://head:8786; the workers read the logs themselves",
    )
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from ..batch import BatchOptions, Progress, check_batch_output, default_jobs, expand_paths, run_batch, write_batch
    from ..export import STDOUT
    from .flag import limits_from_args

    output = args.output
    fmt = check_batch_output(output, args.force)  # fail before any work
    limits = limits_from_args(args)
    logs, missing = expand_paths(args.paths, exclude=[] if output == STDOUT else [output])
    if not logs:
        for m in missing:
            print(f"trackframe: failed: {m.error}", file=sys.stderr)
        raise InputError(None, "no logs to run (see above)")
    say = sys.stderr if output == STDOUT else sys.stdout
    options = BatchOptions(
        limits=limits, step_m=args.step, log_kwargs=log_kwargs(args), use_marks=not args.no_marks, geometry=fmt == "geojson"
    )
    progress = Progress(len(logs) + len(missing))
    for m in missing:
        progress.update(m, ran=False)
    try:
        results = run_batch(logs, options, jobs=args.jobs, dask_address=args.dask, on_result=progress.update)
    finally:
        progress.finish()
    results = missing + results if missing else results
    settings = {
        "preset": args.preset,
        "step_m": args.step,
        "gap_s": args.gap,
        "crs": args.crs,
        "marks": "ignored" if args.no_marks else "each log's sidecar",
        "runner": f"dask {args.dask}" if args.dask else f"{args.jobs or default_jobs()} local process(es)",
    }
    write_batch(output, results, limits, settings, force=args.force)
    _summary(say, results, limits, output)
    return 0 if all(r.ok for r in results) else 1


def _summary(fh, results, limits, output: str) -> None:
    from ..export import STDOUT
    from ..sections import KINDS

    ok = sum(r.ok for r in results)
    counts = {k: sum(1 for r in results for s in r.sections if s.kind == k) for k in KINDS}
    total = sum(counts.values())
    parts = ", ".join(f"{n} {k}" for k, n in counts.items() if n)
    dest = "stdout" if output == STDOUT else output
    print(
        f"{len(results)} log(s): {ok} ok, {len(results) - ok} failed; {total} section(s)"
        f"{' (' + parts + ')' if parts else ''} written to {dest}",
        file=fh,
    )
    if limits.design_on:
        print(
            f"design check: {limits.design_speed_kmh:g} km/h, e {limits.design_superelevation:g}, "
            f"f {limits.design_friction:g} -> minimum radius {limits.design_radius_m:.1f} m",
            file=fh,
        )
        from ..design import CAUTION

        print(CAUTION, file=fh)
