//! TDMS recordings: which group and channels to read (`--tdms-group`, `--tdms-channels`), and
//! the `Samples` they become: the channels' own sample rate (`wf_increment`), their samples
//! scaled to engineering units by the file's own scaling, and a calibration chosen by unit
//! (pascals need none; volts take the microphone flags; anything else is warned about).

use crate::failure::Failure;
use crate::tdms::ChannelInfo;
use crate::tdms::TdmsFile;
use clap::Args;
use jetloop_proto::pb;
use std::io::Read;
use std::io::Seek;
use std::path::Path;

/// Which part of a TDMS file to read.
#[derive(Debug, Clone, Default, Args)]
pub struct TdmsArgs {
    /// TDMS files: the group whose channels are read (default: the file's only group).
    #[arg(long)]
    pub tdms_group: Option<String>,
    /// TDMS files: the channels to read, comma-separated, in this order (default: every
    /// channel of the group; they must have the same length and sample rate).
    #[arg(long, value_delimiter = ',')]
    pub tdms_channels: Vec<String>,
}

impl TdmsArgs {
    /// The group to read: --tdms-group, else the file's only group.
    ///
    /// # Errors
    /// [`Failure::Usage`] naming the groups when the one asked is not there, or there are
    /// several and none was asked.
    pub(crate) fn group<R: Read + Seek>(&self, f: &TdmsFile<R>, name: &str) -> Result<String, Failure> {
        let groups = f.groups();
        let list = || groups.iter().map(|g| format!("'{g}'")).collect::<Vec<_>>().join(", ");
        match (&self.tdms_group, groups.len()) {
            (Some(g), _) if groups.contains(g) => Ok(g.clone()),
            (Some(g), _) => Err(Failure::Usage(format!("{name}: no group '{g}'; its groups: {}", list()))),
            (None, 1) => Ok(groups[0].clone()),
            (None, 0) => Err(Failure::Usage(format!("{name}: the file has no group of channels"))),
            (None, _) => Err(Failure::Usage(format!(
                "{name}: {} groups ({}): choose one with --tdms-group",
                groups.len(),
                list()
            ))),
        }
    }

    /// The channels to read from `group`: --tdms-channels in that order, else all of them;
    /// they must have the same length and sample rate.
    ///
    /// # Errors
    /// [`Failure::Usage`] naming an unknown channel (and the group's channels), or the
    /// channels whose lengths or rates differ.
    pub(crate) fn channels<R: Read + Seek>(
        &self,
        f: &TdmsFile<R>,
        group: &str,
        name: &str,
    ) -> Result<Vec<ChannelInfo>, Failure> {
        let all = f.channels(group);
        let list = || all.iter().map(|c| format!("'{}'", c.name)).collect::<Vec<_>>().join(", ");
        let chosen: Vec<ChannelInfo> = if self.tdms_channels.is_empty() {
            all.clone()
        } else {
            self.tdms_channels
                .iter()
                .map(|want| {
                    all.iter().find(|c| c.name == *want).cloned().ok_or_else(|| {
                        Failure::Usage(format!(
                            "{name}: group '{group}' has no channel '{want}'; its channels: {}",
                            list()
                        ))
                    })
                })
                .collect::<Result<_, _>>()?
        };
        if chosen.is_empty() {
            return Err(Failure::Usage(format!("{name}: group '{group}' has no channels")));
        }
        for c in &chosen {
            f.sample_rate_hz(c).map_err(|e| Failure::Usage(e.to_string()))?;
        }
        let first = &chosen[0];
        if chosen.iter().any(|c| c.length != first.length || c.sample_rate_hz != first.sample_rate_hz) {
            let each: Vec<String> = chosen
                .iter()
                .map(|c| {
                    let rate = c.sample_rate_hz.map_or("no rate".to_string(), |r| format!("{r} Hz"));
                    format!("'{}' {} samples at {rate}", c.name, c.length)
                })
                .collect();
            return Err(Failure::Usage(format!(
                "{name}: channels of group '{group}' differ in length or sample rate ({}): choose channels \
                 of one length and rate with --tdms-channels",
                each.join(", ")
            )));
        }
        Ok(chosen)
    }
}

