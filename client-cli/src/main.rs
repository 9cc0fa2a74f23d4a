//! `jetloop`: command-line client for a jetloop server.
//!
//! Every subcommand calls the server (never the physics directly) and prints an aligned table
//! with units, or JSON with `--json`. Exit codes: 0 success, 2 usage error, 3 server not
//! reachable, 4 request rejected by the server (bad input or impossible physics), 5 other
//! server error, 6 a regression check (`jetloop check`) failed.
#![forbid(unsafe_code)]

mod check;
mod demo;
mod gas;
mod modes;
mod output;
mod plot;
mod ramp;
mod readers;
mod spectrum;
mod staging;
mod synth;
mod tones;
mod track;

use clap::{Parser, Subcommand};
use std::process::ExitCode;
use tonic::Code;
use tonic_types::StatusExt;

/// Command-line client for the jetloop supersonic-jet aeroacoustics server.
#[derive(Debug, Parser)]
#[command(name = "jetloop", version, about)]
struct Cli {
    /// Server address.
    #[arg(long, global = true, env = "JETLOOP_SERVER", default_value = "http://127.0.0.1:50051")]
    server: String,
    /// Print JSON instead of a table.
    #[arg(long, global = true)]
    json: bool,
    /// Give up on a call after this many seconds (the server is told the deadline too;
    /// connecting may take at least a second). Default: no client-side limit (the server's own
    /// limits apply).
    #[arg(long, global = true, env = "JETLOOP_TIMEOUT_S")]
    timeout: Option<f64>,
    /// File holding the bearer token for a server that requires one (its first non-comment
    /// line); JETLOOP_TOKEN gives the token itself instead.
    #[arg(long, global = true, env = "JETLOOP_TOKEN_FILE")]
    token_file: Option<std::path::PathBuf>,
    /// CA certificate (PEM) the server's TLS certificate must chain to; connects with TLS
    /// (the --server address may then be written https://...).
    #[arg(long, global = true, env = "JETLOOP_CA_FILE")]
    ca_file: Option<std::path::PathBuf>,
    /// Client certificate (PEM) for a server that requires one (mutual TLS); needs --ca-file
    /// and --client-key.
    #[arg(long, global = true, env = "JETLOOP_CLIENT_CERT", requires_all = ["ca_file", "client_key"])]
    client_cert: Option<std::path::PathBuf>,
    /// Private key (PEM) of --client-cert.
    #[arg(long, global = true, env = "JETLOOP_CLIENT_KEY", requires = "client_cert")]
    client_key: Option<std::path::PathBuf>,
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Isentropic ratios from a Mach number, or the Mach number from one ratio.
    #[command(after_help = "Example: jetloop isentropic --mach 2")]
    Isentropic(gas::IsentropicArgs),
    /// Normal-shock jump conditions.
    #[command(after_help = "Example: jetloop shock --mach 2.5")]
    Shock(gas::ShockArgs),
    /// Fully expanded jet state of a nozzle at an operating point.
    #[command(after_help = "Example: jetloop jet --diameter-m 0.0254 --npr 4")]
    Jet(gas::JetArgs),
    /// Shock-cell spacing (vortex-sheet model) and shock positions.
    #[command(after_help = "Example: jetloop cells --diameter-m 0.0254 --npr 3.5 --plot cells.png")]
    Cells(tones::CellsCmd),
    /// Screech frequency by several models, harmonics and the feedback loop.
    #[command(after_help = "Example: jetloop screech --diameter-m 0.0254 --npr 3.5 --source-cells 4")]
    Screech(tones::ScreechCmd),
    /// Peak frequency of shock-associated noise against observer angle.
    #[command(after_help = "Example: jetloop shock-noise --diameter-m 0.0254 --npr 4 --angles-deg 30,60,90")]
    ShockNoise(tones::ShockNoiseCmd),
    /// Screech predictions over NPR, Mj or reflector distance (table, JSON or CSV).
    #[command(
        after_help = "Example: jetloop sweep --diameter-m 0.0254 --npr 3 --vary npr --from 1.5 --to 6 --count 200 --csv map.csv"
    )]
    Sweep(tones::SweepCmd),
    /// Guided jet modes: which screech stages are possible (bands), where the loop closes
    /// through each, and the dispersion curves.
    #[command(after_help = "Example: jetloop modes --mj 1.3 --t0-over-ta 1 --plot modes.svg")]
    Modes(modes::ModesCmd),
    /// Tones, levels, harmonics (and bands) of a recording: WAV, CSV or raw.
    #[command(after_help = "Example: jetloop tones demo.wav --pa-per-unit 2000 --bands --plot psd.png")]
    Tones(spectrum::TonesCmd),
    /// Live tone tracking: stream a recording (at its pace with --realtime) and see tones keep
    /// their track ids and stage jumps reported as they happen.
    #[command(after_help = "Example: jetloop track jump.wav --pa-per-unit 2000 --realtime")]
    Track(track::TrackCmd),
    /// One-third-octave band levels, overall and A-weighted levels of a recording.
    #[command(after_help = "Example: jetloop bands mics.csv --sample-rate-hz 51200 --in-pascals")]
    Bands(spectrum::BandsCmd),
    /// Tones against NPR from a continuous ramp: a recording with an NPR or reservoir-pressure
    /// channel beside the microphones, in short-time frames; points written for `fit`.
    #[command(
        after_help = "Example: jetloop ramp ramp.wav --pa-per-unit 2000 --control-channel 1 --control gauge-pa --control-per-unit 1000000"
    )]
    Ramp(ramp::RampCmd),
    /// Write a demo recording of an imagined jet rig (WAV, CSV or raw int16; ring of
    /// microphones, stage jump, NPR ramp with its pressure channel).
    #[command(after_help = "Example: jetloop synth ring.wav --ring 8 --pattern spinning --order 1")]
    Synth(synth::SynthCmd),
    /// Stages, jumps, hysteresis and loop-model fits of a measured sweep (CSV).
    #[command(
        after_help = "Example: jetloop fit sweep.csv --control npr --diameter-m 0.0254 --plot stages.png"
    )]
    Fit(staging::FitCmd),
    /// Server version, models with references, and limits.
    #[command(after_help = "Example: jetloop info")]
    Info(gas::InfoCmd),
    /// Regression suite: run the cases of TOML files (a jetloop command line, expected values
    /// with tolerances and their published sources) and print pass/fail with the deviations;
    /// exit code 6 when any fails. Example: jetloop check tests/data/*.toml
    Check(check::CheckCmd),
    /// The whole job on an invented scenario against a running server: a pressure sweep with
    /// stage jumps and hysteresis, a microphone synthesized at each point, tones extracted, a
    /// stage fit, plots and a summary written to a folder. Example: jetloop demo demo-out
    Demo(demo::DemoCmd),
    /// Ask the server's gRPC health service: exit code 0 when it answers SERVING, 5 otherwise
    /// (for container and service-manager health checks).
    #[command(after_help = "Example: jetloop --timeout 2 health")]
    Health,
    /// Shell completions for bash, zsh, fish, elvish or PowerShell on standard output.
    /// Example: jetloop completions bash > ~/.local/share/bash-completion/completions/jetloop
    Completions {
        /// The shell.
        shell: clap_complete::Shell,
    },
    /// Every command's --help as one Markdown document on standard output (the source of
    /// docs/cli.md).
    HelpMarkdown,
}

