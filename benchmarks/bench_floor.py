"""Information floors: how well ANY method could do on the accuracy benchmark's receiver error,
even one told far more than trackframe is.

Run:  python benchmarks/bench_floor.py [--draws 200] [--seed 0]
Prints one table. The receiver error is the accuracy benchmark's (``survey.synthetic``:
white noise plus a first-order Gauss-Markov wander per axis, ``GNSS_GRADES``). Three floors:

* **Helix torsion, vertical rate by GLS.** On the benchmark's helix (a = 50 m, c = 5 m/rad,
  10 m/s, 10 Hz, 3 turns) the height is exactly linear in time and tau = c/(a^2+c^2) scales
  with the climb rate (d tau / tau = (a^2-c^2)/(a^2+c^2) dc/c, 0.98 dc/c). An estimator TOLD that
  the climb is steady over a window gets the rate at best with the generalised least-squares
  variance (X' S^-1 X)^-1 (Aitken 1935, the best linear unbiased estimate; with Gaussian error
  also the Cramer-Rao bound -- from memory), S the exact error covariance: white r I plus the
  Gauss-Markov sigma^2 exp(-|dt|/tau_c) (the process's closed-form covariance, common practice).
  Shown for the whole 95 s log and for one turn (31.6 s). The median |error| of a Gaussian
  estimate is 0.6745 sigma.
* **Circle-fit oracle radius.** For every circular arc of a case (fixes whose TRUE curvature is
  within 1 % of the case's maximum: the arc is known exactly, and that it is a circle), the
  plan radius from a geometric least-squares circle fit of those fixes
  (``scipy.optimize.least_squares``, distance to the circle); the helix is fitted turn by turn.
  Not a strict bound (a fit that also used the legs or the error covariance could do a little
  better), but far more than any general smoother is told. Monte Carlo over ``--draws`` draws.
* **Chainage at the two ends** (the accuracy table's ``lenF``): the along-track wander at the first
  and last fix is not observable from positions, sd = sqrt(2 g^2 (1 - exp(-T/tau))) / length.

Each row prints the issue's target beside the floor. A target below the floor cannot be met by
any method from those positions; a floor close to the target leaves a general smoother (which is
not told where the arcs are) no room.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
from scipy.optimize import least_squares

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from survey import synthetic as S  # noqa: E402

GAUSS_MEDIAN = 0.6745  # median of |N(0, 1)|


def gls_rate_sd(time_s: np.ndarray, white_var: float, wander_var: float, tau_s: float) -> float:
    """1-sigma of the GLS slope of z = z0 + w t under white + Gauss-Markov error, m/s."""
    dt = np.abs(time_s[:, None] - time_s[None, :])
    cov = wander_var * np.exp(-dt / tau_s) + white_var * np.eye(len(time_s))
    x = np.column_stack([np.ones_like(time_s), time_s - time_s.mean()])
    info = x.T @ np.linalg.solve(cov, x)
    return float(np.sqrt(np.linalg.inv(info)[1, 1]))


def helix_tau_floor(grade: str = "phone") -> list[tuple[str, float, float]]:
    """(window, 1-sigma, median |error|) of the relative climb-rate, hence torsion, error."""
    a, c, v, hz, turns = 50.0, 5.0, 10.0, 10.0, 3  # benchmarks/bench_accuracy.py helix
    white, wander, tau_c, vf = S.GNSS_GRADES[grade]
    length = 2.0 * np.pi * turns * np.hypot(a, c)
    t = np.arange(0.0, length / v, 1.0 / hz)
    rate = v * c / np.hypot(a, c)
    rows = []
    for label, dur in (("whole log", t[-1] + 1.0), ("one turn", t[-1] / turns)):
        sd = gls_rate_sd(t[t < dur], (white * vf) ** 2, (wander * vf) ** 2, tau_c) / rate
        sd *= (a * a - c * c) / (a * a + c * c)
        rows.append((label, sd, GAUSS_MEDIAN * sd))
    return rows


def _circle_radius(p: np.ndarray, r0: float) -> float:
    c0 = p.mean(axis=0)
    res = least_squares(lambda x: np.hypot(p[:, 0] - x[0], p[:, 1] - x[1]) - x[2], [c0[0], c0[1], r0])
    return float(abs(res.x[2]))


def arc_runs(traj: S.Trajectory, split_m: float | None = None) -> list[np.ndarray]:
    """Index arrays of the fixes on each circular arc (true kappa within 1 % of the maximum),
    split into pieces of at most ``split_m`` of path (the helix: one turn)."""
    k = traj.curvature_per_m
    core = np.abs(k / np.max(k) - 1.0) < 0.01
    edges = np.flatnonzero(np.diff(np.r_[0, core.astype(int), 0]))
    runs = []
    for a, b in zip(edges[::2], edges[1::2]):
        idx = np.arange(a, b)
        if split_m:
            piece = np.floor((traj.chainage_m[idx] - traj.chainage_m[a]) / split_m).astype(int)
            runs += [idx[piece == j] for j in np.unique(piece) if np.sum(piece == j) >= 5]
        else:
            runs.append(idx)
    return runs


def circle_oracle(traj: S.Trajectory, grade: str, draws: int, seed: int, split_m=None,
                  wander: bool = True) -> float:
    """Median relative radius error of the oracle circle fit over arcs and draws."""
    runs = arc_runs(traj, split_m)
    r_true = 1.0 / np.max(np.abs(traj.plan_curvature_per_m))
    errs = []
    for d in range(draws):
        f = S.add_gnss_error(traj, grade, np.random.default_rng([seed, d]), wander_m=None if wander else 0.0)
        errs += [abs(_circle_radius(f.enu_m[idx, :2], r_true) / r_true - 1.0) for idx in runs]
    return float(np.median(errs))


def length_floor(traj: S.Trajectory, grade: str) -> float:
    _, g, tau_c, _ = S.GNSS_GRADES[grade]
    return float(np.sqrt(2.0 * g * g * (1.0 - np.exp(-np.ptp(traj.time_s) / tau_c))) / np.ptp(traj.chainage_m))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=200, help="Monte Carlo draws per circle-fit row")
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args(argv)
    print("| case | floor | median error | target (issue 3) |")
    print("|---|---|---|---|")
    for label, sd, med in helix_tau_floor("phone"):
        print(f"| helix phone 10 Hz | tau, GLS climb rate told it is steady over the {label} | "
              f"{med:.1%} (1-sigma {sd:.1%}) | tau <= 8 % |")
    hx = S.helix(50, 5, 10, 10, 3)
    turn = 2.0 * np.pi * np.hypot(50.0, 5.0)
    cases = [
        ("helix phone 10 Hz", hx, "phone", turn, "kappa <= 4 %"),
        ("road dual 10 Hz 80 km/h", S.road_alignment(), "dual", None, "radius <= 3 %"),
        ("road phone 1 Hz", S.road_alignment(rate_hz=1.0), "phone", None, "radius <= 8 %"),
        ("switchbacks R8 phone 1 Hz", S.switchbacks(), "phone", None, "radius <= 15 %"),
        ("switchbacks R8 dual 1 Hz", S.switchbacks(), "dual", None, "radius <= 15 %"),
    ]
    for label, traj, grade, split, target in cases:
        what = "turn by turn" if split else "arc by arc"
        with_w = circle_oracle(traj, grade, args.draws, args.seed, split)
        white = circle_oracle(traj, grade, args.draws, args.seed, split, wander=False)
        print(f"| {label} | radius, circle fit told the arc ({what}) | {with_w:.1%} (white error only: "
              f"{white:.1%}) | {target} |")
    for label, traj, grade in (("switchbacks R8 phone 1 Hz", S.switchbacks(), "phone"),
                               ("road phone 1 Hz", S.road_alignment(rate_hz=1.0), "phone"),
                               ("helix phone 10 Hz", hx, "phone")):
        sd = length_floor(traj, grade)
        print(f"| {label} | chainage, wander at the two ends | {GAUSS_MEDIAN * sd:.2%} (1-sigma {sd:.2%}) "
              f"| length <= 0.5 % |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