/// What a unit says about how samples become pascals.
#[derive(Debug, Clone, PartialEq)]
enum Unit {
    /// Pascals.
    Pascal,
    /// Volts (a microphone chain converts them).
    Volt,
    /// Something else, or no unit (the text, empty when none).
    Other(String),
}

/// The kind of `unit` (`Pa`, `V`, or other).
fn unit_kind(unit: Option<&str>) -> Unit {
    let u = unit.unwrap_or("").trim();
    match u.to_ascii_lowercase().as_str() {
        "pa" | "pascal" | "pascals" => Unit::Pascal,
        "v" | "volt" | "volts" => Unit::Volt,
        _ => Unit::Other(u.to_string()),
    }
}

/// Reads the TDMS file at `file` into `Samples`: the channels `sel` chooses, planar, scaled
/// to their engineering units, at the channels' own rate unless `sample_rate_hz` (Hz) is
/// given; the calibration the flags `given`, or from the channels' unit (pascals: 1 Pa per
/// unit) when they give none; `per_channel` when a calibration file replaces it later.
///
/// # Errors
/// [`Failure::Usage`] for a file the reader refuses, a group or channel choice that does not
/// fit, no sample rate, or channels not in pascals without a calibration.
pub(crate) fn read(
    file: &Path,
    sel: &TdmsArgs,
    sample_rate_hz: Option<f64>,
    given: Option<pb::Calibration>,
    per_channel: bool,
) -> Result<pb::Samples, Failure> {
    let name = file.display().to_string();
    let usage = |e: crate::tdms::TdmsError| Failure::Usage(e.to_string());
    let mut f = TdmsFile::open(file).map_err(usage)?;
    for w in f.warnings() {
        eprintln!("warning: {w}");
    }
    let group = sel.group(&f, &name)?;
    let channels = sel.channels(&f, &group, &name)?;
    let rate = match (sample_rate_hz, channels[0].sample_rate_hz) {
        (Some(given), Some(file)) => {
            if (given - file).abs() > 1e-9 * file {
                eprintln!(
                    "warning: {name}: --sample-rate-hz {given} replaces the {file} Hz of the channels' wf_increment"
                );
            }
            given
        }
        (Some(given), None) => given,
        (None, Some(file)) => file,
        (None, None) => {
            return Err(Failure::Usage(format!(
                "{name}: the channels of group '{group}' have no wf_increment property: give --sample-rate-hz"
            )))
        }
    };
    let units: Vec<Unit> = channels.iter().map(|c| unit_kind(c.unit.as_deref())).collect();
    for (c, u) in channels.iter().zip(&units) {
        if let Unit::Other(text) = u {
            let what = if text.is_empty() { "no unit".to_string() } else { format!("unit '{text}'") };
            eprintln!(
                "warning: {name}: channel '{}' has {what} (not Pa or V): the calibration given turns its \
                 values into pascals",
                c.name
            );
        }
    }
    let (calibration, channel_calibrations) = if per_channel {
        (Some(pb::Calibration::default()), Vec::new())
    } else {
        calibrations(&name, given, &channels, &units)?
    };
    let values = f.read_planar(&channels).map_err(usage)?;
    Ok(pb::Samples {
        sample_rate_hz: rate,
        channel_count: channels.len() as u32,
        layout: pb::ChannelLayout::Planar as i32,
        data: Some(pb::samples::Data::Values(pb::SampleValues { values })),
        calibration,
        channel_names: channels.iter().map(|c| c.name.clone()).collect(),
        channel_calibrations,
    })
}

