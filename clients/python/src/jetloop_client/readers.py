"""Readers of a lab's recording files into one `Recording` (samples (frames, channels), rate in
Hz, channel names and units): WAV, TDMS, HDF5 and MAT files. Each needs an optional package,
installed with `pip install "jetloop-client[files]"`; every error names the file and what was
expected."""
import math
import os
import struct
from typing import List, Optional, Sequence, Union

import numpy as np

from .recording import Recording, frames_array

PathLike = Union[str, os.PathLike]

#: Attribute names tried, in order, for the sample rate (Hz) of an HDF5 dataset (on the dataset,
#: then its group, then the file) when none is named.
RATE_ATTRIBUTES = ("sample_rate_hz", "sample_rate", "sampling_rate_hz", "sampling_rate", "samplerate",
                   "sampling_frequency", "fs", "Fs", "rate")
#: Attribute names tried for the sample interval (s) when no rate attribute is found.
INTERVAL_ATTRIBUTES = ("wf_increment", "dt", "sample_interval_s")


def _need(module: str, path: PathLike, what: str):
    try:
        return __import__(module)
    except ImportError:
        raise ImportError(f"{path}: reading {what} needs the package {module!r}: "
                          f'pip install "jetloop-client[files]"') from None


def _readable(path: PathLike) -> None:
    """Raises OSError (FileNotFoundError, PermissionError, naming the file) unless `path` can be
    opened for reading: file-system errors stay OSError, content errors are ValueError."""
    with open(path, "rb"):
        pass


def _rate(path: PathLike, value, where: str) -> float:
    try:
        fs = float(np.asarray(value).reshape(-1)[0]) if np.size(value) == 1 else float("nan")
    except (TypeError, ValueError):
        fs = float("nan")
    if not (math.isfinite(fs) and fs > 0):
        shown = repr(value) if np.size(value) == 1 else f"an array of shape {np.shape(value)} ({np.asarray(value).dtype})"
        raise ValueError(f"{path}: {where} = {shown}: expected one sample rate in Hz above 0")
    return fs


def _recording(path: PathLike, samples, fs: float, names: Sequence[str], units: Sequence[str],
               what: str) -> Recording:
    try:
        x = frames_array(samples, what)
    except ValueError as e:
        raise ValueError(f"{path}: {e}") from None
    units = list(units) * x.shape[1] if len(units) == 1 else list(units)
    for label, v in (("channel names", names), ("units", units)):
        if len(v) and len(v) != x.shape[1]:
            raise ValueError(f"{path}: {len(v)} {label} for the {x.shape[1]} channels of {what}: expected one per "
                             "channel")
    return Recording(samples=np.asarray(x, dtype=np.float64), sample_rate_hz=fs,
                     channel_names=list(names) or [""] * x.shape[1], units=list(units) or [""] * x.shape[1],
                     source=str(path))


def _wav_format(path: PathLike):
    """(format tag, bits per sample) from a WAV file's fmt chunk (1 integer PCM, 3 float)."""
    with open(path, "rb") as f:
        head = f.read(12)
        if head[:4] not in (b"RIFF", b"RF64") or head[8:12] != b"WAVE":
            raise ValueError(f"{path}: not a WAV file (expected RIFF/WAVE at byte 0, found {head[:4]!r})")
        while True:
            chunk = f.read(8)
            if len(chunk) < 8:
                raise ValueError(f"{path}: no fmt chunk before the end of the file (byte {f.tell()})")
            cid, size = chunk[:4], struct.unpack("<I", chunk[4:])[0]
            if cid == b"fmt ":
                at, body = f.tell(), f.read(size)
                if len(body) < 16:
                    raise ValueError(f"{path}: the fmt chunk at byte {at} holds {len(body)} bytes: expected at least 16")
                tag, _, _, _, _, bits = struct.unpack("<HHIIHH", body[:16])
                if tag == 0xFFFE and len(body) >= 26:  # WAVE_FORMAT_EXTENSIBLE: the sub-format's tag
                    tag = struct.unpack("<H", body[24:26])[0]
                return tag, bits
            f.seek(size + (size & 1), 1)


