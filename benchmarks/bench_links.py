"""Link latency and recorder cost (prints figures, asserts nothing).

1. CAN round trip over the emulated adapter: python-can ``slcan`` bus (this process, through
   ``hil.links.CanLink``) ↔ pty ↔ ``SlcanDevice`` in another process that echoes every frame.
2. Serial line round trip over a pty (``PtyEndpoint`` echo in another process).
3. Serial line round trip over ``socket://127.0.0.1`` with TCP_NODELAY (echo server in another
   process), and for contrast a line written in two pieces with Nagle left on.
4. Recorder: cost of one steps-CSV row (batched once per second vs one write per row) and of one
   raw CAN log frame.

    python benchmarks/bench_links.py [--n 2000]
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import os
import socket
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))


def _pct(xs, q):
    xs = sorted(xs)
    return xs[min(len(xs) - 1, int(round(q * (len(xs) - 1))))]


def _report(name, lat_s):
    ms = [x * 1e3 for x in lat_s]
    print(f"{name:<52s} n={len(ms):5d}  median {statistics.median(ms):7.3f} ms  "
          f"p99 {_pct(ms, 0.99):7.3f} ms  max {max(ms):7.3f} ms")


# -- child processes (echo peers) --------------------------------------------------------------

def _slcan_echo(q, stop):
    from hil.slcan_device import SlcanDevice

    dev = SlcanDevice()
    q.put(dev.open())
    while not stop.is_set():
        for f in dev.poll(0.05):
            dev.send(f.arbitration_id, f.data, f.is_extended_id)
    dev.close()


def _pty_echo(q, stop):
    from hil.slcan_device import PtyEndpoint

    ep = PtyEndpoint()
    q.put(ep.open())
    while not stop.is_set():
        if ep.wait_readable(0.05):
            data = ep.read_available()
            if data:
                ep.write(data)
    ep.close()


def _socket_echo(q, stop, nodelay):
    srv = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    srv.bind(("127.0.0.1", 0))
    srv.listen(1)
    q.put(srv.getsockname()[1])
    conn, _ = srv.accept()
    if nodelay:
        conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    conn.settimeout(0.05)
    buf = b""
    while not stop.is_set():  # a line-oriented peer: answers when a whole sentence has arrived
        try:
            data = conn.recv(4096)
        except socket.timeout:
            continue
        if not data:
            break
        buf += data
        if buf.endswith(b"\n"):
            conn.sendall(buf)
            buf = b""
    conn.close()
    srv.close()


def _start(target, *args):
    ctx = mp.get_context("spawn")
    q, stop = ctx.Queue(), ctx.Event()
    p = ctx.Process(target=target, args=(q, stop, *args), daemon=True)
    p.start()
    return p, stop, q.get(timeout=20)


def _stop(p, stop):
    stop.set()
    p.join(5)
    if p.is_alive():
        p.terminate()
        p.join(5)


# -- measurements ------------------------------------------------------------------------------

def bench_can(n, serial_timeout_s):
    from hil.links import CanLink

    p, stop, path = _start(_slcan_echo)
    try:
        with CanLink("slcan", path, 500000, is_emulated=True, serial_timeout_s=serial_timeout_s) as link:
            time.sleep(0.2)
            link.drain()
            lat = []
            for i in range(n + 50):
                payload = i.to_bytes(4, "little") + b"\x00" * 4
                t0 = time.perf_counter()
                link.send(0x110, payload)
                while True:
                    f = link.recv(1.0)
                    if f is None:
                        raise RuntimeError("echo lost")
                    if f.data == payload:
                        break
                if i >= 50:
                    lat.append(time.perf_counter() - t0)
        _report(f"CAN slcan/pty round trip (serial timeout {serial_timeout_s * 1e3:g} ms)", lat)
    finally:
        _stop(p, stop)


def _line_round_trip(link, n, split=False, sock=None):
    lat = []
    for i in range(n + 20):
        line = f"$FLROL,{i:06d},1.234,-0.567*00\r\n".encode()
        t0 = time.perf_counter()
        if split:
            sock.send(line[:10])
            sock.send(line[10:])
        else:
            link.write(line)
        got = b""
        while not got.endswith(b"\n"):
            more = sock.recv(4096) if split else link.read(1.0)
            if not more:
                raise RuntimeError("echo lost")
            got += more
        if i >= 20:
            lat.append(time.perf_counter() - t0)
    return lat


def bench_serial_pty(n):
    from hil.links import SerialLink

    p, stop, path = _start(_pty_echo)
    try:
        with SerialLink(path, 115200, 1.0) as link:
            _report("serial pty line round trip (43 B line)", _line_round_trip(link, n))
    finally:
        _stop(p, stop)


def bench_serial_socket(n):
    from hil.links import SerialLink

    p, stop, port = _start(_socket_echo, True)
    try:
        with SerialLink(f"socket://127.0.0.1:{port}", 115200, 1.0) as link:
            assert link.tcp_nodelay
            _report("serial socket:// round trip, TCP_NODELAY, one write", _line_round_trip(link, n))
    finally:
        _stop(p, stop)
    p, stop, port = _start(_socket_echo, False)
    try:
        s = socket.create_connection(("127.0.0.1", port))  # Nagle on (default), two writes per line
        _report("plain socket, Nagle on, line in 2 writes (contrast)", _line_round_trip(None, 40, True, s))
        s.close()
    finally:
        _stop(p, stop)


def bench_recorder(n):
    import can

    from hil.recorder import CanLogWriter, StepRecorder

    cols = [f"c{i}_deg" for i in range(30)]
    row = [1.2345678 * i for i in range(30)]
    with tempfile.TemporaryDirectory() as d:
        for interval, label in ((1.0, "batched, once per second"), (0.0, "one os.write per row")):
            rec = StepRecorder(Path(d) / f"s{interval}.csv", cols, flush_interval_s=interval)
            t0 = time.perf_counter()
            for _ in range(n):
                rec.write(row)
            dt = (time.perf_counter() - t0) / n
            rec.close()
            print(f"{'steps CSV row, 30 columns, ' + label:<52s} {dt * 1e6:7.2f} µs/row "
                  f"({dt / 0.02 * 100:.3f} % of a 50 Hz step)")
        for ext in ("log", "blf"):
            w = CanLogWriter(Path(d) / f"can.{ext}")
            msg = can.Message(arbitration_id=0x110, data=bytes(8), is_extended_id=False, timestamp=time.time())
            t0 = time.perf_counter()
            for _ in range(n):
                w.log_message(msg)
            dt = (time.perf_counter() - t0) / n
            w.close()
            print(f"{'raw CAN log frame, .' + ext:<52s} {dt * 1e6:7.2f} µs/frame")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=2000, help="round trips per measurement")
    args = ap.parse_args(argv)
    print(f"python {sys.version.split()[0]}, {os.cpu_count()} CPUs")
    bench_can(args.n, 0.001)
    bench_can(args.n, 0.0001)
    bench_serial_pty(args.n)
    bench_serial_socket(args.n)
    bench_recorder(20 * args.n)


if __name__ == "__main__":
    main()
