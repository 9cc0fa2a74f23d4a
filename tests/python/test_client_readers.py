"""The recording readers of the Python package (read_wav, read_tdms, read_hdf5, read_mat): files
written by the reference writers (soundfile, scipy.io.wavfile, nptdms, h5py, scipy.io.savemat)
read back to the written samples, rate, names and units; every error names the file and what
was expected; a Recording goes straight into an analysis on the release server."""
import math
import struct
import sys

import numpy as np
import pytest

from jetloop_client import (ChannelCalibration, Client, Recording, read_hdf5, read_mat, read_tdms, read_wav)

soundfile = pytest.importorskip("soundfile")
h5py = pytest.importorskip("h5py")
nptdms = pytest.importorskip("nptdms")
wavfile = pytest.importorskip("scipy.io.wavfile")
sio = pytest.importorskip("scipy.io")

FS = 48_000


def counts(bits, frames=4800, channels=2, seed=3):
    """Random integer samples spanning the full range of `bits`-bit PCM."""
    top = 1 << (bits - 1)
    return np.random.default_rng(seed).integers(-top, top, size=(frames, channels))


def test_wav_integer_files_read_as_counts_and_float_files_as_written(tmp_path, monkeypatch):
    c16, c24 = counts(16), counts(24, channels=3)
    soundfile.write(tmp_path / "a16.wav", c16.astype(np.int16), FS, subtype="PCM_16")
    # soundfile takes int32 as full-scale 32-bit values: 24-bit counts go in the top 24 bits.
    soundfile.write(tmp_path / "a24.wav", (c24 << 8).astype(np.int32), FS, subtype="PCM_24")
    f32 = np.random.default_rng(4).uniform(-1, 1, (4800, 2)).astype(np.float32)
    wavfile.write(tmp_path / "f32.wav", FS, f32)
    mono = c16[:, 0].astype(np.int16)
    wavfile.write(tmp_path / "mono.wav", 44_100, mono)

    def check(read):
        # Source of the expected samples: the arrays handed to soundfile / scipy.io.wavfile.
        r16 = read(tmp_path / "a16.wav")
        assert r16.sample_rate_hz == FS and r16.samples.shape == (4800, 2)
        np.testing.assert_array_equal(r16.samples, c16)
        assert r16.units == ["counts (16-bit PCM)"] * 2
        np.testing.assert_array_equal(read(tmp_path / "a24.wav").samples, c24)
        rf = read(tmp_path / "f32.wav")
        np.testing.assert_array_equal(rf.samples, f32.astype(np.float64))
        assert rf.units == ["full scale"] * 2
        rm = read(tmp_path / "mono.wav")
        assert rm.sample_rate_hz == 44_100 and rm.samples.shape == (4800, 1)
        np.testing.assert_array_equal(rm.samples[:, 0], mono)

    check(read_wav)
    # Without soundfile the scipy reader gives the same values.
    monkeypatch.setitem(sys.modules, "soundfile", None)
    check(read_wav)

    bad = tmp_path / "notes.wav"
    bad.write_bytes(b"mic 3 moved 2 cm downstream\n")
    with pytest.raises(ValueError, match=rf"{bad}: not a WAV file \(expected RIFF/WAVE at byte 0"):
        read_wav(bad)


