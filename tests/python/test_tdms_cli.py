"""NI TDMS recordings read by the jetloop CLI, checked against the nptdms package (npTDMS on
PyPI): files written by nptdms's TdmsWriter, and what nptdms's own reader (TdmsFile.read, which
applies the NI linear scaling properties) returns for them, sample by sample.

nptdms's writer writes contiguous data only (its segments always carry kTocMetaData,
kTocRawData and kTocNewObjList, little-endian), so the interleaved file, with a segment that
reuses the previous metadata and a big-endian one, is built here field by field from NI's
documented layout ("TDMS file format internal structure") with struct.pack, and checked
against nptdms's reader and the values packed.
"""
import json
import math
import struct
import subprocess

import numpy as np
import pytest
from nptdms import ChannelObject, GroupObject, RootObject, TdmsFile, TdmsWriter
from nptdms.types import Uint32

from conftest import _cli_binary

FS = 51200.0


def cli(*args, ok=True):
    r = subprocess.run([str(_cli_binary()), *map(str, args)], capture_output=True, text=True, timeout=120)
    if ok:
        assert r.returncode == 0, r.stderr
    return r


def info(path, *args):
    """`jetloop --json tdms-info PATH ... --values 64`: {"list": per channel, "values": per channel}."""
    out = json.loads(cli("--json", "tdms-info", path, *args, "--values", "64").stdout)
    return (
        {(c["group"], c["channel"]): c for c in out["channel_list"]},
        {v["channel"]: v for v in out["channel_values"]},
    )


def scaling(slope, intercept):
    """NI linear scaling properties: one scale, applied to the raw values."""
    return {
        "NI_Number_Of_Scales": Uint32(1),
        "NI_Scaling_Status": "unscaled",
        "NI_Scale[0]_Scale_Type": "Linear",
        "NI_Scale[0]_Linear_Slope": slope,
        "NI_Scale[0]_Linear_Y_Intercept": intercept,
        "NI_Scale[0]_Linear_Input_Source": Uint32(0xFFFFFFFF),
    }


def write_rig(path, rng):
    """Three segments (three write_segment calls) of group "mics": p_pa (float64, Pa), mic_v
    (int16 counts with linear scaling to V), p2_pa (float32, Pa); group "aux" with a string
    channel. Returns the arrays written."""
    n = [1000, 1500, 737]
    p = rng.normal(0.0, 40.0, sum(n))
    counts = rng.integers(-30000, 30000, sum(n)).astype(np.int16)
    p2 = rng.normal(0.0, 3.0, sum(n)).astype(np.float32)
    props = {"wf_increment": 1.0 / FS, "wf_start_offset": 0.0}
    with TdmsWriter(str(path)) as w:
        at = 0
        for k, m in enumerate(n):
            s = slice(at, at + m)
            objs = [
                ChannelObject("mics", "p_pa", p[s], properties={**props, "unit_string": "Pa"}),
                ChannelObject("mics", "mic_v", counts[s], properties={**props, "unit_string": "V", **scaling(3.0e-4, 0.125)}),
                ChannelObject("mics", "p2_pa", p2[s], properties={**props, "NI_UnitDescription": "Pa"}),
            ]
            if k == 0:
                objs = [RootObject({"rig": "nozzle A"}), GroupObject("mics", {"ring": "8 mics"}), *objs,
                        ChannelObject("aux", "notes", ["start", "steady", "stop"])]
            w.write_segment(objs)
            at += m
    return {"p_pa": p, "mic_v": counts, "p2_pa": p2}


