"""Cleaned track + local coordinates -> geometry at fixed chainage stations (``Profile``).

Steps (one-way):

1. Usable fixes: not ``suspect``, finite east/north. Each segment is smoothed on its own, so no
   curve is ever drawn across a gap between segments.
2. The "time" of the smoother is the fix time; a log without time uses the raw 3D chord chainage
   of its fixes instead (speed, time and lateral acceleration are then NaN). Fixes sharing one
   time are merged (their mean, with the variance of one fix: repeated fixes add no information).
3. Noise by maximum likelihood (``survey.smooth.fit_noise``) on up to three stretches of at most
   ``fit_fixes`` fixes, horizontal and vertical separately. With per-fix accuracy, the
   horizontal variance is accuracy^2 (a floor the likelihood may only raise) and the vertical
   (``vertical_factor`` x accuracy)^2 (heights are 1.5-1.7x noisier: REFERENCES.md, GNSS accuracy);
   without it the white variance and a Gauss-Markov wander (``wander_tau_s``) are estimated.
4. Chainage = integral of the smoothed 3D speed over time, where the mover is moving; where the
   smoothed speed is below ``stationary_speed_mps`` the chainage does not advance, so no station
   falls inside a stop and curvature never blows up there (kappa is defined per metre of path).
   Chainage is continuous over the whole log: a segment starts where the previous one ended plus
   the straight distance across the gap, and its first station is the next multiple of the step.
5. Stations every ``step_m`` of chainage; geometry from the posterior mean (``survey.geometry``);
   1-sigma of kappa and tau from ``n_samples`` exact posterior samples (Monte Carlo). Torsion is
   NaN with reason TORSION_LOW_CURVATURE where kappa < ``kappa_sigmas`` x its 1-sigma.
"""

from __future__ import annotations

import numpy as np

from . import __version__
from .geometry import frenet
from .smooth import NoiseModel, fit_noise, robust_white_var, smooth_stretch
from .stations import TORSION_LOW_CURVATURE, TORSION_NO_DATA, TORSION_OK, Profile
from .track import HEIGHT_NONE, Track

DEFAULTS = {
    "n_samples": 32,
    "seed": 0,
    "wander_tau_s": 60.0,
    "vertical_factor": 1.7,
    "stationary_speed_mps": 0.2,
    "kappa_sigmas": 3.0,
    "fit_fixes": 2000,
    "min_fixes": 6,
    "robust_iterations": 3,
    "station_chunk": 100_000,
}


