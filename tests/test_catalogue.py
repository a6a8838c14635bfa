"""CAN catalogue: CRC-8 against the published catalogue, struct packers byte-identical to cantools
(the reference library), round trips, rounding and saturation, rejects, IDs, DBC export and the
alive-counter monitor."""

from __future__ import annotations

import math
from decimal import ROUND_HALF_UP, Decimal
from pathlib import Path

import can
import pytest
from hypothesis import given
from hypothesis import strategies as st

from controller import ALL_FAULTS, Fault, Limiter, Mode
from hil.catalogue import (
    DEFAULT_IDS,
    AliveMonitor,
    CanIds,
    ControllerStatus,
    FinDemand,
    FinFeedback,
    FinStatus,
    FrameCounters,
    Heartbeat,
    NodeState,
    Reject,
    build_database,
    crc8_sae_j1850,
    decode_can_message,
    decode_controller_status,
    decode_fin_demand,
    decode_fin_feedback,
    decode_frame,
    decode_heartbeat,
    encode_controller_status,
    encode_fin_demand,
    encode_fin_feedback,
    encode_heartbeat,
    export_dbc,
    frame_crc,
    round_half_away,
)

ROOT = Path(__file__).resolve().parents[1]
D = math.pi / 180.0
KN = 1852.0 / 3600.0
RAW = 0.01 * D  # one angle step, rad

_DB = None


def db():
    global _DB
    if _DB is None:
        _DB = build_database()
    return _DB


# ---- CRC-8/SAE-J1850 ----------------------------------------------------------------------------


def test_crc8_check_value_matches_the_crc_catalogue():
    # Greg Cook, "Catalogue of parametrised CRC algorithms" (reveng.sourceforge.io/crc-catalogue),
    # entry CRC-8/SAE-J1850: width=8 poly=0x1d init=0xff refin=false refout=false xorout=0xff
    # check=0x4b (CRC of ASCII "123456789").
    assert crc8_sae_j1850(b"123456789") == 0x4B


@pytest.mark.parametrize(
    "data, crc",
    [
        # codewords listed in the same catalogue entry, from AUTOSAR Classic Platform R21-11,
        # Specification of CRC Routines, §7.2.1.1 (same as SAE J1850 (1994) Table 1)
        ("00000000", 0x59),
        ("F20183", 0x37),
        ("0FAA0055", 0x79),
        ("00FF5511", 0xB8),
        ("332255AABBCCDDEEFF", 0xCB),
        ("926B55", 0x8C),
        ("FFFFFFFF", 0x74),
    ],
)
def test_crc8_matches_published_codewords(data, crc):
    assert crc8_sae_j1850(bytes.fromhex(data)) == crc


@given(st.integers(0, 0x7FF), st.binary(min_size=7, max_size=7))
def test_frame_crc_is_crc8_over_id_low_high_then_data(fid, data7):
    # our documented definition (docs/MESSAGES.md): CRC over [ID & 0xFF, ID >> 8, data 0..6]
    assert frame_crc(fid, data7) == crc8_sae_j1850(bytes([fid & 0xFF, fid >> 8]) + data7)


