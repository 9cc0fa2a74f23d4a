"""Cross-check of SpectrumService against scipy.signal.welch (SciPy): same window, nperseg,
noverlap, detrend and scaling, on random and tonal signals, odd lengths and odd segments, f64
values and f32 bytes. Tolerance: 1e-9 relative on every PSD value."""
import numpy as np
import pytest
from scipy.signal import welch

REL = 1e-9


WINDOWS = {1: "hann", 2: "hamming", 3: "blackmanharris", 4: "flattop"}


def signal(n, fs, seed, tonal):
    rng = np.random.default_rng(seed)
    x = rng.normal(0.0, 2.0, n)
    if tonal:
        t = np.arange(n) / fs
        x += 50.0 * np.sin(2 * np.pi * 3011.7 * t) + 10.0 * np.sin(2 * np.pi * 6023.4 * t + 0.4)
    return x


def server_psd(mod, stub, samples, fs, window, nperseg, noverlap, detrend):
    req = mod.ExtractTonesRequest(
        samples=samples,
        welch=mod.WelchOptions(
            window=window,
            segment_length=nperseg,
            overlap_fraction=noverlap / nperseg,
            detrend=mod.DETREND_KIND_MEAN if detrend else mod.DETREND_KIND_NONE,
        ),
        psd_output=mod.PsdOutputOptions(include=True),
    )
    r = stub.ExtractTones(req)
    ch = r.channels[0]
    assert ch.analysis.overlap_samples == noverlap
    return np.array(ch.psd.frequency_hz), np.array(ch.psd.density_pa2_per_hz), ch


@pytest.mark.parametrize("window", [1, 2, 3, 4])
@pytest.mark.parametrize("n,nperseg,noverlap,tonal,detrend", [
    (100_003, 1024, 512, False, True),
    (100_003, 1001, 500, True, True),
    (65_536, 4096, 2048, True, False),
    (30_001, 777, 111, True, True),
])
def test_psd_equals_scipy_welch_f64(sp, window, n, nperseg, noverlap, tonal, detrend):
    mod, stub = sp
    fs = 51_200.0
    x = signal(n, fs, 7 + n, tonal)
    samples = mod.Samples(sample_rate_hz=fs, values=mod.SampleValues(values=x.tolist()), calibration=mod.Calibration(in_pascals=True))
    f, p, ch = server_psd(mod, stub, samples, fs, window, nperseg, noverlap, detrend)
    fr, pr = welch(x, fs=fs, window=WINDOWS[window], nperseg=nperseg, noverlap=noverlap,
                   detrend="constant" if detrend else False, scaling="density")
    assert len(p) == len(pr)
    np.testing.assert_allclose(f, fr, rtol=1e-12, atol=0)
    np.testing.assert_allclose(p, pr, rtol=REL, atol=0)
    # Power-spectrum scaling = density x ENBW in Hz (scipy scaling='spectrum').
    _, ps = welch(x, fs=fs, window=WINDOWS[window], nperseg=nperseg, noverlap=noverlap,
                  detrend="constant" if detrend else False, scaling="spectrum")
    np.testing.assert_allclose(p * ch.analysis.enbw_hz, ps, rtol=REL, atol=0)


def test_psd_equals_scipy_welch_f32_bytes_two_channels(sp):
    """f32 little-endian bytes, two interleaved channels, calibrated by a microphone chain:
    the reference is scipy on the same f32 values (as float64) times the same factor."""
    mod, stub = sp
    fs = 48_000.0
    a = signal(48_001, fs, 1, True).astype(np.float32)
    b = signal(48_001, fs, 2, False).astype(np.float32)
    inter = np.empty(2 * a.size, dtype="<f4")
    inter[0::2], inter[1::2] = a, b
    k = 0.01 / 0.004  # volts per unit / (V/Pa)
    samples = mod.Samples(
        sample_rate_hz=fs, channel_count=2, layout=mod.CHANNEL_LAYOUT_INTERLEAVED,
        raw=mod.RawSamples(data=inter.tobytes(), format=mod.SAMPLE_FORMAT_F32_LE),
        calibration=mod.Calibration(microphone=mod.MicrophoneChain(sensitivity_v_per_pa=0.004, volts_per_unit=0.01)),
        channel_names=["polar 90", "polar 150"],
    )
    r = stub.ExtractTones(mod.ExtractTonesRequest(
        samples=samples, welch=mod.WelchOptions(segment_length=2048),
        psd_output=mod.PsdOutputOptions(include=True)))
    assert [c.name for c in r.channels] == ["polar 90", "polar 150"]
    for ch, x in zip(r.channels, (a, b)):
        _, pr = welch(x.astype(np.float64) * k, fs=fs, window="hann", nperseg=2048, noverlap=1024)
        np.testing.assert_allclose(np.array(ch.psd.density_pa2_per_hz), pr, rtol=REL, atol=0)


