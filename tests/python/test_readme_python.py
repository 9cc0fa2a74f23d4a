"""The README's Python path, run as written: its stub-generation commands (with the output folder
moved to a temporary one) and each of its Python snippets, against a real server (only the
address "127.0.0.1:50051" is replaced by the test server's). The printed values are checked
against sources outside the project."""
import math
import pathlib
import re
import subprocess
import sys

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]
README = (ROOT / "README.md").read_text()


def blocks(lang):
    return re.findall(r"^```" + lang + r"\n(.*?)^```", README, flags=re.S | re.M)


def sh_commands():
    out = []
    for b in blocks("sh"):
        for line in b.replace("\\\n", " ").splitlines():
            code = line.split(" #")[0].strip()
            if code and not code.startswith("#"):
                out.append(code)
    return out


@pytest.fixture(scope="module")
def stubs(tmp_path_factory):
    """Runs the README's mkdir and grpc_tools.protoc lines with build/python -> a temp folder."""
    out = tmp_path_factory.mktemp("readme_stubs")
    steps = [c for c in sh_commands() if c.startswith(("mkdir -p build/python", "python3 -m grpc_tools.protoc"))]
    assert len(steps) == 2, steps
    assert any(c.startswith('export PYTHONPATH="$PWD/build/python"') for c in sh_commands())
    for c in steps:
        c = c.replace("build/python", str(out)).replace("python3 ", f"{sys.executable} ", 1)
        subprocess.run(c, shell=True, cwd=ROOT, check=True)
    return out


def run_snippet(code, stubs, address):
    code = code.replace("127.0.0.1:50051", address)
    r = subprocess.run(
        [sys.executable, "-c", code],
        env={"PYTHONPATH": str(stubs), "PATH": "/usr/bin:/bin"},
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert r.returncode == 0, r.stderr
    return r.stdout


def snippet(marker):
    found = [b for b in blocks("python") if marker in b]
    assert len(found) == 1, marker
    return found[0]


def test_readme_has_four_python_snippets():
    assert len(blocks("python")) == 4


def test_package_snippet(stubs, server_address):
    # Runs with the installed package (clients/python; .ci/run installs it).
    out = run_snippet(snippet("from jetloop_client import"), stubs, server_address).strip().splitlines()
    # Mj = sqrt(5 (4^(2/7) - 1)) (NACA Report 1135, eq. 44); 1 Pa rms = 93.98 dB re 20 uPa.
    assert out[0] == f"Mj {math.sqrt(5 * (4 ** (2 / 7) - 1)):.5f}"
    m = re.match(r"([\d.]+) Hz at ([\d.]+) dB re 20 uPa", out[1])
    assert m and float(m.group(1)) == pytest.approx(4000.0, abs=0.1)
    assert float(m.group(2)) == pytest.approx(93.98, abs=0.05)
    assert out[2] == "conditions.nozzle.round_convergent.exit_diameter_m"


def test_jet_state_snippet(stubs, server_address):
    mj, dj, uj = map(float, run_snippet(snippet("JetState(g.JetStateRequest(conditions=cond))"), stubs, server_address).split())
    # Isentropic closed form (NACA Report 1135, eq. 44): Mj = sqrt(2/(g-1) (NPR^((g-1)/g) - 1)),
    # gamma 1.4, NPR 4.
    expected = math.sqrt(2 / 0.4 * (4.0 ** (0.4 / 1.4) - 1))
    assert mj == pytest.approx(expected, rel=1e-9)
    # A convergent nozzle: Dj/D = sqrt(A*/A * A/A*(Mj)) (area ratio, NACA 1135 eq. 80) > 1.
    area = (1 / mj) * ((2 + 0.4 * mj * mj) / 2.4) ** (2.4 / 0.8)
    assert dj == pytest.approx(0.0254 * math.sqrt(area), rel=1e-9)
    # Uj = Mj sqrt(gamma R Tj), Tj = T0 / (1 + (gamma-1)/2 Mj^2), R = 287.05 J/(kg K)
    tj = 290.0 / (1 + 0.2 * mj * mj)
    assert uj == pytest.approx(mj * math.sqrt(1.4 * 287.05 * tj), rel=1e-3)


def test_streaming_snippet(stubs, server_address):
    out = run_snippet(snippet("ExtractTonesStream(messages(daq_blocks()))"), stubs, server_address)
    lines = out.strip().splitlines()
    assert len(lines) == 2, out
    for line in lines:
        m = re.match(r"channel \d: ([\d.]+) Hz at ([\d.]+) dB re 20 uPa", line)
        assert m, line
        # The stand-in DAQ's tone: 5200 Hz, 100 Pa amplitude -> 20 log10((100 / sqrt 2) / 20e-6)
        # = 130.97 dB re 20 uPa (definition of SPL, IEC 61672-1).
        assert float(m.group(1)) == pytest.approx(5200.0, abs=1.0)
        assert float(m.group(2)) == pytest.approx(20 * math.log10(100 / math.sqrt(2) / 20e-6), abs=0.2)


def test_field_violation_snippet(stubs, server_address):
    out = run_snippet(snippet("rpc_status.from_call(e)"), stubs, server_address)
    lines = out.strip().splitlines()
    assert lines[0] == "INVALID_ARGUMENT"
    assert any("exit_diameter_m" in l and "-1" in l for l in lines[1:]), out
    assert any("nozzle_pressure_ratio" in l for l in lines[1:]), out
