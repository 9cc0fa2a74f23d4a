//! `jetloop inspect`: what jetloop reads from a recording, without a server: the container
//! and sample encoding, rate, channels, frames, the warnings (a file cut short, placeholder
//! sizes), each channel's minimum, maximum, mean and RMS, and its first samples, in the
//! file's units (counts for integer samples, full-scale units for float samples) and, with a
//! calibration, in pascals.

use crate::args::input::InputArgs;
use crate::args::input::Recording;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::readers::disk::wire_values;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use clap::Args;
use jetloop_proto::pb;

/// `jetloop inspect`.
#[derive(Debug, Args)]
pub struct InspectCmd {
    /// The recording (a calibration is optional here: with one, values in Pa are added).
    #[command(flatten)]
    input: InputArgs,
    /// Samples per channel to list from the start of the recording.
    #[arg(long, default_value_t = 8)]
    first: u64,
}

/// One channel's running figures, in file units.
#[derive(Debug, Clone, Default)]
struct Stats {
    /// Smallest sample.
    min: f64,
    /// Largest sample.
    max: f64,
    /// Sum of samples.
    sum: f64,
    /// Sum of squared samples.
    sum_sq: f64,
    /// Samples seen.
    count: u64,
    /// The first samples kept.
    first: Vec<f64>,
}

impl Stats {
    /// Takes one sample, keeping it when fewer than `keep` are kept.
    fn push(&mut self, v: f64, keep: u64) {
        if self.count == 0 {
            (self.min, self.max) = (v, v);
        }
        self.min = self.min.min(v);
        self.max = self.max.max(v);
        self.sum += v;
        self.sum_sq += v * v;
        self.count += 1;
        if (self.first.len() as u64) < keep {
            self.first.push(v);
        }
    }
}

/// Pascals per file unit of a calibration (`None` when it is not set).
fn pa_per_unit(c: Option<&pb::Calibration>) -> Option<f64> {
    use pb::calibration::Scale;
    match c?.scale? {
        Scale::PascalsPerUnit(k) => Some(k),
        Scale::Microphone(m) => Some(m.volts_per_unit / m.sensitivity_v_per_pa),
        Scale::InPascals(_) => Some(1.0),
    }
}

/// Every channel's figures: the file read a block at a time, or the values in memory.
fn channel_stats(rec: &Recording, keep: u64) -> Result<Vec<Stats>, Failure> {
    let ch = rec.samples.channel_count.max(1) as usize;
    let mut stats = vec![Stats::default(); ch];
    match (&rec.disk, &rec.samples.data) {
        (Some(d), _) => {
            let mut r = d.open()?;
            while let Some(block) = r.next_block(1 << 16)? {
                for (i, v) in wire_values(d.encoding.wire(), &block).into_iter().enumerate() {
                    stats[i % ch].push(v, keep);
                }
            }
        }
        (None, Some(pb::samples::Data::Values(v))) => {
            // Values read from text are planar: channel by channel.
            let n = v.values.len() / ch;
            for (c, s) in stats.iter_mut().enumerate() {
                for &x in &v.values[c * n..(c + 1) * n] {
                    s.push(x, keep);
                }
            }
        }
        (None, _) => {}
    }
    Ok(stats)
}

/// Runs `inspect` (no server is called).
impl Run for InspectCmd {
    async fn run(self, _ctx: &Ctx) -> Result<Report, Failure> {
        let rec = if self.input.calibrated() {
            self.input.open()?
        } else {
            let rec = self.input.open_uncalibrated(pb::Calibration::default())?;
            for w in rec.disk.iter().flat_map(|d| &d.warnings) {
                eprintln!("warning: {w}");
            }
            rec
        };
        let s = &rec.samples;
        let frames = rec.sample_count() / u64::from(s.channel_count.max(1));
        let (container, encoding, wire) = match &rec.disk {
            Some(d) => (d.container.clone(), d.encoding.describe(), d.encoding.wire()),
            None => ("CSV text".to_string(), "decimal text".to_string(), pb::SampleFormat::Unspecified),
        };
        let title = format!(
            "{}: {container}, {encoding}, {} channels at {} Hz, {frames} frames",
            self.input.file.display(),
            s.channel_count,
            s.sample_rate_hz
        );
        let mut report = Report::new(title)
            .text("file", "file", self.input.file.display().to_string())
            .text("container", "container", container)
            .text("sample_encoding", "sample encoding in the file", encoding)
            .text("sent_as", "sent to the server as", format!("{:?}", wire))
            .num("sample_rate_hz", "sample rate", s.sample_rate_hz, "Hz")
            .int("channel_count", "channels", u64::from(s.channel_count), "")
            .int("frames", "frames (samples per channel)", frames, "")
            .num("duration_s", "duration", frames as f64 / s.sample_rate_hz, "s");
        if let Some(d) = &rec.disk {
            report = report.int("data_offset_bytes", "first sample at byte", d.data_offset, "");
        }
        let mut warnings = Table::new("warnings", "warnings:").col("message", "message");
        for w in rec.disk.iter().flat_map(|d| &d.warnings) {
            warnings.row(vec![Some(Val::Text(w.clone()))]);
        }
        report = report.table(warnings);
        for (c, st) in channel_stats(&rec, self.first)?.into_iter().enumerate() {
            let factor = pa_per_unit(s.channel_calibrations.get(c).or(s.calibration.as_ref()));
            let n = st.count.max(1) as f64;
            let mut child =
                Report::new(format!("channel {c} (file units: counts, or full scale for float samples)"))
                    .int("channel", "channel", c as u64, "")
                    .num("min", "minimum", st.min, "")
                    .num("max", "maximum", st.max, "")
                    .num("mean", "mean", st.sum / n, "")
                    .num("rms", "RMS", (st.sum_sq / n).sqrt(), "");
            if let Some(name) = s.channel_names.get(c) {
                child = child.text("name", "name", name.clone());
            }
            if let Some(k) = factor {
                child = child.num("pa_per_unit", "calibration", k, "Pa per unit").num(
                    "rms_pa",
                    "RMS",
                    k * (st.sum_sq / n).sqrt(),
                    "Pa",
                );
            }
            let mut first = Table::new("first", format!("  first {} samples:", st.first.len()))
                .col("frame", "frame")
                .col("value", "value (file units)");
            if factor.is_some() {
                first = first.col("value_pa", "value (Pa)");
            }
            for (k, v) in st.first.iter().enumerate() {
                first.row(vec![
                    Some(Val::Int(k as u64)),
                    Some(Val::Num(*v)),
                    factor.map(|f| Val::Num(f * v)),
                ]);
            }
            report = report.child(child.table(first));
        }
        Ok(report)
    }
}
