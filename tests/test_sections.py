"""Automatic sections on closed-form roads: arcs of known radius, helices of known torsion.

Expected values come from the construction of the road (curvature 1/R on an arc, 0 on a
straight), from steady circular motion (a = v^2 / R, physics), from the helix formulas
kappa = a/(a^2+c^2), tau = c/(a^2+c^2) (do Carmo 1976; checked with sympy in REFERENCES.md), and
from the normal distribution written with math.erf (closed form, independent of scipy).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from survey.design import CAUTION, Limits
from survey.sections import (
    KIND_DESIGN,
    KIND_MARKED,
    KIND_SHARP,
    KIND_TWISTING,
    all_sections,
    detect_sections,
    hysteresis_runs,
    marked_sections,
)

try:
    from tests.test_sections_support import T0_S, road_profile
except ImportError:  # tests/ not a package
    from test_sections_support import T0_S, road_profile

INF = math.inf
# straight 0-200, arc R 100 (200-300), straight 300-500, arc R 400 (500-600), straight to 700
ROAD = [(200, INF, 0), (100, 100.0, 1), (200, INF, 0), (100, 400.0, -1), (100, INF, 0)]


def phi(z: float) -> float:
    """Standard normal CDF from the closed form 0.5 (1 + erf(z / sqrt 2))."""
    return 0.5 * (1.0 + math.erf(z / math.sqrt(2.0)))


def test_arc_tighter_than_limit_is_flagged_end_to_end():
    # Construction: arc R = 100 m occupies chainage 200..300 m; limit 150 m.
    secs = detect_sections(road_profile(ROAD), Limits(sharp_radius_m=150.0))
    assert [(s.kind, s.start_chainage_m, s.end_chainage_m) for s in secs] == [(KIND_SHARP, 200.0, 300.0)]
    assert secs[0].length_m == pytest.approx(100.0, abs=1e-9)
    assert secs[0].min_radius_m == pytest.approx(100.0, rel=1e-12)
    assert 200.0 <= secs[0].min_radius_at_m <= 300.0


def test_arc_wider_than_limit_is_not_flagged():
    # The R = 400 m arc is above a 150 m limit and the R = 100 m arc above a 90 m limit.
    assert detect_sections(road_profile(ROAD), Limits(sharp_radius_m=90.0)) == []


def test_both_arcs_flagged_when_limit_above_both_radii():
    secs = detect_sections(road_profile(ROAD), Limits(sharp_radius_m=500.0))
    assert [(s.id, s.start_chainage_m, s.end_chainage_m) for s in secs] == [
        ("S1", 200.0, 300.0),
        ("S2", 500.0, 600.0),
    ]


def test_section_reports_lateral_acceleration_at_recorded_speed():
    # Steady circular motion a = v^2 / R (physics): 20 m/s on R 100 m -> 4 m/s^2.
    sec = detect_sections(road_profile(ROAD, speed_mps=20.0), Limits(sharp_radius_m=150.0))[0]
    assert sec.max_lateral_accel_mps2 == pytest.approx(20.0**2 / 100.0, rel=1e-12)


def test_section_reports_grade_times_and_end_positions():
    # Constant 3 % grade by construction; time = T0 + chainage / speed.
    prof = road_profile(ROAD, grade=0.03, speed_mps=10.0)
    sec = detect_sections(prof, Limits(sharp_radius_m=150.0))[0]
    assert sec.mean_grade_pct == pytest.approx(3.0)
    assert sec.max_grade_pct == pytest.approx(3.0)
    assert sec.start_time_s == pytest.approx(T0_S + 200.0 / 10.0)
    assert sec.end_time_s == pytest.approx(T0_S + 300.0 / 10.0)
    assert (sec.start_lat_deg, sec.start_lon_deg) == (prof.lat_deg[200], prof.lon_deg[200])
    assert (sec.end_lat_deg, sec.end_lon_deg) == (prof.lat_deg[300], prof.lon_deg[300])


def test_stretch_above_limit_only_by_noise_is_not_flagged():
    # kappa 5 % above the limit with sd half the limit: z = 0.1, far below 1.64 sigma.
    limit_r = 100.0
    n_pieces = [(300, INF, 0)]
    kappa = np.zeros(301)
    kappa[100:200] = 1.05 / limit_r
    prof = road_profile(n_pieces, curvature_per_m=kappa, curvature_sd_per_m=0.5 / limit_r)
    assert detect_sections(prof, Limits(sharp_radius_m=limit_r)) == []


def test_same_stretch_is_flagged_when_uncertainty_is_small_with_its_confidence():
    # Same 5 % excess with sd 1 % of the limit: z = 5 -> confidence Phi(5) (closed form via erf).
    limit_r = 100.0
    kappa = np.zeros(301)
    kappa[100:200] = 1.05 / limit_r
    prof = road_profile([(300, INF, 0)], curvature_per_m=kappa, curvature_sd_per_m=0.01 / limit_r)
    secs = detect_sections(prof, Limits(sharp_radius_m=limit_r))
    assert [(s.start_chainage_m, s.end_chainage_m) for s in secs] == [(100.0, 199.0)]
    assert secs[0].confidence == pytest.approx(phi(5.0), abs=1e-9)


def test_confidence_follows_the_strongest_station():
    # Peak kappa 1.3/R with sd 0.1/R: z = 3 -> Phi(3) = 0.99865 (closed form via erf).
    limit_r = 50.0
    kappa = np.zeros(201)
    kappa[50:150] = 1.1 / limit_r
    kappa[100] = 1.3 / limit_r
    prof = road_profile([(200, INF, 0)], curvature_per_m=kappa, curvature_sd_per_m=0.1 / limit_r)
    (sec,) = detect_sections(prof, Limits(sharp_radius_m=limit_r))
    assert sec.confidence == pytest.approx(phi(3.0), abs=1e-9)
    assert sec.min_radius_m == pytest.approx(limit_r / 1.3)
    assert sec.min_radius_at_m == 100.0


def _wobbly_arc():
    # kappa on the arc = (1 + 0.06 sin(2 pi s / 7 m)) / R with the limit at R: the value crosses
    # the limit every few metres.
    s = np.arange(0.0, 401.0)
    kappa = np.zeros_like(s)
    on = (s >= 100) & (s <= 300)
    kappa[on] = (1.0 + 0.06 * np.sin(2 * np.pi * s[on] / 7.0)) / 80.0
    return road_profile([(400, INF, 0)], curvature_per_m=kappa, curvature_sd_per_m=1e-6)


def test_without_hysteresis_a_wobbly_arc_is_chopped_into_slivers():
    # Shows the hysteresis test below can fail: with leave == enter the arc falls apart.
    secs = detect_sections(_wobbly_arc(), Limits(sharp_radius_m=80.0, hysteresis=0.0, merge_gap_m=0.0, min_length_m=0.0))
    assert len(secs) > 10


def test_hysteresis_keeps_a_wobbly_arc_in_one_section():
    # Leave level 10 % below the limit; the wobble is only 6 %, so the arc stays one section.
    secs = detect_sections(_wobbly_arc(), Limits(sharp_radius_m=80.0, hysteresis=0.1, merge_gap_m=0.0, min_length_m=0.0))
    assert [(s.start_chainage_m, s.end_chainage_m) for s in secs] == [(100.0, 300.0)]


def test_sections_shorter_than_min_length_are_dropped():
    # A 3 m kink (R 20 m) on a straight: dropped with min length 5 m, kept with 2 m.
    road = [(100, INF, 0), (3, 20.0, 1), (100, INF, 0)]
    assert detect_sections(road_profile(road), Limits(sharp_radius_m=50.0, min_length_m=5.0)) == []
    kept = detect_sections(road_profile(road), Limits(sharp_radius_m=50.0, min_length_m=2.0))
    assert [(s.start_chainage_m, s.end_chainage_m) for s in kept] == [(100.0, 103.0)]


def test_flags_closer_than_merge_gap_are_merged():
    # Two arcs (100-140 and 146-186) with 6 m of straight between their last/first stations.
    road = [(100, INF, 0), (40, 60.0, 1), (6, INF, 0), (40, 60.0, 1), (100, INF, 0)]
    merged = detect_sections(road_profile(road), Limits(sharp_radius_m=80.0, merge_gap_m=6.0))
    assert [(s.start_chainage_m, s.end_chainage_m) for s in merged] == [(100.0, 186.0)]
    apart = detect_sections(road_profile(road), Limits(sharp_radius_m=80.0, merge_gap_m=5.0))
    assert [(s.start_chainage_m, s.end_chainage_m) for s in apart] == [(100.0, 140.0), (146.0, 186.0)]


def test_sections_do_not_cross_a_segment_boundary():
    prof = road_profile(ROAD)
    seg = np.zeros(len(prof), dtype=np.int32)
    seg[250:] = 1
    secs = detect_sections(road_profile(ROAD, segment=seg), Limits(sharp_radius_m=150.0, merge_gap_m=50.0))
    assert [(s.start_chainage_m, s.end_chainage_m, s.segment) for s in secs] == [
        (200.0, 249.0, 0),
        (250.0, 300.0, 1),
    ]


def test_stations_without_curvature_are_never_flagged():
    kappa = np.full(201, np.nan)
    prof = road_profile([(200, INF, 0)], curvature_per_m=kappa)
    assert detect_sections(prof, Limits(sharp_radius_m=1e9)) == []


def test_helix_stretch_with_torsion_above_limit_is_twisting():
    # Helix a = 20 m, c = 5 m: tau = c / (a^2 + c^2) = 5/425 1/m, kappa = 20/425 1/m.
    a, c = 20.0, 5.0
    tau, kappa = c / (a * a + c * c), a / (a * a + c * c)
    n = 401
    t = np.full(n, np.nan)
    k = np.zeros(n)
    t[100:301], k[100:301] = tau, kappa
    prof = road_profile([(400, INF, 0)], curvature_per_m=k, torsion_per_m=t, torsion_sd_per_m=1e-4)
    secs = detect_sections(prof, Limits(twist_per_m=0.01))
    assert [(s.kind, s.start_chainage_m, s.end_chainage_m) for s in secs] == [(KIND_TWISTING, 100.0, 300.0)]
    assert secs[0].max_abs_torsion_per_m == pytest.approx(tau, rel=1e-12)
    assert secs[0].min_radius_m == pytest.approx(1.0 / kappa, rel=1e-12)
    assert detect_sections(prof, Limits(twist_per_m=0.02)) == []


def test_negative_torsion_counts_by_magnitude():
    n = 201
    t = np.full(n, np.nan)
    t[50:150] = -0.05
    prof = road_profile([(200, INF, 0)], torsion_per_m=t)
    secs = detect_sections(prof, Limits(twist_per_m=0.03))
    assert [(s.start_chainage_m, s.end_chainage_m) for s in secs] == [(50.0, 149.0)]
    assert secs[0].max_abs_torsion_per_m == pytest.approx(0.05)


def test_design_check_flags_curve_tighter_than_design_radius_with_balance_speed():
    # ERA Geometric Design Manual 2002 ch. 8: 100 km/h, e 0.08, f 0.12 -> R_min 393.7 m.
    # Arc R 300 m is tighter and flagged; arc R 500 m is not. Balance speed
    # V = sqrt(127 (e + f) R) = sqrt(127 * 0.2 * 300) = 87.29 km/h (formula inverted by hand).
    road = [(200, INF, 0), (100, 300.0, 1), (200, INF, 0), (100, 500.0, -1), (100, INF, 0)]
    lim = Limits(design_speed_kmh=100.0, superelevation=0.08, friction=0.12)
    secs = detect_sections(road_profile(road), lim)
    assert [(s.kind, s.start_chainage_m, s.end_chainage_m) for s in secs] == [(KIND_DESIGN, 200.0, 300.0)]
    assert secs[0].limit == pytest.approx(393.7, abs=0.05)
    assert secs[0].balance_speed_kmh == pytest.approx(math.sqrt(127 * 0.2 * 300.0), rel=1e-12)
    assert secs[0].balance_speed_kmh == pytest.approx(87.29, abs=0.01)
    assert CAUTION in secs[0].note and secs[0].caution == CAUTION


def test_design_check_uses_plan_curvature_not_a_vertical_curve():
    # A sag on a straight gives 3D curvature but no plan curvature: no design section.
    kappa = np.zeros(401)
    kappa[100:300] = 1.0 / 100.0
    prof = road_profile([(400, INF, 0)], curvature_per_m=kappa)
    assert detect_sections(prof, Limits(design_speed_kmh=100.0)) == []
    assert len(detect_sections(prof, Limits(sharp_radius_m=150.0))) == 1


def test_marked_section_keeps_user_ends_and_summarises_stations_inside():
    class M:
        id, start_m, end_m, note = 7, 250.5, 520.25, "=HYPERLINK(\"x\") check drainage"

    prof = road_profile(ROAD)
    (sec,) = marked_sections(prof, [M()])
    assert (sec.id, sec.kind, sec.start_chainage_m, sec.end_chainage_m) == ("M7", KIND_MARKED, 250.5, 520.25)
    assert sec.length_m == pytest.approx(269.75)
    assert sec.min_radius_m == pytest.approx(100.0)  # the R 100 arc runs to 300
    assert math.isnan(sec.confidence)
    assert sec.note == M.note
    # ends interpolated along the chainage between stations 250 and 251
    assert sec.start_lat_deg == pytest.approx(0.5 * (prof.lat_deg[250] + prof.lat_deg[251]), abs=1e-12)


def test_all_sections_sorted_along_chainage():
    class M:
        id, start_m, end_m, note = 1, 50.0, 60.0, "gate"

    secs = all_sections(road_profile(ROAD), Limits(sharp_radius_m=500.0), [M()])
    assert [s.id for s in secs] == ["M1", "S1", "S2"]


def test_hysteresis_runs_on_a_hand_worked_array():
    # enter 1.0, leave 0.9, sd 0: hold stations 1-3 and 5; both runs contain a value > 1.
    x = np.array([0.0, 0.9, 1.1, 0.95, 0.85, 1.2, 0.0])
    starts, ends, z = hysteresis_runs(x, np.zeros(7), 1.0, 0.9, 1.64)
    assert starts.tolist() == [1, 5] and ends.tolist() == [3, 5]
    assert np.isinf(z).all()


@settings(max_examples=150, deadline=None)
@given(
    st.lists(st.floats(0.0, 2.0), min_size=1, max_size=60),
    st.floats(0.5, 1.5),
    st.floats(0.0, 0.5),
)
def test_hysteresis_runs_are_maximal_and_each_holds_an_entry(values, enter, h):
    # Specification of the run finder: inside runs value >= leave, the neighbours of a run are
    # below leave (maximal), each run has a value > enter, and every station above enter is
    # inside some run.
    x = np.array(values)
    leave = (1 - h) * enter
    starts, ends, _ = hysteresis_runs(x, np.zeros_like(x), enter, leave, 1.64)
    inside = np.zeros(len(x), bool)
    for a, b in zip(starts, ends):
        assert (x[a : b + 1] >= leave).all()
        assert (x[a : b + 1] > enter).any()
        assert a == 0 or x[a - 1] < leave
        assert b == len(x) - 1 or x[b + 1] < leave
        inside[a : b + 1] = True
    assert not ((x > enter) & ~inside).any()
