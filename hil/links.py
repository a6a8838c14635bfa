"""Links to the rig: CAN through python-can, serial lines through pyserial.

Shape (after python-can's bus abstraction): :class:`Link` owns the public lifecycle
(context manager, idempotent :meth:`Link.close`, use-after-close errors) and the statistics; each
adapter fills three small hooks (``_open_hook``, ``_close_hook`` and its I/O). Adapters are chosen
by name (:func:`open_link`, :data:`ADAPTERS`) and imported lazily. Every failure of the bus or the
line leaves this module as a :class:`LinkError` (one exception family), counted in
:attr:`Link.stats`.

Time stamps of received frames are ``time.monotonic()`` seconds (``CanFrame.t_rx_s``): the
real-time runner compares them with its own monotonic deadlines. The raw CAN log (optional) uses
python-can's writers and wall-clock stamps, see :class:`hil.recorder.CanLogWriter`.

Nothing here imports python-can or pyserial at module import time: ``import hil.links`` is cheap.
"""

from __future__ import annotations

import importlib
import select
import time
from dataclasses import asdict, dataclass
from typing import Any, NamedTuple

__all__ = [
    "ADAPTERS",
    "CanFrame",
    "CanLink",
    "Link",
    "LinkClosed",
    "LinkDisconnected",
    "LinkError",
    "LinkStats",
    "SerialLink",
    "adapter_class",
    "open_link",
]


# ----------------------------------------------------------------------------------------------
# errors, statistics, frames
# ----------------------------------------------------------------------------------------------


class LinkError(Exception):
    """Any failure of a link (bad argument for the bus, bus error, lost device)."""


class LinkClosed(LinkError):
    """The link was used before :meth:`Link.open` or after :meth:`Link.close`."""


class LinkDisconnected(LinkError):
    """The device went away (USB adapter unplugged, pty peer closed, socket closed)."""


@dataclass
class LinkStats:
    """Counters of one link since it was created.

    ``frames_in``/``frames_out``: CAN frames received/sent, or serial ``read``/``write`` calls that
    moved data. ``bytes_in``/``bytes_out``: serial payload bytes (CAN: data bytes). ``rejects``:
    requests refused before reaching the bus (ID out of range, more than 8 data bytes, empty
    write). ``timeouts``: blocking reads that returned nothing. ``errors``: bus/line failures
    (each raised as :class:`LinkError`) and received CAN error frames.
    """

    frames_in: int = 0
    frames_out: int = 0
    rejects: int = 0
    timeouts: int = 0
    errors: int = 0
    bytes_in: int = 0
    bytes_out: int = 0

    def as_dict(self) -> dict[str, int]:
        return asdict(self)


class CanFrame(NamedTuple):
    """One CAN frame as the rest of finloop sees it.

    ``t_rx_s`` is ``time.monotonic()`` at reception (s); ``data`` is immutable ``bytes``.
    """

    t_rx_s: float
    arbitration_id: int
    data: bytes
    is_extended_id: bool = False
    is_remote: bool = False
    is_error: bool = False


# ----------------------------------------------------------------------------------------------
# base class
# ----------------------------------------------------------------------------------------------

_NEW, _OPEN, _CLOSED = "new", "open", "closed"