def read_wav(path: PathLike) -> Recording:
    """A WAV file: integer files in counts (per bit depth: 16-bit -32768..32767, 24-bit
    -8388608..8388607), float files in full-scale units, as the CLI reads them, so a
    `pa_per_unit` calibration means the same in both. Read with soundfile, else scipy."""
    tag, bits = _wav_format(path)
    integer = tag == 1
    units = f"counts ({bits}-bit PCM)" if integer else "full scale"
    try:
        import soundfile
    except ImportError:
        soundfile = None
    if soundfile is not None:
        try:
            if integer and bits <= 16:
                x, fs = soundfile.read(path, dtype="int16", always_2d=True)
                x = x.astype(np.float64) / (1 << (16 - bits))  # left-justified in int16
            elif integer:
                x, fs = soundfile.read(path, dtype="int32", always_2d=True)
                x = x.astype(np.float64) / (1 << (32 - bits))  # left-justified in int32
            else:
                x, fs = soundfile.read(path, dtype="float64", always_2d=True)
        except RuntimeError as e:  # soundfile.LibsndfileError derives from RuntimeError
            raise ValueError(f"{path}: not a readable WAV file: {e}") from None
    else:
        wavfile = _need("scipy.io.wavfile", path, "WAV files").io.wavfile
        try:
            fs, x = wavfile.read(path)
        except ValueError as e:
            raise ValueError(f"{path}: not a readable WAV file: {e}") from None
        if x.dtype == np.uint8:
            x = x.astype(np.float64) - 128.0
        elif x.dtype.kind == "i":
            # scipy returns integer depths left-justified in the smallest type that holds them.
            x = x.astype(np.float64) / (1 << (8 * x.dtype.itemsize - bits))
        else:
            x = x.astype(np.float64)
    x = x.reshape(len(x), -1)
    return _recording(path, x, float(fs), [], [units] * x.shape[1], "the WAV samples")


def read_tdms(path: PathLike, group: Optional[str] = None, channels: Optional[Sequence[str]] = None) -> Recording:
    """Channels of one group of a TDMS file (nptdms): `group` may be left out when the file has
    one; `channels` (names) default to all of the group's. Samples are nptdms's scaled values
    (NI linear and other scalings stored in the file applied); the rate is 1 / wf_increment;
    units from `unit_string`. All channels must share length and rate."""
    nptdms = _need("nptdms", path, "TDMS files")
    _readable(path)
    try:
        f = nptdms.TdmsFile.read(path)
    except (OSError, ValueError, KeyError, struct.error) as e:
        raise ValueError(f"{path}: not a readable TDMS file: {e}") from None
    groups = [g.name for g in f.groups()]
    if group is None:
        if len(groups) != 1:
            raise ValueError(f"{path}: {len(groups)} groups ({', '.join(groups) or 'none'}): name the group to read")
        group = groups[0]
    if group not in groups:
        raise ValueError(f"{path}: no group {group!r}; the file has {', '.join(groups) or 'none'}")
    g = f[group]
    present = [c.name for c in g.channels()]
    names = list(channels) if channels is not None else present
    if not names:
        raise ValueError(f"{path}: group {group!r} has no channels")
    missing = [n for n in names if n not in present]
    if missing:
        raise ValueError(f"{path}: group {group!r} has no channel {missing[0]!r}; it has {', '.join(present)}")
    columns, rates, units = [], [], []
    for n in names:
        ch = g[n]
        inc = ch.properties.get("wf_increment")
        if inc is None:
            raise ValueError(f"{path}: channel {group}/{n} has no wf_increment property: expected the sample "
                             "interval in s (a waveform channel)")
        rates.append(1.0 / _rate(path, inc, f"channel {group}/{n} wf_increment"))
        columns.append(np.asarray(ch[:], dtype=np.float64))
        units.append(str(ch.properties.get("unit_string", "")))
    lengths = {len(c) for c in columns}
    if len(lengths) != 1:
        raise ValueError(f"{path}: channels of group {group!r} have lengths {[len(c) for c in columns]}: expected "
                         "one length for all")
    if any(not math.isclose(r, rates[0], rel_tol=1e-9) for r in rates):
        raise ValueError(f"{path}: channels of group {group!r} have sample rates {rates} Hz: expected one rate")
    return _recording(path, np.stack(columns, axis=1), rates[0], names, units, f"group {group!r}")


def _attr_rate(path: PathLike, holders, rate_attribute: Optional[str]) -> float:
    if rate_attribute is not None:
        for h in holders:
            if rate_attribute in h.attrs:
                return _rate(path, h.attrs[rate_attribute], f"attribute {rate_attribute}")
        raise ValueError(f"{path}: no attribute {rate_attribute!r} on the dataset, its group or the file")
    for h in holders:
        for a in RATE_ATTRIBUTES:
            if a in h.attrs:
                return _rate(path, h.attrs[a], f"attribute {a}")
        for a in INTERVAL_ATTRIBUTES:
            if a in h.attrs:
                return 1.0 / _rate(path, h.attrs[a], f"attribute {a}")
    raise ValueError(f"{path}: no sample rate attribute (tried {', '.join(RATE_ATTRIBUTES + INTERVAL_ATTRIBUTES)} "
                     "on the dataset, its group and the file): name one with rate_attribute= or give sample_rate_hz=")


def _texts(values) -> List[str]:
    return [v.decode() if isinstance(v, bytes) else str(v) for v in np.asarray(values).reshape(-1)]


