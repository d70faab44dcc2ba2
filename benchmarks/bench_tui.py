"""Viewer benchmark: cursor-step cost, first screen, memory, on a 1,000,000-fix log.

    python benchmarks/bench_tui.py [--fixes 1000000] [--steps 200] [--profile truth|pipeline]
                                   [--size 120x40]

The log: an invented 1,000 km survey drive (tangents, clothoid spirals, arcs of 15-600 m radius
both ways, grade changes) from ``survey.synthetic`` (``survey_drive``), driven at 10 m/s and logged at 10 Hz, so
1,000,000 fixes give about 1,000,000 stations at the default 1 m step. Its Profile is built

* ``truth`` (default): directly from the closed-form geometry at the stations (what the viewer
  draws does not depend on how the Profile was computed, and this keeps the benchmark quick);
* ``pipeline``: by writing the fixes to a CSV log (``survey.logwrite``) and running the real
  ``survey.pipeline.run_profile`` on it (slow: the smoother runs over a million fixes).

Measured, each in this one process:

1. **step, direct**: median and 95th percentile wall time of one "cursor one station right" key
   handler (``TrackApp.action_step(1)``) plus the render of everything it changed: every line of
   the chart panel and the plan view (``render_line``) and the readout (``render``). Includes the
   window paging that happens when the cursor leaves the window.
2. **step, pilot**: median time of ``pilot.press("right")`` in ``App.run_test`` for our app minus
   the same for a trivial app (one Static, one binding that updates it). The pilot's press
   carries fixed waits of its own; the difference is what our app adds per key press, including
   Textual's compositor and screen update.
3. **first screen**: from the moment the Profile is ready (handed to the app) to the first
   completed paint of the main screen, measured in ``run_test`` (includes pyramids, section
   detection and the first render of every widget).
4. **memory**: tracemalloc peak of one whole viewer run in ``run_test`` (Textual itself, the
   view model, first screen and the steps; measured in a separate run, since tracing slows
   everything down), and the model's own arrays (``ViewModel.nbytes()``), both against
   ``Profile.nbytes()``.

Targets (issue 5): step <= 30 ms, first screen <= 3 s, memory within 2x of the geometry arrays
(i.e. what the viewer adds stays below 1x ``Profile.nbytes()``).
"""

from __future__ import annotations

import argparse
import asyncio
import gc
import statistics
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from survey import synthetic as syn  # noqa: E402
from survey.frame import LocalFrame  # noqa: E402
from survey.stations import TORSION_LOW_CURVATURE, TORSION_OK, Profile  # noqa: E402

SPEED_MPS = 10.0
RATE_HZ = 10.0


def _drive_block(length_m: float, rng, start, heading_rad: float, grade: float) -> tuple[syn.Curve, float]:
    """One ~``length_m`` stretch of the drive starting at ``start`` with the given heading and
    grade; returns the curve and its end grade."""
    pieces, total = syn.random_drive_pieces(
        length_m, rng, radii_m=(15.0, 40.0, 90.0, 200.0, 600.0), tangent_m=(150.0, 800.0), arc_turn_halfturns=(0.3, 1.2)
    )
    grades = []
    g, done = grade, 0.0
    while done < total:
        g1 = float(rng.uniform(-0.06, 0.06))
        grades.append((2000.0, g, g1))
        g, done = g1, done + 2000.0
    return syn.alignment_curve(pieces, grades, start_heading_rad=heading_rad, start=start), g


def survey_drive(length_m: float, seed: int = 5, block_m: float = 20_000.0) -> syn.Curve:
    """An invented drive of about ``length_m`` metres: tangent / clothoid / arc / clothoid
    groups with radii 15-600 m on alternating sides and a grade change every 2 km, built as
    ~20 km blocks joined end to end (each block starts at the previous end pose, so the path is
    continuous; blocks keep the piecewise evaluation cheap)."""
    rng = np.random.default_rng(seed)
    blocks = []
    start, heading, grade, total = (0.0, 0.0, 0.0), 0.3, 0.0, 0.0
    while total < length_m:
        curve, grade = _drive_block(min(block_m, length_m - total + 1.0), rng, start, heading, grade)
        r, d1, _, _ = curve.evaluate(np.array([curve.u_end]))
        start, heading = tuple(r[0]), float(np.arctan2(d1[0, 1], d1[0, 0]))
        blocks.append(curve)
        total += curve.u_end
    return syn.concat_curves(blocks, name="bench drive")