class Link:
    """Base class: lifecycle and statistics. Adapters fill ``_open_hook`` and ``_close_hook``.

    A link is created closed-for-I/O; :meth:`open` (or ``with link:``) opens it. ``open`` on an
    open link and ``close`` on a closed link do nothing. Any I/O before ``open`` or after
    ``close`` raises :class:`LinkClosed`; a closed link is not reopened (create a new one).
    """

    kind = "link"

    def __init__(self, name: str | None = None, *, is_emulated: bool = False):
        self.name = name or self.kind
        self.is_emulated = bool(is_emulated)
        self.stats = LinkStats()
        self._state = _NEW

    # -- lifecycle ---------------------------------------------------------------------------
    @property
    def is_open(self) -> bool:
        return self._state == _OPEN

    @property
    def is_closed(self) -> bool:
        return self._state == _CLOSED

    def open(self) -> "Link":
        if self._state == _OPEN:
            return self
        if self._state == _CLOSED:
            raise LinkClosed(f"{self.name}: link was closed; create a new link to reopen")
        try:
            self._open_hook()
        except LinkError:
            self.stats.errors += 1
            raise
        except Exception as exc:  # bus/driver specific: one family leaves this module
            self.stats.errors += 1
            raise LinkError(f"{self.name}: could not open {self.describe()}: {exc}") from exc
        self._state = _OPEN
        return self

    def close(self) -> None:
        if self._state == _CLOSED:
            return
        was_open = self._state == _OPEN
        self._state = _CLOSED
        if was_open:
            try:
                self._close_hook()
            except Exception:  # closing a vanished device must not raise
                self.stats.errors += 1

    def __enter__(self) -> "Link":
        return self.open()

    def __exit__(self, *exc) -> None:
        self.close()

    def __del__(self):  # pragma: no cover - last resort, mirrors python-can's warning-free path
        try:
            if self._state == _OPEN:
                self.close()
        except Exception:
            pass

    def describe(self) -> str:
        return self.kind

    def __repr__(self) -> str:
        return f"<{type(self).__name__} {self.name!r} {self.describe()} {self._state}>"

    # -- helpers for adapters ----------------------------------------------------------------
    def _check_open(self) -> None:
        if self._state != _OPEN:
            what = "before open()" if self._state == _NEW else "after close()"
            raise LinkClosed(f"{self.name}: {self.describe()} used {what}")

    def _failure(self, exc: BaseException, doing: str) -> LinkError:
        """Count a bus/line failure and build the error to raise."""
        self.stats.errors += 1
        text = str(exc) or type(exc).__name__
        cls = LinkDisconnected if _looks_disconnected(exc) else LinkError
        return cls(f"{self.name}: {doing} on {self.describe()} failed: {text}")

    def _reject(self, message: str) -> LinkError:
        self.stats.rejects += 1
        return LinkError(f"{self.name}: {message}")

    # -- hooks -------------------------------------------------------------------------------
    def _open_hook(self) -> None:  # pragma: no cover - abstract
        raise NotImplementedError

    def _close_hook(self) -> None:  # pragma: no cover - abstract
        raise NotImplementedError


def _looks_disconnected(exc: BaseException) -> bool:
    import errno

    seen = set()
    e: BaseException | None = exc
    while e is not None and id(e) not in seen:
        seen.add(id(e))
        if isinstance(e, OSError) and e.errno in (errno.EIO, errno.ENXIO, errno.ENODEV, errno.EPIPE,
                                                   errno.ECONNRESET, errno.EBADF):
            return True
        text = str(e).lower()
        if any(w in text for w in ("disconnected", "input/output error", "errno 5", "no such device",
                                   "bad file descriptor", "broken pipe", "connection reset")):
            return True
        e = e.__cause__ or e.__context__
    return False


# ----------------------------------------------------------------------------------------------
# CAN
# ----------------------------------------------------------------------------------------------


