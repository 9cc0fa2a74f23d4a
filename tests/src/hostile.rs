//! Hostile input for every RPC: one valid base call per method, mutations at the protobuf
//! level (bit flips, truncation, inserted and replaced bytes, huge length-delimited lengths,
//! wrong wire types, extreme numbers, repeated messages, random bytes) and at the gRPC framing
//! level (huge or wrong length prefixes, a compressed flag without an encoding, cut headers,
//! trailing bytes), and a raw HTTP/2 sender that reports the gRPC status of each answer.
//!
//! Used by the in-process fuzz harness (`fuzz-requests`), its short CI run, and the socket test
//! of 100,000 mutated requests.

use crate::fixtures;
use crate::samples::{f32_pascals, frames_block, opening_block, pascals, track_frames, welch_segment};
use crate::signals::{f32_le, ring_f32, sine};
use bytes::Bytes;
use jetloop_proto::pb;
use prost::Message;

/// A small deterministic generator (splitmix64): the same seed gives the same mutations, so
/// a failure can be replayed from the seed and iteration printed with it.
#[derive(Debug, Clone)]
pub struct Rng(u64);

impl Rng {
    /// A generator from `seed`.
    pub fn new(seed: u64) -> Self {
        Self(seed)
    }

    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in `0..n` (`n` > 0).
    pub fn below(&mut self, n: usize) -> usize {
        (self.next_u64() % n.max(1) as u64) as usize
    }

    /// `n` random bytes.
    pub fn bytes(&mut self, n: usize) -> Vec<u8> {
        (0..n).map(|_| self.next_u64() as u8).collect()
    }
}

/// A method and the messages of one valid call (one for unary methods, several for streams).
#[derive(Debug, Clone)]
pub struct BaseCall {
    /// `/package.Service/Method`.
    pub path: &'static str,
    /// Encoded request messages, in order.
    pub messages: Vec<Vec<u8>>,
    /// Relative share of the mutated calls this method gets (cheap methods more).
    pub weight: usize,
}

fn enc(m: &impl Message) -> Vec<u8> {
    m.encode_to_vec()
}

fn tone_values(n: usize, fs: f64, f: f64) -> Vec<f64> {
    sine(n, fs, f, 2.0).iter().enumerate().map(|(i, v)| v + 0.01 * ((i * 7919) % 13) as f64).collect()
}

fn welch(segment: u32) -> Option<pb::WelchOptions> {
    Some(welch_segment(segment))
}

/// The tones request used by the spectral base_calls: 2048 values of a 3 kHz tone at 48 kHz,
/// 512-sample segments.
fn tones_request() -> pb::ExtractTonesRequest {
    pb::ExtractTonesRequest {
        samples: Some(pascals(tone_values(2048, 48_000.0, 3000.0), 48_000.0)),
        welch: welch(512),
        ..Default::default()
    }
}

