"""build_profile on awkward input, and the profile files."""

import numpy as np

from survey import synthetic as S
from survey.frame import LocalFrame
from survey.profile_build import build_profile
from survey.profile_export import write_csv
from survey.track import make_track

FRAME = LocalFrame.enu(46.5, 7.6, 800.0)  # invented site


def _build(track, **kw):
    e, n, u = FRAME.forward(track.lat_deg, track.lon_deg, track.height_m)
    return build_profile(track, np.column_stack([e, n, u]), FRAME, **kw)


def test_one_fix_gives_an_empty_profile_with_a_message():
    tr = make_track("one.csv", "csv", [0.0], [46.5], [7.6], [800.0], height_ref="ellipsoid")
    p = _build(tr)
    assert len(p) == 0 and p.messages


def test_identical_fixes_give_an_empty_profile_with_a_message():
    tr = make_track("same.csv", "csv", np.arange(20.0), [46.5] * 20, [7.6] * 20, [800.0] * 20, height_ref="ellipsoid")
    p = _build(tr)
    assert len(p) == 0 and any("skipped" in m for m in p.messages)


def test_stop_in_the_middle_does_not_blow_up_curvature():
    # In time, kappa = |v x a|/|v|^3 blows up at standstill (REFERENCES.md); stops must be masked.
    traj = S.sample_path(S.helix_curve(30.0, 0.0, 1.0), speed_mps=3.0, rate_hz=2.0, stops=[(90.0, 60.0)])
    f = S.add_gnss_error(traj, "dual", np.random.default_rng(1))
    p = _build(S.fixes_to_track(f, FRAME.inverse))
    assert np.nanmax(p.curvature_per_m) < 3.0 / 30.0
    assert abs(p.chainage_m[-1] - traj.length_m) < 0.02 * traj.length_m


def test_on_a_slow_noisy_walk_stations_at_a_stop_take_measured_geometry():
    # A phone at walking pace (1.2 m/s, 1 Hz) round a 30 m circle (closed form kappa = 1/30 per
    # metre) with eight one-minute stops. Its speed is below slow_sigmas x its 1-sigma almost
    # everywhere, so the stations at the stops' edges, barely moving, must still take the
    # geometry of a measured station: before, one at 0.05 m/s read kappa 4.0 per metre (a 25 cm
    # radius). Seed 3 puts two stations below 0.1 m/s.
    stops = [(40.0 + 50.0 * i, 60.0) for i in range(8)]
    traj = S.sample_path(S.helix_curve(30.0, 0.0, 2.0), speed_mps=1.2, rate_hz=1.0, stops=stops)
    p = _build(S.fixes_to_track(S.add_gnss_error(traj, "phone", np.random.default_rng(3)), FRAME.inverse))
    crawling = np.flatnonzero(p.speed_mps < 0.1)
    assert len(crawling) > 0
    for i in crawling:
        others = np.delete(p.curvature_per_m, i)
        assert np.any(others == p.curvature_per_m[i]), f"station {i} kept its own curvature"
    assert np.nanmax(p.curvature_per_m) < 0.5  # no radius below 2 m on a 30 m circle


def test_route_without_time_still_gives_geometry_but_no_speed():
    traj = S.helix(40.0, 3.0, speed_mps=5.0, rate_hz=1.0, turns=1.0)
    f = S.add_gnss_error(traj, "rtk", np.random.default_rng(2))
    p = _build(S.fixes_to_track(f, FRAME.inverse, with_time=False))
    assert np.all(np.isnan(p.speed_mps)) and np.all(np.isnan(p.time_s))
    core = (p.chainage_m > 30) & (p.chainage_m < traj.length_m - 30)
    # helix closed form kappa = a/(a^2+c^2) (do Carmo 1976)
    assert np.median(np.abs(p.curvature_per_m[core] * (40**2 + 9) / 40 - 1)) < 0.02


def test_csv_has_header_block_and_every_column(tmp_path):
    traj = S.helix(40.0, 3.0, speed_mps=5.0, rate_hz=2.0, turns=0.5)
    p = _build(S.fixes_to_track(S.add_gnss_error(traj, "rtk", np.random.default_rng(3)), FRAME.inverse))
    out = tmp_path / "p.csv"
    write_csv(p, out)
    text = out.read_text().splitlines()
    assert text[0].startswith("# trackframe")
    header = next(line for line in text if not line.startswith("#"))
    for col in ("chainage_m", "curvature_per_m", "torsion_sd_per_m", "lateral_accel_mps2"):
        assert col in header.split(",")
    assert not list(tmp_path.glob(".*part"))


