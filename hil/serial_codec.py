"""Serial sensor input: NMEA 0183 sentences (XDR roll / roll rate, VHW speed) and our binary
motion frame, with a streaming parser that resynchronises and bounds its buffer.

Everything here is pure: no I/O and no clock (the caller passes the receive time ``t_rx_s``).
Decoders never raise; malformed input gives a :class:`~hil.catalogue.Reject` with a short stable
reason code (:data:`SERIAL_REJECT_REASONS`). The formats are documented in ``docs/MESSAGES.md``.

NMEA 0183 (IEC 61162-1 framing)
    ``$TTSSS,f1,f2,...*hh<CR><LF>``: the checksum ``hh`` is the XOR of every character between
    ``$`` and ``*``, as two hex digits; at most 82 characters including ``$`` and CR LF. The
    checksum is required here. We read:

    - XDR quadruplets ``type,value,unit,name``: ``A,x.x,D,ROLL`` = roll angle in degrees
      (type A = angular displacement, unit D = degrees); **our convention** for roll rate (no
      standard XDR type exists): ``G,x.x,,ROLLRATE`` = roll rate in deg/s (type G = generic,
      unit field empty). Other quadruplets (PITCH, ...) are ignored.
    - VHW ``hdgT,T,hdgM,M,kn,N,kmh,K``: speed through water from the knots field, else from the
      km/h field; both empty is a reject.

Binary motion frame (ours, little-endian, 21 bytes)::

    0  2  sync 0xA5 0x5A
    2  1  length of type..flags = 16
    3  1  frame type 0x01 (motion)
    4  2  sequence uint16 (+1 per frame, wraps)
    6  4  sensor time uint32 µs (wraps after 2^32 µs ≈ 71.6 min)
    10 4  roll int32 µrad          (|roll| <= 3 141 593)
    14 4  roll rate int32 µrad/s   (|rate| <= 10 000 000)
    18 1  flags: bit0 roll valid, bit1 rate valid, bit2 aligning; bits 3..7 reserved (0)
    19 2  CRC-16/IBM-3740 (alias CCITT-FALSE) over bytes 2..18, stored little-endian

Sign: roll > 0 = starboard side down (DESIGN.md §2).
"""

from __future__ import annotations

import binascii
import math
import re
import struct
from typing import Any, NamedTuple, Sequence

from hil.catalogue import FrameCounters, Reject, round_half_away

__all__ = [
    "Sentence",
    "Reading",
    "MotionFrame",
    "MotionFlags",
    "SERIAL_REJECT_REASONS",
    "nmea_checksum",
    "format_sentence",
    "parse_sentence",
    "decode_xdr",
    "decode_vhw",
    "decode_sentence",
    "format_xdr_roll",
    "format_vhw",
    "crc16_ibm_3740",
    "encode_motion_frame",
    "decode_motion_frame",
    "SensorStreamParser",
    "NMEA_MAX_LEN",
    "MOTION_FRAME_LEN",
]

NMEA_MAX_LEN = 82
"""Longest NMEA 0183 sentence: 82 characters including ``$`` and CR LF."""

_KNOT = 1852.0 / 3600.0  # m/s
_KMH = 1000.0 / 3600.0  # m/s
_DEG = math.pi / 180.0

ROLL_MAX_DEG = 180.0
RATE_MAX_DEG_S = 573.0  # ≈ 10 rad/s
SPEED_MAX_KN = 100.0

SERIAL_REJECT_REASONS: dict[str, str] = {
    "type": "input is not bytes-like",
    "start": "line does not start with '$'",
    "chars": "character outside printable ASCII",
    "too_long": "sentence longer than 82 characters (or no line end within 82)",
    "truncated": "a new '$' or sync byte came before the line end",
    "checksum_missing": "no '*hh' checksum",
    "checksum": "checksum mismatch (NMEA) ",
    "address": "malformed talker / sentence formatter",
    "unknown": "sentence type or binary frame type we do not read",
    "missing_field": "a required field is empty or absent",
    "extra_field": "more fields than the sentence has",
    "bad_number": "a numeric field does not parse as a finite decimal number",
    "unit": "wrong unit / type letter",
    "range": "value outside its plausible range",
    "no_data": "XDR sentence without a ROLL or ROLLRATE quadruplet",
    "length": "binary frame length byte invalid",
    "crc": "CRC-16 mismatch (binary frame)",
    "reserved": "reserved flag bits set",
    "seq_back": "sequence number repeated or going back",
    "time_back": "sensor time not advancing",
}
"""Reject codes of this module (see also :data:`hil.catalogue.REJECT_REASONS`)."""

