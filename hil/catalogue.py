"""The finloop CAN message catalogue: IDs, fast ``struct`` packers, CRC-8 and alive counters.

Every frame is a classical CAN data frame with a standard 11-bit identifier, DLC 8 (heartbeat:
DLC 2), little-endian (Intel) signals. The layout is documented in ``docs/MESSAGES.md`` and
exported as ``docs/finloop.dbc`` (:func:`export_dbc`); the catalogue is defined once for
cantools in :func:`build_database`, and the hand-written ``struct`` packers used in the real-time
loop are proven byte-identical to cantools by ``tests/test_catalogue.py``.

Frames (default IDs, see :class:`CanIds`)::

    FIN_DEMAND         0x110  controller -> rig   port/stbd angle demand, mode, alive, CRC
    FIN_FEEDBACK_PORT  0x120  rig -> controller   measured port fin angle, status bits, alive, CRC
    FIN_FEEDBACK_STBD  0x121  rig -> controller   measured stbd fin angle, status bits, alive, CRC
    CONTROLLER_STATUS  0x130  controller -> all   mode, previous mode, faults, limiter, speed, ...
    HEARTBEAT_<node>   0x700 + node id            node state, free-running counter (no CRC)

Units: SI inside (rad, m/s); the frames carry 0.01 deg and 0.01 kn. Encoders round half away
from zero to the nearest raw step, saturate to the signal range, and raise ``ValueError`` on a
non-finite value or an invalid mode / bit set. Decoders are pure and never raise: a malformed
frame gives a :class:`Reject` with a short stable reason code (see :data:`REJECT_REASONS`).

CRC: CRC-8/SAE-J1850 (width 8, poly 0x1D, init 0xFF, no reflection, xorout 0xFF, check 0x4B)
over the data ID (the arbitration ID as two bytes, low byte first) followed by data bytes 0..6;
the result is byte 7.

cantools is imported lazily (only :func:`build_database` / :func:`export_dbc` need it).
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass, fields
from enum import IntEnum, IntFlag
from typing import Any, Mapping, NamedTuple

from controller.faults import ALL_FAULTS
from controller.modes import MODES, Limiter, Mode

__all__ = [
    "CanIds",
    "DEFAULT_IDS",
    "Reject",
    "REJECT_REASONS",
    "FrameCounters",
    "FinStatus",
    "NodeState",
    "FinDemand",
    "FinFeedback",
    "ControllerStatus",
    "Heartbeat",
    "AliveMonitor",
    "crc8_sae_j1850",
    "frame_crc",
    "round_half_away",
    "encode_fin_demand",
    "encode_fin_feedback",
    "encode_controller_status",
    "encode_heartbeat",
    "decode_fin_demand",
    "decode_fin_feedback",
    "decode_controller_status",
    "decode_heartbeat",
    "decode_frame",
    "decode_can_message",
    "build_database",
    "export_dbc",
    "ANGLE_DEMAND_MAX_DEG",
    "ANGLE_FEEDBACK_MAX_DEG",
    "SPEED_MAX_KN",
]

# ---- identifiers --------------------------------------------------------------------------------

_STD_ID_MAX = 0x7FF
_NODE_ID_MAX = 127


@dataclass(frozen=True)
class CanIds:
    """The arbitration IDs of the catalogue (standard 11-bit), configurable per rig.

    ``heartbeat_base + controller_node`` and ``heartbeat_base + rig_node`` are the heartbeat IDs
    (the CANopen-like "0x700 + node id" pattern). Every ID must be in 0..0x7FF and all six IDs
    must differ; node ids are 1..127. Violations raise ``ValueError`` naming field, value and the
    allowed range.
    """

    fin_demand: int = 0x110
    fin_feedback_port: int = 0x120
    fin_feedback_stbd: int = 0x121
    controller_status: int = 0x130
    heartbeat_base: int = 0x700
    controller_node: int = 1
    rig_node: int = 2

    def __post_init__(self) -> None:
        for f in fields(self):
            v = getattr(self, f.name)
            if type(v) is not int:  # bool is not an ID either
                raise ValueError(f"CanIds.{f.name} = {v!r}: must be an integer")
            if f.name.endswith("_node"):
                if not 1 <= v <= _NODE_ID_MAX:
                    raise ValueError(f"CanIds.{f.name} = {v}: node id out of range (1 .. {_NODE_ID_MAX})")
            elif not 0 <= v <= _STD_ID_MAX:
                raise ValueError(f"CanIds.{f.name} = {v:#x}: not a standard 11-bit ID (0x000 .. 0x7ff)")
        for name in ("controller_node", "rig_node"):
            hb = self.heartbeat_base + getattr(self, name)
            if hb > _STD_ID_MAX:
                raise ValueError(
                    f"CanIds.heartbeat_base + {name} = {hb:#x}: heartbeat ID beyond 0x7ff "
                    "(lower heartbeat_base or the node id)"
                )
        seen: dict[int, str] = {}
        for name, v in self.named_ids().items():
            if v in seen:
                raise ValueError(f"CanIds.{name} = {v:#x}: same ID as {seen[v]} (IDs must be unique)")
            seen[v] = name

    @classmethod
    def from_mapping(cls, m: Mapping[str, Any]) -> "CanIds":
        """Build from a mapping of field names to ints (missing keys keep their defaults).

        Unknown keys raise ``ValueError`` naming the key and the allowed names.
        """
        allowed = {f.name for f in fields(cls)}
        unknown = sorted(set(m) - allowed)
        if unknown:
            raise ValueError(f"CanIds: unknown key(s) {', '.join(unknown)} (allowed: {', '.join(sorted(allowed))})")
        return cls(**dict(m))

    def named_ids(self) -> dict[str, int]:
        """Frame name -> arbitration ID for every frame in the catalogue."""
        return {
            "fin_demand": self.fin_demand,
            "fin_feedback_port": self.fin_feedback_port,
            "fin_feedback_stbd": self.fin_feedback_stbd,
            "controller_status": self.controller_status,
            "heartbeat_controller": self.heartbeat_base + self.controller_node,
            "heartbeat_rig": self.heartbeat_base + self.rig_node,
        }

    def feedback_id(self, side: str) -> int:
        """The feedback frame ID of ``side`` ("port" or "stbd")."""
        if side == "port":
            return self.fin_feedback_port
        if side == "stbd":
            return self.fin_feedback_stbd
        raise ValueError(f"side = {side!r}: must be 'port' or 'stbd'")

    def heartbeat_id(self, node_id: int) -> int:
        """The heartbeat ID of a node (``heartbeat_base + node_id``)."""
        if type(node_id) is not int or not 1 <= node_id <= _NODE_ID_MAX:
            raise ValueError(f"node_id = {node_id!r}: must be an integer 1 .. {_NODE_ID_MAX}")
        return self.heartbeat_base + node_id


DEFAULT_IDS = CanIds()

# ---- rejects and counters ----------------------------------------------------------------------


class Reject(NamedTuple):
    """A frame (or sentence) a decoder refused; ``reason`` is a short stable code."""

    reason: str


REJECT_REASONS: dict[str, str] = {
    "type": "data is not bytes-like",
    "remote": "remote (RTR) frame",
    "extended": "29-bit (extended) identifier",
    "error": "CAN error frame",
    "fd": "CAN FD frame (the catalogue is classical CAN)",
    "id": "arbitration ID is not the one this decoder handles",
    "dlc": "wrong data length",
    "crc": "CRC-8 mismatch",
    "reserved": "a reserved bit is set",
    "range": "a field is outside its documented range",
}
"""CAN decoder reject codes (the serial codec adds its own, see :mod:`hil.serial_codec`)."""

_R = {k: Reject(k) for k in REJECT_REASONS}
_R_TYPE, _R_REMOTE, _R_EXT, _R_ID, _R_DLC, _R_CRC, _R_RES, _R_RANGE = (
    _R["type"], _R["remote"], _R["extended"], _R["id"], _R["dlc"], _R["crc"], _R["reserved"], _R["range"]
)


class FrameCounters:
    """Counts accepted and rejected decoder results by reason (pure bookkeeping).

    ``count(result)`` returns ``result`` unchanged so it can wrap a decoder call::

        demand = counters.count(decode_fin_demand(msg_id, data))
    """

    __slots__ = ("accepted", "rejected")

    def __init__(self) -> None:
        self.accepted = 0
        self.rejected: dict[str, int] = {}

    def count(self, result: Any) -> Any:
        if type(result) is Reject:
            self.rejected[result.reason] = self.rejected.get(result.reason, 0) + 1
        else:
            self.accepted += 1
        return result

    def reject(self, reason: str, n: int = 1) -> None:
        """Count ``n`` rejects with ``reason`` directly."""
        self.rejected[reason] = self.rejected.get(reason, 0) + n

    @property
    def total_rejected(self) -> int:
        return sum(self.rejected.values())

    def as_dict(self) -> dict[str, Any]:
        return {"accepted": self.accepted, "rejected": dict(sorted(self.rejected.items()))}

    def __repr__(self) -> str:
        return f"FrameCounters(accepted={self.accepted}, rejected={dict(sorted(self.rejected.items()))})"


# ---- enumerations of our own --------------------------------------------------------------------


class FinStatus(IntFlag):
    """Status bits in FIN_FEEDBACK_* byte 2 (bits 5..7 reserved, must be 0)."""

    NONE = 0
    VALID = 1  # the angle measurement is valid
    HYDRAULICS_OK = 2  # actuator power (hydraulic pressure / drive) is available
    AT_LIMIT = 4  # the fin is at its mechanical angle limit
    ACTUATOR_FAULT = 8  # the rig reports an actuator fault
    LOCKED_CENTRE = 16  # the fin is held centred (locked / not following demands)


_FIN_STATUS_ALL = 31


class NodeState(IntEnum):
    """Heartbeat node state (our own values)."""

    STARTING = 0
    OPERATIONAL = 1
    DEGRADED = 2
    STOPPED = 3


_NODE_STATE_MAX = 3
_NODE_STATES = tuple(NodeState)
_MODE_MAX = max(Mode)
_LIMITER_ALL = sum(int(f) for f in Limiter)

# ---- decoded records ----------------------------------------------------------------------------


class FinDemand(NamedTuple):
    port: float  # rad, fin angle demand, positive = leading edge up
    stbd: float  # rad
    mode: Mode
    alive: int  # 0..15


class FinFeedback(NamedTuple):
    side: str  # "port" or "stbd"
    angle: float  # rad, measured fin angle, positive = leading edge up
    status: int  # FinStatus bits
    alive: int

    @property
    def valid(self) -> bool:
        return bool(self.status & FinStatus.VALID)


class ControllerStatus(NamedTuple):
    mode: Mode
    previous_mode: Mode
    faults: int  # controller.Fault bits
    limiter: int  # controller.Limiter bits
    speed: float  # m/s (speed through water the controller uses)
    alive: int


class Heartbeat(NamedTuple):
    node_id: int
    state: NodeState
    counter: int  # 0..255, free running


# ---- scaling ------------------------------------------------------------------------------------

ANGLE_DEMAND_MAX_DEG = 45.0
ANGLE_FEEDBACK_MAX_DEG = 90.0
SPEED_MAX_KN = 100.0
_KNOT = 1852.0 / 3600.0  # m/s; same definition as plant.constants.KNOT (hil may import plant,
# but the packers stay dependency-light)

_ANGLE_RAW_MAX_DEMAND = 4500  # 45.00 deg in 0.01 deg
_ANGLE_RAW_MAX_FEEDBACK = 9000
_SPEED_RAW_MAX = 10000  # 100.00 kn in 0.01 kn
_RAD_PER_RAW = 0.01 * math.pi / 180.0
_RAW_PER_RAD = 18000.0 / math.pi
_MS_PER_RAW = 0.01 * _KNOT
_RAW_PER_MS = 100.0 / _KNOT


def round_half_away(x: float) -> int:
    """Round to the nearest integer, ties away from zero (``2.5 -> 3``, ``-2.5 -> -3``).

    Exact for every finite float (uses ``x - floor(x)``, which is exact, rather than the
    ``floor(x + 0.5)`` idiom that misrounds 0.49999999999999994).
    """
    a = abs(x)
    n = math.floor(a)
    if a - n >= 0.5:
        n += 1
    return n if x >= 0 else -n


def _finite(name: str, x: float) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        raise ValueError(f"{name} = {x!r}: not a number") from None
    if not math.isfinite(v):
        raise ValueError(f"{name} = {x!r}: must be finite")
    return v


def _angle_raw(name: str, x: float, raw_max: int) -> int:
    r = round_half_away(_finite(name, x) * _RAW_PER_RAD)
    return raw_max if r > raw_max else (-raw_max if r < -raw_max else r)


_MODE_VALUES = frozenset(int(m) for m in Mode)


def _mode(name: str, m: int) -> int:
    if isinstance(m, int) and m in _MODE_VALUES:  # Mode is an IntEnum
        return int(m)
    raise ValueError(f"{name} = {m!r}: not a controller Mode (0 .. {int(_MODE_MAX)})")


def _alive(a: int) -> int:
    if type(a) is not int and not isinstance(a, int):
        raise ValueError(f"alive = {a!r}: must be an integer (taken mod 16)")
    return a & 0x0F


# ---- CRC-8/SAE-J1850 ----------------------------------------------------------------------------


def _make_crc8_table(poly: int) -> tuple[int, ...]:
    table = []
    for i in range(256):
        c = i
        for _ in range(8):
            c = ((c << 1) ^ poly) & 0xFF if c & 0x80 else (c << 1) & 0xFF
        table.append(c)
    return tuple(table)


_CRC8 = _make_crc8_table(0x1D)


def crc8_sae_j1850(data: bytes | bytearray, crc: int = 0xFF) -> int:
    """CRC-8/SAE-J1850: poly 0x1D, init 0xFF, refin/refout false, xorout 0xFF (check 0x4B).

    ``crc`` is the register before the data (pass the un-xored register to continue a
    computation; normal use leaves the default).
    """
    t = _CRC8
    for b in data:
        crc = t[crc ^ b]
    return crc ^ 0xFF


def frame_crc(arbitration_id: int, data7: bytes | bytearray) -> int:
    """CRC byte of a catalogue frame: CRC-8/SAE-J1850 over [ID low byte, ID high byte, data 0..6]."""
    t = _CRC8
    crc = t[0xFF ^ (arbitration_id & 0xFF)]
    crc = t[crc ^ ((arbitration_id >> 8) & 0xFF)]
    for i in range(7):
        crc = t[crc ^ data7[i]]
    return crc ^ 0xFF


# ---- struct layouts -----------------------------------------------------------------------------

_S_DEMAND7 = struct.Struct("<hhBBB")  # port, stbd, mode|rsv, rsv, alive|rsv
_S_DEMAND = struct.Struct("<hhBBBB")
_S_FEEDBACK7 = struct.Struct("<hBBHB")  # angle, status, rsv, rsv16, alive|rsv
_S_FEEDBACK = struct.Struct("<hBBHBB")
_S_STATUS7 = struct.Struct("<BHBHB")  # mode|prev<<4, faults, limiter, speed, alive|rsv
_S_STATUS = struct.Struct("<BHBHBB")
_S_HEARTBEAT = struct.Struct("<BB")
_BYTE = tuple(bytes((i,)) for i in range(256))


def _seal(arbitration_id: int, body: bytes) -> bytes:
    return body + _BYTE[frame_crc(arbitration_id, body)]


# ---- encoders -----------------------------------------------------------------------------------


def encode_fin_demand(port: float, stbd: float, mode: int, alive: int, ids: CanIds = DEFAULT_IDS) -> bytes:
    """FIN_DEMAND data (8 bytes) for arbitration ID ``ids.fin_demand``.

    ``port``/``stbd`` in rad (rounded half away from zero to 0.01 deg, saturated to ±45 deg),
    ``mode`` a :class:`controller.Mode` value, ``alive`` taken mod 16.
    """
    p = _angle_raw("port", port, _ANGLE_RAW_MAX_DEMAND)
    s = _angle_raw("stbd", stbd, _ANGLE_RAW_MAX_DEMAND)
    return _seal(ids.fin_demand, _S_DEMAND7.pack(p, s, _mode("mode", mode), 0, _alive(alive)))


def encode_fin_feedback(side: str, angle: float, status: int, alive: int, ids: CanIds = DEFAULT_IDS) -> bytes:
    """FIN_FEEDBACK_PORT/STBD data (8 bytes) for arbitration ID ``ids.feedback_id(side)``.

    ``angle`` in rad (0.01 deg steps, saturated to ±90 deg), ``status`` :class:`FinStatus` bits.
    """
    fid = ids.feedback_id(side)
    a = _angle_raw("angle", angle, _ANGLE_RAW_MAX_FEEDBACK)
    st = int(status)
    if not 0 <= st <= _FIN_STATUS_ALL:
        raise ValueError(f"status = {status!r}: unknown FinStatus bits (allowed 0 .. {_FIN_STATUS_ALL})")
    return _seal(fid, _S_FEEDBACK7.pack(a, st, 0, 0, _alive(alive)))


def encode_controller_status(
    mode: int,
    previous_mode: int,
    faults: int,
    limiter: int,
    speed: float,
    alive: int,
    ids: CanIds = DEFAULT_IDS,
) -> bytes:
    """CONTROLLER_STATUS data (8 bytes) for arbitration ID ``ids.controller_status``.

    ``faults``: controller.Fault bits (0 .. 511); ``limiter``: controller.Limiter bits (0 .. 31);
    ``speed`` in m/s (0.01 kn steps, saturated to 0 .. 100 kn).
    """
    m = _mode("mode", mode)
    pm = _mode("previous_mode", previous_mode)
    f = int(faults)
    if not 0 <= f <= ALL_FAULTS:
        raise ValueError(f"faults = {faults!r}: unknown Fault bits (allowed 0 .. {ALL_FAULTS})")
    lim = int(limiter)
    if not 0 <= lim <= _LIMITER_ALL:
        raise ValueError(f"limiter = {limiter!r}: unknown Limiter bits (allowed 0 .. {_LIMITER_ALL})")
    v = round_half_away(_finite("speed", speed) * _RAW_PER_MS)
    v = _SPEED_RAW_MAX if v > _SPEED_RAW_MAX else (0 if v < 0 else v)
    return _seal(ids.controller_status, _S_STATUS7.pack(m | (pm << 4), f, lim, v, _alive(alive)))


def encode_heartbeat(state: int, counter: int) -> bytes:
    """HEARTBEAT data (2 bytes): node state and a free-running counter (taken mod 256)."""
    try:
        st = int(NodeState(state))
    except (ValueError, TypeError):
        raise ValueError(f"state = {state!r}: not a NodeState (0 .. {_NODE_STATE_MAX})") from None
    if not isinstance(counter, int):
        raise ValueError(f"counter = {counter!r}: must be an integer (taken mod 256)")
    return _S_HEARTBEAT.pack(st, counter & 0xFF)


# ---- decoders -----------------------------------------------------------------------------------


def _check8(arbitration_id: int, data: Any) -> Reject | bytes:
    """Common checks of a CRC-protected frame: bytes-like, DLC 8, CRC. Returns bytes or a Reject."""
    if not isinstance(data, bytes):
        if isinstance(data, bytearray):
            data = bytes(data)
        elif isinstance(data, memoryview):
            try:
                data = data.tobytes()
            except Exception:  # pragma: no cover - exotic buffers
                return _R_TYPE
        else:
            return _R_TYPE
    if len(data) != 8:
        return _R_DLC
    t = _CRC8
    crc = t[0xFF ^ (arbitration_id & 0xFF)]
    crc = t[crc ^ ((arbitration_id >> 8) & 0xFF)]
    for i in range(7):
        crc = t[crc ^ data[i]]
    if crc ^ 0xFF != data[7]:
        return _R_CRC
    return data


def _frame_kind_reject(arbitration_id: Any, is_remote: bool, is_extended: bool) -> Reject | None:
    if is_remote:
        return _R_REMOTE
    if is_extended:
        return _R_EXT
    if type(arbitration_id) is not int:
        return _R_ID
    return None


def decode_fin_demand(
    arbitration_id: int, data: bytes, ids: CanIds = DEFAULT_IDS, *, is_remote: bool = False, is_extended: bool = False
) -> FinDemand | Reject:
    """Decode FIN_DEMAND. Never raises; see :data:`REJECT_REASONS`."""
    r = _frame_kind_reject(arbitration_id, is_remote, is_extended)
    if r is not None:
        return r
    if arbitration_id != ids.fin_demand:
        return _R_ID
    d = _check8(arbitration_id, data)
    if type(d) is Reject:
        return d
    p, s, b4, b5, b6, _ = _S_DEMAND.unpack(d)
    if b4 & 0xF0 or b5 or b6 & 0xF0:
        return _R_RES
    m = b4 & 0x0F
    if m > _MODE_MAX or not -_ANGLE_RAW_MAX_DEMAND <= p <= _ANGLE_RAW_MAX_DEMAND or not (
        -_ANGLE_RAW_MAX_DEMAND <= s <= _ANGLE_RAW_MAX_DEMAND
    ):
        return _R_RANGE
    return FinDemand(p * _RAD_PER_RAW, s * _RAD_PER_RAW, MODES[m], b6)


def decode_fin_feedback(
    arbitration_id: int, data: bytes, ids: CanIds = DEFAULT_IDS, *, is_remote: bool = False, is_extended: bool = False
) -> FinFeedback | Reject:
    """Decode FIN_FEEDBACK_PORT or FIN_FEEDBACK_STBD (the side follows from the ID)."""
    r = _frame_kind_reject(arbitration_id, is_remote, is_extended)
    if r is not None:
        return r
    if arbitration_id == ids.fin_feedback_port:
        side = "port"
    elif arbitration_id == ids.fin_feedback_stbd:
        side = "stbd"
    else:
        return _R_ID
    d = _check8(arbitration_id, data)
    if type(d) is Reject:
        return d
    a, st, b3, b45, b6, _ = _S_FEEDBACK.unpack(d)
    if st & ~_FIN_STATUS_ALL or b3 or b45 or b6 & 0xF0:
        return _R_RES
    if not -_ANGLE_RAW_MAX_FEEDBACK <= a <= _ANGLE_RAW_MAX_FEEDBACK:
        return _R_RANGE
    return FinFeedback(side, a * _RAD_PER_RAW, st, b6)


def decode_controller_status(
    arbitration_id: int, data: bytes, ids: CanIds = DEFAULT_IDS, *, is_remote: bool = False, is_extended: bool = False
) -> ControllerStatus | Reject:
    """Decode CONTROLLER_STATUS."""
    r = _frame_kind_reject(arbitration_id, is_remote, is_extended)
    if r is not None:
        return r
    if arbitration_id != ids.controller_status:
        return _R_ID
    d = _check8(arbitration_id, data)
    if type(d) is Reject:
        return d
    b0, f, lim, v, b6, _ = _S_STATUS.unpack(d)
    if f & ~ALL_FAULTS or lim & ~_LIMITER_ALL or b6 & 0xF0:
        return _R_RES
    m = b0 & 0x0F
    pm = b0 >> 4
    if m > _MODE_MAX or pm > _MODE_MAX or v > _SPEED_RAW_MAX:
        return _R_RANGE
    return ControllerStatus(MODES[m], MODES[pm], f, lim, v * _MS_PER_RAW, b6)


def decode_heartbeat(
    arbitration_id: int, data: bytes, ids: CanIds = DEFAULT_IDS, *, is_remote: bool = False, is_extended: bool = False
) -> Heartbeat | Reject:
    """Decode a HEARTBEAT of the controller or rig node (DLC 2, no CRC)."""
    r = _frame_kind_reject(arbitration_id, is_remote, is_extended)
    if r is not None:
        return r
    node = arbitration_id - ids.heartbeat_base
    if node != ids.controller_node and node != ids.rig_node:
        return _R_ID
    if not isinstance(data, (bytes, bytearray, memoryview)):
        return _R_TYPE
    if len(data) != 2:
        return _R_DLC
    st, c = _S_HEARTBEAT.unpack(bytes(data))
    if st > _NODE_STATE_MAX:
        return _R_RANGE
    return Heartbeat(node, _NODE_STATES[st], c)


_DECODERS = ("fin_demand", "fin_feedback", "fin_feedback", "controller_status", "heartbeat", "heartbeat")
_DISPATCH_CACHE: dict[CanIds, dict[int, Any]] = {}


def _dispatch(ids: CanIds) -> dict[int, Any]:
    d = _DISPATCH_CACHE.get(ids)
    if d is None:
        fns = {
            "fin_demand": decode_fin_demand,
            "fin_feedback": decode_fin_feedback,
            "controller_status": decode_controller_status,
            "heartbeat": decode_heartbeat,
        }
        d = {fid: fns[kind] for fid, kind in zip(ids.named_ids().values(), _DECODERS)}
        if len(_DISPATCH_CACHE) > 64:  # bounded: configs rarely hold more than a few ID sets
            _DISPATCH_CACHE.clear()
        _DISPATCH_CACHE[ids] = d
    return d


def decode_frame(
    arbitration_id: int, data: bytes, ids: CanIds = DEFAULT_IDS, *, is_remote: bool = False, is_extended: bool = False
) -> FinDemand | FinFeedback | ControllerStatus | Heartbeat | Reject:
    """Decode any catalogue frame, chosen by its arbitration ID (unknown ID -> ``Reject("id")``)."""
    r = _frame_kind_reject(arbitration_id, is_remote, is_extended)
    if r is not None:
        return r
    fn = _dispatch(ids).get(arbitration_id)
    if fn is None:
        return _R_ID
    return fn(arbitration_id, data, ids)


def decode_can_message(msg: Any, ids: CanIds = DEFAULT_IDS) -> FinDemand | FinFeedback | ControllerStatus | Heartbeat | Reject:
    """Decode a ``can.Message`` (duck-typed: python-can is not imported here).

    Error frames give ``Reject("error")``, CAN FD frames ``Reject("fd")``; a DLC that disagrees
    with the data length gives ``Reject("dlc")``.
    """
    try:
        if getattr(msg, "is_error_frame", False):
            return _R["error"]
        if getattr(msg, "is_fd", False):
            return _R["fd"]
        data = msg.data
        dlc = getattr(msg, "dlc", None)
        remote = bool(getattr(msg, "is_remote_frame", False))
        if not remote and dlc is not None and data is not None and dlc != len(data):
            return _R_DLC
        return decode_frame(
            msg.arbitration_id, data if data is not None else b"", ids,
            is_remote=remote, is_extended=bool(getattr(msg, "is_extended_id", False)),
        )
    except Exception:  # a malformed object must not take the loop down
        return _R_TYPE


# ---- alive counter ------------------------------------------------------------------------------


class AliveMonitor:
    """Checks a received alive counter (pure logic; the caller passes the frames in order).

    ``update(counter)`` returns ``"first"`` (first value seen, or after :meth:`reset`), ``"ok"``
    (previous + 1 mod ``modulus``), ``"stalled"`` (same value again: the sender's task stopped
    counting, or the frame was repeated) or ``"skipped"`` (any other jump: frames were lost; the
    number of lost frames, ``(counter - previous - 1) mod modulus``, is added to ``lost``).
    A loss of a whole multiple of ``modulus`` frames cannot be seen and reads as ``"ok"`` or
    ``"stalled"`` — inherent to a 4-bit counter.
    """

    __slots__ = ("modulus", "last", "ok", "stalled", "skipped", "lost", "stalled_run")

    def __init__(self, modulus: int = 16) -> None:
        if type(modulus) is not int or modulus < 2:
            raise ValueError(f"modulus = {modulus!r}: must be an integer >= 2")
        self.modulus = modulus
        self.reset()

    def reset(self) -> None:
        """Forget the last value and clear the counts."""
        self.last: int | None = None
        self.ok = 0
        self.stalled = 0
        self.skipped = 0
        self.lost = 0
        self.stalled_run = 0  # consecutive stalled updates (0 after any change)

    def update(self, counter: int) -> str:
        c = counter % self.modulus
        last = self.last
        self.last = c
        if last is None:
            return "first"
        step = (c - last) % self.modulus
        if step == 1:
            self.ok += 1
            self.stalled_run = 0
            return "ok"
        if step == 0:
            self.stalled += 1
            self.stalled_run += 1
            return "stalled"
        self.skipped += 1
        self.lost += step - 1
        self.stalled_run = 0
        return "skipped"

    def as_dict(self) -> dict[str, int]:
        return {"ok": self.ok, "stalled": self.stalled, "skipped": self.skipped, "lost": self.lost}


# ---- cantools catalogue -------------------------------------------------------------------------


def build_database(ids: CanIds = DEFAULT_IDS):
    """The catalogue as a ``cantools.database.can.Database`` (imports cantools, ~0.4 s).

    Signals carry scale/offset, units and min/max so ``Message.encode(..., strict=True)``
    range-checks. The CRC and alive counter are plain unsigned signals (cantools does not compute
    them). Reserved bits are not signals (cantools encodes them as 0).
    """
    from cantools.database.can import Database, Message, Node, Signal
    from cantools.database.conversion import BaseConversion

    def sig(name, start, length, *, signed=False, scale=1, minimum=None, maximum=None, unit=None,
            choices=None, comment=None, receivers=None):
        conv = BaseConversion.factory(scale=scale, offset=0, choices=choices, is_float=False)
        if minimum is None:
            minimum = (-(1 << (length - 1)) if signed else 0) * scale
        if maximum is None:
            maximum = ((1 << (length - 1)) - 1 if signed else (1 << length) - 1) * scale
        return Signal(name, start, length, byte_order="little_endian", is_signed=signed, conversion=conv,
                      minimum=minimum, maximum=maximum, unit=unit, comment=comment, receivers=receivers)

    mode_choices = {int(m): m.name for m in Mode}
    node_choices = {int(s): s.name for s in NodeState}
    ctl, rig = "CONTROLLER", "RIG"
    alive_c = "alive counter: +1 mod 16 on every frame sent"
    crc_c = "CRC-8/SAE-J1850 over [ID low byte, ID high byte, data bytes 0..6]"

    def feedback(name, fid, side):
        return Message(
            fid, name, 8,
            [
                sig("angle", 0, 16, signed=True, scale=0.01, minimum=-ANGLE_FEEDBACK_MAX_DEG,
                    maximum=ANGLE_FEEDBACK_MAX_DEG, unit="deg", receivers=[ctl],
                    comment=f"measured {side} fin angle, positive = leading edge up"),
                sig("valid", 16, 1, receivers=[ctl], comment="angle measurement valid"),
                sig("hydraulics_ok", 17, 1, receivers=[ctl], comment="actuator power available"),
                sig("at_limit", 18, 1, receivers=[ctl], comment="fin at its mechanical angle limit"),
                sig("actuator_fault", 19, 1, receivers=[ctl], comment="rig reports an actuator fault"),
                sig("locked_centre", 20, 1, receivers=[ctl], comment="fin held centred, not following demands"),
                sig("alive", 48, 4, receivers=[ctl], comment=alive_c),
                sig("crc", 56, 8, receivers=[ctl], comment=crc_c),
            ],
            senders=[rig], cycle_time=20, comment=f"{side} fin feedback, rig to controller", strict=True,
        )

    messages = [
        Message(
            ids.fin_demand, "FIN_DEMAND", 8,
            [
                sig("port_angle", 0, 16, signed=True, scale=0.01, minimum=-ANGLE_DEMAND_MAX_DEG,
                    maximum=ANGLE_DEMAND_MAX_DEG, unit="deg", receivers=[rig],
                    comment="port fin angle demand, positive = leading edge up"),
                sig("stbd_angle", 16, 16, signed=True, scale=0.01, minimum=-ANGLE_DEMAND_MAX_DEG,
                    maximum=ANGLE_DEMAND_MAX_DEG, unit="deg", receivers=[rig],
                    comment="starboard fin angle demand, positive = leading edge up"),
                sig("mode", 32, 4, maximum=int(_MODE_MAX), choices=mode_choices, receivers=[rig],
                    comment="controller mode (controller.Mode)"),
                sig("alive", 48, 4, receivers=[rig], comment=alive_c),
                sig("crc", 56, 8, receivers=[rig], comment=crc_c),
            ],
            senders=[ctl], cycle_time=20, comment="fin angle demands, controller to rig", strict=True,
        ),
        feedback("FIN_FEEDBACK_PORT", ids.fin_feedback_port, "port"),
        feedback("FIN_FEEDBACK_STBD", ids.fin_feedback_stbd, "starboard"),
        Message(
            ids.controller_status, "CONTROLLER_STATUS", 8,
            [
                sig("mode", 0, 4, maximum=int(_MODE_MAX), choices=mode_choices, receivers=[rig],
                    comment="controller mode (controller.Mode)"),
                sig("previous_mode", 4, 4, maximum=int(_MODE_MAX), choices=mode_choices, receivers=[rig],
                    comment="mode before the last transition"),
                sig("faults", 8, 16, maximum=ALL_FAULTS, receivers=[rig], comment="controller.Fault bits"),
                sig("limiter", 24, 8, maximum=_LIMITER_ALL, receivers=[rig], comment="controller.Limiter bits"),
                sig("speed", 32, 16, scale=0.01, minimum=0.0, maximum=SPEED_MAX_KN, unit="kn", receivers=[rig],
                    comment="speed through water used by the controller"),
                sig("alive", 48, 4, receivers=[rig], comment=alive_c),
                sig("crc", 56, 8, receivers=[rig], comment=crc_c),
            ],
            senders=[ctl], cycle_time=100, comment="controller status, controller to rig and loggers", strict=True,
        ),
    ]
    for node_name, node_id in ((ctl, ids.controller_node), (rig, ids.rig_node)):
        other = rig if node_name == ctl else ctl
        messages.append(
            Message(
                ids.heartbeat_base + node_id, f"HEARTBEAT_{node_name}", 2,
                [
                    sig("state", 0, 8, maximum=_NODE_STATE_MAX, choices=node_choices, receivers=[other],
                        comment="node state"),
                    sig("counter", 8, 8, receivers=[other], comment="free-running counter, +1 mod 256"),
                ],
                senders=[node_name], cycle_time=1000, comment=f"heartbeat of node {node_id}", strict=True,
            )
        )
    return Database(messages=messages, nodes=[Node(ctl), Node(rig)], version="finloop-1", strict=True)


def export_dbc(path, ids: CanIds = DEFAULT_IDS) -> str:
    """Write the catalogue as a DBC file to ``path`` and return its text."""
    text = build_database(ids).as_dbc_string()
    with open(path, "w", encoding="ascii", newline="") as fh:
        fh.write(text)
    return text
