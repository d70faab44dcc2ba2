"""A writer killed with SIGKILL at random moments loses at most the edit in flight.

The child process applies a fixed sequence of edits (add / edit / delete) and reports each one on
stdout after the method has returned. The parent kills it at a random time, then reads the
sidecar with the json module and compares it with a pure-Python model of the same sequence: the
sidecar must parse and equal the state after the last reported edit, or after one more (the edit
in flight may have reached the disk before it was reported).
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from survey.marks import MarkStore, sidecar_path

CHILD = r"""
import sys
from survey.marks import MarkStore
store = MarkStore.load(sys.argv[1])
print("ready", flush=True)
i = 0
while True:
    marks = store.marks
    if i % 5 == 4 and marks:
        store.delete(marks[0].id)
    elif i % 3 == 2 and marks:
        m = marks[-1]
        store.edit(m.id, end_m=m.end_m + 1.0, note=m.note + " edited")
    else:
        store.add(i * 10.0, i * 10.0 + 5.0 + i / 7.0, f"edit {i}")
    print(i, flush=True)
    i += 1
"""


def model_states(count: int) -> list[list[dict]]:
    """States after 0, 1, ..., count edits of the CHILD sequence, as sidecar mark lists."""
    marks: dict[int, dict] = {}
    next_id = 1
    states = [[]]
    for i in range(count):
        by_start = sorted(marks.values(), key=lambda m: (m["start_m"], m["end_m"], m["id"]))
        if i % 5 == 4 and by_start:
            del marks[by_start[0]["id"]]
        elif i % 3 == 2 and by_start:
            m = by_start[-1]
            marks[m["id"]] = {**m, "end_m": m["end_m"] + 1.0, "note": m["note"] + " edited"}
        else:
            marks[next_id] = {"id": next_id, "start_m": i * 10.0, "end_m": i * 10.0 + 5.0 + i / 7.0, "note": f"edit {i}"}
            next_id += 1
        states.append([marks[k] for k in sorted(marks)])
    return states


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX SIGKILL")
def test_sidecar_survives_a_writer_killed_at_random_moments(tmp_path):
    rng = random.Random(20240611)
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    total_edits = 0
    for run in range(6):
        log = tmp_path / f"run{run}.nmea"
        log.write_bytes(b"$GPGGA,invented Heron Flats log*00\r\n")
        child = subprocess.Popen(
            [sys.executable, "-c", CHILD, str(log)], stdout=subprocess.PIPE, text=True, env=env
        )
        try:
            assert child.stdout.readline().strip() == "ready"
            time.sleep(rng.uniform(0.05, 0.6))
            child.send_signal(signal.SIGKILL)
            out, _ = child.communicate(timeout=30)
        finally:
            if child.poll() is None:
                child.kill()
                child.wait()
        assert child.returncode == -signal.SIGKILL
        reported = [int(x) for x in out.split()]
        done = (reported[-1] + 1) if reported else 0  # edits known to have returned
        side = sidecar_path(log)
        if not side.exists():
            assert done == 0
            continue
        doc = json.loads(side.read_text("utf-8"))  # must parse
        states = model_states(done + 1)
        assert doc["marks"] in (states[done], states[done + 1]), f"run {run}: after {done} edits"
        # the store reopens the file and can carry on
        store = MarkStore.load(log)
        assert len(store.marks) == len(doc["marks"])
        store.add(1e6, 1e6 + 1.0, "after the crash")
        total_edits += done
    assert total_edits > 20  # the writer really was writing when it was killed