def test_every_single_bit_error_in_a_frame_is_rejected_by_the_crc():
    # a CRC with a polynomial of more than one term detects every single-bit error
    # (Peterson & Brown, "Cyclic codes for error detection", Proc. IRE 1961)
    data = encode_fin_demand(3 * D, -3 * D, Mode.ACTIVE, 7)
    for bit in range(64):
        bad = bytearray(data)
        bad[bit // 8] ^= 1 << (bit % 8)
        assert decode_fin_demand(0x110, bytes(bad)) == Reject("crc")


def test_crc_covers_the_id_so_a_port_frame_on_the_stbd_id_is_rejected():
    data = encode_fin_feedback("port", 5 * D, FinStatus.VALID, 1)
    assert isinstance(decode_fin_feedback(0x120, data), FinFeedback)
    assert decode_fin_feedback(0x121, data) == Reject("crc")


# ---- struct packers vs cantools -----------------------------------------------------------------

angle45 = st.integers(-4500, 4500)
alive = st.integers(0, 15)
modes = st.sampled_from(list(Mode))


@given(angle45, angle45, modes, alive)
def test_fin_demand_packer_is_byte_identical_to_cantools(p, s, m, a):
    # reference library: cantools Message.encode with range checks (strict=True)
    data = encode_fin_demand(p * RAW, s * RAW, m, a)
    msg = db().get_message_by_name("FIN_DEMAND")
    ref = msg.encode(
        {"port_angle": p * 0.01, "stbd_angle": s * 0.01, "mode": int(m), "alive": a, "crc": data[7]}, strict=True
    )
    assert data == ref
    dec = msg.decode(data, decode_choices=False)
    ours = decode_fin_demand(0x110, data)
    assert ours.mode == dec["mode"] and ours.alive == dec["alive"]
    assert ours.port == pytest.approx(dec["port_angle"] * D, abs=1e-12)
    assert ours.stbd == pytest.approx(dec["stbd_angle"] * D, abs=1e-12)


@given(st.sampled_from(["port", "stbd"]), st.integers(-9000, 9000), st.integers(0, 31), alive)
def test_fin_feedback_packer_is_byte_identical_to_cantools(side, a, status, al):
    data = encode_fin_feedback(side, a * RAW, status, al)
    msg = db().get_message_by_name("FIN_FEEDBACK_PORT" if side == "port" else "FIN_FEEDBACK_STBD")
    bits = {n: (status >> i) & 1 for i, n in enumerate(["valid", "hydraulics_ok", "at_limit", "actuator_fault", "locked_centre"])}
    ref = msg.encode({"angle": a * 0.01, **bits, "alive": al, "crc": data[7]}, strict=True)
    assert data == ref
    dec = msg.decode(data, decode_choices=False)
    ours = decode_fin_feedback(msg.frame_id, data)
    assert ours.side == side and ours.alive == dec["alive"]
    assert ours.angle == pytest.approx(dec["angle"] * D, abs=1e-12)
    assert ours.status == sum(dec[n] << i for i, n in enumerate(bits))


@given(modes, modes, st.integers(0, ALL_FAULTS), st.integers(0, 31), st.integers(0, 10000), alive)
def test_controller_status_packer_is_byte_identical_to_cantools(m, pm, f, lim, v, al):
    data = encode_controller_status(m, pm, f, lim, v * 0.01 * KN, al)
    msg = db().get_message_by_name("CONTROLLER_STATUS")
    ref = msg.encode(
        {"mode": int(m), "previous_mode": int(pm), "faults": f, "limiter": lim, "speed": v * 0.01, "alive": al,
         "crc": data[7]},
        strict=True,
    )
    assert data == ref
    dec = msg.decode(data, decode_choices=False)
    ours = decode_controller_status(0x130, data)
    assert (ours.mode, ours.previous_mode, ours.faults, ours.limiter, ours.alive) == (
        dec["mode"], dec["previous_mode"], dec["faults"], dec["limiter"], dec["alive"])
    assert ours.speed == pytest.approx(dec["speed"] * KN, abs=1e-12)


@given(st.sampled_from(list(NodeState)), st.integers(0, 255))
def test_heartbeat_packer_is_byte_identical_to_cantools(state, counter):
    data = encode_heartbeat(state, counter)
    for name, fid in (("HEARTBEAT_CONTROLLER", 0x701), ("HEARTBEAT_RIG", 0x702)):
        msg = db().get_message_by_name(name)
        assert msg.frame_id == fid
        assert data == msg.encode({"state": int(state), "counter": counter}, strict=True)
        assert decode_heartbeat(fid, data) == Heartbeat(fid - 0x700, state, counter)


def test_cantools_mode_names_come_from_the_controller():
    msg = db().get_message_by_name("CONTROLLER_STATUS")
    assert {k: str(v) for k, v in msg.get_signal_by_name("mode").choices.items()} == {int(m): m.name for m in Mode}
    assert msg.get_signal_by_name("faults").maximum == ALL_FAULTS == sum(int(f) for f in Fault)
    assert msg.get_signal_by_name("limiter").maximum == sum(int(f) for f in Limiter)


# ---- rounding, saturation, round trips ----------------------------------------------------------


@given(st.floats(-1e6, 1e6, allow_nan=False))
def test_round_half_away_agrees_with_decimal_round_half_up(x):
    # reference: Python decimal, ROUND_HALF_UP = ties away from zero (exact float conversion)
    assert round_half_away(x) == int(Decimal(x).quantize(Decimal(1), rounding=ROUND_HALF_UP))


@pytest.mark.parametrize("x, r", [(0.5, 1), (-0.5, -1), (2.5, 3), (-2.5, -3), (0.49999999999999994, 0), (1.4999999999999998, 1)])
def test_round_half_away_on_ties_and_near_ties(x, r):
    # hand-computed; 0.49999999999999994 is the float below 0.5, which floor(x + 0.5) gets wrong
    assert round_half_away(x) == r


@given(st.floats(-50 * D, 50 * D), st.floats(-50 * D, 50 * D), modes, st.integers(0, 1000))
def test_fin_demand_round_trip_within_half_a_step_after_saturation(p, s, m, a):
    out = decode_fin_demand(0x110, encode_fin_demand(p, s, m, a))
    for x, y in ((p, out.port), (s, out.stbd)):
        xs = max(-45 * D, min(45 * D, x))
        assert abs(y - xs) <= 0.5 * RAW + 1e-15
        assert round(y / RAW) == max(-4500, min(4500, round_half_away(x * 18000 / math.pi)))
    assert out.mode == m and out.alive == a % 16


def test_encoders_saturate_to_the_signal_range():
    assert decode_fin_demand(0x110, encode_fin_demand(60 * D, -60 * D, 2, 0))[:2] == (4500 * RAW, -4500 * RAW)
    assert decode_fin_feedback(0x121, encode_fin_feedback("stbd", -120 * D, 1, 0)).angle == -9000 * RAW
    assert decode_controller_status(0x130, encode_controller_status(2, 1, 0, 0, -1.0, 0)).speed == 0.0
    assert decode_controller_status(0x130, encode_controller_status(2, 1, 0, 0, 200 * KN, 0)).speed == pytest.approx(100 * KN)


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf, "x", None])
def test_encoders_refuse_non_finite_values(bad):
    with pytest.raises(ValueError):
        encode_fin_demand(bad, 0.0, 2, 0)
    with pytest.raises(ValueError):
        encode_fin_feedback("port", bad, 1, 0)
    with pytest.raises(ValueError):
        encode_controller_status(2, 1, 0, 0, bad, 0)


