#!/usr/bin/env python3
"""Rebuild the bundled demo logs (deterministic: fixed seeds).

    python demo_tracks/make_demo.py            # writes into demo_tracks/
    python demo_tracks/make_demo.py OUT_DIR

The scenes are invented; the places and crews do not exist:

* ridge_trail_phone.gpx -- the Fernhollow trail crew walks the new Saddleback Ridge path with a
  phone (GPX 1.1, 1 Hz, metre-level error): tight switchbacks up the flank, a stop at the cairn,
  then the winding ridge.
* van_route_tunnel.nmea (+ van_route_tunnel_imu.csv) -- the Tey Valley survey van waits at the
  depot gate, then drives the Orrin bypass at 60 km/h with a dual-frequency receiver (NMEA GGA +
  RMC, 5 Hz) and a consumer MEMS IMU (100 Hz) through the short Carrow tunnel, where there are no
  fixes for about 20 s. Curves are superelevated. A few sentences are damaged, as in real logs.
* drone_mast_orbit.csv -- the Skylark inspection crew flies an RTK drone in a climbing orbit
  around the Tollan Hill mast (CSV, 10 Hz, centimetre-level error, ellipsoidal heights).

All geometry comes from survey.synthetic (closed-form curves) so the same code serves tests and
benchmarks.
"""

from __future__ import annotations

import sys
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from survey import synthetic as syn  # noqa: E402
from survey.frame import LocalFrame  # noqa: E402
from survey.imu.synth import MPU9250, imu_truth, make_motion, simulate_imu, superelevation_bank, write_imu_csv  # noqa: E402
from survey.logwrite import csv_text, gpx_text, nmea_text, write_text  # noqa: E402
from survey.track import HEIGHT_ELLIPSOID, HEIGHT_MSL  # noqa: E402


def _t0(text: str) -> float:
    return datetime.fromisoformat(text).replace(tzinfo=timezone.utc).timestamp()


def ridge_trail(out: Path) -> Path:
    rng = np.random.default_rng(2026_09_14)
    k = 1 / 8.0
    pieces = [("tangent", 30.0, 0.0)]
    for i in range(6):  # switchbacks of 8 m radius up the flank
        pieces += [("arc", np.pi * 8.0, k if i % 2 == 0 else -k), ("tangent", 45.0, 0.0)]
    pieces += [
        ("arc", 60.0, 1 / 60.0), ("tangent", 120.0, 0.0), ("arc", 90.0, -1 / 45.0),
        ("tangent", 80.0, 0.0), ("arc", 70.0, 1 / 25.0), ("tangent", 150.0, 0.0),
        ("arc", 110.0, -1 / 90.0), ("tangent", 100.0, 0.0),
    ]
    flank = 30.0 + 6 * (np.pi * 8.0 + 45.0)
    total = sum(p[1] for p in pieces)
    grades = [(flank, 0.12, 0.12), (80.0, 0.12, 0.02), (total - flank - 80.0, 0.02, -0.01)]
    curve = syn.alignment_curve(pieces, grades, start_heading_rad=np.radians(70.0))
    traj = syn.sample_path(curve, 1.25, 1.0, jitter=0.05, stops=[(flank + 40.0, 150.0)], rng=rng,
                           t0_s=_t0("2026-09-14T08:12:00"), name="Saddleback Ridge path")
    fixes = syn.add_outliers(syn.add_gnss_error(traj, "phone", rng, white_m=1.0, wander_m=2.0), 0.004, 25.0, rng)
    frame = LocalFrame.enu(61.71230, 9.34560, 1180.0)
    track = syn.fixes_to_track(fixes, frame.inverse, height_ref=HEIGHT_MSL, with_accuracy=False)
    path = out / "ridge_trail_phone.gpx"
    write_text(str(path), gpx_text(track, name="Saddleback Ridge path - Fernhollow trail crew"))
    return path