/// Why the CLI failed, mapped to an exit code.
#[derive(Debug)]
pub enum Failure {
    /// Could not reach the server.
    Connect(String),
    /// The server answered with an error status.
    Server(tonic::Status),
    /// Arguments that parse but do not make a request.
    Usage(String),
    /// Regression checks ran and some failed: the report says which.
    Checks(Box<output::Report>),
}

/// One line saying what went wrong (for a regression case that could not run).
pub(crate) fn failure_text(f: &Failure) -> String {
    match f {
        Failure::Connect(m) | Failure::Usage(m) => m.clone(),
        Failure::Server(s) => format!("the server answered {:?}: {}", s.code(), s.message()),
        Failure::Checks(_) => "nested checks".into(),
    }
}

/// Runs a jetloop command line (without the program name) against `ctx`'s server.
pub(crate) async fn run_args(ctx: &Ctx, args: &[String]) -> Result<output::Report, Failure> {
    let cli = Cli::try_parse_from(std::iter::once("jetloop".to_string()).chain(args.iter().cloned()))
        .map_err(|e| Failure::Usage(e.to_string().trim().to_string()))?;
    if matches!(cli.command, Command::Check(_)) {
        return Err(Failure::Usage("a check case cannot run `check`".into()));
    }
    let f: std::pin::Pin<Box<dyn std::future::Future<Output = Result<output::Report, Failure>> + '_>> =
        Box::pin(run_command(cli.command, ctx));
    f.await
}

impl From<tonic::Status> for Failure {
    fn from(s: tonic::Status) -> Self {
        Failure::Server(s)
    }
}

/// Where the server is; commands connect when they need it (`synth` never does).
#[derive(Debug)]
pub(crate) struct Ctx {
    server: String,
    timeout: Option<std::time::Duration>,
    bearer: Bearer,
    tls: Option<tonic::transport::ClientTlsConfig>,
}

