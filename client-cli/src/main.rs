//! `jetloop`: command-line client for a jetloop server. This file holds the argument tree and
//! the dispatch only: connection set-up is in `connect`, shared argument groups in `args`, one
//! file per subcommand in `commands`, tables, JSON, CSV and plots in `render`.
//!
//! Every subcommand calls the server (never the physics directly) and prints an aligned table
//! with units, or JSON with `--json`. Exit codes: 0 success, 2 usage error, 3 server not
//! reachable, 4 request rejected by the server (bad input or impossible physics), 5 other
//! server error, 6 a regression check (`jetloop check`) failed.
#![forbid(unsafe_code)]

mod args;
mod commands;
mod connect;
mod csv_input;
mod failure;
mod readers;
mod render;
mod tdms;
mod upload;

use clap::{Parser, Subcommand};
use commands::Run;
use connect::Ctx;
use failure::Failure;
use render::report::Report;
use std::process::ExitCode;

/// Command-line client for the jetloop supersonic-jet aeroacoustics server.
#[derive(Debug, Parser)]
#[command(name = "jetloop", version, about)]
struct Cli {
    /// Server address: host:port, http://host:port, or https://host:port (TLS, with --ca-file).
    #[arg(long, global = true, env = "JETLOOP_SERVER", default_value = "http://127.0.0.1:50051")]
    server: String,
    /// Print JSON instead of a table.
    #[arg(long, global = true)]
    json: bool,
    /// Give up on a call after this many seconds (the server is told the deadline too;
    /// connecting may take at least a second). Default: connecting gives up after 5 s, a call
    /// after 600 s; streams (track, recordings sent in blocks) have no client-side limit.
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
    /// The subcommand.
    #[command(subcommand)]
    command: Command,
}

