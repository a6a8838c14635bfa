"""Serial sensor codec: NMEA 0183 checksum on published sentences, XDR / VHW decoding, the binary
motion frame (CRC-16 against the published catalogue) and the streaming parser (chunking
invariance, garbage, resynchronisation, order and wraparound, bounded buffer)."""

from __future__ import annotations

import math
import random
import struct

import pytest
from hypothesis import given
from hypothesis import strategies as st

from hil.catalogue import Reject
from hil.serial_codec import (
    MOTION_FRAME_LEN,
    NMEA_MAX_LEN,
    MotionFlags,
    MotionFrame,
    Reading,
    SensorStreamParser,
    Sentence,
    crc16_ibm_3740,
    decode_motion_frame,
    decode_sentence,
    decode_vhw,
    decode_xdr,
    encode_motion_frame,
    format_sentence,
    format_vhw,
    format_xdr_roll,
    nmea_checksum,
    parse_sentence,
)

D = math.pi / 180.0
KN = 1852.0 / 3600.0  # international nautical mile 1852 m (IHC 1929)

# ---- NMEA checksum on published sentences -------------------------------------------------------

PUBLISHED = [
    # the GGA example reproduced in most NMEA primers (D. DePriest, "NMEA data", gpsinformation.org;
    # also on many course pages); checksum as printed there
    "$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47",
    # NOAA NCEI archive accession 0086548, format-spd.txt, example speed-log record
    "$VDVLW,47702.775,N,46487.665,N*50",
    # NOAA PSL, PISTON 2019 cruise raw GPS log gps01925920_raw.txt (heading sentence)
    "$GPHDT,228.02,T*0F",
    "$GPVTG,262.13,T,265.08,M,1.31,N,2.43,K,D*2D",
    # XDR example with PITCH and ROLL quadruplets as printed in the docs of an open-source Rust
    # NMEA 0183 parser (weather-station style sentence)
    "$WIXDR,A,+02.9,D,PITCH,A,+00.7,D,ROLL*07",
    # XDR with five quadruplets, from the test table of an open-source Go NMEA parser
    "$HCXDR,A,171,D,PITCH,A,-37,D,ROLL,G,367,,MAGX,G,2420,,MAGY,G,-8984,,MAGZ*41",
]


@pytest.mark.parametrize("line", PUBLISHED)
def test_nmea_checksum_matches_published_sentences(line):
    body, hh = line[1:].split("*")
    assert nmea_checksum(body) == hh
    s = parse_sentence((line + "\r\n").encode())
    assert isinstance(s, Sentence)
    assert s.talker + s.type == body.split(",")[0]


def test_parse_sentence_splits_fields_and_keeps_empty_ones():
    s = parse_sentence(b"$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47\r\n")
    assert s == Sentence("GP", "GGA", ("123519", "4807.038", "N", "01131.000", "E", "1", "08", "0.9",
                                        "545.4", "M", "46.9", "M", "", ""))


@pytest.mark.parametrize(
    "line, reason",
    [
        (b"$GPHDT,228.02,T*0E\r\n", "checksum"),
        (b"$GPHDT,228.02,T\r\n", "checksum_missing"),
        (b"$GPHDT,228.02,T*0\r\n", "checksum_missing"),
        (b"$GPHDT,228.02,T*G0\r\n", "checksum_missing"),
        (b"GPHDT,228.02,T*0F\r\n", "start"),
        (b"$GPHDT,228.02,\x01T*0F\r\n", "chars"),
        (b"$GPHDT,228.02,\xb0T*0F\r\n", "chars"),
        (b"$" + b"A" * 78 + b"*00\r\n", "too_long"),  # 84 characters
        (b"$GPHD,1*" + nmea_checksum("GPHD,1").encode() + b"\r\n", "address"),
        (b"$gphdt,1*" + nmea_checksum("gphdt,1").encode() + b"\r\n", "address"),
        ("$GPHDT,228.02,T*0F", "type"),
    ],
)
def test_parse_sentence_rejects_with_stable_reasons(line, reason):
    assert parse_sentence(line) == Reject(reason)


def test_parse_sentence_accepts_lowercase_hex_and_bare_lf():
    assert isinstance(parse_sentence(b"$GPHDT,74.20,T*34\n"), Sentence)  # NOAA PSL ATOMIC 2020 log
    assert isinstance(parse_sentence(b"$GPVTG,262.13,T,265.08,M,1.31,N,2.43,K,D*2d\r\n"), Sentence)


