"""The trial recorder: per-step CSV, raw CAN log and meta.json that survive a hard kill.

Used by ``finloop run``, ``rig`` and ``sim``. What a SIGKILL (or a power cut of the process, not of
the machine) leaves behind:

* **steps CSV** (:class:`StepRecorder`): whole lines only from our side. Rows are formatted into
  our own buffer and handed to the OS with one ``os.write`` per batch of complete lines, at least
  once per ``flush_interval_s`` of wall time. The default ``0`` writes every row at once: measured
  with ``benchmarks/bench_links.py`` a 30-column row costs ~8.2 µs written at once vs ~7.0 µs
  batched once per second (0.04 % of a 50 Hz step either way), so the real-time paths keep every
  row and a kill loses at most the row in flight; fast offline runs may batch
  (``flush_interval_s=1.0``: a kill then loses at most the last second). Python's own buffered
  file is not used because a ``BufferedWriter`` flushes when its buffer fills, i.e. mid-line.
  The OS may still tear the very last line (full disk); :func:`read_steps_csv` drops an
  incomplete last line and says how many it dropped.
* **raw CAN log** (:class:`CanLogWriter`, python-can's writers chosen by extension) flushed at
  least once per second:

  - ``.log`` (candump ``-L`` text), ``.asc``, ``.csv``: text; frames up to the last flush
    survive; the last line may be torn (python-can's ``TextIOWrapper`` also flushes when its
    buffer fills); :func:`read_can_log` drops a torn last line. ``.asc`` has no end marker
    after a kill; its reader does not need one.
  - ``.blf``: python-can buffers frames and compresses them in containers of up to 128 KiB; the
    file header (object count, start time) is written only at close. We push a container
    every flush (``BLFWriter._flush``, a private method of python-can 4.6 — checked in tests).
    After a kill every pushed container reads back, but the start time in the header is missing,
    so time stamps read back relative (the first frame near 0 s), not as wall-clock times.
* **meta.json** (:func:`write_meta`): written to a temporary file and ``os.replace``-d, so it
  is always the old or the new version, never torn; ``status`` is ``"running"`` until
  :meth:`TrialRecorder.close` writes ``"finished"`` (or ``"stopped"``).
"""

from __future__ import annotations

import json
import math
import os
import time
from pathlib import Path
from typing import Any, NamedTuple, Sequence

import numpy as np

__all__ = [
    "CanLogWriter",
    "CanLogContents",
    "StepRecorder",
    "StepsTable",
    "TrialRecorder",
    "read_can_log",
    "read_steps_csv",
    "write_meta",
    "CAN_LOG_FORMATS",
]

CAN_LOG_FORMATS = ("log", "asc", "blf", "csv")
"""Raw CAN log formats offered in configs (python-can writers; ``log`` = candump style)."""


# ----------------------------------------------------------------------------------------------
# meta.json
# ----------------------------------------------------------------------------------------------


def _json_default(o):
    if isinstance(o, (np.floating, np.integer)):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def write_meta(path: str | os.PathLike, meta: dict, *, fsync: bool = True) -> None:
    """Write ``meta`` as JSON atomically: temp file in the same folder, then ``os.replace``.

    A reader sees the previous complete file or the new complete file, never a torn one.
    ``fsync`` also makes the new content durable against a power cut before the rename.
    """
    path = Path(path)
    text = json.dumps(meta, indent=2, default=_json_default, allow_nan=False) + "\n"
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
    try:
        data = text.encode("utf-8")
        view = memoryview(data)
        while view:
            n = os.write(fd, view)
            view = view[n:]
        if fsync:
            os.fsync(fd)
        os.close(fd)
        fd = -1
        os.replace(tmp, path)
    except BaseException:
        if fd >= 0:
            os.close(fd)
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


# ----------------------------------------------------------------------------------------------
# per-step CSV
# ----------------------------------------------------------------------------------------------


