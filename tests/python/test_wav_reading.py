"""What the jetloop CLI reads from WAV and raw files, sample for sample, against the samples
reference writers were given: scipy.io.wavfile (RIFF PCM 8/16/32-bit, float 64-bit) and
soundfile/libsndfile (RF64 24-bit, WAVE_FORMAT_EXTENSIBLE float 32-bit). Files cut short or
left with a streaming writer's placeholder data size (bytes cut and patched here, in Python)
must give the whole frames that are there and a warning with the numbers. Flags that
contradict a header, recordings over the server's per-request limit for commands without a
block stream, and --block-bytes outside its range are refused before anything is sent.

`jetloop inspect FILE --json` is the CLI's own account of what it read (no server involved);
`jetloop tones` runs against a real server.
"""
import json
import struct
import subprocess

import numpy as np
import pytest
import scipy.io.wavfile as wavfile
import soundfile

from conftest import _cli_binary


def cli(*args, server=None):
    cmd = [str(_cli_binary())]
    if server:
        cmd += ["--server", f"http://{server}"]
    return subprocess.run(cmd + [str(a) for a in args], capture_output=True, text=True, timeout=600)


def inspect(path, frames, *extra):
    """The CLI's reading of `path`: (JSON report, stderr), every frame listed."""
    r = cli("--json", "inspect", path, "--first", frames, *extra)
    assert r.returncode == 0, r.stderr
    return json.loads(r.stdout), r.stderr


def samples_read(report):
    """The samples the CLI read as an array of frames x channels, in file units."""
    cols = [[row["value"] for row in ch["first"]] for ch in report["channels"]]
    return np.array(cols, dtype=np.float64).T


def test_scipy_riff_files_read_sample_for_sample(tmp_path):
    rng = np.random.default_rng(7)
    n = 1000
    cases = {
        # source: scipy.io.wavfile.write, PCM 16-bit, 2 channels
        "int16": (rng.integers(-32768, 32767, (n, 2), endpoint=True).astype(np.int16), 48000),
        # source: scipy.io.wavfile.write, PCM 32-bit, 3 channels
        "int32": (rng.integers(-(2**31), 2**31 - 1, (n, 3), endpoint=True).astype(np.int32), 96000),
        # source: scipy.io.wavfile.write, PCM 8-bit unsigned (128 is zero), mono
        "uint8": (rng.integers(0, 255, n, endpoint=True).astype(np.uint8), 8000),
        # source: scipy.io.wavfile.write, IEEE float 64-bit, 2 channels
        "float64": (rng.normal(0.0, 0.3, (n, 2)), 51200),
    }
    for name, (data, rate) in cases.items():
        path = tmp_path / f"{name}.wav"
        wavfile.write(path, rate, data)
        report, err = inspect(path, n)
        assert "warning" not in err, (name, err)
        expected = data.reshape(n, -1).astype(np.float64)
        if name == "uint8":
            expected = expected - 128.0  # WAV 8-bit samples are unsigned with 128 as zero
        assert report["sample_rate_hz"] == rate, name
        assert (report["frames"], report["channel_count"]) == expected.shape, name
        # Exact: every sample is an integer or a double carried through as it is.
        np.testing.assert_array_equal(samples_read(report), expected, err_msg=name)
        # The statistics are over the whole file: numpy's on the same samples.
        for c, ch in enumerate(report["channels"]):
            assert ch["min"] == expected[:, c].min() and ch["max"] == expected[:, c].max(), name
            assert ch["rms"] == pytest.approx(np.sqrt(np.mean(expected[:, c] ** 2)), rel=1e-12), name


