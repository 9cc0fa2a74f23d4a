"""Figures for careless and hostile clients, measured on a release server binary:

1. idle connections: bare TCP connections beyond the open-file limit (server run under
   `prlimit --nofile=256`), then whether health and a real call still answer, and how many
   connections the server keeps;
2. a client that never reads: four large ExtractTones answers requested over raw HTTP/2 with a
   zero flow-control window; server RSS while they are held and after the call's deadline;
3. stalled block streams: streams that send 64 MiB of samples each and then stall; RSS;
4. expired calls: twelve heavy FitStages calls with 150 ms deadlines; server CPU seconds spent
   after the last caller gave up;
5. shutdown with an idle connection: time from SIGTERM to exit.

Usage:
    cargo build --release -p jetloop-server
    pip install grpcio grpcio-tools h2 numpy
    python3 bench/hostile_clients_probe.py target/release/jetloop-server [OLD_SERVER_BINARY]

Each figure is printed per binary, so an older build can be compared with the current one.
Invented load only; nothing here is a physics check.
"""
import os
import pathlib
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time

import grpc
import numpy as np

ROOT = pathlib.Path(__file__).resolve().parents[1]


def stubs():
    from grpc_tools import protoc

    gen = pathlib.Path(tempfile.mkdtemp(prefix="jetloop-probe-"))
    inc = pathlib.Path(protoc.__file__).parent / "_proto"
    protos = sorted(str(p.relative_to(ROOT / "proto")) for p in (ROOT / "proto/jetloop/v1").glob("*.proto"))
    assert protoc.main(["protoc", f"-I{ROOT / 'proto'}", f"-I{inc}", f"--python_out={gen}", f"--grpc_python_out={gen}", *protos]) == 0
    for d in (gen / "jetloop", gen / "jetloop/v1"):
        (d / "__init__.py").touch()
    sys.path.insert(0, str(gen))
    import importlib

    return {n: importlib.import_module(f"jetloop.v1.{n}") for n in ("spectrum_pb2", "spectrum_pb2_grpc", "staging_pb2", "staging_pb2_grpc", "common_pb2")}


def start(binary, *args, nofile=None):
    cmd = [binary, "--listen", "127.0.0.1:0", *args]
    if nofile:
        cmd = ["prlimit", f"--nofile={nofile}", "--", *cmd]
    p = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    line = p.stdout.readline().strip()
    addr = line.rsplit(" ", 1)[1]
    return p, addr


def server_pid(p):
    # Under prlimit the server replaces prlimit (exec), so the pid is the same.
    return p.pid


def rss_mib(pid):
    with open(f"/proc/{pid}/status") as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024
    return float("nan")


def cpu_s(pid):
    with open(f"/proc/{pid}/stat") as f:
        parts = f.read().rsplit(")", 1)[1].split()
    ticks = os.sysconf("SC_CLK_TCK")
    return (int(parts[11]) + int(parts[12])) / ticks


def fds(pid):
    return len(os.listdir(f"/proc/{pid}/fd"))


def stop(p):
    p.send_signal(signal.SIGTERM)
    try:
        p.wait(timeout=30)
    except subprocess.TimeoutExpired:
        p.kill()
        p.wait()


def health_and_call(addr, pb, timeout=3.0):
    ch = grpc.insecure_channel(addr)
    ok_health = ok_call = False
    try:
        from grpc_health.v1 import health_pb2, health_pb2_grpc  # noqa: F401

        r = health_pb2_grpc.HealthStub(ch).Check(health_pb2.HealthCheckRequest(), timeout=timeout)
        ok_health = r.status == 1
    except Exception:
        pass
    try:
        s = pb["spectrum_pb2"]
        x = np.sin(np.arange(8192) * 0.3)
        req = s.ExtractTonesRequest(samples=s.Samples(sample_rate_hz=48000, values=s.SampleValues(values=x.tolist()), calibration=s.Calibration(in_pascals=True)))
        pb["spectrum_pb2_grpc"].SpectrumServiceStub(ch).ExtractTones(req, timeout=timeout)
        ok_call = True
    except Exception:
        pass
    ch.close()
    return ok_health, ok_call