def test_format_sentence_builds_checksum_and_crlf_and_refuses_bad_input():
    line = format_sentence("GP", "HDT", ["228.02", "T"])
    assert line == b"$GPHDT,228.02,T*0F\r\n"  # NOAA PSL log sentence above
    with pytest.raises(ValueError, match="field"):
        format_sentence("YX", "XDR", ["A", "1*2", "D", "ROLL"])
    with pytest.raises(ValueError, match="talker"):
        format_sentence("Y", "XDR", [])
    with pytest.raises(ValueError, match="longer than 82"):
        format_sentence("YX", "XDR", ["1" * 80])
    assert len(format_sentence("YX", "XDR", ["1" * (NMEA_MAX_LEN - 12)])) == NMEA_MAX_LEN


# ---- XDR / VHW ----------------------------------------------------------------------------------


def _s(body: str) -> Sentence:
    s = parse_sentence(f"${body}*{nmea_checksum(body)}\r\n".encode())
    assert isinstance(s, Sentence)
    return s


def test_xdr_roll_from_published_sentences_ignores_other_quadruplets():
    # values read off the published sentences above (degrees → rad)
    assert decode_sentence(parse_sentence(PUBLISHED[4].encode())) == [("roll", 0.7 * D)]
    assert decode_sentence(parse_sentence(PUBLISHED[5].encode())) == [("roll", -37 * D)]


def test_xdr_roll_and_roll_rate_our_convention():
    # brief example $YXXDR,A,-2.35,D,ROLL + our ROLLRATE quadruplet (type G, unit empty, deg/s)
    got = decode_xdr(_s("YXXDR,A,-2.35,D,ROLL,G,1.5,,ROLLRATE"))
    assert got == [("roll", -2.35 * D), ("roll_rate", 1.5 * D)]
    assert decode_xdr(_s("YXXDR,G,-0.25,,ROLLRATE")) == [("roll_rate", -0.25 * D)]


@pytest.mark.parametrize(
    "body, reason",
    [
        ("YXXDR,A,-2.35,D", "missing_field"),
        ("YXXDR,A,,D,ROLL", "missing_field"),
        ("YXXDR,A,abc,D,ROLL", "bad_number"),
        ("YXXDR,A,1e1,D,ROLL", "bad_number"),
        ("YXXDR,A,nan,D,ROLL", "bad_number"),
        ("YXXDR,A,inf,D,ROLL", "bad_number"),
        ("YXXDR,A,1_0,D,ROLL", "bad_number"),
        ("YXXDR,A, 1,D,ROLL", "bad_number"),
        ("YXXDR,A,1.0,R,ROLL", "unit"),
        ("YXXDR,G,1.0,D,ROLL", "unit"),
        ("YXXDR,A,1.0,D,ROLLRATE", "unit"),
        ("YXXDR,A,180.1,D,ROLL", "range"),
        ("YXXDR,G,600,,ROLLRATE", "range"),
        ("YXXDR,A,1.0,D,PITCH", "no_data"),
        ("VWVHW,,T,,M,,N,,K", "missing_field"),
        ("VWVHW,,T,,M,5.0,N", "missing_field"),
        ("VWVHW,,T,,M,5.0,N,9.26,K,X", "extra_field"),
        ("VWVHW,,T,,M,5.0,K,9.26,K", "unit"),
        ("VWVHW,,T,,M,5.0,N,9.26,N", "unit"),
        ("VWVHW,10,M,,M,5.0,N,9.26,K", "unit"),
        ("VWVHW,,T,,M,5,0,N,9.26,K", "extra_field"),
        ("VWVHW,,T,,M,five,N,,K", "bad_number"),
        ("VWVHW,,T,,M,101,N,,K", "range"),
        ("GPHDT,228.02,T", "unknown"),
        ("PABCD,1,2", "unknown"),
    ],
)
def test_sentence_decoding_rejects_with_stable_reasons(body, reason):
    assert decode_sentence(_s(body)) == Reject(reason)


def test_vhw_uses_knots_then_falls_back_to_kmh():
    # 1 kn = 1852/3600 m/s, 1 km/h = 1000/3600 m/s (SI definitions)
    assert decode_vhw(_s("VWVHW,045.0,T,030.0,M,6.5,N,12.0,K")) == [("speed", 6.5 * KN)]
    assert decode_vhw(_s("VWVHW,,T,,M,,N,12.0,K")) == [("speed", pytest.approx(12.0 / 3.6))]
    assert decode_vhw(_s("VWVHW,,,,,3.1,N,,")) == [("speed", 3.1 * KN)]