/// One valid base call per RPC of every jetloop service, and the health check.
pub fn base_calls() -> Vec<BaseCall> {
    use fixtures::{conditions, inch_nozzle, round};
    let f32s = |n: usize, f: f64| f32_le(&tone_values(n, 48_000.0, f));
    // A ramp: microphone and an NPR channel (2.5 -> 3.5) interleaved.
    let ramp: Vec<u8> = (0..4096)
        .flat_map(|i| {
            let mic = (2.0 * (2.0 * std::f64::consts::PI * 4000.0 * i as f64 / 48_000.0).sin()) as f32;
            let npr = (2.5 + i as f64 / 4096.0) as f32;
            [mic.to_le_bytes(), npr.to_le_bytes()].concat()
        })
        .collect();
    let stream_first = opening_block(pb::ExtractTonesRequest {
        samples: Some(f32_pascals(Vec::new(), 48_000.0, 1)),
        welch: welch(512),
        ..Default::default()
    });
    let cross_first = pb::CrossSpectraBlock {
        request: Some(pb::CrossSpectraRequest {
            samples: Some(f32_pascals(Vec::new(), 48_000.0, 2)),
            welch: welch(512),
            ..Default::default()
        }),
        ..Default::default()
    };
    // Two blocks of 1024 frames of a ring of two microphones (f32, interleaved).
    let ring2 = ring_f32(2, 2048, 48_000.0, 3);
    let cross_frames = |at: usize| pb::CrossSpectraBlock {
        frames: Bytes::copy_from_slice(&ring2[at * 8192..(at + 1) * 8192]),
        ..Default::default()
    };
    let track_first = fixtures::track_config(48_000.0, 512, 0.02);
    let ramp_request = |samples: Vec<u8>| pb::AnalyseRampRequest {
        samples: Some(f32_pascals(samples, 48_000.0, 2)),
        control: Some(pb::ControlChannel {
            channel: 1,
            quantity: pb::ControlQuantity::NozzlePressureRatio as i32,
            units_per_sample: 1.0,
            offset: None,
            ambient_pressure_pa: None,
        }),
        frame_duration_s: Some(0.02),
        welch: welch(256),
        ..Default::default()
    };
    // The same ramp as a block stream: the question, then two blocks of 2048 frames.
    let ramp_first = pb::RampBlock { request: Some(ramp_request(Vec::new())), ..Default::default() };
    let ramp_frames = |at: usize| pb::RampBlock {
        frames: Bytes::copy_from_slice(&ramp[at * 16_384..(at + 1) * 16_384]),
        ..Default::default()
    };
    vec![
        BaseCall {
            path: "/jetloop.v1.GasDynamicsService/IsentropicRatios",
            messages: vec![enc(&pb::IsentropicRatiosRequest {
                given: Some(pb::isentropic_ratios_request::Given::MachNumber(2.0)),
                ..Default::default()
            })],
            weight: 10,
        },
        BaseCall {
            path: "/jetloop.v1.GasDynamicsService/NormalShock",
            messages: vec![enc(&pb::NormalShockRequest { gamma: Some(1.4), upstream_mach_number: 2.0 })],
            weight: 10,
        },
        BaseCall {
            path: "/jetloop.v1.GasDynamicsService/JetState",
            messages: vec![enc(&pb::JetStateRequest { conditions: Some(conditions(round(0.0254), 4.0)) })],
            weight: 10,
        },
        BaseCall { path: "/jetloop.v1.InfoService/ServerInfo", messages: vec![Vec::new()], weight: 3 },
        BaseCall {
            path: "/jetloop.v1.ShockCellService/CellSpacing",
            messages: vec![enc(&pb::CellSpacingRequest { jet: Some(inch_nozzle(4.0)), options: None })],
            weight: 10,
        },
        BaseCall {
            path: "/jetloop.v1.ToneService/PredictScreech",
            messages: vec![enc(&pb::PredictScreechRequest { jet: Some(inch_nozzle(4.0)), options: None })],
            weight: 10,
        },
        BaseCall {
            path: "/jetloop.v1.ToneService/PredictShockNoise",
            messages: vec![enc(&pb::PredictShockNoiseRequest {
                jet: Some(inch_nozzle(4.0)),
                observer_angles_deg: vec![90.0, 120.0, 150.0],
                ..Default::default()
            })],
            weight: 8,
        },
        BaseCall {
            path: "/jetloop.v1.ToneService/SweepScreech",
            messages: vec![enc(&fixtures::npr_sweep(inch_nozzle(3.0), 2.5, 4.5, 5))],
            weight: 5,
        },
        BaseCall {
            path: "/jetloop.v1.ToneService/GuidedModes",
            messages: vec![enc(&pb::GuidedModesRequest {
                source: Some(pb::guided_modes_request::Source::Jet(inch_nozzle(4.0))),
                options: None,
                curve_points: Some(8),
            })],
            weight: 2,
        },
        BaseCall {
            path: "/jetloop.v1.StagingService/FitStages",
            messages: vec![enc(&pb::FitStagesRequest {
                control: pb::ControlVariable::NozzlePressureRatio as i32,
                points: fixtures::pressure_sweep_points(24),
                ..Default::default()
            })],
            weight: 3,
        },
        BaseCall {
            path: "/jetloop.v1.SpectrumService/ExtractTones",
            messages: vec![enc(&tones_request())],
            weight: 6,
        },
        BaseCall {
            path: "/jetloop.v1.SpectrumService/BandLevels",
            messages: vec![enc(&pb::BandLevelsRequest {
                samples: tones_request().samples,
                welch: welch(512),
                ..Default::default()
            })],
            weight: 4,
        },
        BaseCall {
            path: "/jetloop.v1.SpectrumService/CrossSpectra",
            messages: vec![enc(&pb::CrossSpectraRequest {
                samples: Some(f32_pascals(ring_f32(2, 2048, 48_000.0, 3), 48_000.0, 2)),
                welch: welch(512),
                ..Default::default()
            })],
            weight: 4,
        },
        BaseCall {
            path: "/jetloop.v1.SpectrumService/AnalyseRamp",
            messages: vec![enc(&ramp_request(ramp.clone()))],
            weight: 3,
        },
        BaseCall {
            path: "/jetloop.v1.SpectrumService/AnalyseRampStream",
            messages: vec![enc(&ramp_first), enc(&ramp_frames(0)), enc(&ramp_frames(1))],
            weight: 3,
        },
        BaseCall {
            path: "/jetloop.v1.SpectrumService/ExtractTonesStream",
            messages: vec![
                enc(&stream_first),
                enc(&frames_block(f32s(1024, 3000.0))),
                enc(&frames_block(f32s(1024, 3000.0))),
            ],
            weight: 4,
        },
        BaseCall {
            path: "/jetloop.v1.SpectrumService/CrossSpectraStream",
            messages: vec![enc(&cross_first), enc(&cross_frames(0)), enc(&cross_frames(1))],
            weight: 4,
        },
        BaseCall {
            path: "/jetloop.v1.SpectrumService/TrackTones",
            messages: vec![
                enc(&track_first),
                enc(&track_frames(f32s(1024, 3000.0))),
                enc(&track_frames(f32s(1024, 5000.0))),
            ],
            weight: 3,
        },
        BaseCall {
            path: "/jetloop.v1.CalibrationService/CalibratorSensitivity",
            messages: vec![enc(&pb::CalibratorSensitivityRequest {
                samples: Some(crate::samples::raw(
                    f32_le(&sine(1 << 13, 8000.0, 250.0, 0.05)),
                    pb::SampleFormat::F32Le,
                    8000.0,
                    1,
                    None,
                )),
                stated_level_db: 94.0,
                stated_frequency_hz: 250.0,
                volts_per_unit: vec![1.0],
                ..Default::default()
            })],
            weight: 3,
        },
        BaseCall {
            path: "/grpc.health.v1.Health/Check",
            messages: vec![enc(&tonic_health::pb::HealthCheckRequest { service: String::new() })],
            weight: 2,
        },
    ]
}