def truth_profile(traj: syn.Trajectory, frame: LocalFrame, step_m: float = 1.0) -> Profile:
    """A Profile at ``step_m`` stations straight from the closed-form geometry of ``traj``.

    Uncertainties are invented but plausible (2 % of the value plus a floor); torsion is NaN
    (reason: low curvature) where the curvature is below 1e-4 1/m, as a real estimator would
    report it.
    """
    s = np.arange(0.0, traj.length_m, step_m)
    truth = traj.truth_at_chainage(s)
    enu = truth["enu_m"]
    kappa = truth["curvature_per_m"]
    tau = truth["torsion_per_m"]
    plan_k = truth["plan_curvature_per_m"]
    n = len(s)
    d = np.gradient(enu, s, axis=0)
    tangent = d / np.linalg.norm(d, axis=1, keepdims=True)
    dd = np.gradient(tangent, s, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        normal = dd / np.linalg.norm(dd, axis=1, keepdims=True)
    binormal = np.cross(tangent, normal)
    low = ~(kappa > 1e-4)
    tau = np.where(low, np.nan, tau)
    reason = np.where(np.isfinite(tau), TORSION_OK, TORSION_LOW_CURVATURE).astype(np.int8)
    lat, lon, h = frame.inverse(enu[:, 0], enu[:, 1], enu[:, 2])
    t = np.interp(s, traj.chainage_m, traj.time_s)
    hplan = np.hypot(d[:, 0], d[:, 1])
    grade = 100.0 * d[:, 2] / hplan
    with np.errstate(divide="ignore"):
        radius = np.where(kappa > 0, 1.0 / kappa, np.inf)
        plan_r = np.where(plan_k != 0, 1.0 / plan_k, np.inf)
    return Profile(
        chainage_m=s,
        time_s=t,
        lat_deg=np.asarray(lat, float),
        lon_deg=np.asarray(lon, float),
        height_m=np.asarray(h, float),
        east_m=enu[:, 0].copy(),
        north_m=enu[:, 1].copy(),
        up_m=enu[:, 2].copy(),
        speed_mps=np.full(n, SPEED_MPS),
        grade_pct=grade,
        tangent=tangent,
        normal=normal,
        binormal=binormal,
        curvature_per_m=kappa,
        radius_m=radius,
        torsion_per_m=tau,
        curvature_sd_per_m=0.02 * kappa + 2e-4,
        torsion_sd_per_m=0.05 * np.abs(np.nan_to_num(tau)) + 5e-4,
        plan_curvature_per_m=plan_k,
        plan_radius_m=plan_r,
        vertical_curvature_per_m=np.gradient(grade / 100.0, s),
        lateral_accel_mps2=SPEED_MPS**2 * kappa,
        torsion_reason=reason,
        segment=np.zeros(n, np.int32),
        step_m=step_m,
        height_ref="ellipsoid",
        frame=frame.describe(),
    )


def make_profile(fixes: int, how: str, workdir: Path) -> tuple[Profile, str]:
    """(profile, log path) for a drive of ``fixes`` fixes."""
    length = fixes / RATE_HZ * SPEED_MPS
    curve = survey_drive(length)
    traj = syn.sample_path(curve, SPEED_MPS, RATE_HZ, t0_s=1_790_000_000.0, name="bench drive")
    traj = syn.Trajectory(**{**traj.__dict__, "time_s": traj.time_s[:fixes], "enu_m": traj.enu_m[:fixes],
                             "velocity_mps": traj.velocity_mps[:fixes], "chainage_m": traj.chainage_m[:fixes],
                             "curvature_per_m": traj.curvature_per_m[:fixes], "torsion_per_m": traj.torsion_per_m[:fixes],
                             "plan_curvature_per_m": traj.plan_curvature_per_m[:fixes],
                             "length_m": float(traj.chainage_m[:fixes][-1])})
    frame = LocalFrame.enu(47.2, 11.4, 600.0)
    log = workdir / "bench_drive.csv"
    if how == "pipeline":
        from survey.logwrite import csv_text, write_text
        from survey.pipeline import run_profile

        fx = syn.add_gnss_error(traj, "dual", np.random.default_rng(1))
        track = syn.fixes_to_track(fx, frame.inverse)
        write_text(str(log), csv_text(track))
        return run_profile(str(log)).profile, str(log)
    log.write_text("time,lat,lon\n0,47.2,11.4\n1,47.2001,11.4\n")  # stands in for the sidecar checksum
    return truth_profile(traj, frame), str(log)


async def _press_times(app, keys: int, size: tuple[int, int], ready) -> list[float]:
    out = []
    async with app.run_test(size=size) as pilot:
        for _ in range(2000):
            if ready(app):
                break
            await pilot.pause(0.01)
        await pilot.pause()
        for _ in range(keys):
            t0 = time.perf_counter()
            await pilot.press("right")
            out.append(time.perf_counter() - t0)
    return out


def trivial_app():
    from textual.app import App
    from textual.binding import Binding
    from textual.widgets import Static

    class Trivial(App):
        BINDINGS = [Binding("right", "step", "step")]

        def compose(self):
            self.k = 0
            yield Static("0", id="s")

        def action_step(self):
            self.k += 1
            self.query_one("#s", Static).update(str(self.k))

    return Trivial()


async def _first_screen(profile, log, size, limits):
    from tui.app import TrackApp

    app = TrackApp(log_path=log, profile=profile, limits=limits)
    async with app.run_test(size=size) as pilot:
        for _ in range(5000):
            if "first_screen_after_geometry_s" in app.timings:
                break
            await pilot.pause(0.005)
        await pilot.pause()
        return app.timings.get("first_screen_after_geometry_s", float("nan"))


def direct_steps(app, steps: int) -> list[float]:
    """Time action_step(1) plus the render of every line of what it changed."""
    from tui.widgets import ChartPanel, PlanView, Readout

    charts, plan, readout = app.query_one(ChartPanel), app.query_one(PlanView), app.query_one(Readout)
    times = []
    for _ in range(steps):
        t0 = time.perf_counter()
        app.action_step(1)
        charts.render_lines(charts.size.region)
        plan.render_lines(plan.size.region)
        readout.render()
        times.append(time.perf_counter() - t0)
    return times


async def _direct(profile, log, size, limits, steps, start_frac, modes=False):
    from tui.app import TrackApp

    app = TrackApp(log_path=log, profile=profile, limits=limits)
    async with app.run_test(size=size) as pilot:
        for _ in range(5000):
            if app.model is not None:
                break
            await pilot.pause(0.005)
        await pilot.pause()
        app.model.zoom(1 / 64)  # a zoomed window, so stepping also pages the window now and then
        app.model.goto(int(start_frac * app.model.n))
        app.model.zoom(1.0)
        await pilot.pause()
        times = direct_steps(app, steps)
        extra = {}
        if modes:
            m = app.model
            m.zoom(1e-9)  # fully zoomed in: fewer stations than columns, every step moves the cursor
            m.goto(int(0.2 * m.n))
            extra["zoomed"] = direct_steps(app, steps)
            paging = []
            m.zoom(64.0)
            for _ in range(max(steps // 10, 5)):  # put the cursor on the window's last station
                m.goto(m.i0 + m.span - 1)
                paging += direct_steps(app, 1)
            extra["paging"] = paging
        return times, app.model.nbytes(), extra


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--fixes", type=int, default=1_000_000)
    ap.add_argument("--steps", type=int, default=200)
    ap.add_argument("--presses", type=int, default=40)
    ap.add_argument("--profile", choices=("truth", "pipeline"), default="truth")
    ap.add_argument("--size", default="120x40")
    args = ap.parse_args(argv)
    size = tuple(int(v) for v in args.size.lower().split("x"))

    from survey.design import Limits

    limits = Limits(sharp_radius_m=50.0, twist_per_m=0.01)
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        profile, log = make_profile(args.fixes, args.profile, Path(tmp))
        t_profile = time.perf_counter() - t0
        geometry = profile.nbytes()
        print(f"profile: {len(profile):,} stations from {args.fixes:,} fixes ({args.profile}), "
              f"{geometry / 2**20:.1f} MiB of arrays, built in {t_profile:.1f} s", flush=True)

        firsts = [asyncio.run(_first_screen(profile, log, size, limits)) for _ in range(3)]
        first = statistics.median(firsts)
        direct, model_bytes, extra = asyncio.run(_direct(profile, log, size, limits, args.steps, 0.37, modes=True))
        gc.collect()
        tracemalloc.start()
        asyncio.run(_direct(profile, log, size, limits, args.steps, 0.61))
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        gc.collect()

        ours = asyncio.run(_press_times(_app(profile, log, limits), args.presses, size, lambda a: a.model is not None))
        base = asyncio.run(_press_times(trivial_app(), args.presses, size, lambda a: True))

    def ms(x):
        return f"{x * 1e3:.2f} ms"

    d_med = statistics.median(direct)
    d_p95 = float(np.percentile(direct, 95))
    p_ours, p_base = statistics.median(ours), statistics.median(base)
    rows = [
        ("step: key handler + render of what changed (direct), median", ms(d_med), "<= 30 ms", d_med <= 0.030),
        ("step: same, 95th percentile", ms(d_p95), "", None),
        ("step zoomed in (every step moves the cursor column), median", ms(statistics.median(extra["zoomed"])), "<= 30 ms",
         statistics.median(extra["zoomed"]) <= 0.030),
        ("step that pages the window (charts rebuilt), median", ms(statistics.median(extra["paging"])), "<= 30 ms",
         statistics.median(extra["paging"]) <= 0.030),
        ("step: pilot press, our app minus trivial app, median", ms(p_ours - p_base), "<= 30 ms", p_ours - p_base <= 0.030),
        ("  (pilot press medians: ours / trivial)", f"{ms(p_ours)} / {ms(p_base)}", "", None),
        ("first screen after geometry ready, median of 3", f"{first:.3f} s", "<= 3 s", first <= 3.0),
        ("view model arrays / Profile.nbytes()", f"{model_bytes / geometry:.2f}x ({model_bytes / 2**20:.1f} MiB)", "", None),
        ("tracemalloc peak of one viewer run (start, first screen, steps) / Profile.nbytes()", f"{peak / geometry:.2f}x ({peak / 2**20:.1f} MiB)", "< 1x (total < 2x)", peak / geometry < 1.0),
        ("total: (geometry + view peak) / geometry", f"{(geometry + peak) / geometry:.2f}x", "<= 2x", (geometry + peak) / geometry <= 2.0),
    ]
    print(f"\nterminal {size[0]}x{size[1]}, {len(profile):,} stations, {args.steps} direct steps, {args.presses} pilot presses")
    w = max(len(r[0]) for r in rows)
    print(f"{'measure'.ljust(w)}  {'value':>28}  {'target':>18}  ok")
    for name, value, target, ok in rows:
        print(f"{name.ljust(w)}  {value:>28}  {target:>18}  {'' if ok is None else ('yes' if ok else 'NO')}")
    return 0


def _app(profile, log, limits):
    from tui.app import TrackApp

    return TrackApp(log_path=log, profile=profile, limits=limits)


if __name__ == "__main__":
    sys.exit(main())
