"""``trackframe batch`` on real logs through the whole pipeline: local process pool and Dask.

The logs are synthetic roads from ``survey.synthetic`` (closed-form clothoid/arc alignments) with
exact fixes, written as GPX and NMEA; the sharp sections expected on them follow from the
construction (arc radius R), as in the flag end-to-end test.
"""

from __future__ import annotations

import csv
import io
import multiprocessing
import os

import numpy as np
import pytest

import survey.pipeline
from survey.batch import BatchOptions, run_batch
from survey.cli import main
from survey.design import Limits
from survey.errors import InputError

LIMITS = Limits(sharp_radius_m=150.0)


@pytest.fixture(scope="module")
def logs(tmp_path_factory):
    """Invented Curlew Gap roads: R 100 m arcs as GPX and as NMEA, R 400 m arcs as GPX, and a
    broken file."""
    from survey.frame import LocalFrame
    from survey.logwrite import gpx_text, nmea_text
    from survey.synthetic import exact_fixes, fixes_to_track, road_alignment

    d = tmp_path_factory.mktemp("curlew")
    frame = LocalFrame.enu(-33.9, 151.1, 40.0)  # invented survey origin
    out = {}
    for name, radius in (("tight", 100.0), ("wide", 400.0)):
        traj = road_alignment(speed_mps=15.0, rate_hz=2.0, radius_m=radius, t0_s=1_700_000_000.0)
        track = fixes_to_track(exact_fixes(traj), frame.inverse, path=f"{name}.gpx")
        (d / f"{name}.gpx").write_text(gpx_text(track, name=f"Curlew Gap road {name}"), encoding="utf-8")
        if name == "tight":
            (d / "tight.nmea").write_text(nmea_text(track), encoding="utf-8")
            out["tight_nmea"] = d / "tight.nmea"
        out[name] = d / f"{name}.gpx"
    (d / "zz-broken.gpx").write_text('<gpx version="1.1"><trk><trkseg><trkpt lat="95" lon="0"/>', encoding="utf-8")
    out["bad"] = d / "zz-broken.gpx"
    out["dir"] = d
    return out


def _summary(results):
    """Comparable view of results: (log, ok, [(kind, start, end, min radius)] or error)."""
    return [
        (r.log, r.ok, [(s.kind, s.start_chainage_m, s.end_chainage_m, round(s.min_radius_m, 6)) for s in r.sections] or r.error)
        for r in results
    ]


@pytest.fixture(scope="module")
def serial(logs):
    names = [str(logs[k]) for k in ("tight", "tight_nmea", "wide", "bad")]
    return names, run_batch(names, BatchOptions(LIMITS), jobs=1)


def test_real_logs_flag_the_r100_arcs_and_list_the_broken_file(serial):
    names, res = serial
    tight, tight_nmea, wide, bad = res
    for r in (tight, tight_nmea):
        # road_alignment: two R 100 m arcs between 80 m clothoids; exact fixes, so the smallest
        # radius is the construction's 100 m within 5 % (as the flag end-to-end test).
        assert [s.kind for s in r.sections] == ["sharp", "sharp"]
        assert [s.min_radius_m for s in r.sections] == pytest.approx([100.0, 100.0], rel=0.05)
    assert wide.ok and wide.sections == ()  # R 400 m arcs are wider than the 150 m limit
    assert not bad.ok and bad.error.startswith(f"{names[3]}: ")
    assert "\n" not in bad.error


def test_process_pool_gives_the_same_results_in_the_same_order(serial):
    names, res = serial
    pooled = run_batch(names, BatchOptions(LIMITS), jobs=2)
    assert _summary(pooled) == _summary(res)


def test_dask_local_cluster_gives_the_same_results(serial, logs, tmp_path):
    distributed = pytest.importorskip("distributed")
    names, res = serial
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=2, processes=False, dashboard_address=None
    ) as cluster:
        done = []
        got = run_batch(names, BatchOptions(LIMITS), dask_address=cluster.scheduler_address, on_result=done.append)
        out = tmp_path / "fleet.csv"
        code = main(["batch", str(logs["dir"]), "--sharp-radius", "150", "--dask", cluster.scheduler_address, "-o", str(out)])
    assert _summary(got) == _summary(res)
    assert len(done) == len(names)
    assert code == 1  # the broken file failed
    rows = list(csv.DictReader(io.StringIO(out.read_text("utf-8"), newline="")))
    assert [(r["log"], r["kind"]) for r in rows] == [
        (str(logs["tight"]), "sharp"),
        (str(logs["tight"]), "sharp"),
        (str(logs["tight_nmea"]), "sharp"),
        (str(logs["tight_nmea"]), "sharp"),
        (str(logs["bad"]), "error"),
    ]


def test_dask_worker_processes_read_the_logs_themselves(logs, monkeypatch):
    """With worker processes, only the path travels: the worker opens the file (relative paths
    are sent as absolute ones), and results come back whole."""
    distributed = pytest.importorskip("distributed")
    monkeypatch.chdir(logs["dir"])
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        [r] = run_batch(["tight.gpx"], BatchOptions(LIMITS, geometry=True), dask_address=cluster.scheduler_address)
    assert r.log == "tight.gpx" and r.ok
    assert [s.kind for s in r.sections] == ["sharp", "sharp"]
    assert len(r.features) == 2 and r.features[0]["geometry"]["type"] == "LineString"


def test_unreachable_scheduler_is_a_one_line_error():
    pytest.importorskip("distributed")
    with pytest.raises(InputError) as exc:
        run_batch(["x.gpx"], BatchOptions(LIMITS), dask_address="tcp://127.0.0.1:9", dask_timeout_s=0.5)
    assert str(exc.value).startswith("tcp://127.0.0.1:9: cannot connect to the Dask scheduler")
    assert "\n" not in str(exc.value)


@pytest.mark.skipif("fork" not in multiprocessing.get_all_start_methods(), reason="needs fork to stand in a dying pipeline")
def test_a_worker_process_that_dies_is_listed_as_failed_and_the_batch_ends(logs, monkeypatch):
    def die(path, **kw):
        os._exit(9)  # as if the kernel's out-of-memory killer stopped the worker

    monkeypatch.setattr(survey.pipeline, "run_profile", die)
    names = [str(logs["tight"]), str(logs["wide"])]
    res = run_batch(names, BatchOptions(LIMITS, use_marks=False), jobs=2, mp_context=multiprocessing.get_context("fork"))
    assert [r.ok for r in res] == [False, False]
    assert all("worker process stopped unexpectedly" in r.error for r in res)


def test_gpx_and_nmea_copies_of_one_road_give_the_same_sections(serial):
    """The GPX and NMEA copies of one road give the same sections (same fixes, two readers)."""
    _, res = serial
    a, b = res[0].sections, res[1].sections
    assert np.allclose([s.start_chainage_m for s in a], [s.start_chainage_m for s in b], atol=2.0)
    assert np.allclose([s.min_radius_m for s in a], [s.min_radius_m for s in b], rtol=0.01)