/// Picks a base call by weight.
pub fn pick<'a>(rng: &mut Rng, base_calls: &'a [BaseCall]) -> &'a BaseCall {
    let total: usize = base_calls.iter().map(|s| s.weight).sum();
    let mut r = rng.below(total);
    for s in base_calls {
        if r < s.weight {
            return s;
        }
        r -= s.weight;
    }
    &base_calls[0]
}

/// Extreme doubles: NaN, infinities, the largest and smallest, negative zero, a denormal.
const EXTREME_F64: [f64; 9] =
    [f64::NAN, f64::INFINITY, f64::NEG_INFINITY, f64::MAX, -f64::MAX, f64::MIN_POSITIVE, 5e-324, -0.0, 1e300];

/// Offsets of the fields of `msg` that parse as (tag, wire type) at the top level.
fn fields(msg: &[u8]) -> Vec<(usize, u8, usize)> {
    // (offset of the tag, wire type, offset of the value)
    let mut out = Vec::new();
    let mut i = 0;
    let varint = |i: &mut usize| -> Option<u64> {
        let mut v = 0u64;
        for k in 0..10 {
            let b = *msg.get(*i)?;
            *i += 1;
            v |= u64::from(b & 0x7f) << (7 * k);
            if b < 0x80 {
                return Some(v);
            }
        }
        None
    };
    while i < msg.len() {
        let start = i;
        let Some(tag) = varint(&mut i) else { break };
        let wt = (tag & 7) as u8;
        let value_at = i;
        let skip = match wt {
            0 => varint(&mut i).map(|_| 0),
            1 => Some(8),
            5 => Some(4),
            2 => varint(&mut i).and_then(|l| usize::try_from(l).ok()),
            _ => None,
        };
        let Some(skip) = skip else { break };
        out.push((start, wt, value_at));
        i = i.saturating_add(skip);
    }
    out
}