/// The calibration of the channels: the flags' (with the microphone flags, channels in pascals
/// keep 1 Pa per unit), else 1 Pa per unit when every channel is in pascals.
fn calibrations(
    name: &str,
    given: Option<pb::Calibration>,
    channels: &[ChannelInfo],
    units: &[Unit],
) -> Result<(Option<pb::Calibration>, Vec<pb::Calibration>), Failure> {
    use pb::calibration::Scale;
    let in_pascals = pb::Calibration { scale: Some(Scale::InPascals(true)) };
    let per: Vec<pb::Calibration> = match &given {
        Some(c @ pb::Calibration { scale: Some(Scale::Microphone(_)) }) => {
            units.iter().map(|u| if *u == Unit::Pascal { in_pascals } else { *c }).collect()
        }
        Some(c) => return Ok((Some(*c), Vec::new())),
        None if units.iter().all(|u| *u == Unit::Pascal) => return Ok((Some(in_pascals), Vec::new())),
        None => {
            let not_pa: Vec<String> = channels
                .iter()
                .zip(units)
                .filter(|(_, u)| **u != Unit::Pascal)
                .map(|(c, _)| format!("'{}' ({})", c.name, c.unit.as_deref().unwrap_or("no unit")))
                .collect();
            return Err(Failure::Usage(format!(
                "{name}: no calibration given and channel(s) {} are not in Pa: give --sensitivity-v-per-pa and \
                 --volts-per-unit for volts, --pa-per-unit, or --calibration-file",
                not_pa.join(", ")
            )));
        }
    };
    if per.windows(2).all(|w| w[0] == w[1]) {
        Ok((per.into_iter().next(), Vec::new()))
    } else {
        Ok((None, per))
    }
}

#[cfg(test)]
mod tests {
    //! TDMS files built from the documented layout (see `crate::tdms::tests`) -> `Samples`:
    //! group and channel choice, rate from `wf_increment`, calibration by unit.

    use super::*;
    use crate::args::input::tests::parse;
    use crate::tdms::tests::{le_f64, num, segment, text, Bytes, META, NEW_LIST, RAW};
    use pb::calibration::Scale;

