"""LINKS.toml: where the rig's CAN bus and serial lines are, checked once at load.

Schema (top table ``[links]``; unknown keys are errors)::

    [links]
    name = "Emulated rig on this machine"      # free text, shown in reports
    emulated = true                            # endpoints made by `finloop rig` (pty); false = hardware

    [links.can]                                # fin demands / feedback bus (required)
    interface = "slcan"                        # python-can interface: virtual, slcan, socketcan, pcan, ...
    channel = "/tmp/finloop-rig/can0"          # slcan: serial device or pty path; socketcan: can0
    bitrate = 500000                           # bit/s (slcan: 10k, 20k, 50k, 83.3k, 100k, 125k, 250k, 500k, 750k, 1M)
    serial_timeout_s = 0.001                   # slcan only: python-can's serial poll timeout
    log_format = "log"                         # raw CAN log: log (candump), asc, blf, csv

    [links.can.ids]                            # optional overrides of the catalogue's 11-bit IDs
    fin_demand = 0x110

    [links.motion]                             # motion sensor (roll, roll rate) serial line (optional)
    url = "/tmp/finloop-rig/motion"            # any pyserial URL: /dev/ttyUSB0, loop://, socket://127.0.0.1:PORT
    baudrate = 115200                          # Bd
    format = "nmea"                            # nmea | binary
    rate_hz = 50                               # expected update rate
    timeout_s = 0.1                            # read timeout of the line

    [links.speed]                              # speed log serial line (optional), same keys

Loaded into frozen dataclasses (:class:`LinksConfig`, :class:`CanLinkConfig`,
:class:`SerialLinkConfig`); :func:`hil.links.open_link` turns an entry into an open link.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

from .configio import NO_VALUE, Problem, Problems, Reader, read_toml

__all__ = [
    "CanLinkConfig",
    "LinksConfig",
    "SerialLinkConfig",
    "LINKS_TOP_KEY",
    "SERIAL_LINK_NAMES",
    "detect",
    "load_links",
    "read_links_file",
]

LINKS_TOP_KEY = "links"
SERIAL_LINK_NAMES = ("motion", "speed")
CAN_LOG_FORMATS = ("log", "asc", "blf", "csv")  # same as hil.recorder.CAN_LOG_FORMATS (no import: keep numpy out)
SERIAL_FORMATS = ("nmea", "binary")
# python-can 4.6 slcan bit rates (slcanBus._BITRATES): the codes S0..S8 of the LAWICEL protocol, plus S9
SLCAN_BITRATES = (10_000, 20_000, 50_000, 83_300, 100_000, 125_000, 250_000, 500_000, 750_000, 1_000_000)
_PYSERIAL_SCHEMES = ("loop", "socket", "rfc2217", "spy", "alt", "hwgrep", "cp2110")
_NAME = re.compile(r"^[a-z][a-z0-9_]*$")


@dataclass(frozen=True)
class CanLinkConfig:
    interface: str
    channel: str
    bitrate: int | None
    serial_timeout_s: float | None = None
    log_format: str = "log"
    ids: dict[str, int] = field(default_factory=dict)
    emulated: bool = False
    name: str = "can"
    bus_kwargs: tuple[tuple[str, object], ...] = ()
    kind: str = "can"


@dataclass(frozen=True)
class SerialLinkConfig:
    name: str
    url: str
    baudrate: int
    format: str
    rate_hz: float
    timeout_s: float = 0.1
    emulated: bool = False
    kind: str = "serial"


@dataclass(frozen=True)
class LinksConfig:
    name: str
    emulated: bool
    can: CanLinkConfig
    motion: SerialLinkConfig | None = None
    speed: SerialLinkConfig | None = None
    path: Path | None = None

    @property
    def serial_links(self) -> dict[str, SerialLinkConfig]:
        return {n: c for n in SERIAL_LINK_NAMES if (c := getattr(self, n)) is not None}

    def all_links(self) -> dict[str, CanLinkConfig | SerialLinkConfig]:
        return {"can": self.can, **self.serial_links}


def detect(table: dict) -> bool:
    """``True`` when a parsed TOML document is a links file (top key ``links``)."""
    return isinstance(table, dict) and LINKS_TOP_KEY in table


def _python_can_interfaces() -> tuple[str, ...]:
    try:
        from can.interfaces import VALID_INTERFACES

        return tuple(sorted(VALID_INTERFACES))
    except Exception:  # pragma: no cover - python-can is a dependency
        return ("virtual", "slcan", "socketcan", "pcan", "kvaser", "vector", "ixxat", "serial")


def _read_can(r: Reader, emulated: bool) -> CanLinkConfig | None:
    interfaces = _python_can_interfaces()
    interface = r.string("interface", choices=interfaces)
    channel = r.string("channel")
    if r.has("channel") and isinstance(r.table.get("channel"), str) and not channel.strip():
        r.error("channel", channel, "", "must not be empty")
    bitrate = r.integer("bitrate", lo=5_000, hi=1_000_000, default=None, unit="bit/s")
    if interface == "slcan" and bitrate not in (None, 0) and bitrate not in SLCAN_BITRATES:
        r.error("bitrate", bitrate, "bit/s",
                "not a bit rate the slcan protocol can set (allowed: "
                + ", ".join(f"{b:d}" for b in SLCAN_BITRATES) + ")")
    timeout = None
    if r.has("serial_timeout_s"):
        if interface not in ("slcan", ""):
            r.known("serial_timeout_s")
            r.error("serial_timeout_s", r.table["serial_timeout_s"], "s",
                    f"only used with interface = \"slcan\" (this link uses {interface!r})")
        else:
            timeout = r.number("serial_timeout_s", unit="s", lo=0.0, hi=0.1, lo_open=True,
                               warn_hi=0.01, warn_why="recv polls this slowly; CAN latency grows")
    log_format = r.string("log_format", choices=CAN_LOG_FORMATS, default="log")
    ids: dict[str, int] = {}
    ir = r.table_reader("ids", required=False)
    if ir is not None and ir.table is not None:
        seen: dict[int, str] = {}
        for key in list(ir.table):
            if not _NAME.match(key):
                ir.known(key)
                ir.error(key, ir.table[key], "", "frame names are lower_case_with_underscores")
                continue
            ir.known(key)
            raw = ir.table[key]
            if isinstance(raw, bool) or not isinstance(raw, int):
                ir.error(key, raw, "", "expected an integer CAN ID (allowed 0x000..0x7FF, 11-bit)")
                continue
            if not 0 <= raw <= 0x7FF:
                ir.error(key, raw, "",
                         "out of range (allowed 0x000..0x7FF, 11-bit standard ID)")
                continue
            if raw in seen:
                ir.error(key, raw, "",
                         f"CAN ID 0x{raw:03X} already used by {ir.path(seen[raw])}; IDs must be unique")
                continue
            seen[raw] = key
            ids[key] = raw
        ir.done()
    r.done()
    if not interface or not channel:
        return None
    return CanLinkConfig(interface=interface, channel=channel, bitrate=bitrate or None,
                         serial_timeout_s=timeout, log_format=log_format or "log", ids=ids,
                         emulated=emulated, name="can")


def _check_url(r: Reader, url: str) -> None:
    if "://" not in url:
        return
    scheme, _, rest = url.partition("://")
    if scheme not in _PYSERIAL_SCHEMES:
        r.error("url", url, "", f"unknown pyserial URL scheme {scheme!r}:// "
                f"(allowed: a device path, or {', '.join(s + '://' for s in _PYSERIAL_SCHEMES)})")
        return
    if scheme in ("socket", "rfc2217"):
        host, _, port = rest.split("?", 1)[0].rpartition(":")
        if not host or not port.isdigit() or not 1 <= int(port) <= 65535:
            r.error("url", url, "", f"expected {scheme}://HOST:PORT with PORT in [1, 65535]")


def _read_serial(r: Reader, name: str, emulated: bool) -> SerialLinkConfig | None:
    url = r.string("url")
    if isinstance(r.table.get("url") if r.table else None, str):
        if not url.strip():
            r.error("url", url, "", "must not be empty")
        else:
            _check_url(r, url)
    baudrate = r.integer("baudrate", lo=50, hi=4_000_000, unit="Bd")
    fmt = r.string("format", choices=SERIAL_FORMATS)
    rate = r.number("rate_hz", unit="Hz", lo=0.0, hi=1000.0, lo_open=True)
    timeout = r.number("timeout_s", unit="s", lo=0.0, hi=10.0, default=0.1)
    r.done()
    if not url or not fmt or not baudrate or rate != rate or timeout != timeout:
        return None
    return SerialLinkConfig(name=name, url=url, baudrate=baudrate, format=fmt, rate_hz=rate,
                            timeout_s=timeout, emulated=emulated)


def read_links_file(path: str | Path, table: dict | None, problems: Problems) -> LinksConfig | None:
    """Read a parsed links file (whole TOML document); ``None`` when it has errors."""
    top = Reader(path, table, problems)
    lr = top.table_reader(LINKS_TOP_KEY)
    name = lr.string("name")
    emulated = lr.boolean("emulated", default=False)
    can_r = lr.table_reader("can")
    can_cfg = _read_can(can_r, emulated) if can_r.table is not None else None
    serial: dict[str, SerialLinkConfig | None] = {}
    for n in SERIAL_LINK_NAMES:
        sr = lr.table_reader(n, required=False)
        serial[n] = _read_serial(sr, n, emulated) if sr is not None and sr.table is not None else None
    lr.done()
    top.done()
    if can_cfg is not None and serial.get("motion") is not None and serial.get("speed") is not None:
        if serial["motion"].url == serial["speed"].url and "://" not in serial["motion"].url:
            problems.add(Problem(str(path), "links.speed.url", serial["speed"].url, "",
                                 "same device as links.motion.url; each serial line needs its own port"))
    if problems.errors or can_cfg is None:
        if not problems.errors and lr.table is not None:  # pragma: no cover - defensive
            problems.add(Problem(str(path), "links.can", NO_VALUE, "", "CAN link incomplete"))
        return None
    return LinksConfig(name=name, emulated=emulated, can=can_cfg, motion=serial["motion"],
                       speed=serial["speed"], path=Path(path))


def load_links(path: str | Path, problems: Problems | None = None) -> LinksConfig:
    """Load a links file; raises :class:`hil.configio.ConfigError` listing every problem at once."""
    problems = problems if problems is not None else Problems()
    table = read_toml(path, problems)
    cfg = read_links_file(path, table, problems) if table is not None else None
    problems.raise_if_errors()
    assert cfg is not None
    return cfg
