//! `jetloop tdms-info`: what a TDMS file holds (groups, channels, lengths, sample rates, units,
//! scaling), for choosing --tdms-group and --tdms-channels; with --values N, the chosen
//! channels read as the analysis commands read them: their first N samples in engineering
//! units, RMS, mean, minimum and maximum. Needs no server.

use crate::args::tdms::TdmsArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::tdms::ChannelInfo;
use crate::tdms::TdmsFile;
use clap::Args;
use std::path::PathBuf;

/// `jetloop tdms-info`.
#[derive(Debug, Args)]
pub struct TdmsInfoCmd {
    /// The TDMS file.
    file: PathBuf,
    /// Group and channels read with --values.
    #[command(flatten)]
    tdms: TdmsArgs,
    /// Also read the channels of --tdms-group / --tdms-channels (the defaults as for the
    /// analysis commands) and show their first N samples in engineering units, with RMS,
    /// mean, minimum and maximum of all samples.
    #[arg(long, value_name = "N")]
    values: Option<usize>,
    /// Also list every property of the channels of --tdms-group / --tdms-channels.
    #[arg(long)]
    properties: bool,
}

/// The scaling of a channel in words.
fn scaling_text(c: &ChannelInfo) -> String {
    match &c.scaling {
        Ok(None) => "none".into(),
        Ok(Some(l)) => format!("{} * raw + {}", l.slope, l.intercept),
        Err(e) => format!("cannot apply: {e}"),
    }
}

/// The rows of the channel listing of every group.
fn listing<R: std::io::Read + std::io::Seek>(f: &TdmsFile<R>) -> Table {
    let mut t = Table::new("channel_list", "channels")
        .col("group", "group")
        .col("channel", "channel")
        .col("data_type", "data type")
        .col("samples", "samples")
        .col("sample_rate_hz", "rate (Hz)")
        .col("unit", "unit")
        .col("scaling", "scaling");
    for g in f.groups() {
        for c in f.channels(&g) {
            t.row(vec![
                Some(Val::Text(g.clone())),
                Some(Val::Text(c.name.clone())),
                Some(Val::Text(crate::tdms::type_name(c.data_type))),
                Some(Val::Int(c.length)),
                c.sample_rate_hz.map(Val::Plain),
                c.unit.clone().map(Val::Text),
                Some(Val::Text(scaling_text(&c))),
            ]);
        }
    }
    t
}

/// The first `n` samples and the statistics of the chosen channels.
fn values<R: std::io::Read + std::io::Seek>(
    f: &mut TdmsFile<R>,
    sel: &TdmsArgs,
    name: &str,
    n: usize,
) -> Result<Table, Failure> {
    let group = sel.group(f, name)?;
    let channels = sel.channels(f, &group, name)?;
    let all = f.read_planar(&channels).map_err(|e| Failure::Usage(e.to_string()))?;
    let mut t = Table::new("channel_values", format!("samples of group '{group}' (engineering units)"))
        .col("channel", "channel")
        .col("samples", "samples")
        .col("rms", "RMS")
        .col("mean", "mean")
        .col("min", "min")
        .col("max", "max")
        .col("first_values", "first values");
    let len = channels[0].length as usize;
    for (c, v) in channels.iter().zip(all.chunks(len.max(1))) {
        let count = v.len().max(1) as f64;
        let rms = (v.iter().map(|x| x * x).sum::<f64>() / count).sqrt();
        let mean = v.iter().sum::<f64>() / count;
        let min = v.iter().copied().fold(f64::INFINITY, f64::min);
        let max = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let first: Vec<String> = v.iter().take(n).map(|x| x.to_string()).collect();
        t.row(vec![
            Some(Val::Text(c.name.clone())),
            Some(Val::Int(v.len() as u64)),
            Some(Val::Num(rms)),
            Some(Val::Num(mean)),
            (!v.is_empty()).then_some(Val::Num(min)),
            (!v.is_empty()).then_some(Val::Num(max)),
            Some(Val::Text(first.join(" "))),
        ]);
    }
    Ok(t)
}

/// The properties of the chosen channels.
fn properties<R: std::io::Read + std::io::Seek>(
    f: &TdmsFile<R>,
    sel: &TdmsArgs,
    name: &str,
) -> Result<Table, Failure> {
    let group = sel.group(f, name)?;
    let mut t = Table::new("channel_properties", format!("properties of the channels of group '{group}'"))
        .col("channel", "channel")
        .col("property", "property")
        .col("value", "value");
    for c in sel.channels(f, &group, name)? {
        for (k, v) in f.properties(&c) {
            t.row(vec![
                Some(Val::Text(c.name.clone())),
                Some(Val::Text(k.clone())),
                Some(Val::Text(v.to_string())),
            ]);
        }
    }
    Ok(t)
}

/// Runs `tdms-info` (no server).
impl Run for TdmsInfoCmd {
    async fn run(self, _ctx: &Ctx) -> Result<Report, Failure> {
        let name = self.file.display().to_string();
        let mut f = TdmsFile::open(&self.file).map_err(|e| Failure::Usage(e.to_string()))?;
        let mut rep = Report::new(format!("TDMS file {name}"))
            .int("version", "TDMS version", u64::from(f.version()), "")
            .int("segments", "segments", f.segment_count() as u64, "")
            .text("groups", "groups", f.groups().join(", "));
        for w in f.warnings() {
            eprintln!("warning: {w}");
            rep = rep.text("warning", "warning", w);
        }
        rep = rep.table(listing(&f));
        if self.properties {
            rep = rep.table(properties(&f, &self.tdms, &name)?);
        }
        if let Some(n) = self.values {
            rep = rep.table(values(&mut f, &self.tdms, &name, n)?);
        }
        Ok(rep)
    }
}
