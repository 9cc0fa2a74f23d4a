"""The Python package's connection and error behaviour against the release server: addresses
with or without a scheme, a refused or silent address raising ServerUnavailable within the
connect time, an x-request-id on every call that the server echoes, requests over a server
limit raised as InvalidRequest without a retry, and only RetryInfo answers retried with the
same request id."""
import socket
import subprocess
import threading
import time

import grpc
import numpy as np
import pytest

from conftest import _server_binary
from jetloop_client import Calibration, Client, InvalidRequest, ServerBusy, ServerUnavailable
from jetloop_client.connection import parse_address


class Recorder(grpc.UnaryUnaryClientInterceptor):
    """Every unary attempt: (method, x-request-id sent, status code, x-request-id the server
    sent back in its metadata)."""

    def __init__(self, on_answer=None):
        self.attempts = []
        self.on_answer = on_answer

    def intercept_unary_unary(self, continuation, details, request):
        sent = dict(details.metadata or []).get("x-request-id")
        call = continuation(details, request)
        # An error answer comes as trailers only, so the echo is in the trailing metadata.
        echoed = dict(call.initial_metadata() or []).get("x-request-id") or \
            dict(call.trailing_metadata() or []).get("x-request-id")
        self.attempts.append((details.method, sent, call.code(), echoed))
        if self.on_answer:
            self.on_answer(call.code())
        return call


def recorded_client(address, recorder, **kw):
    channel = grpc.intercept_channel(grpc.insecure_channel(address), recorder)
    return Client(address, channel=channel, **kw)


def test_addresses_with_or_without_a_scheme(server_address):
    # The CLI's rules (client-cli/src/connect.rs endpoint_url): https means TLS, so does a CA.
    assert parse_address("127.0.0.1:50051", False) == ("127.0.0.1:50051", False)
    assert parse_address("http://rig:50051", False) == ("rig:50051", False)
    assert parse_address("HTTPS://rig:50051/", False) == ("rig:50051", True)
    assert parse_address("http://rig:50051", True) == ("rig:50051", True)
    with pytest.raises(ValueError, match="grpc://"):
        parse_address("grpc://rig:50051", False)
    port = server_address.rsplit(":", 1)[1]
    for address in (server_address, f"http://{server_address}", f"http://localhost:{port}"):
        with Client(address) as c:
            assert c.health() is True
    # https:// speaks TLS to a plaintext server: the handshake fails and says so.
    with Client(f"https://{server_address}", retries=0) as c:
        with pytest.raises(ServerUnavailable) as e:
            c.server_info()
    assert f"https://{server_address}" in str(e.value)


def test_a_refused_connection_is_server_unavailable_naming_address_and_cause():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()  # nobody listens there now
    t0 = time.monotonic()
    with Client(f"127.0.0.1:{port}") as c:
        with pytest.raises(ServerUnavailable) as e:
            c.server_info()
    # Refused at once (the OS answers RST), not after the connect or call time.
    assert time.monotonic() - t0 < 2.0
    assert not isinstance(e.value, ServerBusy)
    text = str(e.value)
    # The kernel's refusal text (ECONNREFUSED, strerror: "Connection refused").
    assert f"127.0.0.1:{port}" in text and "Connection refused" in text, text
    assert e.value.request_id and len(e.value.request_id) <= 64


def test_a_silent_server_gives_up_after_the_connect_time():
    silent = socket.socket()
    silent.bind(("127.0.0.1", 0))
    silent.listen(4)  # the kernel completes TCP handshakes; nothing ever answers HTTP/2
    try:
        address = f"127.0.0.1:{silent.getsockname()[1]}"
        t0 = time.monotonic()
        with Client(address, connect_timeout_s=1.0, timeout_s=60.0) as c:
            with pytest.raises(ServerUnavailable) as e:
                c.isentropic(mach_number=2.0)
        took = time.monotonic() - t0
        assert 0.9 < took < 10.0, took  # the connect time, far below the 60 s call deadline
        assert address in str(e.value)
    finally:
        silent.close()


