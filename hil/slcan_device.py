"""The device side of a USB-CAN adapter, emulated on a pseudo-terminal.

python-can's ``slcan`` interface is the *host* side of the serial-line CAN ASCII protocol of the
LAWICEL CAN232 / CANUSB adapters. There is no library for the *device* side, so this module is
one, in plain Python (``os``, ``tty``, ``select``). The rig emulator creates a
:class:`SlcanDevice`, hands its pty path (or a symlink such as ``/tmp/finloop-rig/can0``) to the
runner, and calls :meth:`SlcanDevice.poll` / :meth:`SlcanDevice.send` in its loop.

Protocol (LAWICEL CAN232 manual v3 and CANUSB manual, "ASCII command set"; lines end in CR)
--------------------------------------------------------------------------------------------
======================  ======================================  ===========================
host sends              meaning                                 device answers
======================  ======================================  ===========================
``Sn``  n = 0..8        set a standard bit rate (channel closed) CR, or BEL if open/bad n
``sxxyy``               set BTR0/BTR1 (channel closed)           CR, or BEL
``O`` / ``L``           open channel (``L``: listen only)        CR, or BEL if already open
``C``                   close channel                            CR, or BEL if not open
``tiiildd..``           send 11-bit data frame (l = 0..8)        ``z`` CR, or BEL
``Tiiiiiiiildd..``      send 29-bit data frame                   ``Z`` CR, or BEL
``riiil`` / ``Riiiiiiiil``  send remote frame                    ``z`` CR / ``Z`` CR, or BEL
``V``                   version                                  ``Vhhss`` CR
``N``                   serial number                            ``Nxxxx`` CR
``F``                   status flags (clears them)               ``Fxx`` CR
``Zn``  n = 0/1         time stamps off/on                       CR
(empty line)            (python-can sends one when setting the bit rate)  CR
anything else                                                    BEL
======================  ======================================  ===========================

Frames from the bus to the host are sent as ``tiiildd..`` CR (``T``/``r``/``R`` likewise), with a
4-hex-digit millisecond stamp (0..0xEA5F, wraps every 60 s) before the CR when ``Z1`` is on.

Status flags of ``F`` (CANUSB manual, from memory): bit 0 receive FIFO full, bit 1 transmit FIFO
full, bit 2 error warning, bit 3 data overrun, bit 5 error passive, bit 6 arbitration lost,
bit 7 bus error.

python-can (4.6) sends ``C``, ``S6`` (for 500 kbit/s), an empty line, ``O`` on open when a
bitrate is given, then ``O`` once more; ``C`` on shutdown. It ignores every reply that is not a
frame (``CR``, ``z``, ``BEL``, ``F..``), and its ``slcan`` bus has **no way to report a bus
error** from this protocol. Bus-error injection here is therefore: :meth:`SlcanDevice.set_status`
(answers to ``F``), :meth:`SlcanDevice.send_error_reply` (a spontaneous BEL, ignored by
python-can) and, the one a host does notice, :meth:`SlcanDevice.close` / :meth:`hang_up`: the host's
next read or write fails with EIO ("adapter unplugged").

Each reply and each frame to the host is written with one ``os.write`` call. The master side is
non-blocking: when the host does not read and the pty buffer fills, frames are dropped and
counted (``stats['dropped_to_host']``), the emulator never stalls.
"""

from __future__ import annotations

import errno
import os
import select
import time
import tty
from pathlib import Path

from .links import CanFrame

__all__ = ["PtyEndpoint", "SlcanDevice", "SLCAN_BITRATES", "encode_frame", "parse_frame"]

CR = b"\r"
BEL = b"\a"

SLCAN_BITRATES: dict[str, int] = {
    # LAWICEL CANUSB manual, command S: S0 10k ... S8 1M (S7 is 800 kbit/s there; python-can 4.6
    # maps 750000 to S7 — the code is what travels, the emulator does not care)
    "S0": 10_000, "S1": 20_000, "S2": 50_000, "S3": 100_000, "S4": 125_000,
    "S5": 250_000, "S6": 500_000, "S7": 800_000, "S8": 1_000_000,
}

_HEX = set("0123456789abcdefABCDEF")