/// One protobuf-level mutation of `msg`.
pub fn mutate_message(rng: &mut Rng, msg: &[u8]) -> Vec<u8> {
    let mut m = msg.to_vec();
    let f = fields(msg);
    match rng.below(11) {
        0 => {
            for _ in 0..1 + rng.below(8) {
                if !m.is_empty() {
                    let i = rng.below(m.len());
                    m[i] ^= 1 << rng.below(8);
                }
            }
        }
        1 => m.truncate(rng.below(m.len() + 1)),
        2 => {
            let at = rng.below(m.len() + 1);
            let n = 1 + rng.below(16);
            let ins = rng.bytes(n);
            m.splice(at..at, ins);
        }
        3 => {
            if !m.is_empty() {
                let at = rng.below(m.len());
                let n = (1 + rng.below(16)).min(m.len() - at);
                let rep = rng.bytes(n);
                m.splice(at..at + n, rep);
            }
        }
        4 => {
            // A length-delimited field whose length is huge (2^28 .. 2^63) with few bytes after.
            let field = 1 + rng.below(12) as u64;
            let mut tail = Vec::new();
            put_varint(&mut tail, (field << 3) | 2);
            put_varint(&mut tail, 1u64 << (28 + rng.below(36)));
            let n = rng.below(8);
            tail.extend(rng.bytes(n));
            let at = if rng.below(2) == 0 { m.len() } else { 0 };
            m.splice(at..at, tail);
        }
        5 => {
            // A wrong wire type on one field.
            if let Some(&(at, wt, _)) = f.get(rng.below(f.len().max(1))) {
                let mut other = rng.below(8) as u8;
                if other == wt {
                    other = (other + 1) % 8;
                }
                m[at] = (m[at] & !7) | other;
            }
        }
        6 => {
            // An extreme number in a double field, or the largest varint in a varint field.
            let doubles: Vec<_> = f.iter().filter(|x| x.1 == 1).collect();
            let ints: Vec<_> = f.iter().filter(|x| x.1 == 0).collect();
            if !doubles.is_empty() && (ints.is_empty() || rng.below(2) == 0) {
                let &&(_, _, at) = &doubles[rng.below(doubles.len())];
                let v = EXTREME_F64[rng.below(EXTREME_F64.len())];
                m[at..at + 8].copy_from_slice(&v.to_le_bytes());
            } else if let Some(&&(_, _, at)) = ints.get(rng.below(ints.len().max(1))) {
                let mut end = at;
                while end < m.len() && m[end] >= 0x80 {
                    end += 1;
                }
                let mut big = Vec::new();
                put_varint(&mut big, if rng.below(2) == 0 { u64::MAX } else { 1 << 32 });
                m.splice(at..(end + 1).min(m.len()), big);
            }
        }
        7 => {
            // Every field twice (merged: repeated fields doubled, singular ones overwritten).
            let copy = m.clone();
            m.extend(copy);
        }
        8 => {
            let n = rng.below(64);
            m = rng.bytes(n);
        }
        9 => m.clear(),
        _ => {
            // A length-delimited field's length made longer or shorter than its bytes.
            if let Some(&(_, _, at)) = f.iter().find(|x| x.1 == 2) {
                if at < m.len() {
                    m[at] = m[at].wrapping_add(1 + rng.below(200) as u8);
                }
            }
        }
    }
    m
}

fn put_varint(out: &mut Vec<u8>, mut v: u64) {
    while v >= 0x80 {
        out.push((v as u8) | 0x80);
        v >>= 7;
    }
    out.push(v as u8);
}

/// The gRPC frame of one message: flag 0, big-endian length, bytes.
pub fn frame(msg: &[u8]) -> Vec<u8> {
    let mut f = Vec::with_capacity(msg.len() + 5);
    f.push(0);
    f.extend_from_slice(&(msg.len() as u32).to_be_bytes());
    f.extend_from_slice(msg);
    f
}

