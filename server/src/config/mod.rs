//! Server configuration: command-line flags with environment fallbacks and safe defaults.

pub mod sizing;

use crate::transport::{default_max_connections, ConnectionLimits};
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
    /// The memory the defaults were sized from, when the server sized them
    /// ([`sizing::size`]); `None` for limits set in code.
    pub sized_from: Option<SizedFrom>,
}

/// The memory a server's default limits were sized from, and which of the three limits were
/// given rather than derived.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SizedFrom {
    /// The memory limit read at start.
    pub memory: sizing::MemoryLimit,
    /// Given by flag (not derived): sample budget, request size, concurrency.
    pub given: [bool; 3],
}

impl Limits {
    /// One sentence per sized limit: its value and where it came from (empty for limits set
    /// in code).
    pub fn sizing_notes(&self) -> Vec<String> {
        let Some(s) = self.sized_from else { return Vec::new() };
        let pick = |given: bool, v: usize| given.then_some(v);
        sizing::size(
            s.memory,
            pick(s.given[0], self.sample_budget_bytes),
            pick(s.given[1], self.max_request_bytes),
            pick(s.given[2], self.max_concurrent_requests),
        )
        .notes
    }
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            max_request_bytes: 64 * 1024 * 1024,
            request_timeout: Duration::from_secs(60),
            stream_timeout: Duration::from_secs(12 * 3600),
            max_concurrent_requests: 256,
            sample_budget_bytes: default_sample_budget(),
            sized_from: None,
        }
    }
}

/// Half the memory this process may use (the container's cgroup limit where one is set, else
/// the machine's: [`sizing::memory_limit`]), at least 256 MiB.
pub fn default_sample_budget() -> usize {
    sizing::size(sizing::memory_limit(), None, None, None).sample_budget_bytes
}

/// `--max-request-bytes`: 0 (sized to the memory) or 1024 to 1 GiB.
fn parse_request_bytes(s: &str) -> Result<u64, String> {
    let v: u64 = s.trim().parse().map_err(|e| format!("{s}: {e}"))?;
    if v == 0 || (1024..=1 << 30).contains(&v) {
        Ok(v)
    } else {
        Err(format!("{v} is outside the allowed range: 0 (sized to the memory) or 1024 to 1073741824 bytes"))
    }
}