def test_contiguous_segments_scaling_and_units_match_nptdms(tmp_path):
    path = tmp_path / "rig.tdms"
    written = write_rig(path, np.random.default_rng(7))
    ref = TdmsFile.read(str(path))
    listing, values = info(path, "--tdms-group", "mics")
    assert set(values) == {"p_pa", "mic_v", "p2_pa"}
    for name in values:
        theirs = ref["mics"][name][:]
        # nptdms's reader returns what was written (the int16 channel scaled: slope * raw + intercept).
        expected = written[name] * 3.0e-4 + 0.125 if name == "mic_v" else written[name]
        np.testing.assert_allclose(theirs, expected, rtol=1e-15)
        row = listing[("mics", name)]
        assert row["samples"] == len(theirs) == 3237
        # Sample rate 1 / wf_increment (nptdms channel properties).
        assert row["sample_rate_hz"] == pytest.approx(1.0 / ref["mics"][name].properties["wf_increment"], rel=1e-12)
        first = np.array([float(x) for x in values[name]["first_values"].split()])
        np.testing.assert_allclose(first, theirs[:64], rtol=1e-15, atol=0)
        assert values[name]["samples"] == len(theirs)
        assert values[name]["rms"] == pytest.approx(math.sqrt(np.mean(np.square(theirs, dtype=np.float64))), rel=1e-12)
        assert values[name]["mean"] == pytest.approx(float(np.mean(theirs, dtype=np.float64)), rel=1e-9, abs=1e-12)
        assert values[name]["max"] == float(np.max(theirs))
    assert listing[("mics", "mic_v")]["unit"] == "V"
    assert listing[("mics", "mic_v")]["scaling"] == "0.0003 * raw + 0.125"
    assert listing[("mics", "p2_pa")]["unit"] == "Pa"
    assert listing[("aux", "notes")]["data_type"] == "string"

    # A chosen subset, in the order asked.
    _, sub = info(path, "--tdms-group", "mics", "--tdms-channels", "p2_pa,p_pa")
    assert list(sub) == ["p2_pa", "p_pa"]
    # Two groups and none asked: refused, naming them; a string channel: refused, naming it.
    r = cli("tdms-info", path, "--values", "3", ok=False)
    assert r.returncode == 2 and "2 groups ('mics', 'aux'): choose one with --tdms-group" in r.stderr, r.stderr
    r = cli("tdms-info", path, "--values", "3", "--tdms-group", "aux", ok=False)
    assert r.returncode == 2 and "channel /'aux'/'notes' holds string data" in r.stderr, r.stderr


def lead_in(toc, meta, raw, big=False):
    """Tag, ToC (little-endian), then version 4713, next segment offset and raw data offset in
    the segment's byte order."""
    e = ">" if big else "<"
    return b"TDSm" + struct.pack("<I", toc) + struct.pack(e + "IQQ", 4713, len(meta) + len(raw), len(meta))


def tstr(s, e):
    b = s.encode()
    return struct.pack(e + "I", len(b)) + b


def obj(path, index, props, e):
    """Object path, raw data index (None: 0xFFFFFFFF; "same": 0x00000000; (type, count): the
    20-byte index), properties [(name, type code, packed value)]."""
    out = tstr(path, e)
    if index is None:
        out += struct.pack(e + "I", 0xFFFFFFFF)
    elif index == "same":
        out += struct.pack(e + "I", 0)
    else:
        out += struct.pack(e + "IIIQ", 20, index[0], 1, index[1])
    out += struct.pack(e + "I", len(props))
    for name, code, value in props:
        out += tstr(name, e) + struct.pack(e + "I", code) + value
    return out


META, NEW_LIST, RAW, INTERLEAVED, BIG = 1 << 1, 1 << 2, 1 << 3, 1 << 5, 1 << 6
INT16, FLOAT32, FLOAT64, UINT32, STRING = 2, 9, 10, 7, 0x20


def write_interleaved(path, rng):
    """Segment 1 (little-endian, new object list): two chunks of 4 frames (int16 mic_i16 with a
    linear scale to V, float32 p_f32 in Pa). Segment 2: no metadata (segment 1's layout), three
    chunks. Segment 3 (big-endian): both objects "same as previous", one chunk."""
    e = "<"
    dt = struct.pack(e + "d", 1.0 / FS)
    mic_props = [
        ("wf_increment", FLOAT64, dt),
        ("unit_string", STRING, tstr("V", e)),
        ("NI_Number_Of_Scales", UINT32, struct.pack(e + "I", 1)),
        ("NI_Scale[0]_Scale_Type", STRING, tstr("Linear", e)),
        ("NI_Scale[0]_Linear_Slope", FLOAT64, struct.pack(e + "d", 2.0e-3)),
        ("NI_Scale[0]_Linear_Y_Intercept", FLOAT64, struct.pack(e + "d", -0.5)),
    ]
    p_props = [("wf_increment", FLOAT64, dt), ("unit_string", STRING, tstr("Pa", e))]
    meta = struct.pack(e + "I", 4) + obj("/", None, [], e) + obj("/'rig'", None, [("run", STRING, tstr("42", e))], e)
    meta += obj("/'rig'/'mic_i16'", (INT16, 4), mic_props, e) + obj("/'rig'/'p_f32'", (FLOAT32, 4), p_props, e)
    frames = 4 * (2 + 3 + 1)
    ints = rng.integers(-2000, 2000, frames).astype(np.int16)
    floats = rng.normal(0.0, 10.0, frames).astype(np.float32)

    def frames_bytes(lo, hi, e):
        return b"".join(struct.pack(e + "hf", int(ints[k]), float(floats[k])) for k in range(lo, hi))

    out = lead_in(META | NEW_LIST | RAW | INTERLEAVED, meta, raw := frames_bytes(0, 8, "<")) + meta + raw
    out += lead_in(RAW | INTERLEAVED, b"", raw := frames_bytes(8, 20, "<")) + raw
    meta3 = struct.pack(">I", 2) + obj("/'rig'/'mic_i16'", "same", [], ">") + obj("/'rig'/'p_f32'", "same", [], ">")
    out += lead_in(META | RAW | INTERLEAVED | BIG, meta3, raw := frames_bytes(20, 24, ">"), big=True) + meta3 + raw
    path.write_bytes(out)
    return ints, floats


