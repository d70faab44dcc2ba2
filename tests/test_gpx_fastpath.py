"""The bulk GPX path gives the same fixes as gpxpy, and declines what it cannot read.

Oracle: gpxpy (gpxpy.parse), an outside GPX reader, on generated files that vary everything the
bulk path has to get right: GPX 1.0/1.1, ele/time present or not, fractional seconds up to
9 digits, offsets, attribute order and quotes, whitespace, multiple trk/trkseg, waypoints and
metadata with their own ele/time, extensions with nested <time>/<ele>, comments, CDATA,
route-only files. gpxpy keeps microseconds, so times agree to 1 us plus float64 rounding.
"""

from __future__ import annotations

import math
import random

import gpxpy
import numpy as np
import pytest

from survey.readers.gpx import read_gpx

NS = {"1.0": "http://www.topografix.com/GPX/1/0", "1.1": "http://www.topografix.com/GPX/1/1"}
TIME_TOL_S = 2e-6  # gpxpy truncates to microseconds; float64 spacing near 1.7e9 s is 2.4e-7 s


def _num(rng: random.Random, value: float, decimals: int) -> str:
    text = f"{value:.{decimals}f}"
    return rng.choice([text, text, f" {text} ", f"\n{text}\t"]) if rng.random() < 0.2 else text


def _stamp(rng: random.Random, canonical: bool) -> tuple[str, bool]:
    """A time stamp and whether the bulk pattern accepts its shape."""
    y, mo, d = rng.randint(1995, 2030), rng.randint(1, 12), rng.randint(1, 28)
    h, mi, s = rng.randint(0, 23), rng.randint(0, 59), rng.randint(0, 59)
    text = f"{y:04d}-{mo:02d}-{d:02d}T{h:02d}:{mi:02d}:{s:02d}"
    digits = rng.choice([0, 0, 1, 3, 6, 9])
    if digits:
        text += "." + "".join(rng.choice("0123456789") for _ in range(digits))
    offsets = ["Z", "Z", "", "+02:00", "-05:30", "+00:00"]
    if not canonical:
        offsets = ["+0530", "-03", "+01:00"]
    off = rng.choice(offsets)
    return text + off, off not in ("+0530", "-03")


def make_gpx(seed: int) -> tuple[str, bool]:
    """A varied GPX document and whether the bulk path should accept it."""
    rng = random.Random(seed)
    version = rng.choice(["1.0", "1.1"])
    bulk = True
    messy = rng.random() < 0.5  # only messy files get points the bulk pattern refuses
    odd = 0.15 if messy else 0.0
    q = rng.choice(['"', "'"])
    out = [f'<?xml version="1.0" encoding="UTF-8"?>\n<gpx version={q}{version}{q} creator="Fenwick crew" '
           f'xmlns={q}{NS[version]}{q} xmlns:fw="urn:example:fenwick">\n']
    if rng.random() < 0.3:
        out.append("<!-- survey of the Fenwick embankment, invented -->\n")
    if rng.random() < 0.4:
        tag = "metadata" if version == "1.1" else "desc"
        inner = "<time>2001-01-01T00:00:00Z</time>" if version == "1.1" else "outer"
        out.append(f"<{tag}>{inner}</{tag}>\n")
    if rng.random() < 0.4:
        out.append('<wpt lat="10.0" lon="20.0"><ele>-99</ele><time>2002-02-02T02:02:02Z</time></wpt>\n')
    route_only = rng.random() < 0.1
    if route_only or rng.random() < 0.2:
        out.append('<rte><rtept lat="1.25" lon="2.5"><ele>7</ele></rtept><rtept lat="1.5" lon="2.75"/></rte>\n')
    if route_only:
        out.append("</gpx>\n")
        return "".join(out), False
    any_point = False
    for _trk in range(rng.randint(1, 2)):
        out.append("<trk><name>Fenwick &amp; Lowe bank</name>\n")
        for _seg in range(rng.randint(1, 3)):
            out.append("<trkseg>\n")
            for _ in range(rng.randint(0, 6)):
                any_point = True
                lat = _num(rng, rng.uniform(-89.9, 89.9), rng.randint(0, 9))
                lon = _num(rng, rng.uniform(-179.9, 179.9), rng.randint(0, 9))
                pq = rng.choice(['"', "'"]) if rng.random() < 0.3 else '"'
                attrs = [f"lat={pq}{lat}{pq}", f"lon={pq}{lon}{pq}"]
                if rng.random() < 0.3:
                    attrs.reverse()
                kids = []
                if rng.random() < 0.8:
                    ele = _num(rng, rng.uniform(-400, 8800), rng.randint(0, 3))
                    if rng.random() < odd:
                        kids.append(f"<ele><![CDATA[{ele}]]></ele>")
                        bulk = False
                    else:
                        kids.append(f"<ele>{ele}</ele>")
                if rng.random() < 0.8:
                    canonical = rng.random() >= odd
                    stamp, ok = _stamp(rng, canonical)
                    bulk &= ok
                    kids.append(f"<time>{stamp}</time>")
                if rng.random() < 0.1:
                    kids.append("<name>pt</name>")
                if rng.random() < 0.2:
                    kids.append(f"<sat>{rng.randint(3, 14)}</sat>")
                if rng.random() < 0.2:
                    kids.append(f"<hdop>{rng.uniform(0.5, 9):.1f}</hdop>")
                if rng.random() < odd:
                    kids.insert(0, "<!-- re-shot -->")
                    bulk = False
                if rng.random() < odd:
                    bulk = False
                    if version == "1.1":
                        kids.append("<extensions><fw:probe><time>1980-01-01T00:00:00Z</time><ele>-1</ele>"
                                    "</fw:probe><time xmlns='urn:x'>1981-01-01T00:00:00Z</time></extensions>")
                    else:
                        kids.append("<fw:probe><fw:time>1980-01-01T00:00:00Z</fw:time></fw:probe>")
                sep = rng.choice(["", "\n  ", " "])
                empty = not kids and rng.random() < 0.5
                body = "/>" if empty else ">" + sep + sep.join(kids) + sep + "</trkpt>"
                out.append(f"<trkpt {' '.join(attrs)}{body}\n")
            out.append("</trkseg>\n")
        out.append("</trk>\n")
    out.append("</gpx>\n")
    return "".join(out), bulk and any_point


