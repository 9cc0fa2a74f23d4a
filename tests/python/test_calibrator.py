"""Cross-check of CalibrationService.CalibratorSensitivity against SciPy (invented calibrator
recordings): the tone rms against scipy.signal.periodogram with a flat-top window and
'spectrum' scaling (a peak bin reads A^2/2 within the flat-top's 0.01 dB scalloping), and
against scipy.signal.welch (Hann) integrated over the tone's bins; THD against the flat-top
peaks of the harmonics; the sensitivity against the closed form S = V_rms / (20e-6 x 10^(L/20))."""
import importlib

import numpy as np
import pytest
from scipy.signal import periodogram, welch

FS = 48_000.0


@pytest.fixture(scope="module")
def cal(pb, channel):
    mod = importlib.import_module("jetloop.v1.calibration_pb2")
    sp = importlib.import_module("jetloop.v1.spectrum_pb2")
    grpc_mod = importlib.import_module("jetloop.v1.calibration_pb2_grpc")
    return mod, sp, grpc_mod.CalibrationServiceStub(channel)


def recording(f, amplitudes, seconds, seed):
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * FS)) / FS
    x = sum(a * np.sin(2 * np.pi * (h + 1) * f * t + 0.3 * h) for h, a in enumerate(amplitudes))
    return x + rng.normal(0.0, 1e-5, t.size)


def flattop_rms(x, f):
    """Rms of the line nearest f from a flat-top periodogram (spectrum scaling: A^2/2 per line)."""
    fr, p = periodogram(x, FS, window="flattop", scaling="spectrum", detrend="constant")
    k = np.argmin(np.abs(fr - f))
    return np.sqrt(p[k - 2:k + 3].max())


def hann_welch_rms(x, f, nperseg=8192):
    """Rms from scipy.signal.welch (Hann, density) integrated over +-3 bins of the tone, minus the
    median floor of the bins around it."""
    fr, d = welch(x, FS, window="hann", nperseg=nperseg, noverlap=nperseg // 2)
    df = fr[1] - fr[0]
    k = int(np.argmin(np.abs(fr - f)))
    around = np.concatenate([d[k - 43:k - 3], d[k + 4:k + 44]])
    return np.sqrt((d[k - 3:k + 4] - np.median(around)).sum() * df)


@pytest.mark.parametrize("f,level_db,stated_hz", [(1000.0, 94.0, 1000.0), (997.3, 94.0, 1000.0), (250.0, 114.0, 250.0)])
def test_tone_rms_sensitivity_and_thd_agree_with_scipy(cal, f, level_db, stated_hz):
    mod, sp, stub = cal
    s = 12.5e-3  # V/Pa, invented
    p_rms = 20e-6 * 10 ** (level_db / 20)  # ISO 1683 reference pressure
    a1 = np.sqrt(2) * s * p_rms
    x = recording(f, [a1, 0.01 * a1, 0.004 * a1], 4.0, 3)
    samples = sp.Samples(sample_rate_hz=FS, raw=sp.RawSamples(data=x.astype("<f8").tobytes(), format=sp.SAMPLE_FORMAT_F64_LE))
    r = stub.CalibratorSensitivity(mod.CalibratorSensitivityRequest(
        samples=samples, stated_level_db=level_db, stated_frequency_hz=stated_hz, volts_per_unit=[1.0]))
    ch = r.channels[0]
    db = lambda a, b: 20 * np.log10(a / b)
    # Flat-top periodogram: within its 0.01 dB scalloping plus a margin.
    assert abs(db(ch.tone_rms_units, flattop_rms(x, f))) < 0.02
    # Hann Welch integrated over the tone's bins.
    assert abs(db(ch.tone_rms_units, hann_welch_rms(x, f))) < 0.01
    # Closed form: S = V_rms / p_rms (the harmonics do not count in the tone).
    assert abs(db(ch.sensitivity_v_per_pa, s)) < 0.01
    # THD from the flat-top peaks of harmonics 2 and 3 (the rest is noise).
    thd = np.hypot(flattop_rms(x, 2 * f), flattop_rms(x, 3 * f)) / flattop_rms(x, f)
    assert abs(ch.thd_percent / (100 * thd) - 1) < 0.03, (ch.thd_percent, 100 * thd)
    assert abs(ch.frequency_hz - f) < 0.01
    kinds = [w.kind for w in ch.warnings]
    assert kinds == ([] if abs(f / stated_hz - 1) <= 0.01 else [mod.CALIBRATOR_WARNING_KIND_FREQUENCY_OFF])
