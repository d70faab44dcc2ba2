"""GNSS/IMU fusion for the whole log: alignment, filter, smoother, dense fused path.

``fuse(time_s, enu_m, sigma_h_m, imu, speed_mps=..., course_deg=...)`` runs

1. Checks (``check_imu``) and the overlap: GNSS fixes outside the IMU span are left out.
2. GNSS-IMU time offset: used as given, else estimated by cross-correlation (``timing``).
3. Epochs: every GNSS fix time, plus filler epochs so that no interval exceeds ``max_epoch_s``
   (so an outage is bridged in steps the output can be rebuilt from).
4. Initial alignment from the first seconds: a static start (IMU still) gives level from the mean
   specific force and the gyro bias from the mean rate, with zero-velocity updates; heading comes
   from the GNSS course once the mover has gone ``max(20 m, 10 sigma)`` (no sideslip assumed).
   A moving start with GNSS velocities takes v0 and heading from the first course and corrects the
   level by the acceleration fitted to the first velocities (``align``).
4b. Measurements (``survey.imu.eskf``): positions measure p + receiver wander (Gauss-Markov states,
   ``wander_model``), GNSS velocities (speed, course) measure v (speed only below
   ``course_min_speed_mps``), and zero-velocity updates hold the stops where the IMU is still
   (``still_epochs``) and the predicted speed is low.
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
from .eskf import GRAVITY, NX, Wander, run_filter
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
    # GNSS velocity updates (speed and course over ground). 1-sigma per horizontal axis of a
    # phone's Doppler velocity: 0.1-0.2 m/s class (from memory; no published figure to hand).
    "velocity_sigma_mps": 0.15,
    # Below this reported speed the course is not used (receivers freeze or scatter it); the
    # velocity update then only says "about this slow": v_h = 0 with per-axis variance
    # velocity_sigma^2 + speed^2 (common practice: speed-only use at low speed).
    "course_min_speed_mps": 1.0,
    # Receiver wander as Gauss-Markov filter states. None = automatic: phone-like logs (no stated
    # accuracy, or a median stated accuracy above phone_accuracy_m) WITH GNSS velocities take the
    # phone grade of survey.synthetic.GNSS_GRADES (3 m, 60 s; split of white and wander: common
    # practice), capped at an equal split of the stated total (white keeps >= 1/sqrt(2) of it, so
    # a log whose error is mostly white is not gated too hard); every other log a
    # small wander of small_wander_fraction x the stated accuracy (without velocities the wander
    # cannot be told from the path, and modelling it only softens the fixes).
    "wander_sigma_m": None,
    "wander_tau_s": 60.0,
    "phone_accuracy_m": 1.0,
    "phone_wander_sigma_m": 3.0,
    "small_wander_fraction": 0.1,
    # Zero-velocity updates where the IMU says still (Groves 2013 ch. 15) and the predicted speed
    # is below zupt_max_speed_mps; 1-sigma of the pseudo-measurement.
    "zupt_sigma_mps": 0.02,
    "zupt_max_speed_mps": 0.5,
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
        (N, 18, 18) smoothed error-state covariance at the epochs (order dp, dv, dtheta, dba, dbg,
        db: receiver wander).
    time_offset_s
        Offset added to the IMU times (given or estimated), s.
    fixes_used, fixes_rejected
        Counts of GNSS fixes the filter took / refused at the gate.
    settings, messages
        Run settings (for the profile header) and lines worth showing the user.
    gnss_wander_m
        (N, 3) smoothed receiver wander (slow GNSS position error, east, north, up) at the epochs.
    epoch_zupt
        (N,) zero-velocity update applied at the epoch (static start and stops).
    stops
        ``(start_s, end_s)`` of the stops after the start that zero-velocity updates held.
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
    gnss_wander_m: FloatArray | None = None
    epoch_zupt: NDArray[np.bool_] | None = None
    stops: tuple[tuple[float, float], ...] = ()

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
          vertical_factor: float, vel_en: FloatArray | None = None, vel_sd_mps: float = 0.15,
          wander_m: FloatArray | None = None) -> tuple[tuple, FloatArray, float, list[str]]:
    """Initial state, covariance, end of the static start (time, s) and messages.

    Static start (IMU still for >= 1 s): level from the mean specific force, gyro bias from the
    mean rate, heading from the course between the start and the first fix max(20 m, 10 sigma)
    away. Moving start: with GNSS velocities (``vel_en``, (n, 2) east/north m/s, NaN where not
    usable) the first velocity gives v0 and the heading (course over ground, no sideslip), and the
    acceleration fitted to the first 3 s of velocities corrects the level: the accelerometer
    measures f = a - g, not -g, so the attitude is the rotation that takes the mean body specific
    force onto a - g and body x onto the course (a two-vector attitude fit, Wahba's problem,
    scipy ``Rotation.align_vectors``). Without velocities the level comes from the first second
    (wrong by a/g) and the heading from the displacement.
    ``var_h`` is the white position variance, ``wander_m`` the receiver wander 1-sigma per axis.
    """
    msgs: list[str] = []
    t0 = t_g[0]
    sel = imu.time_s >= t0
    ti, fa, fg = imu.time_s[sel], imu.accel_mps2[sel], imu.gyro_radps[sel]
    static_s = _static_prefix(ti, fa, fg, spec)
    wander = np.zeros(3) if wander_m is None else np.asarray(wander_m, float)
    sig_h = float(np.sqrt(np.median(var_h) + wander[0] ** 2))
    # GNSS: where does the mover leave its start?
    d0 = np.hypot(enu_g[:, 0] - enu_g[0, 0], enu_g[:, 1] - enu_g[0, 1])
    thr = max(5.0, 4.0 * sig_h)
    moved = np.flatnonzero(d0 > thr)
    if len(moved) == 0:
        raise InputError(None, "the GNSS log never moves beyond its noise; the IMU heading cannot be aligned")
    t_move = t_g[moved[0]]
    static_s = min(static_s, max(t_move - t0, 0.0))
    static = static_s >= 1.0
    has_vel = vel_en is not None and np.isfinite(vel_en[0]).all()
    R0 = None
    if static:
        w = ti < t0 + static_s
        f_mean = fa[w].mean(axis=0)
        bg0 = fg[w].mean(axis=0)
        bg_sd = np.full(3, spec.gyro_noise_radps_rthz / np.sqrt(static_s) + spec.gyro_bias_walk_radps_rts)
        start = t_g <= t0 + static_s
        p0 = np.nanmean(enu_g[start], axis=0) if start.any() else enu_g[0]
        v0, v_sd = np.zeros(3), 0.05
        msgs.append(f"alignment: static start of {static_s:.1f} s (level from gravity, gyro bias from the mean rate)")
    elif has_vel:
        win = 3.0
        use = (t_g <= t0 + win) & np.isfinite(vel_en).all(axis=1)
        tt = t_g[use] - t0
        a_h = np.polyfit(tt, vel_en[use], 1)[0] if use.sum() >= 3 else np.zeros(2)
        w = ti < t0 + (tt[-1] if use.sum() >= 3 else 1.0)
        f_mean = fa[w].mean(axis=0)
        bg0 = np.zeros(3)
        bg_sd = np.full(3, spec.gyro_offset_radps / np.sqrt(3.0))
        p0 = enu_g[0]
        v0 = np.array([vel_en[0, 0], vel_en[0, 1], 0.0])
        v_sd = 2.0 * vel_sd_mps
        f_loc = np.array([a_h[0], a_h[1], 0.0]) - GRAVITY
        x_loc = v0 / np.linalg.norm(v0)
        from scipy.spatial.transform import Rotation

        rot, _ = Rotation.align_vectors([f_loc, x_loc], [f_mean, [1.0, 0.0, 0.0]], weights=[100.0, 1.0])
        R0 = rot.as_matrix()
        msgs.append("alignment: moving start; level from the specific force less the GNSS acceleration, "
                    "heading from the GNSS course")
    else:
        w = ti < t0 + 1.0
        f_mean = fa[w].mean(axis=0)
        bg0 = np.zeros(3)
        bg_sd = np.full(3, spec.gyro_offset_radps / np.sqrt(3.0))
        p0 = enu_g[0]
        v0, v_sd = None, 3.0
        msgs.append("alignment: no static start; level from the first second (moving), gyro bias estimated on the way")
    if R0 is None:
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
        tilt_extra = 0.0 if static else np.radians(3.0)
    else:
        yaw_sd = float(np.arctan2(vel_sd_mps, np.linalg.norm(v0))) + np.radians(2.0)  # + sideslip allowance
        tilt_extra = (0.1 + 2.0 * vel_sd_mps / 3.0) / STANDARD_GRAVITY_MPS2  # fitted-acceleration error, rad
    ba0 = np.array([0.0, 0.0, np.linalg.norm(f_mean) - STANDARD_GRAVITY_MPS2]) if static else np.zeros(3)
    ba_sd = spec.accel_offset_mps2 / np.sqrt(3.0)
    tilt_sd = ba_sd / STANDARD_GRAVITY_MPS2 + tilt_extra
    sig_w = np.sqrt(np.median(var_h))
    sd = np.concatenate((
        [sig_w, sig_w, vertical_factor * sig_w], np.full(3, v_sd), [tilt_sd, tilt_sd, yaw_sd],
        np.full(3, ba_sd), bg_sd, np.zeros(3),
    ))
    P0 = np.diag(sd**2)
    # the start position is a fix, p0 = p + b + e: its error is -(b + e), so dp and db anticorrelate
    wv = wander**2
    P0[0:3, 0:3] += np.diag(wv)
    P0[15:18, 15:18] = np.diag(wv)
    P0[0:3, 15:18] = P0[15:18, 0:3] = -np.diag(wv)
    if not np.isfinite(p0[2]):
        p0 = np.array([p0[0], p0[1], 0.0])
    x0 = (np.asarray(p0, float), np.asarray(v0, float), R0, ba0, np.asarray(bg0, float), np.zeros(3))
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
    speed_mps: FloatArray | None = None,
    course_deg: FloatArray | None = None,
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
    speed_mps, course_deg
        (n,) receiver speed over ground, m/s, and true course over ground, degrees clockwise from
        north (``Track.speed_mps``, ``Track.course_deg``; NaN where absent). Where both are
        present the filter takes a horizontal velocity update east = v sin(course),
        north = v cos(course) (``velocity_sigma_mps``; speed only below ``course_min_speed_mps``).
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
    stated = bool(np.isfinite(sig).any())
    if np.isnan(sig).any():
        if np.isnan(sig).all():
            msgs.append(f"GNSS log has no accuracy: {cfg['default_sigma_h_m']:g} m (1-sigma) assumed")
        sig = np.where(np.isfinite(sig) & (sig > 0), sig, cfg["default_sigma_h_m"])
    vel = gnss_velocity_en(n, speed_mps, course_deg)
    check = check_imu(imu, t)
    msgs.extend(check.messages)
    if time_offset_s is not None:
        return _fuse_once(t, enu, sig, stated, vel, imu.shifted(float(time_offset_s)) if time_offset_s else imu, spec, cfg,
                          msgs, float(time_offset_s), "given", check.rate_hz)
    from .timing import estimate_time_offset

    est = estimate_time_offset(t, enu, imu, max_lag_s=cfg["max_offset_s"])
    msgs.append(est.message)
    offset = est.offset_s if est.significant else 0.0
    note = "estimated" if est.significant else "estimated, not significant: 0 used"
    return _fuse_once(t, enu, sig, stated, vel, imu.shifted(offset) if offset else imu, spec, cfg, msgs, offset, note,
                      check.rate_hz)


def gnss_velocity_en(n: int, speed_mps: FloatArray | None, course_deg: FloatArray | None) -> FloatArray:
    """(n, 3) receiver horizontal velocity east, north (m/s) and the reported speed, from speed
    and true course over ground (east = v sin(course), north = v cos(course)); NaN east/north
    where the course is missing, all NaN where the speed is."""
    out = np.full((n, 3), np.nan)
    if speed_mps is None:
        return out
    v = np.asarray(speed_mps, float)
    out[:, 2] = np.where(v >= 0, v, np.nan)
    if course_deg is not None:
        c = np.radians(np.asarray(course_deg, float))
        out[:, 0] = v * np.sin(c)
        out[:, 1] = v * np.cos(c)
    return out


def wander_model(sig: FloatArray, stated: bool, has_velocity: bool, cfg: dict) -> tuple[FloatArray, FloatArray, str]:
    """Receiver wander 1-sigma per axis (east, north, up), white horizontal 1-sigma per fix, and a
    description. The stated (or assumed) accuracy is taken as the total sqrt(white^2 + wander^2);
    the white part keeps at least 1/sqrt(2) of it (an equal split at most)."""
    med = float(np.median(sig))
    if cfg["wander_sigma_m"] is not None:
        w, how = float(cfg["wander_sigma_m"]), "given"
    elif has_velocity and (not stated or med > cfg["phone_accuracy_m"]):
        w, how = min(float(cfg["phone_wander_sigma_m"]), np.sqrt(0.5) * med), "phone-like log with velocities"
    else:
        w, how = max(cfg["small_wander_fraction"] * med, 1e-3), "small (log states sub-metre accuracy)"
    w = max(w, 1e-3)  # a strictly positive variance keeps the smoother's covariances invertible
    white = np.sqrt(np.maximum(sig**2 - w**2, 0.5 * sig**2))
    return np.array([w, w, cfg["vertical_factor"] * w]), white, f"{w:.3g} m, {cfg['wander_tau_s']:g} s ({how})"


def still_epochs(imu: ImuLog, epochs: FloatArray, spec: MemsSpec, half_window_s: float = 0.5) -> NDArray[np.bool_]:
    """(N,) True where the IMU looks still within +-``half_window_s`` of the epoch: per-axis
    scatter of accelerometer and gyro within 4x their white noise (the test of the static start,
    ``_static_prefix``), computed for all epochs at once from cumulative sums."""
    t = imu.time_s
    rate = 1.0 / float(np.median(np.diff(t)))
    lo = np.searchsorted(t, epochs - half_window_s)
    hi = np.searchsorted(t, epochs + half_window_s)
    cnt = (hi - lo).astype(float)
    ok = cnt >= 5
    out = np.zeros(len(epochs), bool)
    for x, lim in ((imu.accel_mps2, 4.0 * max(spec.accel_noise_mps2_rthz * np.sqrt(rate), 1e-3)),
                   (imu.gyro_radps, 4.0 * max(spec.gyro_noise_radps_rthz * np.sqrt(rate), 1e-4))):
        xc = x - x.mean(axis=0)
        c1 = np.vstack((np.zeros(3), np.cumsum(xc, axis=0)))
        c2 = np.vstack((np.zeros(3), np.cumsum(xc**2, axis=0)))
        n = np.maximum(cnt, 1.0)[:, None]
        m = (c1[hi] - c1[lo]) / n
        var = (c2[hi] - c2[lo]) / n - m**2
        out_x = (var < lim**2).all(axis=1)
        out = out_x if x is imu.accel_mps2 else out & out_x
    return out & ok


def _fuse_once(t, enu, sig, stated, vel, imu: ImuLog, spec: MemsSpec, cfg: dict, msgs: list[str], offset: float,
               offset_note: str, imu_rate_hz: float) -> FusedPath:
    """One fusion with the IMU already on the GNSS clock."""
    msgs = list(msgs)
    keep = (t >= imu.time_s[0]) & (t <= imu.time_s[-1]) & np.isfinite(enu[:, 0]) & np.isfinite(enu[:, 1])
    if keep.sum() < 3:
        raise InputError(imu.path, "fewer than 3 GNSS fixes fall inside the IMU log's time span")
    if (~keep).any():
        msgs.append(f"{int((~keep).sum())} GNSS fixes outside the IMU span (or without position) left out")
    t, enu, sig, vel = t[keep], enu[keep], sig[keep], vel[keep]
    has_vel = bool((np.isfinite(vel[:, 2]) & (vel[:, 2] >= cfg["course_min_speed_mps"]) & np.isfinite(vel[:, 0])).any())
    wander_sd, white, wander_note = wander_model(sig, stated, has_vel, cfg)
    var = np.column_stack((white**2, white**2, (cfg["vertical_factor"] * white) ** 2))
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
    # GNSS velocity: full horizontal velocity where the course is meaningful, "about this slow"
    # (v_h = 0, variance sigma^2 + speed^2) where the speed is below course_min_speed_mps
    sv = cfg["velocity_sigma_mps"]
    spd = vel[:, 2]
    moving = np.isfinite(vel[:, :2]).all(axis=1) & (spd >= cfg["course_min_speed_mps"])
    slow = np.isfinite(spd) & (spd < cfg["course_min_speed_mps"])
    zv = np.full((N, 2), np.nan)
    rv = np.full(N, np.nan)
    zv[fix_at[moving]] = vel[moving, :2]
    rv[fix_at[moving]] = sv**2
    zv[fix_at[slow]] = 0.0
    rv[fix_at[slow]] = sv**2 + spd[slow] ** 2
    n_vel = int((moving | slow).sum())
    vel_for_align = np.where(moving[:, None], vel[:, :2], np.nan)
    x0, P0, static_end, amsgs = align(imu, t, enu, var[:, 0], spec, cfg["vertical_factor"],
                                      vel_en=vel_for_align if n_vel else None, vel_sd_mps=sv, wander_m=wander_sd)
    msgs.extend(amsgs)
    zupt = epochs <= static_end
    zupt[0] = zupt[0] and static_end > epochs[0]
    still = still_epochs(imu, epochs, spec)
    wander = Wander(wander_sd, float(cfg["wander_tau_s"]))
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
        run = run_filter(x0, P0, pre, z, r, zupt, q_ba, q_bg, wander, gate_prob=cfg["gate_prob"],
                         zupt_sigma_mps=cfg["zupt_sigma_mps"], z_vel=zv if n_vel else None, r_vel=rv,
                         still=still, zupt_max_speed_mps=cfg["zupt_max_speed_mps"])
        xs, Ps = rts_smooth(run)
        ba_lin, bg_lin = xs.ba[:-1].copy(), xs.bg[:-1].copy()
    rejected = int(run.rejected.sum())
    if rejected:
        msgs.append(f"{rejected} GNSS fixes refused by the innovation gate")
    vel_used, vel_rejected = int(run.vel_accepted.sum()), int(run.vel_rejected.sum())
    if n_vel:
        msgs.append(f"GNSS velocity updates: {vel_used} used, {vel_rejected} refused by the gate")
    stops = [ab for ab in _runs(epochs, run.zupt) if ab[0] > epochs[0]]  # not the static start
    if stops:
        msgs.append(f"{len(stops)} stops held by zero-velocity updates ({sum(b - a for a, b in stops):.0f} s)")
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
        "fusion": "GNSS/IMU error-state EKF (18 states: 15 + receiver wander) + RTS smoother on preintegrated IMU",
        "gnss_wander": wander_note,
        "velocity_updates": vel_used,
        "velocity_rejected": vel_rejected,
        "zero_velocity_epochs": int(run.zupt.sum()),
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
                               "stationary_speed_mps", "velocity_sigma_mps", "course_min_speed_mps")},
    }
    return FusedPath(
        **path, outage=out_mask, outages=tuple(outages), epoch_time_s=epochs, accel_bias_mps2=xs.ba,
        gyro_bias_radps=xs.bg, bias_sd=bias_sd, epoch_cov=Ps, time_offset_s=offset, fixes_used=int(run.accepted.sum()),
        fixes_rejected=rejected, settings=settings_out, messages=tuple(msgs), gnss_wander_m=xs.wb,
        epoch_zupt=run.zupt.copy(), stops=tuple(stops),
    )


def _runs(epochs: FloatArray, mask: NDArray[np.bool_]) -> list[tuple[float, float]]:
    """(start_s, end_s) of every run of consecutive True epochs."""
    d = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
    starts, ends = np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1
    return [(float(epochs[a]), float(epochs[b])) for a, b in zip(starts, ends)]


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
