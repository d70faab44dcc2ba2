"""GNSS/IMU fusion for the whole log: alignment, filter, smoother, dense fused path.

``fuse(time_s, enu_m, sigma_h_m, imu)`` runs

1. Checks (``check_imu``) and the overlap: GNSS fixes outside the IMU span are left out.
2. GNSS-IMU time offset: used as given, else estimated by cross-correlation (``timing``).
3. Epochs: every GNSS fix time, plus filler epochs so that no interval exceeds ``max_epoch_s``
   (so an outage is bridged in steps the output can be rebuilt from).
4. Initial alignment from the first seconds: a static start (IMU still) gives level from the mean
   specific force and the gyro bias from the mean rate, with zero-velocity updates; heading comes
   from the GNSS course once the mover has gone ``max(20 m, 10 sigma)`` (no sideslip assumed).
5. ``iterations`` passes of preintegration -> error-state filter -> RTS smoother, each pass
   re-linearising the preintegration at the previous pass's smoothed biases (first-order bias
   corrections then stay small).
6. The dense path: the last preintegration is kept per IMU sub-step and replayed from every
   smoothed epoch state; the small mismatch at the next epoch is spread over the interval (cubic in
   position, matching position and velocity at both ends; attitude by a geodesic share). Local
   acceleration a = R (f - ba) + g and angular rate R (w - bg) come from the IMU samples and are
   low-passed with a Gaussian of ``accel_smoothing_s`` (jerk by the Gaussian's derivative), then
   everything is sampled on a uniform grid at ``output_rate_hz``.

Cost: the preintegration is vectorised over epochs (one numpy step per IMU sample between
epochs), the filter and smoother loop at the GNSS rate only; see benchmarks/bench_fusion.py.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray
from scipy.ndimage import gaussian_filter1d

from ..errors import InputError
from .eskf import GRAVITY, NX, run_filter
from .preint import make_substeps, preintegrate, so3_exp, so3_log
from .reader import (MIN_FULL_SCALE_ACCEL_MPS2, MIN_FULL_SCALE_GYRO_RADPS, STANDARD_GRAVITY_MPS2, ImuLog,
                     check_imu, saturation_mask)
from .rts import rts_smooth
from .synth import MPU9250, MemsSpec

FloatArray = NDArray[np.float64]

DEFAULTS = {
    "output_rate_hz": 50.0,
    "accel_smoothing_s": 0.3,
    "max_epoch_s": 1.0,
    "gate_prob": 0.9999,
    "iterations": 2,
    "vertical_factor": 1.7,
    "default_sigma_h_m": 3.0,
    "stationary_speed_mps": 0.2,
    "outage_factor": 2.5,
    "saturation_noise_factor": 100.0,
    "max_offset_s": 2.0,
    "decorrelation_s": 1.0,
}


@dataclass
class _Band:
    """Duck-typed stand-in for ``survey.smooth.AxisGroup`` (only ``h`` is read)."""

    h: float


@dataclass(frozen=True, eq=False)
class FusedPath:
    """The smoothed GNSS/IMU path on a uniform time grid (local frame east, north, up; SI).

    Attributes
    ----------
    time_s
        (m,) output times, s (GNSS clock).
    enu_m, velocity_mps, accel_mps2, jerk_mps3
        (m, 3) position, velocity, low-passed acceleration and its derivative.
    enu_sd_m, velocity_sd_mps
        (m, 3) 1-sigma from the smoothed covariance (interpolated between epochs).
    accel_sd_mps2, jerk_sd_mps3
        (m,) 1-sigma per axis of the low-passed acceleration and jerk (sensor noise through the
        low-pass, bias and tilt uncertainty), used for posterior samples.
    attitude
        (m, 3, 3) C_nb, body (x forward, y left, z up) -> local.
    bank_rad, pitch_rad, yaw_rad
        Bank (+ = left side low, same sign as a left bend), pitch (+ = nose up), yaw (course of
        body x, anticlockwise from east).
    bank_sd_rad
        1-sigma of bank from the smoothed attitude covariance.
    yaw_rate_radps
        Low-passed rotation rate about the local vertical (+ = turning left).
    outage
        (m,) True where no GNSS fix was used within ``outage_factor`` median fix intervals.
    outages
        ``(start_s, end_s)`` of every GNSS outage bridged by the IMU.
    epoch_time_s, accel_bias_mps2, gyro_bias_radps, bias_sd
        Smoothed biases at the filter epochs ((N, 3) each; ``bias_sd`` (N, 6)).
    epoch_cov
        (N, 15, 15) smoothed error-state covariance at the epochs (order dp, dv, dtheta, dba, dbg).
    time_offset_s
        Offset added to the IMU times (given or estimated), s.
    fixes_used, fixes_rejected
        Counts of GNSS fixes the filter took / refused at the gate.
    settings, messages
        Run settings (for the profile header) and lines worth showing the user.
    """

    time_s: FloatArray
    enu_m: FloatArray
    velocity_mps: FloatArray
    accel_mps2: FloatArray
    jerk_mps3: FloatArray
    enu_sd_m: FloatArray
    velocity_sd_mps: FloatArray
    accel_sd_mps2: FloatArray
    jerk_sd_mps3: FloatArray
    attitude: FloatArray
    bank_rad: FloatArray
    pitch_rad: FloatArray
    yaw_rad: FloatArray
    bank_sd_rad: FloatArray
    yaw_rate_radps: FloatArray
    outage: NDArray[np.bool_]
    outages: tuple[tuple[float, float], ...]
    epoch_time_s: FloatArray
    accel_bias_mps2: FloatArray
    gyro_bias_radps: FloatArray
    bias_sd: FloatArray
    epoch_cov: FloatArray
    time_offset_s: float
    fixes_used: int
    fixes_rejected: int
    settings: dict = field(default_factory=dict)
    messages: tuple[str, ...] = ()

    def __len__(self) -> int:
        return len(self.time_s)

    # ---- derived per-sample quantities -------------------------------------------------------
    @property
    def speed_mps(self) -> FloatArray:
        return np.linalg.norm(self.velocity_mps, axis=1)

    @property
    def gyro_plan_curvature_per_m(self) -> FloatArray:
        """Plan curvature from the gyro: yaw rate / horizontal speed, 1/m (+ = left bend); NaN
        where the mover is slower than the stationary threshold."""
        vh = np.hypot(self.velocity_mps[:, 0], self.velocity_mps[:, 1])
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(vh > self.settings.get("stationary_speed_mps", 0.2), self.yaw_rate_radps / vh, np.nan)

    @property
    def bank_rate_per_m(self) -> FloatArray:
        """d(bank)/d(path length), rad/m (the twist a rider feels); NaN when stationary."""
        dt = float(np.median(np.diff(self.time_s))) if len(self) > 1 else 1.0
        sigma = self.settings.get("accel_smoothing_s", 0.3) / dt
        rate = gaussian_filter1d(self.bank_rad, sigma, order=1, mode="nearest") / dt
        v = self.speed_mps
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(v > self.settings.get("stationary_speed_mps", 0.2), rate / v, np.nan)

    # ---- the ``survey.smooth.Smoothed`` interface, so ``build_profile`` can use it ----------
    @property
    def groups(self) -> list[_Band]:
        return [_Band(float(np.median(np.diff(self.time_s))))]

    @property
    def weight_h(self) -> FloatArray:
        return np.ones(0)

    def interp(self, values: FloatArray, t: FloatArray) -> FloatArray:
        """Linear interpolation of per-sample ``values`` (m, ...) to times ``t``."""
        t = np.asarray(t, float)
        u = np.interp(t, self.time_s, np.arange(len(self.time_s), dtype=float))
        i = np.clip(np.floor(u).astype(np.int64), 0, len(self.time_s) - 2)
        w = (u - i).reshape((-1,) + (1,) * (values.ndim - 1))
        return values[i] * (1.0 - w) + values[i + 1] * w

    def at(self, t: FloatArray) -> FloatArray:
        """(n, 3, 4) position, velocity, acceleration, jerk per axis at times ``t`` (SI)."""
        stack = np.stack((self.enu_m, self.velocity_mps, self.accel_mps2, self.jerk_mps3), axis=2)
        return self.interp(stack, t)

    def draw(self, n_samples: int, rng: np.random.Generator) -> list[FloatArray]:
        """Standard normal draws (n_samples, m, 3, 4) on the output grid for ``samples_at``."""
        return [rng.standard_normal((n_samples, len(self.time_s), 3, 4))]

    def samples_at(self, drawn: list[FloatArray], t: FloatArray) -> FloatArray:
        """Posterior-like samples of (p, v, a, j) at ``t``, (n_samples, n, 3, 4): the mean plus
        independent Gaussian deviations of each quantity's 1-sigma (pointwise marginals; enough for
        the pointwise 1-sigma of curvature and torsion)."""
        z = drawn[0]
        idx = np.clip(np.searchsorted(self.time_s, t), 0, len(self.time_s) - 1)
        sd = np.stack((self.enu_sd_m, self.velocity_sd_mps,
                       np.repeat(self.accel_sd_mps2[:, None], 3, 1), np.repeat(self.jerk_sd_mps3[:, None], 3, 1)),
                      axis=2)
        return self.at(t)[None] + z[:, idx] * sd[idx][None]


# --------------------------------------------------------------------------------------------
# Alignment
# --------------------------------------------------------------------------------------------


def attitude_from_euler(yaw: float, pitch: float, bank: float) -> FloatArray:
    """C_nb from yaw (anticlockwise from east), pitch (+ nose up), bank (+ left side low)."""
    cy, sy, cp, sp = np.cos(yaw), np.sin(yaw), np.cos(pitch), np.sin(pitch)
    x = np.array([cy * cp, sy * cp, sp])
    y0 = np.array([-sy, cy, 0.0])
    z0 = np.cross(x, y0)
    cb, sb = np.cos(bank), np.sin(bank)
    return np.column_stack((x, cb * y0 - sb * z0, sb * y0 + cb * z0))


def euler_from_attitude(R: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray]:
    """(yaw, pitch, bank) of (..., 3, 3) attitudes (conventions as ``attitude_from_euler``)."""
    yaw = np.arctan2(R[..., 1, 0], R[..., 0, 0])
    pitch = np.arcsin(np.clip(R[..., 2, 0], -1.0, 1.0))
    bank = np.arctan2(-R[..., 2, 1], R[..., 2, 2])
    return yaw, pitch, bank


def _static_prefix(t: FloatArray, acc: FloatArray, gyr: FloatArray, spec: MemsSpec, block_s: float = 0.5) -> float:
    """Seconds of stillness at the start of the IMU log (0 if it starts moving).

    A block of ``block_s`` is still when the accelerometer and gyro scatter stays within 4x the
    white noise of ``spec`` and the block means stay within 0.05 m/s^2 and 0.005 rad/s of the
    first block's (a smooth start would pass a scatter test alone).
    """
    rate = 1.0 / float(np.median(np.diff(t)))
    nb = max(int(block_s * rate), 5)
    nblocks = min(len(t) // nb, int(120.0 / block_s))
    if nblocks < 2:
        return 0.0
    a = acc[: nblocks * nb].reshape(nblocks, nb, 3)
    g = gyr[: nblocks * nb].reshape(nblocks, nb, 3)
    sa = 4.0 * max(spec.accel_noise_mps2_rthz * np.sqrt(rate), 1e-3)
    sg = 4.0 * max(spec.gyro_noise_radps_rthz * np.sqrt(rate), 1e-4)
    still = (a.std(axis=1).max(axis=1) < sa) & (g.std(axis=1).max(axis=1) < sg)
    still &= np.abs(a.mean(axis=1) - a[0].mean(axis=0)).max(axis=1) < 0.05
    still &= np.abs(g.mean(axis=1) - g[0].mean(axis=0)).max(axis=1) < 0.005
    n_still = int(np.argmin(still)) if not still.all() else nblocks
    # leave out the last still block: motion may start inside it
    return max(n_still - 1, 0) * nb / rate


def align(imu: ImuLog, t_g: FloatArray, enu_g: FloatArray, var_h: FloatArray, spec: MemsSpec,
          vertical_factor: float) -> tuple[tuple, FloatArray, float, list[str]]:
    """Initial state, covariance, end of the static start (time, s) and messages."""
    msgs: list[str] = []
    t0 = t_g[0]
    sel = imu.time_s >= t0
    ti, fa, fg = imu.time_s[sel], imu.accel_mps2[sel], imu.gyro_radps[sel]
    static_s = _static_prefix(ti, fa, fg, spec)
    sig_h = float(np.sqrt(np.median(var_h)))
    # GNSS: where does the mover leave its start?
    d0 = np.hypot(enu_g[:, 0] - enu_g[0, 0], enu_g[:, 1] - enu_g[0, 1])
    thr = max(5.0, 4.0 * sig_h)
    moved = np.flatnonzero(d0 > thr)
    if len(moved) == 0:
        raise InputError(None, "the GNSS log never moves beyond its noise; the IMU heading cannot be aligned")
    t_move = t_g[moved[0]]
    static_s = min(static_s, max(t_move - t0, 0.0))
    static = static_s >= 1.0
    if static:
        w = ti < t0 + static_s
        f_mean = fa[w].mean(axis=0)
        bg0 = fg[w].mean(axis=0)
        bg_sd = np.full(3, spec.gyro_noise_radps_rthz / np.sqrt(static_s) + spec.gyro_bias_walk_radps_rts)
        start = t_g <= t0 + static_s
        p0 = np.nanmean(enu_g[start], axis=0) if start.any() else enu_g[0]
        v0, v_sd = np.zeros(3), 0.05
        msgs.append(f"alignment: static start of {static_s:.1f} s (level from gravity, gyro bias from the mean rate)")
    else:
        w = ti < t0 + 1.0
        f_mean = fa[w].mean(axis=0)
        bg0 = np.zeros(3)
        bg_sd = np.full(3, spec.gyro_offset_radps / np.sqrt(3.0))
        p0 = enu_g[0]
        v0, v_sd = None, 3.0
        msgs.append("alignment: no static start; level from the first second (moving), gyro bias estimated on the way")
    up_b = f_mean / np.linalg.norm(f_mean)
    pitch = float(np.arcsin(np.clip(up_b[0], -1, 1)))
    bank = float(np.arctan2(-up_b[1], up_b[2]))
    # heading: course from the start to the first fix max(20 m, 10 sigma) away
    far = np.flatnonzero(d0 > max(20.0, 10.0 * sig_h))
    j = far[0] if len(far) else moved[0]
    base = p0 if static else enu_g[0]
    dvec = enu_g[j] - base
    yaw = float(np.arctan2(dvec[1], dvec[0]))
    yaw_sd = float(np.arctan2(2.0 * sig_h, np.hypot(dvec[0], dvec[1]))) + np.radians(2.0)
    if v0 is None:
        v0 = np.nan_to_num(dvec / max(t_g[j] - t_g[0], 1e-3))
    R0 = attitude_from_euler(yaw, pitch, bank)
    ba0 = np.array([0.0, 0.0, np.linalg.norm(f_mean) - STANDARD_GRAVITY_MPS2]) if static else np.zeros(3)
    ba_sd = spec.accel_offset_mps2 / np.sqrt(3.0)
    tilt_sd = ba_sd / STANDARD_GRAVITY_MPS2 + (0.0 if static else np.radians(3.0))
    P0 = np.zeros((NX, NX))
    sd = np.concatenate((
        [sig_h, sig_h, vertical_factor * sig_h], np.full(3, v_sd), [tilt_sd, tilt_sd, yaw_sd],
        np.full(3, ba_sd), bg_sd,
    ))
    np.fill_diagonal(P0, sd**2)
    if not np.isfinite(p0[2]):
        p0 = np.array([p0[0], p0[1], 0.0])
    x0 = (np.asarray(p0, float), np.asarray(v0, float), R0, ba0, np.asarray(bg0, float))
    return x0, P0, (t0 + static_s) if static else t0, msgs


# --------------------------------------------------------------------------------------------
# The run
# --------------------------------------------------------------------------------------------


def _epochs(t_fix: FloatArray, max_epoch_s: float) -> FloatArray:
    """Fix times plus fillers so that no interval is longer than ``max_epoch_s``."""
    gaps = np.diff(t_fix)
    extra = [t_fix[i] + np.arange(1, int(np.ceil(g / max_epoch_s))) * (g / np.ceil(g / max_epoch_s))
             for i, g in enumerate(gaps) if g > max_epoch_s * 1.0001]
    return np.unique(np.concatenate([t_fix] + extra)) if extra else t_fix.copy()


def fuse(
    time_s: FloatArray,
    enu_m: FloatArray,
    sigma_h_m: FloatArray | None,
    imu: ImuLog,
    spec: MemsSpec = MPU9250,
    time_offset_s: float | None = None,
    **settings,
) -> FusedPath:
    """Fuse GNSS fixes and an IMU log into one smoothed path (see module docstring).

    Parameters
    ----------
    time_s
        (n,) fix times on the GNSS clock, s, increasing.
    enu_m
        (n, 3) fix positions in the run's local frame (east, north, up), m; NaN up = no height.
    sigma_h_m
        (n,) horizontal 1-sigma per fix, m (NaN or None: ``default_sigma_h_m``); vertical is
        ``vertical_factor`` times it.
    imu
        The IMU log (body x forward, y left, z up), times on the GNSS clock.
    spec
        Sensor noise class the filter assumes (``survey.imu.synth.MPU9250`` by default).
    time_offset_s
        GNSS-IMU offset added to the IMU times; None = estimate it (``timing``) and apply it when
        it is significant.
    settings
        Overrides of ``DEFAULTS``.
    """
    cfg = {**DEFAULTS, **{k: v for k, v in settings.items() if v is not None}}
    unknown = set(cfg) - set(DEFAULTS)
    if unknown:
        raise TypeError(f"unknown fusion settings: {sorted(unknown)}")
    t = np.asarray(time_s, float)
    enu = np.asarray(enu_m, float)
    n = len(t)
    sig = np.full(n, np.nan) if sigma_h_m is None else np.asarray(sigma_h_m, float)
    msgs: list[str] = []
    if np.isnan(sig).any():
        if np.isnan(sig).all():
            msgs.append(f"GNSS log has no accuracy: {cfg['default_sigma_h_m']:g} m (1-sigma) assumed")
        sig = np.where(np.isfinite(sig) & (sig > 0), sig, cfg["default_sigma_h_m"])
    check = check_imu(imu, t)
    msgs.extend(check.messages)
    if time_offset_s is not None:
        return _fuse_once(t, enu, sig, imu.shifted(float(time_offset_s)) if time_offset_s else imu, spec, cfg,
                          msgs, float(time_offset_s), "given", check.rate_hz)
    from .timing import estimate_time_offset

    est = estimate_time_offset(t, enu, imu, max_lag_s=cfg["max_offset_s"])
    msgs.append(est.message)
    offset = est.offset_s if est.significant else 0.0
    note = "estimated" if est.significant else "estimated, not significant: 0 used"
    return _fuse_once(t, enu, sig, imu.shifted(offset) if offset else imu, spec, cfg, msgs, offset, note, check.rate_hz)


def _fuse_once(t, enu, sig, imu: ImuLog, spec: MemsSpec, cfg: dict, msgs: list[str], offset: float,
               offset_note: str, imu_rate_hz: float) -> FusedPath:
    """One fusion with the IMU already on the GNSS clock."""
    msgs = list(msgs)
    keep = (t >= imu.time_s[0]) & (t <= imu.time_s[-1]) & np.isfinite(enu[:, 0]) & np.isfinite(enu[:, 1])
    if keep.sum() < 3:
        raise InputError(imu.path, "fewer than 3 GNSS fixes fall inside the IMU log's time span")
    if (~keep).any():
        msgs.append(f"{int((~keep).sum())} GNSS fixes outside the IMU span (or without position) left out")
    t, enu, sig = t[keep], enu[keep], sig[keep]
    var = np.column_stack((sig**2, sig**2, (cfg["vertical_factor"] * sig) ** 2))
    # Receiver errors are correlated over seconds or more: fixes faster than ``decorrelation_s``
    # are de-weighted so that they carry no more information per second than fixes that far
    # apart (common practice; otherwise the filter grows overconfident and gates good fixes).
    interval = float(np.median(np.diff(t))) if len(t) > 1 else 1.0
    var = var * max(1.0, cfg["decorrelation_s"] / interval)
    epochs = _epochs(t, cfg["max_epoch_s"])
    N = len(epochs)
    fix_at = np.searchsorted(epochs, t)
    z = np.full((N, 3), np.nan)
    r = np.full((N, 3), np.nan)
    z[fix_at] = enu
    r[fix_at] = var
    x0, P0, static_end, amsgs = align(imu, t, enu, var[:, 0], spec, cfg["vertical_factor"])
    msgs.extend(amsgs)
    zupt = epochs <= static_end
    zupt[0] = zupt[0] and static_end > epochs[0]
    sat = (saturation_mask(imu.accel_mps2, min_full_scale=MIN_FULL_SCALE_ACCEL_MPS2)
           | saturation_mask(imu.gyro_radps, min_full_scale=MIN_FULL_SCALE_GYRO_RADPS))
    scale = np.where(sat, cfg["saturation_noise_factor"], 1.0)
    steps = make_substeps(imu.time_s, imu.accel_mps2, imu.gyro_radps, epochs, scale)
    gpsd, apsd = spec.gyro_noise_radps_rthz**2, spec.accel_noise_mps2_rthz**2
    q_ba, q_bg = spec.accel_bias_walk_mps2_rts**2, spec.gyro_bias_walk_radps_rts**2
    ba_lin = np.broadcast_to(x0[3], (N - 1, 3)).copy()
    bg_lin = np.broadcast_to(x0[4], (N - 1, 3)).copy()
    for it in range(int(cfg["iterations"])):
        pre = preintegrate(steps, ba_lin, bg_lin, gpsd, apsd)
        run = run_filter(x0, P0, pre, z, r, zupt, q_ba, q_bg, gate_prob=cfg["gate_prob"])
        xs, Ps = rts_smooth(run)
        ba_lin, bg_lin = xs.ba[:-1].copy(), xs.bg[:-1].copy()
    rejected = int(run.rejected.sum())
    if rejected:
        msgs.append(f"{rejected} GNSS fixes refused by the innovation gate")
    path = _dense(steps, epochs, xs, Ps, imu, spec, cfg)
    used_t = epochs[run.accepted]
    outages = _outages(used_t, cfg["outage_factor"])
    out_mask = np.zeros(len(path["time_s"]), bool)
    for a, b in outages:
        out_mask |= (path["time_s"] > a) & (path["time_s"] < b)
    if outages:
        msgs.append(f"{len(outages)} GNSS outages bridged by the IMU (longest {max(b - a for a, b in outages):.1f} s)")
    bias_sd = np.sqrt(np.stack([np.diagonal(Ps, axis1=1, axis2=2)[:, 9:15]])[0])
    settings_out = {
        "fusion": "GNSS/IMU error-state EKF (15 states) + RTS smoother on preintegrated IMU",
        "imu_rate_hz": round(imu_rate_hz, 3),
        "imu_noise_class": spec.name,
        "time_offset_s": offset,
        "time_offset": offset_note,
        "accel_bias_mps2": ";".join(f"{v:.4g}" for v in np.median(xs.ba, axis=0)),
        "gyro_bias_dps": ";".join(f"{v:.4g}" for v in np.degrees(np.median(xs.bg, axis=0))),
        "fixes_used": int(run.accepted.sum()),
        "fixes_rejected": rejected,
        "outages": len(outages),
        **{k: cfg[k] for k in ("output_rate_hz", "accel_smoothing_s", "max_epoch_s", "gate_prob", "iterations", "decorrelation_s",
                               "stationary_speed_mps")},
    }
    return FusedPath(
        **path, outage=out_mask, outages=tuple(outages), epoch_time_s=epochs, accel_bias_mps2=xs.ba,
        gyro_bias_radps=xs.bg, bias_sd=bias_sd, epoch_cov=Ps, time_offset_s=offset, fixes_used=int(run.accepted.sum()),
        fixes_rejected=rejected, settings=settings_out, messages=tuple(msgs),
    )


def _outages(used_t: FloatArray, factor: float) -> list[tuple[float, float]]:
    if len(used_t) < 2:
        return []
    d = np.diff(used_t)
    med = float(np.median(d))
    big = np.flatnonzero(d > factor * med)
    return [(float(used_t[i]), float(used_t[i + 1])) for i in big]


def _dense(steps, epochs, xs, Ps, imu: ImuLog, spec: MemsSpec, cfg) -> dict:
    """Replay the last preintegration from every smoothed epoch state; build the output grid."""
    pre = preintegrate(steps, xs.ba[:-1], xs.bg[:-1], 0.0, 0.0, keep_path=True)
    n_int, m = steps.dt.shape
    valid = steps.dt > 0
    tau = steps.t_end - epochs[:-1, None]  # (n_int, m)
    T = pre.T[:, None]
    Rk = xs.R[:-1]
    pk, vk = xs.p[:-1], xs.v[:-1]
    R = np.einsum("kij,kmjl->kmil", Rk, pre.path_dR)
    v = vk[:, None] + GRAVITY * tau[..., None] + np.einsum("kij,kmj->kmi", Rk, pre.path_dv)
    p = (pk[:, None] + vk[:, None] * tau[..., None] + 0.5 * GRAVITY * (tau**2)[..., None]
         + np.einsum("kij,kmj->kmi", Rk, pre.path_dp))
    # mismatch at the next epoch (the last valid sub-step of every interval ends there)
    last = valid.sum(axis=1) - 1
    ar = np.arange(n_int)
    dp_end = xs.p[1:] - p[ar, last]
    dv_end = xs.v[1:] - v[ar, last]
    dth_end = so3_log(np.swapaxes(R[ar, last], 1, 2) @ xs.R[1:])
    s = np.where(T > 0, tau / np.where(T > 0, T, 1.0), 0.0)[..., None]
    Tm = T[..., None]
    p = p + dp_end[:, None] * (3 * s**2 - 2 * s**3) + dv_end[:, None] * Tm * (s**3 - s**2)
    with np.errstate(invalid="ignore", divide="ignore"):
        v = v + (dp_end[:, None] * (6 * s - 6 * s**2) + dv_end[:, None] * Tm * (3 * s**2 - 2 * s)) / np.where(Tm > 0, Tm, 1.0)
    R = R @ so3_exp(s * dth_end[:, None])
    # flatten in time order (+ the first epoch)
    tt = np.concatenate(([epochs[0]], steps.t_end[valid]))
    P = np.concatenate((xs.p[:1], p[valid]))
    V = np.concatenate((xs.v[:1], v[valid]))
    RR = np.concatenate((xs.R[:1], R[valid]))
    # local acceleration and rotation rate at sub-step midpoints
    kidx = np.broadcast_to(np.arange(n_int)[:, None], (n_int, m))[valid]
    Rv = R[valid]
    f = steps.accel[valid] - xs.ba[kidx]
    w = steps.gyro[valid] - xs.bg[kidx]
    a_loc = np.einsum("nij,nj->ni", Rv, f) + GRAVITY
    w_loc = np.einsum("nij,nj->ni", Rv, w)
    t_mid = steps.t_end[valid] - 0.5 * steps.dt[valid]
    # uniform fine grid at the IMU rate for the Gaussian low-pass
    rate = 1.0 / float(np.median(np.diff(imu.time_s)))
    fine = np.arange(tt[0], tt[-1] + 0.5 / rate, 1.0 / rate)
    sig_n = cfg["accel_smoothing_s"] * rate
    A = np.column_stack([np.interp(fine, t_mid, a_loc[:, k]) for k in range(3)])
    a_f = gaussian_filter1d(A, sig_n, axis=0, mode="nearest")
    j_f = gaussian_filter1d(A, sig_n, axis=0, order=1, mode="nearest") * rate
    yaw_rate = gaussian_filter1d(np.interp(fine, t_mid, w_loc[:, 2]), sig_n, mode="nearest")
    out_t = np.arange(tt[0], tt[-1] + 1e-9, 1.0 / cfg["output_rate_hz"])
    col = lambda X: np.column_stack([np.interp(out_t, tt, X[:, k]) for k in range(X.shape[1])])  # noqa: E731
    fcol = lambda X: np.column_stack([np.interp(out_t, fine, X[:, k]) for k in range(X.shape[1])])  # noqa: E731
    # attitude: nearest replayed sample (sub-step spacing is the IMU interval)
    ai = np.clip(np.searchsorted(tt, out_t), 0, len(tt) - 1)
    att = RR[ai]
    yaw, pitch, bank = euler_from_attitude(att)
    # 1-sigma from the smoothed covariance, linear between epochs
    dg = np.sqrt(np.clip(np.diagonal(Ps, axis1=1, axis2=2), 0, None))
    sd = np.column_stack([np.interp(out_t, epochs, dg[:, k]) for k in range(NX)])
    # low-passed white accel noise: variance N^2 / (2 sqrt(pi) sigma_t) for a Gaussian kernel
    st = cfg["accel_smoothing_s"]
    a_white = spec.accel_noise_mps2_rthz / np.sqrt(2.0 * np.sqrt(np.pi) * st)
    a_sd = np.sqrt(a_white**2 + np.mean(sd[:, 9:12] ** 2, axis=1) + (STANDARD_GRAVITY_MPS2 * np.mean(sd[:, 6:8], axis=1)) ** 2)
    j_sd = spec.accel_noise_mps2_rthz / np.sqrt(4.0 * np.sqrt(np.pi) * st**3) * np.ones(len(out_t))
    return {
        "time_s": out_t, "enu_m": col(P), "velocity_mps": col(V), "accel_mps2": fcol(a_f), "jerk_mps3": fcol(j_f),
        "enu_sd_m": sd[:, 0:3], "velocity_sd_mps": sd[:, 3:6], "accel_sd_mps2": a_sd, "jerk_sd_mps3": j_sd,
        "attitude": att, "bank_rad": bank, "pitch_rad": pitch, "yaw_rad": yaw, "bank_sd_rad": sd[:, 6],
        "yaw_rate_radps": np.interp(out_t, fine, yaw_rate),
    }
