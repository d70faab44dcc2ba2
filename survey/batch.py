"""Batch: the ``trackframe flag`` pipeline over many logs, gathered into one findings file.

Flow
----
``expand_paths`` turns the user's PATHS (files, folders, glob patterns) into a list of logs;
``run_batch`` runs ``run_one`` on every log, locally in a process pool or on a Dask
distributed cluster, and hands each ``LogResult`` to a callback as it completes (the progress
bar); ``write_batch`` writes the combined file atomically.

Work is sent, not data: a task is a log *path* plus the (small, picklable) ``BatchOptions``; the
worker reads the file itself and returns only the sections, a few counts and, for GeoJSON output,
the section lines. So a Dask worker must see the logs at the same absolute path as the machine
that starts the batch (a shared folder).

Each log runs exactly what ``trackframe flag`` runs: ``survey.pipeline.run_profile``, then
``survey.sections.all_sections`` with the log's own hand marks from its sidecar (unless marks are
off). A log that fails (any ``InputError``: unreadable, too few fixes, bad sidecar, ...) becomes a
failed ``LogResult`` carrying the one-line message, and the others go on.

Where logs run
--------------
* Locally (default): a ``ProcessPoolExecutor`` with one worker per core; workers are started
  fresh ("spawn") with one BLAS thread each (``WORKER_THREAD_ENV``), logs are handed out one
  per task, largest file first. ``jobs=1`` runs in this process.
* On a Dask distributed cluster (``dask_address``): one task per log, results gathered as they
  complete. To set one up: ``dask scheduler`` on a head node (it listens on tcp://HEAD:8786);
  ``dask worker tcp://HEAD:8786`` on every node, each with the same trackframe installed (with
  the ``dask[distributed]`` extra) and the logs on a shared folder mounted at the same absolute
  path as on the machine that runs ``trackframe batch ... --dask tcp://HEAD:8786``. Relative
  PATHS are sent as absolute paths. Dask's nanny already starts workers with one BLAS thread.

Combined findings file
----------------------
Every format has the flag export's section columns (``survey.export.SECTION_TABLE_COLUMNS``,
same order, same units) preceded by a ``log`` column naming the log as the user gave it
(or as the folder/glob expansion found it). Failed logs are listed too:

* CSV: the section table; each failed log is one row with ``kind`` = ``error`` and the message in
  ``note`` (every other section column empty).
* XLSX: sheet "sections" (the same rows as the CSV, error rows included), sheet "logs" (one row
  per log: status, fixes, stations, sections, checksum, frame, seconds, error) and sheet
  "run settings" (tool, limits, settings, counts).
* GeoJSON (RFC 7946): one LineString feature per section with ``log`` as its first property;
  the foreign member ``"trackframe"`` holds the run settings and ``"logs"``, a list with the
  same fields as the XLSX "logs" sheet (failed logs have ``status`` ``"failed"`` and ``error``).

Text cells of CSV and XLSX are neutralised against formula injection (``survey.export.neutralise``)
exactly as in the flag export.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import multiprocessing
import os
import sys
import time
import uuid
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from glob import glob
from pathlib import Path
from typing import IO, Callable, Iterable, Iterator, Sequence

from .atomic import atomic_open, check_output_path
from .design import CAUTION, Limits
from .errors import InputError
from .export import SECTION_TABLE_COLUMNS, STDOUT, RunInfo, export_format, neutralise, run_settings_rows, section_rows
from .sections import KIND_DESIGN, Section

#: Formats ``write_batch`` can produce.
BATCH_FORMATS = ("csv", "xlsx", "geojson")
#: First column of the combined section table.
LOG_COLUMN = "log"
#: ``kind`` of a row that reports a failed log.
KIND_ERROR = "error"
#: Columns of the per-log table (XLSX sheet "logs", GeoJSON ``trackframe.logs``).
LOG_TABLE_COLUMNS: tuple[tuple[str, str], ...] = (
    ("log", "the log as named"),
    ("status", "ok / failed"),
    ("fixes", "fixes after cleaning"),
    ("stations", "profile stations"),
    ("sections", "sections found (flagged + marked)"),
    ("input_sha256", "SHA-256 of the log bytes"),
    ("frame", "local frame of the run"),
    ("height_ref", "height reference of the profile"),
    ("seconds", "wall time of this log in its worker, s"),
    ("error", "why the log failed (one line)"),
)
SHEET_SECTIONS = "sections"
SHEET_LOGS = "logs"
SHEET_RUN = "run settings"


# ----------------------------------------------------------------------------------------------
# Records


@dataclass(frozen=True)
class BatchOptions:
    """What every worker needs besides the log path (small and picklable: it travels per task).

    Attributes
    ----------
    limits
        Thresholds for ``all_sections``.
    step_m
        Station spacing, m.
    log_kwargs
        Reading/frame keyword arguments for ``run_profile`` (``survey.commands.common.log_kwargs``).
    use_marks
        Add the hand-marked sections from each log's sidecar.
    geometry
        Also return each section's GeoJSON feature (needed only for GeoJSON output).
    """

    limits: Limits
    step_m: float = 1.0
    log_kwargs: dict = field(default_factory=dict)
    use_marks: bool = True
    geometry: bool = False


@dataclass(frozen=True)
class LogResult:
    """The outcome of one log.

    Attributes
    ----------
    log
        The log as the user (or the expansion) named it.
    ok
        False when the log failed; ``error`` then says why, in one line.
    sections
        Flagged and marked sections, sorted along the chainage.
    features
        GeoJSON features of ``sections`` (only when ``BatchOptions.geometry``).
    fixes, stations
        Fixes after cleaning and profile stations.
    input_sha256, frame, height_ref
        Provenance of the run.
    warnings
        Messages for the user (changed log, marks outside the profile, ...).
    seconds
        Wall time spent on this log by its worker, s.
    """

    log: str
    ok: bool
    error: str = ""
    sections: tuple[Section, ...] = ()
    features: tuple[dict, ...] = ()
    fixes: int = 0
    stations: int = 0
    input_sha256: str = ""
    frame: str = ""
    height_ref: str = ""
    warnings: tuple[str, ...] = ()
    seconds: float = 0.0


def failed(log: str, message: str, seconds: float = 0.0) -> LogResult:
    """A failed ``LogResult`` with a one-line message."""
    return LogResult(log=log, ok=False, error=" ".join(str(message).split()), seconds=seconds)


# ----------------------------------------------------------------------------------------------
# PATHS -> logs


def log_extensions() -> tuple[str, ...]:
    """File name endings a folder is searched for (the extensions ``read_log`` knows)."""
    from .readers import _EXTENSIONS  # the readers' own table: one place knows the extensions

    return tuple(sorted(_EXTENSIONS))


def _is_log_name(name: str) -> bool:
    low = name.lower()
    return not name.startswith(".") and low.endswith(log_extensions())


def _has_magic(text: str) -> bool:
    return any(c in text for c in "*?[")


def expand_paths(paths: Iterable[str], exclude: Iterable[str] = ()) -> tuple[list[str], list[LogResult]]:
    """Expand PATHS into log files, in the order given (each folder/pattern sorted by name).

    * an existing file is taken as it is, whatever its extension (the reader sniffs the format);
    * a folder gives its own log files (``log_extensions()``; not hidden files, not sub-folders);
    * a name that does not exist but has ``*``, ``?`` or ``[`` is a glob pattern (``**`` matches
      any depth of folders); folders it matches are expanded like folders.

    The same file named twice (by any route) runs once; files in ``exclude`` (e.g. the output
    file) are skipped. Returns ``(logs, failures)``: a missing file, an empty folder or a pattern
    matching nothing is a failure with its message, so the batch lists it and goes on.
    """
    skip = {os.path.realpath(p) for p in exclude}
    seen: set[str] = set()
    logs: list[str] = []
    failures: list[LogResult] = []

    def take(name: str) -> bool:
        real = os.path.realpath(name)
        if real in skip or real in seen:
            return False
        seen.add(real)
        logs.append(name)
        return True

    def folder(name: str) -> int:
        try:
            entries = sorted(os.scandir(name), key=lambda e: e.name)
        except OSError as exc:
            failures.append(failed(name, str(InputError(name, f"cannot list folder: {exc.strerror or exc}"))))
            return -1
        found = [os.path.join(name, e.name) for e in entries if _is_log_name(e.name) and e.is_file()]
        for f in found:
            take(f)
        return len(found)

    for item in paths:
        item = str(item)
        if os.path.isdir(item):
            if folder(item) == 0:
                failures.append(failed(item, str(InputError(item, f"folder holds no log files ({' '.join(log_extensions())})"))))
        elif os.path.exists(item):
            take(item)
        elif _has_magic(item):
            matches = sorted(glob(item, recursive=True))
            if not matches:
                failures.append(failed(item, str(InputError(item, "no file matches this pattern"))))
            for m in matches:
                if os.path.isdir(m):
                    folder(m)
                else:
                    take(m)
        else:
            failures.append(failed(item, str(InputError(item, "no such file"))))
    return logs, failures


# ----------------------------------------------------------------------------------------------
# One log (runs in the worker)


def run_one(path: str, options: BatchOptions, name: str | None = None) -> LogResult:
    """Run the flag pipeline on one log; never raises for a bad log.

    Parameters
    ----------
    path
        The file to read (absolute for remote workers).
    options
        See ``BatchOptions``.
    name
        How to name the log in the results (default ``path``).
    """
    from .findings import flag_log

    name = path if name is None else name
    t0 = time.perf_counter()
    try:
        found = flag_log(path, options.limits, options.step_m, options.use_marks, **options.log_kwargs)
        run, profile, sections = found.run, found.profile, found.sections
        sha, frame = found.input_sha256, found.frame_text
        warnings = [f"{name}: {w}" for w in found.warnings]
        features: tuple[dict, ...] = ()
        if options.geometry:
            from .export import feature_collection

            info = RunInfo(str(name), sha, frame, options.limits.as_dict())
            features = tuple(feature_collection(sections, profile, info)["features"])
        return LogResult(
            log=name,
            ok=True,
            sections=sections,
            features=features,
            fixes=len(run.track) if run.track is not None else 0,
            stations=len(profile),
            input_sha256=sha,
            frame=frame,
            height_ref=str(profile.height_ref),
            warnings=tuple(warnings),
            seconds=time.perf_counter() - t0,
        )
    except InputError as exc:
        msg = str(exc)
        if exc.path is None:
            msg = f"{name}: {msg}"
        return failed(name, msg, time.perf_counter() - t0)
    except MemoryError:
        return failed(name, f"{name}: not enough memory for this log", time.perf_counter() - t0)
    except Exception as exc:  # a defect on one log must not stop the fleet; say what it was
        return failed(name, f"{name}: internal error ({type(exc).__name__}: {exc})", time.perf_counter() - t0)


# ----------------------------------------------------------------------------------------------
# Running many logs


def default_jobs() -> int:
    """Worker processes by default: every core this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on every platform
        return max(1, os.cpu_count() or 1)


def run_batch(
    logs: Sequence[str],
    options: BatchOptions,
    jobs: int | None = None,
    dask_address=None,
    on_result: Callable[[LogResult], None] | None = None,
    dask_timeout_s: float = 20.0,
    mp_context=None,
) -> list[LogResult]:
    """Run ``run_one`` on every log and return the results in the order of ``logs``.

    Parameters
    ----------
    jobs
        Local worker processes (default ``default_jobs()``); 1 runs in this process.
    dask_address
        Scheduler address (e.g. ``"tcp://head:8786"``) or a ``dask.distributed`` cluster object:
        run on that cluster instead of locally (``jobs`` is then ignored).
    on_result
        Called with each result as soon as it is in (completion order), e.g. a progress bar.
    dask_timeout_s
        How long to try to reach the Dask scheduler before giving up, s.
    mp_context
        ``multiprocessing`` context for the local pool (default: "spawn").
    """
    done: dict[int, LogResult] = {}

    def record(i: int, res: LogResult) -> None:
        done[i] = res
        if on_result is not None:
            on_result(res)

    if not logs:
        return []
    if dask_address is not None:
        _run_dask(logs, options, dask_address, record, dask_timeout_s)
    else:
        _run_local(logs, options, default_jobs() if jobs is None else jobs, record, mp_context)
    return [done[i] for i in range(len(logs))]


#: Environment of local worker processes: one BLAS/OpenMP thread each. The workers already fill
#: the cores; threaded OpenBLAS on top made every log slower (its threads spin on the small
#: banded solves), see benchmarks/bench_scale.py. A value the user has set is kept.
WORKER_THREAD_ENV = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


@contextlib.contextmanager
def _worker_environment() -> Iterator[None]:
    """Set ``WORKER_THREAD_ENV`` (where unset) while worker processes start, then restore."""
    added = [k for k in WORKER_THREAD_ENV if k not in os.environ]
    for k in added:
        os.environ[k] = WORKER_THREAD_ENV[k]
    try:
        yield
    finally:
        for k in added:
            os.environ.pop(k, None)


def largest_first(logs: Sequence[str]) -> list[int]:
    """Indices of ``logs`` by file size, largest first (ties and unreadable files: given order).

    Handing the longest jobs out first keeps one worker from starting a big log just as the
    others run out of work (longest-processing-time-first scheduling; cost grows with size).
    """

    def size(i: int) -> int:
        try:
            return os.path.getsize(logs[i])
        except OSError:
            return 0

    return sorted(range(len(logs)), key=lambda i: -size(i))


def _run_local(logs: Sequence[str], options: BatchOptions, jobs: int, record, mp_context=None) -> None:
    if jobs < 1:
        raise InputError(None, f"--jobs must be at least 1, not {jobs}")
    if jobs == 1 or len(logs) == 1:
        for i, log in enumerate(logs):
            record(i, run_one(log, options))
        return
    # Workers are started fresh ("spawn"), so they load numpy with the thread settings above
    # (a forked child would inherit the parent's already-started BLAS threads) and share no
    # state with this process. One task per log (logs differ a lot in size, so no bigger
    # chunks); results are taken as they finish.
    ctx = mp_context or multiprocessing.get_context("spawn")
    with _worker_environment():
        pool = ProcessPoolExecutor(max_workers=min(jobs, len(logs)), mp_context=ctx)
        try:
            futures = {pool.submit(run_one, logs[i], options): i for i in largest_first(logs)}
            for fut in as_completed(futures):
                i = futures[fut]
                try:
                    res = fut.result()
                except BrokenProcessPool:
                    res = failed(logs[i], f"{logs[i]}: worker process stopped unexpectedly (killed? out of memory?)")
                except Exception as exc:  # e.g. a result that could not be sent back
                    res = failed(logs[i], f"{logs[i]}: worker error ({type(exc).__name__}: {exc})")
                record(i, res)
        except BaseException:
            pool.shutdown(wait=False, cancel_futures=True)
            raise
        pool.shutdown(wait=True)


def _run_dask(logs: Sequence[str], options: BatchOptions, address, record, timeout_s: float) -> None:
    try:
        from distributed import Client, as_completed as dask_completed
    except ImportError:
        raise InputError(None, "--dask needs the dask.distributed package: pip install 'dask[distributed]'") from None
    where = address if isinstance(address, str) else getattr(address, "scheduler_address", str(address))
    try:
        client = Client(address, timeout=f"{timeout_s}s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(str(where), f"cannot connect to the Dask scheduler ({type(exc).__name__}: {exc})") from None
    token = uuid.uuid4().hex[:12]
    with client:
        # Send work, not data: the path (absolute, as the workers see the shared folder) and the
        # options; the worker reads the file itself.
        order = largest_first(logs)
        futures = [
            client.submit(run_one, os.path.abspath(logs[i]), options, logs[i], key=f"trackframe-batch-{token}-{i}", pure=False)
            for i in order
        ]
        index = {f.key: i for i, f in zip(order, futures)}
        for fut in dask_completed(futures, loop=client.loop):
            i = index[fut.key]
            try:
                res = fut.result()
            except Exception as exc:  # worker died, task lost, result not deserialisable, ...
                res = failed(logs[i], f"{logs[i]}: Dask task failed ({type(exc).__name__}: {exc})")
            fut.release()
            record(i, res)


# ----------------------------------------------------------------------------------------------
# Progress on stderr


def _clock_text(seconds: float) -> str:
    s = int(round(seconds))
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


class Progress:
    """Counts done/failed/total and time left, written to a stream (stderr by default).

    On a terminal the status line is rewritten in place with ``\\r`` (failures and warnings are
    printed above it); otherwise every log gets one plain line. Time left is the mean time per
    finished log so far times the logs still to do (it already reflects the parallelism).
    """

    def __init__(self, total: int, stream: IO[str] | None = None, tty: bool | None = None, clock=time.monotonic):
        self.total = total
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)()) if tty is None else tty
        self.clock = clock
        self.start = clock()
        self.done = 0
        self.failed = 0
        self._run = 0  # logs that actually ran (not found-missing ones): the rate comes from these
        self._width = 0

    def time_left_s(self) -> float | None:
        """Estimated seconds left (None before the first log has run)."""
        if self._run == 0:
            return None
        return (self.clock() - self.start) / self._run * (self.total - self.done)

    def status(self) -> str:
        left = self.time_left_s()
        left_text = "time left unknown" if left is None else f"{_clock_text(left)} left"
        return f"{self.done}/{self.total} done, {self.failed} failed, {left_text}"

    def note(self, text: str) -> None:
        """Print a line (a warning) without breaking the status line."""
        if self.tty:
            self.stream.write("\r" + " " * self._width + "\r")
            self.stream.write(text + "\n")
            self._draw()
        else:
            self.stream.write(text + "\n")
        self.stream.flush()

    def update(self, res: LogResult, ran: bool = True) -> None:
        """Count one finished log (``ran`` False: it never ran, e.g. no such file)."""
        self.done += 1
        self._run += ran
        self.failed += not res.ok
        for w in res.warnings:
            self.note(f"trackframe: warning: {w}")
        if self.tty:
            if not res.ok:
                self.note(f"trackframe: failed: {res.error}")
            else:
                self._draw()
        else:
            what = f"{len(res.sections)} section(s)" if res.ok else f"FAILED: {res.error}"
            self.stream.write(f"[{self.status()}] {res.log}: {what}\n")
        self.stream.flush()

    def _draw(self) -> None:
        bar_w = 20
        filled = bar_w * self.done // max(self.total, 1)
        line = f"[{'#' * filled}{'.' * (bar_w - filled)}] {self.status()}"
        self.stream.write("\r" + line.ljust(self._width))
        self._width = len(line)

    def finish(self) -> None:
        if self.tty and self._width:
            self.stream.write("\n")
            self.stream.flush()
            self._width = 0