/// Adds `authorization: Bearer <token>` to every call when a token was given.
#[derive(Debug, Clone, Default)]
pub(crate) struct Bearer(Option<tonic::metadata::MetadataValue<tonic::metadata::Ascii>>);

impl tonic::service::Interceptor for Bearer {
    fn call(&mut self, mut req: tonic::Request<()>) -> Result<tonic::Request<()>, tonic::Status> {
        if let Some(v) = &self.0 {
            req.metadata_mut().insert("authorization", v.clone());
        }
        Ok(req)
    }
}

/// A connection to the server with the token (if any) on every call.
pub(crate) type Conn = tonic::service::interceptor::InterceptedService<tonic::transport::Channel, Bearer>;

/// The bearer token from `--token-file` or `JETLOOP_TOKEN`.
fn bearer(token_file: Option<&std::path::Path>) -> Result<Bearer, Failure> {
    let token = match token_file {
        Some(p) => {
            let text = std::fs::read_to_string(p)
                .map_err(|e| Failure::Usage(format!("cannot read the token file {}: {e}", p.display())))?;
            text.lines().map(str::trim).find(|l| !l.is_empty() && !l.starts_with('#')).map(str::to_string)
        }
        None => std::env::var("JETLOOP_TOKEN").ok().filter(|t| !t.is_empty()),
    };
    match token {
        None => Ok(Bearer(None)),
        Some(t) => format!("Bearer {t}")
            .parse()
            .map(|v| Bearer(Some(v)))
            .map_err(|_| Failure::Usage("the token must be printable ASCII".into())),
    }
}

/// The TLS settings of `--ca-file` and, for mutual TLS, `--client-cert` / `--client-key`.
fn client_tls(
    ca: Option<&std::path::Path>,
    cert: Option<&std::path::Path>,
    key: Option<&std::path::Path>,
) -> Result<Option<tonic::transport::ClientTlsConfig>, Failure> {
    let Some(ca) = ca else { return Ok(None) };
    let read = |flag: &str, p: &std::path::Path| {
        std::fs::read(p).map_err(|e| Failure::Usage(format!("cannot read {flag} {}: {e}", p.display())))
    };
    let mut tls = tonic::transport::ClientTlsConfig::new()
        .ca_certificate(tonic::transport::Certificate::from_pem(read("--ca-file", ca)?));
    if let (Some(cert), Some(key)) = (cert, key) {
        tls = tls.identity(tonic::transport::Identity::from_pem(
            read("--client-cert", cert)?,
            read("--client-key", key)?,
        ));
    }
    Ok(Some(tls))
}

impl Ctx {
    /// A connection to the server.
    ///
    /// # Errors
    /// [`Failure::Usage`] for a malformed address, [`Failure::Connect`] when it cannot be
    /// reached.
    pub async fn channel(&self) -> Result<Conn, Failure> {
        let url = &self.server;
        let tls_url;
        let url = match (&self.tls, url.strip_prefix("http://")) {
            (Some(_), Some(rest)) => {
                tls_url = format!("https://{rest}");
                &tls_url
            }
            (None, _) if url.starts_with("https://") => {
                return Err(Failure::Usage(format!(
                    "--server {url}: give --ca-file (the CA the server's certificate chains to) for TLS"
                )))
            }
            _ => url,
        };
        let mut ep = tonic::transport::Endpoint::from_shared(url.clone())
            .map_err(|e| Failure::Usage(format!("--server {url}: {e}")))?;
        if let Some(tls) = &self.tls {
            ep = ep.tls_config(tls.clone()).map_err(|e| Failure::Usage(format!("TLS settings: {e}")))?;
        }
        if let Some(t) = self.timeout {
            // Connecting gets at least a second whatever the call's limit (a loopback connect
            // takes far less, a remote one may take more).
            ep = ep.timeout(t).connect_timeout(t.max(std::time::Duration::from_secs(1)));
        }
        let channel = ep
            .connect()
            .await
            .map_err(|e| Failure::Connect(format!("cannot reach the jetloop server at {url}: {e}")))?;
        Ok(tonic::service::interceptor::InterceptedService::new(channel, self.bearer.clone()))
    }
}

/// One `jetloop` subcommand: its arguments (parsed by clap) run into a report.
pub(crate) trait Run {
    /// Runs the command, connecting to the server through `ctx` when it needs one.
    ///
    /// # Errors
    /// [`Failure`] as the exit code needs it.
    async fn run(self, ctx: &Ctx) -> Result<output::Report, Failure>;
}

