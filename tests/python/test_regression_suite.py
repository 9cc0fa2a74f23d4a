"""The shipped regression cases (tests/data/*.toml: published values with their sources) run
with `jetloop check` against the release server; exit code 0 means every value is within its
tolerance. The CLI binary comes from $JETLOOP_CLI_BIN, else target/debug or target/release."""
import os
import pathlib
import subprocess

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]


def _cli():
    env = os.environ.get("JETLOOP_CLI_BIN")
    if env:
        return pathlib.Path(env)
    for profile in ("debug", "release"):
        p = ROOT / "target" / profile / "jetloop"
        if p.exists():
            return p
    raise RuntimeError("no jetloop CLI binary: run `cargo test --workspace` or `cargo build -p jetloop-cli` first")


def test_shipped_cases_pass_against_the_release_server(server_address):
    cases = sorted(str(p) for p in (ROOT / "tests" / "data").glob("*.toml"))
    assert len(cases) >= 2
    r = subprocess.run(
        [str(_cli()), "--server", f"http://{server_address}", "--json", "check", *cases],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert r.returncode == 0, r.stdout + r.stderr
    import json

    report = json.loads(r.stdout)
    assert report["failed"] == 0 and report["passed"] >= 16
    assert all(row["source"] for row in report["checks"])
