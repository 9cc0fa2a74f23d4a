//! `jetloop synth`: demo recordings of an imagined jet rig, written without a server.

use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use clap::Args;
use std::path::PathBuf;

/// `jetloop synth`: a demo recording of an imagined cold model-scale jet rig.
#[derive(Debug, Args)]
pub struct SynthCmd {
    /// Output file; the extension picks the kind: `.wav` (32-bit float, normalized to
    /// --full-scale-pa), `.csv` (one column of pascals per microphone, header row of names) or
    /// `.bin` / `.raw` (interleaved little-endian int16, 32768 counts at --full-scale-pa, as a
    /// DAQ dump).
    out: PathBuf,
    /// Sample rate in Hz.
    #[arg(long, default_value_t = 204_800)]
    sample_rate_hz: u32,
    /// Duration in seconds.
    #[arg(long, default_value_t = 2.0)]
    seconds: f64,
    /// Screech fundamental in Hz.
    #[arg(long, default_value_t = 5_230.0)]
    screech_hz: f64,
    /// Level of the fundamental in dB re 20 uPa.
    #[arg(long, default_value_t = 138.0)]
    screech_db: f64,
    /// Number of harmonics including the fundamental (each 9 dB below the previous).
    #[arg(long, default_value_t = 3)]
    harmonics: u32,
    /// Centre of the broadband shock-noise hump in Hz.
    #[arg(long, default_value_t = 11_000.0)]
    hump_hz: f64,
    /// Overall level of the hump in dB re 20 uPa.
    #[arg(long, default_value_t = 125.0)]
    hump_db: f64,
    /// Overall level of the white background noise in dB re 20 uPa.
    #[arg(long, default_value_t = 115.0)]
    noise_db: f64,
    /// Pascals at full scale (the --pa-per-unit to analyse the file with).
    #[arg(long, default_value_t = 2_000.0)]
    full_scale_pa: f64,
    /// Random seed.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// Microphones equally spaced on a ring around the jet (azimuths 360 j / M degrees), one
    /// WAV channel each; 1 writes a single microphone.
    #[arg(long, default_value_t = 1)]
    ring: u32,
    /// Azimuthal pattern of the screech tone on the ring.
    #[arg(long, value_enum, default_value = "spinning")]
    pattern: PatternArg,
    /// Stream time in s at which the screech tone jumps to --jump-to-hz (a stage jump).
    #[arg(long)]
    jump_at_s: Option<f64>,
    /// Frequency after the jump, Hz (default: 12 % above --screech-hz).
    #[arg(long)]
    jump_to_hz: Option<f64>,
    /// A continuous NPR ramp FROM,TO: the NPR runs from FROM to TO and back over the recording,
    /// the tone follows Powell's fundamental of a cold round convergent jet (Uc = 0.7 Uj,
    /// vortex-sheet cell spacing) scaled to --screech-hz at FROM, silent while the jet is not
    /// supersonic, and one more channel (the last) carries a gauge-pressure transducer: 0-10 V
    /// over 0-1 MPa, ambient 101325 Pa.
    #[arg(long, value_delimiter = ',')]
    ramp_npr: Vec<f64>,
    /// With --ramp-npr: NPR above which the tone is on a second stage on the way up, and on the
    /// way down (below the first: hysteresis), UP,DOWN; the second stage is at
    /// --jump-to-hz / --screech-hz times the first (default 0.88).
    #[arg(long, value_delimiter = ',', requires = "ramp_npr")]
    stage_npr: Vec<f64>,
    /// Azimuthal order m of the tone (its h-th harmonic has order h m); a negative order spins
    /// towards decreasing azimuth.
    #[arg(long, default_value_t = 1, allow_negative_numbers = true)]
    order: i32,
}

/// Azimuthal pattern of the synthesized tone.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum PatternArg {
    /// cos(omega t - m theta): helical, spinning towards increasing azimuth for m > 0.
    Spinning,
    /// cos(m theta) cos(omega t): flapping, standing.
    Standing,
    /// The same at every azimuth (m ignored).
    Axisymmetric,
}

