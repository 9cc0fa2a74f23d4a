"""The jetloop client: one method per RPC. Jets are given as a round convergent nozzle
(`diameter_m` with `nozzle_pressure_ratio`, `total_pressure_pa` or `gauge_pressure_pa`) or as a
fully expanded jet (`fully_expanded_mach_number` with `fully_expanded_diameter_m`). Samples are
numpy arrays of shape (frames,) or (frames, channels) sent as little-endian float32 bytes (no
per-sample Python loop); a calibration is always required (no unit is assumed)."""
import time
from dataclasses import dataclass
from typing import Dict, Iterable, Iterator, Optional, Sequence

import grpc
import numpy as np

from jetloop.v1 import common_pb2 as c
from jetloop.v1 import gas_dynamics_pb2 as g
from jetloop.v1 import gas_dynamics_pb2_grpc as gg
from jetloop.v1 import info_pb2 as i
from jetloop.v1 import info_pb2_grpc as ig
from jetloop.v1 import shock_cells_pb2 as sc
from jetloop.v1 import shock_cells_pb2_grpc as scg
from jetloop.v1 import spectrum_pb2 as s
from jetloop.v1 import spectrum_pb2_grpc as sg
from jetloop.v1 import staging_pb2 as st
from jetloop.v1 import staging_pb2_grpc as stg
from jetloop.v1 import tones_pb2 as t
from jetloop.v1 import tones_pb2_grpc as tg

from .errors import ServerBusy, retry_delay_s, typed

RETRYABLE = (grpc.StatusCode.UNAVAILABLE, grpc.StatusCode.RESOURCE_EXHAUSTED)


@dataclass(frozen=True)
class Calibration:
    """How sample units become pascals; build it with one of the class methods."""

    message: s.Calibration

    @classmethod
    def pascals(cls) -> "Calibration":
        """The samples are already in pascals (1 Pa per unit)."""
        return cls(s.Calibration(in_pascals=True))

    @classmethod
    def pascals_per_unit(cls, pa_per_unit: float) -> "Calibration":
        """Pascals per sample unit."""
        return cls(s.Calibration(pascals_per_unit=pa_per_unit))

    @classmethod
    def microphone(cls, sensitivity_v_per_pa: float, volts_per_unit: float) -> "Calibration":
        """From the microphone sensitivity (V/Pa) and the DAQ's volts per sample unit."""
        return cls(s.Calibration(microphone=s.MicrophoneChain(
            sensitivity_v_per_pa=sensitivity_v_per_pa, volts_per_unit=volts_per_unit)))


def _frames(samples: np.ndarray) -> (bytes, int):
    """Interleaved little-endian float32 bytes and the channel count of (frames[, channels])."""
    x = np.asarray(samples)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2:
        raise ValueError("samples must have shape (frames,) or (frames, channels)")
    return np.ascontiguousarray(x, dtype="<f4").tobytes(), x.shape[1]


def _samples(samples: np.ndarray, sample_rate_hz: float, calibration: Calibration,
             channel_names: Sequence[str] = ()) -> s.Samples:
    data, channels = _frames(samples)
    return s.Samples(sample_rate_hz=sample_rate_hz, channel_count=channels,
                     raw=s.RawSamples(data=data, format=s.SAMPLE_FORMAT_F32_LE),
                     calibration=calibration.message, channel_names=list(channel_names))


def _welch(segment_length: Optional[int]) -> Optional[s.WelchOptions]:
    return s.WelchOptions(segment_length=segment_length) if segment_length else None


def _conditions(diameter_m, nozzle_pressure_ratio=None, total_pressure_pa=None, gauge_pressure_pa=None,
                ambient_pressure_pa=None, total_temperature_k=None, ambient_temperature_k=None) -> c.JetConditions:
    op = c.OperatingPoint(total_temperature_k=total_temperature_k, ambient_temperature_k=ambient_temperature_k)
    if nozzle_pressure_ratio is not None:
        op.nozzle_pressure_ratio = nozzle_pressure_ratio
        if ambient_pressure_pa is not None:
            op.ambient_pressure_pa = ambient_pressure_pa
    elif total_pressure_pa is not None:
        op.pressures.CopyFrom(c.ReservoirAndAmbientPressure(
            total_pressure_pa=total_pressure_pa, ambient_pressure_pa=ambient_pressure_pa or 101_325.0))
    elif gauge_pressure_pa is not None:
        op.gauge.CopyFrom(c.GaugeAndAmbientPressure(
            reservoir_gauge_pressure_pa=gauge_pressure_pa, ambient_pressure_pa=ambient_pressure_pa or 101_325.0))
    return c.JetConditions(nozzle=c.Nozzle(round_convergent=c.RoundConvergentNozzle(exit_diameter_m=diameter_m)),
                           operating_point=op)