@given(st.floats(-180 * D, 180 * D), st.one_of(st.none(), st.floats(-573 * D, 573 * D)))
def test_xdr_format_parse_round_trip_within_half_a_thousandth_degree(roll, rate):
    line = format_xdr_roll(roll, rate)
    assert len(line) <= NMEA_MAX_LEN and line.endswith(b"\r\n")
    got = dict(decode_sentence(parse_sentence(line)))
    assert abs(got["roll"] - roll) <= 0.0005 * D + 1e-15
    if rate is None:
        assert "roll_rate" not in got
    else:
        assert abs(got["roll_rate"] - rate) <= 0.0005 * D + 1e-15


@given(st.floats(-100 * KN, 100 * KN))
def test_vhw_format_parse_round_trip_within_half_a_hundredth_knot(speed):
    line = format_vhw(speed)
    (kind, v), = decode_sentence(parse_sentence(line))
    assert kind == "speed" and abs(v - speed) <= 0.005 * KN + 1e-12


def test_formatters_refuse_non_finite_and_out_of_range():
    for bad in (math.nan, math.inf):
        with pytest.raises(ValueError):
            format_xdr_roll(bad)
        with pytest.raises(ValueError):
            format_xdr_roll(0.0, bad)
        with pytest.raises(ValueError):
            format_vhw(bad)
    with pytest.raises(ValueError, match="beyond"):
        format_xdr_roll(181 * D)
    with pytest.raises(ValueError, match="beyond"):
        format_vhw(101 * KN)


# ---- binary motion frame ------------------------------------------------------------------------


def test_crc16_check_value_matches_the_crc_catalogue():
    # Greg Cook, "Catalogue of parametrised CRC algorithms", entry CRC-16/IBM-3740
    # (alias CRC-16/CCITT-FALSE, CRC-16/AUTOSAR): poly 0x1021 init 0xffff refin/refout false
    # xorout 0 check=0x29b1
    assert crc16_ibm_3740(b"123456789") == 0x29B1


@pytest.mark.parametrize(
    "data, crc",
    [
        # codewords of the same entry, from AUTOSAR Classic Platform R21-11, Specification of CRC
        # Routines, §7.2.2.1
        ("00000000", 0x84C0),
        ("F20183", 0xD374),
        ("0FAA0055", 0x2023),
        ("00FF5511", 0xB8F9),
        ("332255AABBCCDDEEFF", 0xF53F),
        ("926B55", 0x0745),
        ("FFFFFFFF", 0x1D0F),
    ],
)
def test_crc16_matches_published_codewords(data, crc):
    assert crc16_ibm_3740(bytes.fromhex(data)) == crc


def test_motion_frame_layout_by_hand():
    f = encode_motion_frame(0x1234, 0x01020304, 0.1, -0.2, MotionFlags.ROLL_VALID | MotionFlags.RATE_VALID)
    assert len(f) == MOTION_FRAME_LEN == 21
    # sync, length 16, type 1, seq LE, time LE, roll 100000 µrad, rate -200000 µrad/s, flags 3
    assert f[:19] == bytes.fromhex("a55a" "10" "01" "3412" "04030201" "a0860100" "c0f2fcff" "03")
    assert f[19:] == struct.pack("<H", crc16_ibm_3740(f[2:19]))
    assert decode_motion_frame(f) == MotionFrame(0x1234, 0x01020304, 0.1, -0.2, 3)


@given(st.integers(0, 2**20), st.integers(0, 2**40), st.floats(-math.pi, math.pi), st.floats(-10, 10),
       st.integers(0, 7))
def test_motion_frame_round_trip(seq, t, roll, rate, flags):
    f = decode_motion_frame(encode_motion_frame(seq, t, roll, rate, flags))
    assert (f.seq, f.t_us, f.flags) == (seq % 2**16, t % 2**32, flags)
    assert abs(f.roll - roll) <= 0.5e-6 + 1e-15 and abs(f.rate - rate) <= 0.5e-6 + 1e-15


def _reseal(body: bytes) -> bytes:
    return b"\xa5\x5a" + body + struct.pack("<H", crc16_ibm_3740(body))


