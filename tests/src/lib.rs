//! Helpers for end-to-end tests: a real jetloop server on a loopback socket.
#![forbid(unsafe_code)]

pub mod hostile;

use jetloop_server::config::{Limits, ServeOptions};
use std::net::SocketAddr;
use std::time::Duration;
use tokio::sync::oneshot;
use tokio::task::JoinHandle;
use tonic_types::StatusExt;

/// A server running in this process on `127.0.0.1:<free port>`.
pub struct TestServer {
    /// Bound address.
    pub addr: SocketAddr,
    shutdown: Option<oneshot::Sender<()>>,
    handle: Option<JoinHandle<Result<(), jetloop_server::server::ServeError>>>,
}

impl TestServer {
    /// Binds `127.0.0.1:0` first (so clients can connect at once, no sleeping) and serves.
    ///
    /// # Panics
    /// When the loopback socket cannot be bound.
    pub async fn start() -> Self {
        Self::start_with(Limits::default()).await
    }

    /// As [`TestServer::start`] with explicit limits.
    ///
    /// # Panics
    /// When the loopback socket cannot be bound.
    pub async fn start_with(limits: Limits) -> Self {
        Self::start_with_options(ServeOptions {
            limits,
            drain_notice: Duration::ZERO,
            ..ServeOptions::default()
        })
        .await
    }

    /// As [`TestServer::start`], with every start and stop option given.
    ///
    /// # Panics
    /// When the loopback socket cannot be bound.
    pub async fn start_with_options(options: ServeOptions) -> Self {
        Self::start_observed(options, None).await
    }

    /// As [`TestServer::start_with_options`], with metrics served on `metrics` when given.
    ///
    /// # Panics
    /// When the loopback socket cannot be bound.
    pub async fn start_observed(options: ServeOptions, metrics: Option<tokio::net::TcpListener>) -> Self {
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.expect("bind loopback");
        let addr = listener.local_addr().expect("local addr");
        let (tx, rx) = oneshot::channel::<()>();
        let handle = tokio::spawn(jetloop_server::server::serve_observed(
            listener,
            options,
            async {
                let _ = rx.await;
            },
            metrics,
        ));
        Self { addr, shutdown: Some(tx), handle: Some(handle) }
    }

    /// `http://127.0.0.1:<port>` for tonic clients.
    pub fn url(&self) -> String {
        format!("http://{}", self.addr)
    }

    /// A connected channel.
    ///
    /// # Panics
    /// When the connection fails.
    pub async fn channel(&self) -> tonic::transport::Channel {
        tonic::transport::Endpoint::from_shared(self.url())
            .expect("endpoint")
            .initial_stream_window_size(16 * 1024 * 1024)
            .initial_connection_window_size(32 * 1024 * 1024)
            .connect()
            .await
            .expect("connect")
    }

    /// Requests a graceful shutdown without waiting: new connections and calls are refused
    /// from here on, calls in flight go on. [`TestServer::stop`] then waits for the end.
    pub fn begin_shutdown(&mut self) {
        if let Some(tx) = self.shutdown.take() {
            let _ = tx.send(());
        }
    }

    /// Requests a graceful shutdown and waits for the server task to end.
    ///
    /// # Panics
    /// When the server task failed.
    pub async fn stop(mut self) {
        if let Some(tx) = self.shutdown.take() {
            let _ = tx.send(());
        }
        if let Some(h) = self.handle.take() {
            h.await.expect("server task").expect("server result");
        }
    }
}

/// Benchmark data (invented): `frames` interleaved f32 frames of `m` microphones equally
/// spaced on a ring, a tone of amplitude 10 at 5 kHz spinning as m = 1 (cos(omega t - theta)),
/// plus a deterministic pseudo-random floor (uniform in [-0.5, 0.5], LCG seeded with `seed`).
pub fn ring_f32(m: usize, frames: usize, fs: f64, seed: u64) -> Vec<u8> {
    let mut state = seed;
    let mut bytes = Vec::with_capacity(m * frames * 4);
    for k in 0..frames {
        let t = k as f64 / fs;
        for j in 0..m {
            state = state.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
            let r = ((state >> 11) as f64 / (1u64 << 53) as f64) - 0.5;
            let th = 2.0 * std::f64::consts::PI * j as f64 / m as f64;
            let v = 10.0 * (2.0 * std::f64::consts::PI * 5000.0 * t - th).cos() + r;
            bytes.extend_from_slice(&(v as f32).to_le_bytes());
        }
    }
    bytes
}