_R = {k: Reject(k) for k in SERIAL_REJECT_REASONS}

# ---- NMEA 0183 ----------------------------------------------------------------------------------


class Sentence(NamedTuple):
    talker: str  # two characters, e.g. "YX"; for proprietary sentences "P" + first letter
    type: str  # three characters, e.g. "XDR"
    fields: tuple[str, ...]


class Reading(NamedTuple):
    kind: str  # "roll" | "roll_rate" | "speed"
    value: float  # SI: rad, rad/s, m/s
    t_rx: float  # s, receive time passed by the caller with the chunk that completed the item
    t_sensor: float | None  # s, sensor time (binary frame, unwrapped) or None
    valid: bool


def nmea_checksum(body: str) -> str:
    """NMEA 0183 checksum of ``body`` (the characters between ``$`` and ``*``): two hex digits."""
    c = 0
    for ch in body:
        o = ord(ch)
        if o > 0x7F:
            raise ValueError(f"body contains a non-ASCII character {ch!r}")
        c ^= o
    return f"{c:02X}"


_FIELD_FORBIDDEN = re.compile(r"[^\x20-\x7e]|[$*,!\\^~]")
_ADDR = re.compile(r"[A-Z0-9]{5}")


def format_sentence(talker: str, type: str, fields: Sequence[str]) -> bytes:
    """``$<talker><type>,<fields...>*hh\\r\\n`` as ASCII bytes.

    Raises ``ValueError`` for a malformed address, a field holding a reserved character
    (``$ * , ! \\ ^ ~`` or a non-printable one), or a sentence longer than 82 characters.
    """
    addr = f"{talker}{type}"
    if len(talker) != 2 or len(type) != 3 or not _ADDR.fullmatch(addr):
        raise ValueError(f"talker {talker!r} / type {type!r}: need 2 + 3 characters A-Z or 0-9")
    for f in fields:
        if not isinstance(f, str) or _FIELD_FORBIDDEN.search(f):
            raise ValueError(f"field {f!r}: must be a string of printable ASCII without $ * , ! \\ ^ ~")
    body = ",".join((addr, *fields))
    line = f"${body}*{nmea_checksum(body)}\r\n"
    if len(line) > NMEA_MAX_LEN:
        raise ValueError(f"sentence is {len(line)} characters: longer than {NMEA_MAX_LEN}")
    return line.encode("ascii")


def parse_sentence(line: Any) -> Sentence | Reject:
    """Parse one NMEA 0183 sentence (with or without the CR LF / LF ending). Never raises.

    Checks, in order: bytes-like, starts with ``$``, length <= 82 (counting CR LF even when
    absent), printable ASCII, ``*hh`` present (hex digits of either case), checksum, address
    (5 characters A-Z/0-9).
    """
    if not isinstance(line, (bytes, bytearray)):
        if isinstance(line, memoryview):
            line = line.tobytes()
        else:
            return _R["type"]
    if line.endswith(b"\r\n"):
        line = line[:-2]
    elif line.endswith(b"\n"):
        line = line[:-1]
    if not line.startswith(b"$"):
        return _R["start"]
    if len(line) + 2 > NMEA_MAX_LEN:
        return _R["too_long"]
    if not line.isascii():
        return _R["chars"]
    try:
        text = line.decode("ascii")
    except UnicodeDecodeError:  # pragma: no cover - isascii() above
        return _R["chars"]
    if not text.isprintable():
        return _R["chars"]
    star = text.rfind("*")
    if star < 0 or len(text) - star != 3:
        return _R["checksum_missing"]
    body = text[1:star]
    hh = text[star + 1:]
    if not (hh[0] in _HEX and hh[1] in _HEX):
        return _R["checksum_missing"]
    c = 0
    for ch in body:
        c ^= ord(ch)
    if c != int(hh, 16):
        return _R["checksum"]
    parts = body.split(",")
    addr = parts[0]
    if "*" in body or "$" in body or not _ADDR.fullmatch(addr):
        return _R["address"]
    return Sentence(addr[:2], addr[2:], tuple(parts[1:]))


