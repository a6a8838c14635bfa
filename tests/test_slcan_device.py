"""SlcanDevice: the device side of the serial-line CAN (LAWICEL) protocol on a pty.

Outside references:
- LAWICEL CAN232 manual v3 / CANUSB manual, ASCII command set (``Sn``, ``O``, ``C``, ``t``, ``T``,
  ``r``, ``R``, ``V``, ``N``, ``F``, ``Zn``; OK = CR, error = BEL; ``t`` answers ``z[CR]`` and ``T``
  answers ``Z[CR]``). Worked examples used below: ``t34580123456789ABCDEF`` (ID 0x345, 8 bytes)
  and ``t4560`` (ID 0x456, no data) from the EasySYNC USB2-F-7x01 user guide ES_000005 v1.3
  §4.1.10; ``t00231199FF`` (ID 0x002, DLC 3, data 11 99 FF) from the Titan USB-2CAN manual §8.3.5.
- python-can 4.6 ``slcan`` interface as the reference host: what it sends on open/shutdown and
  how it parses frames; every frame is cross-checked through it in both directions.
"""

from __future__ import annotations

import os
import select
import time

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

can = pytest.importorskip("can")

from hil.links import CanLink, LinkDisconnected  # noqa: E402
from hil.slcan_device import SlcanDevice, encode_frame, parse_frame  # noqa: E402


class Host:
    """A raw host on the pty slave path: write commands, read replies byte-exactly."""

    def __init__(self, path):
        self.fd = os.open(path, os.O_RDWR | os.O_NOCTTY)

    def cmd(self, dev, text: str, want: int = 1) -> bytes:
        os.write(self.fd, text.encode() + b"\r")
        dev.poll(0.5)
        return self.read(want)

    def read(self, n_terminators: int = 1, timeout_s: float = 1.0) -> bytes:
        out = b""
        end = time.monotonic() + timeout_s
        while out.count(b"\r") + out.count(b"\a") < n_terminators and time.monotonic() < end:
            r, _, _ = select.select([self.fd], [], [], 0.05)
            if r:
                out += os.read(self.fd, 4096)
        return out

    def close(self):
        os.close(self.fd)


@pytest.fixture
def dev_host(tmp_path):
    dev = SlcanDevice(tmp_path / "can0")
    path = dev.open()
    host = Host(path)
    yield dev, host
    host.close()
    dev.close()


def test_lawicel_command_replies_are_byte_exact(dev_host):
    dev, h = dev_host
    # closed channel: bit rate accepted, frames refused (channel must be open first)
    assert h.cmd(dev, "S6") == b"\r" and dev.bitrate == 500_000   # S6 = 500 kbit/s
    assert h.cmd(dev, "S4") == b"\r" and dev.bitrate == 125_000   # S4 = 125 kbit/s
    assert h.cmd(dev, "t1230") == b"\a"
    assert h.cmd(dev, "C") == b"\a"                               # close when not open: error
    assert h.cmd(dev, "O") == b"\r" and dev.bus_open
    assert h.cmd(dev, "O") == b"\a"                               # already open
    assert h.cmd(dev, "S6") == b"\a"                              # bit rate only while closed
    assert h.cmd(dev, "t34580123456789ABCDEF") == b"z\r"          # standard frame: z[CR]
    assert h.cmd(dev, "t4560") == b"z\r"
    assert h.cmd(dev, "T0000012A1AA") == b"Z\r"                   # extended frame: Z[CR]
    assert h.cmd(dev, "r1232") == b"z\r"
    assert h.cmd(dev, "R000001233") == b"Z\r"
    assert h.cmd(dev, "V") == b"V0101\r"
    assert h.cmd(dev, "N") == b"NFL01\r"
    assert h.cmd(dev, "F") == b"F00\r"
    assert h.cmd(dev, "Z1") == b"\r" and dev.timestamps
    assert h.cmd(dev, "X") == b"\a"                               # not a command we know
    assert h.cmd(dev, "C") == b"\r" and not dev.bus_open


