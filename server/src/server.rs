//! Builds the tonic server: jetloop services, health, reflection and the limits around them.

use crate::config::{ServeOptions, TlsFiles};
use crate::layers::{AuthLayer, DeadlineLayer, InboundErrorsLayer, MetricsLayer, RequestIdLayer, ShedLayer};
use crate::metrics::Metrics;
use crate::runtime::budget::SampleBudget;
use crate::service::{
    calibration::Calibration, gas_dynamics::GasDynamics, info::Info, shock_cells::ShockCells,
    spectrum::Spectrum, staging::Staging, tones::Tones,
};
pub use crate::service::{JETLOOP_SERVICES, STANDARD_SERVICES};
use jetloop_proto::pb::{
    calibration_service_server::CalibrationServiceServer,
    gas_dynamics_service_server::GasDynamicsServiceServer, info_service_server::InfoServiceServer,
    shock_cell_service_server::ShockCellServiceServer, spectrum_service_server::SpectrumServiceServer,
    staging_service_server::StagingServiceServer, tone_service_server::ToneServiceServer,
};
use std::future::Future;
use std::sync::Arc;
use tokio::net::TcpListener;
use tonic::transport::Server;

/// The message-size limit of every jetloop service, requests and answers alike (spectra with
/// the PSD attached and large sweeps can be large), applied in one place.
macro_rules! limited {
    ($server:expr, $max:expr) => {
        $server.max_decoding_message_size($max).max_encoding_message_size($max)
    };
}

/// Interval of HTTP/2 keepalive pings on an otherwise silent connection.
pub const KEEPALIVE_INTERVAL: std::time::Duration = std::time::Duration::from_secs(20);
/// Time a peer has to answer a keepalive ping before its connection is closed.
pub const KEEPALIVE_TIMEOUT: std::time::Duration = std::time::Duration::from_secs(10);