def _jet(diameter_m=None, fully_expanded_mach_number=None, fully_expanded_diameter_m=None, **op) -> sc.JetInput:
    if fully_expanded_mach_number is not None:
        return sc.JetInput(fully_expanded=sc.FullyExpandedJet(
            fully_expanded_mach_number=fully_expanded_mach_number, fully_expanded_diameter_m=fully_expanded_diameter_m))
    if diameter_m is None:
        raise ValueError("give diameter_m (with nozzle_pressure_ratio, total_pressure_pa or gauge_pressure_pa) "
                         "or fully_expanded_mach_number with fully_expanded_diameter_m")
    return sc.JetInput(conditions=_conditions(diameter_m, **op))


class Client:
    """A connection to a jetloop server at `address` ("host:port").

    `token` is sent as `authorization: Bearer <token>` with every call (servers started with
    --token-file). `timeout_s` bounds every call (the server is told the deadline); calls refused with
    UNAVAILABLE or RESOURCE_EXHAUSTED are retried up to `retries` times after the server's
    RetryInfo delay (or 0.2 s). Errors raise `InvalidRequest` (with `.violations`),
    `PhysicsRefused` (with `.kind`), `ServerBusy` or `JetloopError`.
    """

    def __init__(self, address: str = "127.0.0.1:50051", timeout_s: float = 60.0, retries: int = 3,
                 channel: Optional[grpc.Channel] = None, token: Optional[str] = None,
                 ca_pem: Optional[bytes] = None, client_cert_pem: Optional[bytes] = None,
                 client_key_pem: Optional[bytes] = None):
        """`ca_pem` connects with TLS trusting that CA (the server's --tls-cert chains to it);
        `client_cert_pem` and `client_key_pem` add a client certificate for a server with
        --tls-client-ca; `token` is sent as `authorization: Bearer` on every call."""
        opts = [("grpc.max_send_message_length", 256 << 20), ("grpc.max_receive_message_length", 256 << 20)]
        if channel is None and ca_pem is not None:
            creds = grpc.ssl_channel_credentials(root_certificates=ca_pem, private_key=client_key_pem,
                                                 certificate_chain=client_cert_pem)
            channel = grpc.secure_channel(address, creds, options=opts)
        self.channel = channel or grpc.insecure_channel(address, options=opts)
        self.timeout_s = timeout_s
        self.retries = retries
        # Sent with every call when the server requires a bearer token (--token-file).
        self.metadata = [("authorization", f"Bearer {token}")] if token else None
        self._gas = gg.GasDynamicsServiceStub(self.channel)
        self._info = ig.InfoServiceStub(self.channel)
        self._cells = scg.ShockCellServiceStub(self.channel)
        self._tones = tg.ToneServiceStub(self.channel)
        self._spectrum = sg.SpectrumServiceStub(self.channel)
        self._staging = stg.StagingServiceStub(self.channel)

    def close(self):
        self.channel.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _call(self, method, request):
        for attempt in range(self.retries + 1):
            try:
                return method(request, timeout=self.timeout_s, metadata=self.metadata)
            except grpc.RpcError as e:
                if e.code() in RETRYABLE and attempt < self.retries:
                    time.sleep(retry_delay_s(e) or 0.2)
                    continue
                raise typed(e) from None
        raise ServerBusy(grpc.StatusCode.UNAVAILABLE, "no attempts left", None)

    # Information and gas dynamics.
    def health(self) -> bool:
        """True when the server's gRPC health service answers SERVING."""
        from grpc_health.v1 import health_pb2, health_pb2_grpc

        try:
            r = health_pb2_grpc.HealthStub(self.channel).Check(health_pb2.HealthCheckRequest(), timeout=self.timeout_s)
        except grpc.RpcError as e:
            raise typed(e) from None
        return r.status == health_pb2.HealthCheckResponse.SERVING

    def services(self) -> list:
        """The services the server lists through gRPC reflection (when reflection is on)."""
        from grpc_reflection.v1alpha.proto_reflection_descriptor_database import ProtoReflectionDescriptorDatabase

        return sorted(ProtoReflectionDescriptorDatabase(self.channel).get_services())

    def server_info(self) -> i.ServerInfoResponse:
        """Server version, services, models with references and limits."""
        return self._call(self._info.ServerInfo, i.ServerInfoRequest())

    def isentropic(self, mach_number: Optional[float] = None, area_ratio: Optional[float] = None,
                   supersonic: bool = True, gamma: Optional[float] = None) -> g.IsentropicRatiosResponse:
        """Isentropic ratios from a Mach number, or from A/A* on the chosen branch."""
        req = g.IsentropicRatiosRequest(gamma=gamma)
        if mach_number is not None:
            req.mach_number = mach_number
        elif area_ratio is not None:
            req.area_ratio = area_ratio
            req.branch = g.MACH_BRANCH_SUPERSONIC if supersonic else g.MACH_BRANCH_SUBSONIC
        return self._call(self._gas.IsentropicRatios, req)

    def normal_shock(self, upstream_mach_number: float, gamma: Optional[float] = None) -> g.NormalShockResponse:
        """Normal-shock jump conditions."""
        return self._call(self._gas.NormalShock, g.NormalShockRequest(upstream_mach_number=upstream_mach_number, gamma=gamma))

    def jet_state(self, diameter_m: float, **operating_point) -> g.JetState:
        """Fully expanded state of a round convergent nozzle: `nozzle_pressure_ratio=`,
        `total_pressure_pa=` or `gauge_pressure_pa=` (with `ambient_pressure_pa=`), optional
        `total_temperature_k=` and `ambient_temperature_k=`."""
        return self._call(self._gas.JetState, g.JetStateRequest(conditions=_conditions(diameter_m, **operating_point))).state

    # Shock cells and screech.
    def cell_spacing(self, **jet) -> sc.CellSpacingResponse:
        """Vortex-sheet shock-cell spacing and shock positions."""
        return self._call(self._cells.CellSpacing, sc.CellSpacingRequest(jet=_jet(**jet)))

    def predict_screech(self, convection_ratio: Optional[float] = None, source_cells: Optional[float] = None,
                        max_loop_order: Optional[int] = None, **jet) -> t.PredictScreechResponse:
        """Screech by Powell, Tam, Seiner & Yu and the feedback loop."""
        return self._call(self._tones.PredictScreech,
                          t.PredictScreechRequest(jet=_jet(**jet), options=self._screech(convection_ratio, source_cells, max_loop_order)))

    def predict_shock_noise(self, observer_angles_deg: Sequence[float] = (), **jet) -> t.PredictShockNoiseResponse:
        """Shock-associated noise peak frequency against observer angle."""
        return self._call(self._tones.PredictShockNoise,
                          t.PredictShockNoiseRequest(jet=_jet(**jet), observer_angles_deg=list(observer_angles_deg)))

    def sweep_screech(self, values: Sequence[float], variable: str = "npr", convection_ratio: Optional[float] = None,
                      source_cells: Optional[float] = None, max_loop_order: Optional[int] = None,
                      **jet) -> Dict[str, np.ndarray]:
        """Screech over NPR ("npr"), Mj ("mj") or reflector distance ("reflector", m) values, as
        arrays: value, nozzle_pressure_ratio, fully_expanded_mach_number, powell_hz, tam_1986_hz
        (NaN where the jet is not supersonic) and loop_hz (points x loop orders)."""
        var = {"npr": t.SWEEP_VARIABLE_NOZZLE_PRESSURE_RATIO, "mj": t.SWEEP_VARIABLE_FULLY_EXPANDED_MACH_NUMBER,
               "reflector": t.SWEEP_VARIABLE_REFLECTOR_DISTANCE_M}[variable]
        r = self._call(self._tones.SweepScreech, t.SweepScreechRequest(
            jet=_jet(**jet), variable=var, list=t.SweepValues(values=list(map(float, values))),
            options=self._screech(convection_ratio, source_cells, max_loop_order)))
        orders = max((len(p.loop_frequencies_hz) for p in r.points), default=0)
        nan = float("nan")
        return {
            "value": np.array([p.value for p in r.points]),
            "nozzle_pressure_ratio": np.array([p.nozzle_pressure_ratio for p in r.points]),
            "fully_expanded_mach_number": np.array([p.fully_expanded_mach_number for p in r.points]),
            "powell_hz": np.array([p.powell_fundamental_hz if p.HasField("powell_fundamental_hz") else nan for p in r.points]),
            "tam_1986_hz": np.array([p.tam_1986_hz if p.HasField("tam_1986_hz") else nan for p in r.points]),
            "loop_hz": np.array([list(p.loop_frequencies_hz) + [nan] * (orders - len(p.loop_frequencies_hz)) for p in r.points]),
        }

    def guided_modes(self, **jet) -> t.GuidedModesResponse:
        """Guided jet modes: stage bands and closure tones."""
        return self._call(self._tones.GuidedModes, t.GuidedModesRequest(jet=_jet(**jet)))

    @staticmethod
    def _screech(convection_ratio, source_cells, max_loop_order) -> t.ScreechOptions:
        o = t.ScreechOptions()
        if convection_ratio is not None:
            o.convection.convection_ratio = convection_ratio
        if source_cells is not None:
            getattr(o, "loop").source_cells = source_cells
        if max_loop_order is not None:
            getattr(o, "loop").max_loop_order = max_loop_order
        return o

    # Spectra.
    def extract_tones(self, samples: np.ndarray, sample_rate_hz: float, calibration: Calibration,
                      segment_length: Optional[int] = None, include_psd: bool = False,
                      channel_names: Sequence[str] = ()) -> s.ExtractTonesResponse:
        """Welch PSD, tones with levels, harmonic families of every channel."""
        return self._call(self._spectrum.ExtractTones, s.ExtractTonesRequest(
            samples=_samples(samples, sample_rate_hz, calibration, channel_names), welch=_welch(segment_length),
            psd_output=s.PsdOutputOptions(include=include_psd)))

    def extract_tones_stream(self, blocks: Iterable[np.ndarray], sample_rate_hz: float, channels: int,
                             calibration: Calibration, segment_length: Optional[int] = None) -> s.ExtractTonesResponse:
        """The same analysis for blocks of shape (frames, channels) sent as they are acquired."""
        first = s.SampleBlock(request=s.ExtractTonesRequest(
            samples=s.Samples(sample_rate_hz=sample_rate_hz, channel_count=channels,
                              raw=s.RawSamples(format=s.SAMPLE_FORMAT_F32_LE), calibration=calibration.message),
            welch=_welch(segment_length)))

        def messages():
            yield first
            for b in blocks:
                yield s.SampleBlock(frames=_frames(b)[0])

        try:
            return self._spectrum.ExtractTonesStream(messages(), timeout=self.timeout_s, metadata=self.metadata)
        except grpc.RpcError as e:
            raise typed(e) from None

    def band_levels(self, samples: np.ndarray, sample_rate_hz: float, calibration: Calibration,
                    segment_length: Optional[int] = None) -> s.BandLevelsResponse:
        """One-third-octave band levels, overall and A-weighted levels."""
        return self._call(self._spectrum.BandLevels, s.BandLevelsRequest(
            samples=_samples(samples, sample_rate_hz, calibration), welch=_welch(segment_length)))

    def cross_spectra(self, samples: np.ndarray, sample_rate_hz: float, calibration: Calibration,
                      azimuths_deg: Sequence[float] = (), reference_channel: int = 0,
                      segment_length: Optional[int] = None) -> s.CrossSpectraResponse:
        """Cross-spectra, coherence and phase against a reference; the azimuthal mode of a ring."""
        return self._call(self._spectrum.CrossSpectra, s.CrossSpectraRequest(
            samples=_samples(samples, sample_rate_hz, calibration), welch=_welch(segment_length),
            reference_channel=reference_channel,
            positions=[s.MicrophonePosition(azimuth_deg=a) for a in azimuths_deg]))

    def analyse_ramp(self, samples: np.ndarray, sample_rate_hz: float, calibration: Calibration,
                     control_channel: int, control: str, control_per_unit: float,
                     ambient_pressure_pa: Optional[float] = None, frame_duration_s: Optional[float] = None,
                     segment_length: Optional[int] = None) -> Dict[str, np.ndarray]:
        """A continuous ramp: `control` is "npr", "gauge_pa" or "absolute_pa". Returns arrays of
        the fit points (npr, frequency_hz, level_db, direction +1/-1/0) and of the frames
        (start_s, frame_npr)."""
        q = {"npr": s.CONTROL_QUANTITY_NOZZLE_PRESSURE_RATIO, "gauge_pa": s.CONTROL_QUANTITY_RESERVOIR_GAUGE_PRESSURE_PA,
             "absolute_pa": s.CONTROL_QUANTITY_RESERVOIR_ABSOLUTE_PRESSURE_PA}[control]
        r = self._call(self._spectrum.AnalyseRamp, s.AnalyseRampRequest(
            samples=_samples(samples, sample_rate_hz, calibration),
            control=s.ControlChannel(channel=control_channel, quantity=q, units_per_sample=control_per_unit,
                                     ambient_pressure_pa=ambient_pressure_pa),
            frame_duration_s=frame_duration_s, welch=_welch(segment_length)))
        sign = {st.SWEEP_DIRECTION_INCREASING: 1, st.SWEEP_DIRECTION_DECREASING: -1}
        return {
            "npr": np.array([p.x for p in r.fit_points]),
            "frequency_hz": np.array([p.frequency_hz for p in r.fit_points]),
            "level_db": np.array([p.level_db for p in r.fit_points]),
            "direction": np.array([sign.get(p.direction, 0) for p in r.fit_points]),
            "start_s": np.array([f.start_s for f in r.frames]),
            "frame_npr": np.array([f.nozzle_pressure_ratio for f in r.frames]),
            "warnings": list(r.warnings),
        }

    def track_tones(self, blocks: Iterable[np.ndarray], sample_rate_hz: float, channels: int,
                    calibration: Calibration, update_interval_s: Optional[float] = None,
                    window_s: Optional[float] = None, segment_length: Optional[int] = None) -> Iterator[s.TrackUpdate]:
        """Live tracking: yields an update (tones with track ids, events) as each interval of
        stream time completes, while `blocks` (frames, channels) are still being sent."""
        config = s.TrackRequest(config=s.TrackConfig(
            analysis=s.ExtractTonesRequest(
                samples=s.Samples(sample_rate_hz=sample_rate_hz, channel_count=channels,
                                  raw=s.RawSamples(format=s.SAMPLE_FORMAT_F32_LE), calibration=calibration.message),
                welch=_welch(segment_length)),
            update_interval_s=update_interval_s, window_s=window_s))

        def messages():
            yield config
            for b in blocks:
                yield s.TrackRequest(frames=_frames(b)[0])

        try:
            yield from self._spectrum.TrackTones(messages(), timeout=self.timeout_s, metadata=self.metadata)
        except grpc.RpcError as e:
            raise typed(e) from None

    # Stages.
    def fit_stages(self, x: Sequence[float], frequency_hz: Sequence[float], control: str = "npr",
                   level_db: Optional[Sequence[float]] = None, direction: Optional[Sequence[int]] = None,
                   in_acquisition_order: bool = True, source_cells: Optional[int] = None,
                   diameter_m: Optional[float] = None) -> st.FitStagesResponse:
        """Stages, jumps, hysteresis and loop fits of a sweep; `control` is "npr", "mj" or
        "reflector" (x in m); `direction` +1/-1 per point; points are taken in acquisition
        order unless `in_acquisition_order=False`."""
        var = {"npr": st.CONTROL_VARIABLE_NOZZLE_PRESSURE_RATIO, "mj": st.CONTROL_VARIABLE_FULLY_EXPANDED_MACH_NUMBER,
               "reflector": st.CONTROL_VARIABLE_REFLECTOR_DISTANCE_M}[control]
        dirs = {1: st.SWEEP_DIRECTION_INCREASING, -1: st.SWEEP_DIRECTION_DECREASING}
        points = []
        for k, (xv, fv) in enumerate(zip(np.asarray(x, float), np.asarray(frequency_hz, float))):
            p = st.MeasuredTone(x=float(xv), frequency_hz=float(fv))
            if level_db is not None:
                p.level_db = float(level_db[k])
            if direction is not None:
                p.direction = dirs.get(int(direction[k]), st.SWEEP_DIRECTION_UNSPECIFIED)
            if in_acquisition_order:
                p.acquisition_index = k
            points.append(p)
        req = st.FitStagesRequest(control=var, points=points)
        if diameter_m is not None:
            req.jet.CopyFrom(c.JetConditions(nozzle=c.Nozzle(round_convergent=c.RoundConvergentNozzle(exit_diameter_m=diameter_m))))
        if source_cells is not None:
            req.options.source_cells = source_cells
        return self._call(self._staging.FitStages, req)
