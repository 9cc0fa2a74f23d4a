//! Server configuration: command-line flags with environment fallbacks and safe defaults.

use crate::connections::{default_max_connections, ConnectionLimits};
use clap::Parser;
use std::net::SocketAddr;
use std::time::Duration;

/// Limits enforced on every call.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Limits {
    /// Largest accepted request message, bytes.
    pub max_request_bytes: usize,
    /// Server-side time limit for one call.
    pub request_timeout: Duration,
    /// Server-side time limit for one live tracking stream (`TrackTones`), which runs as long
    /// as the test run it follows; a shorter client deadline wins.
    pub stream_timeout: Duration,
    /// Calls processed at once, server-wide; one more is refused with UNAVAILABLE and a retry
    /// hint (health checks are never refused).
    pub max_concurrent_requests: usize,
    /// Sample bytes all calls together may hold at once; beyond it a call is refused with
    /// RESOURCE_EXHAUSTED.
    pub sample_budget_bytes: usize,
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            max_request_bytes: 64 * 1024 * 1024,
            request_timeout: Duration::from_secs(60),
            stream_timeout: Duration::from_secs(12 * 3600),
            max_concurrent_requests: 256,
            sample_budget_bytes: default_sample_budget(),
        }
    }
}

/// Half the machine's physical memory (Linux `/proc/meminfo`), at least 256 MiB; 4 GiB where
/// the memory size cannot be read.
pub fn default_sample_budget() -> usize {
    let total_kib = std::fs::read_to_string("/proc/meminfo").ok().and_then(|m| {
        m.lines().find(|l| l.starts_with("MemTotal:"))?.split_whitespace().nth(1)?.parse::<usize>().ok()
    });
    match total_kib {
        Some(kib) => (kib.saturating_mul(1024) / 2).max(256 << 20),
        None => 4 << 30,
    }
}

/// `jetloop-server` flags.
#[derive(Debug, Clone, Parser)]
#[command(name = "jetloop-server", version, about = "jetloop gRPC server for supersonic-jet aeroacoustics")]
pub struct Config {
    /// Address to listen on (port 0 picks a free port; the bound address is printed).
    #[arg(long, env = "JETLOOP_LISTEN", default_value = "127.0.0.1:50051")]
    pub listen: SocketAddr,
    /// Largest accepted request message in bytes.
    #[arg(long, env = "JETLOOP_MAX_REQUEST_BYTES", default_value_t = 64 * 1024 * 1024,
          value_parser = clap::value_parser!(u64).range(1024..=1024 * 1024 * 1024))]
    pub max_request_bytes: u64,
    /// Server-side time limit for one call, in seconds.
    #[arg(long, env = "JETLOOP_REQUEST_TIMEOUT_S", default_value_t = 60,
          value_parser = clap::value_parser!(u64).range(1..=3600))]
    pub request_timeout_s: u64,
    /// Server-side time limit for one live tracking stream (TrackTones), in seconds: a run
    /// streams for as long as it lasts, so this is separate from the per-call limit.
    #[arg(long, env = "JETLOOP_STREAM_TIMEOUT_S", default_value_t = 12 * 3600,
          value_parser = clap::value_parser!(u64).range(1..=7 * 24 * 3600))]
    pub stream_timeout_s: u64,
    /// Calls processed at once, server-wide (the excess is refused with UNAVAILABLE and a
    /// retry hint; health checks are exempt).
    #[arg(long, env = "JETLOOP_MAX_CONCURRENT", default_value_t = 256,
          value_parser = clap::value_parser!(u64).range(1..=65536))]
    pub max_concurrent_requests: u64,
    /// Sample bytes all calls together may hold at once, in MiB (0: half the machine's
    /// memory). Calls beyond it are refused with RESOURCE_EXHAUSTED naming the budget.
    #[arg(long, env = "JETLOOP_SAMPLE_BUDGET_MIB", default_value_t = 0,
          value_parser = clap::value_parser!(u64).range(0..=1 << 22))]
    pub sample_budget_mib: u64,
    /// Serve gRPC server reflection (`on` or `off`). It lets tools such as grpcurl list the
    /// API; turn it off where the port is reachable from outside a trusted network.
    #[arg(long, env = "JETLOOP_REFLECTION", default_value = "on", value_parser = ["on", "off"])]
    pub reflection: String,
    /// Seconds between a stop request and the end of accepting: health answers NOT_SERVING
    /// meanwhile, so load balancers stop sending calls before connections go away.
    #[arg(long, env = "JETLOOP_DRAIN_NOTICE_S", default_value_t = 1.0,
          value_parser = parse_seconds)]
    pub drain_notice_s: f64,
    /// Most seconds that calls in flight are given after accepting ends; connections still
    /// open then (idle ones included) are closed and the process exits 0. Keep it below the
    /// service manager's stop timeout (30 s in the shipped systemd unit).
    #[arg(long, env = "JETLOOP_DRAIN_S", default_value_t = 20.0, value_parser = parse_seconds)]
    pub drain_s: f64,
    /// Most connections open at once (0: 1024, or the open-file limit less 64 where lower).
    /// Beyond it new connections are closed at once, so health checks and calls keep working.
    #[arg(long, env = "JETLOOP_MAX_CONNECTIONS", default_value_t = 0,
          value_parser = clap::value_parser!(u64).range(0..=1_000_000))]
    pub max_connections: u64,
    /// Seconds a new connection has to send its first byte before it is closed.
    #[arg(long, env = "JETLOOP_HANDSHAKE_TIMEOUT_S", default_value_t = 10.0, value_parser = parse_seconds)]
    pub handshake_timeout_s: f64,
    /// File of bearer tokens, one per line (blank lines and `#` comments ignored; each at least
    /// 16 characters). When given, every call but health checks must carry
    /// `authorization: Bearer <token>` with one of them, else it is refused with
    /// UNAUTHENTICATED.
    #[arg(long, env = "JETLOOP_TOKEN_FILE")]
    pub token_file: Option<std::path::PathBuf>,
    /// Allow listening on a non-loopback address without tokens (only on a network that only
    /// your lab reaches: anyone who reaches the port can call every RPC).
    #[arg(long, env = "JETLOOP_ALLOW_INSECURE_NETWORK")]
    pub allow_insecure_network: bool,
}

