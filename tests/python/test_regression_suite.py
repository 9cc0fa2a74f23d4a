"""The shipped regression cases (tests/data/*.toml: published values with their sources) run
with `jetloop check` against the release server; exit code 0 means every value is within its
tolerance. The CLI binary comes from $JETLOOP_CLI_BIN, else target/debug or target/release."""
import json
import pathlib
import subprocess

from conftest import _cli_binary

ROOT = pathlib.Path(__file__).resolve().parents[2]


def test_shipped_cases_pass_against_the_release_server(server_address):
    cases = sorted(str(p) for p in (ROOT / "tests" / "data").glob("*.toml"))
    assert len(cases) >= 2
    r = subprocess.run(
        [str(_cli_binary()), "--server", f"http://{server_address}", "--json", "check", *cases],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert r.returncode == 0, r.stdout + r.stderr
    report = json.loads(r.stdout)
    assert report["failed"] == 0 and report["passed"] >= 16
    assert all(row["source"] for row in report["checks"])
