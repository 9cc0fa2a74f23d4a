"""One calibration per channel through the Python package, against the release server: a ring of
microphones with different sensitivities reads each channel's closed-form level; the TOML
calibration file of the CLI loads with the same rules; missing calibrations and (channels,
frames) arrays are refused before anything is sent, naming the expected shape."""
import math

import numpy as np
import pytest

from conftest import ROOT
from jetloop_client import Calibration, ChannelCalibration, Client, Recording, load_calibration_file

FS = 51_200.0
P0 = 20e-6  # reference pressure of sound pressure levels, Pa (ISO 1683)


@pytest.fixture(scope="module")
def client(server_address):
    with Client(server_address) as c:
        yield c


def ring(amplitudes_pa, f_hz=3000.0, seconds=1.0):
    """Pressures (frames, channels) of one tone of the given amplitudes (Pa) on each channel."""
    t = np.arange(int(seconds * FS)) / FS
    return np.stack([a * np.sin(2 * np.pi * f_hz * t + k) for k, a in enumerate(amplitudes_pa)], axis=1)


def spl_db(amplitude_pa):
    """SPL of a sine of this amplitude: 20 log10(A / sqrt(2) / 20 uPa) (definition of SPL)."""
    return 20 * math.log10(amplitude_pa / math.sqrt(2) / P0)


def top_levels(response):
    return [max(ch.tones, key=lambda t: t.level_db).level_db for ch in response.channels]


def test_a_ring_of_mixed_sensitivities_reads_each_channels_closed_form_level(client):
    amplitudes = [2.0, 5.0, 10.0, 40.0]  # Pa
    sens = [0.0036, 0.0050, 0.0022, 0.0110]  # V/Pa, one per microphone
    volts = ring(amplitudes) * np.array(sens)  # what the DAQ records, V (1 V per unit)
    cals = ChannelCalibration.microphones(sens, volts_per_unit=1.0, names=["0 deg", "90 deg", "180 deg", "270 deg"])
    r = client.extract_tones(volts, FS, cals, segment_length=8192)
    # Closed form: 20 log10(A_rms / 20e-6) per channel (SPL definition, A_rms = A / sqrt 2).
    assert top_levels(r) == pytest.approx([spl_db(a) for a in amplitudes], abs=0.05)
    assert [ch.name for ch in r.channels] == ["0 deg", "90 deg", "180 deg", "270 deg"]
    # One common calibration with the first sensitivity gets the other channels wrong by
    # 20 log10(s_k / s_0) dB (the per-channel factor is what matters).
    common = client.extract_tones(volts, FS, Calibration.microphone(sens[0], 1.0), segment_length=8192)
    assert top_levels(common) == pytest.approx(
        [spl_db(a) + 20 * math.log10(s / sens[0]) for a, s in zip(amplitudes, sens)], abs=0.05)
    # Pascals per unit per channel (1 / sensitivity), and proto-level Calibrations per channel.
    by_scale = client.band_levels(volts, FS, ChannelCalibration.scales([1 / s for s in sens]), segment_length=8192)
    # One-third-octave band holding 3 kHz (nominal 3150 Hz, IEC 61260): all of the tone's energy.
    band = [[b for b in ch.bands.bands if b.nominal_hz == 3150.0][0].level_db for ch in by_scale.channels]
    assert band == pytest.approx([spl_db(a) for a in amplitudes], abs=0.1)
    mixed = [Calibration.pascals_per_unit(1 / s) for s in sens]
    assert top_levels(client.extract_tones(volts, FS, mixed, segment_length=8192)) == pytest.approx(top_levels(r), abs=1e-9)