/// The demo NPR sweep of `sample-data/npr-sweep-up-down.csv` (invented rig): Powell's loop
/// f = n / (N Ls (1/(kappa Uj) + 1/a)) for a cold 25.4 mm round convergent nozzle (ISA sea
/// level, reservoir at 288.15 K), with Ls the vortex-sheet spacing and Uj the fully expanded
/// velocity from the server's own jet model, N = 4 and n = 4 in every stage and a convection
/// ratio per stage: the stage changes are then 10-12 %, the usual size.
pub mod demo_sweep {
    use jetloop_server::physics::{
        cells,
        gas::Gas,
        jet::{jet_state, ExpandedJet, Nozzle, OperatingPoint},
    };

    /// Nozzle exit diameter, m.
    pub const DIAMETER_M: f64 = 0.0254;
    /// Source cell N and loop order n of every stage.
    pub const CELLS: f64 = 4.0;
    /// Loop order of every stage.
    pub const ORDER: f64 = 4.0;
    /// Convection ratio of each stage (A2, B, C; invented).
    pub const KAPPA: [f64; 3] = [0.72, 0.58, 0.68];
    /// NPR thresholds of the up-sweep (A2 -> B, B -> C).
    pub const UP: [f64; 2] = [3.125, 3.825];
    /// NPR thresholds of the down-sweep (hysteresis: below the up ones).
    pub const DOWN: [f64; 2] = [2.875, 3.625];
    /// Relative standard deviation of the frequency noise.
    pub const NOISE: f64 = 0.01;

    /// The loop-model frequency of `stage` at `npr`, Hz.
    ///
    /// # Panics
    /// When the jet at `npr` is not supersonic (NPR below 1.893).
    pub fn model_hz(stage: usize, npr: f64) -> f64 {
        let air = Gas::AIR;
        let s = jet_state(
            &air,
            &Nozzle::round_convergent(DIAMETER_M).expect("nozzle"),
            &OperatingPoint::new(npr, 101_325.0, 288.15, 288.15).expect("operating point"),
        );
        let j = ExpandedJet::from_state(&s).expect("supersonic");
        let ls = cells::spacing(&j, 1.0);
        let a = air.sound_speed(288.15);
        ORDER / (CELLS * ls * (1.0 / (KAPPA[stage] * j.uj_m_s) + 1.0 / a))
    }

    /// The stage at `npr` on the way up (`rising`) or down.
    pub fn stage_at(npr: f64, rising: bool) -> usize {
        let t = if rising { &UP } else { &DOWN };
        t.iter().filter(|&&x| npr > x).count()
    }
}

/// The demo reflector sweep (invented): a flat reflector moved away from the nozzle lip of an
/// imagined rig, the loop lengthened by twice the displacement (`tau = tau0 + 2 d / a`), the
/// tone on loop order 4 until it has fallen 10 % below its start and then on order 5.
pub mod demo_reflector {
    use jetloop_server::physics::gas::Gas;

    /// Loop period with the reflector at the lip, s (loop order 4 at 5 kHz).
    pub const TAU0_S: f64 = 4.0 / 5000.0;
    /// Loop orders before and after the jump.
    pub const ORDERS: [f64; 2] = [4.0, 5.0];
    /// Displacement above which the tone is on the second order, m.
    pub const JUMP_M: f64 = 0.0150;
    /// Relative standard deviation of the frequency noise.
    pub const NOISE: f64 = 0.005;
    /// Displacements of the sweep, m: 0 to 40 mm in 1 mm steps.
    pub fn displacements() -> Vec<f64> {
        (0..=40).map(|k| 0.001 * f64::from(k)).collect()
    }

