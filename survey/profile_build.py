"""Cleaned track + local coordinates -> geometry at fixed chainage stations (``Profile``).

Steps (one-way):

1. Usable fixes: not ``suspect``, finite east/north. Each segment is smoothed on its own, so no
   curve is ever drawn across a gap between segments.
2. The "time" of the smoother is the fix time; a log without time uses the raw 3D chord chainage
   of its fixes instead (speed, time and lateral acceleration are then NaN). Fixes sharing one
   time are merged (their mean, with the variance of one fix: repeated fixes add no information).
3. Gross outliers (multipath jumps) are screened per segment before anything is fitted
   (``survey.smooth.screen_outliers``); Huber re-weighting in the smoother does the rest.
   When the log reports speed and true course over ground (NMEA RMC/VTG, CSV columns) and has
   time, each fix's horizontal velocity (``receiver_velocity``: turned into the frame's north,
   none below ``velocity_min_speed_mps``) is measured by the horizontal smoother beside its
   position, with 1-sigma ``velocity_sigma_mps`` per axis (``use_velocity`` False: positions
   only). A receiver's Doppler velocity does not carry the slow position wander, which
   otherwise takes part of every tight turn: measured on phone switchbacks of 8 m radius at
   1 Hz (seeds 0-5): arc radius error 29 % -> 8.6 % median, chainage error 2.8 % -> 0.7 %; phone
   helix kappa 4.3 % -> 0.9 % (``tests/test_geometry_doppler.py``, benchmarks/bench_accuracy.py).
   The noise model below is still fitted on the positions alone.
4. Noise by maximum likelihood (``survey.smooth.fit_noise``) on up to three stretches of at most
   ``fit_fixes`` fixes, horizontal and vertical separately: snap density, white variance and a
   Gauss-Markov wander (``wander_tau_s``). With per-fix accuracy, accuracy^2 (vertical:
   (``vertical_factor`` x accuracy)^2, heights are 1.5-1.7x noisier: REFERENCES.md, GNSS
   accuracy) bounds the TOTAL white + wander variance (``accuracy_cap``); it is not a white floor,
   which would oversmooth bends. Without stated accuracy the wander variance is bounded by
   ``wander_ratio_max`` x the fitted white variance (the data cannot identify it on a short log
   with tight turns; see ``survey.smooth``, "Wander without stated accuracy").
   On the same pieces the likelihood then decides whether the plan smoother uses the
   turn-aware prior at its first estimate's turn rate, and with which snap density
   (``survey.smooth.choose_turn_prior``, "Turn-aware plan prior"; ``turn_prior`` False: never).
5. 1-sigma of kappa, tau and the velocity from ``n_samples`` repeated-noise estimates (the
   smoother's sampling error, ``survey.smooth.noise_draws``) at the finest knots, deviations
   pooled over ``sd_pool_knots`` knots either side (``_uncertainty``). With a fused GNSS/IMU path
   (``smoothed=``) steps 1-4 are skipped and its own draws are used.
6. Chainage = integral of the smoothed 3D speed over time, where the mover is moving; the speed
   (here and in the speed column) is corrected for the smoother's own bias by twicing
   (``speed_bias="twice"``: 2|v(S y)| - |v(S S y)|, ``survey.smooth.resmooth_path``): a linear
   smoother cuts corners, most where the receiver's slow wander can take up part of a tight turn,
   which made the speed through switchbacks and the chainage short. Where the
   smoothed speed is below ``stop_sigmas`` times its own 1-sigma the mover is taken as stopped and
   the chainage does not advance, so no station falls inside a stop (kappa is per metre of path).
   Stations on the run into or out of a stop whose speed is below ``slow_sigmas`` x its 1-sigma
   (heading uncertain by more than ~1/20 rad) take the geometry of the nearest measured station;
   where that would be every station (a phone at walking pace), those below ``stop_sigmas`` x
   its 1-sigma do.
   Curvature, torsion (and their 1-sigma), plan and vertical curvature are per metre of
   that corrected chainage (``per_corrected_metre``): the smoothed path turns its tangent at
   about the true rate (a turn's heading change is kept, over the same time) while its speed
   is cut, so per metre of its own, shortened, path it comes out too sharp. Measured (accuracy
   benchmark, seeds 2024-2028): phone switchbacks radius 35 % -> 32 %, with Doppler 12.3 % ->
   9.1 %; false "sharp" sections on 8 m switchbacks (ride-trail preset, seeds 100-109, with and
   without stated accuracy) 15 -> 13 from positions, 1 -> 0 with Doppler.
   Chainage is continuous over the whole log: a segment starts where the previous one ended plus
   the straight distance across the gap, and its first station is the next multiple of the step.
7. Heights follow the local grade plane through the horizontal estimate
   (``survey.smooth.grade_plane_correction``; ``grade_window_scales`` vertical smoothing scales
   of window, 0 = off): a path in a tilted plane stays in it although heights are smoothed more
   strongly than plan position, so it shows no false torsion. With ``refit_off_plane`` the
   vertical noise is fitted again on the heights less their climb along that plane
   (``_off_plane``) and kept when it finds them smoother: the in-plane climb is signal the
   vertical smoother no longer has to follow, so it can remove more height noise (tilted
   dual-frequency loop, seed 2024: p95 |tau|/kappa 8.5 % before the grade plane, 3.9 % with it,
   0.4 % with the refit; the level loop 0.3 %).
8. Stations every ``step_m`` of chainage; geometry from the estimate (``survey.geometry``). Torsion
   is NaN with reason TORSION_LOW_CURVATURE where kappa < ``kappa_sigmas`` x its 1-sigma.
   Stations that bend with a radius under ``UNDERSAMPLED_RADIUS_PER_SPACING`` x the distance
   between the fixes around them (a sparse log, or a bend inside a short outage) are named in
   a message: no smoother can measure such a bend (``_undersampled_bends``). So are those
   that bend tightly for the receiver's slow wander, which from positions alone takes part of
   such a bend (``_wander_bound_bends``; not on a log with speed and course over ground).
"""

