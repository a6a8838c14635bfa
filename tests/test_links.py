"""Contract tests of hil.links: one suite, every adapter.

Adapters under test (parametrised fixture ``rig``):
  can-virtual      python-can ``virtual`` bus, peer = a second virtual bus on the same channel
  can-slcan-pty    python-can ``slcan`` over a pty, peer = our SlcanDevice (LAWICEL protocol device side)
  serial-loop      pyserial ``loop://`` (the link is its own peer)
  serial-pty       pyserial on a pty slave, peer = PtyEndpoint (the rig's side)
  serial-socket    pyserial ``socket://127.0.0.1:PORT``, peer = a listening socket on loopback

Outside references: python-can 4.6 and pyserial 3.5 are the reference implementations of the bus
and the line; byte-level SLCAN checks follow the LAWICEL CAN232/CANUSB ASCII protocol (command
``t``: ``tiiildd..[CR]``, examples in the EasySYNC USB2-F-7x01 user guide ES_000005 v1.3 §4.1.10);
TCP_NODELAY disables Nagle's algorithm (RFC 896; RFC 1122 §4.2.3.4).
"""

from __future__ import annotations

import os
import socket
import time

import pytest

can = pytest.importorskip("can")
serial = pytest.importorskip("serial")

from hil.links import (  # noqa: E402
    ADAPTERS,
    CanFrame,
    CanLink,
    LinkClosed,
    LinkDisconnected,
    LinkError,
    SerialLink,
    adapter_class,
)
from hil.slcan_device import PtyEndpoint, SlcanDevice  # noqa: E402

PAYLOAD = bytes([0x01, 0x23, 0x45, 0x67, 0x89, 0xAB, 0xCD, 0xEF])


def _wait(pred, timeout_s=2.0):
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        v = pred()
        if v:
            return v
        time.sleep(0.001)
    return pred()


# ----------------------------------------------------------------------------------------------
# harnesses: one per adapter, same small interface
# ----------------------------------------------------------------------------------------------


class CanVirtual:
    kind = "can"
    can_disconnect = False

    def __init__(self, tmp_path):
        self.channel = f"finloop-test-{id(self)}"
        self.peer = can.Bus(interface="virtual", channel=self.channel)

    def make_link(self):
        return CanLink("virtual", self.channel, None, name="can-virtual")

    def echo(self):
        msg = self.peer.recv(2.0)
        assert msg is not None, "peer got nothing"
        self.peer.send(can.Message(arbitration_id=msg.arbitration_id, data=msg.data,
                                   is_extended_id=msg.is_extended_id))

    def close(self):
        self.peer.shutdown()


class CanSlcanPty:
    kind = "can"
    can_disconnect = True

    def __init__(self, tmp_path):
        self.dev = SlcanDevice(tmp_path / "can0")
        self.path = self.dev.open()

    def make_link(self):
        return CanLink("slcan", self.path, 500000, name="can-slcan", is_emulated=True)

    def echo(self):
        frames = _wait(lambda: self.dev.poll(0.01), 2.0)
        assert frames, "device got nothing"
        for f in frames:
            assert self.dev.send(f.arbitration_id, f.data, f.is_extended_id)

    def disconnect(self):
        self.dev.hang_up()

    def close(self):
        self.dev.close()


class SerialLoop:
    kind = "serial"
    can_disconnect = False

    def __init__(self, tmp_path):
        pass

    def make_link(self):
        return SerialLink("loop://", 115200, 0.05, name="serial-loop")

    def echo(self):  # loop:// hands back what was written
        pass

    def close(self):
        pass


class SerialPty:
    kind = "serial"
    can_disconnect = True

    def __init__(self, tmp_path):
        self.ep = PtyEndpoint(tmp_path / "motion")
        self.path = self.ep.open()

    def make_link(self):
        return SerialLink(self.path, 115200, 0.05, name="serial-pty", is_emulated=True)

    def echo(self):
        data = _wait(self.ep.read_available, 2.0)
        assert data, "endpoint got nothing"
        assert self.ep.write(data)

    def disconnect(self):
        self.ep.close()

    def close(self):
        self.ep.close()


