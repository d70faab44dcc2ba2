"""Synthetic GNSS velocity (speed and course over ground) for the fusion tests and benchmarks.

A receiver measures its velocity from the carrier Doppler shift, so its error is close to white
from epoch to epoch and does not share the slow position wander (Groves 2013, ch. 9 and 14). The
model here: horizontal velocity = true velocity + white Gaussian noise of ``sigma_mps`` per axis
(east, north); the receiver reports speed = |v_h| and true course = atan2(east, north) in degrees
clockwise from north. The default 0.15 m/s is the phone Doppler class, 0.1-0.2 m/s (from memory).
Optionally the course is left empty below a speed, as many receivers do when standing still.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]

#: Phone-class Doppler velocity noise per horizontal axis, m/s (from memory: 0.1-0.2 m/s).
PHONE_VELOCITY_SIGMA_MPS = 0.15


def gnss_velocity(velocity_mps: FloatArray, sigma_mps: float = PHONE_VELOCITY_SIGMA_MPS,
                  rng: np.random.Generator | None = None,
                  blank_course_below_mps: float = 0.0) -> tuple[FloatArray, FloatArray]:
    """Receiver speed over ground and true course from true velocities.

    Parameters
    ----------
    velocity_mps
        (n, 3) true velocity, east, north, up, m/s.
    sigma_mps
        White noise per horizontal axis, m/s.
    blank_course_below_mps
        Course reported as NaN where the measured speed is below this.

    Returns
    -------
    speed_mps, course_deg
        (n,) speed over ground, m/s, and course in [0, 360) degrees clockwise from true north.
    """
    rng = rng or np.random.default_rng()
    v = np.asarray(velocity_mps, float)[:, :2] + rng.standard_normal((len(velocity_mps), 2)) * sigma_mps
    speed = np.hypot(v[:, 0], v[:, 1])
    course = np.degrees(np.arctan2(v[:, 0], v[:, 1])) % 360.0
    course = np.where(speed < blank_course_below_mps, np.nan, course)
    return speed, course