# ----------------------------------------------------------------------------------------------
# Combined findings


def batch_columns() -> list[str]:
    """Header of the combined section table: ``log`` then the flag export's section columns."""
    return [LOG_COLUMN] + [name for name, _ in SECTION_TABLE_COLUMNS]


def batch_rows(results: Sequence[LogResult], guard: bool = True) -> tuple[list[str], list[list]]:
    """(header, rows) of the combined section table; failed logs as ``kind = error`` rows."""
    header = batch_columns()
    kind_at, note_at = header.index("kind"), header.index("note")
    rows: list[list] = []
    for res in results:
        log = neutralise(res.log) if guard else res.log
        if res.ok:
            _, sec_rows = section_rows(res.sections, guard=guard)
            rows.extend([log, *r] for r in sec_rows)
        else:
            row = [log] + [None] * (len(header) - 1)
            row[kind_at] = KIND_ERROR
            row[note_at] = neutralise(res.error) if guard else res.error
            rows.append(row)
    return header, rows


def log_rows(results: Sequence[LogResult], guard: bool = True) -> tuple[list[str], list[list]]:
    """(header, rows) of the per-log table (``LOG_TABLE_COLUMNS``); None where not defined."""
    header = [name for name, _ in LOG_TABLE_COLUMNS]
    rows = []
    for r in results:
        row = [
            r.log,
            "ok" if r.ok else "failed",
            r.fixes if r.ok else None,
            r.stations if r.ok else None,
            len(r.sections) if r.ok else None,
            r.input_sha256 or None,
            r.frame or None,
            r.height_ref or None,
            round(r.seconds, 3),
            r.error or None,
        ]
        rows.append([neutralise(v) for v in row] if guard else row)
    return header, rows