/// `jetloop-server` flags.
#[derive(Debug, Clone, Parser)]
#[command(name = "jetloop-server", version, about = "jetloop gRPC server for supersonic-jet aeroacoustics")]
pub struct Config {
    /// Address to listen on (port 0 picks a free port; the bound address is printed).
    #[arg(long, env = "JETLOOP_LISTEN", default_value = "127.0.0.1:50051")]
    pub listen: SocketAddr,
    /// Largest accepted request message in bytes (0: 64 MiB or an eighth of the sample
    /// budget, the smaller; otherwise 1024 to 1 GiB).
    #[arg(long, env = "JETLOOP_MAX_REQUEST_BYTES", default_value_t = 0,
          value_parser = parse_request_bytes)]
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
    /// retry hint; health checks are exempt). 0: 256 or the sample budget over the request
    /// size limit, the smaller, so calls in flight cannot hold more than the budget.
    #[arg(long, env = "JETLOOP_MAX_CONCURRENT", default_value_t = 0,
          value_parser = clap::value_parser!(u64).range(0..=65536))]
    pub max_concurrent_requests: u64,
    /// Sample bytes all calls together may hold at once, in MiB (0: half the memory the
    /// process may use: the container's cgroup limit where one is set, else the machine's).
    /// Calls beyond it are refused with RESOURCE_EXHAUSTED naming the budget.
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
    /// Certificate chain (PEM) the server presents: with `--tls-key`, every connection is TLS
    /// (clients then connect to `https://`).
    #[arg(long, env = "JETLOOP_TLS_CERT", requires = "tls_key")]
    pub tls_cert: Option<std::path::PathBuf>,
    /// Private key (PEM) of `--tls-cert`.
    #[arg(long, env = "JETLOOP_TLS_KEY", requires = "tls_cert")]
    pub tls_key: Option<std::path::PathBuf>,
    /// CA certificates (PEM) that client certificates must chain to: with it, a client without
    /// a valid certificate cannot connect at all (mutual TLS; health checks too). Needs
    /// `--tls-cert`.
    #[arg(long, env = "JETLOOP_TLS_CLIENT_CA", requires = "tls_cert")]
    pub tls_client_ca: Option<std::path::PathBuf>,
    /// Allow listening on a non-loopback address with neither TLS nor tokens (only on a
    /// network that only your lab reaches: anyone who reaches the port can call every RPC and
    /// read every answer).
    #[arg(long, env = "JETLOOP_ALLOW_INSECURE_NETWORK")]
    pub allow_insecure_network: bool,
    /// Serve Prometheus metrics at http://ADDR/metrics (a separate plain-HTTP listener; off
    /// when unset). Metrics name methods and counts, never request contents.
    #[arg(long, env = "JETLOOP_METRICS_LISTEN")]
    pub metrics_listen: Option<SocketAddr>,
    /// Log line format on stderr: `text` (for people) or `json` (one object per line, for log
    /// collectors). The level filter is RUST_LOG (default `info`).
    #[arg(long, env = "JETLOOP_LOG_FORMAT", default_value = "text", value_parser = ["text", "json"])]
    pub log_format: String,
    /// A TOML file of settings, keys named as the flags (`max_request_bytes = 1048576`,
    /// `allow_insecure_network = true`). Precedence: flags, then JETLOOP_* environment
    /// variables, then this file, then the defaults.
    #[arg(long, env = "JETLOOP_CONFIG")]
    pub config: Option<std::path::PathBuf>,
    /// Print the effective settings with where each came from (flag, environment, file,
    /// default), then exit.
    #[arg(long)]
    pub print_config: bool,
}

/// Where a setting's effective value came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Source {
    /// A command-line flag.
    Flag,
    /// A `JETLOOP_*` environment variable.
    Environment,
    /// The `--config` file.
    File,
    /// The built-in default.
    Default,
}

impl Source {
    /// Lower-case name.
    pub fn name(self) -> &'static str {
        match self {
            Source::Flag => "flag",
            Source::Environment => "environment",
            Source::File => "config file",
            Source::Default => "default",
        }
    }
}

/// Every setting's name, effective value and source, in flag order.
pub type Sources = Vec<(String, String, Source)>;

/// Settings that are actions, not settings (never taken from the file or printed).
const NOT_SETTINGS: [&str; 2] = ["config", "print_config"];