def test_tdms_channels_rate_units_and_linear_scaling(tmp_path):
    raw = np.random.default_rng(5).integers(-30000, 30000, size=(2, 6000)).astype(np.float64)
    props = [{"wf_increment": 1 / 25_600, "unit_string": "Pa"},
             # NI linear scale: y = slope x + intercept (TDMS scaling properties, scale index
             # NI_Number_Of_Scales - 1).
             {"wf_increment": 1 / 25_600, "unit_string": "Pa", "NI_Number_Of_Scales": 1,
              "NI_Scaling_Status": "unscaled", "NI_Scale[0]_Scale_Type": "Linear",
              "NI_Scale[0]_Linear_Slope": 0.0025, "NI_Scale[0]_Linear_Y_Intercept": -0.5}]
    path = tmp_path / "run.tdms"
    with nptdms.TdmsWriter(path) as w:
        w.write_segment([nptdms.ChannelObject("mics", name, raw[k], properties=props[k])
                         for k, name in enumerate(["mic 0", "mic 1"])]
                        + [nptdms.ChannelObject("slow", "npr", raw[0][:100], properties={"wf_increment": 0.01})])
    r = read_tdms(path, "mics")
    assert r.sample_rate_hz == pytest.approx(25_600.0, rel=1e-12)
    assert r.channel_names == ["mic 0", "mic 1"] and r.units == ["Pa", "Pa"]
    np.testing.assert_array_equal(r.samples[:, 0], raw[0])  # source: the array given to nptdms
    np.testing.assert_allclose(r.samples[:, 1], 0.0025 * raw[1] - 0.5, rtol=1e-12)
    only = read_tdms(path, "mics", channels=["mic 1"])
    assert only.samples.shape == (6000, 1)
    with pytest.raises(ValueError, match=rf"{path}: 2 groups \(mics, slow\): name the group to read"):
        read_tdms(path)
    with pytest.raises(ValueError, match=rf"{path}: group 'mics' has no channel 'mic 7'; it has mic 0, mic 1"):
        read_tdms(path, "mics", ["mic 7"])
    nowf = tmp_path / "nowf.tdms"
    with nptdms.TdmsWriter(nowf) as w:
        w.write_segment([nptdms.ChannelObject("g", "c", raw[0])])
    with pytest.raises(ValueError, match=rf"{nowf}: channel g/c has no wf_increment property"):
        read_tdms(nowf)


def test_hdf5_dataset_rate_from_named_or_common_attributes(tmp_path):
    x = np.random.default_rng(6).standard_normal((5000, 3))
    path = tmp_path / "rig.h5"
    with h5py.File(path, "w") as f:
        d = f.create_dataset("run3/mics", data=x)
        d.attrs["fs"] = 65_536.0
        d.attrs["channel_names"] = ["ring 0", "ring 120", "ring 240"]
        d.attrs["units"] = "V"
        g = f.create_dataset("run3/daq_rate_hz_as_attr", data=x[:, :2].T)
        g.attrs["acq_rate"] = 20_000
        f["run4"] = x[:, 0]
        f["run4"].attrs["dt"] = 1e-4
    r = read_hdf5(path, "/run3/mics")
    np.testing.assert_array_equal(r.samples, x)  # source: the array h5py wrote
    assert r.sample_rate_hz == 65_536.0 and r.channel_names == ["ring 0", "ring 120", "ring 240"]
    assert r.units == ["V"] * 3
    t = read_hdf5(path, "run3/daq_rate_hz_as_attr", rate_attribute="acq_rate", channels_first=True)
    np.testing.assert_array_equal(t.samples, x[:, :2])
    assert t.sample_rate_hz == 20_000.0
    assert read_hdf5(path, "run4").sample_rate_hz == pytest.approx(1e4, rel=1e-12)  # 1 / dt
    with pytest.raises(ValueError, match=rf"{path}: no dataset 'run5'; datasets: /run3/daq_rate_hz_as_attr, /run3/mics"):
        read_hdf5(path, "run5")
    with pytest.raises(ValueError, match=rf"{path}: no sample rate attribute .*rate_attribute="):
        read_hdf5(path, "run3/daq_rate_hz_as_attr", channels_first=True)
    with pytest.raises(ValueError, match=r"shape \(2, 5000\): expected \(frames, channels\)"):
        read_hdf5(path, "run3/daq_rate_hz_as_attr", rate_attribute="acq_rate")


def test_mat_v5_from_scipy(tmp_path):
    x = np.random.default_rng(7).standard_normal((4000, 2))
    path = tmp_path / "run.mat"
    names = np.empty((1, 2), dtype=object)
    names[0, 0], names[0, 1] = "near field", "far field"
    sio.savemat(path, {"p": x, "fs": 40_000.0, "names": names, "row": x[:, 0][None, :]})
    r = read_mat(path, "p", "fs", names_variable="names")
    np.testing.assert_array_equal(r.samples, x)  # source: the array scipy.io.savemat wrote
    assert r.sample_rate_hz == 40_000.0 and r.channel_names == ["near field", "far field"]
    # A row vector (1 x frames) is one channel.
    np.testing.assert_array_equal(read_mat(path, "row", sample_rate_hz=40_000.0).samples[:, 0], x[:, 0])
    with pytest.raises(ValueError, match=rf"{path}: no variable 'rate'; variables: "):
        read_mat(path, "p", "rate")
    with pytest.raises(ValueError, match=rf"{path}: give rate_variable"):
        read_mat(path, "p")
    with pytest.raises(ValueError, match=rf"{path}: variable names = an array of shape \(1, 2\) \(object\): expected one sample rate in Hz"):
        read_mat(path, "p", "names")


