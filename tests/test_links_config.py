"""LINKS.toml loader: shipped files load; broken variants give one line per problem naming file,
key path, value and the allowed values/range.

Outside references: CAN 2.0A / ISO 11898-1 standard identifiers are 11 bits (0x000..0x7FF);
the slcan bit rates are the ``Sn`` codes of the LAWICEL CAN232/CANUSB protocol as python-can 4.6
maps them (``slcanBus._BITRATES``, checked against python-can itself below); the interface names
are python-can's own list (``can.interfaces.VALID_INTERFACES``); pyserial URL forms from the
pyserial 3.5 documentation (URL handlers: ``loop://``, ``socket://<host>:<port>``, ...).
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from hil.configio import Problems, read_toml
from hil.links_config import (
    SLCAN_BITRATES,
    CanLinkConfig,
    SerialLinkConfig,
    detect,
    load_links,
    read_links_file,
)

from .config_helpers import edited_copy, error_lines

ROOT = Path(__file__).resolve().parents[1]
EMULATED = ROOT / "configs" / "links" / "emulated_rig.toml"
HARDWARE = ROOT / "configs" / "links" / "example_rig_hardware.toml"
TEXT = EMULATED.read_text(encoding="utf-8")


def variant(tmp_path, *edits, name="links.toml"):
    """The demo file with regex edits (pattern, replacement) applied; each must match once."""
    return edited_copy(tmp_path, TEXT, edits, name)


def errors_of(path):
    return error_lines(load_links, path)


def test_emulated_rig_file_loads_without_problems():
    problems = Problems()
    cfg = load_links(EMULATED, problems)
    assert problems.items == []
    assert cfg.emulated is True
    assert cfg.can == CanLinkConfig(interface="slcan", channel="/tmp/finloop-rig/can0", bitrate=500000,
                                    serial_timeout_s=0.001, log_format="log", ids={}, emulated=True)
    assert cfg.motion == SerialLinkConfig(name="motion", url="/tmp/finloop-rig/motion", baudrate=115200,
                                          format="nmea", rate_hz=50.0, timeout_s=0.1, emulated=True)
    assert cfg.speed.baudrate == 4800  # NMEA 0183 standard rate (IEC 61162-1)
    assert list(cfg.all_links()) == ["can", "motion", "speed"]


def test_hardware_example_loads_without_problems():
    problems = Problems()
    cfg = load_links(HARDWARE, problems)
    assert problems.items == []
    assert cfg.emulated is False and cfg.can.channel == "/dev/ttyACM0" and cfg.motion.url == "/dev/ttyUSB0"


def test_detect_and_config_kind_recognise_links_files():
    assert detect(read_toml(EMULATED, Problems()))
    assert not detect({"vessel": {}})
    from hil.config import detect_kind

    assert detect_kind(read_toml(EMULATED, Problems())) == "links"


def test_slcan_bitrates_are_the_ones_python_can_can_set():
    pytest.importorskip("can")
    from can.interfaces.slcan import slcanBus

    assert sorted(SLCAN_BITRATES) == sorted(slcanBus._BITRATES)


def test_can_ids_override_as_hex_ints_checked_for_11_bit_range(tmp_path):
    p = variant(tmp_path, (r"^# \[links.can.ids\].*$", "[links.can.ids]"),
                (r"^# fin_demand = 0x110$", "fin_demand = 0x110\nfin_feedback = 0x7FF"))
    cfg = load_links(p)
    assert cfg.can.ids == {"fin_demand": 0x110, "fin_feedback": 0x7FF}


def test_every_problem_is_reported_at_once_with_key_path_value_and_allowed_values(tmp_path):
    p = variant(
        tmp_path,
        (r"^bitrate = 500000", "bitrat = 500000"),
        (r'^log_format = "log"', 'log_format = "mf4"'),
        (r"^# \[links.can.ids\].*$", "[links.can.ids]"),
        (r"^# fin_demand = 0x110$", "fin_demand = 0x110\nfin_feedback = 0x110\nstatus = 0x800\nAlarm = 1"),
        (r'^url = "/tmp/finloop-rig/motion"', 'url = "tcp://127.0.0.1:5000"'),
        (r'^format = "nmea"', 'format = "ascii"'),
        (r"^rate_hz = 1$", "rate_hz = 0"),
    )
    lines = errors_of(p)
    f = str(p)
    assert f"{f}: links.can.bitrat = 500000: unknown key; did you mean 'bitrate'? " \
           "(known keys here: bitrate, channel, ids, interface, log_format, serial_timeout_s)" in lines
    assert f"{f}: links.can.log_format = 'mf4': not recognised (allowed: log, asc, blf, csv)" in lines
    assert f"{f}: links.can.ids.fin_feedback = 272: CAN ID 0x110 already used by links.can.ids.fin_demand; " \
           "IDs must be unique" in lines
    assert f"{f}: links.can.ids.status = 2048: out of range (allowed 0x000..0x7FF, 11-bit standard ID)" in lines
    assert f"{f}: links.can.ids.Alarm = 1: frame names are lower_case_with_underscores" in lines
    assert any(line.startswith(f"{f}: links.motion.url = 'tcp://127.0.0.1:5000': unknown pyserial URL scheme 'tcp'://")
               for line in lines)
    assert f"{f}: links.motion.format = 'ascii': not recognised (allowed: nmea, binary)" in lines
    assert f"{f}: links.speed.rate_hz = 0 Hz: out of range (allowed (0, 1000] Hz)" in lines
    assert len(lines) == 8, lines


def test_slcan_bitrate_must_be_one_the_protocol_can_set(tmp_path):
    p = variant(tmp_path, (r"^bitrate = 500000", "bitrate = 300000"))
    (line,) = errors_of(p)
    assert line == (f"{p}: links.can.bitrate = 300000 bit/s: not a bit rate the slcan protocol can set "
                    "(allowed: 10000, 20000, 50000, 83300, 100000, 125000, 250000, 500000, 750000, 1000000)")


def test_unknown_interface_and_missing_channel_are_errors(tmp_path):
    p = variant(tmp_path, (r'^interface = "slcan"', 'interface = "slcann"'),
                (r'^channel = "/tmp/finloop-rig/can0"', ""))
    lines = errors_of(p)
    assert any(line.startswith(f"{p}: links.can.interface = 'slcann': not recognised (allowed: ") and "slcan" in line
               for line in lines)
    assert f"{p}: links.can.channel: missing required key" in lines


def test_serial_timeout_only_with_slcan(tmp_path):
    p = variant(tmp_path, (r'^interface = "slcan"', 'interface = "socketcan"'),
                (r'^channel = "/tmp/finloop-rig/can0"', 'channel = "can0"'))
    (line,) = errors_of(p)
    assert line == f"{p}: links.can.serial_timeout_s = 0.001 s: only used with interface = \"slcan\" (this link uses 'socketcan')"


def test_socket_url_needs_a_port(tmp_path):
    p = variant(tmp_path, (r'^url = "/tmp/finloop-rig/speed"', 'url = "socket://127.0.0.1"'))
    (line,) = errors_of(p)
    assert line == f"{p}: links.speed.url = 'socket://127.0.0.1': expected socket://HOST:PORT with PORT in [1, 65535]"


def test_missing_can_table_is_an_error(tmp_path):
    p = tmp_path / "links.toml"
    p.write_text('[links]\nname = "x"\n')
    assert errors_of(p) == [f"{p}: links.can: missing required key"]


def test_read_links_file_collects_into_shared_problems_without_raising(tmp_path):
    p = variant(tmp_path, (r"^baudrate = 4800", "baudrate = 10"))
    problems = Problems()
    assert read_links_file(p, read_toml(p, problems), problems) is None
    assert [str(x) for x in problems.errors] == [
        f"{p}: links.speed.baudrate = 10 Bd: out of range (allowed [50, 4e+06] Bd)"]


def test_open_link_from_config_talks_to_the_emulated_adapter(tmp_path):
    pytest.importorskip("can")
    from hil.links import CanLink, SerialLink, open_link
    from hil.slcan_device import PtyEndpoint, SlcanDevice

    can0, motion = tmp_path / "rig" / "can0", tmp_path / "rig" / "motion"
    p = variant(tmp_path, (r'^channel = "/tmp/finloop-rig/can0"', f'channel = "{can0}"'),
                (r'^url = "/tmp/finloop-rig/motion"', f'url = "{motion}"'))
    cfg = load_links(p)
    with SlcanDevice(can0) as dev, PtyEndpoint(motion) as ep:
        link = open_link(cfg.can)
        try:
            assert isinstance(link, CanLink) and link.is_emulated
            assert link.bus_arguments()["sleep_after_open"] == 0 and link.bus_arguments()["timeout"] == 0.001
            link.send(0x110, b"\x05")
            got = []
            end = time.monotonic() + 2.0
            while not got and time.monotonic() < end:
                got = dev.poll(0.05)
            assert [(f.arbitration_id, f.data) for f in got] == [(0x110, b"\x05")]
        finally:
            link.close()
        with open_link(cfg.motion) as sl:
            assert isinstance(sl, SerialLink) and sl.baudrate == 115200 and sl.timeout_s == 0.1
            sl.write(b"$x\r\n")
            data = b""
            while len(data) < 4 and ep.wait_readable(1.0):
                data += ep.read_available()
            assert data == b"$x\r\n"
