"""Shutdown under load, from the binary: eight clients keep calling (tone extraction, a few
milliseconds each) while the server gets SIGTERM. Health answers NOT_SERVING before any call is
refused; every call started before accepting ends is answered OK (none lost); every other call
is OK or a clean UNAVAILABLE, nothing else; the process exits 0."""
import importlib
import math
import signal
import subprocess
import threading
import time

import grpc

from conftest import _server_binary

NOTICE_S = 0.6


def test_sigterm_under_load_loses_no_accepted_call(pb):
    sp = importlib.import_module("jetloop.v1.spectrum_pb2")
    sp_grpc = importlib.import_module("jetloop.v1.spectrum_pb2_grpc")
    from grpc_health.v1 import health_pb2, health_pb2_grpc

    proc = subprocess.Popen([str(_server_binary()), "--listen", "127.0.0.1:0", "--drain-notice-s", str(NOTICE_S),
                             "--drain-s", "20"], stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    addr = proc.stdout.readline().strip().rsplit(" ", 1)[1]
    fs = 48_000.0
    values = [math.sin(2 * math.pi * 3000.0 * i / fs) for i in range(1 << 16)]
    req = sp.ExtractTonesRequest(samples=sp.Samples(sample_rate_hz=fs, values=sp.SampleValues(values=values),
                                                    calibration=sp.Calibration(in_pascals=True)))
    calls = []  # (start, end, code)
    lock = threading.Lock()
    stop = threading.Event()
    health = {"not_serving_at": None}

    def client():
        ch = grpc.insecure_channel(addr)
        stub = sp_grpc.SpectrumServiceStub(ch)
        unavailable_in_a_row = 0
        while not stop.is_set() and unavailable_in_a_row < 20:
            t0 = time.monotonic()
            try:
                stub.ExtractTones(req, timeout=30)
                code = grpc.StatusCode.OK
            except grpc.RpcError as e:
                code = e.code()
            t1 = time.monotonic()
            with lock:
                calls.append((t0, t1, code))
            unavailable_in_a_row = unavailable_in_a_row + 1 if code == grpc.StatusCode.UNAVAILABLE else 0
            if code == grpc.StatusCode.UNAVAILABLE:
                time.sleep(0.01)
        ch.close()

    def watch_health():
        ch = grpc.insecure_channel(addr)
        stub = health_pb2_grpc.HealthStub(ch)
        while not stop.is_set():
            try:
                r = stub.Check(health_pb2.HealthCheckRequest(service=""), timeout=5)
                if r.status == health_pb2.HealthCheckResponse.NOT_SERVING and health["not_serving_at"] is None:
                    health["not_serving_at"] = time.monotonic()
                    break
            except grpc.RpcError:
                pass
            time.sleep(0.005)
        ch.close()

    threads = [threading.Thread(target=client) for _ in range(8)] + [threading.Thread(target=watch_health)]
    for t in threads:
        t.start()
    time.sleep(1.5)
    term_at = time.monotonic()
    proc.send_signal(signal.SIGTERM)
    rc = proc.wait(timeout=60)
    time.sleep(0.5)
    stop.set()
    for t in threads:
        t.join(timeout=60)

    print(f"{len(calls)} calls; after the signal: {sum(1 for s, _, c in calls if s > term_at and c == grpc.StatusCode.OK)} OK, {sum(1 for _, _, c in calls if c != grpc.StatusCode.OK)} UNAVAILABLE; health flipped {health['not_serving_at'] - term_at:.3f} s after the signal")
    assert rc == 0, f"exit code {rc}"
    codes = {c for _, _, c in calls}
    assert codes <= {grpc.StatusCode.OK, grpc.StatusCode.UNAVAILABLE}, codes
    ok_before = sum(1 for s, _, c in calls if s < term_at and c == grpc.StatusCode.OK)
    assert ok_before > 20, f"only {ok_before} calls answered before the signal"
    # Calls started before accepting ended (the notice, less a margin for the signal's
    # delivery) were all answered.
    accepted = [(s, e, c) for s, e, c in calls if s < term_at + NOTICE_S - 0.2]
    lost = [c for _, _, c in accepted if c != grpc.StatusCode.OK]
    assert not lost, f"{len(lost)} of {len(accepted)} accepted calls were not answered OK"
    assert any(s > term_at and c == grpc.StatusCode.OK for s, _, c in calls), "no call answered during the notice"
    # Health flipped first: before the first refusal.
    refused = [e for _, e, c in calls if c == grpc.StatusCode.UNAVAILABLE]
    assert health["not_serving_at"] is not None, "health never said NOT_SERVING"
    assert health["not_serving_at"] >= term_at
    if refused:
        assert health["not_serving_at"] < min(refused), (health["not_serving_at"] - term_at, min(refused) - term_at)