def test_motion_frame_rejects():
    good = encode_motion_frame(1, 2, 0.0, 0.0, 1)
    for i in range(2, 21):  # any corrupted byte after the sync
        bad = bytearray(good)
        bad[i] ^= 0x40
        assert isinstance(decode_motion_frame(bytes(bad)), Reject)
    bad = bytearray(good)
    bad[10] ^= 1
    assert decode_motion_frame(bytes(bad)) == Reject("crc")
    body = bytearray(good[2:19])
    body[16] = 0x08  # reserved flag bit
    assert decode_motion_frame(_reseal(bytes(body))) == Reject("reserved")
    body = bytearray(good[2:19])
    body[1] = 0x02  # frame type we do not read, CRC good
    assert decode_motion_frame(_reseal(bytes(body))) == Reject("unknown")
    body = bytearray(good[2:19])
    body[8:12] = struct.pack("<i", 3_141_594)  # roll beyond π
    assert decode_motion_frame(_reseal(bytes(body))) == Reject("range")
    assert decode_motion_frame(good[:-1]) == Reject("length")
    assert decode_motion_frame(b"\x00" + good[1:]) == Reject("start")
    with pytest.raises(ValueError):
        encode_motion_frame(0, 0, 4.0, 0.0, 0)
    with pytest.raises(ValueError):
        encode_motion_frame(0, 0, 0.0, math.nan, 0)
    with pytest.raises(ValueError):
        encode_motion_frame(0, 0, 0.0, 0.0, 8)


# ---- streaming parser ---------------------------------------------------------------------------


def _stream() -> bytes:
    parts = [
        b"\x00\xffnoise",
        format_xdr_roll(1.5 * D, -0.5 * D),
        encode_motion_frame(10, 1_000_000, 0.02, 0.01, 3),
        b"$GPHDT,228.02,T*0F\r\n",  # valid sentence we do not read -> "unknown"
        b"\xa5\x5a\x10garbage-with-a-fake-sync!",  # fake sync: CRC fails, rescanned byte by byte
        encode_motion_frame(11, 1_020_000, 0.03, 0.02, 7),  # aligning -> readings invalid
        format_vhw(6.0),
        b"$YXXDR,A,1.0,D,ROLL*00\r\n",  # bad checksum
        b"$YXXDR,A,2.0,D,RO",  # cut by a new sentence -> truncated
        format_xdr_roll(-0.5 * D),
        encode_motion_frame(11, 1_040_000, 0.04, 0.0, 3),  # sequence repeated -> seq_back
        encode_motion_frame(12, 1_010_000, 0.04, 0.0, 3),  # sensor time going back -> time_back
        encode_motion_frame(12, 1_060_000, 0.05, 0.0, 3),
        b"\xa5",  # lone A5 then text
        format_vhw(6.5),
    ]
    return b"".join(parts)


def _strip(readings):
    return [r._replace(t_rx=0.0) for r in readings]


def _counts(p):
    return (p.counters.as_dict(), p.garbage_bytes, p.resyncs, p.seq_lost, p.buffered)


def test_stream_parser_reads_a_mixed_stream_with_garbage_and_counts_rejects():
    p = SensorStreamParser()
    out = p.feed(_stream(), 5.0)
    assert [(r.kind, r.valid) for r in out] == [
        ("roll", True), ("roll_rate", True),
        ("roll", True), ("roll_rate", True),
        ("roll", False), ("roll_rate", False),
        ("speed", True),
        ("roll", True),
        ("roll", True), ("roll_rate", True),
        ("speed", True),
    ]
    assert out[0].value == pytest.approx(1.5 * D) and out[0].t_sensor is None and out[0].t_rx == 5.0
    assert out[2].value == 0.02 and out[2].t_sensor == 1.0
    assert out[4].t_sensor == pytest.approx(1.02)
    assert out[6].value == pytest.approx(6.0, abs=0.005 * KN)
    c = p.counters.as_dict()
    assert c["accepted"] == 7
    assert c["rejected"] == {"unknown": 1, "checksum": 1, "truncated": 1, "seq_back": 1, "time_back": 1, "crc": 1}
    # skipped bytes, hand-counted: 7 leading noise; after the fake sync's A5 (counted as "crc"):
    # 5A, 10 and 25 characters = 27; the lone A5 = 1
    assert p.garbage_bytes == 7 + 27 + 1
    assert p.buffered == 0


def test_stream_parser_split_at_every_byte_boundary_gives_the_same_result():
    data = _stream()
    ref = SensorStreamParser()
    want = _strip(ref.feed(data, 0.0))
    for cut in range(len(data) + 1):
        p = SensorStreamParser()
        got = p.feed(data[:cut], 0.0) + p.feed(data[cut:], 0.0)
        assert _strip(got) == want, cut
        assert _counts(p) == _counts(ref), cut