def idle_connections(binary, pb):
    p, addr = start(binary, nofile=256)
    host, port = addr.rsplit(":", 1)
    socks = []
    for _ in range(600):
        try:
            s = socket.create_connection((host, int(port)), timeout=1)
            socks.append(s)
        except OSError:
            break
    time.sleep(1.0)
    held = fds(server_pid(p))
    t0 = time.time()
    h, c = health_and_call(addr, pb)
    dt = time.time() - t0
    cpu0 = cpu_s(server_pid(p))
    time.sleep(2.0)
    spin = (cpu_s(server_pid(p)) - cpu0) / 2.0
    for s in socks:
        s.close()
    stop(p)
    return f"{len(socks)} bare connections opened, server holds {held} fds (limit 256); health {'answers' if h else 'FAILS'}, call {'succeeds' if c else 'FAILS'} ({dt:.2f} s); server CPU while idle {spin * 100:.0f} % of a core"


def slow_reader(binary, pb):
    import h2.config
    import h2.connection

    p, addr = start(binary, "--request-timeout-s", "5")
    pid = server_pid(p)
    host, port = addr.rsplit(":", 1)
    base = rss_mib(pid)
    s = pb["spectrum_pb2"]
    x = np.random.default_rng(1).standard_normal(1 << 22).astype("<f4")
    req = s.ExtractTonesRequest(
        samples=s.Samples(sample_rate_hz=204800, raw=s.RawSamples(format=s.SAMPLE_FORMAT_F32_LE, data=x.tobytes()), calibration=s.Calibration(in_pascals=True)),
        welch=s.WelchOptions(segment_length=1 << 20),
        psd_output=s.PsdOutputOptions(include=True),
    ).SerializeToString()
    body = b"\x00" + len(req).to_bytes(4, "big") + req
    sock = socket.create_connection((host, int(port)))
    conn = h2.connection.H2Connection(config=h2.config.H2Configuration(client_side=True))
    conn.initiate_connection()
    conn.update_settings({h2.settings.SettingCodes.INITIAL_WINDOW_SIZE: 0})
    conn.increment_flow_control_window(1 << 30)
    sock.sendall(conn.data_to_send())
    for k in range(4):
        sid = conn.get_next_available_stream_id()
        conn.send_headers(sid, [(":method", "POST"), (":scheme", "http"), (":path", "/jetloop.v1.SpectrumService/ExtractTones"), (":authority", addr), ("content-type", "application/grpc"), ("te", "trailers"), ("grpc-timeout", "5S")])
        view = memoryview(body)
        while view:
            n = min(len(view), conn.local_flow_control_window(sid), conn.max_outbound_frame_size)
            if n == 0:
                sock.settimeout(5)
                data = sock.recv(1 << 16)
                for ev in conn.receive_data(data):
                    pass
                sock.sendall(conn.data_to_send())
                continue
            conn.send_data(sid, bytes(view[:n]), end_stream=(n == len(view)))
            view = view[n:]
            sock.sendall(conn.data_to_send())
    peak = base
    t0 = time.time()
    while time.time() - t0 < 4:
        peak = max(peak, rss_mib(pid))
        time.sleep(0.2)
    held = rss_mib(pid)
    time.sleep(4)
    after = rss_mib(pid)
    sock.close()
    stop(p)
    return f"RSS baseline {base:.0f} MiB, peak {peak:.0f} MiB, while unread {held:.0f} MiB, 8 s later (deadline 5 s) {after:.0f} MiB"


def stalled_streams(binary, pb, budget_args):
    p, addr = start(binary, *budget_args)
    pid = server_pid(p)
    base = rss_mib(pid)
    s = pb["spectrum_pb2"]
    ch = grpc.insecure_channel(addr, options=[("grpc.max_send_message_length", 1 << 28)])
    stub = pb["spectrum_pb2_grpc"].SpectrumServiceStub(ch)
    block = np.zeros(1 << 23, dtype="<f4").tobytes()  # 32 MiB (under the 64 MiB message limit)
    stall = threading.Event()
    results = []

    def gen():
        yield s.SampleBlock(request=s.ExtractTonesRequest(samples=s.Samples(sample_rate_hz=204800, raw=s.RawSamples(format=s.SAMPLE_FORMAT_F32_LE), calibration=s.Calibration(in_pascals=True))))
        yield s.SampleBlock(frames=block)
        yield s.SampleBlock(frames=block)
        stall.wait()

    def one():
        try:
            stub.ExtractTonesStream(gen(), timeout=8)
            results.append("ok")
        except grpc.RpcError as e:
            results.append(e.code().name)

    threads = [threading.Thread(target=one) for _ in range(8)]
    for t in threads:
        t.start()
    peak = base
    t0 = time.time()
    while time.time() - t0 < 6:
        peak = max(peak, rss_mib(pid))
        time.sleep(0.2)
    stall.set()
    for t in threads:
        t.join()
    ch.close()
    stop(p)
    codes = {c: results.count(c) for c in set(results)}
    return f"8 streams x 2 blocks of 32 MiB then stalled: RSS baseline {base:.0f} MiB, peak {peak:.0f} MiB; outcomes {codes}"