/// A whole mutated request body for `base`: usually its messages framed with one of them
/// mutated, sometimes a framing-level defect.
pub fn mutate_body(rng: &mut Rng, base: &BaseCall) -> Vec<u8> {
    let mut msgs = base.messages.clone();
    let k = rng.below(msgs.len());
    msgs[k] = mutate_message(rng, &msgs[k]);
    let framed: Vec<u8> = msgs.iter().flat_map(|m| frame(m)).collect();
    match rng.below(20) {
        // A length prefix declaring 1 GiB, 4 GiB - 1 or just more than there is.
        0 => {
            let mut f = framed.clone();
            let declared: u32 =
                [1 << 30, u32::MAX, (msgs[0].len() as u32).saturating_add(1 + rng.below(100) as u32)]
                    [rng.below(3)];
            f[1..5].copy_from_slice(&declared.to_be_bytes());
            f
        }
        // The compressed flag (no grpc-encoding was sent) or an unknown flag value.
        1 => {
            let mut f = framed.clone();
            f[0] = if rng.below(2) == 0 { 1 } else { rng.next_u64() as u8 };
            f
        }
        // A frame header cut short.
        2 => framed[..rng.below(5)].to_vec(),
        // Bytes after the last frame.
        3 => {
            let mut f = framed.clone();
            let n = 1 + rng.below(8);
            f.extend(rng.bytes(n));
            f
        }
        // The body cut anywhere.
        4 => framed[..rng.below(framed.len() + 1)].to_vec(),
        _ => framed,
    }
}

/// What came back for one request.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Outcome {
    /// An answer with this gRPC status code.
    Status(u32),
    /// The HTTP/2 stream failed before any gRPC status arrived (text of the error).
    NoStatus(String),
}

/// Sends one request of `body` to `path` over `client` (HTTP/2, with a 10 s gRPC deadline)
/// and reads the whole answer.
pub async fn send(client: &mut h2::client::SendRequest<Bytes>, path: &str, body: Vec<u8>) -> Outcome {
    let req = match http::Request::builder()
        .method("POST")
        .uri(format!("http://jetloop{path}"))
        .header("content-type", "application/grpc")
        .header("te", "trailers")
        .header("grpc-timeout", "10S")
        .body(())
    {
        Ok(r) => r,
        Err(e) => return Outcome::NoStatus(format!("request: {e}")),
    };
    let mut ready = match client.clone().ready().await {
        Ok(c) => c,
        Err(e) => return Outcome::NoStatus(format!("connection: {e}")),
    };
    let (answer, mut stream) = match ready.send_request(req, false) {
        Ok(x) => x,
        Err(e) => return Outcome::NoStatus(format!("send: {e}")),
    };
    *client = ready;
    // Send what the window allows; the server may answer and reset before it takes it all.
    let mut rest = Bytes::from(body);
    let sending = async {
        while !rest.is_empty() {
            stream.reserve_capacity(rest.len());
            let cap = match std::future::poll_fn(|cx| stream.poll_capacity(cx)).await {
                Some(Ok(c)) => c,
                _ => return,
            };
            let chunk = rest.split_to(cap.min(rest.len()));
            if stream.send_data(chunk, false).is_err() {
                return;
            }
        }
        let _ = stream.send_data(Bytes::new(), true);
    };
    let (resp, ()) = tokio::join!(answer, sending);
    let resp = match resp {
        Ok(r) => r,
        Err(e) => return Outcome::NoStatus(format!("answer: {e}")),
    };
    let code = |h: &http::HeaderMap| h.get("grpc-status").and_then(|v| v.to_str().ok()?.parse::<u32>().ok());
    if let Some(c) = code(resp.headers()) {
        return Outcome::Status(c);
    }
    let mut body = resp.into_body();
    while let Some(chunk) = body.data().await {
        match chunk {
            Ok(c) => {
                let _ = body.flow_control().release_capacity(c.len());
            }
            Err(e) => return Outcome::NoStatus(format!("body: {e}")),
        }
    }
    match body.trailers().await {
        Ok(Some(t)) => {
            code(&t).map_or_else(|| Outcome::NoStatus("trailers without grpc-status".into()), Outcome::Status)
        }
        Ok(None) => Outcome::NoStatus("no trailers".into()),
        Err(e) => Outcome::NoStatus(format!("trailers: {e}")),
    }
}

/// An HTTP/2 connection to `addr` for [`send`] (its driver runs on a spawned task).
///
/// # Errors
/// When the connection or handshake fails.
pub async fn connect(addr: std::net::SocketAddr) -> Result<h2::client::SendRequest<Bytes>, String> {
    let tcp = tokio::net::TcpStream::connect(addr).await.map_err(|e| e.to_string())?;
    let _ = tcp.set_nodelay(true);
    let (client, conn) = h2::client::Builder::new()
        .initial_window_size(1 << 20)
        .handshake::<_, Bytes>(tcp)
        .await
        .map_err(|e| e.to_string())?;
    tokio::spawn(async move {
        let _ = conn.await;
    });
    Ok(client)
}

