//! `jetloop-server`: parse flags, set up logging, bind, serve until SIGINT/SIGTERM.
#![forbid(unsafe_code)]

use jetloop_server::server;
use std::io::{IsTerminal, Write};
use std::process::ExitCode;

#[tokio::main]
async fn main() -> ExitCode {
    let (config, sources) = match jetloop_server::config::load(std::env::args_os().collect()) {
        Ok(c) => c,
        Err(e) => e.exit(),
    };
    if config.print_config {
        for (name, value, source) in &sources {
            println!("{name} = {value}    # {}", source.name());
        }
        return ExitCode::SUCCESS;
    }
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info"));
    let logs = tracing_subscriber::fmt().with_env_filter(filter).with_writer(std::io::stderr);
    if config.log_format == "json" {
        // One JSON object per line with the span fields (method path, request id) flattened
        // beside the event's own.
        logs.json().with_current_span(true).with_span_list(false).init();
    } else {
        // Colour codes only on a terminal, not in files or the journal.
        logs.with_ansi(std::io::stderr().is_terminal()).init();
    }
    let mut options = config.serve_options();
    if let Some(path) = &config.token_file {
        match jetloop_server::config::read_tokens(path) {
            Ok(tokens) => options.tokens = tokens,
            Err(e) => {
                tracing::error!("{e}");
                return ExitCode::from(2);
            }
        }
    }
    match config.read_tls() {
        Ok(tls) => {
            if let Some(Err(e)) = tls.as_ref().map(server::check_tls) {
                tracing::error!("the TLS certificate or key cannot be used: {e}");
                return ExitCode::from(2);
            }
            options.tls = tls;
        }
        Err(e) => {
            tracing::error!("{e}");
            return ExitCode::from(2);
        }
    }
    if let Err(e) = config.check_exposure(!options.tokens.is_empty()) {
        tracing::error!("{e}");
        return ExitCode::from(2);
    }
    let client_certificates = options.tls.as_ref().is_some_and(|t| t.client_ca_pem.is_some());
    if let Some(w) = config.exposure_warning(!options.tokens.is_empty(), client_certificates) {
        tracing::warn!("{w}");
    }
    let listener = match tokio::net::TcpListener::bind(config.listen).await {
        Ok(l) => l,
        Err(e) => {
            tracing::error!("cannot listen on {}: {e}", config.listen);
            return ExitCode::from(3);
        }
    };
    let addr = match listener.local_addr() {
        Ok(a) => a,
        Err(e) => {
            tracing::error!("cannot read the bound address: {e}");
            return ExitCode::from(3);
        }
    };
    let metrics = match config.metrics_listen {
        None => None,
        Some(at) => match tokio::net::TcpListener::bind(at).await {
            Ok(l) => Some(l),
            Err(e) => {
                tracing::error!("cannot listen for metrics on {at}: {e}");
                return ExitCode::from(3);
            }
        },
    };
    // The first line on stdout is the bound address, so scripts that start the server on
    // port 0 can find it; the metrics address follows when metrics are on.
    println!("jetloop-server listening on {addr}");
    if let Some(m) = metrics.as_ref().and_then(|l| l.local_addr().ok()) {
        println!("metrics on http://{m}/metrics");
        tracing::info!(metrics = %m, "serving metrics");
    }
    let _ = std::io::stdout().flush();
    tracing::info!(%addr, version = env!("CARGO_PKG_VERSION"), "serving");
    for note in options.limits.sizing_notes() {
        tracing::info!("limit: {note}");
    }
    match server::serve_observed(listener, options, shutdown_signal(), metrics).await {
        Ok(()) => {
            tracing::info!("stopped");
            ExitCode::SUCCESS
        }
        Err(e) => {
            tracing::error!("server failed: {e}");
            ExitCode::from(1)
        }
    }
}

async fn shutdown_signal() {
    let ctrl_c = async {
        let _ = tokio::signal::ctrl_c().await;
    };
    #[cfg(unix)]
    let term = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    #[cfg(not(unix))]
    let term = std::future::pending::<()>();
    tokio::select! {
        () = ctrl_c => {},
        () = term => {},
    }
    tracing::info!("shutdown requested");
}
