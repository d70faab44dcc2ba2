"""IMU CSV reader and checks: columns, units, axes, times, bad rows, rate/gap/saturation/overlap."""

from datetime import datetime, timezone

import numpy as np
import pytest

from survey.errors import InputError
from survey.imu.reader import check_imu, read_imu_csv

G0 = 9.80665  # standard gravity, m/s^2 (3rd CGPM, 1901)


def _read(text: str, **kw):
    return read_imu_csv("imu.csv", data=text.encode(), **kw)


def _rows(n=10, dt=0.01, t0=1_700_000_000.0, az=G0):
    return "".join(f"{t0 + i * dt:.3f},0,0,{az},0,0,0.1\n" for i in range(n))


def test_reads_si_columns_with_unit_suffixes():
    log = _read("time,ax_mps2,ay_mps2,az_mps2,gx_radps,gy_radps,gz_radps\n" + _rows())
    assert len(log) == 10
    np.testing.assert_allclose(log.accel_mps2[0], [0, 0, G0])
    np.testing.assert_allclose(log.gyro_radps[0], [0, 0, 0.1])
    assert log.time_s[0] == pytest.approx(1_700_000_000.0)


def test_g_and_degrees_per_second_are_converted_to_si():
    # 1 g = 9.80665 m/s^2 (CGPM 1901); 180 deg/s = pi rad/s (definition of the degree)
    log = _read("time,ax_g,ay_g,az_g,gx_dps,gy_dps,gz_dps\n1700000000,0,0,1,180,0,0\n1700000000.01,0,0,1,0,0,0\n")
    assert log.accel_mps2[0, 2] == pytest.approx(G0)
    assert log.gyro_radps[0, 0] == pytest.approx(np.pi)


def test_bare_columns_take_units_from_options_and_fail_without_them():
    text = "time,ax,ay,az,gx,gy,gz\n1700000000,0,0,1,0,0,90\n1700000000.01,0,0,1,0,0,90\n"
    log = _read(text, accel_unit="g", gyro_unit="dps")
    assert log.gyro_radps[0, 2] == pytest.approx(np.pi / 2)
    with pytest.raises(InputError, match="no unit suffix"):
        _read(text)


def test_forward_right_down_axes_become_forward_left_up():
    # At rest a level IMU reads specific force +g along "up": -g on an FRD z axis (physics).
    text = "time,ax_mps2,ay_mps2,az_mps2,gx_radps,gy_radps,gz_radps\n" + _rows(az=-G0).replace(",0.1\n", ",-0.1\n")
    log = _read(text, axes="frd")
    np.testing.assert_allclose(log.accel_mps2[:, 2], G0)
    # a right turn in FRD is +gz; in FLU it is -gz: here -0.1 FRD (left turn) -> +0.1 FLU
    np.testing.assert_allclose(log.gyro_radps[:, 2], 0.1)


def test_iso_8601_times_match_the_standard_library():
    text = ("time,ax_mps2,ay_mps2,az_mps2,gx_radps,gy_radps,gz_radps\n"
            "2024-05-01T12:00:00Z,0,0,9.8,0,0,0\n2024-05-01T12:00:00.005Z,0,0,9.8,0,0,0\n")
    log = _read(text)
    ref = datetime(2024, 5, 1, 12, tzinfo=timezone.utc).timestamp()  # Python stdlib as oracle
    np.testing.assert_allclose(log.time_s, [ref, ref + 0.005])


def test_relative_time_needs_an_offset_which_is_added():
    text = "time_s,ax_mps2,ay_mps2,az_mps2,gx_radps,gy_radps,gz_radps\n0,0,0,9.8,0,0,0\n0.01,0,0,9.8,0,0,0\n"
    with pytest.raises(InputError, match="--imu-time-offset"):
        _read(text)
    log = _read(text, time_offset_s=1_700_000_000.0)
    np.testing.assert_allclose(log.time_s, [1_700_000_000.0, 1_700_000_000.01])


def test_a_cell_that_is_not_a_number_names_its_line():
    text = "time,ax_mps2,ay_mps2,az_mps2,gx_radps,gy_radps,gz_radps\n1,0,0,9.8,0,0,0\n2,0,zz,9.8,0,0,0\n"
    with pytest.raises(InputError, match=r"imu.csv: line 3: ay_mps2 'zz' is not a number"):
        _read(text)


def test_rows_with_missing_values_are_dropped_and_counted():
    text = ("time,ax_mps2,ay_mps2,az_mps2,gx_radps,gy_radps,gz_radps\n"
            "1,0,0,9.8,0,0,0\n2,0,,9.8,0,0,0\n3,0,0,nan,0,0,0\n4,0,0,9.8,0,0,0\n")
    log = _read(text)
    assert len(log) == 2
    assert log.dropped == {"missing value": 2}


def test_time_going_backwards_is_an_error_naming_the_line():
    text = "time,ax_mps2,ay_mps2,az_mps2,gx_radps,gy_radps,gz_radps\n5,0,0,9.8,0,0,0\n6,0,0,9.8,0,0,0\n4,0,0,9.8,0,0,0\n"
    with pytest.raises(InputError, match="line 4: time goes backwards"):
        _read(text)


def test_missing_gyro_columns_are_an_error():
    with pytest.raises(InputError, match=r"no gyro \(gx gy gz\) columns"):
        _read("time,ax_mps2,ay_mps2,az_mps2\n1,0,0,9.8\n2,0,0,9.8\n")


def test_check_reports_rate_gaps_and_saturation():
    t = np.arange(0.0, 10.0, 0.005)
    t = np.delete(t, np.arange(1000, 1100))  # a 0.5 s gap
    acc = np.tile([0.0, 0.0, G0], (len(t), 1))
    gyr = np.zeros((len(t), 3))
    gyr[300:320, 2] = 250 * np.pi / 180  # pinned at +-250 deg/s full scale (MPU-9250 range)
    from survey.imu.reader import ImuLog

    chk = check_imu(ImuLog(t, acc, gyr), gnss_time_s=np.arange(0.0, 10.0, 1.0))
    assert chk.rate_hz == pytest.approx(200.0)
    assert len(chk.gaps) == 1 and chk.gaps[0][1] - chk.gaps[0][0] == pytest.approx(0.505)
    assert chk.saturated["gyro"] == 20
    assert chk.saturated["accel"] == 0


def test_check_refuses_an_imu_log_that_does_not_overlap_the_gnss_log():
    from survey.imu.reader import ImuLog

    imu = ImuLog(np.arange(0.0, 5.0, 0.01), np.zeros((500, 3)), np.zeros((500, 3)), path="imu.csv")
    with pytest.raises(InputError, match="do not overlap the GNSS log"):
        check_imu(imu, gnss_time_s=np.arange(100.0, 200.0))


def test_written_log_reads_back():
    from survey.imu.synth import write_imu_csv
    from survey.imu.reader import ImuLog

    rng = np.random.default_rng(0)
    log = ImuLog(1.7e9 + np.arange(50) * 0.005, rng.normal(size=(50, 3)), rng.normal(size=(50, 3)))
    import tempfile, os

    with tempfile.TemporaryDirectory() as d:
        p = os.path.join(d, "imu.csv")
        write_imu_csv(p, log)
        back = read_imu_csv(p)
    np.testing.assert_allclose(back.time_s, log.time_s, atol=1e-6)
    np.testing.assert_allclose(back.accel_mps2, log.accel_mps2, rtol=1e-8)
    np.testing.assert_allclose(back.gyro_radps, log.gyro_radps, rtol=1e-8)