/// Peak and current resident memory of this process, bytes (Linux `/proc/self/status`).
pub fn memory() -> Option<(u64, u64)> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let kib = |key: &str| -> Option<u64> {
        s.lines()
            .find(|l| l.starts_with(key))?
            .split_whitespace()
            .nth(1)?
            .parse::<u64>()
            .ok()
            .map(|k| k * 1024)
    };
    Some((kib("VmHWM:")?, kib("VmRSS:")?))
}

/// In-process fuzzing: the handlers of every RPC called directly (no socket) with mutated
/// messages, and the sample decoders checked against a plain reference decode.
pub mod in_process {
    use super::{mutate_message, pick, BaseCall, Rng};
    use jetloop_proto::pb::{
        self, calibration_service_server::CalibrationService,
        gas_dynamics_service_server::GasDynamicsService, info_service_server::InfoService,
        shock_cell_service_server::ShockCellService, spectrum_service_server::SpectrumService,
        staging_service_server::StagingService, tone_service_server::ToneService,
    };
    use jetloop_server::api::spectrum::{BlockAnalysis, CrossStream, RampStream, ToneStream, TrackSession};
    use jetloop_server::dsp::samples::{Format, Layout, Recording};
    use jetloop_server::runtime::budget::SampleBudget;
    use jetloop_server::service::{
        calibration::Calibration, gas_dynamics::GasDynamics, info::Info, shock_cells::ShockCells,
        spectrum::Spectrum, staging::Staging, tones::Tones,
    };
    use prost::Message;
    use tonic::{Code, Request};

    /// The handlers, as a server holds them.
    #[derive(Debug, Clone)]
    pub struct Handlers {
        info: Info,
        spectrum: Spectrum,
        calibration: Calibration,
    }

    impl Default for Handlers {
        fn default() -> Self {
            let limits = jetloop_server::config::Limits::default();
            let budget = SampleBudget::new(512 << 20);
            Self {
                info: Info::new(limits, budget.clone(), jetloop_server::runtime::Computing::default()),
                spectrum: Spectrum::new(budget.clone(), None),
                calibration: Calibration::new(budget, None),
            }
        }
    }

    fn decode<M: Message + Default>(bytes: &[u8]) -> Option<M> {
        M::decode(bytes).ok()
    }

    /// Runs a block stream's messages through its analysis `S` off the reactor: `Ok(None)`
    /// when a message did not decode, else the answer's code.
    async fn block_stream<S>(path: &str, messages: &[Vec<u8>]) -> Result<Option<Code>, String>
    where
        S: BlockAnalysis,
        S::Block: Message + Default,
    {
        let Some(blocks) = messages.iter().map(|m| decode::<S::Block>(m)).collect::<Option<Vec<_>>>() else {
            return Ok(None);
        };
        let r = tokio::task::spawn_blocking(move || -> Result<(), jetloop_server::api::ApiError> {
            let mut it = blocks.into_iter();
            let mut s = S::start(it.next().unwrap_or_default())?;
            for b in it {
                s.next(b)?;
            }
            s.finish().map(|_| ())
        })
        .await
        .map_err(|e| format!("{path}: the stream analysis panicked: {e}"))?;
        Ok(Some(r.map_or_else(|e| tonic::Status::from(e).code(), |()| Code::Ok)))
    }