class StepRecorder:
    """Append rows of numbers to a CSV whose header carries the units (``roll_deg``, ``t_s``).

    Parameters
    ----------
    path:
        The CSV file (created; must not exist unless ``overwrite``).
    columns:
        Column names with their unit suffix; must be unique, without commas or line breaks.
    flush_interval_s:
        Hand complete lines to the OS at least this often (wall time, ``time.monotonic``), and at
        :meth:`flush`/:meth:`close`. ``0`` (default) writes every row at once.
    fmt:
        ``%``-format of one number (``%.7g`` as elsewhere in finloop's CSVs). NaN is written
        ``nan``, infinities ``inf``/``-inf`` (numpy reads them back).
    """

    def __init__(self, path: str | os.PathLike, columns: Sequence[str], *, flush_interval_s: float = 0.0,
                 fmt: str = "%.7g", overwrite: bool = False, max_buffer_bytes: int = 1 << 20):
        cols = [str(c) for c in columns]
        if not cols:
            raise ValueError("StepRecorder needs at least one column")
        if len(set(cols)) != len(cols):
            raise ValueError(f"duplicate column names: {cols}")
        for c in cols:
            if not c or any(ch in c for ch in ",\r\n\"") or c != c.strip():
                raise ValueError(f"bad column name {c!r} (no commas, quotes, line breaks or spaces at the ends)")
        if not flush_interval_s >= 0:
            raise ValueError("flush_interval_s must be >= 0")
        self.path = Path(path)
        self.columns = tuple(cols)
        self.flush_interval_s = float(flush_interval_s)
        self.max_buffer_bytes = int(max_buffer_bytes)
        self._line_fmt = ",".join([fmt] * len(cols)) + "\n"
        flags = os.O_WRONLY | os.O_CREAT | os.O_APPEND | (os.O_TRUNC if overwrite else os.O_EXCL)
        self._fd: int | None = os.open(self.path, flags, 0o644)
        self._pending: list[str] = []
        self._pending_bytes = 0
        self.rows = 0
        self.flushes = 0
        self._last_flush = time.monotonic()
        self._write_all((",".join(cols) + "\n").encode("utf-8"))

    def write(self, row: Sequence[float]) -> None:
        """Record one row (one number per column)."""
        if self._fd is None:
            raise ValueError(f"{self.path}: recorder is closed")
        if len(row) != len(self.columns):
            raise ValueError(f"row has {len(row)} values, expected {len(self.columns)} ({', '.join(self.columns)})")
        line = self._line_fmt % tuple(row)
        self._pending.append(line)
        self._pending_bytes += len(line)
        self.rows += 1
        now = time.monotonic()
        if (now - self._last_flush >= self.flush_interval_s) or self._pending_bytes >= self.max_buffer_bytes:
            self._flush(now)

    def flush(self) -> None:
        """Hand every complete line recorded so far to the OS (one ``write`` call)."""
        if self._fd is not None:
            self._flush(time.monotonic())

    def flush_if_due(self) -> None:
        """Flush when ``flush_interval_s`` has passed since the last flush (for pauses between rows)."""
        if self._fd is not None:
            now = time.monotonic()
            if now - self._last_flush >= self.flush_interval_s:
                self._flush(now)

    def _flush(self, now: float) -> None:
        if self._pending:
            data = "".join(self._pending).encode("ascii")
            self._pending.clear()
            self._pending_bytes = 0
            self._write_all(data)
            self.flushes += 1
        self._last_flush = now

    def _write_all(self, data: bytes) -> None:
        view = memoryview(data)
        while view:  # a regular file takes it in one call; loop only for the full-disk edge case
            n = os.write(self._fd, view)
            view = view[n:]

    def close(self) -> None:
        """Flush and close (idempotent)."""
        if self._fd is None:
            return
        try:
            self._flush(time.monotonic())
        finally:
            os.close(self._fd)
            self._fd = None

    @property
    def closed(self) -> bool:
        return self._fd is None

    def __enter__(self) -> "StepRecorder":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class StepsTable(NamedTuple):
    """What :func:`read_steps_csv` found: header names, a (rows × columns) float array, and how
    many lines at the end it dropped because they were incomplete."""

    columns: tuple[str, ...]
    data: np.ndarray
    dropped_lines: int