def test_tones_agree_with_scipy_find_peaks_on_a_clean_signal(sp):
    """The two strong tones are the two highest peaks scipy.signal.find_peaks sees with a
    prominence of 20 dB on the same PSD; frequencies agree to a fraction of a bin."""
    from scipy.signal import find_peaks

    mod, stub = sp
    fs = 51_200.0
    x = signal(1 << 18, fs, 3, True)
    samples = mod.Samples(sample_rate_hz=fs, values=mod.SampleValues(values=x.tolist()), calibration=mod.Calibration(in_pascals=True))
    r = stub.ExtractTones(mod.ExtractTonesRequest(samples=samples, welch=mod.WelchOptions(segment_length=8192)))
    ch = r.channels[0]
    f, p = welch(x, fs=fs, nperseg=8192)
    peaks, _ = find_peaks(10 * np.log10(p), prominence=20)
    df = fs / 8192
    found = sorted(t.frequency_hz for t in ch.tones)
    for k in peaks:
        assert min(abs(ft - f[k]) for ft in found) <= df
    assert len(ch.families) == 1 and list(ch.families[0].orders) == [1, 2]
    assert abs(ch.families[0].fundamental_hz - 3011.7) < 0.05 * df


@pytest.mark.parametrize("fmt,dtype,block_frames", [
    ("SAMPLE_FORMAT_F32_LE", "<f4", 3001),
    ("SAMPLE_FORMAT_I16_LE", "<i2", 65_536),
    ("SAMPLE_FORMAT_F64_LE", "<f8", 777),
])
def test_block_stream_psd_equals_scipy_welch(sp, fmt, dtype, block_frames):
    """ExtractTonesStream: three channels of interleaved frames sent in blocks (the first
    message carrying some frames too) give scipy.signal.welch of each channel, to 1e-9."""
    mod, stub = sp
    fs, n, nperseg, k = 40_000.0, 120_007, 2048, 0.25
    chans = [signal(n, fs, 20 + c, c != 1) for c in range(3)]
    if dtype == "<i2":
        chans = [np.round(x * 300.0) for x in chans]
    inter = np.empty(3 * n, dtype=dtype)
    for c in range(3):
        inter[c::3] = chans[c]
    raw = inter.tobytes()
    fb = 3 * np.dtype(dtype).itemsize
    head_frames = 1000
    first = mod.SampleBlock(
        request=mod.ExtractTonesRequest(
            samples=mod.Samples(
                sample_rate_hz=fs, channel_count=3,
                raw=mod.RawSamples(data=raw[: head_frames * fb], format=getattr(mod, fmt)),
                calibration=mod.Calibration(pascals_per_unit=k),
            ),
            welch=mod.WelchOptions(segment_length=nperseg, overlap_fraction=0.5),
            psd_output=mod.PsdOutputOptions(include=True),
        ),
        expected_frames=n,
    )
    step = block_frames * fb
    blocks = [first] + [mod.SampleBlock(frames=raw[i : i + step]) for i in range(head_frames * fb, len(raw), step)]
    r = stub.ExtractTonesStream(iter(blocks))
    assert len(r.channels) == 3
    for ch, x in zip(r.channels, chans):
        _, pr = welch(inter.astype(np.float64)[ch.channel::3] * k, fs=fs, window="hann", nperseg=nperseg, noverlap=nperseg // 2)
        np.testing.assert_allclose(np.array(ch.psd.density_pa2_per_hz), pr, rtol=REL, atol=0)
        xs = inter.astype(np.float64)[ch.channel::3] * k
        assert abs(ch.rms_pa / np.std(xs) - 1) < 1e-12
