"""Fuzz every CAN and serial decoder and time the codecs (prints figures; asserts nothing).

    python benchmarks/fuzz_decoders.py [--n 100000] [--seed 1] [--json]

For each decoder, ``--n`` seeded random inputs, a third each of
  - random bytes / lengths / IDs (including remote and extended flags),
  - valid frames or sentences with random bit flips, byte changes, truncation or extension,
  - valid frames with one or two payload bytes randomised and *re-sealed* with a correct CRC /
    checksum (or random NMEA fields with a correct checksum), so the range / reserved / field
    checks behind the CRC are reached.
Counts: accepted, rejected by reason, and escaped exceptions (must be 0). The stream parser gets
``--n`` random chunks (1..64 bytes) of a stream mixing valid sentences, valid frames, mutated
ones and garbage; its buffer high-water mark is printed (must stay < 82 bytes).

Timing: per-call cost (median of 5 runs) of the struct packers vs cantools encode / decode, the
CRC-8, NMEA parse + decode, the binary frame decoder and the stream parser (per byte).
"""

from __future__ import annotations

import argparse
import importlib
import json
import math
import random
import statistics
import struct
import sys
import time
import traceback
from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from controller import ALL_FAULTS, Mode  # noqa: E402
from hil import catalogue as cat  # noqa: E402
from hil import serial_codec as sc  # noqa: E402
from hil.catalogue import Reject  # noqa: E402

D = math.pi / 180.0
KN = 1852.0 / 3600.0


class Tally:
    def __init__(self) -> None:
        self.accepted = 0
        self.rejected: Counter[str] = Counter()
        self.escaped = 0
        self.first_escape: str | None = None

    def run(self, fn, *args, **kw):
        try:
            r = fn(*args, **kw)
        except Exception:  # noqa: BLE001 - that is what we are counting
            self.escaped += 1
            if self.first_escape is None:
                self.first_escape = traceback.format_exc(limit=3)
            return None
        if isinstance(r, Reject):
            self.rejected[r.reason] += 1
        else:
            self.accepted += 1
        return r

    def as_dict(self) -> dict:
        return {"accepted": self.accepted, "rejected": dict(sorted(self.rejected.items())), "escaped": self.escaped}


def mutate(rng: random.Random, data: bytes) -> bytes:
    b = bytearray(data)
    op = rng.randrange(4)
    if op == 0 and b:
        for _ in range(rng.randint(1, 3)):
            i = rng.randrange(len(b))
            b[i] ^= 1 << rng.randrange(8)
    elif op == 1 and b:
        b[rng.randrange(len(b))] = rng.randrange(256)
    elif op == 2:
        del b[rng.randrange(len(b) + 1):]
    else:
        b += bytes(rng.randrange(256) for _ in range(rng.randint(1, 4)))
    return bytes(b)


KINDS = {"fin_demand": (0,), "fin_feedback": (1,), "controller_status": (2,), "heartbeat": (3,), "any": (0, 1, 2, 3)}


def valid_can(rng: random.Random, kinds: tuple[int, ...]) -> tuple[int, bytes]:
    k = rng.choice(kinds)
    if k == 0:
        return 0x110, cat.encode_fin_demand(rng.uniform(-50, 50) * D, rng.uniform(-50, 50) * D,
                                            rng.choice(list(Mode)), rng.randrange(16))
    if k == 1:
        side = rng.choice(["port", "stbd"])
        return (0x120 if side == "port" else 0x121), cat.encode_fin_feedback(
            side, rng.uniform(-95, 95) * D, rng.randrange(32), rng.randrange(16))
    if k == 2:
        return 0x130, cat.encode_controller_status(rng.choice(list(Mode)), rng.choice(list(Mode)),
                                                   rng.randrange(ALL_FAULTS + 1), rng.randrange(32),
                                                   rng.uniform(-1, 60) * KN, rng.randrange(16))
    return rng.choice([0x701, 0x702]), cat.encode_heartbeat(rng.randrange(4), rng.randrange(256))


def can_input(rng: random.Random, i: int, kinds: tuple[int, ...]) -> tuple[int, bytes, bool, bool]:
    kind = i % 3
    if kind == 0:
        fid = rng.choice([rng.randrange(0x800), 0x110, 0x120, 0x121, 0x130, 0x701, 0x702, -1, 0x800])
        return fid, bytes(rng.randrange(256) for _ in range(rng.randrange(10))), rng.random() < 0.05, rng.random() < 0.05
    fid, data = valid_can(rng, kinds)
    if kind == 1:
        return fid, mutate(rng, data), False, False
    if len(data) == 8:  # one or two payload bytes randomised, then sealed with a correct CRC
        body = bytearray(data[:7])
        for _ in range(rng.randint(1, 2)):
            body[rng.randrange(7)] = rng.randrange(256)
        return fid, bytes(body) + bytes([cat.frame_crc(fid, body)]), False, False
    return fid, bytes([rng.randrange(256), rng.randrange(256)]), False, False