def build_profile(track: Track, enu_m: np.ndarray, frame, step_m: float = 1.0, **settings) -> Profile:
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

    # --- stretches: one per segment, with a strictly increasing parameter --------------------
    stretches = []
    seg_ids = track.segment[ok]
    idx_ok = np.flatnonzero(ok)
    for sid in _ordered_unique(seg_ids):
        idx = idx_ok[seg_ids == sid]
        t = track.time_s[idx] if has_time else _chord_chainage(enu[idx])
        t, y, bh, bv = _merge_repeats(t, enu[idx], base_h[idx], base_v[idx])
        if len(t) < cfg["min_fixes"] or np.ptp(y[:, 0]) + np.ptp(y[:, 1]) == 0 or t[-1] <= t[0]:
            messages.append(f"segment {sid}: {len(t)} usable distinct fixes, too few to measure; skipped")
            continue
        stretches.append((int(sid), t, y, bh, bv))
    if not stretches:
        messages.append("nothing to measure: no segment has enough distinct fixes that move")
        return empty_profile(track, frame, step_m, cfg, messages)

    # --- noise by maximum likelihood on a few stretches ---------------------------------------
    model_h, model_v = _fit_models(stretches, use_acc, has_height, cfg)

    # --- smooth each segment, place stations ---------------------------------------------------
    rng = np.random.default_rng(cfg["seed"])
    parts = []
    s_offset = 0.0
    last_pos = None
    knots = []
    lengths: list[float] = []
    for sid, t, y, bh, bv in stretches:
        sm = smooth_stretch(t, y, bh, bv, model_h, model_v if has_height else None,
                            robust_iterations=cfg["robust_iterations"])
        knots.append([g.h for g in sm.groups])
        v_min = cfg["stationary_speed_mps"] if has_time else 0.0
        tg, sg = _chainage_table(sm, t[0], t[-1], step_m, v_min)
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
        parts.append(_stations(sm, ts, chain, sid, has_time, has_height, rng, cfg))
        s_offset = float(s_abs[-1])
        lengths.append(float(sg[-1]))
        last_pos = sm.at(np.array([t[-1]]))[0, :, 0]
        rejected = int(np.sum(sm.weight_h == 0))
        if rejected:
            messages.append(f"segment {sid}: {rejected} fixes rejected as outliers")
    if not parts:
        return empty_profile(track, frame, step_m, cfg, messages)
    cols = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    lat, lon, h = frame.inverse(cols["east_m"], cols["north_m"], cols["up_m"] if has_height else np.zeros(len(cols["east_m"])))
    if not has_height:
        h = np.full(len(lat), np.nan)
        cols["up_m"] = np.full(len(lat), np.nan)
    settings_out = _settings(cfg, step_m, model_h, model_v if has_height else None, use_acc, has_time, knots)
    settings_out["path_length_m"] = float(sum(lengths))
    return Profile(
        lat_deg=np.asarray(lat), lon_deg=np.asarray(lon), height_m=np.asarray(h),
        step_m=float(step_m), height_ref=track.height_ref, frame=frame.describe(),
        settings=settings_out, messages=tuple(messages), **cols,
    )


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
    ym = np.column_stack([np.bincount(inv, weights=np.nan_to_num(y[:, k]), minlength=len(tu)) for k in range(3)])
    fin = np.column_stack([np.bincount(inv, weights=np.isfinite(y[:, k]).astype(float), minlength=len(tu)) for k in range(3)])
    with np.errstate(invalid="ignore", divide="ignore"):
        ym = np.where(fin > 0, ym / fin, np.nan)
    first = np.zeros(len(tu), int)
    first[inv[::-1]] = np.arange(len(t))[::-1]
    return tu, ym, bh[first], bv[first]