    /// Runs `messages` (already mutated) through the handler of `path`: `Ok(Some(code))` with
    /// the answer's code, `Ok(None)` when a message did not decode.
    ///
    /// # Errors
    /// A description when the handler answered UNKNOWN or INTERNAL.
    pub async fn call(h: &Handlers, path: &str, messages: &[Vec<u8>]) -> Result<Option<Code>, String> {
        let m0 = messages.first().map_or(&[][..], Vec::as_slice);
        macro_rules! u {
            ($svc:expr, $method:ident, $ty:ty) => {{
                let Some(req) = decode::<$ty>(m0) else { return Ok(None) };
                match $svc.$method(Request::new(req)).await {
                    Ok(_) => Some(Code::Ok),
                    Err(s) => Some(s.code()),
                }
            }};
        }
        let code = match path {
            "/jetloop.v1.GasDynamicsService/IsentropicRatios" => {
                u!(GasDynamics, isentropic_ratios, pb::IsentropicRatiosRequest)
            }
            "/jetloop.v1.GasDynamicsService/NormalShock" => {
                u!(GasDynamics, normal_shock, pb::NormalShockRequest)
            }
            "/jetloop.v1.GasDynamicsService/JetState" => u!(GasDynamics, jet_state, pb::JetStateRequest),
            "/jetloop.v1.InfoService/ServerInfo" => u!(h.info, server_info, pb::ServerInfoRequest),
            "/jetloop.v1.ShockCellService/CellSpacing" => {
                u!(ShockCells, cell_spacing, pb::CellSpacingRequest)
            }
            "/jetloop.v1.ToneService/PredictScreech" => u!(Tones, predict_screech, pb::PredictScreechRequest),
            "/jetloop.v1.ToneService/PredictShockNoise" => {
                u!(Tones, predict_shock_noise, pb::PredictShockNoiseRequest)
            }
            "/jetloop.v1.ToneService/SweepScreech" => u!(Tones, sweep_screech, pb::SweepScreechRequest),
            "/jetloop.v1.ToneService/GuidedModes" => u!(Tones, guided_modes, pb::GuidedModesRequest),
            "/jetloop.v1.StagingService/FitStages" => u!(Staging, fit_stages, pb::FitStagesRequest),
            "/jetloop.v1.SpectrumService/ExtractTones" => {
                u!(h.spectrum, extract_tones, pb::ExtractTonesRequest)
            }
            "/jetloop.v1.SpectrumService/BandLevels" => u!(h.spectrum, band_levels, pb::BandLevelsRequest),
            "/jetloop.v1.SpectrumService/CrossSpectra" => {
                u!(h.spectrum, cross_spectra, pb::CrossSpectraRequest)
            }
            "/jetloop.v1.SpectrumService/AnalyseRamp" => u!(h.spectrum, analyse_ramp, pb::AnalyseRampRequest),
            "/jetloop.v1.CalibrationService/CalibratorSensitivity" => {
                u!(h.calibration, calibrator_sensitivity, pb::CalibratorSensitivityRequest)
            }
            "/jetloop.v1.SpectrumService/ExtractTonesStream" => {
                block_stream::<ToneStream>(path, messages).await?
            }
            "/jetloop.v1.SpectrumService/CrossSpectraStream" => {
                block_stream::<CrossStream>(path, messages).await?
            }
            "/jetloop.v1.SpectrumService/AnalyseRampStream" => {
                block_stream::<RampStream>(path, messages).await?
            }
            "/jetloop.v1.SpectrumService/TrackTones" => {
                let Some(msgs) =
                    messages.iter().map(|m| decode::<pb::TrackRequest>(m)).collect::<Option<Vec<_>>>()
                else {
                    return Ok(None);
                };
                let r = tokio::task::spawn_blocking(move || -> Result<(), jetloop_server::api::ApiError> {
                    let mut it = msgs.into_iter();
                    let (mut s, _) = TrackSession::start(it.next().unwrap_or_default())?;
                    for m in it {
                        s.push(m)?;
                    }
                    Ok(())
                })
                .await
                .map_err(|e| format!("{path}: the tracking session panicked: {e}"))?;
                Some(r.map_or_else(|e| tonic::Status::from(e).code(), |()| Code::Ok))
            }
            _ => return Ok(Some(Code::Unimplemented)),
        };
        match code {
            Some(c @ (Code::Unknown | Code::Internal)) => Err(format!("{path}: answered {c:?}")),
            other => Ok(other),
        }
    }

    /// One mutated call of a base call picked by `rng`; the path and the result.
    pub async fn one(
        h: &Handlers,
        base_calls: &[BaseCall],
        rng: &mut Rng,
    ) -> (&'static str, Result<Option<Code>, String>) {
        // jetloop's own methods (the health service is exercised over the socket).
        let mut s = pick(rng, base_calls);
        while !s.path.starts_with("/jetloop.v1.") {
            s = pick(rng, base_calls);
        }
        let mut msgs = s.messages.clone();
        let k = rng.below(msgs.len());
        msgs[k] = mutate_message(rng, &msgs[k]);
        let h2 = h.clone();
        let path = s.path;
        // A panic in the handler ends this task, not the harness: reported as a failure.
        let r = tokio::spawn(async move { call(&h2, path, &msgs).await })
            .await
            .unwrap_or_else(|e| Err(format!("{path}: the handler panicked: {e}")));
        (path, r)
    }