def van_route(out: Path) -> Path:
    rng = np.random.default_rng(2026_10_03)
    pieces = [
        ("tangent", 300.0, 0.0), ("spiral", 60.0, 1 / 250.0), ("arc", 220.0, 1 / 250.0),
        ("spiral", 60.0, 0.0), ("tangent", 400.0, 0.0),  # the tunnel lies on this straight
        ("spiral", 50.0, -1 / 180.0), ("arc", 160.0, -1 / 180.0), ("spiral", 50.0, 0.0),
        ("tangent", 250.0, 0.0), ("spiral", 40.0, 1 / 120.0), ("arc", 120.0, 1 / 120.0),
        ("spiral", 40.0, 0.0), ("tangent", 200.0, 0.0),
    ]
    total = sum(p[1] for p in pieces)
    grades = [(500.0, 0.03, 0.03), (250.0, 0.03, -0.02), (total - 750.0, -0.02, -0.02)]
    curve = syn.alignment_curve(pieces, grades, start_heading_rad=np.radians(-20.0))
    speed = 60 / 3.6
    t0 = _t0("2026-10-03T13:40:05")
    # The van waits 10 s at the depot gate, then pulls away; its IMU logs at 100 Hz. Curves are
    # superelevated (e = 15 m x curvature, at most 8 %).
    motion = make_motion(curve, speed, static_s=10.0, ramp_s=6.0,
                         bank=superelevation_bank(15.0, e_max=0.08), t0_s=t0)
    truth = imu_truth(motion, 100.0)
    imu, _ = simulate_imu(truth, MPU9250, rng)
    fix_times = t0 + np.arange(0.0, motion.duration_s, 0.2) + rng.uniform(-0.004, 0.004)
    fixes = syn.add_gnss_error(truth.trajectory(fix_times), "dual", rng)
    tunnel_start_s = 10.0 + 3.0 + (300 + 60 + 220 + 60 + 120) / speed
    fixes = syn.add_outage(fixes, tunnel_start_s, 20.0)
    frame = LocalFrame.enu(55.93210, -4.31780, 95.0)
    track = syn.fixes_to_track(fixes, frame.inverse, height_ref=HEIGHT_ELLIPSOID, with_accuracy=False)
    # Doppler speed and course over ground as the receiver reports them in RMC: the true
    # horizontal velocity plus 0.05 m/s white noise per axis (dual-frequency class, from memory);
    # no course below 0.5 m/s, where receivers leave the field empty (common practice)
    vel = truth.trajectory(fixes.time_s).velocity_mps[:, :2] + rng.normal(0.0, 0.05, (len(fixes.time_s), 2))
    speeds = np.hypot(vel[:, 0], vel[:, 1])
    course = np.where(speeds >= 0.5, np.degrees(np.arctan2(vel[:, 0], vel[:, 1])) % 360.0, np.nan)
    track = track.with_arrays(speed_mps=speeds, course_deg=course)
    text = nmea_text(track, geoid_separation_m=52.4)
    lines = text.split("\r\n")
    for i in (101, 503, 907):  # damage a few sentences the way a serial line does
        if i < len(lines) and len(lines[i]) > 20:
            lines[i] = lines[i][:15] + "#" + lines[i][16:]
    path = out / "van_route_tunnel.nmea"
    write_text(str(path), "\r\n".join(lines))
    write_imu_csv(str(out / "van_route_tunnel_imu.csv"), imu)
    return path


def drone_orbit(out: Path) -> Path:
    rng = np.random.default_rng(2026_11_20)
    radius, rise = 30.0, 1.5  # 1.5 m of climb per radian: 9.4 m per turn
    approach = syn.alignment_curve([("tangent", 60.0, 0.0)], [(60.0, 0.1, 0.1)],
                                   start_heading_rad=np.pi / 2, start=(radius, -60.0, 0.0))
    orbit = syn.helix_curve(radius, rise, 3.0, centre=(0.0, 0.0, 6.0))
    curve = syn.concat_curves([approach, orbit], name="mast orbit")
    traj = syn.sample_path(curve, 4.0, 10.0, jitter=0.01, rng=rng, t0_s=_t0("2026-11-20T10:05:00"),
                           name="Tollan Hill mast orbit")
    fixes = syn.add_gnss_error(traj, "rtk", rng)
    frame = LocalFrame.enu(57.10450, -2.51230, 310.0)
    track = syn.fixes_to_track(fixes, frame.inverse, height_ref=HEIGHT_ELLIPSOID)
    path = out / "drone_mast_orbit.csv"
    write_text(str(path), csv_text(track, height_column="ellipsoidal_height_m"))
    return path


def main(argv: list[str]) -> int:
    out = Path(argv[1]) if len(argv) > 1 else Path(__file__).resolve().parent
    out.mkdir(parents=True, exist_ok=True)
    for make in (ridge_trail, van_route, drone_orbit):
        print(f"wrote {make(out)}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
