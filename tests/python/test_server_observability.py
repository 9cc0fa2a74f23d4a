"""Observability from the binary: --metrics-listen serves Prometheus text that the reference
parser (prometheus_client, PyPI) reads, with the calls just made counted by method and code;
--log-format json writes one JSON object per line, with the request id of a call."""
import json
import subprocess
import urllib.request

import pytest
from prometheus_client.parser import text_string_to_metric_families

from conftest import _server_binary


@pytest.fixture()
def observed_server():
    proc = subprocess.Popen([str(_server_binary()), "--listen", "127.0.0.1:0", "--metrics-listen", "127.0.0.1:0",
                             "--log-format", "json"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={"RUST_LOG": "jetloop_server=debug", "PATH": "/usr/bin:/bin"})
    first = proc.stdout.readline()
    second = proc.stdout.readline()
    assert "listening on" in first and second.startswith("metrics on http://"), (first, second)
    yield proc, first.strip().rsplit(" ", 1)[1], second.strip().split(" ", 2)[2]
    if proc.poll() is None:
        proc.terminate()
        proc.wait(timeout=60)


def test_metrics_parse_with_the_reference_parser_and_count_the_calls(observed_server):
    proc, addr, metrics_url = observed_server
    from jetloop_client import Client, InvalidRequest

    with Client(addr, retries=0) as c:
        for _ in range(3):
            c.isentropic(mach_number=2.0)
        with pytest.raises(InvalidRequest):
            c.isentropic(mach_number=-1.0)
    text = urllib.request.urlopen(metrics_url, timeout=10).read().decode()
    families = {f.name: f for f in text_string_to_metric_families(text)}
    # prometheus_client names counters without the _total suffix.
    req = families["jetloop_requests"]
    assert req.type == "counter"
    by = {(s.labels["method"], s.labels["code"]): s.value for s in req.samples if s.name == "jetloop_requests_total"}
    m = "/jetloop.v1.GasDynamicsService/IsentropicRatios"
    assert by[(m, "OK")] == 3 and by[(m, "INVALID_ARGUMENT")] == 1, by
    hist = families["jetloop_request_duration_seconds"]
    assert hist.type == "histogram"
    count = [s.value for s in hist.samples if s.name.endswith("_count") and s.labels["method"] == m]
    assert count == [4]
    gauges = {f.name: f.samples[0].value for f in families.values() if f.type == "gauge"}
    assert gauges["jetloop_in_flight"] == 0 and gauges["jetloop_streams_open"] == 0
    assert "jetloop_sample_budget_bytes_in_use" in gauges


def test_json_logs_carry_the_request_id(observed_server):
    proc, addr, _ = observed_server
    import grpc
    from jetloop.v1 import gas_dynamics_pb2 as g, gas_dynamics_pb2_grpc as gg

    with grpc.insecure_channel(addr) as ch:
        gg.GasDynamicsServiceStub(ch).IsentropicRatios(g.IsentropicRatiosRequest(mach_number=2.0),
                                                       metadata=[("x-request-id", "run-41-point-7")], timeout=10)
    proc.terminate()
    assert proc.wait(timeout=60) == 0
    lines = [ln for ln in proc.stderr.read().splitlines() if ln.strip()]
    events = [json.loads(ln) for ln in lines]  # every line is one JSON object
    assert all("level" in e and "fields" in e for e in events)
    answered = [e for e in events if e["fields"].get("message") == "answered"]
    assert any(e["fields"].get("request_id") == "run-41-point-7" for e in answered), answered
    assert any(e.get("span", {}).get("path") == "/jetloop.v1.GasDynamicsService/IsentropicRatios" for e in answered)
