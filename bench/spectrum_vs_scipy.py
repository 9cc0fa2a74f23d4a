"""Benchmark: jetloop tone extraction (tones + bands, over loopback gRPC) against SciPy's
welch + find_peaks in-process, on the same 2^21 float32 samples at 204.8 kHz, Hann 8192,
50 % overlap. Everything is timed side by side in one run, and every jetloop call comes right
after a SciPy call, so both see the same machine state.

jetloop is timed four ways:
- a Python client (grpcio), one 8 MB ExtractTones request;
- a Python client, ExtractTonesStream with the same samples in blocks of --block-bytes;
- a compiled client (target/release/bench-client, standing for a DAQ program written in a
  compiled language), both ways, driven line by line from this script.
Request messages are built before timing, as the SciPy input array is. Every way must find the
same tones.

Usage: cargo build --release -p jetloop-server -p jetloop-bench --bins
       python3 bench/spectrum_vs_scipy.py [--repeats 21] [--block-bytes 524288]
(starts its own server on a free loopback port; needs grpcio, grpcio-tools, numpy, scipy).
"""
import argparse
import importlib
import pathlib
import statistics
import subprocess
import sys
import tempfile
import time

import grpc
import numpy as np
from scipy.signal import find_peaks, welch

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "python"))
import conftest  # noqa: E402  (stub generation shared with the tests)


def main():
    ap = argparse.ArgumentParser()
    release = ROOT / "target" / "release"
    ap.add_argument("--server-bin", default=str(release / "jetloop-server"))
    ap.add_argument("--client-bin", default=str(release / "bench-client"))
    ap.add_argument("--repeats", type=int, default=21)
    ap.add_argument("--block-bytes", type=int, default=512 * 1024)
    args = ap.parse_args()
    conftest._generate_stubs()
    sp = importlib.import_module("jetloop.v1.spectrum_pb2")
    sp_grpc = importlib.import_module("jetloop.v1.spectrum_pb2_grpc")

    fs, n, nper = 204_800.0, 1 << 21, 8192
    rng = np.random.default_rng(1)
    t = np.arange(n) / fs
    x = (rng.normal(0, 5.0, n) + 300 * np.sin(2 * np.pi * 5230 * t) + 100 * np.sin(2 * np.pi * 10460 * t)).astype(np.float32)
    payload = x.astype("<f4").tobytes()
    bb = args.block_bytes - args.block_bytes % 4
    tmp = tempfile.NamedTemporaryFile(suffix=".f32")
    tmp.write(payload)
    tmp.flush()

    proc = subprocess.Popen([args.server_bin, "--listen", "127.0.0.1:0"], stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    client = None
    try:
        addr = proc.stdout.readline().strip().rsplit(" ", 1)[1]
        client = subprocess.Popen(
            [args.client_bin, addr, tmp.name, str(fs), str(nper), str(bb)],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True, bufsize=1,
        )
        opts = [("grpc.max_send_message_length", 64 << 20), ("grpc.max_receive_message_length", 64 << 20)]
        ch = grpc.insecure_channel(addr, options=opts)
        grpc.channel_ready_future(ch).result(timeout=10)
        stub = sp_grpc.SpectrumServiceStub(ch)
        welch_opts = sp.WelchOptions(window=sp.WINDOW_KIND_HANN, segment_length=nper, overlap_fraction=0.5)
        req = sp.ExtractTonesRequest(
            samples=sp.Samples(sample_rate_hz=fs, raw=sp.RawSamples(data=payload, format=sp.SAMPLE_FORMAT_F32_LE), calibration=sp.Calibration(in_pascals=True)),
            welch=welch_opts,
            include_band_levels=True,
        )
        head = sp.SampleBlock(
            request=sp.ExtractTonesRequest(
                samples=sp.Samples(sample_rate_hz=fs, raw=sp.RawSamples(format=sp.SAMPLE_FORMAT_F32_LE), calibration=sp.Calibration(in_pascals=True)),
                welch=welch_opts,
                include_band_levels=True,
            )
        )
        blocks = [head] + [sp.SampleBlock(frames=payload[i : i + bb]) for i in range(0, len(payload), bb)]

        def tones(r):
            return [round(t.frequency_hz, 6) for t in r.channels[0].tones]

        def py_unary():
            t0 = time.perf_counter()
            r = stub.ExtractTones(req)
            return time.perf_counter() - t0, r.compute_time_s, tones(r)

        def py_stream():
            t0 = time.perf_counter()
            r = stub.ExtractTonesStream(iter(blocks))
            return time.perf_counter() - t0, r.compute_time_s, tones(r)

        def compiled(mode):
            def call():
                client.stdin.write(mode + "\n")
                out = client.stdout.readline().split()
                if not out or out[0] == "error":
                    raise RuntimeError(f"bench-client: {' '.join(out)}")
                return float(out[0]) / 1e3, float(out[1]) / 1e3, [round(float(v), 6) for v in out[2:]]
            return call

        def scipy_ref():
            f, p = welch(x, fs=fs, window="hann", nperseg=nper, noverlap=nper // 2)
            find_peaks(10 * np.log10(p), prominence=6)

        ways = {
            "python unary": py_unary,
            "python stream": py_stream,
            "compiled unary": compiled("unary"),
            "compiled stream": compiled("stream"),
        }
        found = {k: f()[2] for k, f in ways.items()}
        assert all(v == found["python unary"] for v in found.values()), found
        for _ in range(3):
            for f in ways.values():
                f()
            scipy_ref()
        wall = {k: [] for k in ways}
        server = {k: [] for k in ways}
        t_scipy = []
        for _ in range(args.repeats):
            for k, f in ways.items():
                scipy_ref()
                w, s, _ = f()
                wall[k].append(w)
                server[k].append(s)
            t0 = time.perf_counter()
            scipy_ref()
            t_scipy.append(time.perf_counter() - t0)
        ch.close()
    finally:
        if client is not None:
            client.stdin.close()
            client.wait(timeout=10)
        proc.terminate()
        proc.wait(timeout=10)

    msamp = n / 1e6
    ms = statistics.median(t_scipy) * 1e3
    print(f"2^21 float32 samples at {fs:.0f} Hz, Hann {nper}, 50 % overlap, tones + bands; "
          f"{args.repeats} repeats, medians; blocks of {bb // 1024} KiB")
    print(f"  {'scipy.signal.welch + find_peaks in-process':<44} {ms:8.2f} ms  ({ms / msamp:6.2f} ms per million samples)")
    for k in ways:
        w = statistics.median(wall[k]) * 1e3
        s = statistics.median(server[k]) * 1e3
        what = "server compute" if k.endswith("unary") else "after the last block"
        print(f"  jetloop, {k + ' client':<35} {w:8.2f} ms  ({w / msamp:6.2f} ms per million samples; "
              f"{what} {s:.2f} ms)  ratio {w / ms:.3f}")
    print("  target: ratio <= 0.2")


if __name__ == "__main__":
    main()
