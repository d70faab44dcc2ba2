"""Atomic output: all or nothing, no clobbering, no litter."""

import os
import time

import pytest

from survey.atomic import atomic_open, check_output_path, remove_stale_parts
from survey.errors import InputError


def test_a_failed_write_leaves_neither_target_nor_temporary_file(tmp_path):
    target = tmp_path / "out.csv"
    with pytest.raises(RuntimeError):
        with atomic_open(target) as fh:
            fh.write("half a row")
            raise RuntimeError("disk on fire")
    assert list(tmp_path.iterdir()) == []


def test_a_failed_rewrite_keeps_the_old_content(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("old\n")
    with pytest.raises(RuntimeError):
        with atomic_open(target) as fh:
            fh.write("new")
            raise RuntimeError
    assert target.read_text() == "old\n"


def test_existing_output_is_refused_without_force(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("mine\n")
    with pytest.raises(InputError, match="already exists; use --force"):
        check_output_path(target)
    assert check_output_path(target, force=True) == target


def test_missing_output_folder_is_refused(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        check_output_path(tmp_path / "nope" / "out.csv")


def test_written_file_gets_the_usual_permissions(tmp_path):
    target = tmp_path / "out.csv"
    with atomic_open(target) as fh:
        fh.write("x")
    umask = os.umask(0)
    os.umask(umask)
    assert (target.stat().st_mode & 0o777) == 0o666 & ~umask


def test_parts_left_by_a_killed_writer_are_cleared_but_fresh_ones_kept(tmp_path):
    target = tmp_path / "out.csv"
    stale = tmp_path / ".out.csv.abc123.part"
    fresh = tmp_path / ".out.csv.def456.part"
    stale.write_text("x")
    fresh.write_text("y")
    old = time.time() - 3600
    os.utime(stale, (old, old))
    assert remove_stale_parts(target) == [stale]
    assert not stale.exists() and fresh.exists()
