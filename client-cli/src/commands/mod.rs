//! One file per `jetloop` subcommand: its arguments (a clap `Args` struct, with the shared
//! groups of [`crate::args`] flattened in), the request it builds, and the report it renders
//! with [`crate::render`].

pub mod bands;
pub mod calibrate;
pub mod cells;
pub mod check;
pub mod completions;
pub mod demo;
pub mod fit;
pub mod health;
pub mod help_markdown;
pub mod info;
pub mod inspect;
pub mod isentropic;
pub mod jet;
pub mod modes;
pub mod ramp;
pub mod screech;
pub mod shock;
pub mod shock_noise;
pub mod sweep;
pub mod synth;
pub mod tdms_info;
pub mod tones;
pub mod track;

use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;

/// One `jetloop` subcommand: its arguments (parsed by clap) run into a report.
pub(crate) trait Run {
    /// Runs the command, connecting to the server through `ctx` when it needs one.
    ///
    /// # Errors
    /// [`Failure`] as the exit code needs it.
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure>;
}
