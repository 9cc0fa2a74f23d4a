"""The server binary's exposure rules: it refuses a non-loopback address without tokens unless
told it is on a closed network, reads a token file, and the CLI sends the token."""
import subprocess

from conftest import _cli_binary, _server_binary

TOKEN = "lab-7-rig-token-0123456789"


def test_a_non_loopback_address_without_tokens_is_refused():
    r = subprocess.run([str(_server_binary()), "--listen", "0.0.0.0:0"], capture_output=True, text=True, timeout=30)
    assert r.returncode == 2
    assert "--token-file" in r.stderr and "--allow-insecure-network" in r.stderr, r.stderr


def test_short_tokens_are_refused(tmp_path):
    f = tmp_path / "tokens"
    f.write_text("# lab tokens\nshort\n")
    r = subprocess.run([str(_server_binary()), "--listen", "127.0.0.1:0", "--token-file", str(f)],
                       capture_output=True, text=True, timeout=30)
    assert r.returncode == 2 and "shorter than 16" in r.stderr, r.stderr


def test_the_cli_sends_its_token(tmp_path):
    f = tmp_path / "tokens"
    f.write_text(f"# lab tokens\n{TOKEN}\n")
    proc = subprocess.Popen([str(_server_binary()), "--listen", "0.0.0.0:0", "--token-file", str(f)],
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    try:
        port = proc.stdout.readline().strip().rsplit(":", 1)[1]
        url = f"http://127.0.0.1:{port}"
        cli = str(_cli_binary())
        without = subprocess.run([cli, "--server", url, "info"], capture_output=True, text=True, timeout=30)
        assert without.returncode == 5 and "Unauthenticated" in without.stderr, without.stderr
        with_file = subprocess.run([cli, "--server", url, "--token-file", str(f), "info"], capture_output=True, text=True, timeout=30)
        assert with_file.returncode == 0, with_file.stderr
        env_token = subprocess.run([cli, "--server", url, "info"], capture_output=True, text=True, timeout=30,
                                   env={"JETLOOP_TOKEN": TOKEN, "PATH": "/usr/bin:/bin"})
        assert env_token.returncode == 0, env_token.stderr
        health = subprocess.run([cli, "--server", url, "health"], capture_output=True, text=True, timeout=30)
        assert health.returncode == 0, health.stderr
        # The Python package sends it too.
        from jetloop_client import Client, JetloopError

        with Client(f"127.0.0.1:{port}", token=TOKEN) as c:
            assert c.server_info().server_version
        with Client(f"127.0.0.1:{port}") as c:
            try:
                c.server_info()
                raise AssertionError("a call without the token was answered")
            except JetloopError as e:
                assert e.code.name == "UNAUTHENTICATED"
    finally:
        proc.terminate()
        proc.wait(timeout=30)