/// The configuration from `args` (program name first): flags, then environment, then the TOML
/// file of `--config` / `JETLOOP_CONFIG`, then defaults; with the source of every setting.
///
/// # Errors
/// The usage error to print (unknown flags, a value out of range, an unreadable or unknown
/// key in the file).
pub fn load(args: Vec<std::ffi::OsString>) -> Result<(Config, Sources), clap::Error> {
    use clap::{parser::ValueSource, CommandFactory, FromArgMatches};
    let cmd = Config::command();
    let first = cmd.clone().try_get_matches_from(&args)?;
    let mut args = args;
    let mut from_file = Vec::new();
    if let Some(path) = first.get_one::<std::path::PathBuf>("config") {
        let text = std::fs::read_to_string(path).map_err(|e| {
            cmd.clone().error(
                clap::error::ErrorKind::Io,
                format!("cannot read the config file {}: {e}", path.display()),
            )
        })?;
        let table: toml::Table = text.parse().map_err(|e: toml::de::Error| {
            cmd.clone()
                .error(clap::error::ErrorKind::InvalidValue, format!("config file {}: {e}", path.display()))
        })?;
        for (key, value) in table {
            let id = key.replace('-', "_");
            let Some(arg) = cmd
                .get_arguments()
                .find(|a| a.get_id() == id.as_str() && !NOT_SETTINGS.contains(&id.as_str()))
            else {
                return Err(cmd.clone().error(
                    clap::error::ErrorKind::UnknownArgument,
                    format!(
                        "config file {}: unknown setting '{key}' (keys are the flag names)",
                        path.display()
                    ),
                ));
            };
            if first.value_source(&id) != Some(ValueSource::DefaultValue) && first.value_source(&id).is_some()
            {
                continue; // a flag or the environment wins
            }
            let flag = format!("--{}", arg.get_long().unwrap_or(&id));
            let text = match &value {
                toml::Value::String(s) => s.clone(),
                toml::Value::Integer(i) => i.to_string(),
                toml::Value::Float(f) => f.to_string(),
                toml::Value::Boolean(b) => b.to_string(),
                _ => {
                    return Err(cmd.clone().error(
                        clap::error::ErrorKind::InvalidValue,
                        format!(
                            "config file {}: '{key}' must be a string, number or true/false",
                            path.display()
                        ),
                    ))
                }
            };
            if arg.get_action().takes_values() {
                args.push(flag.into());
                args.push(text.into());
            } else if value.as_bool() == Some(true) {
                args.push(flag.into());
            }
            from_file.push(id);
        }
    }
    let matches = cmd.clone().try_get_matches_from(&args)?;
    let config = Config::from_arg_matches(&matches)?;
    let mut sources = Vec::new();
    for arg in cmd.get_arguments() {
        let id = arg.get_id().as_str().to_string();
        if NOT_SETTINGS.contains(&id.as_str()) || ["help", "version"].contains(&id.as_str()) {
            continue;
        }
        let source = if from_file.contains(&id) {
            Source::File
        } else {
            match first.value_source(&id) {
                Some(ValueSource::CommandLine) => Source::Flag,
                Some(ValueSource::EnvVariable) => Source::Environment,
                _ => Source::Default,
            }
        };
        let value = matches
            .get_raw(&id)
            .map(|v| v.map(|x| x.to_string_lossy().into_owned()).collect::<Vec<_>>().join(","))
            .unwrap_or_else(|| "(unset)".into());
        sources.push((id, value, source));
    }
    Ok((config, sources))
}

/// PEM files of the server's TLS identity and, for mutual TLS, the CA of client certificates.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TlsFiles {
    /// Certificate chain, PEM.
    pub cert_pem: Vec<u8>,
    /// Private key, PEM.
    pub key_pem: Vec<u8>,
    /// CA certificates client certificates must chain to, PEM; `None`: no client certificates.
    pub client_ca_pem: Option<Vec<u8>>,
}

impl Config {
    /// The TLS files named by `--tls-cert`, `--tls-key` and `--tls-client-ca`, read; `None`
    /// without `--tls-cert`.
    ///
    /// # Errors
    /// A sentence naming the file that cannot be read or holds no PEM block.
    pub fn read_tls(&self) -> Result<Option<TlsFiles>, String> {
        let (Some(cert), Some(key)) = (&self.tls_cert, &self.tls_key) else {
            return Ok(None);
        };
        let read = |flag: &str, path: &std::path::Path| -> Result<Vec<u8>, String> {
            let bytes =
                std::fs::read(path).map_err(|e| format!("cannot read {flag} {}: {e}", path.display()))?;
            if !bytes.windows(11).any(|w| w == b"-----BEGIN ") {
                return Err(format!("{flag} {}: no PEM block (-----BEGIN ...) in the file", path.display()));
            }
            Ok(bytes)
        };
        Ok(Some(TlsFiles {
            cert_pem: read("--tls-cert", cert)?,
            key_pem: read("--tls-key", key)?,
            client_ca_pem: self.tls_client_ca.as_deref().map(|p| read("--tls-client-ca", p)).transpose()?,
        }))
    }