_HEX = frozenset("0123456789ABCDEFabcdef")
_NUMBER = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)")


def _number(s: str) -> float | Reject:
    """Strict NMEA decimal: optional sign, digits, optional fraction (no exponent, nan, inf, _)."""
    if not s:
        return _R["missing_field"]
    if not _NUMBER.fullmatch(s):
        return _R["bad_number"]
    return float(s)


# XDR transducer name → (reading kind, transducer type, unit letter, plausibility limit in deg or deg/s)
_XDR_QUANTITIES = {
    "ROLL": ("roll", "A", "D", ROLL_MAX_DEG),  # angular displacement, degrees (NMEA 0183 XDR)
    "ROLLRATE": ("roll_rate", "G", "", RATE_MAX_DEG_S),  # our convention: generic type, deg/s
}


def decode_xdr(s: Sentence) -> list[tuple[str, float]] | Reject:
    """Roll (rad) and roll rate (rad/s) from an XDR sentence: ``[("roll", φ), ("roll_rate", p)]``.

    Quadruplets ``A,x.x,D,ROLL`` and (our convention) ``G,x.x,,ROLLRATE``; other names are
    ignored. Field count not a multiple of 4 → ``missing_field``; for ROLL / ROLLRATE: empty value
    → ``missing_field``, non-numeric → ``bad_number``, wrong type/unit letter → ``unit``,
    |roll| > 180° or |rate| > 573°/s → ``range``; no ROLL/ROLLRATE at all → ``no_data``.
    """
    f = s.fields
    n = len(f)
    if n == 0 or n % 4:
        return _R["missing_field"]
    out: list[tuple[str, float]] = []
    for i in range(0, n, 4):
        typ, val, unit, name = f[i], f[i + 1], f[i + 2], f[i + 3]
        spec = _XDR_QUANTITIES.get(name)
        if spec is None:
            continue  # other transducers on the same sentence are not ours
        kind, want_typ, want_unit, limit = spec
        if typ != want_typ or unit != want_unit:
            return _R["unit"]
        v = _number(val)
        if type(v) is Reject:
            return v
        if abs(v) > limit:
            return _R["range"]
        out.append((kind, v * _DEG))
    if not out:
        return _R["no_data"]
    return out


def decode_vhw(s: Sentence) -> list[tuple[str, float]] | Reject:
    """Speed through water (m/s) from VHW: ``[("speed", U)]``.

    Knots field (5) used; if empty, the km/h field (7); both empty → ``missing_field``.
    Unit letters must be T, M, N, K where their fields are given (empty allowed when the value
    is empty); |speed| > 100 kn → ``range``. Headings are not used.
    """
    f = s.fields
    if len(f) < 8:
        return _R["missing_field"]
    if len(f) > 8:
        return _R["extra_field"]
    for val, letter, want in ((f[0], f[1], "T"), (f[2], f[3], "M"), (f[4], f[5], "N"), (f[6], f[7], "K")):
        if letter != want and (val or letter):
            return _R["unit"]
    for i in (0, 2):  # headings must at least be numbers when present
        if f[i] and not _NUMBER.fullmatch(f[i]):
            return _R["bad_number"]
    if f[4]:
        v = _number(f[4])
        if type(v) is Reject:
            return v
        kn = v
        ms = v * _KNOT
    elif f[6]:
        v = _number(f[6])
        if type(v) is Reject:
            return v
        kn = v * _KMH / _KNOT
        ms = v * _KMH
    else:
        return _R["missing_field"]
    if abs(kn) > SPEED_MAX_KN:
        return _R["range"]
    return [("speed", ms)]


_SENTENCE_DECODERS = {"XDR": decode_xdr, "VHW": decode_vhw}


def decode_sentence(s: Sentence) -> list[tuple[str, float]] | Reject:
    """Dispatch on the sentence type (XDR, VHW); anything else → ``Reject("unknown")``."""
    fn = _SENTENCE_DECODERS.get(s.type)
    if fn is None or s.talker.startswith("P"):
        return _R["unknown"]
    return fn(s)


def _fmt(x: float, nd: int) -> str:
    s = f"{x:.{nd}f}"
    return "0." + "0" * nd if s == "-0." + "0" * nd else s  # no "-0.000"