class SerialSocket:
    kind = "serial"
    can_disconnect = True

    def __init__(self, tmp_path):
        self.server = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.server.bind(("127.0.0.1", 0))  # loopback only
        self.server.listen(1)
        self.server.settimeout(2.0)
        self.port = self.server.getsockname()[1]
        self.conn = None

    def make_link(self):
        return SerialLink(f"socket://127.0.0.1:{self.port}", 115200, 0.05, name="serial-socket")

    def _accept(self):
        if self.conn is None:
            self.conn, _ = self.server.accept()
            self.conn.settimeout(2.0)

    def echo(self):
        self._accept()
        data = self.conn.recv(4096)
        assert data, "server got nothing"
        self.conn.sendall(data)

    def disconnect(self):
        self._accept()
        self.conn.close()
        self.conn = None
        self.server.close()

    def close(self):
        for s in (self.conn, self.server):
            if s is not None:
                s.close()


HARNESSES = {
    "can-virtual": CanVirtual,
    "can-slcan-pty": CanSlcanPty,
    "serial-loop": SerialLoop,
    "serial-pty": SerialPty,
    "serial-socket": SerialSocket,
}


@pytest.fixture(params=list(HARNESSES))
def rig(request, tmp_path):
    h = HARNESSES[request.param](tmp_path)
    yield h
    h.close()


def _send(link, payload: bytes):
    if isinstance(link, CanLink):
        link.send(0x110, payload, is_extended_id=False)
    else:
        link.write(payload)


def _receive(link, timeout_s: float):
    """What came back: bytes for serial, a CanFrame for CAN, None on timeout."""
    if isinstance(link, CanLink):
        return link.recv(timeout_s)
    data = link.read(timeout_s)
    return data or None


# ----------------------------------------------------------------------------------------------
# the contract
# ----------------------------------------------------------------------------------------------


def test_link_opens_and_closes_idempotently_as_context_manager(rig):
    link = rig.make_link()
    assert not link.is_open and not link.is_closed
    with link as opened:
        assert opened is link and link.is_open
        assert link.open() is link  # open twice: no-op
    assert link.is_closed
    link.close()  # close twice: fine
    link.close()
    assert link.stats.errors == 0


def test_use_before_open_and_after_close_raise_link_closed(rig):
    link = rig.make_link()
    with pytest.raises(LinkClosed, match="before open"):
        _send(link, b"x")
    link.open()
    link.close()
    with pytest.raises(LinkClosed, match="after close"):
        _send(link, b"x")
    with pytest.raises(LinkClosed, match="after close"):
        _receive(link, 0.0)
    with pytest.raises(LinkClosed, match="closed"):
        link.open()
    assert issubclass(LinkClosed, LinkError)


def test_round_trip_returns_the_same_frame_and_counts_it(rig):
    with rig.make_link() as link:
        _send(link, PAYLOAD)
        rig.echo()
        got = _receive(link, 2.0)
        if isinstance(link, CanLink):
            assert isinstance(got, CanFrame)
            assert (got.arbitration_id, got.data, got.is_extended_id, got.is_remote) == (0x110, PAYLOAD, False, False)
            assert abs(got.t_rx_s - time.monotonic()) < 60.0  # a monotonic stamp, not epoch time
        else:
            # a line may arrive in pieces; collect the rest
            while len(got) < len(PAYLOAD):
                more = _receive(link, 1.0)
                assert more, f"only {got!r} came back"
                got += more
            assert got == PAYLOAD
        s = link.stats.as_dict()
        assert s["frames_out"] == 1 and s["frames_in"] >= 1
        assert s["bytes_out"] == len(PAYLOAD) and s["bytes_in"] == len(PAYLOAD)
        assert s["errors"] == 0 and s["rejects"] == 0 and s["timeouts"] == 0


def test_receive_timeout_returns_nothing_and_is_counted(rig):
    with rig.make_link() as link:
        assert _receive(link, 0.02) is None
        assert _receive(link, 0.0) is None
        assert link.stats.timeouts == 2
        assert link.stats.frames_in == 0


