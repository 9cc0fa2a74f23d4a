#!/usr/bin/env python3
"""Capacity side by side, in one run on one machine (load generators included):

- jetloop-server (release) answering IsentropicRatios (Mach 2);
- bench-echo-server: a bare tonic server echoing the same call with no layers or physics (the
  floor of the transport);
- bench/python_grpc_server.py: a minimal Python grpcio (asyncio) server computing the same
  ratios.

Each is driven by h2load (Debian package nghttp2-client; skipped with a note when absent) and
by bench-capacity (a compiled tonic client) at several load levels, the same for all, rounds
interleaved, medians reported; a server's capacity is its best level. Then for jetloop (and
the echo beside it): the latency with one call in flight, the p99 at half its maximum
throughput (open loop), and tone extraction (8192 samples per call) at full load.

Usage (from the repository root):
  cargo build --release -p jetloop-server -p jetloop-bench --bins
  pip install ./clients/python
  python3 bench/capacity.py [--rounds 3] [--seconds 3]
"""
import argparse
import json
import pathlib
import re
import shutil
import statistics
import struct
import subprocess
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]
REL = ROOT / "target" / "release"
PATH = "/jetloop.v1.GasDynamicsService/IsentropicRatios"


def start(cmd):
    p = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    line = p.stdout.readline().strip()
    m = re.search(r"(\d+\.\d+\.\d+\.\d+:\d+)", line)
    if not m:
        p.kill()
        raise SystemExit(f"{cmd[0]} did not print its address: {line!r}")
    return p, m.group(1)