def format_xdr_roll(roll: float, rate: float | None = None, talker: str = "YX") -> bytes:
    """XDR sentence with roll (rad → degrees, 3 decimals) and optionally roll rate (rad/s → deg/s,
    3 decimals, our ROLLRATE convention). Raises ``ValueError`` if non-finite or out of range."""
    r = _check_finite("roll", roll) / _DEG
    if abs(r) > ROLL_MAX_DEG:
        raise ValueError(f"roll = {r:.3f} deg: beyond ±{ROLL_MAX_DEG} deg")
    fields = ["A", _fmt(r, 3), "D", "ROLL"]
    if rate is not None:
        p = _check_finite("rate", rate) / _DEG
        if abs(p) > RATE_MAX_DEG_S:
            raise ValueError(f"rate = {p:.3f} deg/s: beyond ±{RATE_MAX_DEG_S} deg/s")
        fields += ["G", _fmt(p, 3), "", "ROLLRATE"]
    return format_sentence(talker, "XDR", fields)


def format_vhw(speed: float, talker: str = "VW") -> bytes:
    """VHW sentence with speed through water (m/s → knots and km/h, 2 decimals), headings empty."""
    v = _check_finite("speed", speed)
    kn = v / _KNOT
    if abs(kn) > SPEED_MAX_KN:
        raise ValueError(f"speed = {kn:.2f} kn: beyond ±{SPEED_MAX_KN} kn")
    return format_sentence(talker, "VHW", ["", "T", "", "M", _fmt(kn, 2), "N", _fmt(v / _KMH, 2), "K"])


def _check_finite(name: str, x: float) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        raise ValueError(f"{name} = {x!r}: not a number") from None
    if not math.isfinite(v):
        raise ValueError(f"{name} = {x!r}: must be finite")
    return v


# ---- binary motion frame ------------------------------------------------------------------------

SYNC = b"\xa5\x5a"
FRAME_TYPE_MOTION = 0x01
MOTION_PAYLOAD_LEN = 16  # type .. flags
MOTION_FRAME_LEN = 2 + 1 + MOTION_PAYLOAD_LEN + 2  # 21
MAX_PAYLOAD_LEN = 64  # the longest length byte the parser waits for (future frame types)
ROLL_MAX_URAD = 3_141_593
RATE_MAX_URAD_S = 10_000_000


class MotionFlags:
    ROLL_VALID = 1
    RATE_VALID = 2
    ALIGNING = 4  # sensor still aligning: readings flagged invalid
    ALL = 7


class MotionFrame(NamedTuple):
    seq: int  # uint16
    t_us: int  # uint32 sensor time, µs
    roll: float  # rad
    rate: float  # rad/s
    flags: int


_S_MOTION_BODY = struct.Struct("<BBHIiiB")  # len, type, seq, t, roll, rate, flags (bytes 2..18)
_S_CRC = struct.Struct("<H")


def crc16_ibm_3740(data: bytes) -> int:
    """CRC-16/IBM-3740 (alias CRC-16/CCITT-FALSE): poly 0x1021, init 0xFFFF, no reflection,
    xorout 0 (check 0x29B1). Uses the standard library's ``binascii.crc_hqx``."""
    return binascii.crc_hqx(data, 0xFFFF)


def encode_motion_frame(seq: int, t_us: int, roll: float, rate: float, flags: int) -> bytes:
    """One 21-byte motion frame. ``seq`` is taken mod 2^16 and ``t_us`` mod 2^32 (so a running
    count may be passed); roll (rad) and rate (rad/s) round half away from zero to µrad(/s).
    Raises ``ValueError`` for non-finite / out-of-range values or unknown flag bits."""
    r = round_half_away(_check_finite("roll", roll) * 1e6)
    p = round_half_away(_check_finite("rate", rate) * 1e6)
    if abs(r) > ROLL_MAX_URAD:
        raise ValueError(f"roll = {roll!r} rad: beyond ±π")
    if abs(p) > RATE_MAX_URAD_S:
        raise ValueError(f"rate = {rate!r} rad/s: beyond ±10 rad/s")
    if not isinstance(flags, int) or not 0 <= flags <= MotionFlags.ALL:
        raise ValueError(f"flags = {flags!r}: unknown bits (allowed 0 .. {MotionFlags.ALL})")
    body = _S_MOTION_BODY.pack(MOTION_PAYLOAD_LEN, FRAME_TYPE_MOTION, seq & 0xFFFF, t_us & 0xFFFFFFFF, r, p, flags)
    return SYNC + body + _S_CRC.pack(binascii.crc_hqx(body, 0xFFFF))