class CanLink(Link):
    """A CAN bus through python-can (``can.Bus(interface=..., channel=...)``).

    Parameters
    ----------
    interface:
        python-can interface name: ``virtual`` (tests, one process), ``slcan`` (USB-serial
        adapters speaking the LAWICEL ASCII protocol, and the emulated rig's pty), ``socketcan``
        (Linux), ``pcan``, ``kvaser``, ... (any name python-can knows).
    channel:
        Interface channel: ``/dev/ttyACM0`` or a pty path for ``slcan``, ``can0`` for socketcan.
    bitrate:
        Bus bit rate, bit/s; ``None`` leaves the adapter as it is.
    receive_own_messages:
        Passed to python-can (``virtual``/``socketcan`` loop-back of own frames).
    log_path:
        Optional raw CAN log of every frame in and out, format by extension (``.log`` candump
        style, ``.asc``, ``.blf``, ``.csv``), flushed at least once per second.
    serial_timeout_s:
        ``slcan`` only: the serial read timeout python-can polls with (its ``timeout=``, default
        1 ms). Smaller = lower latency and busier polling.
    is_emulated:
        The endpoint is the emulated rig: ``slcan`` then skips python-can's 2 s wait after
        opening the port (``sleep_after_open=0``), which a real adapter may need.
    bus_kwargs:
        Passed unchanged to ``can.Bus``.
    """

    kind = "can"

    def __init__(
        self,
        interface: str,
        channel: str,
        bitrate: int | None = None,
        receive_own_messages: bool = False,
        log_path=None,
        *,
        name: str | None = None,
        is_emulated: bool = False,
        serial_timeout_s: float | None = None,
        **bus_kwargs: Any,
    ):
        super().__init__(name or "can", is_emulated=is_emulated)
        self.interface = interface
        self.channel = channel
        self.bitrate = bitrate
        self.receive_own_messages = receive_own_messages
        self.log_path = log_path
        self.serial_timeout_s = serial_timeout_s
        self.bus_kwargs = dict(bus_kwargs)
        self._bus = None
        self._log = None
        self._can = None

    def describe(self) -> str:
        rate = f" @ {self.bitrate} bit/s" if self.bitrate else ""
        return f"CAN {self.interface}:{self.channel}{rate}"

    def bus_arguments(self) -> dict[str, Any]:
        """The keyword arguments given to ``can.Bus`` (shown by ``--json`` and in tests)."""
        kw: dict[str, Any] = {"interface": self.interface, "channel": self.channel}
        if self.bitrate is not None:
            kw["bitrate"] = self.bitrate
        if self.receive_own_messages:
            kw["receive_own_messages"] = True
        if self.interface == "slcan":
            if self.is_emulated:
                kw["sleep_after_open"] = 0
            if self.serial_timeout_s is not None:
                kw["timeout"] = self.serial_timeout_s
        kw.update(self.bus_kwargs)
        return kw

    # hooks
    def _open_hook(self) -> None:
        import can

        self._can = can
        self._bus = can.Bus(**self.bus_arguments())
        if self.log_path is not None:
            from .recorder import CanLogWriter

            try:
                self._log = CanLogWriter(self.log_path)
            except Exception:
                self._bus.shutdown()
                self._bus = None
                raise

    def _close_hook(self) -> None:
        try:
            if self._log is not None:
                self._log.close()
        finally:
            self._log = None
            bus, self._bus = self._bus, None
            if bus is not None:
                bus.shutdown()

    # I/O
    def send(self, arbitration_id: int, data: bytes = b"", is_extended_id: bool = False,
             is_remote: bool = False) -> None:
        """Send one classic CAN data (or remote) frame; raises :class:`LinkError` on failure."""
        self._check_open()
        can = self._can
        try:
            msg = can.Message(arbitration_id=int(arbitration_id), data=bytes(data),
                              is_extended_id=bool(is_extended_id), is_remote_frame=bool(is_remote),
                              check=True)
        except (ValueError, TypeError) as exc:
            raise self._reject(f"frame refused (id=0x{int(arbitration_id):X}, "
                               f"{len(data)} bytes, extended={bool(is_extended_id)}): {exc}") from exc
        try:
            self._bus.send(msg)
        except (can.CanError, OSError) as exc:
            raise self._failure(exc, f"send of 0x{msg.arbitration_id:X}") from exc
        self.stats.frames_out += 1
        self.stats.bytes_out += len(msg.data)
        if self._log is not None:
            msg.timestamp = time.time()
            msg.is_rx = False
            msg.channel = self.name
            self._log.log_message(msg)

    def recv(self, timeout_s: float) -> CanFrame | None:
        """Next received frame, or ``None`` after ``timeout_s`` seconds (counted as a timeout)."""
        frame = self._recv(timeout_s)
        if frame is None:
            self.stats.timeouts += 1
        return frame

    def drain(self, max_items: int = 10_000) -> list[CanFrame]:
        """Every frame already received, without waiting (a timeout is not counted).

        A serial-line adapter (``slcan``) answers each frame we send with an OK byte; python-can
        returns ``None`` for such a reply although more frames may be waiting behind it, so the
        drain goes on while the adapter's serial port still holds bytes.
        """
        out = []
        port = getattr(self._bus, "serialPortOrig", None)
        for _ in range(max_items):
            f = self._recv(0.0)
            if f is not None:
                out.append(f)
                continue
            try:
                pending = port.in_waiting if port is not None else 0
            except (OSError, ValueError):
                pending = 0
            if not pending and not (getattr(self._bus, "_buffer", None) or b"").__contains__(b"\r"):
                return out
        return out

    def _recv(self, timeout_s: float) -> CanFrame | None:
        self._check_open()
        can = self._can
        try:
            msg = self._bus.recv(timeout=max(0.0, float(timeout_s)))
        except (can.CanError, OSError) as exc:
            raise self._failure(exc, "receive") from exc
        if msg is None:
            if self._log is not None:
                self._log.flush_if_due()  # the 1 s flush must not wait for the next frame
            return None
        t = time.monotonic()
        if msg.is_error_frame:
            self.stats.errors += 1
        self.stats.frames_in += 1
        self.stats.bytes_in += len(msg.data)
        if self._log is not None:
            msg.timestamp = time.time()
            msg.is_rx = True
            msg.channel = self.name
            self._log.log_message(msg)
        return CanFrame(t, msg.arbitration_id, bytes(msg.data), bool(msg.is_extended_id),
                        bool(msg.is_remote_frame), bool(msg.is_error_frame))

    def flush_log(self) -> None:
        """Push the raw CAN log to the OS now (it is also done at least once per second)."""
        if self._log is not None:
            self._log.flush()


