"""Hand marks in the sidecar: create/edit/delete, exact reload, changed log, corrupt file."""

from __future__ import annotations

import hashlib
import json
import os
import time

import pytest

from survey.errors import InputError
from survey.marks import FORMAT_NAME, FORMAT_VERSION, Mark, MarkStore, sidecar_path


@pytest.fixture
def log(tmp_path):
    p = tmp_path / "ridge-run.gpx"
    p.write_bytes(b"<gpx>invented survey by the Kestrel Creek crew</gpx>\n")
    return p


def test_no_sidecar_means_no_marks_and_nothing_written(log):
    store = MarkStore.load(log)
    assert store.marks == () and not store.warnings
    assert not sidecar_path(log).exists()


def test_sidecar_sits_beside_the_log(log):
    assert sidecar_path(log) == log.parent / "ridge-run.gpx.marks.json"


def test_add_saves_before_returning(log):
    store = MarkStore.load(log)
    m = store.add(120.0, 180.5, "washout")
    doc = json.loads(sidecar_path(log).read_text("utf-8"))  # independent reader: json
    assert doc["marks"] == [{"id": m.id, "start_m": 120.0, "end_m": 180.5, "note": "washout"}]


def test_sidecar_records_format_version_and_log_sha256(log):
    MarkStore.load(log).add(1.0, 2.0)
    doc = json.loads(sidecar_path(log).read_text("utf-8"))
    assert doc["format"] == FORMAT_NAME and doc["version"] == FORMAT_VERSION
    # checksum from hashlib over the file bytes (Python standard library, FIPS 180-4 SHA-256)
    assert doc["log"]["sha256"] == hashlib.sha256(log.read_bytes()).hexdigest()


def test_reload_restores_marks_exactly(log):
    store = MarkStore.load(log)
    values = [(0.1 + 0.2, 1 / 3, "=HYPERLINK(\"x\")"), (12345.678901234567, 99999.99999999999, "línea\nzwei\t\"q\"")]
    made = [store.add(a, b, n) for a, b, n in values]
    again = MarkStore.load(log)
    assert again.marks == tuple(sorted(made, key=lambda m: m.start_m))
    assert again.get(made[0].id).start_m == 0.1 + 0.2  # bit-exact float round trip


def test_edit_changes_ends_and_note_and_persists(log):
    store = MarkStore.load(log)
    m = store.add(10.0, 20.0, "old")
    store.edit(m.id, end_m=25.0)
    store.edit(m.id, note="new")
    assert MarkStore.load(log).get(m.id) == Mark(m.id, 10.0, 25.0, "new")


def test_delete_persists_and_ids_are_not_reused(log):
    store = MarkStore.load(log)
    a = store.add(1.0, 2.0, "a")
    b = store.add(3.0, 4.0, "b")
    store.delete(b.id)
    again = MarkStore.load(log)
    assert again.marks == (a,)
    assert again.add(5.0, 6.0).id not in (a.id, b.id)


def test_start_after_end_is_refused_and_nothing_changes(log):
    store = MarkStore.load(log)
    m = store.add(10.0, 20.0)
    before = sidecar_path(log).read_bytes()
    with pytest.raises(InputError, match="after its end"):
        store.edit(m.id, start_m=30.0)
    with pytest.raises(InputError, match="finite"):
        store.add(float("nan"), 3.0)
    assert store.get(m.id) == m and sidecar_path(log).read_bytes() == before


def test_unknown_id_is_a_clear_error(log):
    with pytest.raises(InputError, match="no mark with id 42"):
        MarkStore.load(log).delete(42)


def test_changed_log_is_reported_and_marks_are_kept(log):
    store = MarkStore.load(log)
    m = store.add(10.0, 20.0, "keep me")
    log.write_bytes(log.read_bytes() + b"<!-- edited -->\n")
    again = MarkStore.load(log)
    assert again.log_changed
    assert any("changed" in w for w in again.warnings)
    assert again.marks == (m,)


def test_changed_log_warning_survives_further_edits_until_accepted(log):
    MarkStore.load(log).add(10.0, 20.0)
    log.write_bytes(b"<gpx>other</gpx>")
    store = MarkStore.load(log)
    store.add(30.0, 40.0)
    assert MarkStore.load(log).log_changed  # an edit alone does not hide the change
    store.accept_log()
    assert not MarkStore.load(log).log_changed


@pytest.mark.parametrize(
    "content",
    [
        b"{not json",
        b"\xff\xfe\x00garbage",
        b'{"format": "something-else", "version": 1}',
        b'{"format": "trackframe-marks", "version": 99, "log": {"sha256": "x"}, "marks": []}',
        b'{"format": "trackframe-marks", "version": 1, "log": {"sha256": "x"}, "marks": [{"id": 1, "start_m": NaN, "end_m": 2}]}',
        b'{"format": "trackframe-marks", "version": 1, "log": {"sha256": "x"}, "marks": [{"id": 1, "start_m": "a", "end_m": 2}]}',
        b"",
    ],
)
def test_corrupt_sidecar_is_a_clear_error_and_left_untouched(log, content):
    side = sidecar_path(log)
    side.write_bytes(content)
    with pytest.raises(InputError) as err:
        MarkStore.load(log)
    msg = str(err.value)
    assert str(side) in msg and "\n" not in msg and "left as it is" in msg
    assert side.read_bytes() == content


def test_corrupt_sidecar_can_be_moved_aside_with_a_warning(log):
    side = sidecar_path(log)
    side.write_bytes(b"{broken")
    store = MarkStore.load(log, recover=True)
    moved = [p for p in log.parent.iterdir() if p.name.startswith(side.name + ".bad-")]
    assert len(moved) == 1 and moved[0].read_bytes() == b"{broken"
    assert any(moved[0].name in w for w in store.warnings)
    store.add(1.0, 2.0)
    assert len(MarkStore.load(log).marks) == 1


def test_failed_save_raises_and_keeps_memory_in_step_with_disk(log, monkeypatch):
    store = MarkStore.load(log)
    m = store.add(1.0, 2.0)

    def boom(path, data):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr("survey.marks.atomic_write_bytes", boom)
    with pytest.raises(InputError, match="cannot save marks"):
        store.add(3.0, 4.0)
    assert store.marks == (m,)


def test_stale_temp_file_from_a_killed_save_is_cleaned_on_load(log):
    side = sidecar_path(log)
    stale = side.with_name(f".{side.name}.abc123.part")
    fresh = side.with_name(f".{side.name}.def456.part")
    stale.write_text("half")
    fresh.write_text("in flight")
    old = time.time() - 3600
    os.utime(stale, (old, old))
    MarkStore.load(log)
    assert not stale.exists() and fresh.exists()


def test_missing_log_is_a_clear_error(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        MarkStore.load(tmp_path / "nope.gpx")