/// Shortest accepted bearer token, characters.
pub const MIN_TOKEN_CHARS: usize = 16;

/// The tokens of a token file (one per line, blank lines and `#` comments ignored).
///
/// # Errors
/// A sentence naming the file when it cannot be read, holds no token, or holds one shorter
/// than [`MIN_TOKEN_CHARS`].
pub fn read_tokens(path: &std::path::Path) -> Result<Vec<String>, String> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| format!("cannot read the token file {}: {e}", path.display()))?;
    let tokens: Vec<String> = text
        .lines()
        .map(str::trim)
        .filter(|l| !l.is_empty() && !l.starts_with('#'))
        .map(str::to_string)
        .collect();
    if tokens.is_empty() {
        return Err(format!("the token file {} holds no token", path.display()));
    }
    if let Some((i, _)) = tokens.iter().enumerate().find(|(_, t)| t.chars().count() < MIN_TOKEN_CHARS) {
        return Err(format!(
            "token {} of {} is shorter than {MIN_TOKEN_CHARS} characters",
            i + 1,
            path.display()
        ));
    }
    Ok(tokens)
}

fn parse_seconds(s: &str) -> Result<f64, String> {
    match s.parse::<f64>() {
        Ok(v) if (0.0..=3600.0).contains(&v) => Ok(v),
        _ => Err(format!("{s} is not a number of seconds in [0, 3600]")),
    }
}

/// How the server starts and stops, beside the per-call [`Limits`].
#[derive(Debug, Clone, PartialEq)]
pub struct ServeOptions {
    /// Limits on every call.
    pub limits: Limits,
    /// Serve gRPC reflection.
    pub reflection: bool,
    /// NOT_SERVING notice before accepting ends.
    pub drain_notice: Duration,
    /// Most time given to calls in flight after accepting ends.
    pub drain: Duration,
    /// Connection cap and handshake timeout.
    pub connections: ConnectionLimits,
    /// Bearer tokens a call must carry one of (health checks exempt); empty: no check.
    pub tokens: Vec<String>,
}

impl Default for ServeOptions {
    fn default() -> Self {
        Self {
            limits: Limits::default(),
            reflection: true,
            drain_notice: Duration::from_secs(1),
            drain: Duration::from_secs(20),
            connections: ConnectionLimits {
                max_connections: default_max_connections(),
                handshake_timeout: Duration::from_secs(10),
            },
            tokens: Vec::new(),
        }
    }
}

impl Config {
    /// Start and stop options from the flags.
    pub fn serve_options(&self) -> ServeOptions {
        ServeOptions {
            limits: self.limits(),
            reflection: self.reflection == "on",
            drain_notice: Duration::from_secs_f64(self.drain_notice_s),
            drain: Duration::from_secs_f64(self.drain_s),
            connections: ConnectionLimits {
                max_connections: match self.max_connections {
                    0 => default_max_connections(),
                    n => usize::try_from(n).unwrap_or(usize::MAX),
                },
                handshake_timeout: Duration::from_secs_f64(self.handshake_timeout_s),
            },
            tokens: Vec::new(),
        }
    }

    /// Limits from the flags.
    pub fn limits(&self) -> Limits {
        Limits {
            max_request_bytes: usize::try_from(self.max_request_bytes).unwrap_or(usize::MAX),
            request_timeout: Duration::from_secs(self.request_timeout_s),
            stream_timeout: Duration::from_secs(self.stream_timeout_s),
            max_concurrent_requests: usize::try_from(self.max_concurrent_requests).unwrap_or(usize::MAX),
            sample_budget_bytes: match self.sample_budget_mib {
                0 => default_sample_budget(),
                mib => usize::try_from(mib << 20).unwrap_or(usize::MAX),
            },
        }
    }
}
