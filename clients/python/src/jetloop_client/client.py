"""The jetloop client: one method per RPC. Jets are given as a round convergent nozzle
(`diameter_m` with `nozzle_pressure_ratio`, `total_pressure_pa` or `gauge_pressure_pa`) or as a
fully expanded jet (`fully_expanded_mach_number` with `fully_expanded_diameter_m`). Samples are
numpy arrays of shape (frames,) or (frames, channels) sent as little-endian float32 bytes (no
per-sample Python loop); a calibration is always required (no unit is assumed)."""
import time
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

from .calibration import Calibration, CalibrationLike  # noqa: F401 (Calibration kept importable from here)
from .connection import CALL_TIMEOUT_S, CONNECT_TIMEOUT_S, REQUEST_ID, new_request_id, open_channel, parse_address
from .errors import ServerBusy, retry_delay_s, typed
from .recording import samples_message

def _block(block, channels: int, k: int) -> bytes:
    """Block `k` of a stream as interleaved little-endian float32 bytes; its shape must be
    (frames, channels), or (frames,) for one channel."""
    x = np.asarray(block)
    if x.ndim == 1 and channels == 1:
        x = x[:, None]
    if x.ndim != 2 or x.shape[1] != channels or x.dtype.kind not in "iuf":
        raise ValueError(f"block {k} has shape {x.shape} and dtype {x.dtype}: expected real numbers of shape "
                         f"(frames, {channels}), i.e. (frames, channels)")
    return np.ascontiguousarray(x, dtype="<f4").tobytes()


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
    """A connection to a jetloop server at `address`: `host:port`, `http://host:port` or
    `https://host:port` (TLS; so is any address when `ca_pem` is given).

    `connect_timeout_s` bounds connecting (5 s by default, as the CLI); a server that cannot be
    reached raises `ServerUnavailable` naming the address and the cause. `timeout_s` is the
    deadline of every unary call (300 s by default; the server is told it); streams have
    `stream_timeout_s` (none by default). Every call carries an `x-request-id` (the server
    echoes it and writes it in its log lines; `last_request_id` is the latest, and an error
    carries its own as `.request_id`). Only answers carrying a RetryInfo delay (a server
    shedding load) are retried, up to `retries` times after that delay, with the same request
    id. `token` is sent as `authorization: Bearer <token>`. Errors raise `InvalidRequest` (with
    `.violations`; also requests over a server limit), `PhysicsRefused` (with `.kind`),
    `ServerBusy`, `ServerUnavailable` or `JetloopError`.
    """

    def __init__(self, address: str = "127.0.0.1:50051", timeout_s: Optional[float] = CALL_TIMEOUT_S,
                 retries: int = 3, channel: Optional[grpc.Channel] = None, token: Optional[str] = None,
                 ca_pem: Optional[bytes] = None, client_cert_pem: Optional[bytes] = None,
                 client_key_pem: Optional[bytes] = None, connect_timeout_s: float = CONNECT_TIMEOUT_S,
                 stream_timeout_s: Optional[float] = None):
        """`ca_pem` connects with TLS trusting that CA (the server's --tls-cert chains to it;
        `https://` without it trusts the system's roots); `client_cert_pem` and
        `client_key_pem` add a client certificate for a server with --tls-client-ca; `channel`
        replaces the connection made from the other arguments."""
        target, use_tls = parse_address(address, ca_pem is not None)
        self.address = address
        self.channel = channel or open_channel(target, use_tls, connect_timeout_s, ca_pem, client_cert_pem,
                                               client_key_pem)
        self.timeout_s = timeout_s
        self.stream_timeout_s = stream_timeout_s
        self.retries = retries
        self.last_request_id: Optional[str] = None
        # Sent with every call when the server requires a bearer token (--token-file).
        self._auth = [("authorization", f"Bearer {token}")] if token else []
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

    def _metadata(self):
        """(metadata of a new call: the token and a new request id, that id)."""
        rid = new_request_id()
        self.last_request_id = rid
        return self._auth + [(REQUEST_ID, rid)], rid

    def _call(self, method, request):
        """A unary call; retried only after an answer carrying RetryInfo, with the same id."""
        metadata, rid = self._metadata()
        for attempt in range(self.retries + 1):
            try:
                return method(request, timeout=self.timeout_s, metadata=metadata)
            except grpc.RpcError as e:
                delay = retry_delay_s(e)
                if delay is not None and attempt < self.retries:
                    time.sleep(delay)
                    continue
                raise typed(e, self.address, rid) from None
        raise ServerBusy(grpc.StatusCode.UNAVAILABLE, "no attempts left", None)

    # Information and gas dynamics.
    def health(self) -> bool:
        """True when the server's gRPC health service answers SERVING."""
        from grpc_health.v1 import health_pb2, health_pb2_grpc

        metadata, rid = self._metadata()
        try:
            r = health_pb2_grpc.HealthStub(self.channel).Check(health_pb2.HealthCheckRequest(), timeout=self.timeout_s,
                                                               metadata=metadata)
        except grpc.RpcError as e:
            raise typed(e, self.address, rid) from None
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

    # Spectra. `samples` is an array of shape (frames, channels) or (frames,), with
    # `sample_rate_hz` (Hz), or a `Recording` (from the readers) carrying its rate, names and
    # possibly its calibration. `calibration` is a `Calibration` (every channel) or a list with
    # one `Calibration` or `ChannelCalibration` per channel (e.g. `load_calibration_file(path)`).
    def extract_tones(self, samples, sample_rate_hz: Optional[float] = None,
                      calibration: Optional[CalibrationLike] = None, segment_length: Optional[int] = None,
                      include_psd: bool = False, channel_names: Sequence[str] = ()) -> s.ExtractTonesResponse:
        """Welch PSD, tones with levels, harmonic families of every channel."""
        return self._call(self._spectrum.ExtractTones, s.ExtractTonesRequest(
            samples=samples_message(samples, sample_rate_hz, calibration, channel_names),
            welch=_welch(segment_length), psd_output=s.PsdOutputOptions(include=include_psd)))

    @staticmethod
    def _checked(messages):
        """(`messages` passed through, the list that receives a ValueError a bad block raised:
        grpc would report it only as UNKNOWN)."""
        refused = []

        def checked():
            try:
                yield from messages
            except ValueError as e:
                refused.append(e)
                raise

        return checked(), refused

    def _stream_error(self, e: grpc.RpcError, rid: str, refused: list) -> Exception:
        return refused[0] if refused else typed(e, self.address, rid)

    def _stream(self, method, messages):
        """A client stream of `messages` with the stream deadline; its answer."""
        requests, refused = self._checked(messages)
        metadata, rid = self._metadata()
        try:
            return method(requests, timeout=self.stream_timeout_s, metadata=metadata)
        except grpc.RpcError as e:
            raise self._stream_error(e, rid, refused) from None

    def extract_tones_stream(self, blocks: Iterable[np.ndarray], sample_rate_hz: float, channels: int,
                             calibration: CalibrationLike, segment_length: Optional[int] = None,
                             channel_names: Sequence[str] = ()) -> s.ExtractTonesResponse:
        """The same analysis for blocks of shape (frames, channels) sent as they are acquired."""
        first = s.SampleBlock(request=s.ExtractTonesRequest(
            samples=samples_message(None, sample_rate_hz, calibration, channel_names, with_data=False,
                                    channels=channels),
            welch=_welch(segment_length)))

        def messages():
            yield first
            for k, b in enumerate(blocks):
                yield s.SampleBlock(frames=_block(b, channels, k))

        return self._stream(self._spectrum.ExtractTonesStream, messages())

    def band_levels(self, samples, sample_rate_hz: Optional[float] = None,
                    calibration: Optional[CalibrationLike] = None, segment_length: Optional[int] = None,
                    channel_names: Sequence[str] = ()) -> s.BandLevelsResponse:
        """One-third-octave band levels, overall and A-weighted levels."""
        return self._call(self._spectrum.BandLevels, s.BandLevelsRequest(
            samples=samples_message(samples, sample_rate_hz, calibration, channel_names),
            welch=_welch(segment_length)))

    def cross_spectra(self, samples, sample_rate_hz: Optional[float] = None,
                      calibration: Optional[CalibrationLike] = None, azimuths_deg: Sequence[float] = (),
                      reference_channel: int = 0, segment_length: Optional[int] = None,
                      channel_names: Sequence[str] = ()) -> s.CrossSpectraResponse:
        """Cross-spectra, coherence and phase against a reference; the azimuthal mode of a ring."""
        return self._call(self._spectrum.CrossSpectra, s.CrossSpectraRequest(
            samples=samples_message(samples, sample_rate_hz, calibration, channel_names),
            welch=_welch(segment_length), reference_channel=reference_channel,
            positions=[s.MicrophonePosition(azimuth_deg=a) for a in azimuths_deg]))

    def analyse_ramp(self, samples, sample_rate_hz: Optional[float] = None,
                     calibration: Optional[CalibrationLike] = None, *, control_channel: int, control: str,
                     control_per_unit: float, ambient_pressure_pa: Optional[float] = None, frame_duration_s: Optional[float] = None,
                     segment_length: Optional[int] = None) -> Dict[str, np.ndarray]:
        """A continuous ramp: `control` is "npr", "gauge_pa" or "absolute_pa", read from
        `control_channel` at `control_per_unit` per sample unit. Returns arrays of the fit points
        (npr, frequency_hz, level_db, direction +1/-1/0) and of the frames (start_s, frame_npr)."""
        q = {"npr": s.CONTROL_QUANTITY_NOZZLE_PRESSURE_RATIO, "gauge_pa": s.CONTROL_QUANTITY_RESERVOIR_GAUGE_PRESSURE_PA,
             "absolute_pa": s.CONTROL_QUANTITY_RESERVOIR_ABSOLUTE_PRESSURE_PA}[control]
        r = self._call(self._spectrum.AnalyseRamp, s.AnalyseRampRequest(
            samples=samples_message(samples, sample_rate_hz, calibration),
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
                    calibration: CalibrationLike, update_interval_s: Optional[float] = None,
                    window_s: Optional[float] = None, segment_length: Optional[int] = None,
                    channel_names: Sequence[str] = ()) -> Iterator[s.TrackUpdate]:
        """Live tracking: yields an update (tones with track ids, events) as each interval of
        stream time completes, while `blocks` (frames, channels) are still being sent."""
        config = s.TrackRequest(config=s.TrackConfig(
            analysis=s.ExtractTonesRequest(
                samples=samples_message(None, sample_rate_hz, calibration, channel_names, with_data=False,
                                        channels=channels),
                welch=_welch(segment_length)),
            update_interval_s=update_interval_s, window_s=window_s))

        def messages():
            yield config
            for k, b in enumerate(blocks):
                yield s.TrackRequest(frames=_block(b, channels, k))

        requests, refused = self._checked(messages())
        metadata, rid = self._metadata()
        try:
            yield from self._spectrum.TrackTones(requests, timeout=self.stream_timeout_s, metadata=metadata)
        except grpc.RpcError as e:
            raise self._stream_error(e, rid, refused) from None

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
