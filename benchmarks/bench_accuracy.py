"""Accuracy benchmark: ours vs the naive cubic-spline baseline on closed-form cases.

Run: /tmp/v/bin/python benchmarks/bench_accuracy.py   (prints one table)
"""

import numpy as np

from baseline import baseline_kappa_tau
from survey import synthetic as S
from survey.frame import LocalFrame
from survey.profile_build import build_profile

FRAME = LocalFrame.enu(46.5, 7.6, 800.0)


def ours(f):
    tr = S.fixes_to_track(f, FRAME.inverse)
    e, n, u = FRAME.forward(tr.lat_deg, tr.lon_deg, tr.height_m)
    return build_profile(tr, np.column_stack([e, n, u]), FRAME)


def rel(a, b):
    return np.abs(a / b - 1)


def case(name, traj, grade, rng, corrupt=False):
    f = S.add_gnss_error(traj, grade, rng)
    if corrupt:
        f = S.add_outliers(f, 0.01, 30.0, rng)
        f = S.duplicate_fixes(S.add_outage(f, 0.3 * (traj.time_s[-1] - traj.time_s[0]), 5.0), 0.01, rng)
    p = ours(f)
    truth = traj.truth_at_chainage(p.chainage_m)
    kt, tt = truth["curvature_per_m"], truth["torsion_per_m"]
    curved = kt > 0.5 * np.max(kt)
    tb, kb, taub = baseline_kappa_tau(f.time_s, f.enu_m)
    sb = np.interp(tb, traj.time_s, traj.chainage_m)
    trb = traj.truth_at_chainage(sb)
    cb = trb["curvature_per_m"] > 0.5 * np.max(trb["curvature_per_m"])
    row = {
        "kappa_med": np.median(rel(p.curvature_per_m[curved], kt[curved])),
        "kappa_rms": np.sqrt(np.mean(rel(p.curvature_per_m[curved], kt[curved]) ** 2)),
        "tau_med": np.nanmedian(rel(p.torsion_per_m[curved], tt[curved])) if np.nanmax(np.abs(tt)) > 0 else np.nan,
        "tau_p95_over_kappa": np.nanpercentile(np.abs(p.torsion_per_m), 95) / np.median(kt[curved]),
        "len_err": abs(p.settings["path_length_m"] / traj.length_m - 1),
        "b_kappa_med": np.median(rel(kb[cb], trb["curvature_per_m"][cb])),
        "b_tau_med": np.nanmedian(rel(taub[cb], trb["torsion_per_m"][cb])) if np.nanmax(np.abs(tt)) > 0 else np.nan,
        "b_tau_p95_over_kappa": np.nanpercentile(np.abs(taub), 95) / np.median(kt[curved]),
    }
    print(f"{name:28s} " + " ".join(f"{row[k]:9.4f}" for k in row))


if __name__ == "__main__":
    rng = np.random.default_rng(2024)
    print(f"{'case':28s} " + " ".join(f"{k[:9]:>9s}" for k in
          ["kappa_med", "kappa_rms", "tau_med", "tauP95/k", "len_err", "B_kap_med", "B_tau_med", "B_tP95/k"]))
    hx = S.helix(50, 5, 10, 10, 3)
    case("helix RTK 10Hz", hx, "rtk", rng)
    case("helix phone 10Hz", hx, "phone", rng)
    case("helix phone +outl/outage/dup", hx, "phone", rng, corrupt=True)
    case("road dual 10Hz 80km/h", S.road_alignment(), "dual", rng)
    case("road dual +outl/outage/dup", S.road_alignment(), "dual", rng, corrupt=True)
    case("road phone 1Hz", S.road_alignment(rate_hz=1.0), "phone", rng)
    case("plane loop dual 5Hz", S.plane_loop(), "dual", rng)
    case("switchbacks R8 phone 1Hz", S.switchbacks(), "phone", rng)
    case("switchbacks R8 dual 1Hz", S.switchbacks(), "dual", rng)