def read_steps_csv(path: str | os.PathLike) -> StepsTable:
    """Read a steps CSV written by :class:`StepRecorder` (or ``hil.runfolder.write_steps_csv``).

    An incomplete last line (no line end, or too few fields, or a number cut short so it no
    longer parses) is dropped and counted — what a hard kill can leave. A bad line anywhere else
    is an error (``ValueError`` naming the line).
    """
    path = Path(path)
    text = path.read_text(encoding="utf-8", errors="replace")
    lines = text.split("\n")
    tail_torn = lines[-1] != ""  # file does not end in a line break
    if not tail_torn:
        lines.pop()
    if not lines or not lines[0].strip():
        raise ValueError(f"{path}: empty file, no header")
    header = lines[0].rstrip("\r")
    if tail_torn and len(lines) == 1:
        raise ValueError(f"{path}: header line is incomplete")
    columns = tuple(header.split(","))
    ncol = len(columns)
    body = lines[1:]
    dropped = 0
    rows: list[list[float]] = []
    for i, line in enumerate(body):
        last = i == len(body) - 1
        parts = line.rstrip("\r").split(",")
        try:
            if len(parts) != ncol:
                raise ValueError(f"{len(parts)} fields, expected {ncol}")
            values = [float(p) for p in parts]
        except ValueError as exc:
            if last:
                dropped += 1
                continue
            raise ValueError(f"{path}: line {i + 2}: {exc}") from None
        if last and tail_torn:
            # complete-looking but unterminated: the last field may be cut short ("1.2345" of
            # "1.23456"); drop it, a recorder always ends a line with "\n"
            dropped += 1
            continue
        rows.append(values)
    data = np.array(rows, dtype=float).reshape(len(rows), ncol)
    return StepsTable(columns, data, dropped)


# ----------------------------------------------------------------------------------------------
# raw CAN log
# ----------------------------------------------------------------------------------------------


class CanLogWriter:
    """python-can's log writer for ``path`` (format by extension) with a flush at least once per
    ``flush_interval_s`` of wall time and at :meth:`close`.

    ``log_message(msg)`` takes a ``can.Message``; :meth:`log_frame` builds one. Time stamps are
    what the message carries (``time.time()`` when built here).
    """

    def __init__(self, path: str | os.PathLike, *, flush_interval_s: float = 1.0):
        import can

        self._can = can
        self.path = Path(path)
        ext = self.path.suffix.lower().lstrip(".")
        if ext not in CAN_LOG_FORMATS:
            raise ValueError(f"{self.path}: CAN log format {ext!r} not supported "
                             f"(use one of: {', '.join('.' + f for f in CAN_LOG_FORMATS)})")
        self.format = ext
        self.flush_interval_s = float(flush_interval_s)
        self._writer = can.Logger(str(self.path))
        self._last_flush = time.monotonic()
        self.frames = 0
        self._closed = False

    def log_message(self, msg) -> None:
        if self._closed:
            raise ValueError(f"{self.path}: CAN log is closed")
        self._writer.on_message_received(msg)
        self.frames += 1
        now = time.monotonic()
        if now - self._last_flush >= self.flush_interval_s:
            self._flush(now)

    def log_frame(self, arbitration_id: int, data: bytes, *, is_extended_id: bool = False,
                  is_rx: bool = True, timestamp: float | None = None, channel: str | None = None) -> None:
        msg = self._can.Message(arbitration_id=arbitration_id, data=bytes(data), is_extended_id=is_extended_id,
                                is_rx=is_rx, timestamp=time.time() if timestamp is None else timestamp,
                                channel=channel, check=True)
        self.log_message(msg)

    def flush(self) -> None:
        if not self._closed:
            self._flush(time.monotonic())

    def flush_if_due(self) -> None:
        """Flush when ``flush_interval_s`` has passed since the last flush (call it on idle
        cycles: the automatic flush happens only when a frame is logged)."""
        if not self._closed:
            now = time.monotonic()
            if now - self._last_flush >= self.flush_interval_s:
                self._flush(now)

    def _flush(self, now: float) -> None:
        w = self._writer
        push = getattr(w, "_flush", None)  # BLFWriter: compress the pending container now
        if callable(push):
            push()
        f = getattr(w, "file", None)
        if f is not None and not f.closed:
            f.flush()
        self._last_flush = now

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        self._writer.stop()

    def __enter__(self) -> "CanLogWriter":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class CanLogContents(NamedTuple):
    messages: list
    dropped_lines: int


