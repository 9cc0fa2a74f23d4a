"""Cross-check of SpectrumService.CrossSpectra against scipy.signal.csd and
scipy.signal.coherence (SciPy): same window, nperseg, noverlap and detrend, every bin, 1e-9
relative (complex cross-spectrum against the largest |Pxy|, coherence where the auto spectra
are above 1e-12 of their peak). Also the phase sign: a channel delayed by tau shows the phase
-360 f tau degrees (arg of conj(X) Y, SciPy's convention)."""
import numpy as np
import pytest
from scipy.signal import coherence, csd

REL = 1e-9


def channels(n, fs, seed):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / fs
    common = 20 * np.sin(2 * np.pi * 2500.3 * t) + rng.normal(0, 1, n)
    return [common + rng.normal(0, 0.5, n), np.roll(common, 7) + rng.normal(0, 0.8, n), -common + rng.normal(0, 2.0, n)]


@pytest.mark.parametrize("window,name", [(1, "hann"), (2, "hamming"), (3, "blackmanharris")])
@pytest.mark.parametrize("nperseg,noverlap,detrend", [(1024, 512, True), (777, 300, False)])
def test_cross_spectra_equal_scipy_csd_and_coherence(sp, window, name, nperseg, noverlap, detrend):
    mod, stub = sp
    fs, n = 51_200.0, 60_001
    xs = channels(n, fs, 3)
    inter = np.stack(xs, axis=1).ravel()
    r = stub.CrossSpectra(
        mod.CrossSpectraRequest(
            samples=mod.Samples(sample_rate_hz=fs, channel_count=3, values=mod.SampleValues(values=inter.tolist()), calibration=mod.Calibration(in_pascals=True)),
            welch=mod.WelchOptions(
                window=window,
                segment_length=nperseg,
                overlap_fraction=noverlap / nperseg,
                detrend=mod.DETREND_KIND_MEAN if detrend else mod.DETREND_KIND_NONE,
            ),
            spectra_max_points=1_048_577,
        )
    )
    assert r.reference_channel == 0 and [s.channel for s in r.spectra] == [1, 2]
    kw = dict(fs=fs, window=name, nperseg=nperseg, noverlap=noverlap, detrend="constant" if detrend else False)
    for s in r.spectra:
        y = xs[s.channel]
        f, pxy = csd(xs[0], y, **kw)
        _, coh = coherence(xs[0], y, **kw)
        assert np.allclose(np.array(s.frequency_hz), f, rtol=1e-12, atol=0)
        mine = np.array(s.magnitude_pa2_per_hz) * np.exp(1j * np.radians(np.array(s.phase_deg)))
        err = np.max(np.abs(mine - pxy)) / np.max(np.abs(pxy))
        assert err < REL, err
        _, pxx = csd(xs[0], xs[0], **kw)
        _, pyy = csd(y, y, **kw)
        ok = (np.abs(pxx) > 1e-12 * np.abs(pxx).max()) & (np.abs(pyy) > 1e-12 * np.abs(pyy).max())
        cerr = np.max(np.abs(np.array(s.coherence)[ok] - coh[ok]) / np.maximum(coh[ok], 1e-300))
        assert cerr < REL, cerr


def test_phase_at_the_tone_has_scipys_sign_and_pairs_are_classified(sp):
    mod, stub = sp
    fs, n, f0, delay = 48_000.0, 1 << 16, 3000.0, 4
    rng = np.random.default_rng(11)
    t = np.arange(n) / fs
    a = 10 * np.sin(2 * np.pi * f0 * t) + rng.normal(0, 0.3, n)
    b = 10 * np.sin(2 * np.pi * f0 * (t - delay / fs)) + rng.normal(0, 0.3, n)
    req = mod.CrossSpectraRequest(
        samples=mod.Samples(sample_rate_hz=fs, channel_count=2, values=mod.SampleValues(values=np.stack([a, b], 1).ravel().tolist()), calibration=mod.Calibration(in_pascals=True)),
        welch=mod.WelchOptions(segment_length=4096),
    )
    tone = stub.CrossSpectra(req).tones[0]
    f, pxy = csd(a, b, fs=fs, nperseg=4096)
    k = int(round(tone.bin_frequency_hz / (fs / 4096)))
    assert abs(tone.channels[0].phase_deg - np.degrees(np.angle(pxy[k]))) < 1e-7
    # Closed form: a delay of tau gives -360 f tau degrees (f the bin frequency).
    assert abs(tone.channels[0].phase_deg - (-360.0 * f[k] * delay / fs)) < 1.0
    assert tone.pair.symmetric
