"""The examples of the Python package (clients/python/examples) run against the release server
and their outputs are checked against closed forms."""
import csv
import math
import pathlib
import re
import subprocess
import sys

import pytest

from conftest import _cli_binary

EXAMPLES = pathlib.Path(__file__).resolve().parents[2] / "clients" / "python" / "examples"


def run(script, *args):
    r = subprocess.run([sys.executable, str(EXAMPLES / script), *args], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    return r.stdout


def test_npr_sweep_to_csv(server_address, tmp_path):
    out = tmp_path / "map.csv"
    run("npr_sweep_to_csv.py", str(out), "--server", server_address, "--from-npr", "1.5", "--to-npr", "6", "--count", "46")
    rows = list(csv.DictReader(open(out)))
    assert len(rows) == 46
    by_npr = {round(float(r["npr"]), 6): r for r in rows}
    # Mj = sqrt(5 (NPR^(2/7) - 1)) (NACA Report 1135, eq. 44) at NPR 4.
    assert float(by_npr[4.0]["fully_expanded_mach_number"]) == pytest.approx(math.sqrt(5 * (4 ** (2 / 7) - 1)), rel=1e-5)
    # Below the critical NPR 1.893 (NACA Report 1135, M = 1) there is no screech.
    assert by_npr[1.5]["powell_hz"] == ""
    powell = [float(r["powell_hz"]) for r in rows if r["powell_hz"]]
    assert all(b < a for a, b in zip(powell, powell[1:]))
    # The loop order n = 1 is Powell's fundamental; n = 2 twice it (tau = n / f).
    r4 = by_npr[4.0]
    assert float(r4["loop_n2_hz"]) == pytest.approx(2 * float(r4["loop_n1_hz"]), rel=1e-5)


def test_tones_from_wav(server_address, tmp_path):
    wav = tmp_path / "demo.wav"
    subprocess.run([str(_cli_binary()), "synth", str(wav), "--seconds", "1"], check=True, capture_output=True)
    out = run("tones_from_wav.py", str(wav), "--pa-per-unit", "2000", "--server", server_address)
    # The demo's fundamental: 5230 Hz at 138 dB re 20 uPa (synth defaults), harmonic 9 dB below.
    m = re.search(r"tone\s+([\d.]+) Hz\s+([\d.]+) dB", out)
    assert m, out
    assert float(m.group(1)) == pytest.approx(5230.0, rel=1e-4)
    assert float(m.group(2)) == pytest.approx(138.0, rel=0.2 / 138)


def test_daq_loop(server_address):
    out = run("daq_loop.py", "--server", server_address, "--seconds", "1")
    lines = out.strip().splitlines()
    assert len(lines) == 2
    for line in lines:
        m = re.match(r"channel \d: ([\d.]+) Hz at ([\d.]+) dB re 20 uPa", line)
        assert m, line
        # 100 Pa amplitude: 20 log10((100 / sqrt 2) / 20e-6) = 130.97 dB re 20 uPa (SPL definition).
        assert float(m.group(1)) == pytest.approx(5200.0, rel=1e-4)
        assert abs(float(m.group(2)) - 20 * math.log10(100 / math.sqrt(2) / 20e-6)) < 0.1