def nmea_line(rng: random.Random) -> bytes:
    k = rng.randrange(3)
    if k == 0:
        return sc.format_xdr_roll(rng.uniform(-90, 90) * D, rng.choice([None, rng.uniform(-100, 100) * D]))
    if k == 1:
        return sc.format_vhw(rng.uniform(-5, 40) * KN)
    return b"$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47\r\n"


_FIELD_ALPHABET = "AGDNKTMRPOLE0123456789.-+,, "


def nmea_input(rng: random.Random, i: int) -> bytes:
    kind = i % 3
    if kind == 0:
        n = rng.randrange(100)
        return bytes(rng.randrange(256) for _ in range(n))
    if kind == 1:
        return mutate(rng, nmea_line(rng))
    # random fields, correct checksum: reaches the field decoders
    addr = rng.choice(["YXXDR", "VWVHW", "IIXDR", "VDVHW", "GPHDT", "PFOO1"])
    body = addr + "," + "".join(rng.choice(_FIELD_ALPHABET) for _ in range(rng.randrange(60)))
    body = body.replace("*", "")
    return f"${body}*{sc.nmea_checksum(body)}\r\n".encode()


def motion_input(rng: random.Random, i: int) -> bytes:
    kind = i % 3
    if kind == 0:
        return b"\xa5\x5a" + bytes(rng.randrange(256) for _ in range(rng.randrange(30)))
    good = sc.encode_motion_frame(rng.randrange(70000), rng.randrange(2**33), rng.uniform(-3, 3),
                                  rng.uniform(-9, 9), rng.randrange(8))
    if kind == 1:
        return mutate(rng, good)
    body = bytearray(good[2:19])
    for _ in range(rng.randint(1, 3)):
        body[rng.randrange(1, 17)] = rng.randrange(256)
    return b"\xa5\x5a" + bytes(body) + struct.pack("<H", sc.crc16_ibm_3740(bytes(body)))


def fuzz(n: int, seed: int) -> dict:
    rng = random.Random(seed)
    res: dict[str, Tally] = {}
    can_decoders = {
        "decode_fin_demand": (cat.decode_fin_demand, KINDS["fin_demand"]),
        "decode_fin_feedback": (cat.decode_fin_feedback, KINDS["fin_feedback"]),
        "decode_controller_status": (cat.decode_controller_status, KINDS["controller_status"]),
        "decode_heartbeat": (cat.decode_heartbeat, KINDS["heartbeat"]),
        "decode_frame": (cat.decode_frame, KINDS["any"]),
    }
    for name, (fn, kinds) in can_decoders.items():
        t = res[name] = Tally()
        for i in range(n):
            fid, data, rtr, ext = can_input(rng, i, kinds)
            t.run(fn, fid, data, cat.DEFAULT_IDS, is_remote=rtr, is_extended=ext)

    t = res["parse_sentence"] = Tally()
    t2 = res["decode_sentence"] = Tally()
    for i in range(n):
        s = t.run(sc.parse_sentence, nmea_input(rng, i))
        if isinstance(s, sc.Sentence):
            t2.run(sc.decode_sentence, s)

    t = res["decode_motion_frame"] = Tally()
    for i in range(n):
        t.run(sc.decode_motion_frame, motion_input(rng, i))

    # stream parser: n random chunks of a long mixed stream
    t = res["SensorStreamParser.feed"] = Tally()
    p = sc.SensorStreamParser()
    high_water = 0
    readings = 0
    seq = 0
    pending = bytearray()
    for i in range(n):
        while len(pending) < 64:
            k = rng.randrange(6)
            if k == 0:
                seq += 1
                pending += sc.encode_motion_frame(seq, seq * 20_000, rng.uniform(-0.5, 0.5), rng.uniform(-1, 1), 3)
            elif k == 1:
                pending += nmea_line(rng)
            elif k == 2:
                pending += mutate(rng, sc.encode_motion_frame(seq, seq * 20_000, 0.1, 0.0, 3))
            elif k == 3:
                pending += mutate(rng, nmea_line(rng))
            elif k == 4:
                pending += nmea_input(rng, 2)
            else:
                pending += bytes(rng.randrange(256) for _ in range(rng.randrange(20)))
        m = rng.randint(1, 64)
        chunk = bytes(pending[:m])
        del pending[:m]
        try:
            readings += len(p.feed(chunk, i * 0.001))
        except Exception:  # noqa: BLE001
            t.escaped += 1
            if t.first_escape is None:
                t.first_escape = traceback.format_exc(limit=3)
        high_water = max(high_water, p.buffered)
    t.accepted = p.counters.accepted
    t.rejected = Counter(p.counters.rejected)
    out = {k: v.as_dict() for k, v in res.items()}
    out["SensorStreamParser.feed"].update(
        chunks=n, readings=readings, garbage_bytes=p.garbage_bytes, resyncs=p.resyncs, seq_lost=p.seq_lost,
        buffer_high_water=high_water,
    )
    escapes = {k: v.first_escape for k, v in res.items() if v.first_escape}
    if escapes:
        out["first_escapes"] = escapes
    return out