def test_hand_built_interleaved_reused_and_big_endian_segments_match_nptdms(tmp_path):
    path = tmp_path / "interleaved.tdms"
    ints, floats = write_interleaved(path, np.random.default_rng(11))
    ref = TdmsFile.read(str(path))
    # nptdms's reader sees the values packed (the int16 channel scaled 2e-3 * raw - 0.5).
    np.testing.assert_allclose(ref["rig"]["mic_i16"][:], ints * 2.0e-3 - 0.5, rtol=1e-15)
    np.testing.assert_array_equal(ref["rig"]["p_f32"][:], floats)
    listing, values = info(path)
    for name in ("mic_i16", "p_f32"):
        theirs = ref["rig"][name][:]
        assert listing[("rig", name)]["samples"] == len(theirs) == 24
        assert listing[("rig", name)]["sample_rate_hz"] == pytest.approx(FS, rel=1e-12)
        first = np.array([float(x) for x in values[name]["first_values"].split()])
        np.testing.assert_allclose(first, theirs.astype(np.float64), rtol=1e-15, atol=0)
        assert values[name]["rms"] == pytest.approx(math.sqrt(np.mean(np.square(theirs, dtype=np.float64))), rel=1e-12)


def test_an_analysis_command_reads_tdms_channels_in_pascals_and_volts(server_address, tmp_path):
    """`jetloop tones` on a TDMS file: a float64 channel in Pa (no calibration flag needed) and
    an int16 channel scaled to V by the file (the microphone flags apply): both a 100 Pa
    amplitude tone at 5200 Hz, i.e. 20 log10((100 / sqrt 2) / 20e-6) = 130.97 dB re 20 uPa
    (definition of sound pressure level)."""
    t = np.arange(int(FS)) / FS
    p = 100.0 * np.sin(2 * np.pi * 5200.0 * t)
    counts = np.round(10000.0 * np.sin(2 * np.pi * 5200.0 * t)).astype(np.int16)  # 1e-4 V per count: 1 V
    path = tmp_path / "tone.tdms"
    props = {"wf_increment": 1.0 / FS}
    with TdmsWriter(str(path)) as w:
        w.write_segment([
            ChannelObject("mics", "p_pa", p, properties={**props, "unit_string": "Pa"}),
            ChannelObject("mics", "mic_v", counts, properties={**props, "unit_string": "V", **scaling(1.0e-4, 0.0)}),
        ])
    ref = TdmsFile.read(str(path))["mics"]
    server = f"http://{server_address}"
    r = cli("--server", server, "--json", "tones", path, "--tdms-channels", "p_pa")
    [ch] = json.loads(r.stdout)["channels"]
    assert ch["channel"] == "p_pa"
    # rms_pa: the RMS nptdms reads, 1 Pa per unit.
    assert ch["rms_pa"] == pytest.approx(math.sqrt(np.mean(np.square(ref["p_pa"][:]))), rel=1e-9)
    # Volts without a sensitivity: refused, naming the channel and its unit.
    r = cli("--server", server, "tones", path, ok=False)
    assert r.returncode == 2 and "'mic_v' (V)" in r.stderr, r.stderr
    # 0.01 V/Pa: 1 V amplitude is 100 Pa; the Pa channel keeps 1 Pa per unit.
    r = cli("--server", server, "--json", "tones", path, "--sensitivity-v-per-pa", "0.01", "--volts-per-unit", "1")
    chans = {c["channel"]: c for c in json.loads(r.stdout)["channels"]}
    spl = 20 * math.log10(100 / math.sqrt(2) / 20e-6)
    assert chans["mic_v"]["rms_pa"] == pytest.approx(math.sqrt(np.mean(np.square(ref["mic_v"][:]))) / 0.01, rel=1e-9)
    for name in ("p_pa", "mic_v"):
        # The strongest line (int16 rounding adds lines ~80 dB lower at multiples of 400 Hz).
        tone = max(chans[name]["tones"], key=lambda x: x["level_db"])
        assert tone["frequency_hz"] == pytest.approx(5200.0, rel=1e-4)
        assert abs(tone["level_db"] - spl) < 0.1