    /// The loop-model frequency at displacement `d_m`, Hz.
    pub fn model_hz(d_m: f64) -> f64 {
        let a = Gas::AIR.sound_speed(288.15);
        let n = if d_m > JUMP_M { ORDERS[1] } else { ORDERS[0] };
        n / (TAU0_S + 2.0 * d_m / a)
    }
}

/// Median, minimum and maximum of timings (benchmarks).
///
/// # Panics
/// When `v` is empty.
pub fn stats(mut v: Vec<f64>) -> (f64, f64, f64) {
    v.sort_by(f64::total_cmp);
    (v[v.len() / 2], v[0], v[v.len() - 1])
}

/// Asserts that `status` has `code` and a `google.rpc.BadRequest` violation on `field`.
///
/// # Panics
/// When it does not.
pub fn assert_field(status: &tonic::Status, code: tonic::Code, field: &str) {
    assert_eq!(status.code(), code, "{status:?}");
    let details = status.get_error_details();
    let bad = details.bad_request().expect("BadRequest details");
    let fields: Vec<_> = bad.field_violations.iter().map(|v| v.field.as_str()).collect();
    assert!(fields.contains(&field), "expected {field} in {fields:?}: {}", status.message());
    assert!(bad.field_violations.iter().all(|v| !v.description.is_empty()));
}

/// Request pieces shared by the end-to-end tests and the benchmarks: nozzles, jet conditions
/// at a pressure ratio (cold, ISA ambient unless changed), jet inputs, and relative error.
pub mod fixtures {
    use jetloop_proto::pb::{self, jet_input::Source, nozzle::Kind, operating_point::Pressure};

    /// |a - b| / |b|.
    pub fn rel(a: f64, b: f64) -> f64 {
        ((a - b) / b).abs()
    }

    /// A round convergent nozzle of exit diameter `d` m.
    pub fn round(d: f64) -> Kind {
        Kind::RoundConvergent(pb::RoundConvergentNozzle { exit_diameter_m: d })
    }

    /// A round convergent-divergent nozzle of exit diameter `d` m and design Mach `md`.
    pub fn cd(d: f64, md: f64) -> Kind {
        Kind::RoundConvergentDivergent(pb::RoundConvergentDivergentNozzle {
            exit_diameter_m: d,
            design: Some(pb::round_convergent_divergent_nozzle::Design::DesignMachNumber(md)),
        })
    }

    /// Conditions of nozzle `kind` at NPR `npr`, every other field left to the server.
    pub fn conditions(kind: Kind, npr: f64) -> pb::JetConditions {
        pb::JetConditions {
            nozzle: Some(pb::Nozzle { kind: Some(kind) }),
            operating_point: Some(pb::OperatingPoint {
                pressure: Some(Pressure::NozzlePressureRatio(npr)),
                ..Default::default()
            }),
            gas: None,
            ambient_gas: None,
            ideal_expansion_tolerance: None,
        }
    }

    /// The jet input of conditions.
    pub fn input(c: pb::JetConditions) -> pb::JetInput {
        pb::JetInput { source: Some(Source::Conditions(c)) }
    }

    /// A 25.4 mm round convergent nozzle at NPR `npr` as a jet input.
    pub fn inch_nozzle(npr: f64) -> pb::JetInput {
        input(conditions(round(0.0254), npr))
    }

    /// A screech sweep of `jet` over `count` nozzle pressure ratios from `start` to `stop`,
    /// every option left to the server.
    pub fn npr_sweep(jet: pb::JetInput, start: f64, stop: f64, count: u32) -> pb::SweepScreechRequest {
        pb::SweepScreechRequest {
            jet: Some(jet),
            variable: pb::SweepVariable::NozzlePressureRatio as i32,
            values: Some(pb::sweep_screech_request::Values::Range(pb::SweepRange { start, stop, count })),
            options: None,
        }
    }