def per_call_us(fn, reps: int) -> float:
    best = []
    for _ in range(5):
        t0 = time.perf_counter()
        fn(reps)
        best.append((time.perf_counter() - t0) / reps * 1e6)
    return statistics.median(best)


def timing(reps: int) -> dict:
    t_import = time.perf_counter()
    importlib.import_module("cantools")
    t_import = time.perf_counter() - t_import
    db = cat.build_database()
    msg = db.get_message_by_name("FIN_DEMAND")
    data = cat.encode_fin_demand(3.21 * D, -3.21 * D, Mode.ACTIVE, 5)
    phys = {"port_angle": 3.21, "stbd_angle": -3.21, "mode": 2, "alive": 5, "crc": data[7]}
    line = sc.format_xdr_roll(2.35 * D, -0.85 * D)
    frame = sc.encode_motion_frame(1, 1000, 0.05, 0.01, 3)
    stream = (line + frame + sc.format_vhw(6.0)) * 50

    def loop(f):
        def run(k):
            for _ in range(k):
                f()
        return run

    enc, dec = cat.encode_fin_demand, cat.decode_fin_demand
    p = sc.SensorStreamParser()
    res = {
        "cantools_import_s": round(t_import, 3),
        "fin_demand_encode_struct_us": per_call_us(loop(lambda: enc(0.056, -0.056, 2, 5)), reps),
        "fin_demand_encode_cantools_us": per_call_us(loop(lambda: msg.encode(phys)), reps // 5),
        "fin_demand_decode_struct_us": per_call_us(loop(lambda: dec(0x110, data)), reps),
        "fin_demand_decode_cantools_us": per_call_us(loop(lambda: msg.decode(data)), reps // 5),
        "crc8_frame_us": per_call_us(loop(lambda: cat.frame_crc(0x110, data)), reps),
        "nmea_parse_and_decode_us": per_call_us(loop(lambda: sc.decode_sentence(sc.parse_sentence(line))), reps // 2),
        "motion_frame_decode_us": per_call_us(loop(lambda: sc.decode_motion_frame(frame)), reps),
        "motion_frame_encode_us": per_call_us(loop(lambda: sc.encode_motion_frame(1, 1000, 0.05, 0.01, 3)), reps),
    }
    k = max(1, reps // 1000)
    per_feed = per_call_us(loop(lambda: p.feed(stream, 0.0)), k)
    res["stream_parser_us_per_byte"] = per_feed / len(stream)
    res["stream_parser_us_per_item"] = per_feed / 150
    return {k: (round(v, 3) if isinstance(v, float) else v) for k, v in res.items()}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100_000, help="random inputs per decoder (default 100000)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--reps", type=int, default=20_000, help="calls per timing run")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    a = ap.parse_args(argv)
    if a.n < 1 or a.reps < 10:
        print("error: --n must be >= 1 and --reps >= 10", file=sys.stderr)
        return 2
    t0 = time.perf_counter()
    result = {"n": a.n, "seed": a.seed, "fuzz": fuzz(a.n, a.seed)}
    result["fuzz_wall_s"] = round(time.perf_counter() - t0, 1)
    result["timing_us"] = timing(a.reps)
    if a.json:
        print(json.dumps(result, indent=1))
        return 0
    print(f"fuzz: {a.n} inputs per decoder, seed {a.seed}, {result['fuzz_wall_s']} s")
    for name, r in result["fuzz"].items():
        if name == "first_escapes":
            continue
        extra = {k: v for k, v in r.items() if k not in ("accepted", "rejected", "escaped")}
        print(f"  {name:26s} accepted {r['accepted']:7d}  escaped {r['escaped']}  rejected {r['rejected']}")
        if extra:
            print(f"  {'':26s} {extra}")
    for name, tb in result["fuzz"].get("first_escapes", {}).items():
        print(f"ESCAPED in {name}:\n{tb}")
    print("per-call cost (median of 5 runs, µs):")
    for k, v in result["timing_us"].items():
        print(f"  {k:34s} {v}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