def test_malformed_frames_are_answered_with_bel_and_not_delivered(dev_host):
    dev, h = dev_host
    h.cmd(dev, "O")
    for bad in ("t12", "t1231", "t12310203", "t800", "tXYZ0", "t1239", "T2000000000", "r1231AA"):
        os.write(h.fd, bad.encode() + b"\r")
        assert dev.poll(0.5) == [], bad
        assert h.read() == b"\a", bad
    assert dev.stats["frames_from_host"] == 0


def test_frames_from_host_match_the_lawicel_examples(dev_host):
    dev, h = dev_host
    h.cmd(dev, "O")
    os.write(h.fd, b"t34580123456789ABCDEF\rt4560\rt00231199FF\r")
    frames = []
    while len(frames) < 3:
        got = dev.poll(0.5)
        assert got
        frames += got
    assert [(f.arbitration_id, f.data, f.is_extended_id) for f in frames] == [
        (0x345, bytes.fromhex("0123456789ABCDEF"), False),
        (0x456, b"", False),
        (0x002, bytes([0x11, 0x99, 0xFF]), False),
    ]


def test_encode_frame_gives_the_lawicel_examples():
    assert encode_frame(0x345, bytes.fromhex("0123456789ABCDEF")) == b"t34580123456789ABCDEF\r"
    assert encode_frame(0x456, b"") == b"t4560\r"
    assert encode_frame(0x002, bytes([0x11, 0x99, 0xFF])) == b"t00231199FF\r"
    assert encode_frame(0x12A, b"\xAA", is_extended_id=True) == b"T0000012A1AA\r"
    assert encode_frame(0x123, is_remote=True, dlc=2) == b"r1232\r"
    with pytest.raises(ValueError):
        encode_frame(0x800, b"")  # 11-bit IDs end at 0x7FF (ISO 11898-1)
    with pytest.raises(ValueError):
        encode_frame(0x100, bytes(9))


def test_python_can_open_sequence_and_shutdown_are_understood(tmp_path):
    dev = SlcanDevice(tmp_path / "can0")
    path = dev.open()
    bus = can.Bus(interface="slcan", channel=path, bitrate=500000, sleep_after_open=0)
    try:
        end = time.monotonic() + 2.0
        while len(dev.commands) < 5 and time.monotonic() < end:
            dev.poll(0.05)
        # python-can 4.6 slcanBus.__init__: set_bitrate → C, S6, "" (no data bit rate), O; then open() → O
        assert dev.commands == ["C", "S6", "", "O", "O"]
        assert dev.bus_open and dev.bitrate == 500_000
    finally:
        bus.shutdown()
    end = time.monotonic() + 2.0
    while dev.bus_open and time.monotonic() < end:
        dev.poll(0.05)
    assert dev.commands[-1] == "C" and not dev.bus_open
    dev.close()


def test_device_frames_reach_python_can_exactly_and_only_while_open(tmp_path):
    with SlcanDevice() as dev:
        assert not dev.send(0x120, b"\x01")  # channel not open: a real adapter is not on the bus
        assert dev.stats["not_open_to_host"] == 1
        bus = can.Bus(interface="slcan", channel=dev.path, bitrate=500000, sleep_after_open=0)
        try:
            while not dev.bus_open:
                dev.poll(0.05)
            dev.poll(0.05)
            assert dev.send(0x120, b"\x01\x02")
            assert dev.send(0x1ABCDEF0, b"", is_extended_id=True)
            assert dev.send(0x7FF, is_remote=True)
            dev.poll(0.1)
            got = []
            end = time.monotonic() + 2.0
            while len(got) < 3 and time.monotonic() < end:
                m = bus.recv(0.1)
                if m is not None:
                    got.append(m)
            assert [(m.arbitration_id, bytes(m.data), m.is_extended_id, m.is_remote_frame) for m in got] == [
                (0x120, b"\x01\x02", False, False), (0x1ABCDEF0, b"", True, False), (0x7FF, b"", False, True)]
        finally:
            bus.shutdown()


def test_time_stamps_on_keep_frames_readable_by_python_can(tmp_path):
    # LAWICEL Z1: 4 hex digits of milliseconds (0..0xEA5F) before the CR
    with SlcanDevice() as dev:
        h = Host(dev.path)
        try:
            h.cmd(dev, "O")
            h.cmd(dev, "Z1")
            dev.send(0x110, b"\xAB")
            line = h.read()
            assert line[:7] == b"t1101AB" and line.endswith(b"\r") and len(line) == 12
            assert 0 <= int(line[7:11], 16) <= 0xEA5F
        finally:
            h.close()