/// The subcommands, each with its arguments.
// Parsed once per process: the size of its largest variant costs nothing worth boxing for.
#[allow(clippy::large_enum_variant)]
#[derive(Debug, Subcommand)]
enum Command {
    /// Isentropic ratios from a Mach number, or the Mach number from one ratio.
    #[command(after_help = "Example: jetloop isentropic --mach 2")]
    Isentropic(commands::isentropic::IsentropicArgs),
    /// Normal-shock jump conditions.
    #[command(after_help = "Example: jetloop shock --mach 2.5")]
    Shock(commands::shock::ShockArgs),
    /// Fully expanded jet state of a nozzle at an operating point.
    #[command(after_help = "Example: jetloop jet --diameter-m 0.0254 --npr 4")]
    Jet(args::jet::JetArgs),
    /// Shock-cell spacing (vortex-sheet model) and shock positions.
    #[command(after_help = "Example: jetloop cells --diameter-m 0.0254 --npr 3.5 --plot cells.png")]
    Cells(commands::cells::CellsCmd),
    /// Screech frequency by several models, harmonics and the feedback loop.
    #[command(after_help = "Example: jetloop screech --diameter-m 0.0254 --npr 3.5 --source-cells 4")]
    Screech(commands::screech::ScreechCmd),
    /// Peak frequency of shock-associated noise against observer angle.
    #[command(after_help = "Example: jetloop shock-noise --diameter-m 0.0254 --npr 4 --angles-deg 30,60,90")]
    ShockNoise(commands::shock_noise::ShockNoiseCmd),
    /// Screech predictions over NPR, Mj or reflector distance (table, JSON or CSV).
    #[command(
        after_help = "Example: jetloop sweep --diameter-m 0.0254 --npr 3 --vary npr --from 1.5 --to 6 --count 200 --csv map.csv"
    )]
    Sweep(commands::sweep::SweepCmd),
    /// Guided jet modes: which screech stages are possible (bands), where the loop closes
    /// through each, and the dispersion curves.
    #[command(after_help = "Example: jetloop modes --mj 1.3 --t0-over-ta 1 --plot modes.svg")]
    Modes(commands::modes::ModesCmd),
    /// Tones, levels, harmonics (and bands) of a recording: WAV, CSV, TDMS or raw.
    #[command(after_help = "Example: jetloop tones demo.wav --pa-per-unit 2000 --bands --plot psd.png")]
    Tones(commands::tones::TonesCmd),
    /// Live tone tracking: stream a recording (at its pace with --realtime) and see tones keep
    /// their track ids and stage jumps reported as they happen.
    #[command(after_help = "Example: jetloop track jump.wav --pa-per-unit 2000 --realtime")]
    Track(commands::track::TrackCmd),
    /// What jetloop reads from a recording, without a server: container, sample encoding,
    /// rate, channels, frames, warnings, and each channel's range, mean, RMS and first samples.
    #[command(after_help = "Example: jetloop inspect demo.wav --first 4")]
    Inspect(commands::inspect::InspectCmd),
    /// One-third-octave band levels, overall and A-weighted levels of a recording.
    #[command(after_help = "Example: jetloop bands mics.csv --sample-rate-hz 51200 --in-pascals")]
    Bands(commands::bands::BandsCmd),
    /// Microphone sensitivities from a sound-calibrator recording (in volts or counts): tone
    /// frequency, stability, THD and clipping per channel, and the calibration file for
    /// --calibration-file (-o).
    #[command(
        after_help = "Example: jetloop calibrate cal.wav --level-db 94 --frequency-hz 1000 --volts-per-unit 0.000305176 -o mics.toml"
    )]
    Calibrate(commands::calibrate::CalibrateCmd),
    /// Tones against NPR from a continuous ramp: a recording with an NPR or reservoir-pressure
    /// channel beside the microphones, in short-time frames; points written for `fit`.
    #[command(
        after_help = "Example: jetloop ramp ramp.wav --pa-per-unit 2000 --control-channel 1 --control gauge-pa --control-per-unit 1000000"
    )]
    Ramp(commands::ramp::RampCmd),
    /// What a TDMS file holds: groups, channels, lengths, sample rates, units and scaling (no
    /// server needed); with --values N, the chosen channels' first samples and RMS as the
    /// analysis commands read them.
    #[command(after_help = "Example: jetloop tdms-info run42.tdms --tdms-group mics --values 5")]
    TdmsInfo(commands::tdms_info::TdmsInfoCmd),
    /// Write a demo recording of an imagined jet rig (WAV, CSV or raw int16; ring of
    /// microphones, stage jump, NPR ramp with its pressure channel).
    #[command(after_help = "Example: jetloop synth ring.wav --ring 8 --pattern spinning --order 1")]
    Synth(commands::synth::SynthCmd),
    /// Stages, jumps, hysteresis and loop-model fits of a measured sweep (CSV).
    #[command(
        after_help = "Example: jetloop fit sweep.csv --control npr --diameter-m 0.0254 --plot stages.png"
    )]
    Fit(commands::fit::FitCmd),
    /// Server version, models with references, and limits.
    #[command(after_help = "Example: jetloop info")]
    Info(commands::info::InfoCmd),
    /// Regression suite: run the cases of TOML files (a jetloop command line, expected values
    /// with tolerances and their published sources) and print pass/fail with the deviations;
    /// exit code 6 when any fails. Example: jetloop check tests/data/*.toml
    Check(commands::check::CheckCmd),
    /// The whole job on an invented scenario against a running server: a pressure sweep with
    /// stage jumps and hysteresis, a microphone synthesized at each point, tones extracted, a
    /// stage fit, plots and a summary written to a folder. Example: jetloop demo demo-out
    Demo(commands::demo::DemoCmd),
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

/// Runs a jetloop command line (without the program name) against `ctx`'s server.
pub(crate) async fn run_args(ctx: &Ctx, args: &[String]) -> Result<Report, Failure> {
    let cli = Cli::try_parse_from(std::iter::once("jetloop".to_string()).chain(args.iter().cloned()))
        .map_err(|e| Failure::Usage(e.to_string().trim().to_string()))?;
    if matches!(cli.command, Command::Check(_)) {
        return Err(Failure::Usage("a check case cannot run `check`".into()));
    }
    let f: std::pin::Pin<Box<dyn std::future::Future<Output = Result<Report, Failure>> + '_>> =
        Box::pin(run_command(cli.command, ctx));
    f.await
}