def test_encoders_refuse_unknown_modes_and_bits():
    with pytest.raises(ValueError, match="mode"):
        encode_fin_demand(0.0, 0.0, 6, 0)
    with pytest.raises(ValueError, match="faults"):
        encode_controller_status(2, 1, ALL_FAULTS + 1, 0, 0.0, 0)
    with pytest.raises(ValueError, match="limiter"):
        encode_controller_status(2, 1, 0, 32, 0.0, 0)
    with pytest.raises(ValueError, match="status"):
        encode_fin_feedback("port", 0.0, 32, 0)
    with pytest.raises(ValueError, match="side"):
        encode_fin_feedback("centre", 0.0, 1, 0)
    with pytest.raises(ValueError, match="state"):
        encode_heartbeat(9, 0)


def test_hand_packed_fin_demand_bytes():
    # port +1.00 deg = 100 = 0x0064, stbd -1.00 deg = -100 = 0xFF9C (two's complement, LE),
    # mode ACTIVE = 2, alive 3; CRC over 10 01 64 00 9C FF 02 00 03
    data = encode_fin_demand(1.0 * D, -1.0 * D, Mode.ACTIVE, 3)
    assert data[:7] == bytes.fromhex("64009cff020003")
    assert data[7] == crc8_sae_j1850(bytes.fromhex("1001") + data[:7])


# ---- rejects ------------------------------------------------------------------------------------


def _sealed(fid: int, body7: bytes) -> bytes:
    return body7 + bytes([frame_crc(fid, body7)])