@given(st.lists(st.integers(1, 40), max_size=60))
def test_stream_parser_any_chunking_gives_the_same_result(sizes):
    data = _stream()
    ref = SensorStreamParser()
    want = _strip(ref.feed(data, 0.0))
    p = SensorStreamParser()
    got, i = [], 0
    for n in sizes:
        got += p.feed(data[i:i + n], 0.0)
        i += n
    got += p.feed(data[i:], 0.0)
    assert _strip(got) == want
    assert _counts(p) == _counts(ref)


def test_stream_parser_one_byte_at_a_time_stamps_the_completing_chunk_time():
    line = format_vhw(3.0)
    p = SensorStreamParser()
    out = []
    for k in range(len(line)):
        out += p.feed(line[k:k + 1], float(k))
    assert len(out) == 1 and out[0].t_rx == float(len(line) - 1)


def test_stream_parser_buffer_stays_bounded_without_delimiters():
    p = SensorStreamParser()
    rng = random.Random(7)
    for _ in range(200):  # 200 kB of printable text with '$' but never a line end
        p.feed(bytes(rng.choice(b"$ABC,123.*") for _ in range(1000)), 0.0)
        assert p.buffered < NMEA_MAX_LEN
    p2 = SensorStreamParser()
    p2.feed(b"$" + b"A" * 10_000, 0.0)
    assert p2.buffered < NMEA_MAX_LEN and p2.counters.rejected == {"too_long": 1}
    p3 = SensorStreamParser()
    p3.feed(b"\xa5\x5a\x40" + b"\x00" * 30, 0.0)  # waits for a 69-byte frame at most
    assert p3.buffered == 33
    p3.feed(b"\x00" * 40, 0.0)
    assert p3.buffered < 3 and p3.counters.rejected == {"crc": 1}


def test_stream_parser_accepts_sequence_and_time_wraparound():
    p = SensorStreamParser()
    t0 = 2**32 - 30_000
    frames = [encode_motion_frame(65534 + k, t0 + 20_000 * k, 0.0, 0.0, 3) for k in range(4)]
    out = p.feed(b"".join(frames), 0.0)
    # uint16 seq 65534, 65535, 0, 1 and uint32 time wrapping between frames 1 and 2 are steps forward
    assert p.counters.accepted == 4 and p.counters.rejected == {}
    ts = [r.t_sensor for r in out if r.kind == "roll"]
    assert ts == pytest.approx([t0 * 1e-6 + 0.02 * k for k in range(4)])  # unwrapped, monotonic


def test_stream_parser_counts_lost_frames_and_resyncs_after_a_sensor_restart():
    p = SensorStreamParser(resync_after=3)
    p.feed(encode_motion_frame(100, 5_000_000, 0.0, 0.0, 3), 0.0)
    p.feed(encode_motion_frame(103, 5_060_000, 0.0, 0.0, 3), 0.0)  # 2 frames lost
    assert p.seq_lost == 2
    out = []
    for k in range(5):  # sensor restarted: seq and time back near zero
        out += p.feed(encode_motion_frame(k, 1000 * (k + 1), 0.0, 0.0, 3), 0.0)
    # first three rejected (seq_back), the fourth becomes the new reference, the fifth follows it
    assert p.counters.rejected == {"seq_back": 3}
    assert p.resyncs == 1 and len(out) == 4
    assert out[0].t_sensor == pytest.approx(0.004) and out[2].t_sensor == pytest.approx(0.005)


@given(st.binary(max_size=300), st.lists(st.integers(1, 50), max_size=10))
def test_stream_parser_never_raises_on_random_bytes(data, sizes):
    p = SensorStreamParser()
    i = 0
    out = []
    for n in sizes:
        out += p.feed(data[i:i + n], 0.0)
        i += n
    out += p.feed(data[i:], 0.0)
    assert all(isinstance(r, Reading) for r in out)
    assert p.buffered < NMEA_MAX_LEN
    assert p.feed("not bytes", 0.0) == [] and p.counters.rejected.get("type") == 1


@given(st.binary(max_size=100))
def test_stateless_decoders_never_raise_on_random_bytes(data):
    for r in (parse_sentence(data), decode_motion_frame(data), decode_motion_frame(b"\xa5\x5a" + data)):
        assert isinstance(r, (Reject, Sentence, MotionFrame))
    s = parse_sentence(b"$YXXDR," + data + b"*00")
    if isinstance(s, Sentence):
        assert isinstance(decode_sentence(s), (Reject, list))