def test_soundfile_rf64_bw64_and_extensible_files_read_sample_for_sample(tmp_path):
    rng = np.random.default_rng(11)
    n = 777
    given = rng.uniform(-0.9, 0.9, (n, 2))
    # source: soundfile (libsndfile) writing RF64 with 24-bit PCM; what it stored is what
    # soundfile reads back as int32 (24-bit values left-justified in 32 bits), shifted down.
    rf64 = tmp_path / "take.rf64.wav"
    soundfile.write(rf64, given, 44100, subtype="PCM_24", format="RF64")
    assert rf64.read_bytes()[:4] == b"RF64"
    stored, _ = soundfile.read(rf64, dtype="int32")
    expected = (stored >> 8).astype(np.float64)
    # The stored counts are libsndfile's rounding of the values given (2^23 counts full scale).
    assert np.max(np.abs(expected / 2**23 - given)) < 1.0 / 2**22
    report, err = inspect(rf64, n)
    assert "warning" not in err, err
    assert report["container"] == "WAV (RF64)" and report["sample_encoding"] == "PCM 24-bit"
    np.testing.assert_array_equal(samples_read(report), expected)

    # BW64 (ITU-R BS.2088) is RF64 with "BW64" as the first four bytes: soundfile does not
    # write it, so the RF64 file above is relabelled; the samples are soundfile's.
    bw64 = tmp_path / "take.bw64.wav"
    bw64.write_bytes(b"BW64" + rf64.read_bytes()[4:])
    report, _ = inspect(bw64, n)
    assert report["container"] == "WAV (BW64)"
    np.testing.assert_array_equal(samples_read(report), expected)

    # source: soundfile writing WAVEX (WAVE_FORMAT_EXTENSIBLE, IEEE float subformat GUID).
    wavex = tmp_path / "take.wavex.wav"
    f32 = given.astype(np.float32)
    soundfile.write(wavex, f32, 48000, subtype="FLOAT", format="WAVEX")
    assert struct.unpack_from("<H", wavex.read_bytes(), 20)[0] == 0xFFFE, "an extensible fmt chunk"
    report, _ = inspect(wavex, n, "--pa-per-unit", "2000")
    assert report["sample_encoding"] == "IEEE float 32-bit"
    np.testing.assert_array_equal(samples_read(report), f32.astype(np.float64))
    pa = np.array([[row["value_pa"] for row in ch["first"]] for ch in report["channels"]]).T
    np.testing.assert_allclose(pa, 2000.0 * f32.astype(np.float64), rtol=1e-15)


def riff_with_data(tmp_path, name, data, rate=48000):
    """A scipy.io.wavfile file and the byte offset of its data chunk header."""
    path = tmp_path / name
    wavfile.write(path, rate, data)
    raw = path.read_bytes()
    return path, raw, raw.index(b"data")


def test_a_file_cut_short_reads_its_whole_frames_and_warns_with_the_numbers(tmp_path):
    data = (np.arange(600, dtype=np.int16) - 300).reshape(300, 2)  # source: scipy.io.wavfile
    path, raw, at = riff_with_data(tmp_path, "cut.wav", data)
    declared = struct.unpack_from("<I", raw, at + 4)[0]
    assert declared == data.nbytes
    cut = raw[: len(raw) - 403]  # 403 bytes gone: 100 frames and 3 bytes of the one before
    path.write_bytes(cut)
    present = len(cut) - (at + 8)
    frames = present // 4
    report, err = inspect(path, 300)
    assert report["frames"] == frames == 199
    np.testing.assert_array_equal(samples_read(report), data[:frames].astype(np.float64))
    warning = report["warnings"][0]["message"]
    for number in (declared, present, frames):
        assert f"{number}" in warning, warning
    assert "warning:" in err and f"declares {declared} bytes" in err


@pytest.mark.parametrize("placeholder", [0, 0xFFFFFFFF])
def test_a_placeholder_data_size_reads_to_the_end_of_the_file_and_warns(tmp_path, placeholder):
    data = np.linspace(-0.5, 0.5, 250).reshape(125, 2)  # source: scipy.io.wavfile, float64
    path, raw, at = riff_with_data(tmp_path, "stream.wav", data)
    patched = bytearray(raw)
    struct.pack_into("<I", patched, at + 4, placeholder)  # as a streaming writer leaves it
    struct.pack_into("<I", patched, 4, placeholder)
    path.write_bytes(bytes(patched))
    report, err = inspect(path, 125)
    assert report["frames"] == 125
    np.testing.assert_array_equal(samples_read(report), data)
    message = report["warnings"][0]["message"]
    assert "placeholder" in message and f"declares {placeholder} bytes" in message and "125 frames" in message
    assert "warning:" in err