@pytest.mark.parametrize(
    "fn, fid, body7, reason",
    [
        (decode_fin_demand, 0x110, bytes.fromhex("95110000020003"), "range"),  # port 4501
        (decode_fin_demand, 0x110, bytes.fromhex("00000000060003"), "range"),  # mode 6
        (decode_fin_demand, 0x110, bytes.fromhex("00000000120003"), "reserved"),  # byte 4 high nibble
        (decode_fin_demand, 0x110, bytes.fromhex("00000000020103"), "reserved"),  # byte 5
        (decode_fin_demand, 0x110, bytes.fromhex("00000000020013"), "reserved"),  # byte 6 high nibble
        (decode_fin_feedback, 0x120, bytes.fromhex("29230100000000"), "range"),  # 9001
        (decode_fin_feedback, 0x120, bytes.fromhex("00002000000000"), "reserved"),  # status bit 5
        (decode_fin_feedback, 0x121, bytes.fromhex("00000100010000"), "reserved"),  # byte 4
        (decode_controller_status, 0x130, bytes.fromhex("12000000112700"), "range"),  # speed 10001
        (decode_controller_status, 0x130, bytes.fromhex("62000000000000"), "range"),  # prev mode 6
        (decode_controller_status, 0x130, bytes.fromhex("12000200000000"), "reserved"),  # fault bit 9
        (decode_controller_status, 0x130, bytes.fromhex("12000020000000"), "reserved"),  # limiter bit 5
    ],
)
def test_decoders_reject_out_of_range_and_reserved_bits_even_with_a_good_crc(fn, fid, body7, reason):
    assert fn(fid, _sealed(fid, body7)) == Reject(reason)


def test_decoders_reject_frame_kinds_ids_and_lengths():
    good = encode_fin_demand(0.0, 0.0, 1, 0)
    assert isinstance(decode_fin_demand(0x110, good), FinDemand)
    assert decode_fin_demand(0x110, good, is_remote=True) == Reject("remote")
    assert decode_fin_demand(0x110, good, is_extended=True) == Reject("extended")
    assert decode_fin_demand(0x111, good) == Reject("id")
    assert decode_fin_demand(0x110, good[:7]) == Reject("dlc")
    assert decode_fin_demand(0x110, good + b"\x00") == Reject("dlc")
    assert decode_fin_demand(0x110, "not bytes") == Reject("type")
    assert isinstance(decode_fin_demand(0x110, bytearray(good)), FinDemand)
    assert decode_heartbeat(0x703, b"\x01\x00") == Reject("id")
    assert decode_heartbeat(0x701, b"\x01") == Reject("dlc")
    assert decode_heartbeat(0x701, b"\x04\x00") == Reject("range")
    assert decode_frame(0x555, good) == Reject("id")
    assert decode_frame("0x110", good) == Reject("id")


def test_decode_can_message_handles_python_can_messages():
    good = encode_fin_demand(2 * D, -2 * D, Mode.ACTIVE, 9)
    ok = can.Message(arbitration_id=0x110, data=good, is_extended_id=False)
    assert isinstance(decode_can_message(ok), FinDemand)
    assert decode_can_message(can.Message(arbitration_id=0x110, is_extended_id=False, is_remote_frame=True, dlc=8)) == Reject("remote")
    assert decode_can_message(can.Message(arbitration_id=0x110, data=good, is_extended_id=True)) == Reject("extended")
    assert decode_can_message(can.Message(arbitration_id=0x110, is_error_frame=True, is_extended_id=False)) == Reject("error")
    assert decode_can_message(can.Message(arbitration_id=0x110, data=good, is_fd=True, is_extended_id=False)) == Reject("fd")
    odd = can.Message(arbitration_id=0x110, data=good, is_extended_id=False)
    odd.dlc = 7
    assert decode_can_message(odd) == Reject("dlc")
    assert decode_can_message(object()) == Reject("type")


@given(st.integers(-5, 0x800), st.binary(max_size=12), st.booleans(), st.booleans())
def test_decoders_never_raise_on_random_frames_and_every_result_is_counted(fid, data, rtr, ext):
    counters = FrameCounters()
    results = [
        counters.count(fn(fid, data, DEFAULT_IDS, is_remote=rtr, is_extended=ext))
        for fn in (decode_fin_demand, decode_fin_feedback, decode_controller_status, decode_heartbeat, decode_frame)
    ]
    kinds = (Reject, FinDemand, FinFeedback, ControllerStatus, Heartbeat)
    assert all(isinstance(r, kinds) for r in results)
    assert counters.accepted + counters.total_rejected == 5
    assert counters.accepted == sum(not isinstance(r, Reject) for r in results)


def test_frame_counters_group_rejects_by_reason():
    c = FrameCounters()
    for r in (Reject("crc"), Reject("crc"), Reject("dlc"), FinDemand(0.0, 0.0, Mode.OFF, 0)):
        c.count(r)
    assert c.as_dict() == {"accepted": 1, "rejected": {"crc": 2, "dlc": 1}}


# ---- IDs ----------------------------------------------------------------------------------------