# ----------------------------------------------------------------------------------------------
# serial lines
# ----------------------------------------------------------------------------------------------


class SerialLink(Link):
    """A serial line through pyserial's ``serial_for_url``.

    ``url`` is a device path (``/dev/ttyUSB0``), a pty slave path or its symlink (emulated rig),
    ``loop://`` or ``socket://127.0.0.1:PORT``. For ``socket://`` TCP_NODELAY is set on the
    socket (Nagle's algorithm costs 40–90 ms per line written in two pieces, LIBRARY-NOTES).
    Every :meth:`write` is one ``write`` call on the port.

    ``timeout_s`` is the default wait of :meth:`read`.
    """

    kind = "serial"

    def __init__(self, url: str, baudrate: int = 115200, timeout_s: float = 0.1, *,
                 name: str | None = None, is_emulated: bool = False, **serial_kwargs: Any):
        super().__init__(name or "serial", is_emulated=is_emulated)
        if not timeout_s >= 0:
            raise ValueError(f"timeout_s must be >= 0, got {timeout_s!r}")
        self.url = url
        self.baudrate = int(baudrate)
        self.timeout_s = float(timeout_s)
        self.serial_kwargs = dict(serial_kwargs)
        self._port = None
        self._fd: int | None = None
        self.tcp_nodelay = False

    def describe(self) -> str:
        return f"serial {self.url} @ {self.baudrate} Bd"

    def _open_hook(self) -> None:
        import serial

        port = serial.serial_for_url(self.url, baudrate=self.baudrate, timeout=self.timeout_s,
                                     **self.serial_kwargs)
        sock = getattr(port, "_socket", None)
        if sock is not None:  # socket:// — pyserial keeps the socket here
            import socket

            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            self.tcp_nodelay = bool(sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY))
        try:
            self._fd = port.fileno()
        except Exception:  # loop:// and friends have no descriptor
            self._fd = None
        self._port = port

    def _close_hook(self) -> None:
        port, self._port = self._port, None
        if port is not None:
            port.close()

    def write(self, data: bytes) -> int:
        """Write ``data`` in one call; returns the number of bytes written."""
        self._check_open()
        if not isinstance(data, (bytes, bytearray, memoryview)) or len(data) == 0:
            raise self._reject("write needs non-empty bytes")
        try:
            n = self._port.write(bytes(data))
        except OSError as exc:  # serial.SerialException is an OSError
            raise self._failure(exc, "write") from exc
        n = len(data) if n is None else n
        self.stats.frames_out += 1
        self.stats.bytes_out += n
        return n

    def read_available(self, max_bytes: int = 4096) -> bytes:
        """What has arrived, up to ``max_bytes``, without waiting (``b""`` when nothing)."""
        self._check_open()
        port = self._port
        try:
            n = port.in_waiting
            if n == 0 and self._fd is not None:
                # a pty whose peer closed reports 0 waiting but selects readable (read → EIO)
                r, _, _ = select.select([self._fd], [], [], 0)
                n = max(port.in_waiting, 1) if r else 0
            data = port.read(min(n, max_bytes)) if n else b""
        except OSError as exc:
            raise self._failure(exc, "read") from exc
        if data:
            self.stats.frames_in += 1
            self.stats.bytes_in += len(data)
        return data

    def read(self, timeout_s: float | None = None, max_bytes: int = 4096) -> bytes:
        """Wait up to ``timeout_s`` (default: the link's) for data; return what has arrived.

        Returns ``b""`` on timeout (counted in ``stats.timeouts``).
        """
        self._check_open()
        port = self._port
        timeout = self.timeout_s if timeout_s is None else float(timeout_s)
        try:
            if port.timeout != timeout:
                port.timeout = timeout
            first = port.read(1)
            if first:
                n = port.in_waiting
                rest = port.read(min(n, max_bytes - 1)) if n and max_bytes > 1 else b""
                data = first + rest
            else:
                data = b""
        except OSError as exc:
            raise self._failure(exc, "read") from exc
        if not data:
            self.stats.timeouts += 1
            return b""
        self.stats.frames_in += 1
        self.stats.bytes_in += len(data)
        return data

    def reset_input(self) -> None:
        """Discard what is waiting (e.g. stale lines from before the run started)."""
        self._check_open()
        try:
            self._port.reset_input_buffer()
        except OSError as exc:
            raise self._failure(exc, "reset of the input buffer") from exc


