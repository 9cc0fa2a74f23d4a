//! Helpers for end-to-end tests: a real jetloop server on a loopback socket, and the request
//! builders the tests and the benchmarks share: [`fixtures`] (nozzles, jets, sweeps, staging
//! points), [`samples`] (recordings and their calibration, Welch options, block and tracking
//! stream messages) and [`signals`] (synthetic signals and seeded noise).
#![forbid(unsafe_code)]

pub mod fixtures;
pub mod hostile;
pub mod samples;
pub mod signals;

pub use samples::{f32_pascals, in_pascals, pascals, tones_request};
pub use signals::{ring_f32, sine};

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

/// Median of timings (benchmarks): the middle of [`stats`].
///
/// # Panics
/// When `v` is empty.
pub fn median(v: Vec<f64>) -> f64 {
    stats(v).0
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

/// `msg` as a call carrying the bearer `token` (`authorization: Bearer <token>`).
///
/// # Panics
/// When `token` is not visible ASCII.
pub fn bearer<T>(msg: T, token: &str) -> tonic::Request<T> {
    let mut r = tonic::Request::new(msg);
    r.metadata_mut().insert("authorization", format!("Bearer {token}").parse().expect("ascii"));
    r
}

/// Reads `stream` until it fails: the status it ended with, or `None` when it ended cleanly
/// (the updates before are dropped).
pub async fn stream_error<T>(stream: &mut tonic::Streaming<T>) -> Option<tonic::Status> {
    loop {
        match stream.message().await {
            Ok(Some(_)) => continue,
            Ok(None) => return None,
            Err(e) => return Some(e),
        }
    }
}
