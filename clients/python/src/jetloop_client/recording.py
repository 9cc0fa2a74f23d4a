"""A recording as the readers give it (`Recording`), and the packing of samples into the
`Samples` message every analysis takes: the shape checked as (frames, channels), the samples as
little-endian float32 bytes, the calibration common or per channel."""
import math
import numbers
from dataclasses import dataclass, field, replace
from typing import List, Optional, Sequence, Tuple

import numpy as np

from jetloop.v1 import spectrum_pb2 as s

from .calibration import resolve


@dataclass
class Recording:
    """Samples read from a file: `samples` of shape (frames, channels) in the file's units,
    `sample_rate_hz` (Hz), one name and one unit text per channel ("" where the file has none),
    the `source` file, and optionally the `calibration` (a `Calibration`, or one
    `Calibration`/`ChannelCalibration` per channel) the analyses use when none is passed."""

    samples: np.ndarray
    sample_rate_hz: float
    channel_names: List[str] = field(default_factory=list)
    units: List[str] = field(default_factory=list)
    source: str = ""
    calibration: object = None

    @property
    def channels(self) -> int:
        """The number of channels."""
        return int(self.samples.shape[1])

    @property
    def frames(self) -> int:
        """The number of frames (samples per channel)."""
        return int(self.samples.shape[0])

    def with_calibration(self, calibration) -> "Recording":
        """The same recording with `calibration` (a `Calibration`, or one per channel)."""
        return replace(self, calibration=calibration)


def frames_array(samples, what: str = "samples") -> np.ndarray:
    """`samples` as a 2-D array of shape (frames, channels) (a 1-D array is one channel).

    Raises ValueError for None, another number of dimensions, no frames, or an array with more
    channels than frames (a (channels, frames) array given the wrong way round)."""
    if samples is None:
        raise ValueError(f"{what} is None: expected an array of shape (frames, channels) or (frames,)")
    x = np.asarray(samples)
    if x.dtype.kind not in "iuf":
        raise ValueError(f"{what} has dtype {x.dtype}: expected real numbers, shape (frames, channels)")
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2:
        raise ValueError(f"{what} has shape {x.shape}: expected (frames, channels) or (frames,)")
    if x.shape[0] == 0 or x.shape[1] == 0:
        raise ValueError(f"{what} has shape {x.shape}: expected (frames, channels) with at least one of each")
    if x.shape[1] > x.shape[0]:
        raise ValueError(f"{what} has shape {x.shape}: expected (frames, channels), and {x.shape[1]} channels of "
                         f"{x.shape[0]} frames looks like (channels, frames); pass the transpose (x.T)")
    return x


def to_bytes(samples, what: str = "samples") -> Tuple[bytes, int]:
    """Interleaved little-endian float32 bytes and the channel count of `samples`."""
    x = frames_array(samples, what)
    return np.ascontiguousarray(x, dtype="<f4").tobytes(), x.shape[1]


def unpack(samples, sample_rate_hz, calibration, channel_names: Sequence[str] = ()):
    """(array (frames, channels), sample rate in Hz, calibration, channel names) from plain
    arguments or a `Recording` (whose rate, names and calibration fill what is not given; a
    calibration passed as the second argument of a recording is taken as such)."""
    if isinstance(samples, Recording):
        rec = samples
        if sample_rate_hz is not None and not isinstance(sample_rate_hz, numbers.Real):
            calibration, sample_rate_hz = sample_rate_hz if calibration is None else calibration, None
        if sample_rate_hz is not None and not math.isclose(float(sample_rate_hz), rec.sample_rate_hz, rel_tol=1e-12):
            raise ValueError(f"sample_rate_hz = {sample_rate_hz} for a recording of {rec.source or 'an array'} at "
                             f"{rec.sample_rate_hz} Hz: leave it out, the recording carries its rate")
        names = list(channel_names) or [n for n in rec.channel_names]
        return rec.samples, rec.sample_rate_hz, calibration if calibration is not None else rec.calibration, names
    if sample_rate_hz is None or isinstance(sample_rate_hz, bool) or not isinstance(sample_rate_hz, numbers.Real):
        raise ValueError(f"sample_rate_hz = {sample_rate_hz!r}: expected the sample rate in Hz (a number)")
    return samples, float(sample_rate_hz), calibration, list(channel_names)


def samples_message(samples, sample_rate_hz=None, calibration=None, channel_names: Sequence[str] = (),
                    with_data: bool = True, channels: Optional[int] = None) -> s.Samples:
    """The `Samples` message of an analysis; `with_data=False` gives the header of a stream
    (`channels` channels, the data following in blocks)."""
    x, fs, cal, names = unpack(samples, sample_rate_hz, calibration, channel_names)
    if with_data:
        data, channels = to_bytes(x)
    else:
        data = b""
    common, per_channel, cal_names = resolve(cal, channels)
    names = names or cal_names
    if names and len(names) != channels:
        raise ValueError(f"{len(names)} channel_names for {channels} channels: give one per channel or none")
    msg = s.Samples(sample_rate_hz=fs, channel_count=channels,
                    raw=s.RawSamples(data=data, format=s.SAMPLE_FORMAT_F32_LE), channel_names=names)
    if common is not None:
        msg.calibration.CopyFrom(common)
    else:
        msg.channel_calibrations.extend(per_channel)
    return msg