def test_disconnect_of_the_device_is_a_counted_link_error(rig):
    if not rig.can_disconnect:
        pytest.skip("this endpoint cannot vanish (in-process loop-back)")
    link = rig.make_link().open()
    try:
        if isinstance(rig, SerialSocket):
            rig._accept()
        if isinstance(rig, CanSlcanPty):
            rig.dev.poll(0.2)  # answer the open sequence first
        rig.disconnect()
        with pytest.raises(LinkError) as info:
            for _ in range(50):  # the first read after the hang-up must fail; allow a few for races
                _receive(link, 0.02)
                _send(link, b"\x00")
        assert isinstance(info.value, LinkDisconnected), str(info.value)
        assert link.name in str(info.value)
        assert link.stats.errors >= 1
    finally:
        link.close()  # closing after a vanished device does not raise
    assert link.is_closed


# ----------------------------------------------------------------------------------------------
# CAN specifics
# ----------------------------------------------------------------------------------------------


def test_can_send_refuses_frames_classic_can_cannot_carry_and_counts_rejects():
    # ISO 11898-1: standard identifier 11 bits (0..0x7FF), extended 29 bits; 0..8 data bytes
    with CanLink("virtual", "finloop-rejects") as link:
        with pytest.raises(LinkError, match="refused"):
            link.send(0x800, b"", is_extended_id=False)
        with pytest.raises(LinkError, match="refused"):
            link.send(0x100, bytes(9))
        with pytest.raises(LinkError, match="refused"):
            link.send(0x2000_0000, b"", is_extended_id=True)
        link.send(0x1FFF_FFFF, b"\x01", is_extended_id=True)  # the largest legal extended ID
        assert link.stats.rejects == 3 and link.stats.frames_out == 1


def test_can_send_passes_is_extended_id_explicitly_so_small_ids_stay_standard():
    # python-can's Message defaults to is_extended_id=True (LIBRARY-NOTES); the link must not
    with can.Bus(interface="virtual", channel="finloop-ext") as peer, CanLink("virtual", "finloop-ext") as link:
        link.send(0x110, b"\x01")
        link.send(0x110, b"\x02", is_extended_id=True)
        a, b = peer.recv(1.0), peer.recv(1.0)
        assert (a.arbitration_id, a.is_extended_id) == (0x110, False)
        assert (b.arbitration_id, b.is_extended_id) == (0x110, True)


def test_can_drain_returns_everything_waiting_without_counting_timeouts():
    with can.Bus(interface="virtual", channel="finloop-drain") as peer, CanLink("virtual", "finloop-drain") as link:
        for i in range(5):
            peer.send(can.Message(arbitration_id=0x120 + i, data=bytes([i]), is_extended_id=False))
        frames = _wait(lambda: link.drain() or None, 1.0)
        assert [f.arbitration_id for f in frames] == [0x120 + i for i in range(5)]
        assert [f.data for f in frames] == [bytes([i]) for i in range(5)]
        assert link.drain() == []
        assert link.stats.timeouts == 0 and link.stats.frames_in == 5


def test_can_link_writes_every_frame_in_and_out_to_the_raw_log(tmp_path):
    log = tmp_path / "can.log"
    with can.Bus(interface="virtual", channel="finloop-log") as peer, \
            CanLink("virtual", "finloop-log", log_path=log) as link:
        link.send(0x110, b"\x11\x22")
        peer.send(can.Message(arbitration_id=0x210, data=b"\x33", is_extended_id=False))
        assert link.recv(1.0).arbitration_id == 0x210
        link.flush_log()
        # read back with python-can's own reader (candump -L format)
        msgs = list(can.LogReader(str(log)))
        assert [(m.arbitration_id, bytes(m.data)) for m in msgs] == [(0x110, b"\x11\x22"), (0x210, b"\x33")]
        assert [m.is_rx for m in msgs] == [False, True]


def test_slcan_link_sends_the_exact_lawicel_ascii_line(tmp_path):
    # LAWICEL CAN232/CANUSB: "tiiildd..[CR]", iii = 3 hex digits, l = DLC, dd = data in hex;
    # example "t34580123456789ABCDEF" = ID 0x345, 8 bytes 01 23 45 67 89 AB CD EF
    # (EasySYNC USB2-F-7x01 user guide ES_000005 v1.3 §4.1.10); 29-bit: "Tiiiiiiiildd..[CR]"
    with SlcanDevice() as dev, CanLink("slcan", dev.path, 500000, is_emulated=True) as link:
        dev.poll(0.2)
        link.send(0x345, PAYLOAD)
        link.send(0x110, b"")
        link.send(0x1ABCDE, b"\xAA", is_extended_id=True)
        frames = _wait(lambda: dev.poll(0.05), 2.0)
        while len(frames) < 3:
            more = dev.poll(0.5)
            assert more
            frames += more
        assert dev.commands[-3:] == ["t34580123456789ABCDEF", "t1100", "T001ABCDE1AA"]
        assert [(f.arbitration_id, f.data, f.is_extended_id) for f in frames] == [
            (0x345, PAYLOAD, False), (0x110, b"", False), (0x1ABCDE, b"\xAA", True)]