from __future__ import annotations

import numpy as np

from . import __version__
from .geometry import curvature_torsion, frenet
from .jump_shape import MAX_ACCEL_MPS2
from .smooth import NoiseModel, choose_turn_prior, fit_noise, robust_white_var, screen_outliers, smooth_stretch
from .stations import TORSION_LOW_CURVATURE, TORSION_NO_DATA, TORSION_OK, Profile
from .track import HEIGHT_NONE, Track

DEFAULTS = {
    "n_samples": 8,
    "sd_pool_knots": 4,
    "seed": 0,
    "wander_tau_s": 60.0,
    "vertical_factor": 1.7,
    "stop_sigmas": 2.0,
    "slow_sigmas": 20.0,
    "kappa_sigmas": 3.0,
    "accuracy_cap": 1.0,
    "fit_fixes": 2000,
    "min_fixes": 6,
    "robust_iterations": 3,
    "speed_bias": "twice",
    "wander_ratio_max": 4.0,
    "station_chunk": 100_000,
    "grade_window_scales": 4.0,
    "refit_off_plane": True,
    "turn_prior": True,
    "per_corrected_metre": True,
    "use_velocity": True,
    "velocity_sigma_mps": 0.15,
    "velocity_min_speed_mps": 0.5,
}


def build_profile(track: Track, enu_m: np.ndarray, frame, step_m: float = 1.0, smoothed=None, **settings) -> Profile:
    """Geometry at stations every ``step_m`` metres of chainage.

    Parameters
    ----------
    track
        The cleaned Track (time-sorted; ``segment``, optional ``accuracy_m`` and ``suspect``).
    enu_m
        (n, 3) east/north/up of every fix in ``frame`` (metres).
    frame
        The run's ``LocalFrame`` (``inverse`` and ``describe`` are used).
    step_m
        Station spacing along the chainage, metres (> 0).
    smoothed
        None: smooth the fixes here. A ``survey.imu.fuse.FusedPath``: take the path from the
        GNSS/IMU fusion instead -- no noise fit and no per-segment smoothing; its time span is one
        stretch (the IMU bridges gaps between segments), and the 1-sigma columns come from its
        ``draw``/``samples_at``. Stations inside its GNSS outages keep their geometry (the IMU
        measured it); the outages are listed in ``settings['imu_outages_s']`` and in
        ``messages`` (``outage_mask`` gives the per-station flag).
    settings
        Overrides of ``DEFAULTS`` (see the module docstring).

    Returns
    -------
    Profile with every field filled; an empty Profile with a message when nothing can be measured.
    """
    cfg = {**DEFAULTS, **{k: v for k, v in settings.items() if v is not None}}
    unknown = set(cfg) - set(DEFAULTS)
    if unknown:
        raise TypeError(f"unknown profile settings: {sorted(unknown)}")
    if not (np.isfinite(step_m) and step_m > 0):
        raise ValueError("step_m must be a positive number of metres")
    enu = np.asarray(enu_m, dtype=float)
    n = len(track)
    messages: list[str] = []
    has_time = track.has_time
    has_height = track.height_ref != HEIGHT_NONE and track.has_height
    if not has_height:
        enu = enu.copy()
        enu[:, 2] = np.nan
    else:
        enu = np.where(np.isfinite(track.height_m)[:, None] | (np.arange(3) < 2), enu, np.nan)
    ok = np.isfinite(enu[:, 0]) & np.isfinite(enu[:, 1])
    if has_time:
        ok &= np.isfinite(track.time_s)
    if track.suspect is not None:
        ok &= ~track.suspect
    acc = track.accuracy_m
    use_acc = acc is not None and np.isfinite(acc[ok]).any() and np.nanmin(acc[ok]) > 0
    if use_acc:
        a = np.where(np.isfinite(acc) & (acc > 0), acc, np.nanmedian(acc[ok]))
        base_h, base_v = a**2, (cfg["vertical_factor"] * a) ** 2
    else:
        base_h, base_v = np.ones(n), np.ones(n)

    if smoothed is not None:
        return _profile_from_fused(track, frame, step_m, smoothed, has_height, cfg, messages)

    # --- stretches: one per segment, with a strictly increasing parameter --------------------
    vel = receiver_velocity(track, frame, cfg) if has_time else None
    vel_of: dict[int, np.ndarray] = {}
    stretches = []
    seg_ids = track.segment[ok]
    idx_ok = np.flatnonzero(ok)
    for sid in _ordered_unique(seg_ids):
        idx = idx_ok[seg_ids == sid]
        t = track.time_s[idx] if has_time else _chord_chainage(enu[idx])
        data = enu[idx] if vel is None else np.column_stack([enu[idx], vel[idx]])
        t, y, bh, bv = _merge_repeats(t, data, base_h[idx], base_v[idx])
        if vel is not None:
            y, vel_of[int(sid)] = y[:, :3], y[:, 3:]
        if len(t) < cfg["min_fixes"] or np.ptp(y[:, 0]) + np.ptp(y[:, 1]) == 0 or t[-1] <= t[0]:
            messages.append(f"segment {sid}: {len(t)} usable distinct fixes, too few to measure; skipped")
            continue
        accel = MAX_ACCEL_MPS2 if has_time else None  # chainage as the parameter: no acceleration
        scr_h = screen_outliers(t, y[:, :2], max_accel=accel)
        scr_v = np.zeros(len(t), bool)
        if has_height:
            zz = np.flatnonzero(np.isfinite(y[:, 2]))
            if len(zz) >= cfg["min_fixes"]:
                scr_v[zz] = screen_outliers(t[zz], y[zz, 2:], max_accel=accel)
        stretches.append((int(sid), t, y, bh, bv, scr_h, scr_v | scr_h))
    if not stretches:
        messages.append("nothing to measure: no segment has enough distinct fixes that move")
        return empty_profile(track, frame, step_m, cfg, messages)

    # --- noise by maximum likelihood on a few stretches ---------------------------------------
    fit_h, fit_v, (turn_factor, turn_gain) = _fit_models(stretches, use_acc, has_height, cfg)
    model_h = fit_h.model
    model_v = fit_v.model if fit_v is not None else None
    if has_height and model_v is None:
        has_height = False
        messages.append("too few heights to smooth; heights ignored")

    # --- smooth each segment, place stations ---------------------------------------------------
    vel_var = float(cfg["velocity_sigma_mps"]) ** 2

    def smoothed_stretches():
        for sid, t, y, bh, bv, scr_h, scr_v in stretches:
            v = vel_of.get(sid)
            yield sid, t[0], t[-1], smooth_stretch(t, y, bh, bv, model_h, model_v if has_height else None, scr_h,
                                                   scr_v, robust_iterations=cfg["robust_iterations"],
                                                   twice=cfg["speed_bias"] == "twice",
                                                   grade_window_scales=cfg["grade_window_scales"] or None,
                                                   vel_en=v, vel_var=None if v is None else np.full(len(t), vel_var),
                                                   turn_q_factor=turn_factor)

    cols, knots, lengths = _place_stations(smoothed_stretches(), step_m, has_time, has_height, cfg, messages)
    if cols is None:
        return empty_profile(track, frame, step_m, cfg, messages)
    used = int(np.sum(np.isfinite(vel[ok]).all(axis=1))) if vel is not None else 0  # fixes with a velocity
    if has_time:
        messages.extend(_undersampled_bends(cols, stretches, cfg["kappa_sigmas"]))
        if used < 0.5 * np.count_nonzero(ok):  # the receiver's velocity, where most fixes have one, is not wandering
            messages.extend(_wander_bound_bends(cols, model_h, cfg["kappa_sigmas"]))
    settings_out = _settings(cfg, step_m, model_h, model_v if has_height else None, use_acc, has_time, knots)
    settings_out["plan_prior"] = ("constant jerk" if turn_factor is None else
                                  f"turn-aware at the estimated turn rate, snap density x {turn_factor:.4g} "
                                  f"(log likelihood +{turn_gain:.1f} over constant jerk)")
    if vel is not None:
        settings_out["receiver_velocity"] = (f"{used} fixes' speed and course over ground measured the "
                                             f"velocity, 1-sigma {cfg['velocity_sigma_mps']:g} m/s per axis")
        messages.append(f"speed and course over ground of {used} fixes used as velocity measurements")
    return _finish(track, frame, step_m, cols, has_height, settings_out, lengths, messages)