/// The kinds of file `synth` writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum OutKind {
    /// WAV, 32-bit float.
    Wav,
    /// CSV of pascals.
    Csv,
    /// Raw interleaved int16.
    RawI16,
}

impl OutKind {
    /// The kind the extension of `path` names.
    ///
    /// # Errors
    /// [`Failure::Usage`] for any other extension.
    fn of(path: &std::path::Path) -> Result<Self, Failure> {
        match path.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase).as_deref() {
            Some("wav") => Ok(Self::Wav),
            Some("csv") => Ok(Self::Csv),
            Some("bin") | Some("raw") => Ok(Self::RawI16),
            _ => Err(Failure::Usage(format!(
                "{}: give the output a .wav, .csv or .bin/.raw extension (the kind of file to write)",
                path.display()
            ))),
        }
    }

    /// The kind of file in words, for the report.
    fn describe(self) -> &'static str {
        match self {
            Self::Wav => "WAV, 32-bit float, 1.0 = full scale",
            Self::Csv => "CSV, pascals, one column per microphone",
            Self::RawI16 => "raw interleaved int16 little-endian, 32768 counts = full scale",
        }
    }
}

/// Ambient pressure of the demo ramp, Pa (ICAO standard atmosphere, sea level).
pub(crate) const AMBIENT_PA: f64 = 101_325.0;

/// The demo ramp's gauge transducer: pascals per volt (0-10 V over 0-1 MPa).
pub(crate) const PA_PER_VOLT: f64 = 1e5;

/// Full scale of the transducer channel, V (WAV 1.0 and int16 32768 counts stand for it).
pub(crate) const CONTROL_FULL_SCALE_V: f64 = 10.0;

/// Powell's fundamental of a cold round convergent jet at `npr`, up to a constant (nozzle
/// diameter 1): Mj from isentropic expansion (NACA Report 1135), Dj from the area ratio,
/// Ls = pi sqrt(Mj^2 - 1) Dj / 2.405 (vortex sheet), Uc = 0.7 Uj, f = Uc / (Ls (1 + Uc/a));
/// None while the jet is not supersonic. For demo data only.
pub(crate) fn powell_shape(npr: f64) -> Option<f64> {
    let (g, r, t0) = (1.4f64, 287.05, 288.15);
    let m2 = 2.0 / (g - 1.0) * (npr.powf((g - 1.0) / g) - 1.0);
    if m2 <= 1.0 + 1e-6 {
        return None;
    }
    let mj = m2.sqrt();
    let tj = t0 / (1.0 + 0.5 * (g - 1.0) * m2);
    let uj = mj * (g * r * tj).sqrt();
    let area =
        (1.0 / mj) * ((1.0 + 0.5 * (g - 1.0) * m2) / (0.5 * (g + 1.0))).powf((g + 1.0) / (2.0 * (g - 1.0)));
    let ls = std::f64::consts::PI * (m2 - 1.0).sqrt() * area.sqrt() / 2.404_825_557_695_773;
    let uc = 0.7 * uj;
    Some(uc / (ls * (1.0 + uc / (g * r * t0).sqrt())))
}

/// The rms pressure in Pa of a level `db` in dB re 20 uPa.
pub(crate) fn rms_of(db: f64) -> f64 {
    20e-6 * 10f64.powf(db / 20.0)
}