async fn run(cli: Cli) -> Result<output::Report, Failure> {
    let timeout = match cli.timeout {
        None => None,
        Some(t) if t > 0.0 && t <= 1e6 => Some(std::time::Duration::from_secs_f64(t)),
        Some(t) => return Err(Failure::Usage(format!("--timeout {t}: give seconds in (0, 1e6]"))),
    };
    let tls = client_tls(cli.ca_file.as_deref(), cli.client_cert.as_deref(), cli.client_key.as_deref())?;
    let ctx = Ctx { server: cli.server, timeout, bearer: bearer(cli.token_file.as_deref())?, tls };
    run_command(cli.command, &ctx).await
}

async fn run_command(command: Command, ctx: &Ctx) -> Result<output::Report, Failure> {
    match command {
        Command::Isentropic(a) => a.run(ctx).await,
        Command::Shock(a) => a.run(ctx).await,
        Command::Jet(a) => a.run(ctx).await,
        Command::Cells(a) => a.run(ctx).await,
        Command::Screech(a) => a.run(ctx).await,
        Command::ShockNoise(a) => a.run(ctx).await,
        Command::Sweep(a) => a.run(ctx).await,
        Command::Modes(a) => a.run(ctx).await,
        Command::Tones(a) => a.run(ctx).await,
        Command::Track(a) => a.run(ctx).await,
        Command::Bands(a) => a.run(ctx).await,
        Command::Synth(a) => a.run(ctx).await,
        Command::Ramp(a) => a.run(ctx).await,
        Command::Fit(a) => a.run(ctx).await,
        Command::Info(a) => a.run(ctx).await,
        Command::Check(a) => a.run(ctx).await,
        Command::Demo(a) => a.run(ctx).await,
        Command::Health => {
            use tonic_health::pb::{health_check_response::ServingStatus, health_client::HealthClient};
            let r = HealthClient::new(ctx.channel().await?)
                .check(tonic_health::pb::HealthCheckRequest { service: String::new() })
                .await?
                .into_inner();
            match ServingStatus::try_from(r.status) {
                Ok(ServingStatus::Serving) => Ok(output::Report::new("SERVING")),
                other => Err(Failure::Server(tonic::Status::unavailable(format!(
                    "health: {}",
                    other.map_or("unknown status", |s| s.as_str_name())
                )))),
            }
        }
        Command::Completions { shell } => {
            use clap::CommandFactory;
            use std::io::Write;
            let mut cmd = Cli::command();
            let mut buf = Vec::new();
            clap_complete::generate(shell, &mut cmd, "jetloop", &mut buf);
            // A closed pipe (`| head`) is not an error worth a panic.
            let _ = std::io::stdout().write_all(&buf);
            Ok(output::Report::new("").quiet())
        }
        Command::HelpMarkdown => {
            use std::io::Write;
            let _ = std::io::stdout().write_all(clap_markdown::help_markdown::<Cli>().as_bytes());
            Ok(output::Report::new("").quiet())
        }
    }
}

#[tokio::main(flavor = "current_thread")]
async fn main() -> ExitCode {
    let cli = Cli::parse();
    let json = cli.json;
    match run(cli).await {
        Ok(report) => {
            if report.is_quiet() {
            } else if json {
                println!("{}", serde_json::to_string_pretty(&report.to_json()).unwrap_or_default());
            } else {
                print!("{}", report.to_table());
            }
            ExitCode::SUCCESS
        }
        Err(Failure::Usage(m)) => {
            eprintln!("error: {m}");
            ExitCode::from(2)
        }
        Err(Failure::Checks(report)) => {
            if json {
                println!("{}", serde_json::to_string_pretty(&report.to_json()).unwrap_or_default());
            } else {
                print!("{}", report.to_table());
            }
            ExitCode::from(6)
        }
        Err(Failure::Connect(m)) => {
            eprintln!(
                "error: {m}\nhint: start it with `cargo run --release -p jetloop-server` or pass --server"
            );
            ExitCode::from(3)
        }
        Err(Failure::Server(s)) if s.code() == Code::Cancelled && s.message().contains("Timeout expired") => {
            eprintln!("error: no answer within the --timeout given");
            ExitCode::from(5)
        }
        Err(Failure::Server(s)) => {
            let details = s.get_error_details();
            match details.bad_request() {
                Some(bad) if !bad.field_violations.is_empty() => {
                    eprintln!("error: the server rejected the request ({:?}):", s.code());
                    for v in &bad.field_violations {
                        eprintln!("  - {}", v.description);
                    }
                }
                _ => eprintln!("error: the server answered {:?}: {}", s.code(), s.message()),
            }
            match s.code() {
                Code::InvalidArgument
                | Code::FailedPrecondition
                | Code::ResourceExhausted
                | Code::OutOfRange => ExitCode::from(4),
                _ => ExitCode::from(5),
            }
        }
    }
}