def bench(addr, *args):
    out = subprocess.run([str(REL / "bench-capacity"), addr, *args], capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def h2load(addr, body, n, clients=4, streams=16):
    out = subprocess.run(["h2load", "-n", str(n), "-c", str(clients), "-m", str(streams), "-t", "1", "-d", body,
                          "-H", "content-type: application/grpc", "-H", "te: trailers", f"http://{addr}{PATH}"],
                         capture_output=True, text=True, check=True).stdout
    rps = float(re.search(r"finished in [\d.]+\w+, ([\d.]+) req/s", out).group(1))
    ok = int(re.search(r"(\d+) succeeded", out).group(1))
    mean = re.search(r"time for request:\s+\S+\s+\S+\s+(\S+)", out).group(1)
    return rps, ok, mean


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--seconds", type=float, default=3.0)
    a = ap.parse_args()
    from jetloop.v1 import gas_dynamics_pb2 as g

    msg = g.IsentropicRatiosRequest(mach_number=2.0).SerializeToString()
    body = ROOT / "target" / "capacity-request.bin"
    body.write_bytes(b"\x00" + struct.pack(">I", len(msg)) + msg)

    servers = {
        "jetloop": start([str(REL / "jetloop-server"), "--listen", "127.0.0.1:0"]),
        "tonic echo": start([str(REL / "bench-echo-server")]),
        "python grpcio": start([sys.executable, str(ROOT / "bench" / "python_grpc_server.py")]),
    }
    have_h2load = shutil.which("h2load") is not None
    # Capacity is a server's maximum throughput, and servers reach theirs at different
    # concurrency: a single-threaded Python event loop saturates with few calls in flight, the
    # compiled servers need more to fill both cores. So every server is measured at every
    # level, the same levels for all, and its best level is its capacity (the table shows all).
    h2_levels = [(4, 16), (4, 64), (8, 32)]  # (connections, streams per connection)
    client_levels = [16, 64]  # calls in flight per connection, 4 connections
    res = {k: {"h2load": {lv: [] for lv in h2_levels}, "client": {lv: [] for lv in client_levels}}
           for k in servers}
    try:
        for _ in range(a.rounds):
            for name, (_, addr) in servers.items():
                if have_h2load:
                    for c, m in h2_levels:
                        n = 40_000 if name == "python grpcio" else 300_000
                        rps, ok, _ = h2load(addr, str(body), n, clients=c, streams=m)
                        assert ok == n, f"{name}: {ok} of {n} succeeded"
                        res[name]["h2load"][(c, m)].append(rps)
                for f in client_levels:
                    r = bench(addr, "physics", "--seconds", str(a.seconds), "--in-flight", str(f))
                    assert r["errors"] == 0, r
                    res[name]["client"][f].append(r["calls_per_s"])
        j = servers["jetloop"][1]
        one = bench(j, "physics", "--connections", "1", "--in-flight", "1", "--seconds", str(a.seconds))
        one_echo = bench(servers["tonic echo"][1], "physics", "--connections", "1", "--in-flight", "1",
                         "--seconds", str(a.seconds))
        h2_one = h2load(j, str(body), 20_000, clients=1, streams=1) if have_h2load else None
        h2_one_echo = h2load(servers["tonic echo"][1], str(body), 20_000, clients=1, streams=1) if have_h2load else None
        half = max(statistics.median(v) for v in res["jetloop"]["client"].values()) / 2
        open_loop = bench(j, "physics", "--rate", f"{half:.0f}", "--connections", "4", "--seconds", str(a.seconds))
        open_echo = bench(servers["tonic echo"][1], "physics", "--rate", f"{half:.0f}", "--connections", "4",
                          "--seconds", str(a.seconds))
        tones = bench(j, "tones", "--seconds", str(a.seconds), "--in-flight", "4")
    finally:
        for p, _ in servers.values():
            p.terminate()
        for p, _ in servers.values():
            p.wait(timeout=60)

    print(f"Unary IsentropicRatios over loopback, calls/s, medians of {a.rounds} rounds, by load level:")
    cols = ([f"h2load {c}x{m}" for c, m in h2_levels] if have_h2load else []) + \
        [f"client 4x{f}" for f in client_levels]
    print(f"{'server':<16}" + "".join(f"{c:>16}" for c in cols))
    best = {}
    for k, d in res.items():
        h = {lv: statistics.median(v) for lv, v in d["h2load"].items() if v}
        cl = {lv: statistics.median(v) for lv, v in d["client"].items()}
        row = [h[lv] for lv in h2_levels if lv in h] + [cl[lv] for lv in client_levels]
        print(f"{k:<16}" + "".join(f"{x:>16.0f}" for x in row))
        best[k] = {"h2load": max(h.values()) if h else None, "client": max(cl.values()),
                   "h2load_at": max(h, key=h.get) if h else None, "client_at": max(cl, key=cl.get),
                   "h2load_first": h.get(h2_levels[0]), "client_first": cl[client_levels[0]]}
    for gen in ("h2load", "client"):
        if best["jetloop"][gen]:
            e, p, jv = best["tonic echo"][gen], best["python grpcio"][gen], best["jetloop"][gen]
            print(f"{gen}, each server at its best level (jetloop {best['jetloop'][gen + '_at']}, echo "
                  f"{best['tonic echo'][gen + '_at']}, python {best['python grpcio'][gen + '_at']}): "
                  f"jetloop / tonic echo = {jv / e:.2f} (goal >= 0.70); jetloop / python = {jv / p:.1f} (goal >= 10)")
            e1, p1, j1 = (best[k][gen + "_first"] for k in ("tonic echo", "python grpcio", "jetloop"))
            print(f"{gen}, all at the first level only: jetloop / tonic echo = {j1 / e1:.2f}; "
                  f"jetloop / python = {j1 / p1:.1f}")
    print(f"one call in flight (tonic client): jetloop p50 {one['p50_us']:.0f} us, p99 {one['p99_us']:.0f} us; "
          f"tonic echo p50 {one_echo['p50_us']:.0f} us (goal: jetloop p50 < 60 us)")
    if h2_one:
        print(f"one call in flight (h2load): jetloop mean {h2_one[2]} per call, tonic echo {h2_one_echo[2]}")
    print(f"open loop at half jetloop's maximum with the tonic client ({half:.0f}/s, sent in 1 ms ticks): "
          f"jetloop p50 {open_loop['p50_us']:.0f} us, p99 {open_loop['p99_us']:.0f} us, errors {open_loop['errors']}; "
          f"tonic echo p50 {open_echo['p50_us']:.0f} us, p99 {open_echo['p99_us']:.0f} us (goal: jetloop p99 < 1000 us)")
    print(f"tone extraction (8192 f32 samples per call, 16 in flight): {tones['calls_per_s']:.0f} calls/s, "
          f"p50 {tones['p50_us']:.0f} us, p99 {tones['p99_us']:.0f} us")
    if not have_h2load:
        print("h2load not found (Debian: apt install nghttp2-client): only the compiled client was used")


if __name__ == "__main__":
    main()