def read_hdf5(path: PathLike, dataset: str, rate_attribute: Optional[str] = None,
              sample_rate_hz: Optional[float] = None, channels_first: bool = False) -> Recording:
    """The `dataset` (a path such as "/run3/mics") of an HDF5 file (h5py), of shape (frames,
    channels) or (frames,), or (channels, frames) with `channels_first`. The rate is
    `sample_rate_hz`, else the attribute `rate_attribute`, else the first of RATE_ATTRIBUTES
    (Hz) or INTERVAL_ATTRIBUTES (s) found on the dataset, its group or the file. Channel names
    and units come from `channel_names` and `units` attributes where present."""
    h5py = _need("h5py", path, "HDF5 files")
    _readable(path)
    try:
        f = h5py.File(path, "r")
    except OSError as e:
        raise ValueError(f"{path}: not a readable HDF5 file: {e}") from None
    with f:
        if dataset not in f or not isinstance(f[dataset], h5py.Dataset):
            found = []
            f.visititems(lambda name, obj: found.append("/" + name) if isinstance(obj, h5py.Dataset) else None)
            raise ValueError(f"{path}: no dataset {dataset!r}; datasets: {', '.join(found[:20]) or 'none'}")
        ds = f[dataset]
        x = ds[()]
        if channels_first:
            x = np.asarray(x).T
        fs = _rate(path, sample_rate_hz, "sample_rate_hz") if sample_rate_hz is not None \
            else _attr_rate(path, (ds, ds.parent, f), rate_attribute)
        names = _texts(ds.attrs["channel_names"]) if "channel_names" in ds.attrs else []
        unit_attr = next((a for a in ("units", "unit") if a in ds.attrs), None)
        units = _texts(ds.attrs[unit_attr]) if unit_attr else []
    return _recording(path, x, fs, names, units, f"dataset {dataset!r}")


def read_mat(path: PathLike, data_variable: str, rate_variable: Optional[str] = None,
             sample_rate_hz: Optional[float] = None, names_variable: Optional[str] = None) -> Recording:
    """The variable `data_variable` (frames x channels, as MATLAB shows it) of a MAT file with
    the rate (Hz) in `rate_variable` or given as `sample_rate_hz`; channel names from the cell
    array or char matrix `names_variable` if given. Version 5 files are read with
    scipy.io.loadmat, version 7.3 (HDF5) with h5py."""
    if (rate_variable is None) == (sample_rate_hz is None):
        raise ValueError(f"{path}: give rate_variable (the variable holding the rate in Hz) or sample_rate_hz, "
                         "one of them")
    wanted = [v for v in (data_variable, rate_variable, names_variable) if v]
    with open(path, "rb") as fh:
        head = fh.read(128)
    if len(head) < 128 or not head.startswith(b"MATLAB"):
        raise ValueError(f"{path}: not a MAT file (expected the text 'MATLAB' at byte 0 of a 128-byte header)")
    version = struct.unpack("<H", head[124:126])[0] if head[126:128] == b"IM" else \
        struct.unpack(">H", head[124:126])[0]
    if version == 0x0200:
        h5py = _need("h5py", path, "MAT files of version 7.3")
        with h5py.File(path, "r") as f:
            missing = [v for v in wanted if v not in f]
            if missing:
                raise ValueError(f"{path}: no variable {missing[0]!r}; variables: {', '.join(k for k in f.keys() if not k.startswith('#'))}")
            # MATLAB writes column-major: an m x n variable is stored as an n x m dataset.
            values = {v: np.asarray(f[v][()]).T for v in wanted}
            if names_variable:
                values[names_variable] = _mat73_texts(f, f[names_variable])
    else:
        sio = _need("scipy.io", path, "MAT files").io
        try:
            values = sio.loadmat(path, variable_names=wanted)
        except (ValueError, TypeError, OSError) as e:
            raise ValueError(f"{path}: not a readable MAT file: {e}") from None
        missing = [v for v in wanted if v not in values]
        if missing:
            found = [n for n, _, _ in sio.whosmat(path)]
            raise ValueError(f"{path}: no variable {missing[0]!r}; variables: {', '.join(found) or 'none'}")
        if names_variable:
            values[names_variable] = _mat5_texts(values[names_variable])
    x = np.asarray(values[data_variable])
    if x.ndim == 2 and 1 in x.shape:
        x = x.reshape(-1)  # a MATLAB vector, row or column, is one channel
    fs = _rate(path, values[rate_variable], f"variable {rate_variable}") if rate_variable \
        else _rate(path, sample_rate_hz, "sample_rate_hz")
    names = values[names_variable] if names_variable else []
    return _recording(path, x, fs, names, [], f"variable {data_variable!r}")


def _mat5_texts(v) -> List[str]:
    """Names from a MATLAB cell array of char vectors or a char matrix (scipy.io.loadmat)."""
    a = np.asarray(v)
    if a.dtype.kind == "U":
        return [str(s).strip() for s in a.reshape(-1)]
    return [str(np.asarray(e).reshape(-1)[0]).strip() if np.size(e) else "" for e in a.reshape(-1)]


def _mat73_texts(f, ds) -> List[str]:
    """Names from a version 7.3 cell array of char vectors (references to uint16 datasets) or a
    char matrix."""
    a = ds[()]
    if a.dtype.kind == "O":
        return ["".join(chr(c) for c in np.asarray(f[r][()]).reshape(-1)) for r in a.T.reshape(-1)]
    a = np.asarray(a).T
    return ["".join(chr(c) for c in row).strip() for row in np.atleast_2d(a)]