def decode_motion_frame(frame: Any) -> MotionFrame | Reject:
    """Decode one complete binary frame (stateless checks only: sync, length, CRC, type, reserved
    bits, range). Sequence / time order is checked by :class:`SensorStreamParser`."""
    if not isinstance(frame, (bytes, bytearray)):
        if isinstance(frame, memoryview):
            frame = frame.tobytes()
        else:
            return _R["type"]
    if len(frame) < 5 or frame[0:2] != SYNC:
        return _R["start"]
    n = frame[2]
    if n == 0 or n > MAX_PAYLOAD_LEN or len(frame) != n + 5:
        return _R["length"]
    if binascii.crc_hqx(frame[2:3 + n], 0xFFFF) != frame[3 + n] | (frame[4 + n] << 8):
        return _R["crc"]
    if frame[3] != FRAME_TYPE_MOTION:
        return _R["unknown"]
    if n != MOTION_PAYLOAD_LEN:
        return _R["length"]
    _, _, seq, t, r, p, fl = _S_MOTION_BODY.unpack_from(frame, 2)
    if fl & ~MotionFlags.ALL:
        return _R["reserved"]
    if abs(r) > ROLL_MAX_URAD or abs(p) > RATE_MAX_URAD_S:
        return _R["range"]
    return MotionFrame(seq, t, r / 1e6, p / 1e6, fl)


# ---- streaming parser ---------------------------------------------------------------------------


