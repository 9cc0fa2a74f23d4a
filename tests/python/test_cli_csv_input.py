"""CSV recordings written by other programs, read by the jetloop CLI: the samples it sends
reach the server unchanged when their rms (about the mean) equals numpy's over the same
numbers, and the sample rate it derives from a time column equals the one the stamps were
made with.

Writers (the references): pandas DataFrame.to_csv(sep=';', decimal=',') for a European
export, and Python's csv module (RFC 4180 quoting) for a tab-separated file with quoted names.
"""
import csv
import json
import re
import subprocess

import numpy as np
import pandas as pd
import pytest

from conftest import _cli_binary

FS = 25_600.0  # Hz
N = 12_800


def _tones(server_address, path, *extra):
    """Runs `jetloop --json tones PATH --in-pascals ...`; returns (JSON answer, stderr)."""
    out = subprocess.run(
        [str(_cli_binary()), "--server", f"http://{server_address}", "--json", "tones", str(path), "--in-pascals", *extra],
        capture_output=True,
        text=True,
        timeout=120,
    )
    return out, out.stderr


def _signals():
    rng = np.random.default_rng(7)
    t = np.arange(N) / FS
    a = 3.0 * np.sin(2 * np.pi * 2_000.0 * t) + rng.normal(0.0, 0.4, N)
    b = 0.02 * rng.standard_normal(N) + 0.5  # offset: rms is about the mean
    return t, a, b


def _rms_about_mean(x):
    return float(np.std(x))  # numpy: sqrt(mean((x - mean(x))**2))


def test_pandas_semicolon_decimal_comma_export_with_a_time_column(server_address, tmp_path):
    t, a, b = _signals()
    df = pd.DataFrame({"Time (s)": t, 'p; mic "A" [Pa]': a, "p2 [Pa]": b})
    path = tmp_path / "eu.csv"
    df.to_csv(path, sep=";", decimal=",", index=False)
    text = path.read_text()
    assert ";" in text.splitlines()[1] and "," in text.splitlines()[1], "a European export"

    out, err = _tones(server_address, path)
    assert out.returncode == 0, err
    answer = json.loads(out.stdout)
    rows = answer["summary"]
    assert [r["channel"] for r in rows] == ['p; mic "A" [Pa]', "p2 [Pa]"]
    # Same numbers as pandas wrote (shortest round-trip form): numpy's rms to 1e-9.
    for r, x in zip(rows, (a, b)):
        assert r["rms_pa"] == pytest.approx(_rms_about_mean(x), rel=1e-9)
    # The sample rate derived from the time column: the stamps were i / FS.
    rate = float(re.search(r"'Time \(s\)': ([0-9.e+-]+) Hz", err).group(1))
    assert rate == pytest.approx(FS, rel=1e-9)
    assert "delimiter ';', decimal comma" in err
    # The tone sits at 2000 Hz, which a wrong rate would move.
    assert rows[0]["strongest_tone_hz"] == pytest.approx(2_000.0, abs=FS / 2048)

    # A rate that contradicts the time column is refused with both values.
    out, err = _tones(server_address, path, "--sample-rate-hz", "24000")
    assert out.returncode == 2
    assert "--sample-rate-hz 24000 disagrees" in err and "which gives 25600" in err


def test_python_csv_module_tab_file_with_quoted_names(server_address, tmp_path):
    _, a, b = _signals()
    path = tmp_path / "tab.txt"
    with open(path, "w", newline="") as f:
        w = csv.writer(f, delimiter="\t", quoting=csv.QUOTE_MINIMAL)
        w.writerow(['mic "0 deg", ring 1', "mic\t90 deg"])
        for x, y in zip(a, b):
            w.writerow([repr(float(x)), repr(float(y))])
    assert '"mic ""0 deg"", ring 1"' in path.read_text(), "the csv module quoted the name"

    out, err = _tones(server_address, path, "--sample-rate-hz", str(FS))
    assert out.returncode == 0, err
    rows = json.loads(out.stdout)["summary"]
    assert [r["channel"] for r in rows] == ['mic "0 deg", ring 1', "mic\t90 deg"]
    for r, x in zip(rows, (a, b)):
        assert r["rms_pa"] == pytest.approx(_rms_about_mean(x), rel=1e-9)


def test_a_pandas_time_column_with_a_dropped_sample_is_refused_at_its_row(server_address, tmp_path):
    t, a, _ = _signals()
    keep = np.ones(N, dtype=bool)
    keep[500] = False  # sample 500 lost: the step into sample 501 is two periods
    df = pd.DataFrame({"time_s": t[keep], "p_pa": a[keep]})
    path = tmp_path / "gap.csv"
    df.to_csv(path, index=False)
    out, err = _tones(server_address, path)
    assert out.returncode == 2
    # Header on row 1: samples 0..499 on rows 2..501, sample 501 on row 502.
    assert "is not uniform: row 502 is" in err, err
