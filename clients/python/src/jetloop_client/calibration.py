"""Calibrations: how sample units become pascals, for every channel at once (`Calibration`) or
for each channel of a ring or array on its own (`ChannelCalibration`, or a TOML calibration
file in the CLI's `--calibration-file` format, read by `load_calibration_file`)."""
import math
import numbers
import os
from dataclasses import dataclass
from typing import List, Optional, Sequence, Tuple, Union

import numpy as np

from jetloop.v1 import spectrum_pb2 as s


@dataclass(frozen=True)
class Calibration:
    """How sample units become pascals, the same for every channel; build it with one of the
    class methods."""

    message: s.Calibration

    @classmethod
    def pascals(cls) -> "Calibration":
        """The samples are already in pascals (1 Pa per unit)."""
        return cls(s.Calibration(in_pascals=True))

    @classmethod
    def pascals_per_unit(cls, pa_per_unit: float) -> "Calibration":
        """Pascals per sample unit (Pa/unit)."""
        return cls(s.Calibration(pascals_per_unit=pa_per_unit))

    @classmethod
    def microphone(cls, sensitivity_v_per_pa: float, volts_per_unit: float) -> "Calibration":
        """From the microphone sensitivity (V/Pa) and the DAQ's volts per sample unit (V/unit)."""
        return cls(s.Calibration(microphone=s.MicrophoneChain(
            sensitivity_v_per_pa=sensitivity_v_per_pa, volts_per_unit=volts_per_unit)))


@dataclass(frozen=True)
class ChannelCalibration:
    """One channel's calibration: `pa_per_unit` (Pa per sample unit), or `sensitivity_v_per_pa`
    (the microphone's V/Pa) with `volts_per_unit` (the DAQ's V per sample unit); `name` (e.g.
    the microphone's position, "" for none) is echoed in the answers."""

    name: str = ""
    sensitivity_v_per_pa: Optional[float] = None
    pa_per_unit: Optional[float] = None
    volts_per_unit: Optional[float] = None
    #: The microphone's response-curve file (CSV frequency_hz,correction_db) a calibration
    #: file names, resolved against the file's folder; the CLI applies it, the Python client
    #: keeps it for the caller.
    response_curve: Optional[str] = None
    #: The microphone's azimuth on a ring, degrees, as a calibration file gives it.
    azimuth_deg: Optional[float] = None

    def message(self, where: str = "") -> s.Calibration:
        """The proto calibration; `where` names the channel in the error.

        Raises ValueError unless exactly one of pa_per_unit, or sensitivity_v_per_pa with
        volts_per_unit, is given as finite positive numbers."""
        label = where or (f"channel calibration {self.name!r}" if self.name else "channel calibration")
        for key in ("sensitivity_v_per_pa", "pa_per_unit", "volts_per_unit"):
            v = getattr(self, key)
            if v is not None and (isinstance(v, bool) or not isinstance(v, numbers.Real) or not (math.isfinite(v) and v > 0)):
                raise ValueError(f"{label}: {key} = {v!r}; expected a finite number above 0")
        if self.pa_per_unit is not None and self.sensitivity_v_per_pa is None and self.volts_per_unit is None:
            return s.Calibration(pascals_per_unit=float(self.pa_per_unit))
        if self.pa_per_unit is None and self.sensitivity_v_per_pa is not None and self.volts_per_unit is not None:
            return s.Calibration(microphone=s.MicrophoneChain(sensitivity_v_per_pa=float(self.sensitivity_v_per_pa),
                                                             volts_per_unit=float(self.volts_per_unit)))
        raise ValueError(f"{label}: give pa_per_unit, or sensitivity_v_per_pa and volts_per_unit (not both); "
                         f"got pa_per_unit={self.pa_per_unit!r}, sensitivity_v_per_pa={self.sensitivity_v_per_pa!r}, "
                         f"volts_per_unit={self.volts_per_unit!r}")

    @staticmethod
    def microphones(sensitivities_v_per_pa: Sequence[float], volts_per_unit: Union[float, Sequence[float]],
                    names: Sequence[str] = ()) -> List["ChannelCalibration"]:
        """One calibration per channel from each microphone's sensitivity (V/Pa) and the DAQ's
        volts per sample unit (V/unit: one for all channels, or one per channel)."""
        sens = list(sensitivities_v_per_pa)
        vpu = [volts_per_unit] * len(sens) if np.ndim(volts_per_unit) == 0 else list(volts_per_unit)
        if len(vpu) != len(sens) or (names and len(names) != len(sens)):
            raise ValueError(f"{len(sens)} sensitivities_v_per_pa, {len(vpu)} volts_per_unit and {len(names)} names: "
                             "expected one of each per channel")
        return [ChannelCalibration(name=(names[k] if names else ""), sensitivity_v_per_pa=float(sv),
                                   volts_per_unit=float(v)) for k, (sv, v) in enumerate(zip(sens, vpu))]

    @staticmethod
    def scales(pa_per_unit: Sequence[float], names: Sequence[str] = ()) -> List["ChannelCalibration"]:
        """One calibration per channel from each channel's pascals per sample unit (Pa/unit)."""
        k = list(pa_per_unit)
        if names and len(names) != len(k):
            raise ValueError(f"{len(k)} pa_per_unit values and {len(names)} names: expected one name per channel")
        return [ChannelCalibration(name=(names[i] if names else ""), pa_per_unit=float(v)) for i, v in enumerate(k)]


