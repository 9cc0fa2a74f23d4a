"""Server logs written to a file or a journal (stderr not a terminal) carry no ANSI colour codes
(the escape sequences would litter log files; common practice: colour only on a terminal)."""
import subprocess
import time

import grpc

from conftest import _server_binary, start_server


def test_logs_to_a_pipe_have_no_colour_codes():
    proc, address = start_server(stderr=subprocess.PIPE)
    try:
        # Serving (and its shutdown handler in place) before it is asked to stop.
        with grpc.insecure_channel(address) as ch:
            grpc.channel_ready_future(ch).result(timeout=10)
        time.sleep(0.2)
    finally:
        proc.terminate()
    _, err = proc.communicate(timeout=30)
    assert "INFO" in err, err
    assert "\x1b[" not in err, repr(err[:300])


def _log_of_calls(rust_log, calls):
    """Starts a server with `rust_log` as RUST_LOG (None: unset, the default level), runs
    `calls(channel)` against it, stops it and returns what it wrote to stderr."""
    import os

    env = {k: v for k, v in os.environ.items() if k != "RUST_LOG"}
    if rust_log is not None:
        env["RUST_LOG"] = rust_log
    proc = subprocess.Popen([str(_server_binary()), "--listen", "127.0.0.1:0"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env)
    try:
        address = proc.stdout.readline().strip().rsplit(" ", 1)[1]
        with grpc.insecure_channel(address) as ch:
            calls(ch)
        time.sleep(0.2)
    finally:
        proc.terminate()
    return proc.communicate(timeout=30)[1]


def test_request_ids_name_the_call_in_the_logs(pb):
    def calls(ch):
        stub = pb.gas_grpc.GasDynamicsServiceStub(ch)
        _, call = stub.NormalShock.with_call(pb.gas.NormalShockRequest(upstream_mach_number=2.0),
                                             metadata=[("x-request-id", "rig-3-run-17-point-2")], timeout=10)
        assert ("x-request-id", "rig-3-run-17-point-2") in call.initial_metadata()

    err = _log_of_calls("jetloop_server=debug", calls)
    line = [l for l in err.splitlines() if "answered" in l]
    assert line and "request_id=\"rig-3-run-17-point-2\"" in line[0], err[-2000:]


def test_a_failed_call_is_logged_at_the_default_level_with_its_request_id(pb):
    # No RUST_LOG: the default level (info). The one line a failed call gets names its method,
    # its peer and the caller's request id, so a DAQ log entry can be matched to it.
    def calls(ch):
        stub = pb.gas_grpc.GasDynamicsServiceStub(ch)
        try:
            stub.NormalShock(pb.gas.NormalShockRequest(upstream_mach_number=0.5),
                             metadata=[("x-request-id", "rig-3-run-17-point-9")], timeout=10)
            raise AssertionError("a subsonic upstream Mach number must be refused")
        except grpc.RpcError as e:
            assert e.code() == grpc.StatusCode.INVALID_ARGUMENT, e

    err = _log_of_calls(None, calls)
    failed = [l for l in err.splitlines() if "call failed" in l]
    assert len(failed) == 1, err[-2000:]
    assert "request_id=rig-3-run-17-point-9" in failed[0], failed[0]
    assert "/jetloop.v1.GasDynamicsService/NormalShock" in failed[0], failed[0]
    # No per-call "answered" line at this level.
    assert not any("answered" in l for l in err.splitlines()), err[-2000:]