def read_can_log(path: str | os.PathLike) -> CanLogContents:
    """Read a raw CAN log with python-can's readers (``can.LogReader`` formats).

    Text formats: an unterminated last line (hard kill) is dropped and counted. Returns
    ``(messages, dropped_lines)``; messages are ``can.Message`` objects in file order.
    """
    import io

    import can

    path = Path(path)
    ext = path.suffix.lower()
    if ext in (".log", ".asc", ".csv"):
        text = path.read_text(encoding="utf-8", errors="replace")
        dropped = 0
        if text and not text.endswith("\n"):
            cut = text.rfind("\n")
            text = text[: cut + 1] if cut >= 0 else ""
            dropped = 1
        reader_cls = {".log": can.CanutilsLogReader, ".asc": can.ASCReader, ".csv": can.CSVReader}[ext]
        kwargs: dict[str, Any] = {"relative_timestamp": False} if ext == ".asc" else {}
        if ext == ".csv" and not text:
            return CanLogContents([], dropped)
        with reader_cls(io.StringIO(text), **kwargs) as reader:
            return CanLogContents(list(reader), dropped)
    with can.LogReader(str(path)) as reader:
        return CanLogContents(list(reader), 0)


# ----------------------------------------------------------------------------------------------
# one trial = steps CSV + optional CAN log + meta.json
# ----------------------------------------------------------------------------------------------


class TrialRecorder:
    """Recorder of one trial in ``folder``: ``steps.csv``, ``can.<format>`` and ``meta.json``.

    ``meta.json`` is written at start with ``status = "running"`` (plus ``started_utc``) and
    rewritten at :meth:`close` with the final status (``finished`` or ``stopped``), row and frame
    counts and ``ended_utc``. Used as a context manager, an exception closes it as ``stopped``
    with the error text. ``fmt`` is the number format of the steps CSV (``"%.17g"`` when a replay
    must reproduce float64 values exactly).
    """

    def __init__(self, folder: str | os.PathLike, columns: Sequence[str], meta: dict | None = None, *,
                 can_log_format: str | None = "log", steps_flush_interval_s: float = 0.0,
                 can_flush_interval_s: float = 1.0, steps_name: str = "steps.csv", fmt: str = "%.7g"):
        import datetime as _dt

        self.folder = Path(folder)
        self.folder.mkdir(parents=True, exist_ok=True)
        self.meta_path = self.folder / "meta.json"
        self.meta = dict(meta or {})
        self.meta.setdefault("started_utc", _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"))
        self.meta["status"] = "running"
        self.steps = StepRecorder(self.folder / steps_name, columns, flush_interval_s=steps_flush_interval_s,
                                  fmt=fmt)
        self.can_log: CanLogWriter | None = None
        try:
            if can_log_format is not None:
                if can_log_format not in CAN_LOG_FORMATS:
                    raise ValueError(f"can_log_format {can_log_format!r} not one of {', '.join(CAN_LOG_FORMATS)}")
                self.can_log = CanLogWriter(self.folder / f"can.{can_log_format}",
                                            flush_interval_s=can_flush_interval_s)
            self.meta["files"] = {"steps": steps_name, **({"can_log": self.can_log.path.name} if self.can_log else {})}
            write_meta(self.meta_path, _finite(self.meta))
        except BaseException:
            self.steps.close()
            if self.can_log is not None:
                self.can_log.close()
            raise
        self._closed = False

    def write_step(self, row: Sequence[float]) -> None:
        self.steps.write(row)

    def log_message(self, msg) -> None:
        if self.can_log is not None:
            self.can_log.log_message(msg)

    def flush_if_due(self) -> None:
        """Flush the steps CSV and the CAN log if their interval has passed (call on idle cycles)."""
        self.steps.flush_if_due()
        if self.can_log is not None:
            self.can_log.flush_if_due()

    def update_meta(self, **fields: Any) -> None:
        """Merge ``fields`` into meta.json now (atomic rewrite)."""
        self.meta.update(fields)
        write_meta(self.meta_path, _finite(self.meta))

    def close(self, status: str = "finished", **fields: Any) -> None:
        if self._closed:
            return
        import datetime as _dt

        self._closed = True
        self.steps.close()
        if self.can_log is not None:
            self.can_log.close()
        self.meta.update(fields)
        self.meta.update({
            "status": status,
            "ended_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "rows": self.steps.rows,
            "can_frames": self.can_log.frames if self.can_log is not None else 0,
        })
        write_meta(self.meta_path, _finite(self.meta))

    def __enter__(self) -> "TrialRecorder":
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close("finished")
        else:
            self.close("stopped", error=f"{exc_type.__name__}: {exc}")


def _finite(obj):
    """Replace non-finite floats by None so meta.json stays strict JSON."""
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite(v) for v in obj]
    return obj