def test_slcan_link_on_emulated_rig_skips_the_adapter_wait_and_sets_the_poll_timeout():
    link = CanLink("slcan", "/tmp/none", 500000, is_emulated=True, serial_timeout_s=0.0005)
    kw = link.bus_arguments()
    # python-can 4.6 slcanBus: sleep_after_open (default 2 s), timeout (serial read timeout, default 1 ms)
    assert kw == {"interface": "slcan", "channel": "/tmp/none", "bitrate": 500000,
                  "sleep_after_open": 0, "timeout": 0.0005}
    real = CanLink("slcan", "/dev/ttyACM0", 500000, is_emulated=False)
    assert "sleep_after_open" not in real.bus_arguments()


def test_can_link_open_failure_is_a_link_error_naming_the_channel(tmp_path):
    link = CanLink("slcan", str(tmp_path / "no-such-adapter"), 500000, is_emulated=True)
    with pytest.raises(LinkError, match="no-such-adapter"):
        link.open()
    assert link.stats.errors == 1 and not link.is_open


# ----------------------------------------------------------------------------------------------
# serial specifics
# ----------------------------------------------------------------------------------------------


def test_socket_link_sets_tcp_nodelay(tmp_path):
    # Nagle's algorithm (RFC 896) delays small segments; TCP_NODELAY turns it off (RFC 1122 §4.2.3.4)
    h = SerialSocket(tmp_path)
    try:
        with h.make_link() as link:
            assert link.tcp_nodelay
            assert link._port._socket.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) != 0
    finally:
        h.close()


def test_serial_write_is_one_call_with_the_whole_message(tmp_path):
    h = SerialSocket(tmp_path)
    try:
        with h.make_link() as link:
            calls = []
            real = link._port.write
            link._port.write = lambda b: calls.append(bytes(b)) or real(b)
            line = b"$HEHRM,1.5,0.2*00\r\n"
            assert link.write(line) == len(line)
            assert calls == [line]
    finally:
        h.close()


def test_serial_read_available_returns_what_is_there_without_waiting(tmp_path):
    with PtyEndpoint(tmp_path / "speed") as ep, SerialLink(ep.path, 4800, 5.0) as link:
        assert link.read_available() == b""  # nothing there: returns at once, not after 5 s
        ep.write(b"$VWVHW,,,,,12.0,N,,*00\r\n")
        got = _wait(link.read_available, 2.0)
        while not got.endswith(b"\n"):  # the OS may hand a line over in pieces
            more = _wait(link.read_available, 2.0)
            assert more, got
            got += more
        assert got == b"$VWVHW,,,,,12.0,N,,*00\r\n"
        assert link.stats.timeouts == 0 and link.stats.bytes_in == len(got)


def test_serial_link_refuses_empty_writes():
    with SerialLink("loop://", 9600, 0.01) as link:
        with pytest.raises(LinkError, match="non-empty"):
            link.write(b"")
        assert link.stats.rejects == 1


def test_adapters_are_chosen_by_name_and_unknown_names_are_link_errors():
    assert adapter_class("can") is CanLink and adapter_class("serial") is SerialLink
    assert set(ADAPTERS) == {"can", "serial"}
    with pytest.raises(LinkError, match="unknown link kind 'lin'"):
        adapter_class("lin")


def test_pty_endpoint_symlink_points_at_a_tty_and_is_removed_on_close(tmp_path):
    ep = PtyEndpoint(tmp_path / "rig" / "motion")
    path = ep.open()
    assert path == str(tmp_path / "rig" / "motion")
    assert os.path.islink(path) and os.isatty(ep.slave)
    ep.close()
    assert not os.path.lexists(path)
    ep.close()