def settings_rows(results: Sequence[LogResult], limits: Limits, settings: dict, guard: bool = True) -> list[list]:
    """(name, value) rows of the run settings sheet / GeoJSON member (the flag export's rows with
    the per-log provenance replaced by counts; see the "logs" table for each log)."""
    ok = sum(r.ok for r in results)
    run = RunInfo(
        input_path=f"{len(results)} logs (see {SHEET_LOGS!r})",
        input_sha256=f"per log (see {SHEET_LOGS!r})",
        frame="per log",
        limits=limits.as_dict(),
        settings=dict(settings),
    )
    sections = [s for r in results for s in r.sections]
    extra = [["logs", len(results)], ["logs_ok", ok], ["logs_failed", len(results) - ok]]
    return run_settings_rows(run, None, sections, guard=guard, extra=extra)


def check_batch_output(path: str, force: bool = False) -> str:
    """Format of a batch output path; ``InputError`` before any work when it cannot be used."""
    fmt = export_format(path)
    if fmt not in BATCH_FORMATS:
        raise InputError(path, f"batch writes .csv, .xlsx or .geojson, not {fmt}")
    if path != STDOUT:
        check_output_path(path, force)
    return fmt


def write_batch(
    path: str,
    results: Sequence[LogResult],
    limits: Limits,
    settings: dict | None = None,
    force: bool = False,
    stdout: IO[str] | None = None,
) -> str:
    """Write the combined findings (see the module doc for each format) atomically.

    Returns the format written. ``-`` writes the CSV to ``stdout``. Refuses an existing file
    unless ``force``; on any error nothing is left behind and the old file is untouched.
    """
    settings = dict(settings or {})
    fmt = check_batch_output(path, force)
    if path == STDOUT:
        buf = io.StringIO(newline="")
        _write_csv(buf, results)
        (stdout or sys.stdout).write(buf.getvalue())
        return fmt
    try:
        if fmt == "xlsx":
            with atomic_open(path, "wb") as fh:
                _write_xlsx(fh, results, limits, settings)
        else:
            with atomic_open(path, "w", encoding="utf-8", newline="") as fh:
                if fmt == "csv":
                    _write_csv(fh, results)
                else:
                    _write_geojson(fh, results, limits, settings)
    except OSError as exc:
        raise InputError(path, f"cannot write: {exc.strerror or exc}") from None
    return fmt