class SensorStreamParser:
    """Incremental parser for a byte stream mixing NMEA sentences and binary motion frames.

    ``feed(data, t_rx_s)`` accepts any chunking (a sentence or frame may be split anywhere) and
    returns the readings completed by this chunk, each stamped with ``t_rx_s``. The result — the
    readings (apart from their ``t_rx``) and every count — does not depend on how the stream is
    cut into chunks.

    Resynchronisation: bytes before a ``$`` or ``0xA5`` are skipped (``garbage_bytes``). An NMEA
    line ends at LF; a ``$`` or ``0xA5`` before the LF ends it early (``truncated``, parsing
    resumes there); no LF within 82 bytes → ``too_long`` (one byte dropped, scan resumes). A
    binary candidate (A5 5A) with a bad length byte or CRC drops one byte and rescans, so a
    real frame hidden behind garbage is still found. The buffer therefore never holds more than
    82 bytes between calls.

    Order of binary frames (serial-number arithmetic, RFC 1982 style): a frame is accepted when
    ``(seq - last_seq) mod 2^16`` is in 1 .. 32767 and ``(t_us - last_t_us) mod 2^32`` is in
    1 .. 2^31 - 1; so the uint16 / uint32 wraparound is a normal step forward. Otherwise it is
    rejected (``seq_back`` / ``time_back``) and does not move the reference. After
    ``resync_after`` consecutive order rejects the next such frame is taken as the new
    reference (a sensor restart; counted in ``resyncs``). Lost frames (sequence jumps > 1) are
    counted in ``seq_lost``. ``t_sensor`` of a binary reading is the sensor time in seconds,
    unwrapped across uint32 wraps (restarting from the raw value after a resync).
    """

    def __init__(self, resync_after: int = 5) -> None:
        if type(resync_after) is not int or resync_after < 1:
            raise ValueError(f"resync_after = {resync_after!r}: must be an integer >= 1")
        self.resync_after = resync_after
        self.counters = FrameCounters()  # accepted sentences/frames, rejects by reason
        self.garbage_bytes = 0
        self.resyncs = 0
        self.seq_lost = 0
        self._buf = bytearray()
        self._last_seq: int | None = None
        self._last_t: int | None = None
        self._t_unwrapped = 0
        self._order_rejects = 0

    @property
    def buffered(self) -> int:
        """Bytes held while waiting for the rest of a sentence or frame (always <= 82)."""
        return len(self._buf)

    def reset(self) -> None:
        """Drop buffered bytes and the sequence/time reference (counts are kept)."""
        self._buf.clear()
        self._last_seq = self._last_t = None
        self._order_rejects = 0

    def feed(self, data: bytes, t_rx_s: float) -> list[Reading]:
        out: list[Reading] = []
        if not isinstance(data, (bytes, bytearray, memoryview)):
            self.counters.reject("type")
            return out
        buf = self._buf
        buf += data
        pos = 0
        n = len(buf)
        while pos < n:
            b = buf[pos]
            if b == 0x24:  # '$'
                step = self._nmea(buf, pos, n, t_rx_s, out)
            elif b == 0xA5:
                step = self._binary(buf, pos, n, t_rx_s, out)
            else:
                i = buf.find(b"$", pos)
                j = buf.find(b"\xa5", pos)
                nxt = n if i < 0 and j < 0 else (j if i < 0 else (i if j < 0 else min(i, j)))
                self.garbage_bytes += nxt - pos
                step = nxt - pos
            if step == 0:  # need more bytes
                break
            pos += step
        if pos:
            del buf[:pos]
        return out

    # -- NMEA: returns bytes consumed (0 = wait)
    def _nmea(self, buf: bytearray, pos: int, n: int, t_rx: float, out: list[Reading]) -> int:
        end = min(n, pos + NMEA_MAX_LEN)  # window: a full-length line incl. LF ends at pos+81
        k = pos + 1
        while k < end:
            c = buf[k]
            if c == 0x0A:
                self._line(bytes(buf[pos:k + 1]), t_rx, out)
                return k + 1 - pos
            if c == 0x24 or c == 0xA5:
                self.counters.reject("truncated")
                return k - pos
            k += 1
        if end == pos + NMEA_MAX_LEN:
            self.counters.reject("too_long")
            return 1
        return 0

    def _line(self, line: bytes, t_rx: float, out: list[Reading]) -> None:
        s = parse_sentence(line)
        if type(s) is Reject:
            self.counters.count(s)
            return
        vals = decode_sentence(s)
        if type(vals) is Reject:
            self.counters.count(vals)
            return
        self.counters.accepted += 1
        for kind, v in vals:
            out.append(Reading(kind, v, t_rx, None, True))

    # -- binary: returns bytes consumed (0 = wait)
    def _binary(self, buf: bytearray, pos: int, n: int, t_rx: float, out: list[Reading]) -> int:
        if n - pos < 2:
            return 0
        if buf[pos + 1] != 0x5A:
            self.garbage_bytes += 1
            return 1
        if n - pos < 3:
            return 0
        ln = buf[pos + 2]
        if ln == 0 or ln > MAX_PAYLOAD_LEN:
            self.counters.reject("length")
            return 1
        total = ln + 5
        if n - pos < total:
            return 0
        f = decode_motion_frame(bytes(buf[pos:pos + total]))
        if type(f) is Reject:
            self.counters.count(f)
            # a CRC failure may be garbage that happened to contain A5 5A: rescan from the next
            # byte; a frame with a good CRC (unknown type, wrong length for its type, reserved
            # bits, range) is consumed whole
            return 1 if f.reason == "crc" else total
        if not self._in_order(f):
            return total
        self.counters.accepted += 1
        ts = self._t_unwrapped * 1e-6
        fl = f.flags
        ok = not fl & MotionFlags.ALIGNING
        out.append(Reading("roll", f.roll, t_rx, ts, ok and bool(fl & MotionFlags.ROLL_VALID)))
        out.append(Reading("roll_rate", f.rate, t_rx, ts, ok and bool(fl & MotionFlags.RATE_VALID)))
        return total

    def _in_order(self, f: MotionFrame) -> bool:
        if self._last_seq is not None:
            ds = (f.seq - self._last_seq) & 0xFFFF
            dt = (f.t_us - self._last_t) & 0xFFFFFFFF
            reason = "seq_back" if not 0 < ds < 0x8000 else ("time_back" if not 0 < dt < 0x80000000 else None)
            if reason is not None:
                self._order_rejects += 1
                if self._order_rejects <= self.resync_after:
                    self.counters.reject(reason)
                    return False
                self.resyncs += 1
                self._last_seq = None  # take this frame as the new reference
            else:
                self.seq_lost += ds - 1
                self._t_unwrapped += dt
        if self._last_seq is None:
            self._t_unwrapped = f.t_us
        self._last_seq = f.seq
        self._last_t = f.t_us
        self._order_rejects = 0
        return True