def encode_frame(arbitration_id: int, data: bytes = b"", is_extended_id: bool = False,
                 is_remote: bool = False, dlc: int | None = None) -> bytes:
    """The ASCII line (with CR) that carries one classic CAN frame (LAWICEL ``t/T/r/R``)."""
    data = bytes(data)
    n = len(data) if dlc is None else int(dlc)
    if not 0 <= n <= 8 or (not is_remote and n != len(data)):
        raise ValueError(f"classic CAN carries 0..8 data bytes, got {len(data)} (dlc {n})")
    limit = 0x1FFFFFFF if is_extended_id else 0x7FF
    if not 0 <= arbitration_id <= limit:
        raise ValueError(f"identifier 0x{arbitration_id:X} out of range (0..0x{limit:X})")
    if is_extended_id:
        head = f"{'R' if is_remote else 'T'}{arbitration_id:08X}{n:d}"
    else:
        head = f"{'r' if is_remote else 't'}{arbitration_id:03X}{n:d}"
    body = "" if is_remote else data.hex().upper()
    return (head + body).encode("ascii") + CR


def parse_frame(line: str, t_rx_s: float = 0.0) -> CanFrame:
    """Parse one ``t/T/r/R`` command (without the CR); raises ``ValueError`` when malformed.

    A trailing 4-digit time stamp is not accepted from the host (only devices send stamps).
    """
    if not line or line[0] not in "tTrR":
        raise ValueError(f"not a frame command: {line!r}")
    ext = line[0] in "TR"
    remote = line[0] in "rR"
    id_len = 8 if ext else 3
    if len(line) < 1 + id_len + 1:
        raise ValueError(f"frame command too short: {line!r}")
    ident = line[1:1 + id_len]
    dlc_ch = line[1 + id_len]
    if not set(ident) <= _HEX or dlc_ch not in "012345678":
        raise ValueError(f"bad identifier or length in {line!r}")
    arb = int(ident, 16)
    if arb > (0x1FFFFFFF if ext else 0x7FF):
        raise ValueError(f"identifier out of range in {line!r}")
    dlc = int(dlc_ch)
    payload = line[2 + id_len:]
    if remote:
        if payload:
            raise ValueError(f"remote frame with data in {line!r}")
        return CanFrame(t_rx_s, arb, b"", ext, True, False)
    if len(payload) != 2 * dlc or not set(payload) <= _HEX:
        raise ValueError(f"data does not match length {dlc} in {line!r}")
    return CanFrame(t_rx_s, arb, bytes.fromhex(payload), ext, False, False)


# ----------------------------------------------------------------------------------------------
# pty plumbing shared by the CAN adapter and the plain serial endpoints
# ----------------------------------------------------------------------------------------------


class _Pty:
    """A pty pair: we keep the master (our side) and the slave open; the host opens the slave path."""

    def __init__(self, link_path: str | os.PathLike | None = None):
        self.link_path = Path(link_path) if link_path is not None else None
        self.master: int | None = None
        self.slave: int | None = None
        self.slave_path: str | None = None
        self._linked = False
        self._tail = b""

    def open(self) -> str:
        """Create the pty (idempotent); returns the path the host opens (symlink if given)."""
        if self.master is not None:
            return self.path
        master, slave = os.openpty()
        tty.setraw(slave)  # no echo, no CR/LF translation, no line editing on the host's side
        tty.setraw(master)
        os.set_blocking(master, False)
        self.master, self.slave = master, slave
        self.slave_path = os.ttyname(slave)
        if self.link_path is not None:
            self.link_path.parent.mkdir(parents=True, exist_ok=True)
            tmp = self.link_path.with_name(f".{self.link_path.name}.{os.getpid()}.tmp")
            if tmp.is_symlink() or tmp.exists():
                tmp.unlink()
            os.symlink(self.slave_path, tmp)
            os.replace(tmp, self.link_path)  # atomic: a stale link from a dead rig is replaced
            self._linked = True
        return self.path

    @property
    def path(self) -> str:
        if self.slave_path is None:
            raise RuntimeError("pty not open")
        return str(self.link_path) if self.link_path is not None else self.slave_path

    def fileno(self) -> int:
        if self.master is None:
            raise RuntimeError("pty not open")
        return self.master

    @property
    def is_open(self) -> bool:
        return self.master is not None

    def close(self) -> None:
        """Close both ends (the host then reads/writes EIO) and remove our symlink. Idempotent."""
        if self._linked and self.link_path is not None:
            try:
                if os.path.islink(self.link_path) and os.readlink(self.link_path) == self.slave_path:
                    os.unlink(self.link_path)
            except OSError:
                pass
            self._linked = False
        for fd in (self.master, self.slave):
            if fd is not None:
                try:
                    os.close(fd)
                except OSError:
                    pass
        self.master = self.slave = None
        self._tail = b""

    def _write(self, data: bytes) -> bool:
        """One ``os.write``; ``False`` (nothing written) when the host is not keeping up.

        If the pty buffer fills in the middle of a line, the rest of that line is kept and
        written first next time, so the host never sees a torn line; until it has gone out,
        further lines are refused.
        """
        if self.master is None:
            raise RuntimeError("pty not open")
        if self._tail:
            try:
                n = os.write(self.master, self._tail)
            except BlockingIOError:
                return False
            self._tail = self._tail[n:]
            if self._tail:
                return False
        try:
            n = os.write(self.master, data)
        except BlockingIOError:
            return False
        if n != len(data):
            self._tail = data[n:]
        return True

    def _read_available(self, max_bytes: int = 65536) -> bytes:
        if self.master is None:
            raise RuntimeError("pty not open")
        try:
            return os.read(self.master, max_bytes)
        except BlockingIOError:
            return b""
        except OSError as exc:  # pragma: no cover - we hold the slave open, so no EIO expected
            if exc.errno == errno.EIO:
                return b""
            raise

    def _wait_readable(self, timeout_s: float) -> bool:
        r, _, _ = select.select([self.master], [], [], max(0.0, timeout_s))
        return bool(r)

    def __enter__(self):
        self.open()
        return self

    def __exit__(self, *exc):
        self.close()


