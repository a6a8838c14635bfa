"""Trial recorder: steps CSV, raw CAN log, meta.json — and what survives a SIGKILL.

Outside references: numpy.loadtxt reads the CSV back (reference reader); python-can's
``can.LogReader`` / format readers read the CAN logs back (reference reader of its own writers);
the json module checks meta.json is strict JSON (RFC 8259); POSIX rename(2) (``os.replace``) is
atomic within one file system, which is what makes meta.json never torn.
"""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

can = pytest.importorskip("can")

from hil.recorder import (  # noqa: E402
    CanLogWriter,
    StepRecorder,
    TrialRecorder,
    read_can_log,
    read_steps_csv,
    write_meta,
)

ROOT = Path(__file__).resolve().parents[1]


def test_steps_csv_reads_back_with_numpy_and_our_reader(tmp_path):
    p = tmp_path / "steps.csv"
    cols = ["t_s", "roll_deg", "roll_rate_deg_s"]
    rows = [[0.0, 1.25, -0.5], [0.02, 1.5, math.nan], [0.04, -2.0e-3, 1e6]]
    with StepRecorder(p, cols) as rec:
        for r in rows:
            rec.write(r)
    assert p.read_text().splitlines()[0] == "t_s,roll_deg,roll_rate_deg_s"
    ref = np.loadtxt(p, delimiter=",", skiprows=1)  # reference reader
    np.testing.assert_allclose(ref, np.array(rows), rtol=1e-6, equal_nan=True)  # %.7g keeps 7 digits
    t = read_steps_csv(p)
    assert t.columns == tuple(cols) and t.dropped_lines == 0
    np.testing.assert_array_equal(t.data, ref)


def test_rows_wait_in_our_buffer_until_the_flush_interval_and_then_go_out_whole(tmp_path):
    p = tmp_path / "steps.csv"
    rec = StepRecorder(p, ["step", "x_m"], flush_interval_s=3600.0)
    rec.write([0, 1.0])
    rec.write([1, 2.0])
    assert p.read_text() == "step,x_m\n"  # header only: rows not yet handed to the OS
    rec.flush()
    assert p.read_text() == "step,x_m\n0,1\n1,2\n"
    rec.close()
    rec.close()  # idempotent
    assert rec.flushes == 1
    with pytest.raises(ValueError, match="closed"):
        rec.write([2, 3.0])


def test_flush_if_due_flushes_only_after_the_interval(tmp_path, monkeypatch):
    import hil.recorder as R

    now = [1000.0]
    monkeypatch.setattr(R.time, "monotonic", lambda: now[0])  # a controlled clock, not a timing test
    p = tmp_path / "steps.csv"
    rec = StepRecorder(p, ["step"], flush_interval_s=1.0)
    rec.write([0])
    now[0] += 0.5
    rec.flush_if_due()
    assert p.read_text() == "step\n"
    now[0] += 0.5
    rec.flush_if_due()
    assert p.read_text() == "step\n0\n"
    w = CanLogWriter(tmp_path / "can.log")
    w.log_frame(0x110, b"\x01", timestamp=5.0)
    assert (tmp_path / "can.log").read_text() == ""
    now[0] += 1.0
    w.flush_if_due()
    assert read_can_log(tmp_path / "can.log").messages[0].arbitration_id == 0x110
    rec.close()
    w.close()


def test_flush_interval_zero_writes_every_row_at_once(tmp_path):
    p = tmp_path / "steps.csv"
    rec = StepRecorder(p, ["step"], flush_interval_s=0.0)
    for i in range(3):
        rec.write([i])
        assert p.read_text().count("\n") == i + 2
    rec.close()


def test_step_recorder_refuses_bad_columns_rows_and_existing_files(tmp_path):
    with pytest.raises(ValueError, match="duplicate"):
        StepRecorder(tmp_path / "a.csv", ["t_s", "t_s"])
    with pytest.raises(ValueError, match="bad column"):
        StepRecorder(tmp_path / "b.csv", ["roll,deg"])
    with StepRecorder(tmp_path / "c.csv", ["t_s", "x_m"]) as rec:
        with pytest.raises(ValueError, match="expected 2"):
            rec.write([1.0])
    with pytest.raises(FileExistsError):
        StepRecorder(tmp_path / "c.csv", ["t_s"])