def _fit_models(stretches, use_acc, has_height, cfg):
    """Horizontal and vertical noise by maximum likelihood on at most three stretches."""
    nfit = cfg["fit_fixes"]
    biggest = sorted(stretches, key=lambda s: -len(s[1]))[:3]
    pieces_h, pieces_v = [], []
    for _, t, y, bh, bv in biggest:
        a = max(0, len(t) // 2 - nfit // 2)
        sl = slice(a, a + nfit)
        pieces_h.append((t[sl], y[sl, :2], bh[sl]))
        if has_height:
            zz = np.isfinite(y[sl, 2])
            if zz.sum() >= cfg["min_fixes"]:
                pieces_v.append((t[sl][zz], y[sl, 2:][zz], bv[sl][zz]))
    wander = None if use_acc else cfg["wander_tau_s"]
    if use_acc:
        fh = fit_noise(pieces_h, estimate_scale=False, scale_floor=1.0, wander_tau_s=None, start_var=1.0)
    else:
        r0 = float(np.median([robust_white_var(p[1][:, 0]) for p in pieces_h]))
        fh = fit_noise(pieces_h, estimate_scale=True, scale_floor=0.0, wander_tau_s=wander, start_var=r0)
    model_v = None
    if has_height and pieces_v:
        if use_acc:
            fv = fit_noise(pieces_v, estimate_scale=True, scale_floor=1.0, wander_tau_s=None,
                           start_var=2.0 * float(np.median(pieces_v[0][2])))
        else:
            r0 = float(np.median([robust_white_var(p[1][:, 0]) for p in pieces_v]))
            fv = fit_noise(pieces_v, estimate_scale=True, scale_floor=0.0, wander_tau_s=wander, start_var=r0)
        model_v = fv.model
    return fh.model, model_v


def _chainage_table(sm, t_start, t_end, step_m, v_min):
    """(t, s) on a fine grid: chainage by the trapezoid rule on the smoothed 3D speed, frozen
    where the speed is below ``v_min``; the grid is fine enough (<= step/8 of travel, and at
    least 4 points per knot interval) that its error is far below the station step."""
    h = min(g.h for g in sm.groups)
    tk = np.arange(t_start, t_end + h, h)
    vmax = float(np.nanmax(np.linalg.norm(sm.at(np.clip(tk, t_start, t_end))[:, :, 1], axis=1)))
    dt = min(h / 4.0, (step_m / 8.0) / max(vmax, 1e-9))
    ng = int(np.ceil((t_end - t_start) / dt)) + 1
    tg = np.linspace(t_start, t_end, ng)
    speed = np.empty(ng)
    for a in range(0, ng, 500_000):
        speed[a : a + 500_000] = np.linalg.norm(sm.at(tg[a : a + 500_000])[:, :, 1], axis=1)
    speed = np.where(speed > v_min, speed, 0.0)
    s = np.concatenate(([0.0], np.cumsum(0.5 * (speed[1:] + speed[:-1]) * np.diff(tg))))
    keep = np.concatenate(([True], np.diff(s) > 0))
    return tg[keep], s[keep]


def _stations(sm, ts, chain, sid, has_time, has_height, rng, cfg) -> dict:
    """All per-station arrays of one segment."""
    st = sm.at(ts)
    g = frenet(st[:, :, 1], st[:, :, 2], st[:, :, 3])
    n = len(ts)
    k_sd = np.empty(n)
    t_sd = np.empty(n)
    drawn = sm.draw(cfg["n_samples"], rng)
    chunk = max(1, cfg["station_chunk"] // max(cfg["n_samples"], 1))
    for a in range(0, n, chunk):
        smp = sm.samples_at(drawn, ts[a : a + chunk])
        gs = frenet(smp[..., 1], smp[..., 2], smp[..., 3])
        k_sd[a : a + chunk] = np.std(gs["curvature_per_m"], axis=0, ddof=1)
        # torsion samples have heavy tails where kappa is small: half the central 68 % range
        q16, q84 = np.nanpercentile(gs["torsion_per_m"], [15.87, 84.13], axis=0)
        t_sd[a : a + chunk] = 0.5 * (q84 - q16)
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
    return {
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


def _settings(cfg, step_m, model_h: NoiseModel, model_v: NoiseModel | None, use_acc, has_time, knots) -> dict:
    out = {
        "tool_version": __version__,
        "method": "constant-jerk RTS-equivalent banded smoother, noise by maximum likelihood",
        "parameter": "time" if has_time else "raw chainage (log has no time)",
        "step_m": float(step_m),
        "measurement_noise": "per-fix accuracy as a floor" if use_acc else "estimated (white + Gauss-Markov wander)",
        "snap_psd_h_m2_s7": model_h.snap_psd,
        "var_scale_h": model_h.var_scale,
        "wander_var_h_m2": model_h.wander_var_m2,
        "chainage": "continuous across segments (straight distance across gaps); no stations in gaps",
        "knot_spacing": ";".join(",".join(f"{h:.4g}" for h in k) for k in knots),
    }
    if model_v is not None:
        out.update(snap_psd_v_m2_s7=model_v.snap_psd, var_scale_v=model_v.var_scale,
                   wander_var_v_m2=model_v.wander_var_m2)
    for k in ("n_samples", "seed", "wander_tau_s", "vertical_factor", "stationary_speed_mps", "kappa_sigmas", "robust_iterations"):
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