def test_unknown_chunks_with_odd_sizes_are_skipped(tmp_path):
    data = np.array([[1, -1], [2, -2], [3, -3]], dtype=np.int16)  # source: scipy.io.wavfile
    path, raw, at = riff_with_data(tmp_path, "chunks.wav", data)
    # A 3-byte chunk takes a padding byte (RIFF chunks are word-aligned), then a LIST chunk.
    extra = b"junk" + struct.pack("<I", 3) + b"abc\0" + b"LIST" + struct.pack("<I", 4) + b"INFO"
    body = raw[:at] + extra + raw[at:]
    body = body[:4] + struct.pack("<I", len(body) - 8) + body[8:]
    path.write_bytes(body)
    report, err = inspect(path, 3)
    assert "warning" not in err
    assert report["data_offset_bytes"] == at + len(extra) + 8
    np.testing.assert_array_equal(samples_read(report), data.astype(np.float64))


def test_bad_headers_name_the_file_the_byte_and_what_was_expected(tmp_path):
    data = np.zeros((4, 1), dtype=np.int16)
    path, raw, _ = riff_with_data(tmp_path, "bad.wav", data)
    fmt = raw.index(b"fmt ") + 8
    alaw = bytearray(raw)
    struct.pack_into("<H", alaw, fmt, 6)  # format tag 6: A-law, not PCM
    path.write_bytes(bytes(alaw))
    r = cli("inspect", path)
    assert r.returncode == 2
    assert f"bad.wav: byte {fmt}: format tag 0x0006" in r.stderr and "expected 0x0001 PCM" in r.stderr


def test_flags_that_contradict_the_header_are_refused_naming_both_values(tmp_path):
    path, _, _ = riff_with_data(tmp_path, "mono.wav", np.zeros(100, dtype=np.int16), rate=51200)
    r = cli("inspect", path, "--sample-rate-hz", "48000")
    assert r.returncode == 2 and "--sample-rate-hz 48000" in r.stderr and "51200 Hz" in r.stderr, r.stderr
    r = cli("inspect", path, "--channels", "2")
    assert r.returncode == 2 and "--channels 2" in r.stderr and "1 channels" in r.stderr, r.stderr


def tone(n, rate, hz, amplitude):
    """A sine of `hz` (int16 counts): the closed form the extracted tone is checked against."""
    t = np.arange(n) / rate
    return np.round(amplitude * np.sin(2 * np.pi * hz * t)).astype(np.int16)


def test_tones_from_disk_in_blocks_match_one_request(tmp_path, server_address):
    rate, hz = 51200, 3000.0
    x = tone(rate * 2, rate, hz, 10000)
    path = tmp_path / "tone.wav"
    wavfile.write(path, rate, x)  # source: scipy.io.wavfile
    common = ["--json", "tones", path, "--pa-per-unit", "0.001", "--resolution-hz", "25"]
    one = cli(*common, server=server_address)
    blocks = cli(*common, "--block-bytes", "4096", server=server_address)
    assert one.returncode == 0 and blocks.returncode == 0, (one.stderr, blocks.stderr)
    a, b = json.loads(one.stdout), json.loads(blocks.stdout)
    strongest = [max(r["channels"][0]["tones"], key=lambda t: t["level_db"]) for r in (a, b)]
    # Closed form: a sine of amplitude A Pa has an RMS of A / sqrt(2), its level is
    # 20 log10(rms / 20 uPa); here A = 10000 counts x 0.001 Pa per count = 10 Pa.
    level = 20 * np.log10(10.0 / np.sqrt(2) / 20e-6)
    for t in strongest:
        assert abs(t["frequency_hz"] - hz) < 25 and t["level_db"] == pytest.approx(level, abs=0.1), t
    # The same samples by either path: the same answer.
    assert strongest[0]["frequency_hz"] == pytest.approx(strongest[1]["frequency_hz"], rel=1e-9)
    assert strongest[0]["level_db"] == pytest.approx(strongest[1]["level_db"], abs=1e-6)
    rms = 0.001 * np.sqrt(np.mean(x.astype(np.float64) ** 2))  # numpy on the samples written
    for r in (a, b):
        assert r["channels"][0]["rms_pa"] == pytest.approx(rms, rel=1e-9)