@pytest.mark.parametrize("tail, dropped, nrows", [
    ("", 0, 2),                 # clean end
    ("2,3.", 1, 2),             # torn mid-row (too few fields)
    ("2,3.25", 1, 2),           # all fields but no line end: last number may be cut short
    ("2,", 1, 2),
])
def test_torn_last_line_is_dropped_and_counted(tmp_path, tail, dropped, nrows):
    p = tmp_path / "steps.csv"
    p.write_text("step,x_m\n0,1.5\n1,2.5\n" + tail)
    t = read_steps_csv(p)
    assert t.dropped_lines == dropped and t.data.shape == (nrows, 2)
    np.testing.assert_array_equal(t.data, [[0, 1.5], [1, 2.5]])


def test_bad_line_inside_the_file_is_an_error_naming_the_line(tmp_path):
    p = tmp_path / "steps.csv"
    p.write_text("step,x_m\n0,1.5\n1\n2,2.5\n")
    with pytest.raises(ValueError, match="line 3"):
        read_steps_csv(p)


def test_header_only_file_gives_an_empty_table(tmp_path):
    p = tmp_path / "steps.csv"
    StepRecorder(p, ["t_s", "roll_deg"]).close()
    t = read_steps_csv(p)
    assert t.data.shape == (0, 2) and t.dropped_lines == 0


def test_write_meta_is_atomic_old_or_new_never_torn(tmp_path, monkeypatch):
    p = tmp_path / "meta.json"
    write_meta(p, {"status": "running", "seed": np.int64(7), "path": tmp_path})
    assert json.loads(p.read_text()) == {"status": "running", "seed": 7, "path": str(tmp_path)}

    def boom(src, dst):
        raise OSError("disk gone")

    monkeypatch.setattr(os, "replace", boom)
    with pytest.raises(OSError):
        write_meta(p, {"status": "finished"})
    assert json.loads(p.read_text())["status"] == "running"  # the old file, intact
    assert [x.name for x in tmp_path.iterdir()] == ["meta.json"]  # no temp file left behind
    monkeypatch.undo()
    write_meta(p, {"status": "finished"})
    assert json.loads(p.read_text()) == {"status": "finished"}
    assert [x.name for x in tmp_path.iterdir()] == ["meta.json"]
    with pytest.raises(ValueError):  # strict JSON (RFC 8259 has no NaN)
        write_meta(p, {"x": math.nan})


@pytest.mark.parametrize("fmt", ["log", "asc", "blf", "csv"])
def test_can_log_round_trips_through_python_can_readers(tmp_path, fmt):
    p = tmp_path / f"can.{fmt}"
    sent = [(0x110, b"\x01\x02\x03"), (0x210, b""), (0x7FF, bytes(range(8)))]
    with CanLogWriter(p) as w:
        for i, (ident, data) in enumerate(sent):
            w.log_frame(ident, data, timestamp=1_700_000_000.0 + 0.02 * i)
    msgs, dropped = read_can_log(p)
    assert dropped == 0
    assert [(m.arbitration_id, bytes(m.data), m.is_extended_id) for m in msgs] == [(i, d, False) for i, d in sent]
    # absolute wall-clock stamps survive a clean close in every format (asc read absolute)
    assert msgs[0].timestamp == pytest.approx(1_700_000_000.0, abs=1e-3)
    assert msgs[2].timestamp - msgs[0].timestamp == pytest.approx(0.04, abs=1e-3)


def test_can_log_with_torn_last_line_reads_the_rest(tmp_path):
    p = tmp_path / "can.log"
    with CanLogWriter(p) as w:
        w.log_frame(0x110, b"\x01", timestamp=100.0)
        w.log_frame(0x111, b"\x02", timestamp=100.02)
    with p.open("a") as fh:
        fh.write("(100.040000) can 112#0")  # cut by a kill
    msgs, dropped = read_can_log(p)
    assert dropped == 1 and [m.arbitration_id for m in msgs] == [0x110, 0x111]


def test_can_log_refuses_unknown_formats(tmp_path):
    with pytest.raises(ValueError, match="not supported"):
        CanLogWriter(tmp_path / "can.txt")


def test_blf_flush_uses_the_python_can_hook_we_rely_on(tmp_path):
    # BLFWriter._flush (python-can 4.6, private) pushes the pending container; if python-can renames
    # it, the periodic BLF flush silently stops: this test is the alarm
    p = tmp_path / "can.blf"
    w = CanLogWriter(p)
    assert callable(getattr(w._writer, "_flush", None))
    w.log_frame(0x110, b"\x01")
    size0 = p.stat().st_size
    w.flush()
    assert p.stat().st_size > size0
    w.close()