def test_a_recording_carries_its_calibration_and_names(client, tmp_path):
    amplitudes, sens = [3.0, 12.0], [0.004, 0.0016]
    counts = ring(amplitudes) * np.array(sens) / 0.000305176  # 16-bit DAQ counts at 0.305 mV/count
    cal_file = tmp_path / "pair.toml"
    cal_file.write_text("".join(f'[[channel]]\nname = "mic {k}"\nsensitivity_v_per_pa = {s}\nvolts_per_unit = 0.000305176\n\n'
                                for k, s in enumerate(sens)))
    rec = Recording(samples=counts, sample_rate_hz=FS).with_calibration(load_calibration_file(cal_file))
    r = client.extract_tones(rec, segment_length=8192)
    # SPL definition: 20 log10(A_rms / 20e-6).
    assert top_levels(r) == pytest.approx([spl_db(a) for a in amplitudes], abs=0.05)
    assert [ch.name for ch in r.channels] == ["mic 0", "mic 1"]
    # A calibration passed as the second argument of a recording is taken as the calibration.
    again = client.cross_spectra(Recording(samples=counts, sample_rate_hz=FS), load_calibration_file(cal_file),
                                 segment_length=8192)
    assert again.tones
    with pytest.raises(ValueError, match="sample_rate_hz = 48000"):
        client.extract_tones(rec, 48_000.0)


def test_the_clis_calibration_file_loads_with_its_rules(tmp_path):
    demo = load_calibration_file(ROOT / "sample-data" / "ring-calibration-demo.toml")
    # The shipped demo (sample-data/ring-calibration-demo.toml): four microphones at 0.0036 V/Pa.
    assert [c.name for c in demo] == ["ring 0 deg", "ring 90 deg", "ring 180 deg", "ring 270 deg"]
    assert {(c.sensitivity_v_per_pa, c.volts_per_unit, c.pa_per_unit) for c in demo} == {(0.0036, 0.000305176, None)}
    bad = tmp_path / "bad.toml"
    cases = {
        '[[channel]]\npa_per_unit = 2\ngain = 3\n': "channel entry 0 ([[channel]] number 1): unknown key gain",
        '[[channel]]\npa_per_unit = 2\n[[channel]]\npa_per_unit = 1\nsensitivity_v_per_pa = 0.004\nvolts_per_unit = 1\n':
            "channel entry 1 ([[channel]] number 2): give pa_per_unit, or sensitivity_v_per_pa and volts_per_unit",
        '[[channel]]\nsensitivity_v_per_pa = "0.004"\nvolts_per_unit = 1\n': "sensitivity_v_per_pa = '0.004' must be a number",
        '[[channel]]\npa_per_unit = -2\n': "pa_per_unit = -2; expected a finite number above 0",
        'title = "no channels"\n': "no [[channel]] tables",
        '[[channel]\n': "not valid TOML",
    }
    for text, expected in cases.items():
        bad.write_text(text)
        with pytest.raises(ValueError) as e:
            load_calibration_file(bad)
        assert str(bad) in str(e.value) and expected in str(e.value), (text, str(e.value))


def test_bad_arguments_are_refused_naming_what_is_expected(client):
    x = ring([1.0, 1.0])
    with pytest.raises(ValueError, match=r"no calibration given: pass Calibration.pascals\(\)"):
        client.extract_tones(x, FS, None)
    with pytest.raises(ValueError, match=r"shape \(2, 48000\): expected \(frames, channels\).*x\.T"):
        client.extract_tones(np.zeros((2, 48_000)), 48_000.0, Calibration.pascals())
    with pytest.raises(ValueError, match=r"samples is None: expected an array of shape \(frames, channels\)"):
        client.band_levels(None, FS, Calibration.pascals())
    with pytest.raises(ValueError, match="3 channel calibrations for 2 channels"):
        client.extract_tones(x, FS, ChannelCalibration.scales([1.0, 1.0, 1.0]))
    with pytest.raises(ValueError, match=r"channel calibration 1: give pa_per_unit, or sensitivity_v_per_pa"):
        client.extract_tones(x, FS, [ChannelCalibration(pa_per_unit=1.0), ChannelCalibration(sensitivity_v_per_pa=0.004)])
    with pytest.raises(ValueError, match=r"block 1 has shape \(10, 3\).*\(frames, 2\)"):
        client.extract_tones_stream([x[:10], np.zeros((10, 3))], FS, 2, Calibration.pascals())
