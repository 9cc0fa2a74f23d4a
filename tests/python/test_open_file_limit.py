"""A server run with a low open-file limit (prlimit --nofile=128) keeps answering health checks
and real calls while more bare TCP connections than the limit allows are held open and silent
(hostile-client issue, item 1). The normal-shock value is NACA Report 1135's M2 = 0.57735 at
M1 = 2."""
import shutil
import socket
import subprocess

import grpc
import pytest

from conftest import _server_binary


def _start_limited(*args):
    """The release server under `prlimit --nofile=128` on a free port, with its address."""
    proc = subprocess.Popen(
        ["prlimit", "--nofile=128", "--", str(_server_binary()), "--listen", "127.0.0.1:0", *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
    )
    return proc, proc.stdout.readline().strip().rsplit(" ", 1)[1]


@pytest.mark.skipif(shutil.which("prlimit") is None, reason="prlimit (util-linux) not installed")
def test_health_and_calls_answer_beyond_the_open_file_limit(pb):
    from grpc_health.v1 import health_pb2, health_pb2_grpc

    proc, addr = _start_limited("--handshake-timeout-s", "60")
    socks = []
    try:
        host, port = addr.rsplit(":", 1)
        for _ in range(300):  # beyond 128 descriptors
            try:
                socks.append(socket.create_connection((host, int(port)), timeout=2))
            except OSError:
                break
        assert len(socks) > 128
        ch = grpc.insecure_channel(addr)
        r = health_pb2_grpc.HealthStub(ch).Check(health_pb2.HealthCheckRequest(), timeout=5)
        assert r.status == health_pb2.HealthCheckResponse.SERVING
        gas = pb.gas
        shock = pb.gas_grpc.GasDynamicsServiceStub(ch).NormalShock(gas.NormalShockRequest(upstream_mach_number=2.0), timeout=5)
        assert abs(shock.downstream_mach_number - 0.57735) < 1e-5
        ch.close()
    finally:
        for s in socks:
            s.close()
        proc.terminate()
        proc.wait(timeout=30)


def _cpu_seconds(pid):
    import os

    with open(f"/proc/{pid}/stat") as f:
        parts = f.read().rsplit(")", 1)[1].split()
    return (int(parts[11]) + int(parts[12])) / os.sysconf("SC_CLK_TCK")


@pytest.mark.skipif(shutil.which("prlimit") is None, reason="prlimit (util-linux) not installed")
def test_accept_errors_back_off_instead_of_spinning(pb):
    """With the connection cap set above the open-file limit, accepting fails with EMFILE once
    the descriptors run out; the accept loop must wait between attempts (the server used to
    spin a whole core, silently). Check: the server's own CPU time over 2 s of held
    connections stays below a third of one core (a spin uses all of it)."""
    import time

    proc, addr = _start_limited("--max-connections", "1000", "--handshake-timeout-s", "60")
    socks = []
    try:
        host, port = addr.rsplit(":", 1)
        for _ in range(300):
            try:
                socks.append(socket.create_connection((host, int(port)), timeout=2))
            except OSError:
                break
        time.sleep(0.5)
        c0, t0 = _cpu_seconds(proc.pid), time.monotonic()
        time.sleep(2.0)
        share = (_cpu_seconds(proc.pid) - c0) / (time.monotonic() - t0)
        assert share < 0.33, f"server used {share:.0%} of a core while the descriptors were exhausted"
    finally:
        for s in socks:
            s.close()
        proc.terminate()
        proc.wait(timeout=30)