def _write_csv(fh: IO[str], results: Sequence[LogResult]) -> None:
    header, rows = batch_rows(results, guard=True)
    writer = csv.writer(fh, dialect="excel", lineterminator="\r\n")  # RFC 4180, as the flag CSV
    writer.writerow(header)
    writer.writerows(["" if v is None else v for v in row] for row in rows)


def _write_xlsx(fh: IO[bytes], results: Sequence[LogResult], limits: Limits, settings: dict) -> None:
    from openpyxl import Workbook
    from openpyxl.cell import WriteOnlyCell
    from openpyxl.styles import Font

    wb = Workbook(write_only=True)
    bold = Font(bold=True)

    def sheet(title: str, header: list[str], rows: Iterable[list]) -> None:
        ws = wb.create_sheet(title)
        ws.freeze_panes = "A2"
        cells = []
        for name in header:
            c = WriteOnlyCell(ws, value=name)
            c.font = bold
            cells.append(c)
        ws.append(cells)
        for row in rows:
            ws.append(_xlsx_cells(ws, row))

    sheet(SHEET_SECTIONS, *batch_rows(results, guard=True))
    sheet(SHEET_LOGS, *log_rows(results, guard=True))
    sheet(SHEET_RUN, ["setting", "value"], settings_rows(results, limits, settings, guard=True))
    wb.save(fh)