/// Sets up the connection from the global flags and runs the command.
async fn run(cli: Cli) -> Result<Report, Failure> {
    let ctx = Ctx::from_flags(connect::Flags {
        server: cli.server,
        timeout_s: cli.timeout,
        token_file: cli.token_file,
        ca_file: cli.ca_file,
        client_cert: cli.client_cert,
        client_key: cli.client_key,
    })?;
    run_command(cli.command, &ctx).await
}

/// Runs `command` against `ctx`'s server: the dispatch.
async fn run_command(command: Command, ctx: &Ctx) -> Result<Report, Failure> {
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
        Command::TdmsInfo(a) => a.run(ctx).await,
        Command::Inspect(a) => a.run(ctx).await,
        Command::Calibrate(a) => a.run(ctx).await,
        Command::Synth(a) => a.run(ctx).await,
        Command::Ramp(a) => a.run(ctx).await,
        Command::Fit(a) => a.run(ctx).await,
        Command::Info(a) => a.run(ctx).await,
        Command::Check(a) => a.run(ctx).await,
        Command::Demo(a) => a.run(ctx).await,
        Command::Health => commands::health::run(ctx).await,
        Command::Completions { shell } => {
            use clap::CommandFactory;
            commands::completions::run(shell, Cli::command())
        }
        Command::HelpMarkdown => commands::help_markdown::run(clap_markdown::help_markdown::<Cli>()),
    }
}

#[tokio::main(flavor = "current_thread")]
async fn main() -> ExitCode {
    let cli = Cli::parse();
    let json = cli.json;
    failure::finish(run(cli).await, json)
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::CommandFactory;

    /// The command a `jetloop` command line parses into (`line` without the program name,
    /// words split at blanks), for the request-builder tests of the command modules.
    pub(crate) fn command(line: &str) -> Command {
        Cli::try_parse_from(std::iter::once("jetloop").chain(line.split_whitespace()))
            .unwrap_or_else(|e| panic!("{line}: {e}"))
            .command
    }

    #[test]
    fn the_argument_tree_is_consistent() {
        Cli::command().debug_assert();
    }

    #[test]
    fn every_example_in_the_help_parses_into_its_command() {
        let mut seen = 0;
        for sub in Cli::command().get_subcommands() {
            let texts = [sub.get_after_help(), sub.get_long_about(), sub.get_about()];
            let Some(help) =
                texts.into_iter().flatten().map(|t| t.to_string()).find(|t| t.contains("Example: jetloop "))
            else {
                continue;
            };
            let Some(at) = help.find("Example: jetloop ") else { continue };
            let line: String = help[at + "Example: ".len()..].lines().next().unwrap_or_default().to_string();
            let words: Vec<&str> = line.split_whitespace().take_while(|w| *w != ">").collect();
            let cli = Cli::try_parse_from(&words).unwrap_or_else(|e| panic!("{line}: {e}"));
            // The parsed command is the one the example is documented under.
            let name = format!("{:?}", cli.command).to_lowercase().replace('_', "");
            assert!(name.starts_with(&sub.get_name().replace('-', "")), "{line} parsed as {name}");
            seen += 1;
        }
        assert!(seen >= 18, "only {seen} examples");
    }

    #[test]
    fn global_flags_reach_the_connection_settings() {
        let cli =
            Cli::try_parse_from(["jetloop", "--server", "http://rig:50051", "--timeout", "2.5", "info"])
                .expect("parses");
        assert_eq!(cli.server, "http://rig:50051");
        assert_eq!(cli.timeout, Some(2.5));
        assert!(
            Cli::try_parse_from(["jetloop", "--client-cert", "c.pem", "info"]).is_err(),
            "needs --ca-file and --client-key"
        );
    }
}