CalibrationLike = Union[Calibration, Sequence[Union[Calibration, ChannelCalibration]]]

_KEYS = ("name", "pa_per_unit", "sensitivity_v_per_pa", "volts_per_unit", "azimuth_deg", "response_curve")
_NUMBERS = ("pa_per_unit", "sensitivity_v_per_pa", "volts_per_unit", "azimuth_deg")


def load_calibration_file(path: Union[str, os.PathLike]) -> List[ChannelCalibration]:
    """The channel calibrations of a TOML calibration file (the CLI's `--calibration-file`
    format): one `[[channel]]` table per channel, in channel order, each with `pa_per_unit`, or
    `sensitivity_v_per_pa` and `volts_per_unit`, and optionally `name`.

    Raises ValueError naming the file and the channel entry for anything it cannot use."""
    try:
        import tomllib
    except ImportError:  # Python before 3.11
        import tomli as tomllib

    try:
        with open(path, "rb") as f:
            doc = tomllib.load(f)
    except OSError as e:
        raise ValueError(f"{path}: cannot read it: {e}") from None
    except tomllib.TOMLDecodeError as e:
        raise ValueError(f"{path}: not valid TOML: {e}") from None
    channels = doc.get("channel")
    if not isinstance(channels, list) or not channels:
        raise ValueError(f"{path}: no [[channel]] tables: give one per channel, in channel order")
    out = []
    for i, t in enumerate(channels):
        entry = f"{path}: channel entry {i} ([[channel]] number {i + 1})"
        if not isinstance(t, dict):
            raise ValueError(f"{entry} is not a table")
        unknown = [k for k in t if k not in _KEYS]
        if unknown:
            raise ValueError(f"{entry}: unknown key {unknown[0]} (known: {', '.join(_KEYS)})")
        for k in _NUMBERS:
            if k in t and (isinstance(t[k], bool) or not isinstance(t[k], (int, float))):
                raise ValueError(f"{entry}: {k} = {t[k]!r} must be a number")
        curve = t.get("response_curve")
        if curve is not None and not isinstance(curve, str):
            raise ValueError(f"{entry}: response_curve = {curve!r} must be a file name")
        name = t.get("name", "")
        if not isinstance(name, str):
            raise ValueError(f"{entry}: name = {name!r} must be text")
        c = ChannelCalibration(name=name, pa_per_unit=t.get("pa_per_unit"),
                               sensitivity_v_per_pa=t.get("sensitivity_v_per_pa"), volts_per_unit=t.get("volts_per_unit"),
                               response_curve=None if curve is None else os.path.join(os.path.dirname(os.fspath(path)), curve),
                               azimuth_deg=t.get("azimuth_deg"))
        c.message(entry)  # checked here so the error names the file and the entry
        out.append(c)
    return out


def resolve(calibration, channels: int) -> Tuple[Optional[s.Calibration], List[s.Calibration], List[str]]:
    """(the common calibration or None, the per-channel calibrations or [], the names the
    per-channel calibrations give, all of them or none) for `channels` channels.

    Raises ValueError for a missing calibration or a per-channel list of another length."""
    if calibration is None:
        raise ValueError("no calibration given: pass Calibration.pascals() (samples already in Pa), "
                         "Calibration.pascals_per_unit(k), Calibration.microphone(sensitivity_v_per_pa, "
                         "volts_per_unit), or one calibration per channel (a list of ChannelCalibration, "
                         "e.g. from load_calibration_file); no unit is assumed")
    if isinstance(calibration, Calibration):
        return calibration.message, [], []
    if isinstance(calibration, ChannelCalibration) or isinstance(calibration, (str, bytes)) \
            or not hasattr(calibration, "__len__"):
        raise ValueError(f"calibration = {calibration!r}: expected a Calibration, or a list with one "
                         "Calibration or ChannelCalibration per channel")
    items = list(calibration)
    if len(items) != channels:
        raise ValueError(f"{len(items)} channel calibrations for {channels} channels: give one per channel, in "
                         "channel order")
    messages, names = [], []
    for k, item in enumerate(items):
        if isinstance(item, ChannelCalibration):
            messages.append(item.message(f"channel calibration {k} ({item.name!r})" if item.name
                                         else f"channel calibration {k}"))
            names.append(item.name)
        elif isinstance(item, Calibration):
            messages.append(item.message)
            names.append("")
        else:
            raise ValueError(f"channel calibration {k} = {item!r}: expected a Calibration or a ChannelCalibration")
    return None, messages, names if all(names) else []