def _xlsx_cells(ws, row: list) -> list:
    """Cells as the flag workbook writes them (text forced to string cells, XML-safe)."""
    from .export.xlsx_out import _safe_cells  # wrapper: the flag writer's cell rules, one place

    return _safe_cells(ws, row)


def geojson_document(results: Sequence[LogResult], limits: Limits, settings: dict | None = None) -> dict:
    """The combined GeoJSON FeatureCollection as a dict (features need ``BatchOptions.geometry``)."""
    features = []
    for res in results:
        for feat in res.features:
            props = {LOG_COLUMN: res.log, "height_ref": res.height_ref, **feat.get("properties", {})}
            features.append({**feat, "id": f"{res.log}#{feat.get('id', '')}", "properties": props})
    meta = {k: v for k, v in settings_rows(results, limits, dict(settings or {}), guard=False)}
    header, rows = log_rows(results, guard=False)
    meta["logs"] = [dict(zip(header, row)) for row in rows]
    if limits.design_on or any(s.kind == KIND_DESIGN for r in results for s in r.sections):
        meta["caution"] = CAUTION
    return {"type": "FeatureCollection", "trackframe": meta, "features": features}


def _write_geojson(fh: IO[str], results: Sequence[LogResult], limits: Limits, settings: dict) -> None:
    fh.write(json.dumps(geojson_document(results, limits, settings), ensure_ascii=False, allow_nan=False))
    fh.write("\n")


def output_excludes(output: str) -> list[str]:
    """Files a batch must not read as logs: the output itself (it may sit in an input folder)."""
    return [] if output == STDOUT else [str(Path(output))]