def _place_stations(items, step_m, has_time, has_height, cfg, messages):
    """Stations of every smoothed stretch ``(segment id, t_first, t_last, smoothed path)``, with
    continuous chainage; returns (columns or None, knot spacings, stretch lengths)."""
    rng = np.random.default_rng(cfg["seed"])
    parts = []
    s_offset = 0.0
    last_pos = None
    knots = []
    lengths: list[float] = []
    for sid, t_first, t_last, sm in items:
        t = np.array([t_first, t_last])
        knots.append([g.h for g in sm.groups])
        unc = _uncertainty(sm, t[0], t[-1], step_m, cfg, rng)
        k_stop = cfg["stop_sigmas"] if has_time else 0.0
        tg, sg, t_stop = _chainage_table(sm, t[0], t[-1], unc, k_stop)
        start = sm.at(np.array([t[0]]))[0, :, 0]
        if last_pos is not None:
            s_offset += float(np.linalg.norm(np.nan_to_num(start - last_pos)))
        s_abs = sg + s_offset
        first = np.ceil(s_abs[0] / step_m - 1e-9) * step_m + 0.0  # never -0.0
        chain = np.arange(first, s_abs[-1] + 1e-9, step_m)
        if len(chain) == 0:
            messages.append(f"segment {sid}: shorter than one station step; skipped")
            continue
        ts = np.interp(chain, s_abs, tg)
        parts.append(_stations(sm, ts, chain, sid, has_time, has_height, unc, t_stop, cfg))
        s_offset = float(s_abs[-1])
        lengths.append(float(sg[-1]))
        last_pos = sm.at(np.array([t[-1]]))[0, :, 0]
        rejected = int(np.sum(sm.weight_h == 0))
        if rejected:
            messages.append(f"segment {sid}: {rejected} fixes rejected as outliers")
    if not parts:
        return None, knots, lengths
    cols = parts[0] if len(parts) == 1 else {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    return cols, knots, lengths


def _finish(track, frame, step_m, cols, has_height, settings_out, lengths, messages) -> Profile:
    """Geodetic station positions and the Profile record."""
    lat, lon, h = frame.inverse(cols["east_m"], cols["north_m"], cols["up_m"] if has_height else np.zeros(len(cols["east_m"])))
    if not has_height:
        h = np.full(len(lat), np.nan)
        cols["up_m"] = np.full(len(lat), np.nan)
    settings_out["path_length_m"] = float(sum(lengths))
    return Profile(
        lat_deg=np.asarray(lat), lon_deg=np.asarray(lon), height_m=np.asarray(h),
        step_m=float(step_m), height_ref=track.height_ref, frame=frame.describe(),
        settings=settings_out, messages=tuple(messages), **cols,
    )


def _profile_from_fused(track, frame, step_m, fp, has_height, cfg, messages) -> Profile:
    """Stations along a GNSS/IMU fused path (``survey.imu.fuse.FusedPath``): one stretch over its
    whole time span; outages bridged by the IMU keep their geometry and are reported."""
    messages = list(messages) + [f"fusion: {m}" for m in fp.messages]
    t = np.asarray(fp.time_s, float)
    if len(t) < 2 or not t[-1] > t[0]:
        messages.append("fused path shorter than two samples; nothing to measure")
        return empty_profile(track, frame, step_m, cfg, messages)
    sid = int(track.segment[0]) if len(track) else 0
    cols, knots, lengths = _place_stations([(sid, t[0], t[-1], fp)], step_m, True, has_height, cfg, messages)
    if cols is None:
        return empty_profile(track, frame, step_m, cfg, messages)
    outages = tuple((float(a), float(b)) for a, b in fp.outages)
    inside = outage_mask(cols["time_s"], outages)
    if inside.any():
        s = cols["chainage_m"][inside]
        messages.append(f"{int(inside.sum())} stations ({s.min():.0f}-{s.max():.0f} m) lie in GNSS outages bridged "
                        f"by the IMU: geometry from the inertial path")
    settings_out = {
        "tool_version": __version__,
        "method": "GNSS/IMU fused path (survey.imu.fuse), no GNSS-only smoothing",
        "parameter": "time",
        "step_m": float(step_m),
        "chainage": "one stretch over the fused time span (the IMU bridges gaps)",
        "knot_spacing": f"{knots[0][0]:.4g}",
        "imu_outages_s": ";".join(f"{a:.3f}-{b:.3f}" for a, b in outages) or "none",
        "imu_outage_stations": int(inside.sum()),
        **{f"fusion_{k}": v for k, v in fp.settings.items()},
    }
    for k in ("n_samples", "sd_pool_knots", "seed", "stop_sigmas", "slow_sigmas", "kappa_sigmas"):
        settings_out[k] = cfg[k]
    return _finish(track, frame, step_m, cols, has_height, settings_out, lengths, messages)


def outage_mask(time_s: np.ndarray, outages) -> np.ndarray:
    """True for every station time strictly inside one of the ``(start_s, end_s)`` outages."""
    time_s = np.asarray(time_s, float)
    out = np.zeros(len(time_s), bool)
    for a, b in outages:  # one iteration per outage, not per station
        out |= (time_s > a) & (time_s < b)
    return out


def _ordered_unique(a: np.ndarray) -> np.ndarray:
    _, first = np.unique(a, return_index=True)
    return a[np.sort(first)]


def _chord_chainage(enu: np.ndarray) -> np.ndarray:
    """Cumulative raw 3D (2D without heights) distance between consecutive fixes, m."""
    d = np.diff(np.nan_to_num(enu), axis=0)
    return np.concatenate(([0.0], np.cumsum(np.linalg.norm(d, axis=1))))


def _merge_repeats(t, y, bh, bv):
    """Merge fixes with the same parameter value (mean position, variance of one fix)."""
    if len(t) < 2 or np.all(np.diff(t) > 0):
        return t, y, bh, bv
    order = np.argsort(t, kind="stable")
    t, y, bh, bv = t[order], y[order], bh[order], bv[order]
    tu, inv, cnt = np.unique(t, return_inverse=True, return_counts=True)
    cols = range(y.shape[1])
    ym = np.column_stack([np.bincount(inv, weights=np.nan_to_num(y[:, k]), minlength=len(tu)) for k in cols])
    fin = np.column_stack([np.bincount(inv, weights=np.isfinite(y[:, k]).astype(float), minlength=len(tu)) for k in cols])
    with np.errstate(invalid="ignore", divide="ignore"):
        ym = np.where(fin > 0, ym / fin, np.nan)
    first = np.zeros(len(tu), int)
    first[inv[::-1]] = np.arange(len(t))[::-1]
    return tu, ym, bh[first], bv[first]


def receiver_velocity(track: Track, frame, cfg: dict) -> np.ndarray | None:
    """(n, 2) horizontal velocity (east, north) in the frame, m/s, from the log's speed and true
    course over ground (``LocalFrame.ground_velocity``: meridian convergence and grid scale), NaN
    where either is missing or the speed is below ``velocity_min_speed_mps`` (a receiver's
    course is unreliable or frozen there, common practice); None when the log has neither, or
    ``use_velocity`` is off."""
    if not cfg["use_velocity"] or track.speed_mps is None or track.course_deg is None:
        return None
    speed = np.where(track.speed_mps >= cfg["velocity_min_speed_mps"], track.speed_mps, np.nan)
    if not np.isfinite(speed).any() or not np.isfinite(track.course_deg).any():
        return None
    ve, vn = frame.ground_velocity(track.lat_deg, track.lon_deg, speed, track.course_deg)
    return np.column_stack([ve, vn])


#: A bend is under-sampled where its radius is below this many times the distance along the
#: path between the two fixes around it: a chord spanning the angle d/R of an arc is shorter than the arc by
#: 1 - sin(x)/x with x = d/(2R), about (d/R)^2 / 24 (closed form), which reaches 1 % at
#: d/R = 0.49, i.e. R = 2.04 d. Fewer fixes on a bend than that and no smoother can tell its
#: radius: it reads too large, and the chainage through it too short.
UNDERSAMPLED_RADIUS_PER_SPACING = 2.0


def _undersampled_bends(cols: dict, stretches, kappa_sigmas: float) -> list[str]:
    """A message naming the stations that bend (curvature above ``kappa_sigmas`` x its
    1-sigma) with a radius below ``UNDERSAMPLED_RADIUS_PER_SPACING`` times the distance
    between the two fixes around them (logs with time; none if no station does), else
    nothing. The distance is the chainage between the two fix times (the receiver's noise
    would make the raw chord between two slow fixes metres long)."""
    spacing = np.full(len(cols["chainage_m"]), np.nan)
    for sid, t, *_ in stretches:
        at = np.flatnonzero(cols["segment"] == sid)
        if at.size < 2 or len(t) < 2:
            continue
        s_fix = np.interp(t, cols["time_s"][at], cols["chainage_m"][at])
        i = np.clip(np.searchsorted(t, cols["time_s"][at]) - 1, 0, len(t) - 2)
        spacing[at] = s_fix[i + 1] - s_fix[i]
    with np.errstate(invalid="ignore"):
        tight = cols["radius_m"] < UNDERSAMPLED_RADIUS_PER_SPACING * spacing
    return _bend_note(cols, kappa_sigmas, tight, lambda at: (
        f"bend with a radius under {UNDERSAMPLED_RADIUS_PER_SPACING:g}x the distance between the fixes around "
        f"them (up to {np.nanmax(spacing[at]):.0f} m): too few fixes on those bends to measure them; their "
        f"radius reads too large and the chainage through them too short"))


def _bend_note(cols: dict, kappa_sigmas: float, where: np.ndarray, says) -> list[str]:
    """One message naming the stations that bend (curvature above ``kappa_sigmas`` x its
    1-sigma) where ``where`` holds -- their count, their chainage span and ``says(mask)`` -- or
    none if no station does."""
    with np.errstate(invalid="ignore"):
        at = where & (cols["curvature_per_m"] > kappa_sigmas * cols["curvature_sd_per_m"])
    if not at.any():
        return []
    ch = cols["chainage_m"][at]
    return [f"{int(at.sum())} stations ({ch.min():.0f}-{ch.max():.0f} m) {says(at)}"]


#: A bend is wander-bound where the receiver's slow wander moves, while the mover turns through
#: one radian of it, by more than this share of its radius (``_wander_bound_bends``).
WANDER_RADIUS_SHARE = 0.05


def _wander_bound_bends(cols: dict, model_h: NoiseModel, kappa_sigmas: float) -> list[str]:
    """A message naming the stations that bend (curvature above ``kappa_sigmas`` x its 1-sigma)
    so tightly for the receiver's slow wander that the smoother gives part of the bend to it.

    Over the time T = R / v the mover takes to turn through one radian of a bend of radius R at
    speed v, a Gauss-Markov wander of per-axis variance g^2 and correlation time tau moves by
    d = sqrt(2 g^2 (1 - exp(-T / tau))) (the 1-sigma of the difference of two of its values T
    apart, from its covariance g^2 exp(-|T| / tau); closed form). Positions alone cannot tell
    such a move from the bend, and the smoother, whose prior charges a tight bend more than the
    wander's drift, gives part of the bend to the wander: the radius reads large. Measured
    (benchmarks/bench_accuracy.py, 30 seeds, radius against the truth at each station's time,
    with the wander less without it) against d / R on the arcs: 8 m hairpins at walking pace
    on phone-grade fixes, d / R = 0.16 and +13 points (23.6 % against 10.7 %; the chainage
    4.2 % short against 0.95 %, of which the wander's own drift at the log's two ends explains
    about 1 %, ``bench_accuracy.py``'s lenF); a phone-grade
    helix of 50 m radius at 10 m/s, 0.024 and +2.5 points; dual-frequency hairpins 0.013, a
    1 Hz phone road's 400 m arcs 0.005. Above ``WANDER_RADIUS_SHARE`` (a judgement, between
    the helix's 0.024 and the hairpins' 0.16) the note names them; none without a modelled
    wander. The caller leaves the note out on a log with speed and course over ground, which
    measures such bends (the receiver's velocity does not wander)."""
    g2, tau = model_h.wander_var_m2, model_h.wander_tau_s
    if not g2 > 0:
        return []
    with np.errstate(invalid="ignore", divide="ignore"):
        r = cols["radius_m"]
        share = np.sqrt(2.0 * g2 * -np.expm1(-r / cols["speed_mps"] / tau)) / r
        bound = share > WANDER_RADIUS_SHARE
    return _bend_note(cols, kappa_sigmas, bound, lambda at: (
        f"bend tightly for the receiver's slow wander (1-sigma {np.sqrt(g2):.2g} m), which moves up to "
        f"{np.nanmax(share[at]):.0%} of their radius while the mover turns a radian: from positions alone part "
        f"of such a bend is taken for wander, so the radius reads large and the chainage short (8 m hairpins, "
        f"phone-grade fixes: radius about +13 %, chainage about 3 % short); speed and course over ground in "
        f"the log would measure them"))


def _fit_models(stretches, use_acc, has_height, cfg):
    """Horizontal and vertical noise by maximum likelihood on at most three stretches (the middle
    ``fit_fixes`` fixes of the longest ones); screened outliers are left out of the fit."""
    nfit = cfg["fit_fixes"]
    biggest = sorted(stretches, key=lambda s: -len(s[1]))[:3]
    pieces_h, pieces_v, raw = [], [], []
    for _, t, y, bh, bv, scr_h, scr_v in biggest:
        a = max(0, len(t) // 2 - nfit // 2)
        sl = slice(a, a + nfit)
        pieces_h.append((t[sl], y[sl, :2], np.where(scr_h[sl], np.inf, bh[sl])))
        if has_height:
            zz = np.isfinite(y[sl, 2])
            if zz.sum() >= cfg["min_fixes"]:
                pieces_v.append((t[sl][zz], y[sl, 2:][zz], np.where(scr_v[sl], np.inf, bv[sl])[zz]))
                raw.append((t[sl], y[sl], bh[sl], bv[sl], scr_h[sl], scr_v[sl], zz))
    cap = cfg["accuracy_cap"] if use_acc else None
    tau = cfg["wander_tau_s"]

    def start(pieces, k):
        r0 = float(np.median([robust_white_var(np.where(np.isfinite(p[2]), p[1][:, k], np.nan)) for p in pieces]))
        return r0

    ratio = cfg["wander_ratio_max"] if cap is None else None
    fh = fit_noise(pieces_h, tau, start(pieces_h, 0), cap, ratio)
    fv = fit_noise(pieces_v, tau, start(pieces_v, 0), cap, ratio) if has_height and pieces_v else None
    if fv is not None and cfg["grade_window_scales"] and cfg["refit_off_plane"]:
        off = [_off_plane(piece, fh.model, fv.model, cfg) for piece in raw]
        if any(r is not None for r in off):  # some grade plane trusted: fit what is off it
            pieces_r = [(pv[0], (pv[1][:, 0] if r is None else r)[:, None], pv[2]) for pv, r in zip(pieces_v, off)]
            fr = fit_noise(pieces_r, tau, start(pieces_r, 0), cap, ratio, q_max=fv.model.snap_psd)
            # taking the in-plane climb out can only leave smoother heights; if it does not (the
            # grade fit is trusted only in parts of the piece), the plane did not describe them
            if fr.model.snap_psd < fv.model.snap_psd:
                fv = fr
    turn = choose_turn_prior(pieces_h, fh.model) if cfg["turn_prior"] else (None, 0.0)
    return fh, fv, turn


def _off_plane(piece, model_h, model_v, cfg) -> np.ndarray | None:
    """Heights of one fit piece less the climb along the local grade plane, at its fixes with a
    height: z_i - P(t_i), P(t) = integral of g(t) . v_h(t) dt (``survey.smooth.local_grade``
    through a first smooth with the raw-height noise). On a plane path this leaves the receiver
    error plus a constant, so the vertical noise is fitted on what the vertical smoother
    actually has to remove, not on in-plane bends it would otherwise have to follow; where no
    plane is trusted g = 0 and the heights are fitted as they are (None: no grade trusted)."""
    t, y, bh, bv, scr_h, scr_v, zz = piece
    sm = smooth_stretch(t, y, bh, bv, model_h, model_v, scr_h, scr_v, robust_iterations=0,
                        grade_window_scales=cfg["grade_window_scales"])
    gh = sm.groups[0]
    if gh.grade is None or not np.any(gh.grade):
        return None
    step = min(0.5 * gh.h, float(np.median(np.diff(t))))
    tg = np.linspace(t[0], t[-1], int(np.ceil((t[-1] - t[0]) / step)) + 1)
    rate = np.sum(gh.grade_at(tg) * gh.at(tg)[:, :2, 1], axis=1)
    climb = np.concatenate(([0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * np.diff(tg))))
    return y[zz, 2] - np.interp(t[zz], tg, climb)


def _uncertainty(sm, t_start, t_end, step_m, cfg, rng) -> dict:
    """1-sigma of kappa, tau and of the velocity from ``n_samples`` repeated-noise estimates
    (``Smoothed.draw``), on a grid of times spaced like the finest knots.

    At every grid time each draw gives a deviation from the estimate (kappa, tau, velocity).
    The error of the smoother is correlated over its own scale (two knot intervals), so nearby
    grid times add little new information; the squared deviations (kappa, velocity) and the
    median absolute torsion deviation (heavy-tailed where kappa is small; / 0.6745 for a
    Gaussian sigma) are therefore averaged over a moving window of ``sd_pool_knots`` grid points
    on either side -- about two smoothing scales -- which pools several independent error
    realisations per draw. A few draws then give a stable 1-sigma and the cost stays a small
    multiple of one solve (``benchmarks/bench_profile.py``). Drawn a few samples at a time so
    memory stays bounded on long logs."""
    from scipy.ndimage import correlate1d

    fine = min(sm.groups, key=lambda g: g.h)
    if getattr(fine, "states", None) is not None:  # the finest knots themselves: no interpolation
        te = fine.t0 + fine.h * np.arange(len(fine.states))
    else:
        te = np.linspace(t_start, t_end, max(int(np.ceil((t_end - t_start) / fine.h)) + 1, 2))
    m = len(te)
    ns = int(cfg["n_samples"])
    est = sm.at(te)
    k0, t0 = curvature_torsion(est[:, :, 1], est[:, :, 2], est[:, :, 3])
    t0 = np.nan_to_num(t0)
    dk2 = np.zeros(m)
    dv2 = np.zeros(m)
    dtau = np.empty((ns, m))
    block = 2
    for a in range(0, ns, block):
        b = min(ns, a + block)
        smp = sm.samples_at(sm.draw(b - a, rng), te)
        kappa, tau = curvature_torsion(smp[..., 1], smp[..., 2], smp[..., 3])
        dk2 += np.sum((kappa - k0) ** 2, axis=0)
        dtau[a:b] = np.abs(np.nan_to_num(tau) - t0)
        dv2 += np.sum((smp[..., 1] - est[None, :, :, 1]) ** 2, axis=(0, 2))
        del smp, kappa, tau
    size = 2 * int(cfg["sd_pool_knots"]) + 1

    def pool(x):
        # a direct windowed mean (each output its own sum): a running sum would carry the
        # rounding of a huge value (kappa near a stop) into later windows, even below zero
        return correlate1d(x, np.full(size, 1.0 / size), mode="nearest") if size > 1 and len(x) > 1 else x

    return {
        "t": te,
        "kappa_sd": np.sqrt(pool(dk2 / ns)),
        "tau_sd": pool(np.median(dtau, axis=0)) / 0.6745,
        "speed_sd": np.sqrt(pool(dv2 / ns)),
    }


def _chainage_table(sm, t_start, t_end, unc, k_stop):
    """(t, s, stop times): chainage by the trapezoid rule on the smoothed 3D speed, on a grid of
    half the finest knot interval (the speed is a smooth polynomial between knots, so the error
    is far below a station step). Where the speed is not significantly above zero (below
    ``k_stop`` times its 1-sigma, from the repeated-noise estimates) the mover is taken as
    stopped and the chainage does not advance: kappa is per metre of path and is never
    evaluated in a stop."""
    h = min(g.h for g in sm.groups)
    ng = int(np.ceil(2.0 * (t_end - t_start) / h)) + 1
    tg = np.linspace(t_start, t_end, ng)
    speed = np.linalg.norm(sm.at(tg)[:, :, 1], axis=1)
    s2 = sm.at_twice(tg) if hasattr(sm, "at_twice") else None
    if s2 is not None:  # twicing: speed - estimated smoothing bias (|S f| - |f| ~ |S S y| - |S y|)
        bias = np.linalg.norm(s2[:, :, 1], axis=1) - speed
        unc["speed_bias_t"], unc["speed_bias"] = tg, bias  # stations interpolate it (cheap)
        speed = np.maximum(speed - bias, 0.0)
    v_min = k_stop * np.interp(tg, unc["t"], unc["speed_sd"])
    stopped = speed <= v_min
    speed = np.where(stopped, 0.0, speed)
    s = np.concatenate(([0.0], np.cumsum(0.5 * (speed[1:] + speed[:-1]) * np.diff(tg))))
    keep = np.concatenate(([True], np.diff(s) > 0))
    return tg[keep], s[keep], tg[stopped]


def _stations(sm, ts, chain, sid, has_time, has_height, unc, t_stop, cfg) -> dict:
    """All per-station arrays of one segment, computed ``station_chunk`` stations at a time into
    preallocated columns (bounded temporaries on long logs)."""
    step = int(cfg["station_chunk"])
    out: dict = {}
    for a in range(0, len(ts), step):
        part = _station_chunk(sm, ts[a : a + step], chain[a : a + step], sid, has_time, has_height, unc, cfg)
        if not out:
            out = {k: np.empty((len(ts),) + v.shape[1:], v.dtype) for k, v in part.items()}
        for k, v in part.items():
            out[k][a : a + step] = v
    if has_time:
        sd = np.interp(ts, unc["t"], unc["speed_sd"])
        for sigmas in (cfg["slow_sigmas"], cfg["stop_sigmas"]):
            # a slow, noisy log (a phone at walking pace) can be below slow_sigmas x its
            # 1-sigma everywhere: then at least the stations not significantly moving
            # (stop_sigmas, as the chainage's stops) take the nearest measured geometry
            slow = _near_stops(ts, out["speed_mps"] < sigmas * sd, t_stop)
            if not slow.all():
                break
        if slow.any() and not slow.all():
            _hold_geometry(out, slow)
    return out


def _station_chunk(sm, ts, chain, sid, has_time, has_height, unc, cfg) -> dict:
    st = sm.at(ts)
    g = frenet(st[:, :, 1], st[:, :, 2], st[:, :, 3])
    n = len(ts)
    k_sd = np.interp(ts, unc["t"], unc["kappa_sd"])
    t_sd = np.interp(ts, unc["t"], unc["tau_sd"])
    if "speed_bias" in unc:  # speed less its estimated smoothing bias, as in the chainage
        raw = g["speed"]
        g["speed"] = np.maximum(raw - np.interp(ts, unc["speed_bias_t"], unc["speed_bias"]), 0.0)
        if cfg["per_corrected_metre"]:
            with np.errstate(divide="ignore", invalid="ignore"):
                per_m = np.where(g["speed"] > 0, raw / g["speed"], 1.0)
            for key in ("curvature_per_m", "torsion_per_m", "plan_curvature_per_m", "vertical_curvature_per_m"):
                g[key] = g[key] * per_m
            k_sd = k_sd * per_m
            t_sd = t_sd * per_m
    kappa = g["curvature_per_m"]
    tau = g["torsion_per_m"]
    significant = kappa > cfg["kappa_sigmas"] * k_sd
    reason = np.full(n, TORSION_OK, np.int8)
    reason[~significant] = TORSION_LOW_CURVATURE
    if not has_height:
        reason[:] = TORSION_NO_DATA
    tau = np.where(reason == TORSION_OK, tau, np.nan)
    t_sd = np.where(reason == TORSION_OK, t_sd, np.nan)
    normal = np.where(significant[:, None], g["normal"], np.nan)
    binormal = np.where(significant[:, None], g["binormal"], np.nan)
    speed = g["speed"] if has_time else np.full(n, np.nan)
    with np.errstate(divide="ignore"):
        radius = 1.0 / kappa
        plan = g["plan_curvature_per_m"]
        plan_radius = 1.0 / plan
    nan = np.full(n, np.nan)
    out = {
        "chainage_m": chain,
        "time_s": ts if has_time else nan.copy(),
        "east_m": st[:, 0, 0],
        "north_m": st[:, 1, 0],
        "up_m": st[:, 2, 0],
        "speed_mps": speed,
        "grade_pct": 100.0 * g["grade"] if has_height else nan.copy(),
        "tangent": g["tangent"],
        "normal": normal,
        "binormal": binormal,
        "curvature_per_m": kappa,
        "radius_m": radius,
        "torsion_per_m": tau,
        "curvature_sd_per_m": k_sd,
        "torsion_sd_per_m": t_sd,
        "plan_curvature_per_m": plan,
        "plan_radius_m": plan_radius,
        "vertical_curvature_per_m": g["vertical_curvature_per_m"] if has_height else nan.copy(),
        "lateral_accel_mps2": speed**2 * kappa,
        "torsion_reason": reason,
        "segment": np.full(n, sid, np.int32),
    }
    return out


def _near_stops(ts: np.ndarray, slow: np.ndarray, t_stop: np.ndarray) -> np.ndarray:
    """Keep only the runs of slow stations that run into a stop (a time in ``t_stop`` between the
    station before the run and the one after it): slowing down to a standstill, not a steady
    crawl whose heading is simply less precise."""
    if not slow.any() or len(t_stop) == 0:
        return np.zeros_like(slow)
    edges = np.diff(np.r_[0, slow.astype(np.int8), 0])
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1
    lo = ts[np.maximum(starts - 1, 0)]
    hi = ts[np.minimum(ends + 1, len(ts) - 1)]
    hits = np.searchsorted(t_stop, hi, side="right") - np.searchsorted(t_stop, lo, side="left") > 0
    out = np.zeros_like(slow)
    for a, b in zip(starts[hits], ends[hits]):  # one iteration per stop, not per station
        out[a : b + 1] = True
    return out


_GEOMETRY_KEYS = ("tangent", "normal", "binormal", "curvature_per_m", "radius_m", "torsion_per_m",
                  "curvature_sd_per_m", "torsion_sd_per_m", "plan_curvature_per_m", "plan_radius_m",
                  "vertical_curvature_per_m", "grade_pct", "torsion_reason")


def _hold_geometry(cols: dict, slow: np.ndarray) -> None:
    """Give stations where the mover is nearly stopped the geometry of the nearest station where
    it is not (in place). Near a standstill the direction of travel is set by receiver noise
    (kappa = |v x a|/|v|^3 blows up, REFERENCES.md), so the shape there is not measured; the few
    stations in such a stretch (the chainage hardly advances) carry the neighbouring, measured
    geometry instead of noise."""
    good = np.flatnonzero(~slow)
    bad = np.flatnonzero(slow)
    right = np.clip(np.searchsorted(good, bad), 0, len(good) - 1)
    left = np.clip(right - 1, 0, len(good) - 1)
    s = cols["chainage_m"]
    use_left = np.abs(s[good[left]] - s[bad]) <= np.abs(s[good[right]] - s[bad])
    src = np.where(use_left, good[left], good[right])
    for k in _GEOMETRY_KEYS:
        cols[k][bad] = cols[k][src]
    cols["lateral_accel_mps2"][bad] = cols["speed_mps"][bad] ** 2 * cols["curvature_per_m"][bad]


def _settings(cfg, step_m, model_h: NoiseModel, model_v: NoiseModel | None, use_acc, has_time, knots) -> dict:
    out = {
        "tool_version": __version__,
        "method": "banded smoother (constant-jerk or turn-aware prior), noise by maximum likelihood",
        "parameter": "time" if has_time else "raw chainage (log has no time)",
        "step_m": float(step_m),
        "measurement_noise": ("white + Gauss-Markov wander by ML, total bounded by accuracy_cap x stated accuracy^2"
                              if use_acc else "white + Gauss-Markov wander by ML, wander <= wander_ratio_max x white"),
        "snap_psd_h_m2_s7": model_h.snap_psd,
        "var_scale_h": model_h.var_scale,
        "wander_var_h_m2": model_h.wander_var_m2,
        "chainage": "continuous across segments (straight distance across gaps); no stations in gaps",
        "knot_spacing": ";".join(",".join(f"{h:.4g}" for h in k) for k in knots),
    }
    if model_v is not None:
        out.update(snap_psd_v_m2_s7=model_v.snap_psd, var_scale_v=model_v.var_scale,
                   wander_var_v_m2=model_v.wander_var_m2)
    for k in ("n_samples", "sd_pool_knots", "seed", "wander_tau_s", "vertical_factor", "stop_sigmas", "slow_sigmas", "kappa_sigmas", "accuracy_cap", "robust_iterations", "speed_bias", "wander_ratio_max", "grade_window_scales", "turn_prior", "per_corrected_metre"):
        out[k] = cfg[k]
    return out


def empty_profile(track: Track, frame, step_m: float, cfg: dict, messages: list[str]) -> Profile:
    """A valid Profile with no stations, carrying the reason in ``messages``."""
    e = np.empty(0)
    v3 = np.empty((0, 3))
    return Profile(
        chainage_m=e, time_s=e, lat_deg=e, lon_deg=e, height_m=e, east_m=e, north_m=e, up_m=e,
        speed_mps=e, grade_pct=e, tangent=v3, normal=v3, binormal=v3, curvature_per_m=e, radius_m=e,
        torsion_per_m=e, curvature_sd_per_m=e, torsion_sd_per_m=e, plan_curvature_per_m=e,
        plan_radius_m=e, vertical_curvature_per_m=e, lateral_accel_mps2=e,
        torsion_reason=np.empty(0, np.int8), segment=np.empty(0, np.int32), step_m=float(step_m),
        height_ref=track.height_ref, frame=frame.describe() if frame is not None else "",
        settings={"tool_version": __version__, "step_m": float(step_m)}, messages=tuple(messages),
    )