def test_can_ids_defaults_and_validation_messages():
    assert DEFAULT_IDS.named_ids() == {
        "fin_demand": 0x110, "fin_feedback_port": 0x120, "fin_feedback_stbd": 0x121,
        "controller_status": 0x130, "heartbeat_controller": 0x701, "heartbeat_rig": 0x702,
    }
    with pytest.raises(ValueError, match=r"CanIds.fin_demand = 0x800: not a standard 11-bit ID"):
        CanIds(fin_demand=0x800)
    with pytest.raises(ValueError, match=r"CanIds.fin_feedback_stbd = 0x120: same ID as fin_feedback_port"):
        CanIds(fin_feedback_stbd=0x120)
    with pytest.raises(ValueError, match=r"heartbeat ID beyond 0x7ff"):
        CanIds(heartbeat_base=0x790, rig_node=127)
    with pytest.raises(ValueError, match=r"unknown key\(s\) fin_demnad"):
        CanIds.from_mapping({"fin_demnad": 0x200})
    with pytest.raises(ValueError, match="must be an integer"):
        CanIds(fin_demand=True)
    ids = CanIds.from_mapping({"fin_demand": 0x210, "rig_node": 5})
    assert ids.fin_demand == 0x210 and ids.heartbeat_id(5) == 0x705


def test_custom_ids_flow_into_database_crc_and_decoders():
    ids = CanIds(fin_demand=0x210, fin_feedback_port=0x220, fin_feedback_stbd=0x221, controller_status=0x230)
    data = encode_fin_demand(1 * D, 2 * D, Mode.BENCH, 4, ids)
    assert isinstance(decode_frame(0x210, data, ids), FinDemand)
    assert decode_frame(0x110, data) == Reject("crc")  # same bytes on the default ID: CRC differs
    msg = build_database(ids).get_message_by_frame_id(0x210)
    assert msg.name == "FIN_DEMAND"
    assert msg.encode({"port_angle": 1.0, "stbd_angle": 2.0, "mode": 5, "alive": 4, "crc": data[7]}) == data


# ---- DBC ----------------------------------------------------------------------------------------


def test_docs_dbc_equals_a_fresh_export(tmp_path):
    text = export_dbc(tmp_path / "finloop.dbc")
    assert (ROOT / "docs" / "finloop.dbc").read_bytes() == text.encode("ascii")  # byte-exact (CRLF kept)


def test_dbc_export_reloads_identically():
    import cantools

    text = db().as_dbc_string()
    again = cantools.database.load_string(text, database_format="dbc")
    assert again.as_dbc_string() == text
    for m in db().messages:
        r = again.get_message_by_frame_id(m.frame_id)
        assert (r.name, r.length, r.is_extended_frame) == (m.name, m.length, False)
        assert [(s.name, s.start, s.length, s.is_signed, s.byte_order, s.scale, s.offset, s.minimum, s.maximum, s.unit)
                for s in r.signals] == [
               (s.name, s.start, s.length, s.is_signed, s.byte_order, s.scale, s.offset, s.minimum, s.maximum, s.unit)
               for s in m.signals]


# ---- alive counter ------------------------------------------------------------------------------


def test_alive_monitor_reports_ok_stalled_and_skipped_with_lost_frames():
    mon = AliveMonitor()
    got = [mon.update(c) for c in (14, 15, 0, 1, 1, 1, 4, 5, 4)]
    # hand-computed: 15,0,1 ok (wrap 15->0 is +1); 1,1 stalled twice; 1->4 skips 2 frames;
    # 4->5 ok; 5->4 is a jump of 15 (mod 16): 14 frames lost
    assert got == ["first", "ok", "ok", "ok", "stalled", "stalled", "skipped", "ok", "skipped"]
    assert mon.as_dict() == {"ok": 4, "stalled": 2, "skipped": 2, "lost": 2 + 14}
    mon.reset()
    assert mon.update(3) == "first" and mon.as_dict() == {"ok": 0, "stalled": 0, "skipped": 0, "lost": 0}


def test_alive_counter_of_encoded_frames_is_seen_as_ok_by_the_monitor():
    mon = AliveMonitor()
    for k in range(40):  # the encoder takes a running count mod 16
        mon.update(decode_fin_demand(0x110, encode_fin_demand(0.0, 0.0, 2, k)).alive)
    assert mon.as_dict() == {"ok": 39, "stalled": 0, "skipped": 0, "lost": 0}