def test_status_flags_are_reported_once_by_f(dev_host):
    dev, h = dev_host
    dev.set_status(0x80)  # bus error (bit 7, CANUSB manual, from memory)
    dev.set_status(0x04)  # error warning (bit 2, from memory)
    assert h.cmd(dev, "F") == b"F84\r"
    assert h.cmd(dev, "F") == b"F00\r"  # reading clears the flags
    dev.send_error_reply()
    assert h.read() == b"\a"


def test_hang_up_is_seen_by_the_can_link_as_a_disconnect(tmp_path):
    dev = SlcanDevice(tmp_path / "can0")
    link = CanLink("slcan", dev.open(), 500000, is_emulated=True).open()
    dev.poll(0.2)
    dev.hang_up()
    assert not os.path.lexists(tmp_path / "can0")
    with pytest.raises(LinkDisconnected, match="receive"):
        link.recv(0.05)
    link.close()
    assert link.stats.errors >= 1


def test_a_host_that_does_not_read_never_blocks_the_device(dev_host):
    dev, h = dev_host
    h.cmd(dev, "O")
    for i in range(100_000):
        if not dev.send(0x100, bytes(8)):
            break
    else:
        pytest.fail("pty never filled")
    assert dev.stats["dropped_to_host"] == 1 and dev.stats["frames_to_host"] == i
    # the host catches up: every line it sees is whole (a line cut by the full buffer is completed
    # before the next one), and nothing accepted was lost
    data = b""
    os.set_blocking(h.fd, False)
    for _ in range(2):
        while True:
            try:
                chunk = os.read(h.fd, 65536)
            except BlockingIOError:
                break
            data += chunk
        assert dev.send(0x100, bytes(8))
        time.sleep(0.01)
    lines = data.split(b"\r")  # (the reply to "O" was read by cmd)
    assert lines[-1] == b"" and set(lines[:-1]) == {b"t10080000000000000000"}
    assert len(lines) - 1 == i + 1  # i accepted before the buffer filled + 1 after


def test_stale_symlink_of_a_dead_rig_is_replaced(tmp_path):
    link = tmp_path / "can0"
    os.symlink("/dev/pts/does-not-exist", link)
    with SlcanDevice(link) as dev:
        assert os.readlink(link) == dev.slave_path
    assert not os.path.lexists(link)


_ids_std = st.integers(0, 0x7FF)
_ids_ext = st.integers(0, 0x1FFFFFFF)


@settings(max_examples=25)
@given(st.lists(st.tuples(st.booleans(), st.integers(0, 0x1FFFFFFF), st.binary(max_size=8)), min_size=1, max_size=5))
def test_frames_written_by_python_can_parse_back_identically(frames):
    # reference: python-can's slcanBus.send formats the line; our parser must recover the frame
    with SlcanDevice() as dev:
        bus = can.Bus(interface="slcan", channel=dev.path, bitrate=500000, sleep_after_open=0)
        try:
            while not dev.bus_open:
                dev.poll(0.05)
            want = []
            for ext, ident, data in frames:
                ident = ident if ext else ident & 0x7FF
                bus.send(can.Message(arbitration_id=ident, data=data, is_extended_id=ext))
                want.append((ident, data, ext))
            got = []
            end = time.monotonic() + 2.0
            while len(got) < len(want) and time.monotonic() < end:
                got += dev.poll(0.05)
            assert [(f.arbitration_id, f.data, f.is_extended_id) for f in got] == want
        finally:
            bus.shutdown()


@given(st.booleans(), st.integers(0, 0x1FFFFFFF), st.binary(max_size=8))
def test_encode_and_parse_are_inverse(ext, ident, data):
    ident = ident if ext else ident & 0x7FF
    line = encode_frame(ident, data, ext)
    f = parse_frame(line[:-1].decode())
    assert (f.arbitration_id, f.data, f.is_extended_id, f.is_remote) == (ident, data, ext, False)
