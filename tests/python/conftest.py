"""Fixtures for the cross-language tests: Python stubs generated from proto/ with grpcio-tools,
and a real jetloop-server started on a free loopback port.

The server binary comes from $JETLOOP_SERVER_BIN (CI passes the release build), else
target/release/jetloop-server, else target/debug/jetloop-server.
"""
import importlib
import os
import pathlib
import subprocess
import sys

import grpc
import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]
PROTO_DIR = ROOT / "proto"
GEN_DIR = pathlib.Path(__file__).resolve().parent / "_gen"


def _generate_stubs():
    from grpc_tools import protoc

    GEN_DIR.mkdir(exist_ok=True)
    protos = sorted(str(p.relative_to(PROTO_DIR)) for p in (PROTO_DIR / "jetloop" / "v1").glob("*.proto"))
    include = pathlib.Path(protoc.__file__).parent / "_proto"
    rc = protoc.main(
        ["protoc", f"-I{PROTO_DIR}", f"-I{include}", f"--python_out={GEN_DIR}", f"--grpc_python_out={GEN_DIR}", *protos]
    )
    if rc != 0:
        raise RuntimeError(f"grpc_tools.protoc failed with {rc}")
    for d in (GEN_DIR / "jetloop", GEN_DIR / "jetloop" / "v1"):
        (d / "__init__.py").touch()
    if str(GEN_DIR) not in sys.path:
        sys.path.insert(0, str(GEN_DIR))


def _binary(name, env_var, profiles, hint):
    """A built binary: $env_var, else the first of target/<profile>/<name> that exists."""
    env = os.environ.get(env_var)
    if env:
        return pathlib.Path(env)
    for profile in profiles:
        p = ROOT / "target" / profile / name
        if p.exists():
            return p
    raise RuntimeError(f"no {name} binary: {hint}")


def _server_binary():
    return _binary("jetloop-server", "JETLOOP_SERVER_BIN", ("release", "debug"),
                   "run `cargo build --release -p jetloop-server` first")


def _cli_binary():
    """The jetloop CLI (cargo test builds the debug one)."""
    return _binary("jetloop", "JETLOOP_CLI_BIN", ("debug", "release"),
                   "run `cargo test --workspace` or `cargo build -p jetloop-cli` first")


def start_server(stderr=subprocess.DEVNULL):
    """Starts jetloop-server on 127.0.0.1:0; returns the process and host:port from its first
    stdout line."""
    proc = subprocess.Popen(
        [str(_server_binary()), "--listen", "127.0.0.1:0"],
        stdout=subprocess.PIPE,
        stderr=stderr,
        text=True,
    )
    line = proc.stdout.readline().strip()
    if not line.startswith("jetloop-server listening on "):
        proc.kill()
        raise RuntimeError(f"unexpected first line from the server: {line!r}")
    return proc, line.rsplit(" ", 1)[1]


@pytest.fixture(scope="session")
def pb():
    """The generated modules: pb.gas (gas_dynamics_pb2), pb.gas_grpc, pb.common, pb.info, pb.info_grpc."""
    _generate_stubs()

    class Modules:
        gas = importlib.import_module("jetloop.v1.gas_dynamics_pb2")
        gas_grpc = importlib.import_module("jetloop.v1.gas_dynamics_pb2_grpc")
        common = importlib.import_module("jetloop.v1.common_pb2")
        info = importlib.import_module("jetloop.v1.info_pb2")
        info_grpc = importlib.import_module("jetloop.v1.info_pb2_grpc")

    return Modules


@pytest.fixture(scope="session")
def server_address():
    """Starts jetloop-server on 127.0.0.1:0 and yields host:port from its first stdout line."""
    proc, address = start_server()
    try:
        yield address
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
    assert proc.returncode == 0, f"server did not shut down cleanly on SIGTERM: {proc.returncode}"


@pytest.fixture(scope="session")
def channel(server_address):
    ch = grpc.insecure_channel(server_address)
    grpc.channel_ready_future(ch).result(timeout=10)
    yield ch
    ch.close()


@pytest.fixture(scope="module")
def sp(pb, channel):
    """The spectrum messages module and a SpectrumService stub on the test server."""
    mod = importlib.import_module("jetloop.v1.spectrum_pb2")
    grpc_mod = importlib.import_module("jetloop.v1.spectrum_pb2_grpc")
    return mod, grpc_mod.SpectrumServiceStub(channel)