    /// A file with group "mics" (p_pa: float64 in Pa; v_mic: int16 scaled to V by 0.5 V per
    /// count; both at 1/wf_increment = 25600 Hz) and group "aux" (two channels of 1 and 2 values).
    fn rig_file(name: &str) -> std::path::PathBuf {
        let dt = num(false, &(1.0f64 / 25600.0).to_le_bytes());
        let mut o = Bytes::new(false);
        o.object(
            "/'mics'/'p_pa'",
            Some((10, 3)),
            &[("wf_increment", 10, dt.clone()), ("unit_string", 0x20, text(false, "Pa"))],
        )
        .object(
            "/'mics'/'v_mic'",
            Some((2, 3)),
            &[
                ("wf_increment", 10, dt),
                ("NI_UnitDescription", 0x20, text(false, "V")),
                ("NI_Scale[0]_Scale_Type", 0x20, text(false, "Linear")),
                ("NI_Scale[0]_Linear_Slope", 10, num(false, &0.5f64.to_le_bytes())),
                ("NI_Scale[0]_Linear_Y_Intercept", 10, num(false, &0f64.to_le_bytes())),
            ],
        )
        .object("/'aux'/'short'", Some((10, 1)), &[])
        .object("/'aux'/'long'", Some((10, 2)), &[]);
        let mut raw = le_f64(&[1.0, -2.0, 3.0]);
        raw.extend([2i16, 4, -6].iter().flat_map(|v| v.to_le_bytes()));
        raw.extend(le_f64(&[7.0, 8.0, 9.0]));
        let dir = std::env::temp_dir().join(format!("jetloop-tdms-args-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let path = dir.join(name);
        std::fs::write(&path, segment(META | NEW_LIST | RAW, 4, &o, &raw)).expect("write");
        path
    }

    fn usage(e: Failure) -> String {
        match e {
            Failure::Usage(m) => m,
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn a_pascal_channel_needs_no_calibration_and_keeps_its_rate_and_name() {
        let f = rig_file("pa.tdms");
        let s = parse(&format!("{} --tdms-group mics --tdms-channels p_pa", f.display()))
            .read()
            .expect("samples");
        assert_eq!((s.sample_rate_hz, s.channel_count), (25600.0, 1));
        assert_eq!(s.channel_names, vec!["p_pa".to_string()]);
        assert_eq!(s.calibration, Some(pb::Calibration { scale: Some(Scale::InPascals(true)) }));
        assert_eq!(
            s.data,
            Some(pb::samples::Data::Values(pb::SampleValues { values: vec![1.0, -2.0, 3.0] }))
        );
    }

    #[test]
    fn volts_take_the_microphone_flags_while_pascals_keep_one_pa_per_unit() {
        let f = rig_file("v.tdms");
        let e = usage(parse(&format!("{} --tdms-group mics", f.display())).read().unwrap_err());
        assert!(e.contains("no calibration given") && e.contains("'v_mic' (V)"), "{e}");
        let s = parse(&format!(
            "{} --tdms-group mics --sensitivity-v-per-pa 0.004 --volts-per-unit 1",
            f.display()
        ))
        .read()
        .expect("samples");
        let mic = pb::Calibration {
            scale: Some(Scale::Microphone(pb::MicrophoneChain {
                sensitivity_v_per_pa: 0.004,
                volts_per_unit: 1.0,
            })),
        };
        assert_eq!(s.calibration, None);
        assert_eq!(
            s.channel_calibrations,
            vec![pb::Calibration { scale: Some(Scale::InPascals(true)) }, mic]
        );
        // Planar: p_pa, then v_mic scaled to volts (0.5 V per count).
        let Some(pb::samples::Data::Values(v)) = s.data else { panic!("{:?}", s.data) };
        assert_eq!(v.values, vec![1.0, -2.0, 3.0, 1.0, 2.0, -3.0]);
        // --pa-per-unit applies to every channel as given.
        let s = parse(&format!("{} --tdms-group mics --pa-per-unit 2", f.display())).read().expect("samples");
        assert_eq!(
            (s.calibration, s.channel_calibrations.len()),
            (Some(pb::Calibration { scale: Some(Scale::PascalsPerUnit(2.0)) }), 0)
        );
    }

    #[test]
    fn groups_channels_and_mismatched_lengths_are_named_when_refused() {
        let f = rig_file("sel.tdms");
        let e = usage(parse(&format!("{} --in-pascals", f.display())).read().unwrap_err());
        assert!(e.contains("2 groups ('mics', 'aux'): choose one with --tdms-group"), "{e}");
        let e = usage(parse(&format!("{} --in-pascals --tdms-group nope", f.display())).read().unwrap_err());
        assert!(e.contains("no group 'nope'; its groups: 'mics', 'aux'"), "{e}");
        let e = usage(
            parse(&format!("{} --in-pascals --tdms-group mics --tdms-channels p_pa,x", f.display()))
                .read()
                .unwrap_err(),
        );
        assert!(e.contains("group 'mics' has no channel 'x'; its channels: 'p_pa', 'v_mic'"), "{e}");
        let e = usage(parse(&format!("{} --in-pascals --tdms-group aux", f.display())).read().unwrap_err());
        assert!(e.contains("'short' 1 samples at no rate, 'long' 2 samples at no rate"), "{e}");
        // One channel without wf_increment needs --sample-rate-hz.
        let e = usage(
            parse(&format!("{} --in-pascals --tdms-group aux --tdms-channels long", f.display()))
                .read()
                .unwrap_err(),
        );
        assert!(e.contains("no wf_increment property: give --sample-rate-hz"), "{e}");
        let s = parse(&format!(
            "{} --in-pascals --tdms-group aux --tdms-channels long --sample-rate-hz 1000",
            f.display()
        ))
        .read()
        .expect("samples");
        assert_eq!(
            (s.sample_rate_hz, s.data),
            (1000.0, Some(pb::samples::Data::Values(pb::SampleValues { values: vec![8.0, 9.0] })))
        );
    }
}
