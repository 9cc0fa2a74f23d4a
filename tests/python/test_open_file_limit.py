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


@pytest.mark.skipif(shutil.which("prlimit") is None, reason="prlimit (util-linux) not installed")
def test_health_and_calls_answer_beyond_the_open_file_limit(pb):
    from grpc_health.v1 import health_pb2, health_pb2_grpc

    proc = subprocess.Popen(
        ["prlimit", "--nofile=128", "--", str(_server_binary()), "--listen", "127.0.0.1:0", "--handshake-timeout-s", "60"],
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
    )
    socks = []
    try:
        addr = proc.stdout.readline().strip().rsplit(" ", 1)[1]
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