def gpxpy_fixes(text: str):
    """lat, lon, ele, time_s per point from gpxpy: track points, else route points."""
    g = gpxpy.parse(text)
    pts = [p for t in g.tracks for s in t.segments for p in s.points]
    if not pts:
        pts = [p for r in g.routes for p in r.points]

    def ts(p):
        if p.time is None:
            return math.nan
        t = p.time if p.time.tzinfo else p.time.replace(tzinfo=__import__("datetime").timezone.utc)
        return t.timestamp()

    return (np.array([p.latitude for p in pts]), np.array([p.longitude for p in pts]),
            np.array([math.nan if p.elevation is None else p.elevation for p in pts]),
            np.array([ts(p) for p in pts]))


def assert_same_as_gpxpy(track, text):
    lat, lon, ele, time_s = gpxpy_fixes(text)
    np.testing.assert_array_equal(track.lat_deg, lat)
    np.testing.assert_array_equal(track.lon_deg, lon)
    np.testing.assert_array_equal(track.height_m, ele)
    np.testing.assert_allclose(track.time_s, time_s, rtol=0, atol=TIME_TOL_S)


SEEDS = range(80)


@pytest.mark.parametrize("seed", SEEDS)
def test_auto_path_matches_gpxpy_on_varied_files(seed):
    text, _ = make_gpx(seed)
    if "<trkpt" not in text and "<rtept" not in text:
        pytest.skip("generated file has no points")
    track = read_gpx(f"gen{seed}.gpx", text.encode())
    assert_same_as_gpxpy(track, text)


@pytest.mark.parametrize("seed", SEEDS)
def test_safe_path_matches_gpxpy_on_varied_files(seed):
    text, _ = make_gpx(seed)
    if "<trkpt" not in text and "<rtept" not in text:
        pytest.skip("generated file has no points")
    assert_same_as_gpxpy(read_gpx(f"gen{seed}.gpx", text.encode(), mode="safe"), text)


@pytest.mark.parametrize("seed", SEEDS)
def test_bulk_path_takes_exactly_the_files_it_can_read(seed):
    text, bulk_ok = make_gpx(seed)
    if "<trkpt" not in text and "<rtept" not in text:
        pytest.skip("generated file has no points")
    reader = read_gpx(f"gen{seed}.gpx", text.encode()).source.reader
    assert reader == ("gpx-bulk" if bulk_ok else "gpx-safe")


def test_generated_files_exercise_both_paths():
    flags = [make_gpx(s)[1] for s in SEEDS]
    assert 20 <= sum(flags) <= len(flags) - 10


def test_bulk_and_safe_paths_give_identical_arrays():
    for seed in SEEDS:
        text, ok = make_gpx(seed)
        if not ok:
            continue
        a = read_gpx("a.gpx", text.encode(), mode="bulk")
        b = read_gpx("a.gpx", text.encode(), mode="safe")
        for name in ("lat_deg", "lon_deg", "height_m", "time_s", "segment"):
            np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=f"seed {seed} {name}")
        for name in ("hdop", "satellites"):
            x, y = getattr(a, name), getattr(b, name)
            assert (x is None) == (y is None)
            if x is not None:
                np.testing.assert_array_equal(x, y)
        assert a.source.notes == b.source.notes