    /// `m` points of a pressure sweep: six stages over NPR 2.2-5.0 whose frequencies follow
    /// a smooth trend with 12 % jumps (synthetic, for timing and load only).
    pub fn pressure_sweep_points(m: usize) -> Vec<pb::MeasuredTone> {
        (0..m)
            .map(|k| {
                let npr = 2.2 + 2.8 * k as f64 / m as f64;
                let stage = (6 * k / m) as i32;
                let f = 6000.0 / (npr - 1.0) * 1.12f64.powi(stage % 2 * 2 - 1 + stage / 2);
                pb::MeasuredTone { x: npr, frequency_hz: f, ..Default::default() }
            })
            .collect()
    }

    /// The first message of a tracking stream: f32 frames of one channel at `fs` Hz already in
    /// pascals, Welch segments of `segment` samples, an update every `update_s` s; every other
    /// setting left to the server.
    pub fn track_config(fs: f64, segment: u32, update_s: f64) -> pb::TrackRequest {
        pb::TrackRequest {
            item: Some(pb::track_request::Item::Config(pb::TrackConfig {
                analysis: Some(pb::ExtractTonesRequest {
                    samples: Some(pb::Samples {
                        sample_rate_hz: fs,
                        data: Some(pb::samples::Data::Raw(pb::RawSamples {
                            format: pb::SampleFormat::F32Le as i32,
                            data: Vec::new().into(),
                        })),
                        calibration: crate::in_pascals(),
                        ..Default::default()
                    }),
                    welch: Some(pb::WelchOptions {
                        segment: Some(pb::welch_options::Segment::SegmentLength(segment)),
                        ..Default::default()
                    }),
                    ..Default::default()
                }),
                update_interval_s: Some(update_s),
                ..Default::default()
            })),
        }
    }

    /// A cold round jet given directly: Mj and Dj in m.
    pub fn direct(mj: f64, dj: f64) -> pb::JetInput {
        pb::JetInput {
            source: Some(Source::FullyExpanded(pb::FullyExpandedJet {
                fully_expanded_mach_number: mj,
                size: Some(pb::fully_expanded_jet::Size::FullyExpandedDiameterM(dj)),
                ..Default::default()
            })),
        }
    }
}

/// Samples sent as values already in pascals: one channel of `values` at `fs` Hz (more
/// channels: `values` interleaved frame by frame and `channels` set on the result).
pub fn pascals(values: Vec<f64>, fs: f64) -> jetloop_proto::pb::Samples {
    jetloop_proto::pb::Samples {
        sample_rate_hz: fs,
        data: Some(jetloop_proto::pb::samples::Data::Values(jetloop_proto::pb::SampleValues { values })),
        calibration: in_pascals(),
        ..Default::default()
    }
}

/// Samples sent as raw little-endian f32 `frames` of `channels` channels at `fs` Hz, already in
/// pascals (a DAQ's native float dump).
pub fn f32_pascals(frames: impl Into<bytes::Bytes>, fs: f64, channels: u32) -> jetloop_proto::pb::Samples {
    jetloop_proto::pb::Samples {
        sample_rate_hz: fs,
        channel_count: channels,
        data: Some(jetloop_proto::pb::samples::Data::Raw(jetloop_proto::pb::RawSamples {
            data: frames.into(),
            format: jetloop_proto::pb::SampleFormat::F32Le as i32,
        })),
        calibration: in_pascals(),
        ..Default::default()
    }
}

/// An ExtractTones request for `samples` with every option left to the server.
pub fn tones_request(samples: jetloop_proto::pb::Samples) -> jetloop_proto::pb::ExtractTonesRequest {
    jetloop_proto::pb::ExtractTonesRequest { samples: Some(samples), ..Default::default() }
}

/// `n` samples at `fs` Hz of a sinusoid of frequency `f` Hz and amplitude `amplitude`.
pub fn sine(n: usize, fs: f64, f: f64, amplitude: f64) -> Vec<f64> {
    (0..n).map(|i| amplitude * (2.0 * std::f64::consts::PI * f * i as f64 / fs).sin()).collect()
}

/// The explicit "samples already in pascals" calibration (the API assumes no unit).
pub fn in_pascals() -> Option<jetloop_proto::pb::Calibration> {
    Some(jetloop_proto::pb::Calibration {
        scale: Some(jetloop_proto::pb::calibration::Scale::InPascals(true)),
    })
}
