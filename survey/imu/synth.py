"""IMU ground truth from the closed-form curves of ``survey.synthetic``, and a consumer-MEMS
error model to turn it into a log.

Motion
------
The mover stands still for ``static_s`` seconds (a static start, as loggers are usually switched
on at rest), accelerates smoothly to ``speed_mps`` over ``ramp_s`` seconds (raised-cosine
acceleration, so acceleration and jerk stay finite), then keeps that speed to the end of the
curve, except at optional stops: at each ``(chainage_m, duration_s)`` the mover brakes over ``ramp_s``
(the mirror of the start ramp), stands still for the duration and pulls away again. Chainage s(t)
is closed form; the curve parameter u(s) comes from the curve's arc-length
table. With r' = dr/du, r'' and the speed s' and s'':

    velocity      = r' u',                 u'  = s' / |r'|
    acceleration  = r'' u'^2 + r' u'',     u'' = s'' / |r'| - s'^2 (r' . r'') / |r'|^4

Attitude (local frame east, north, up; body x forward, y left, z up): x along the curve tangent
(no sideslip), y level and to the left before banking, z completing the right-handed frame, then a
bank rotation about x by ``bank(chainage, plan curvature, speed)`` -- positive means the left side
is low, i.e. leaning into a left bend (same sign as plan curvature). Angular rate in the body
frame is the rotation between C(t - h) and C(t + h), omega = Log(C(t-h)^T C(t+h)) / (2h) with
h = 1 ms (central difference, error O(h^2) -- far below any sensor noise). Specific force is
f_b = C^T (a + (0, 0, g)) with standard gravity (flat local frame: the Earth's rotation, 15 deg/h,
and the transport rate are left out -- below the consumer-MEMS bias the filter estimates anyway).

Sensor errors (``MemsSpec``)
----------------------------
``MPU9250`` uses the InvenSense MPU-9250 product specification (PS-MPU-9250A-01, consumer MEMS;
see /work/shared/REFERENCES.md): gyro rate noise 0.01 deg/s/sqrt(Hz), gyro zero-rate offset
+-5 deg/s, accelerometer noise 300 ug/sqrt(Hz), zero-g offset +-60 mg. Bias drift (random walk)
is not in the datasheet: the values here are common practice for consumer parts. White noise of
spectral density N becomes a per-sample standard deviation N sqrt(rate), so its integral has
variance N^2 t (angle / velocity random walk; Groves 2013, ch. 4).

The datasheet offsets are uncalibrated tolerances. ``MPU9250`` draws the gyro turn-on offset from
the full +-5 deg/s range (a static start measures it) but the accelerometer from a residual of
+-5 mg left by an ordinary calibration (common practice); ``MPU9250_UNCALIBRATED`` uses the full
+-60 mg. A horizontal accelerometer bias cannot be told from a tilt on a level road (it is
unobservable without roll and pitch manoeuvres), so it sets the floor of the bank accuracy:
about bias / g radians.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable

import numpy as np
from numpy.typing import NDArray
from scipy.spatial.transform import Rotation

from ..synthetic import Curve, Trajectory, frenet_from_derivatives
from .reader import STANDARD_GRAVITY_MPS2, ImuLog

FloatArray = NDArray[np.float64]
DEG = np.pi / 180.0
MILLI_G = 1e-3 * STANDARD_GRAVITY_MPS2

BankFn = Callable[[FloatArray, FloatArray, FloatArray], FloatArray]


@dataclass(frozen=True)
class MemsSpec:
    """Inertial sensor error sizes (SI).

    Attributes
    ----------
    gyro_noise_radps_rthz, accel_noise_mps2_rthz
        White-noise spectral densities (rad/s/sqrt(Hz), m/s^2/sqrt(Hz)).
    gyro_offset_radps, accel_offset_mps2
        Half-width of the uniform turn-on bias per axis.
    gyro_bias_walk_radps_rts, accel_bias_walk_mps2_rts
        Bias random walk (rad/s/sqrt(s), m/s^2/sqrt(s)).
    name
        Label for tables.
    """

    gyro_noise_radps_rthz: float
    accel_noise_mps2_rthz: float
    gyro_offset_radps: float
    accel_offset_mps2: float
    gyro_bias_walk_radps_rts: float
    accel_bias_walk_mps2_rts: float
    name: str = "mems"


#: MPU-9250 datasheet noise densities and gyro offset (PS-MPU-9250A-01); accelerometer offset a
#: calibrated residual of 5 mg and bias walks of consumer-MEMS order (common practice).
MPU9250 = MemsSpec(
    gyro_noise_radps_rthz=0.01 * DEG,
    accel_noise_mps2_rthz=300e-6 * STANDARD_GRAVITY_MPS2,
    gyro_offset_radps=5.0 * DEG,
    accel_offset_mps2=5.0 * MILLI_G,
    gyro_bias_walk_radps_rts=1e-5,
    accel_bias_walk_mps2_rts=5e-5,
    name="MPU-9250 class",
)

#: As ``MPU9250`` but with the datasheet's full zero-g offset, +-60 mg (PS-MPU-9250A-01).
MPU9250_UNCALIBRATED = replace(MPU9250, accel_offset_mps2=60.0 * MILLI_G, name="MPU-9250 uncalibrated")


def superelevation_bank(e_per_kappa_m: float, e_max: float = 0.10) -> BankFn:
    """Road bank: superelevation e = clip(e_per_kappa_m * plan kappa, +-e_max), bank = atan(e).

    Superelevation develops along the transition spiral in proportion to curvature (common
    practice for superelevation runoff), so the bank changes smoothly where curvature does.
    """

    def bank(chainage_m, plan_kappa_per_m, speed_mps):
        return np.arctan(np.clip(e_per_kappa_m * plan_kappa_per_m, -e_max, e_max))

    return bank


def coordinated_bank(chainage_m, plan_kappa_per_m, speed_mps):
    """Bank of a coordinated turn (drone, cyclist): tan(bank) = v^2 kappa / g (physics)."""
    return np.arctan(speed_mps**2 * plan_kappa_per_m / STANDARD_GRAVITY_MPS2)


def no_bank(chainage_m, plan_kappa_per_m, speed_mps):
    """Level body (no roll)."""
    return np.zeros_like(np.asarray(chainage_m, float))


@dataclass(frozen=True, eq=False)
class ImuTruth:
    """Exact motion at the IMU sample times (local frame east, north, up; body FLU).

    Attributes
    ----------
    time_s, enu_m, velocity_mps, accel_mps2
        Time, position, velocity and acceleration in the local frame.
    attitude
        (n, 3, 3) rotation matrices C_nb (body -> local).
    bank_rad, pitch_rad, yaw_rad
        Bank (+ = left side low), pitch (+ = nose up), yaw (course of body x, anticlockwise from
        east).
    gyro_radps, specific_force_mps2
        Error-free body-frame angular rate and specific force.
    chainage_m, curvature_per_m, torsion_per_m, plan_curvature_per_m
        Exact path geometry at each sample.
    """

    time_s: FloatArray
    enu_m: FloatArray
    velocity_mps: FloatArray
    accel_mps2: FloatArray
    attitude: FloatArray
    bank_rad: FloatArray
    pitch_rad: FloatArray
    yaw_rad: FloatArray
    gyro_radps: FloatArray
    specific_force_mps2: FloatArray
    chainage_m: FloatArray
    curvature_per_m: FloatArray
    torsion_per_m: FloatArray
    plan_curvature_per_m: FloatArray
    motion: "Motion"

    def __len__(self) -> int:
        return len(self.time_s)

    def trajectory(self, time_s: FloatArray, name: str = "imu truth") -> Trajectory:
        """Exact ``survey.synthetic.Trajectory`` at other times (e.g. GNSS fixes), for
        ``add_gnss_error`` / ``add_outage``."""
        k = self.motion.kinematics(np.asarray(time_s, float))
        return Trajectory(
            time_s=np.asarray(time_s, float).copy(), enu_m=k["enu_m"], velocity_mps=k["velocity_mps"],
            chainage_m=k["chainage_m"], curvature_per_m=k["curvature_per_m"], torsion_per_m=k["torsion_per_m"],
            plan_curvature_per_m=k["plan_curvature_per_m"], name=name, curve=self.motion.curve,
            length_m=self.motion.length_m,
        )

    def at(self, time_s: FloatArray) -> dict[str, FloatArray]:
        """Exact kinematics and attitude at arbitrary times (see ``Motion.kinematics``)."""
        return self.motion.kinematics(np.asarray(time_s, float), with_attitude=True)


@dataclass(frozen=True, eq=False)
class Motion:
    """Closed-form chainage s(t) along a curve with a static start and a smooth ramp."""

    curve: Curve
    speed_mps: float
    static_s: float
    ramp_s: float
    bank: BankFn
    t0_s: float
    u_table: FloatArray
    s_table: FloatArray
    stops: tuple[tuple[float, float], ...] = ()

    @property
    def length_m(self) -> float:
        return float(self.s_table[-1])

    @property
    def duration_s(self) -> float:
        """Time to reach the end of the curve, s."""
        ramp_len = 0.5 * self.speed_mps * self.ramp_s
        lost = sum(self.ramp_s + d for _, d in self.stops)
        return self.static_s + self.ramp_s + (self.length_m - ramp_len) / self.speed_mps + lost

    def stop_times(self) -> list[tuple[float, float]]:
        """(brake start, pull-away start) times of every stop; standing still from brake start +
        ramp_s to pull-away start."""
        V, T = self.speed_mps, self.ramp_s
        out, lost = [], 0.0
        for c, d in self.stops:
            ta = self.t0_s + self.static_s + c / V + lost
            out.append((ta, ta + T + d))
            lost += T + d
        return out

    def chainage(self, time_s: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray]:
        """(s, s', s'') at times: raised-cosine acceleration a = V/T (1 - cos(2 pi tau/T)); each stop
        subtracts a pull-away ramp started at the brake time and adds one back at the pull-away
        time (speed V (1 - ramp(t - ta) + ramp(t - tb)))."""
        t = np.asarray(time_s, float)
        s, sd, sdd = self._ramp(t - self.t0_s - self.static_s)
        for ta, tb in self.stop_times():
            for sign, t_ref in ((-1.0, ta), (1.0, tb)):
                a, b, c = self._ramp(t - t_ref)
                s, sd, sdd = s + sign * a, sd + sign * b, sdd + sign * c
        s = np.minimum(s, self.length_m)
        return s, sd, sdd

    def _ramp(self, tau: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray]:
        """Chainage, speed and acceleration of one pull-away from rest at tau = 0."""
        V, T = self.speed_mps, self.ramp_s
        s = np.zeros_like(tau)
        sd = np.zeros_like(tau)
        sdd = np.zeros_like(tau)
        if T > 0:
            r = (tau > 0) & (tau < T)
            w = 2.0 * np.pi / T
            x = tau[r]
            sdd[r] = V / T * (1.0 - np.cos(w * x))
            sd[r] = V / T * (x - np.sin(w * x) / w)
            s[r] = V / T * (0.5 * x**2 + (np.cos(w * x) - 1.0) / w**2)
        c = tau >= T
        s[c] = 0.5 * V * T + V * (tau[c] - T)
        sd[c] = V
        return s, sd, sdd

    def kinematics(self, time_s: FloatArray, with_attitude: bool = False) -> dict[str, FloatArray]:
        """Position, velocity, acceleration, chainage and geometry (plus attitude) at times."""
        s, sd, sdd = self.chainage(time_s)
        u = np.interp(s, self.s_table, self.u_table)
        r, d1, d2, d3 = self.curve.evaluate(u)
        n1 = np.linalg.norm(d1, axis=1)
        ud = sd / n1
        udd = sdd / n1 - sd**2 * np.einsum("ij,ij->i", d1, d2) / n1**4
        k, tau, pk = frenet_from_derivatives(d1, d2, d3)
        out = {
            "chainage_m": s, "enu_m": r, "velocity_mps": d1 * ud[:, None],
            "accel_mps2": d2 * (ud**2)[:, None] + d1 * udd[:, None],
            "curvature_per_m": k, "torsion_per_m": tau, "plan_curvature_per_m": pk, "speed_mps": sd,
        }
        if with_attitude:
            tan = d1 / n1[:, None]
            y0 = np.cross(np.array([0.0, 0.0, 1.0]), tan)
            y0 /= np.linalg.norm(y0, axis=1, keepdims=True)
            z0 = np.cross(tan, y0)
            beta = np.asarray(self.bank(s, pk, sd), float)
            cb, sb = np.cos(beta)[:, None], np.sin(beta)[:, None]
            yb = cb * y0 - sb * z0
            zb = sb * y0 + cb * z0
            out["attitude"] = np.stack((tan, yb, zb), axis=2)  # columns = body axes in local frame
            out["bank_rad"] = beta
            out["pitch_rad"] = np.arcsin(np.clip(tan[:, 2], -1, 1))
            out["yaw_rad"] = np.arctan2(tan[:, 1], tan[:, 0])
        return out


def make_motion(curve: Curve, speed_mps: float, static_s: float = 10.0, ramp_s: float = 5.0,
                bank: BankFn = no_bank, t0_s: float = 0.0, stops=()) -> Motion:
    """A ``Motion`` along ``curve`` (see module docstring); ``stops`` are ``(chainage_m,
    duration_s)`` pairs in increasing chainage, at least ``speed_mps * ramp_s`` apart."""
    u_tab, s_tab = curve.arc_length_table()
    return Motion(curve, float(speed_mps), float(static_s), float(ramp_s), bank, float(t0_s), u_tab, s_tab,
                  tuple((float(c), float(d)) for c, d in stops))


def imu_truth(motion: Motion, rate_hz: float = 200.0, jitter: float = 0.0,
              rng: np.random.Generator | None = None, chunk: int = 200_000) -> ImuTruth:
    """Exact IMU-rate motion, attitude, angular rate and specific force along ``motion``.

    ``jitter`` is uniform timing jitter as a fraction of the interval (< 0.5).
    """
    rng = rng or np.random.default_rng(0)
    dt = 1.0 / rate_hz
    t = motion.t0_s + np.arange(0.0, motion.duration_s, dt)
    if jitter:
        t = t + rng.uniform(-jitter, jitter, len(t)) * dt
        t[0] = motion.t0_s
    parts = [_truth_chunk(motion, t[a : a + chunk]) for a in range(0, len(t), chunk)]
    cols = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    return ImuTruth(time_s=t, motion=motion, **cols)


def _truth_chunk(motion: Motion, t: FloatArray, h: float = 1e-3) -> dict[str, FloatArray]:
    k = motion.kinematics(t, with_attitude=True)
    Cm = motion.kinematics(t - h, with_attitude=True)["attitude"]
    Cp = motion.kinematics(t + h, with_attitude=True)["attitude"]
    rel = np.einsum("nji,njk->nik", Cm, Cp)  # C(t-h)^T C(t+h)
    gyro = Rotation.from_matrix(rel).as_rotvec() / (2.0 * h)
    C = k["attitude"]
    g = np.array([0.0, 0.0, STANDARD_GRAVITY_MPS2])
    f = np.einsum("nji,nj->ni", C, k["accel_mps2"] + g)
    return {
        "enu_m": k["enu_m"], "velocity_mps": k["velocity_mps"], "accel_mps2": k["accel_mps2"],
        "attitude": C, "bank_rad": k["bank_rad"], "pitch_rad": k["pitch_rad"], "yaw_rad": k["yaw_rad"],
        "gyro_radps": gyro, "specific_force_mps2": f, "chainage_m": k["chainage_m"],
        "curvature_per_m": k["curvature_per_m"], "torsion_per_m": k["torsion_per_m"],
        "plan_curvature_per_m": k["plan_curvature_per_m"],
    }


@dataclass(frozen=True, eq=False)
class SensorErrors:
    """The errors ``simulate_imu`` added: (n, 3) gyro and accelerometer biases at every sample."""

    gyro_bias_radps: FloatArray
    accel_bias_mps2: FloatArray


def simulate_imu(truth: ImuTruth, spec: MemsSpec = MPU9250, rng: np.random.Generator | None = None,
                 path: str = "synthetic imu") -> tuple[ImuLog, SensorErrors]:
    """Add white noise, a turn-on bias and a bias random walk (``spec``) to the truth."""
    rng = rng or np.random.default_rng(0)
    t = truth.time_s
    n = len(t)
    dt = np.diff(t, prepend=t[0] - np.median(np.diff(t)))
    rate = 1.0 / float(np.median(dt))

    def bias(offset, walk):
        b0 = rng.uniform(-offset, offset, 3)
        steps = rng.standard_normal((n, 3)) * walk * np.sqrt(dt)[:, None]
        steps[0] = 0.0
        return b0 + np.cumsum(steps, axis=0)

    bg = bias(spec.gyro_offset_radps, spec.gyro_bias_walk_radps_rts)
    ba = bias(spec.accel_offset_mps2, spec.accel_bias_walk_mps2_rts)
    gyro = truth.gyro_radps + bg + rng.standard_normal((n, 3)) * spec.gyro_noise_radps_rthz * np.sqrt(rate)
    acc = truth.specific_force_mps2 + ba + rng.standard_normal((n, 3)) * spec.accel_noise_mps2_rthz * np.sqrt(rate)
    log = ImuLog(t.copy(), acc, gyro, path=path, notes=(f"synthetic, {spec.name}",))
    return log, SensorErrors(bg, ba)


def write_imu_csv(path: str, log: ImuLog, time_column: str = "time") -> None:
    """Write an IMU log as CSV (``time,ax_mps2,...,gz_radps``) atomically (``survey.atomic``)."""
    import io

    from ..atomic import atomic_write_bytes

    data = np.column_stack((log.time_s, log.accel_mps2, log.gyro_radps))
    buf = io.StringIO()
    np.savetxt(buf, data, fmt=["%.6f"] + ["%.9g"] * 6, delimiter=",",
               header=f"{time_column},ax_mps2,ay_mps2,az_mps2,gx_radps,gy_radps,gz_radps", comments="")
    atomic_write_bytes(path, buf.getvalue().encode())