class PtyEndpoint(_Pty):
    """A serial endpoint of the emulated rig (motion sensor, speed log) on a pty.

    ``open()`` returns the path for pyserial (the symlink ``link_path`` when given). The rig
    :meth:`write` s whole NMEA sentences / binary records, one ``os.write`` each; ``False`` means
    the host has not read for a while and the bytes were dropped (counted in ``dropped``).
    Data written before the host opens the port waits in the pty; the runner should discard
    stale input after opening (:meth:`hil.links.SerialLink.reset_input`).
    """

    def __init__(self, link_path: str | os.PathLike | None = None):
        super().__init__(link_path)
        self.bytes_out = 0
        self.bytes_in = 0
        self.dropped = 0

    def write(self, data: bytes) -> bool:
        ok = self._write(bytes(data))
        if ok:
            self.bytes_out += len(data)
        else:
            self.dropped += 1
        return ok

    def read_available(self, max_bytes: int = 65536) -> bytes:
        data = self._read_available(max_bytes)
        self.bytes_in += len(data)
        return data

    def wait_readable(self, timeout_s: float) -> bool:
        return self._wait_readable(timeout_s)


class SlcanDevice(_Pty):
    """An emulated serial-line CAN adapter (LAWICEL protocol, device side) on a pty.

    Parameters
    ----------
    link_path:
        Optional symlink to the pty slave (e.g. ``/tmp/finloop-rig/can0``), replaced atomically
        on :meth:`open`, removed on :meth:`close`.
    version:
        Four digits answered to ``V`` (hardware, software), e.g. ``"0101"``.
    serial_number:
        Four characters answered to ``N``.

    Use: ``path = dev.open()``; in the rig loop ``frames = dev.poll(timeout_s)`` (frames the host
    sent while the channel was open) and ``dev.send(0x120, b"...")`` (a frame to the host; only
    delivered while the host has the channel open — ``O`` — like a real adapter).
    """

    def __init__(self, link_path: str | os.PathLike | None = None, *, version: str = "0101",
                 serial_number: str = "FL01"):
        super().__init__(link_path)
        if len(version) != 4 or not version.isdigit():
            raise ValueError("version must be four digits (hhss)")
        if len(serial_number) != 4 or not serial_number.isalnum():
            raise ValueError("serial_number must be four letters or digits")
        self.version = version
        self.serial_number = serial_number
        self.bus_open = False
        self.listen_only = False
        self.bitrate: int | None = None
        self.btr: str | None = None
        self.timestamps = False
        self.status_flags = 0
        self.commands: list[str] = []  # every command line received, oldest first (capped)
        self.max_commands = 1000
        self._buf = bytearray()
        self._t0 = time.monotonic()
        self.stats = {
            "frames_from_host": 0, "frames_to_host": 0, "dropped_to_host": 0, "not_open_to_host": 0,
            "commands": 0, "errors_replied": 0,
        }

    # -- host → device -----------------------------------------------------------------------
    def poll(self, timeout_s: float = 0.0) -> list[CanFrame]:
        """Wait up to ``timeout_s`` for input, answer every complete command, return host frames."""
        if self.master is None:
            raise RuntimeError("SlcanDevice not open")
        frames: list[CanFrame] = []
        if not self._buf or CR not in self._buf:
            if timeout_s > 0 and not self._wait_readable(timeout_s):
                return frames
        while True:
            chunk = self._read_available()
            if not chunk:
                break
            self._buf += chunk
        t = time.monotonic()
        while True:
            i = self._buf.find(CR)
            if i < 0:
                if len(self._buf) > 64:  # garbage without CR: no command is this long
                    self._buf.clear()
                    self._reply(BEL)
                break
            line = self._buf[:i].decode("ascii", "replace")
            del self._buf[:i + 1]
            frame = self._command(line, t)
            if frame is not None:
                frames.append(frame)
        return frames

    def _reply(self, data: bytes) -> None:
        if data == BEL:
            self.stats["errors_replied"] += 1
        self._write(data)

    def _command(self, line: str, t: float) -> CanFrame | None:
        self.stats["commands"] += 1
        if len(self.commands) < self.max_commands:
            self.commands.append(line)
        line = line.lstrip("\n")  # tolerate CR LF from terminal programs
        if line == "":
            self._reply(CR)
            return None
        c = line[0]
        if c in "tTrR":
            if not self.bus_open or self.listen_only:
                self._reply(BEL)
                return None
            try:
                frame = parse_frame(line, t)
            except ValueError:
                self._reply(BEL)
                return None
            self.stats["frames_from_host"] += 1
            self._reply(b"Z\r" if frame.is_extended_id else b"z\r")
            return frame
        if c == "S" and len(line) == 2 and line in SLCAN_BITRATES and not self.bus_open:
            self.bitrate = SLCAN_BITRATES[line]
            self.btr = None
            self._reply(CR)
        elif c == "s" and len(line) == 5 and set(line[1:]) <= _HEX and not self.bus_open:
            self.btr = line[1:].upper()
            self.bitrate = None
            self._reply(CR)
        elif line in ("O", "L"):
            if self.bus_open:
                self._reply(BEL)
            else:
                self.bus_open = True
                self.listen_only = line == "L"
                self._reply(CR)
        elif line == "C":
            if self.bus_open:
                self.bus_open = False
                self.listen_only = False
                self._reply(CR)
            else:
                self._reply(BEL)
        elif line == "V":
            self._reply(f"V{self.version}".encode() + CR)
        elif line == "N":
            self._reply(f"N{self.serial_number}".encode() + CR)
        elif line == "F":
            flags, self.status_flags = self.status_flags, 0
            self._reply(f"F{flags:02X}".encode() + CR)
        elif line in ("Z0", "Z1"):
            self.timestamps = line == "Z1"
            self._reply(CR)
        else:
            self._reply(BEL)
        return None

    # -- device → host -----------------------------------------------------------------------
    def send(self, arbitration_id: int, data: bytes = b"", is_extended_id: bool = False,
             is_remote: bool = False) -> bool:
        """Deliver one frame to the host. ``False`` when not delivered (channel closed or the host
        is not reading); raises ``ValueError`` for a frame classic CAN cannot carry."""
        line = encode_frame(arbitration_id, data, is_extended_id, is_remote)
        if self.master is None:
            raise RuntimeError("SlcanDevice not open")
        if not self.bus_open:
            self.stats["not_open_to_host"] += 1
            return False
        if self.timestamps:
            ms = int((time.monotonic() - self._t0) * 1000.0) % 60000  # 0..0xEA5F
            line = line[:-1] + f"{ms:04X}".encode() + CR
        if self._write(line):
            self.stats["frames_to_host"] += 1
            return True
        self.stats["dropped_to_host"] += 1
        return False

    # -- fault injection ---------------------------------------------------------------------
    def set_status(self, flags: int) -> None:
        """Set status flag bits answered (and cleared) by the next ``F`` command (0..0xFF)."""
        if not 0 <= flags <= 0xFF:
            raise ValueError("status flags are one byte")
        self.status_flags |= flags

    def send_error_reply(self) -> None:
        """Send a spontaneous BEL (error) to the host. python-can 4.6 ignores it."""
        self._reply(BEL)

    def hang_up(self) -> None:
        """Vanish like an unplugged adapter: the host's next read/write fails (EIO)."""
        self.bus_open = False
        self.close()