def test_a_wav_file_over_twice_the_request_limit_streams_to_its_closed_form_level(tmp_path, server_address, pb, channel):
    # Twice the server's per-request limit plus a second (2 channels of int16 at 51.2 kHz,
    # 2 x 2^25 + 102400 samples, 134 MB): jetloop tones streams it from disk and reads the
    # closed-form levels of its two tones. Source of the file: soundfile (libsndfile), RF64
    # because it is written as a long recording would be.
    limit = pb.info_grpc.InfoServiceStub(channel).ServerInfo(pb.info.ServerInfoRequest()).limits.max_request_samples
    rate = 51200
    frames = limit + rate
    t = np.arange(rate) / rate
    second = np.stack([8000 * np.sin(2 * np.pi * 3000 * t), 2000 * np.sin(2 * np.pi * 5000 * t)], axis=1).astype(np.int16)
    path = tmp_path / "long.wav"
    with soundfile.SoundFile(path, "w", rate, 2, subtype="PCM_16", format="RF64") as f:
        for _ in range(frames // rate):
            f.write(second)
    assert frames // rate * rate * 2 > 2 * limit
    r = cli("--json", "tones", path, "--pa-per-unit", "0.001", "--resolution-hz", "25", server=server_address)
    assert r.returncode == 0, r.stderr
    report = json.loads(r.stdout)
    for ch, (hz, counts) in zip(report["channels"], [(3000.0, 8000), (5000.0, 2000)]):
        strongest = max(ch["tones"], key=lambda x: x["level_db"])
        # Closed form: amplitude A Pa -> 20 log10(A / sqrt(2) / 20 uPa); A = counts x 0.001 Pa.
        level = 20 * np.log10(counts * 0.001 / np.sqrt(2) / 20e-6)
        assert abs(strongest["frequency_hz"] - hz) < 25, strongest
        assert strongest["level_db"] == pytest.approx(level, abs=0.1), strongest


def test_a_recording_over_the_request_limit_is_refused_by_bands_before_upload(tmp_path, server_address, pb, channel):
    limit = pb.info_grpc.InfoServiceStub(channel).ServerInfo(pb.info.ServerInfoRequest()).limits.max_request_samples
    assert limit > 0
    n = limit + 1
    path = tmp_path / "long.wav"
    wavfile.write(path, 8000, np.full(n, 128, dtype=np.uint8))  # source: scipy.io.wavfile, 8-bit
    r = cli("bands", path, "--pa-per-unit", "1", server=server_address)
    assert r.returncode == 2, r.stderr
    assert f"{n} samples" in r.stderr and f"limit of {limit} samples" in r.stderr and "nothing was sent" in r.stderr
    # (tones, tones --cross and ramp stream such a file instead: ExtractTonesStream,
    # CrossSpectraStream and AnalyseRampStream have no length limit.)


@pytest.mark.parametrize("value", ["0", "1023", "33554433"])
def test_block_bytes_outside_its_range_is_refused_at_parsing(tmp_path, value):
    r = cli("tones", tmp_path / "x.wav", "--pa-per-unit", "1", "--block-bytes", value)
    assert r.returncode == 2
    assert "1024 to 33554432" in r.stderr and "h2 protocol" not in r.stderr, r.stderr