def test_every_call_carries_a_request_id_the_server_echoes(server_address):
    rec = Recorder()
    with recorded_client(server_address, rec) as c:
        c.isentropic(mach_number=2.0)
        c.jet_state(0.0254, nozzle_pressure_ratio=4.0)
        with pytest.raises(InvalidRequest) as e:
            c.isentropic(mach_number=-1.0)
    sent = [a[1] for a in rec.attempts]
    assert len(rec.attempts) == 3 and all(sent) and len(set(sent)) == 3
    # The server's echo (server/src/layers/request_id.rs) is the id each call was sent with.
    assert [a[3] for a in rec.attempts] == sent
    assert e.value.request_id == sent[2] == c.last_request_id


def test_a_request_over_a_server_limit_is_invalid_and_not_retried(server_address):
    rec = Recorder()
    with recorded_client(server_address, rec, retries=3) as c:
        with pytest.raises(InvalidRequest) as e:
            # More observer angles than the server takes in one call (RESOURCE_EXHAUSTED with a
            # BadRequest detail naming the field).
            c.predict_shock_noise(list(np.linspace(30.0, 150.0, 5000)), fully_expanded_mach_number=1.5,
                                  fully_expanded_diameter_m=0.02)
    assert e.value.code == grpc.StatusCode.RESOURCE_EXHAUSTED
    assert [v.field for v in e.value.violations] == ["observer_angles_deg"]
    assert len(rec.attempts) == 1 and e.value.request_id == rec.attempts[0][1]


@pytest.fixture
def one_call_server():
    """A server taking one call at a time (the excess refused with UNAVAILABLE and RetryInfo)."""
    proc = subprocess.Popen([str(_server_binary()), "--listen", "127.0.0.1:0", "--max-concurrent-requests", "1"],
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    line = proc.stdout.readline().strip()
    assert line.startswith("jetloop-server listening on "), line
    yield line.rsplit(" ", 1)[1]
    proc.terminate()
    proc.wait(timeout=30)


def hold_the_only_slot(address, release):
    """Starts a block stream that keeps the server's one call slot until `release` is set;
    returns the thread (its result in thread.result)."""
    opened = threading.Event()

    def blocks():
        yield np.zeros((4096, 1))
        opened.set()
        release.wait(30)
        yield np.zeros((4096, 1))

    def run():
        with Client(address) as c:
            th.result = c.extract_tones_stream(blocks(), 51_200.0, 1, Calibration.pascals(), segment_length=4096)

    th = threading.Thread(target=run, daemon=True)
    th.start()
    assert opened.wait(10)
    time.sleep(0.3)  # the stream's call is admitted once its first message reaches the server
    return th


def test_only_retry_info_answers_are_retried_with_the_same_request_id(one_call_server):
    release = threading.Event()
    holder = hold_the_only_slot(one_call_server, release)
    # Without retries the shed answer is raised as ServerBusy with the server's hint.
    rec = Recorder()
    with recorded_client(one_call_server, rec, retries=0) as c:
        with pytest.raises(ServerBusy) as e:
            c.isentropic(mach_number=2.0)
    assert e.value.code == grpc.StatusCode.UNAVAILABLE and e.value.retry_after_s > 0
    assert e.value.request_id == rec.attempts[0][1] and len(rec.attempts) == 1
    # With retries: the first answer is refused, the slot is freed, a retry gets through, and
    # every attempt carries the same id.
    rec = Recorder(on_answer=lambda code: release.set())
    with recorded_client(one_call_server, rec, retries=5) as c:
        r = c.isentropic(mach_number=2.0)
    # NACA Report 1135, Table I, M = 2: p/p0 0.12780.
    assert r.pressure_ratio == pytest.approx(0.12780, rel=5e-5)
    codes = [a[2] for a in rec.attempts]
    assert codes[0] == grpc.StatusCode.UNAVAILABLE and codes[-1] == grpc.StatusCode.OK, codes
    assert len({a[1] for a in rec.attempts}) == 1
    holder.join(30)
    assert holder.result.channels
