//! `jetloop sweep`: screech predictions over NPR, Mj or reflector distance (table, JSON or CSV).

use crate::args::jet::JetSourceArgs;
use crate::args::jet::ScreechArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::sweep_plot;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::render::rows::regime_name;
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
    #[command(flatten)]
    jet: JetSourceArgs,
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

/// Runs `sweep`; the CSV file, when asked for, is written here.
impl SweepCmd {
    /// The SweepScreech request these arguments describe.
    fn request(&self) -> Result<pb::SweepScreechRequest, Failure> {
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

impl Run for SweepCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let request = a.request()?;
        let s = crate::readers::spinner("sweeping on the server");
        let r = ToneServiceClient::new(ch).sweep_screech(request).await;
        s.finish_and_clear();
        let r = r?.into_inner();
        let orders = r.points.iter().map(|p| p.loop_frequencies_hz.len()).max().unwrap_or(0);
        let value_key = match a.vary {
            VaryArg::Npr => ("nozzle_pressure_ratio_swept", "NPR"),
            VaryArg::Mj => ("fully_expanded_mach_number_swept", "Mj set"),
            VaryArg::Reflector => ("reflector_distance_m", "reflector [m]"),
        };
        // The swept NPR is the NPR column; the regime column only when the jet came from
        // reservoir conditions (a jet given directly has none).
        let npr_swept = matches!(a.vary, VaryArg::Npr);
        let regimes = r.points.iter().any(|p| p.regime != pb::ExpansionRegime::Unspecified as i32);
        let mut t = Table::new("points", "Sweep");
        t = if npr_swept {
            t.col("nozzle_pressure_ratio", "NPR")
        } else {
            t.col(value_key.0, value_key.1).col("nozzle_pressure_ratio", "NPR")
        };
        t = t.col("fully_expanded_mach_number", "Mj");
        if regimes {
            t = t.col("regime", "regime");
        }
        t = t
            .col("fully_expanded_velocity_m_per_s", "Uj [m/s]")
            .col("reference_length_m", "L [m]")
            .col("spacing_m", "Ls [m]")
            .col("powell_fundamental_hz", "Powell [Hz]")
            .col("tam_1986_hz", "Tam 1986 [Hz]");
        for n in 1..=orders {
            t = t.col(format!("loop_n{n}_hz"), format!("n={n} [Hz]"));
        }
        for p in &r.points {
            let mut row = Vec::new();
            if !npr_swept {
                row.push(Some(Val::Num(p.value)));
            }
            row.push(Some(Val::Num(p.nozzle_pressure_ratio)));
            row.push(Some(Val::Num(p.fully_expanded_mach_number)));
            if regimes {
                row.push(Some(Val::Text(regime_name(p.regime))));
            }
            row.extend([
                Some(Val::Num(p.fully_expanded_velocity_m_per_s)),
                Some(Val::Num(p.reference_length_m)),
                p.spacing_m.map(Val::Num),
                p.powell_fundamental_hz.map(Val::Num),
                p.tam_1986_hz.map(Val::Num),
            ]);
            for n in 0..orders {
                row.push(p.loop_frequencies_hz.get(n).copied().map(Val::Num));
            }
            t.row(row);
        }
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
            // The points went to the file: one summary line, not the table again (cautions
            // and sources stay in --json).
            let rep = Report::new(format!(
                "Screech sweep: {} points written to {} ({:.3} ms server time)",
                r.points.len(),
                path.display(),
                r.compute_time_s * 1e3
            ))
            .int("points", "points", r.points.len() as u64, "")
            .text("csv_file", "CSV file", path.display().to_string())
            .num("compute_time_s", "server compute time", r.compute_time_s, "s")
            .hide(&["compute_time_s"]);
            return Ok(rep.provenance(r.provenance).title_only());
        }
        Ok(Report::new(format!(
            "Screech sweep ({} points, {:.3} ms server time)",
            r.points.len(),
            r.compute_time_s * 1e3
        ))
        .num("compute_time_s", "server compute time", r.compute_time_s, "s")
        .hide(&["compute_time_s"])
        .table(t)
        .provenance(r.provenance))
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