def expired_calls(binary, pb):
    p, addr = start(binary)
    pid = server_pid(p)
    st = pb["staging_pb2"]
    c = pb["common_pb2"]
    pts = []
    for k in range(100_000):
        npr = 2.2 + 2.8 * k / 100_000
        stage = 6 * k // 100_000
        f = 6000.0 / (npr - 1.0) * 1.12 ** (stage % 2 * 2 - 1 + stage // 2)
        pts.append(st.MeasuredTone(x=npr, frequency_hz=f))
    req = st.FitStagesRequest(
        control=st.CONTROL_VARIABLE_NOZZLE_PRESSURE_RATIO,
        points=pts,
        jet=c.JetConditions(nozzle=c.Nozzle(round_convergent=c.RoundConvergentNozzle(exit_diameter_m=0.0254)), operating_point=c.OperatingPoint(nozzle_pressure_ratio=3.0)),
        options=st.FitOptions(max_loop_order=50),
    )
    ch = grpc.insecure_channel(addr, options=[("grpc.max_send_message_length", 1 << 28), ("grpc.max_receive_message_length", 1 << 28)])
    stub = pb["staging_pb2_grpc"].StagingServiceStub(ch)
    # One normal call for its duration.
    t = time.time()
    stub.FitStages(req, timeout=120)
    normal = time.time() - t
    futs = [stub.FitStages.future(req, timeout=0.15) for _ in range(12)]
    for f in futs:
        try:
            f.result()
        except grpc.RpcError:
            pass
    cpu0 = cpu_s(pid)
    time.sleep(10)
    orphan = cpu_s(pid) - cpu0
    t = time.time()
    stub.FitStages(req, timeout=120)
    after = time.time() - t
    ch.close()
    stop(p)
    return f"normal heavy call {normal:.2f} s; CPU spent in the 10 s after 12 expired calls {orphan:.2f} s; next heavy call {after:.2f} s"


def shutdown_idle(binary, pb):
    p, addr = start(binary)
    health_and_call(addr, pb)  # the server is up and its signal handler installed
    host, port = addr.rsplit(":", 1)
    sock = socket.create_connection((host, int(port)))
    time.sleep(0.5)
    t = time.time()
    p.send_signal(signal.SIGTERM)
    try:
        p.wait(timeout=40)
        out = f"exit {p.returncode} after {time.time() - t:.1f} s"
    except subprocess.TimeoutExpired:
        p.kill()
        p.wait()
        out = f"still running {time.time() - t:.0f} s after SIGTERM (killed)"
    sock.close()
    return out


def budget_args(binary):
    """A 256 MiB sample budget where the binary has the flag (older builds have none)."""
    h = subprocess.run([binary, "--help"], capture_output=True, text=True).stdout
    return ["--sample-budget-mib", "256"] if "--sample-budget-mib" in h else []


def main():
    pb = stubs()
    for binary in sys.argv[1:]:
        print(f"== {binary}")
        for name, f in [
            ("idle connections", lambda: idle_connections(binary, pb)),
            ("never-reading client", lambda: slow_reader(binary, pb)),
            ("stalled streams", lambda: stalled_streams(binary, pb, budget_args(binary))),
            ("expired calls", lambda: expired_calls(binary, pb)),
            ("shutdown, idle connection", lambda: shutdown_idle(binary, pb)),
        ]:
            try:
                print(f"  {name}: {f()}", flush=True)
            except Exception as e:  # a probe that breaks says so and the others go on
                print(f"  {name}: probe failed: {e!r}", flush=True)


if __name__ == "__main__":
    main()
