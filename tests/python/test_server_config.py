"""Server settings from flags, JETLOOP_* environment variables and a TOML file, in that order
of precedence, shown with their sources by --print-config; unknown keys are refused."""
import os
import subprocess

from conftest import _server_binary


def print_config(args, env_extra=None, tmp=None):
    env = {k: v for k, v in os.environ.items() if not k.startswith("JETLOOP_")}
    env.update(env_extra or {})
    return subprocess.run([str(_server_binary()), *args, "--print-config"], capture_output=True, text=True,
                          timeout=30, env=env)


def settings(out):
    rows = {}
    for line in out.splitlines():
        name, rest = line.split(" = ", 1)
        value, source = rest.split("    # ")
        rows[name] = (value, source)
    return rows


def test_flags_then_environment_then_file_then_defaults(tmp_path):
    f = tmp_path / "jetloop.toml"
    f.write_text("max_concurrent_requests = 64\nrequest_timeout_s = 30\nmax-request-bytes = 1048576\n"
                 "allow_insecure_network = true\n")
    r = print_config(["--config", str(f), "--request-timeout-s", "45"], {"JETLOOP_MAX_CONCURRENT": "32"})
    assert r.returncode == 0, r.stderr
    s = settings(r.stdout)
    assert s["request_timeout_s"] == ("45", "flag")  # flag over file
    assert s["max_concurrent_requests"] == ("32", "environment")  # environment over file
    assert s["max_request_bytes"] == ("1048576", "config file")
    assert s["allow_insecure_network"] == ("true", "config file")
    assert s["drain_s"] == ("20", "default")


def test_the_file_can_come_from_the_environment_and_unknown_keys_fail(tmp_path):
    f = tmp_path / "jetloop.toml"
    f.write_text("drain_s = 12\n")
    r = print_config([], {"JETLOOP_CONFIG": str(f)})
    assert r.returncode == 0 and settings(r.stdout)["drain_s"] == ("12", "config file"), r.stdout + r.stderr
    f.write_text("drain_seconds = 12\n")
    r = print_config(["--config", str(f)])
    assert r.returncode == 2 and "unknown setting 'drain_seconds'" in r.stderr, r.stderr