@pytest.mark.parametrize(
    "point",
    [
        # each of these is valid GPX the bulk pattern does not read; the safe path must
        '<trkpt lat="1" lon="2"><!-- c --><ele>3</ele></trkpt>',
        '<trkpt lat="1" lon="2"><ele><![CDATA[3]]></ele></trkpt>',
        '<trkpt lat="1" lon="2"><ele>&#51;</ele></trkpt>',
        '<trkpt lat="1" lon="2"><ele>3</ele><extensions><time>1990-01-01T00:00:00Z</time></extensions></trkpt>',
        '<trkpt lat="1" lon="2"><ele>3</ele><time>2020-01-01T00:00:00+05</time></trkpt>',
        '<trkpt lat="1" lon="2"><ele>3</ele><link href="urn:x"><text>x</text></link></trkpt>',
        '<trkpt lat="1" lon="2" xmlns:q="urn:q"><ele>3</ele></trkpt>',
    ],
)
def test_points_the_bulk_pattern_refuses_fall_back_to_the_safe_path(point):
    text = ('<gpx xmlns="http://www.topografix.com/GPX/1/1" version="1.1" creator="t"><trk><trkseg>'
            f'<trkpt lat="5" lon="6"/>{point}</trkseg></trk></gpx>')
    t = read_gpx("p.gpx", text.encode())
    assert t.source.reader == "gpx-safe"
    assert (t.lat_deg[1], t.lon_deg[1], t.height_m[1]) == (1.0, 2.0, 3.0)
    assert_same_as_gpxpy(t, text)


@pytest.mark.parametrize(
    "where",
    [
        "<!-- <trkpt lat='7' lon='8'></trkpt> -->",  # a point inside a comment is no point
        "<wpt lat='0' lon='0'><extensions><trkpt lat='7' lon='8'></trkpt></extensions></wpt>",
        "<trk><trkpt lat='7' lon='8'></trkpt></trk>",  # a trkpt outside trkseg is not on the track
    ],
)
def test_point_shaped_text_outside_a_trkseg_is_not_read(where):
    # GPX 1.1 schema: track points are gpx/trk/trkseg/trkpt only.
    text = ('<gpx xmlns="http://www.topografix.com/GPX/1/1" version="1.1" creator="t">'
            f"{where}<trk><trkseg><trkpt lat='5' lon='6'/></trkseg></trk></gpx>")
    t = read_gpx("p.gpx", text.encode())
    np.testing.assert_array_equal(t.lat_deg, [5.0])
    assert t.source.reader == "gpx-safe"


_TWO_PROCESS_CHECK = """
import sys
import numpy as np
import gpxpy
import survey.readers.gpx_fast as fast
from survey.readers.gpx import read_gpx

data = open(sys.argv[1], "rb").read()
fast.CHUNK_BYTES, fast.PARALLEL_MIN_BYTES = 200, 0
taken = []
real = fast._in_two_processes
fast._in_two_processes = lambda *a: taken.append(real(*a)) or taken[-1]
two = read_gpx("two.gpx", data, mode="bulk")
assert taken and taken[0] is not None and len(taken[0]) == 2, "the second process was not used"
fast.PARALLEL_MIN_BYTES = 1 << 60
one = read_gpx("one.gpx", data, mode="bulk")
pts = [p for t in gpxpy.parse(data.decode()).tracks for s in t.segments for p in s.points]
np.testing.assert_array_equal(two.lat_deg, [p.latitude for p in pts])
np.testing.assert_array_equal(two.height_m, [p.elevation for p in pts])
for name in ("lat_deg", "lon_deg", "height_m", "time_s", "segment"):
    np.testing.assert_array_equal(getattr(two, name), getattr(one, name))
print("ok")
"""


def test_two_process_bulk_read_matches_gpxpy_and_the_one_process_read(tmp_path):
    # A large file's second half of chunks is read by a forked process; forced here on a small
    # file (tiny chunks, no size threshold) in a fresh interpreter (the reader only forks when no
    # other thread is running, and a test session has some). Oracle: gpxpy on the same file, and
    # the one-process read of the bulk path.
    import subprocess
    import sys

    from survey import synthetic as S
    from survey.frame import LocalFrame
    from survey.logwrite import gpx_text

    traj = S.switchbacks()  # 217 fixes, written as GPX 1.1 with ele and time
    track = S.fixes_to_track(S.exact_fixes(traj), LocalFrame.enu(46.5, 7.6, 800.0).inverse, with_accuracy=False)
    log = tmp_path / "sb.gpx"
    log.write_text(gpx_text(track))
    done = subprocess.run([sys.executable, "-c", _TWO_PROCESS_CHECK, str(log)], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0 and done.stdout.strip() == "ok", done.stderr[-2000:]