    /// Whether the listen address may be used with the protection configured: a loopback
    /// address always; any other only with TLS or tokens, or `--allow-insecure-network`.
    ///
    /// # Errors
    /// The message to log when the address is refused.
    pub fn check_exposure(&self, have_tokens: bool) -> Result<(), String> {
        if self.listen.ip().is_loopback()
            || have_tokens
            || self.tls_cert.is_some()
            || self.allow_insecure_network
        {
            return Ok(());
        }
        Err(format!(
            "refusing to listen on {} (not a loopback address) with neither TLS nor tokens: anyone who reaches \
             the port could call every RPC. Give --tls-cert/--tls-key (and --tls-client-ca for client \
             certificates) or --token-file, or --allow-insecure-network on a network only your lab reaches",
            self.listen
        ))
    }
}

impl Config {
    /// The warning for a server that will listen beyond loopback unprotected: neither TLS nor
    /// tokens (allowed by `--allow-insecure-network`), or TLS without client certificates or
    /// tokens. `None` on loopback or with tokens.
    pub fn exposure_warning(&self, have_tokens: bool, client_certificates: bool) -> Option<String> {
        if self.listen.ip().is_loopback() || have_tokens {
            return None;
        }
        match (self.tls_cert.is_some(), client_certificates) {
            (false, _) => Some(format!(
                "listening on {} with neither TLS nor tokens (--allow-insecure-network): anyone who reaches the \
                 port can call every RPC and read every answer; keep it on a network only your lab reaches",
                self.listen
            )),
            (true, false) => Some(
                "TLS without client certificates or tokens: answers are encrypted, but anyone who reaches the port \
                 can call every RPC"
                    .to_string(),
            ),
            (true, true) => None,
        }
    }
}

#[cfg(test)]
mod exposure_tests {
    use super::*;

    fn config(args: &[&str]) -> Config {
        Config::try_parse_from(std::iter::once("jetloop-server").chain(args.iter().copied())).expect("flags")
    }

    #[test]
    fn an_unprotected_listener_beyond_loopback_is_warned_about() {
        let open = config(&["--listen", "0.0.0.0:50051", "--allow-insecure-network"]);
        let w = open.exposure_warning(false, false).expect("a warning");
        assert!(w.contains("0.0.0.0:50051") && w.contains("neither TLS nor tokens"), "{w}");
        assert_eq!(open.exposure_warning(true, false), None, "tokens protect it");
        assert_eq!(config(&[]).exposure_warning(false, false), None, "loopback by default");
    }
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
    /// TLS identity (and client CA for mutual TLS); `None`: plaintext HTTP/2.
    pub tls: Option<TlsFiles>,
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
            tls: None,
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
            tls: None,
        }
    }

    /// Limits from the flags.
    pub fn limits(&self) -> Limits {
        self.limits_for(sizing::memory_limit())
    }

    /// Limits from the flags, those left at 0 sized for `memory` ([`sizing::size`]).
    pub fn limits_for(&self, memory: sizing::MemoryLimit) -> Limits {
        let given = |v: u64, scale: u64| {
            (v > 0).then(|| usize::try_from(v.saturating_mul(scale)).unwrap_or(usize::MAX))
        };
        let (budget, request, concurrency) = (
            given(self.sample_budget_mib, 1 << 20),
            given(self.max_request_bytes, 1),
            given(self.max_concurrent_requests, 1),
        );
        let s = sizing::size(memory, budget, request, concurrency);
        Limits {
            max_request_bytes: s.max_request_bytes,
            request_timeout: Duration::from_secs(self.request_timeout_s),
            stream_timeout: Duration::from_secs(self.stream_timeout_s),
            max_concurrent_requests: s.max_concurrent_requests,
            sample_budget_bytes: s.sample_budget_bytes,
            sized_from: Some(SizedFrom {
                memory,
                given: [budget.is_some(), request.is_some(), concurrency.is_some()],
            }),
        }
    }
}