# ----------------------------------------------------------------------------------------------
# factory
# ----------------------------------------------------------------------------------------------

ADAPTERS: dict[str, str] = {
    "can": "hil.links:CanLink",
    "serial": "hil.links:SerialLink",
}
"""Link kind → ``module:class``, imported when first used."""


def adapter_class(kind: str) -> type[Link]:
    try:
        target = ADAPTERS[kind]
    except KeyError:
        raise LinkError(f"unknown link kind {kind!r} (known: {', '.join(sorted(ADAPTERS))})") from None
    module, _, cls = target.partition(":")
    return getattr(importlib.import_module(module), cls)


def open_link(cfg, *, log_path=None, open_now: bool = True) -> Link:
    """Create (and by default open) the link described by one entry of a links config.

    ``cfg`` is a :class:`hil.links_config.CanLinkConfig` or
    :class:`hil.links_config.SerialLinkConfig` (anything with ``kind`` and the same fields).
    ``log_path`` (CAN only) overrides where the raw CAN log goes.
    """
    cls = adapter_class(cfg.kind)
    if cfg.kind == "can":
        link: Link = cls(cfg.interface, cfg.channel, cfg.bitrate, log_path=log_path,
                         name=cfg.name, is_emulated=cfg.emulated,
                         serial_timeout_s=cfg.serial_timeout_s, **dict(cfg.bus_kwargs))
    else:
        link = cls(cfg.url, cfg.baudrate, cfg.timeout_s, name=cfg.name, is_emulated=cfg.emulated)
    return link.open() if open_now else link
