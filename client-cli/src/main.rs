//! `jetloop`: command-line client for a jetloop server.
//!
//! Every subcommand calls the server (never the physics directly) and prints an aligned table
//! with units, or JSON with `--json`. Exit codes: 0 success, 2 usage error, 3 server not
//! reachable, 4 request rejected by the server (bad input or impossible physics), 5 other
//! server error.
#![forbid(unsafe_code)]

mod gas;
mod output;
mod readers;
mod spectrum;
mod staging;
mod tones;

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
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Isentropic ratios from a Mach number, or the Mach number from one ratio.
    Isentropic(gas::IsentropicArgs),
    /// Normal-shock jump conditions.
    Shock(gas::ShockArgs),
    /// Fully expanded jet state of a nozzle at an operating point.
    Jet(gas::JetArgs),
    /// Shock-cell spacing (vortex-sheet model) and shock positions.
    Cells(tones::CellsCmd),
    /// Screech frequency by several models, harmonics and the feedback loop.
    Screech(tones::ScreechCmd),
    /// Peak frequency of shock-associated noise against observer angle.
    ShockNoise(tones::ShockNoiseCmd),
    /// Screech predictions over NPR, Mj or reflector distance (table, JSON or CSV).
    Sweep(tones::SweepCmd),
    /// Tones, levels, harmonics (and bands) of a recording: WAV, CSV or raw.
    Tones(spectrum::TonesCmd),
    /// One-third-octave band levels, overall and A-weighted levels of a recording.
    Bands(spectrum::BandsCmd),
    /// Write a demo WAV of an imagined jet rig (screech, harmonics, shock-noise hump, noise).
    Synth(spectrum::SynthCmd),
    /// Stages, jumps, hysteresis and loop-model fits of a measured sweep (CSV).
    Fit(staging::FitCmd),
    /// Server version, models with references, and limits.
    Info,
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
}

impl From<tonic::Status> for Failure {
    fn from(s: tonic::Status) -> Self {
        Failure::Server(s)
    }
}

async fn channel(url: &str) -> Result<tonic::transport::Channel, Failure> {
    let ep = tonic::transport::Endpoint::from_shared(url.to_string())
        .map_err(|e| Failure::Usage(format!("--server {url}: {e}")))?;
    ep.connect().await.map_err(|e| Failure::Connect(format!("cannot reach the jetloop server at {url}: {e}")))
}

async fn run(cli: Cli) -> Result<output::Report, Failure> {
    if let Command::Synth(a) = cli.command {
        return spectrum::synth(a);
    }
    let ch = channel(&cli.server).await?;
    match cli.command {
        Command::Isentropic(a) => gas::isentropic(ch, a).await,
        Command::Shock(a) => gas::shock(ch, a).await,
        Command::Jet(a) => gas::jet(ch, a).await,
        Command::Cells(a) => tones::cells(ch, a).await,
        Command::Screech(a) => tones::screech(ch, a).await,
        Command::ShockNoise(a) => tones::shock_noise(ch, a).await,
        Command::Sweep(a) => tones::sweep(ch, a).await,
        Command::Tones(a) => spectrum::tones(ch, a).await,
        Command::Bands(a) => spectrum::bands(ch, a).await,
        Command::Synth(_) => Err(Failure::Usage("synth runs without a server".into())),
        Command::Fit(a) => staging::fit(ch, a).await,
        Command::Info => gas::info(ch).await,
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
        Err(Failure::Connect(m)) => {
            eprintln!(
                "error: {m}\nhint: start it with `cargo run --release -p jetloop-server` or pass --server"
            );
            ExitCode::from(3)
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
