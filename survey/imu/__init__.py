"""GNSS/IMU fusion: IMU CSV reader and checks, synthetic IMU truth, error-state Kalman filter
with Rauch-Tung-Striebel smoothing, GNSS-IMU time offset, and the top-level ``fuse``.

Modules: ``reader`` (IMU CSV -> ``ImuLog``, ``check_imu``), ``synth`` (IMU truth from the
closed-form curves, MEMS error model), ``preint`` (vectorised IMU preintegration between GNSS
epochs), ``eskf`` (18-state error-state filter at the GNSS rate: 15 + receiver wander), ``gnss_synth``
(synthetic receiver speed and course), ``rts`` (smoother), ``timing``
(offset by cross-correlation), ``fuse`` (everything strung together -> ``FusedPath``).
"""

from .reader import ImuCheck, ImuLog, check_imu, read_imu_csv

__all__ = ["ImuCheck", "ImuLog", "check_imu", "read_imu_csv"]