/// Runs `synth` (no server needed).
impl Run for SynthCmd {
    async fn run(self, _ctx: &Ctx) -> Result<Report, Failure> {
        let a = self;
        use std::f64::consts::PI;
        let fs = f64::from(a.sample_rate_hz);
        let kind = OutKind::of(&a.out)?;
        if !(a.seconds > 0.0 && a.seconds <= 600.0) || a.sample_rate_hz < 1000 {
            return Err(Failure::Usage(
                "--seconds must be in (0, 600] and --sample-rate-hz at least 1000".into(),
            ));
        }
        if !(a.screech_hz > 0.0 && a.screech_hz < fs / 2.0 && a.hump_hz > 0.0 && a.hump_hz < fs / 2.0) {
            return Err(Failure::Usage(
                "--screech-hz and --hump-hz must lie between 0 and half the sample rate".into(),
            ));
        }
        if let Some(f1) = a.jump_to_hz {
            if !(f1 > 0.0 && f1 < fs / 2.0) {
                return Err(Failure::Usage(
                    "--jump-to-hz must lie between 0 and half the sample rate".into(),
                ));
            }
        }
        if !(1..=64).contains(&a.ring) {
            return Err(Failure::Usage("--ring must be 1 to 64 microphones".into()));
        }
        let n = (a.seconds * fs) as usize;
        let mut state = a.seed.max(1);
        let mut gauss = move || {
            let mut u = || {
                state ^= state >> 12;
                state ^= state << 25;
                state ^= state >> 27;
                ((state.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 11) as f64 + 0.5) / (1u64 << 53) as f64
            };
            let (u1, u2) = (u(), u());
            (-2.0 * u1.ln()).sqrt() * (2.0 * PI * u2).cos()
        };
        let mics = a.ring as usize;
        let azimuths: Vec<f64> = (0..mics).map(|j| 2.0 * PI * j as f64 / mics as f64).collect();
        // Hump: white noise through a two-pole resonance about 40 % of its centre frequency wide
        // (pole radius r from the bandwidth B = (1 - r) fs / pi), a broad hump as shock-associated
        // noise is, not a narrow line; scaled to its overall level; each microphone has its own
        // hump and background noise.
        let rr = (1.0 - PI * 0.4 * a.hump_hz / fs).max(0.5);
        let th = 2.0 * PI * a.hump_hz / fs;
        let (a1, a2) = (2.0 * rr * th.cos(), -rr * rr);
        // The fundamental at every sample and its cycles (phase continuous through jumps).
        let ramp = match a.ramp_npr.as_slice() {
            [] => None,
            [lo, hi] if *lo >= 1.0 && *hi >= 1.0 && *lo <= 50.0 && *hi <= 50.0 => Some((*lo, *hi)),
            _ => return Err(Failure::Usage("--ramp-npr takes FROM,TO, each NPR in [1, 50]".into())),
        };
        let npr_at = |t: f64| {
            let (lo, hi) = ramp.unwrap_or((1.0, 1.0));
            let u = 2.0 * t / a.seconds;
            lo + (hi - lo) * if u <= 1.0 { u } else { 2.0 - u }
        };
        let mut fundamental = vec![0.0f64; n];
        let mut cycles = vec![0.0f64; n];
        let mut c = 0.0;
        for k in 0..n {
            let t = k as f64 / fs;
            let f = match ramp {
                Some((lo, _)) => {
                    let npr = npr_at(t);
                    let second = match a.stage_npr.as_slice() {
                        [] => false,
                        [up, down] => npr > if 2.0 * t < a.seconds { *up } else { *down },
                        _ => return Err(Failure::Usage("--stage-npr takes UP,DOWN".into())),
                    };
                    let ratio = if second { a.jump_to_hz.map_or(0.88, |f1| f1 / a.screech_hz) } else { 1.0 };
                    match (powell_shape(npr), powell_shape(lo)) {
                        (Some(p), Some(p0)) => a.screech_hz * p / p0 * ratio,
                        _ => 0.0,
                    }
                }
                None => match a.jump_at_s {
                    Some(tj) if t >= tj => a.jump_to_hz.unwrap_or(1.12 * a.screech_hz),
                    _ => a.screech_hz,
                },
            };
            fundamental[k] = f;
            cycles[k] = c;
            c += f / fs;
        }
        if ramp.is_some() && powell_shape(ramp.map_or(1.0, |r| r.0)).is_none() {
            return Err(Failure::Usage(
                "--ramp-npr must start where the jet is supersonic (NPR above 1.9)".into(),
            ));
        }
        let mut chans = Vec::with_capacity(mics + 1);
        for &theta in &azimuths {
            let mut hump = vec![0.0; n];
            for k in 0..n {
                let y1 = if k >= 1 { hump[k - 1] } else { 0.0 };
                let y2 = if k >= 2 { hump[k - 2] } else { 0.0 };
                hump[k] = gauss() + a1 * y1 + a2 * y2;
            }
            let hr = (hump.iter().map(|v| v * v).sum::<f64>() / n as f64).sqrt();
            let (hump_k, noise_sigma) = (rms_of(a.hump_db) / hr, rms_of(a.noise_db));
            let mut x = vec![0.0f64; n];
            for (k, v) in x.iter_mut().enumerate() {
                let mut s = hump_k * hump[k] + noise_sigma * gauss();
                for h in 1..=a.harmonics {
                    let amp = rms_of(a.screech_db - 9.0 * f64::from(h - 1)) * 2f64.sqrt();
                    let f_now = fundamental[k];
                    if f_now > 0.0 && f64::from(h) * f_now < fs / 2.0 {
                        let wt = 2.0 * PI * f64::from(h) * cycles[k] + 0.7 * f64::from(h);
                        let m = f64::from(a.order) * f64::from(h);
                        s += amp
                            * match a.pattern {
                                PatternArg::Spinning => (wt - m * theta).cos(),
                                PatternArg::Standing => (m * theta).cos() * wt.cos(),
                                PatternArg::Axisymmetric => wt.cos(),
                            };
                    }
                }
                *v = s;
            }
            chans.push(x);
        }
        let peak = chans.iter().flatten().fold(0.0f64, |m, v| m.max(v.abs()));
        // The gauge transducer of a ramp, in volts: 1e5 Pa per volt over 0-10 V.
        if ramp.is_some() {
            chans.push((0..n).map(|k| (npr_at(k as f64 / fs) - 1.0) * AMBIENT_PA / PA_PER_VOLT).collect());
        }
        let all = chans.len();
        let x: Vec<f64> = (0..n).flat_map(|k| chans.iter().map(move |c| c[k])).collect();
        if peak >= a.full_scale_pa {
            return Err(Failure::Usage(format!(
                "the signal peaks at {peak:.0} Pa, above --full-scale-pa {}: raise it",
                a.full_scale_pa
            )));
        }
        let werr = |e: std::io::Error| Failure::Usage(format!("cannot write {}: {e}", a.out.display()));
        let pa_per_count = a.full_scale_pa / 32_768.0;
        match kind {
            OutKind::Wav => {
                let spec = hound::WavSpec {
                    channels: all as u16,
                    sample_rate: a.sample_rate_hz,
                    bits_per_sample: 32,
                    sample_format: hound::SampleFormat::Float,
                };
                let herr = |e: hound::Error| Failure::Usage(format!("cannot write {}: {e}", a.out.display()));
                let mut w = hound::WavWriter::create(&a.out, spec).map_err(herr)?;
                for (i, v) in x.iter().enumerate() {
                    let unit = if i % all == mics { CONTROL_FULL_SCALE_V } else { a.full_scale_pa };
                    w.write_sample((v / unit) as f32).map_err(herr)?;
                }
                w.finalize().map_err(herr)?;
            }
            OutKind::Csv => {
                use std::io::Write;
                let mut w = std::io::BufWriter::new(std::fs::File::create(&a.out).map_err(werr)?);
                let mut names: Vec<String> =
                    (0..mics).map(|j| format!("mic_{:03}deg", 360 * j / mics)).collect();
                if ramp.is_some() {
                    names.push("gauge_v".into());
                }
                writeln!(w, "{}", names.join(",")).map_err(werr)?;
                for frame in x.chunks(all) {
                    let row: Vec<String> = frame.iter().map(|v| format!("{v:.5}")).collect();
                    writeln!(w, "{}", row.join(",")).map_err(werr)?;
                }
                w.flush().map_err(werr)?;
            }
            OutKind::RawI16 => {
                let bytes: Vec<u8> = x
                    .iter()
                    .flat_map(|v| {
                        ((v / pa_per_count).round().clamp(-32_768.0, 32_767.0) as i16).to_le_bytes()
                    })
                    .collect();
                std::fs::write(&a.out, bytes).map_err(werr)?;
            }
        }
        let az: Vec<String> = (0..mics).map(|j| format!("{}", 360.0 * j as f64 / mics as f64)).collect();
        let modes = if mics > 1 { format!(" --azimuths-deg {}", az.join(",")) } else { String::new() };
        let (calibration, control_per_unit) = match kind {
            OutKind::Wav => {
                (format!("--pa-per-unit {}", a.full_scale_pa), CONTROL_FULL_SCALE_V * PA_PER_VOLT)
            }
            OutKind::Csv => (format!("--sample-rate-hz {} --in-pascals", a.sample_rate_hz), PA_PER_VOLT),
            OutKind::RawI16 => (
                format!(
                    "--raw-format i16 --channels {all} --sample-rate-hz {} --pa-per-unit {pa_per_count}",
                    a.sample_rate_hz
                ),
                CONTROL_FULL_SCALE_V / 32_768.0 * PA_PER_VOLT,
            ),
        };
        let analyse = if ramp.is_some() {
            format!(
                "jetloop ramp {} {calibration} --control-channel {mics} --control gauge-pa --control-per-unit \
                 {control_per_unit} --ambient-pressure-pa {AMBIENT_PA}",
                a.out.display()
            )
        } else {
            format!("jetloop tones {} {calibration}{modes}", a.out.display())
        };
        Ok(Report::new(format!("Wrote {} (demo data: an imagined cold model-scale jet)", a.out.display()))
            .text("kind", "file kind", kind.describe())
            .num("sample_rate_hz", "sample rate", fs, "Hz")
            .num("duration_s", "duration", a.seconds, "s")
            .num("screech_hz", "screech fundamental", a.screech_hz, "Hz")
            .num("screech_db", "fundamental level", a.screech_db, "dB re 20 uPa")
            .num("hump_hz", "shock-noise hump centre", a.hump_hz, "Hz")
            .num("full_scale_pa", "full scale", a.full_scale_pa, "Pa")
            .int("microphones", "microphones on the ring", u64::from(a.ring), "")
            .text("analyse_with", "analyse with", analyse))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> demo file and report, without a server (synth never connects).

    use super::*;

    #[test]
    fn powell_shape_is_silent_until_the_jet_is_supersonic_and_falls_with_npr() {
        assert_eq!(powell_shape(1.8), None, "sonic below NPR 1.893");
        let (lo, hi) = (powell_shape(2.5).expect("supersonic"), powell_shape(4.5).expect("supersonic"));
        assert!(lo > hi && hi > 0.0, "{lo} {hi}");
        assert!((rms_of(94.0) - 1.002_4).abs() < 1e-4, "94 dB re 20 uPa is about 1 Pa rms");
    }

    #[test]
    fn a_ring_of_two_is_written_as_csv_columns_named_by_azimuth() {
        let dir = std::env::temp_dir().join(format!("jetloop-synth-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let out = dir.join("mics.csv");
        let line = format!(
            "synth {} --ring 2 --seconds 0.01 --sample-rate-hz 8000 --screech-hz 1000 --hump-hz 2000",
            out.display()
        );
        let crate::Command::Synth(a) = crate::tests::command(&line) else { panic!("not synth") };
        let ctx = Ctx::new("http://127.0.0.1:1".into(), None, Default::default(), None);
        let rt = tokio::runtime::Builder::new_current_thread().build().expect("runtime");
        let v = rt.block_on(a.run(&ctx)).expect("written").to_json();
        let text = std::fs::read_to_string(&out).expect("csv");
        assert_eq!(text.lines().next(), Some("mic_000deg,mic_180deg"));
        assert_eq!(text.lines().count(), 1 + 80, "header and 0.01 s at 8 kHz");
        assert_eq!(v["microphones"], serde_json::json!(2));
        assert_eq!(
            v["analyse_with"],
            serde_json::json!(format!(
                "jetloop tones {} --sample-rate-hz 8000 --in-pascals --azimuths-deg 0,180",
                out.display()
            ))
        );
        let crate::Command::Synth(a) = crate::tests::command("synth x.txt") else { panic!("not synth") };
        let e = rt.block_on(a.run(&ctx)).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains(".wav, .csv or .bin/.raw")), "{e:?}");
        let _ = std::fs::remove_dir_all(dir);
    }
}