def test_trial_recorder_meta_goes_running_then_finished_or_stopped(tmp_path):
    with TrialRecorder(tmp_path / "a", ["t_s", "roll_deg"], {"seed": 3}) as tr:
        assert json.loads((tmp_path / "a" / "meta.json").read_text())["status"] == "running"
        tr.write_step([0.0, 1.0])
        tr.log_message(can.Message(arbitration_id=0x110, data=b"\x01", is_extended_id=False))
    meta = json.loads((tmp_path / "a" / "meta.json").read_text())
    assert meta["status"] == "finished" and meta["rows"] == 1 and meta["can_frames"] == 1 and meta["seed"] == 3
    assert meta["files"] == {"steps": "steps.csv", "can_log": "can.log"}
    with pytest.raises(RuntimeError):
        with TrialRecorder(tmp_path / "b", ["t_s"], can_log_format=None):
            raise RuntimeError("rig lost")
    meta = json.loads((tmp_path / "b" / "meta.json").read_text())
    assert meta["status"] == "stopped" and meta["error"] == "RuntimeError: rig lost"


def test_17_significant_digits_round_trip_float64_exactly(tmp_path):
    # IEEE 754-2008 §5.12.2: 17 significant decimal digits identify every binary64 value
    x = [0.1 + 0.2, math.pi, -1.0 / 3.0, 2.0 ** -1074, 1.7976931348623157e308]
    with TrialRecorder(tmp_path / "r", [f"x{i}" for i in range(5)], can_log_format=None, fmt="%.17g") as tr:
        tr.write_step(x)
    t = read_steps_csv(tmp_path / "r" / "steps.csv")
    assert t.data[0].tolist() == x


_CHILD = textwrap.dedent(
    """
    import sys, time
    sys.path.insert(0, {root!r})
    import can
    from hil.recorder import TrialRecorder
    rec = TrialRecorder({folder!r}, ["step", "t_s", "roll_deg"], {{"seed": 1}}, can_log_format="log",
                        steps_flush_interval_s={interval!r}, can_flush_interval_s=1.0)
    t0 = time.monotonic()
    i = 0
    while True:
        t = time.monotonic() - t0
        rec.write_step([i, t, 0.001 * i])
        rec.log_message(can.Message(arbitration_id=0x110, data=i.to_bytes(4, "little"),
                                    is_extended_id=False, timestamp=time.time()))
        print(i, flush=True)          # progress: row i has been handed to the recorder
        i += 1
        time.sleep(max(0.0, t0 + 0.02 * i - time.monotonic()))   # ~50 Hz
    """
)


@pytest.mark.parametrize("interval, max_lost_rows", [
    (1.0, 52),  # batched once per second: at most 1 s ≈ 50 rows at 50 Hz, plus the row in flight
    (0.0, 1),   # every row written at once (the default): only the row in flight
])
def test_sigkill_mid_trial_leaves_readable_files_losing_at_most_one_flush_interval(tmp_path, interval, max_lost_rows):
    folder = tmp_path / "trial"
    code = _CHILD.format(root=str(ROOT), folder=str(folder), interval=interval)
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    reported = -1
    try:
        t_end = time.monotonic() + 30.0
        while time.monotonic() < t_end:
            line = child.stdout.readline()
            if not line:
                break
            reported = int(line)
            if reported >= (125 if interval else 60):  # ~2.5 s / ~1.2 s at 50 Hz
                break
        os.kill(child.pid, signal.SIGKILL)
        rest = child.stdout.read()
    finally:
        child.wait(10)
    for line in rest.split():
        reported = int(line)
    assert child.returncode == -signal.SIGKILL
    assert reported >= 60, "child did not get going"

    steps = read_steps_csv(folder / "steps.csv")
    assert steps.columns == ("step", "t_s", "roll_deg")
    n = steps.data.shape[0]
    # rows are whole and in order: 0, 1, 2, ... with no gap or repeat
    np.testing.assert_array_equal(steps.data[:, 0], np.arange(n))
    lost = reported + 1 - n
    assert -1 <= lost <= max_lost_rows, (reported, n)
    assert n >= 1

    msgs, _ = read_can_log(folder / "can.log")  # readable by python-can's candump reader
    ids = [int.from_bytes(bytes(m.data), "little") for m in msgs]
    assert ids == list(range(len(ids))) and reported + 1 - len(ids) <= 52

    meta = json.loads((folder / "meta.json").read_text())  # valid JSON, never torn
    assert meta["status"] == "running" and meta["seed"] == 1
