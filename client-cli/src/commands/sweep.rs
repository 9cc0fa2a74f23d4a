//! `jetloop sweep`: screech predictions over NPR, Mj or reflector distance (table, JSON or CSV).

use crate::args::jet::JetSourceArgs;
use crate::args::jet::ScreechArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::sweep_plot;
use crate::render::progress::spinner;
use crate::render::report::Report;
use crate::render::screech::sweep_report;
use crate::render::screech::sweep_table;
use crate::render::screech::sweep_written_report;
use clap::Args;
use clap::ValueEnum;
use jetloop_proto::pb;
use jetloop_proto::pb::tone_service_client::ToneServiceClient;

/// Swept quantity.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum VaryArg {
    /// Nozzle pressure ratio.
    Npr,
    /// Fully expanded Mach number.
    Mj,
    /// Reflector distance upstream of the lip, m.
    Reflector,
}

/// `jetloop sweep`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct SweepCmd {
    /// The jet: nozzle and operating point, or the fully expanded state.
    #[command(flatten)]
    jet: JetSourceArgs,
    /// Screech-model options.
    #[command(flatten)]
    screech: ScreechArgs,
    /// What to vary.
    #[arg(long, value_enum)]
    vary: VaryArg,
    /// First value (with --to and --count).
    #[arg(long, requires_all = ["to", "count"], conflicts_with = "values")]
    from: Option<f64>,
    /// Last value.
    #[arg(long)]
    to: Option<f64>,
    /// Number of values (at most 10000).
    #[arg(long)]
    count: Option<u32>,
    /// Explicit values, comma separated.
    #[arg(long, value_delimiter = ',')]
    values: Vec<f64>,
    /// Write the points as CSV to this file and print a one-line summary instead of the table
    /// ("-": the CSV on standard output instead of the table).
    #[arg(long)]
    csv: Option<std::path::PathBuf>,
    /// Write the screech map as a plot (SVG, or PNG for a .png name): frequency against the
    /// swept value for Powell and
    /// Tam, and with --guided the stage bands shaded and the closure tones of each mode.
    #[arg(long)]
    plot: Option<std::path::PathBuf>,
}

impl SweepCmd {
    /// The SweepScreech request: the jet, the swept variable and its values (a range or a
    /// list), and the screech-model options.
    ///
    /// # Errors
    /// [`Failure::Usage`] without values to sweep, or when the jet is incompletely given.
    pub(crate) fn request(&self) -> Result<pb::SweepScreechRequest, Failure> {
        use pb::sweep_screech_request::Values;
        let values = match (self.from, self.to, self.count) {
            (Some(start), Some(stop), Some(count)) => Values::Range(pb::SweepRange { start, stop, count }),
            _ if !self.values.is_empty() => Values::List(pb::SweepValues { values: self.values.clone() }),
            _ => return Err(Failure::Usage("give --from, --to and --count, or --values".into())),
        };
        let variable = match self.vary {
            VaryArg::Npr => pb::SweepVariable::NozzlePressureRatio,
            VaryArg::Mj => pb::SweepVariable::FullyExpandedMachNumber,
            VaryArg::Reflector => pb::SweepVariable::ReflectorDistanceM,
        };
        Ok(pb::SweepScreechRequest {
            jet: Some(self.jet.input()?),
            variable: variable as i32,
            values: Some(values),
            options: Some(self.screech.options()),
        })
    }
}

/// Runs `sweep`; the CSV file, when asked for, is written here.
impl Run for SweepCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let request = a.request()?;
        let s = spinner("sweeping on the server");
        let r = ToneServiceClient::new(ch).sweep_screech(request).await;
        s.finish_and_clear();
        let r = r?.into_inner();
        // The swept NPR is the NPR column; any other swept value has its own column.
        let swept = match a.vary {
            VaryArg::Npr => None,
            VaryArg::Mj => Some(("fully_expanded_mach_number_swept", "Mj set")),
            VaryArg::Reflector => Some(("reflector_distance_m", "reflector [m]")),
        };
        let t = sweep_table(&r, swept);
        if let Some(path) = &a.plot {
            let x_label = match a.vary {
                VaryArg::Npr => "nozzle pressure ratio",
                VaryArg::Mj => "fully expanded Mach number Mj",
                VaryArg::Reflector => "reflector distance [m]",
            };
            crate::render::plot::write_plot(path, &sweep_plot(&r, x_label)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        if let Some(path) = &a.csv {
            let csv = t.to_csv();
            if path.as_os_str() == "-" {
                print!("{csv}");
                return Ok(Report::new("").quiet());
            }
            std::fs::write(path, csv)
                .map_err(|e| Failure::Usage(format!("cannot write {}: {e}", path.display())))?;
            // The points went to the file: one summary line, not the table again.
            return Ok(sweep_written_report(r, path));
        }
        Ok(sweep_report(r, t))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::Parser;

    #[derive(Debug, Parser)]
    struct T {
        #[command(flatten)]
        cmd: SweepCmd,
    }

    fn request(args: &str) -> Result<pb::SweepScreechRequest, Failure> {
        T::try_parse_from(std::iter::once("t").chain(args.split_whitespace())).expect("parses").cmd.request()
    }

    #[test]
    fn a_range_or_a_list_of_the_swept_variable() {
        use pb::sweep_screech_request::Values;
        let r =
            request("--diameter-m 0.0254 --npr 3 --vary npr --from 1.5 --to 6 --count 200").expect("request");
        assert_eq!(r.variable, pb::SweepVariable::NozzlePressureRatio as i32);
        assert_eq!(r.values, Some(Values::Range(pb::SweepRange { start: 1.5, stop: 6.0, count: 200 })));
        let r = request("--mj 1.4 --dj-m 0.02 --vary reflector --values 0,0.01,0.02 --max-loop-order 4")
            .expect("request");
        assert_eq!(r.variable, pb::SweepVariable::ReflectorDistanceM as i32);
        assert_eq!(r.values, Some(Values::List(pb::SweepValues { values: vec![0.0, 0.01, 0.02] })));
        assert_eq!(r.options.and_then(|o| o.r#loop).and_then(|l| l.max_loop_order), Some(4));
        let e = request("--diameter-m 0.0254 --npr 3 --vary mj").unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("--values")), "{e:?}");
    }
}