def write_mat73(path, variables):
    """A MAT 7.3 file as MATLAB lays it out: HDF5 behind a 512-byte user block whose first 128
    bytes are the MAT header (text, subsystem offset, version 0x0200, 'IM'), each variable an
    HDF5 dataset stored column-major (so transposed) with a MATLAB_class attribute (layout
    recalled from memory)."""
    with h5py.File(path, "w", userblock_size=512) as f:
        for name, value in variables.items():
            d = f.create_dataset(name, data=np.asarray(value, dtype=np.float64).T)
            d.attrs["MATLAB_class"] = np.bytes_("double")
    text = b"MATLAB 7.3 MAT-file, Platform: GLNXA64, Created on: Mon Jan  5 10:00:00 2026 HDF5 schema 1.00 ."
    header = text.ljust(116, b" ") + b"\x00" * 8 + struct.pack("<H", 0x0200) + b"IM"
    with open(path, "r+b") as f:
        f.write(header)


def test_mat_v73_through_h5py(tmp_path):
    x = np.random.default_rng(8).standard_normal((3000, 4))
    path = tmp_path / "run73.mat"
    write_mat73(path, {"mics": x, "fs": np.array([[51_200.0]])})
    r = read_mat(path, "mics", "fs")
    np.testing.assert_array_equal(r.samples, x)  # source: the array written through h5py
    assert r.sample_rate_hz == 51_200.0
    with pytest.raises(ValueError, match=rf"{path}: no variable 'p'; variables: fs, mics"):
        read_mat(path, "p", "fs")
    notmat = tmp_path / "notes.mat"
    notmat.write_text("x = 3\n")
    with pytest.raises(ValueError, match=rf"{notmat}: not a MAT file"):
        read_mat(notmat, "x", sample_rate_hz=1.0)


def test_a_recording_goes_straight_into_an_analysis(server_address, tmp_path):
    # Two microphones, 16-bit counts at 0.305 mV per count, sensitivities 4 and 2.5 mV/Pa,
    # tones of 20 and 5 Pa amplitude.
    fs, vpc, sens, amp = 51_200, 0.000305176, [0.004, 0.0025], [20.0, 5.0]
    t = np.arange(fs) / fs
    volts = np.stack([a * s * np.sin(2 * np.pi * 2500.0 * t) for a, s in zip(amp, sens)], axis=1)
    soundfile.write(tmp_path / "pair.wav", np.round(volts / vpc).astype(np.int16), fs, subtype="PCM_16")
    rec = read_wav(tmp_path / "pair.wav").with_calibration(ChannelCalibration.microphones(sens, vpc))
    assert isinstance(rec, Recording)
    with Client(server_address) as c:
        r = c.extract_tones(rec, segment_length=8192)
    levels = [max(ch.tones, key=lambda x: x.level_db).level_db for ch in r.channels]
    # SPL definition: 20 log10(A / sqrt 2 / 20 uPa) (16-bit rounding is far below 0.05 dB here).
    assert levels == pytest.approx([20 * math.log10(a / math.sqrt(2) / 20e-6) for a in amp], abs=0.05)


def test_unreadable_content_is_a_value_error_naming_the_file(tmp_path):
    text = tmp_path / "notes.bin"
    text.write_text("mic 3 moved 2 cm downstream\n")
    # nptdms and h5py refuse text (no TDSm lead-in, no HDF5 signature); the messages are theirs.
    with pytest.raises(ValueError, match=rf"{text}: not a readable TDMS file"):
        read_tdms(text)
    with pytest.raises(ValueError, match=rf"{text}: not a readable HDF5 file"):
        read_hdf5(text, "mics")
    # A WAV header cut inside its fmt chunk (RIFF layout: 16-byte PCM fmt body).
    cut = tmp_path / "cut.wav"
    cut.write_bytes(b"RIFF\x10\x00\x00\x00WAVEfmt \x10\x00\x00\x00\x01\x00\x01\x00")
    with pytest.raises(ValueError, match=rf"{cut}: the fmt chunk at byte 20 holds 4 bytes: expected at least 16"):
        read_wav(cut)
    for read, args in ((read_wav, ()), (read_tdms, ()), (read_hdf5, ("mics",)), (read_mat, ("p", "fs"))):
        with pytest.raises(FileNotFoundError, match="missing.file"):
            read(tmp_path / "missing.file", *args)