/// Error starting or running the server.
#[derive(Debug, thiserror::Error)]
pub enum ServeError {
    /// Reflection could not load the descriptor set (a build defect).
    #[error("reflection setup failed: {0}")]
    Reflection(#[from] tonic_reflection::server::Error),
    /// The transport failed.
    #[error("transport: {0}")]
    Transport(#[from] tonic::transport::Error),
}

/// The rustls server configuration of `files`: the server's identity, and client
/// certificates required against the CA when one is given. A client that opens a connection
/// and never finishes the handshake is cut off after `handshake_timeout`.
pub fn tls_config(
    files: &TlsFiles,
    handshake_timeout: std::time::Duration,
) -> tonic::transport::ServerTlsConfig {
    let mut config = tonic::transport::ServerTlsConfig::new()
        .identity(tonic::transport::Identity::from_pem(&files.cert_pem, &files.key_pem))
        .timeout(handshake_timeout);
    if let Some(ca) = &files.client_ca_pem {
        config = config.client_ca_root(tonic::transport::Certificate::from_pem(ca));
    }
    config
}

/// Whether `files` make a usable TLS configuration (certificate and key parse and belong
/// together), checked before the port is bound.
///
/// # Errors
/// [`ServeError::Transport`] with rustls' reason.
pub fn check_tls(files: &TlsFiles) -> Result<(), ServeError> {
    Server::builder().tls_config(tls_config(files, std::time::Duration::from_secs(10)))?;
    Ok(())
}

/// Serves every jetloop service on an already bound listener until `shutdown` resolves, then
/// drains:
/// 1. health answers NOT_SERVING for `drain_notice` while calls are still accepted, so load
///    balancers and probes move away first;
/// 2. accepting ends and every connection is told to go away (HTTP/2 GOAWAY); calls in flight
///    go on;
/// 3. after at most `drain` the connections still open (idle or stalled ones included) are
///    closed and this returns `Ok`.
///
/// # Errors
/// [`ServeError`] when reflection cannot be built or the transport fails.
pub async fn serve(
    listener: TcpListener,
    options: ServeOptions,
    shutdown: impl Future<Output = ()> + Send,
) -> Result<(), ServeError> {
    serve_observed(listener, options, shutdown, None).await
}

/// As [`serve`], with Prometheus metrics served on `metrics_listener` (`GET /metrics`) while
/// the server runs; `None`: no metrics are kept.
///
/// # Errors
/// [`ServeError`] when reflection cannot be built or the transport fails.
pub async fn serve_observed(
    listener: TcpListener,
    options: ServeOptions,
    shutdown: impl Future<Output = ()> + Send,
    metrics_listener: Option<TcpListener>,
) -> Result<(), ServeError> {
    let ServeOptions { limits, reflection, drain_notice, drain, connections, tokens, tls } = options;
    let (health_reporter, health) = tonic_health::server::health_reporter();
    // Every jetloop service is SERVING as soon as the listener accepts (they hold no state).
    for name in JETLOOP_SERVICES {
        health_reporter.set_service_status(*name, tonic_health::ServingStatus::Serving).await;
    }

    let reflection = if reflection {
        let v1 = tonic_reflection::server::Builder::configure()
            .register_encoded_file_descriptor_set(jetloop_proto::FILE_DESCRIPTOR_SET)
            .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
            .build_v1()?;
        // Python's grpcio-reflection client still speaks v1alpha.
        let v1alpha = tonic_reflection::server::Builder::configure()
            .register_encoded_file_descriptor_set(jetloop_proto::FILE_DESCRIPTOR_SET)
            .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
            .build_v1alpha()?;
        Some((v1, v1alpha))
    } else {
        None
    };
    let (reflection_v1, reflection_v1alpha) = reflection.unzip();

    // The gauge of running computations, handed to every call by the deadline layer.
    let computing = crate::runtime::Computing::default();
    let budget = SampleBudget::new(limits.sample_budget_bytes);
    // Metrics only when they are served; the endpoint task ends with this function.
    let metrics = metrics_listener
        .as_ref()
        .map(|_| Arc::new(Metrics::new(Some(budget.clone()), Some(computing.clone()))));
    let _endpoint = match (metrics_listener, &metrics) {
        (Some(l), Some(m)) => Some(AbortOnDrop(tokio::spawn(crate::metrics::serve_metrics(l, m.clone())))),
        _ => None,
    };

    // One stack around every route, outermost first. Below it all, the transport: TLS (and
    // client certificates) is checked in the handshake, before any call exists. The per-call
    // trace span is tonic's `trace_fn` below, which wraps this stack, so a refused or expired
    // call is logged in the span of its method. The order: trace, request id, metrics, auth,
    // admission (shed), deadline, inbound errors. Admission comes before the deadline (not
    // after, as a plain timeout-then-limit stack would have it) because a refusal must cost
    // nothing, not even a timer, and because the permit must outlive the deadline: expired
    // work keeps its permit until it has really stopped.
    let stack = tower::ServiceBuilder::new()
        // The request id first, so every answer (refusals included) carries it and the call's
        // log line names it: the caller's x-request-id or a new one.
        .layer(RequestIdLayer::new())
        // Metrics next, outside authentication and admission, so refused calls are counted
        // with their codes and every call's time includes the refusal path; absent when
        // metrics are off.
        .option_layer(metrics.clone().map(|m| MetricsLayer::new(Some(m))))
        // Then authentication: a call without a valid bearer token (when tokens are set)
        // is refused with UNAUTHENTICATED before it takes a permit or any work; health checks
        // pass so probes and load balancers need no token.
        .layer(AuthLayer::new(&tokens))
        // Shed next: a call over the server-wide limit is refused at once with UNAVAILABLE and
        // a RetryInfo hint before it costs anything; health checks pass untouched (a busy pod
        // must not be restarted). The permit is held until the inner future, deadline
        // included, has finished.
        .layer(ShedLayer::new(limits.max_concurrent_requests).with_metrics(metrics.clone()))
        // Then the deadline, only for admitted calls: DEADLINE_EXCEEDED at the caller's
        // grpc-timeout (answered just before it) or the server's limit, whichever is sooner
        // (live tracking streams have their own, longer limit). It wraps each ready answer in
        // the send guard (layers/send_guard.rs): the answer keeps its permit until its last
        // byte has left, and must leave by the deadline.
        .layer(DeadlineLayer::new(limits.request_timeout, limits.stream_timeout, computing.clone()))
        // Innermost, nearest the routes: a request body that does not decode, or is over the
        // size limit, is the caller's error (INVALID_ARGUMENT, RESOURCE_EXHAUSTED), not the
        // server's (tonic's INTERNAL, OUT_OF_RANGE); every failed call, unary or a live
        // stream failing part-way, is logged here once at info.
        .layer(InboundErrorsLayer)
        .into_inner();

    // The stop request: NOT_SERVING first, then the end of accepting after the notice.
    let (accepting_ended_tx, accepting_ended) = tokio::sync::oneshot::channel::<()>();
    let (stop_listening_tx, stop_listening) = tokio::sync::oneshot::channel::<()>();
    let reporter = health_reporter.clone();
    let stop_accepting = async move {
        shutdown.await;
        reporter.set_service_status("", tonic_health::ServingStatus::NotServing).await;
        for name in JETLOOP_SERVICES {
            reporter.set_service_status(*name, tonic_health::ServingStatus::NotServing).await;
        }
        tracing::info!(notice_s = drain_notice.as_secs_f64(), "stop requested: health NOT_SERVING");
        tokio::time::sleep(drain_notice).await;
        tracing::info!(drain_s = drain.as_secs_f64(), "no longer accepting; draining calls in flight");
        let _ = accepting_ended_tx.send(());
        let _ = stop_listening_tx.send(());
    };

    let max = limits.max_request_bytes;
    let mut builder = Server::builder();
    if let Some(files) = &tls {
        builder = builder.tls_config(tls_config(files, connections.handshake_timeout))?;
    }
    let serving = builder
        // A span per call at DEBUG, so that every line of a call carries its method path
        // when calls are being traced (RUST_LOG=jetloop_server=debug). At the default level
        // no span is made: it cost about 4 % of a physics call's CPU, and the lines written
        // at INFO for a call (failed, expired) name its method, peer and request id
        // themselves.
        .trace_fn(|req| tracing::debug_span!("grpc", path = %req.uri().path()))
        // Large flow-control windows: a DAQ block of a few MB then arrives in one round trip
        // instead of many 64 KB steps (the default), which dominated upload time.
        .initial_stream_window_size(Some(16 * 1024 * 1024))
        .initial_connection_window_size(Some(32 * 1024 * 1024))
        // Keepalive pings: a connection whose peer stopped answering is closed (20 s of
        // silence plus 10 s for the answer), so vanished clients do not hold connections.
        .http2_keepalive_interval(Some(KEEPALIVE_INTERVAL))
        .http2_keepalive_timeout(Some(KEEPALIVE_TIMEOUT))
        .layer(stack)
        .add_service(health)
        .add_optional_service(reflection_v1)
        .add_optional_service(reflection_v1alpha)
        .add_service(limited!(GasDynamicsServiceServer::new(GasDynamics), max))
        .add_service(limited!(InfoServiceServer::new(Info::new(limits, budget.clone(), computing)), max))
        .add_service(limited!(ShockCellServiceServer::new(ShockCells), max))
        .add_service(limited!(ToneServiceServer::new(Tones), max))
        .add_service(limited!(
            CalibrationServiceServer::new(Calibration::new(budget.clone(), metrics.clone())),
            max
        ))
        .add_service(limited!(SpectrumServiceServer::new(Spectrum::new(budget, metrics)), max))
        .add_service(limited!(StagingServiceServer::new(Staging), max))
        // Connections through the capped accept loop (handshake timeout, back-off on accept
        // errors, TCP_NODELAY): see `connections`.
        .serve_with_incoming_shutdown(
            crate::transport::incoming(listener, connections, async {
                let _ = stop_listening.await;
            }),
            stop_accepting,
        );
    tokio::pin!(serving);
    // The graceful shutdown waits for every connection to close; a connection that never
    // closes (an idle or stalled client) would hold the process forever, so the wait ends
    // `drain` after accepting ended.
    let deadline = async {
        if accepting_ended.await.is_ok() {
            tokio::time::sleep(drain).await;
        } else {
            std::future::pending::<()>().await;
        }
    };
    tokio::select! {
        r = &mut serving => r?,
        () = deadline => tracing::warn!(
            drain_s = drain.as_secs_f64(),
            "drain time passed with connections still open: closing them"
        ),
    }
    Ok(())
}

/// Aborts a spawned task when dropped (the metrics endpoint ends with the server).
struct AbortOnDrop(tokio::task::JoinHandle<()>);

impl Drop for AbortOnDrop {
    fn drop(&mut self) {
        self.0.abort();
    }
}