def test_csv_numbers_round_trip_to_half_a_unit_of_their_last_decimal(tmp_path):
    # RFC 4180 CSV read back with Python's csv module; fixed-point cells must equal the profile's
    # values to within half a unit in the last written decimal (rounding, not truncation), and
    # undefined values must be empty cells.
    import csv

    from survey.profile_export import CSV_DECIMALS
    from survey.stations import PROFILE_COLUMNS

    traj = S.helix(40.0, 3.0, speed_mps=5.0, rate_hz=2.0, turns=0.5)
    p = _build(S.fixes_to_track(S.add_gnss_error(traj, "dual", np.random.default_rng(4)), FRAME.inverse))
    out = tmp_path / "p.csv"
    write_csv(p, out)
    rows = list(csv.reader(line for line in out.read_text().splitlines() if not line.startswith("#")))
    header, body = rows[0], rows[1:]
    assert header == [name for name, _ in PROFILE_COLUMNS] and len(body) == len(p)
    for j, name in enumerate(header):
        if name == "torsion_note":
            continue
        want = np.asarray(p.column(name), float)
        cells = [r[j] for r in body]
        empty = np.array([c == "" for c in cells])
        assert np.array_equal(empty, ~np.isfinite(want)), name
        got = np.array([float(c) for c, e in zip(cells, empty) if not e])
        tol = 0.5 * 10.0 ** -CSV_DECIMALS[name] * (1 + 1e-9) + 1e-12 * np.abs(want[~empty])
        assert np.all(np.abs(got - want[~empty]) <= tol), name


def test_a_jump_at_the_second_to_last_fix_does_not_shorten_the_chainage():
    # A 30 m multipath jump at a log's second-to-last fix used to survive both jump tests (the
    # end fixes have no window of their own) while seven good fixes before it were dropped;
    # the noise fit then took the jump for motion (here the profile came out 5.6 % long).
    # True length: the road's closed-form chainage between the first and last fix times.
    traj = S.road_alignment()
    f = S.add_gnss_error(traj, "dual", np.random.default_rng(6))
    f.enu_m[-2] += [30.0, -20.0, 0.0]
    p = _build(S.fixes_to_track(f, FRAME.inverse))
    true_length = float(np.ptp(np.interp(f.time_s[[0, -1]], traj.time_s, traj.chainage_m)))
    assert abs(p.settings["path_length_m"] / true_length - 1.0) < 0.005  # the chainage target
    assert p.settings["snap_psd_h_m2_s7"] < 1.0


def _drive(rate_hz):
    # a 40 m radius bend between straights, driven at 15 m/s (closed-form alignment)
    curve = S.alignment_curve([("tangent", 300.0, 0.0), ("spiral", 30.0, 1 / 40.0), ("arc", 120.0, 1 / 40.0),
                               ("spiral", 30.0, 0.0), ("tangent", 300.0, 0.0)])
    traj = S.sample_path(curve, speed_mps=15.0, rate_hz=rate_hz)
    return _build(S.fixes_to_track(S.add_gnss_error(traj, "dual", np.random.default_rng(3)), FRAME.inverse))


def test_a_bend_with_too_few_fixes_on_it_is_named_in_the_messages():
    # Fixes 75 m apart (5 s at 15 m/s) on a 40 m radius: a chord over the angle d/R is shorter
    # than its arc by about (d/R)^2/24 (closed form), 1 % already at R = 2 d; here R < d.
    p = _drive(0.2)
    said = [m for m in p.messages if "distance between the fixes" in m]
    assert len(said) == 1 and "too few fixes on those bends" in said[0]


def test_a_well_sampled_bend_gets_no_such_message():
    # 1 Hz: fixes 15 m apart on a 40 m radius, R > 2 d.
    p = _drive(1.0)
    assert not [m for m in p.messages if "distance between the fixes" in m]


def _switchbacks(grade, doppler=False):
    traj = S.switchbacks()  # 8 m hairpins at walking pace (survey.synthetic)
    f = S.add_gnss_error(traj, grade, np.random.default_rng(7))
    if doppler:
        f = S.add_doppler_velocity(f, traj, grade, np.random.default_rng(8))
    return _build(S.fixes_to_track(f, FRAME.inverse))


def _wander_notes(p):
    return [m for m in p.messages if "slow wander" in m]


def test_hairpins_tight_for_the_receivers_wander_are_named():
    # phone grade: wander 3 m, tau 60 s; turning a radian of an 8 m hairpin at 1.4 m/s takes
    # 5.7 s, over which the wander moves 3 sqrt(2 (1 - exp(-5.7/60))) = 1.3 m (its covariance,
    # closed form): 16 % of the radius, above the 5 % the note starts at
    said = _wander_notes(_switchbacks("phone"))
    assert len(said) == 1 and "radius reads large" in said[0]


def test_hairpins_on_dual_frequency_fixes_get_no_wander_note():
    # wander 0.25 m: 0.11 m over the same radian, 1.3 % of the radius
    assert not _wander_notes(_switchbacks("dual"))


def test_a_log_with_speed_and_course_gets_no_wander_note():
    # the receiver's Doppler velocity does not wander: the smoother measures the hairpins
    assert not _wander_notes(_switchbacks("phone", doppler=True))