    /// The reference decode of sample `i` of channel `c`: plain arithmetic on the bytes.
    fn reference(bytes: &[u8], format: Format, layout: Layout, channels: usize, c: usize, i: usize) -> f64 {
        let w = format.width();
        let per = bytes.len() / w / channels;
        let k = match layout {
            Layout::Interleaved => i * channels + c,
            Layout::Planar => c * per + i,
        };
        let b = &bytes[k * w..k * w + w];
        match format {
            Format::F32 => f64::from(f32::from_le_bytes([b[0], b[1], b[2], b[3]])),
            Format::F64 => f64::from_le_bytes([b[0], b[1], b[2], b[3], b[4], b[5], b[6], b[7]]),
            Format::I16 => f64::from(i16::from_le_bytes([b[0], b[1]])),
            Format::I32 => f64::from(i32::from_le_bytes([b[0], b[1], b[2], b[3]])),
        }
    }

    fn same(a: f64, b: f64) -> bool {
        a == b || (a.is_nan() && b.is_nan())
    }

    /// One random recording (format, layout, channels, bytes, blocks) decoded by the server's
    /// decoder and read back through channel views at random offsets, against [`reference`].
    ///
    /// # Errors
    /// A description of the first sample that differs, or a decode that should have failed.
    pub fn samples_once(rng: &mut Rng) -> Result<(), String> {
        let format = [Format::F32, Format::F64, Format::I16, Format::I32][rng.below(4)];
        let layout = if rng.below(2) == 0 { Layout::Interleaved } else { Layout::Planar };
        let channels = [0, 1, 2, 3, 7, 8, 16, 1 << 20, usize::MAX][rng.below(9)];
        let n = rng.below(2048);
        let bytes = rng.bytes(n);
        let scale = [1.0, 0.5, 1e-3, 250.0][rng.below(4)];
        let whole = channels != 0
            && n % format.width().saturating_mul(channels).max(1) == 0
            && format.width().checked_mul(channels).is_some();
        let rec = Recording::from_bytes(bytes.clone().into(), format, layout, channels, scale);
        let rec = match (rec, whole) {
            (Err(_), false) => return Ok(()),
            (Err(e), true) => {
                return Err(format!("whole frames refused: {e} ({n} bytes, {channels} channels, {format:?})"))
            }
            (Ok(_), false) => {
                return Err(format!("ragged bytes accepted ({n} bytes, {channels} channels, {format:?})"))
            }
            (Ok(r), true) => r,
        };
        let per = n / format.width() / channels;
        for c in 0..channels.min(8) {
            let view = rec.channel(c);
            if view.len() != per {
                return Err(format!("channel {c} has {} samples, not {per}", view.len()));
            }
            let start = rng.below(per + 3);
            let mut out = vec![f64::NAN; rng.below(per + 3)];
            let got = view.read(start, &mut out);
            let expect = out.len().min(per.saturating_sub(start));
            if got != expect {
                return Err(format!("read({start}, {}) gave {got} samples, not {expect}", out.len()));
            }
            for (j, v) in out[..got].iter().enumerate() {
                let r = reference(&bytes, format, layout, channels, c, start + j) * scale;
                if !same(*v, r) {
                    return Err(format!(
                        "channel {c} sample {}: {v} vs {r} ({format:?}, {layout:?})",
                        start + j
                    ));
                }
            }
        }
        // The same bytes as a stream of blocks (interleaved) read the same across block edges.
        if layout == Layout::Interleaved && channels <= 16 {
            let mut s = Recording::stream(format, channels, scale);
            let frame = format.width() * channels;
            let mut at = 0;
            while at < n {
                let take = ((1 + rng.below(6)) * frame).min(n - at);
                s.push_block(bytes[at..at + take].to_vec().into())
                    .map_err(|e| format!("block refused: {e}"))?;
                at += take;
            }
            for c in 0..channels {
                let mut out = vec![0.0; per];
                s.channel(c).read(0, &mut out);
                for (i, v) in out.iter().enumerate() {
                    let r = reference(&bytes, format, layout, channels, c, i) * scale;
                    if !same(*v, r) {
                        return Err(format!("stream channel {c} sample {i}: {v} vs {r}"));
                    }
                }
            }
        }
        Ok(())
    }
}
