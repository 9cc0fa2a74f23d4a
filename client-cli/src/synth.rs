//! `jetloop synth`: demo recordings of an imagined jet rig, written without a server.

use crate::output::Report;
use crate::{Ctx, Failure, Run};
use clap::Args;
use std::path::PathBuf;

/// `jetloop synth`: a demo recording of an imagined cold model-scale jet rig.
#[derive(Debug, Args)]
pub struct SynthCmd {
    /// Output WAV file (32-bit float, normalized to --full-scale-pa).
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
    #[arg(long, requires = "jump_at_s")]
    jump_to_hz: Option<f64>,
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

fn rms_of(db: f64) -> f64 {
    20e-6 * 10f64.powf(db / 20.0)
}

/// Runs `synth` (no server needed).
impl Run for SynthCmd {
    async fn run(self, _ctx: &Ctx) -> Result<Report, Failure> {
        let a = self;
        use std::f64::consts::PI;
        let fs = f64::from(a.sample_rate_hz);
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
        // Hump: white noise through a two-pole resonance, scaled to its overall level; each
        // microphone has its own hump and background noise.
        let (rr, th) = (0.995, 2.0 * PI * a.hump_hz / fs);
        let (a1, a2) = (2.0 * rr * th.cos(), -rr * rr);
        let mut chans = Vec::with_capacity(mics);
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
                let t = k as f64 / fs;
                let mut s = hump_k * hump[k] + noise_sigma * gauss();
                for h in 1..=a.harmonics {
                    let amp = rms_of(a.screech_db - 9.0 * f64::from(h - 1)) * 2f64.sqrt();
                    // Phase of the fundamental, continuous through a jump.
                    let (f_now, cycles) = match a.jump_at_s {
                        Some(tj) if t >= tj => {
                            let f1 = a.jump_to_hz.unwrap_or(1.12 * a.screech_hz);
                            (f1, a.screech_hz * tj + f1 * (t - tj))
                        }
                        _ => (a.screech_hz, a.screech_hz * t),
                    };
                    if f64::from(h) * f_now < fs / 2.0 {
                        let wt = 2.0 * PI * f64::from(h) * cycles + 0.7 * f64::from(h);
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
        let x: Vec<f64> = (0..n).flat_map(|k| chans.iter().map(move |c| c[k])).collect();
        let peak = x.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        if peak >= a.full_scale_pa {
            return Err(Failure::Usage(format!(
                "the signal peaks at {peak:.0} Pa, above --full-scale-pa {}: raise it",
                a.full_scale_pa
            )));
        }
        let spec = hound::WavSpec {
            channels: a.ring as u16,
            sample_rate: a.sample_rate_hz,
            bits_per_sample: 32,
            sample_format: hound::SampleFormat::Float,
        };
        let werr = |e: hound::Error| Failure::Usage(format!("cannot write {}: {e}", a.out.display()));
        let mut w = hound::WavWriter::create(&a.out, spec).map_err(werr)?;
        for v in &x {
            w.write_sample((v / a.full_scale_pa) as f32).map_err(werr)?;
        }
        w.finalize().map_err(werr)?;
        Ok(Report::new(format!("Wrote {} (demo data: an imagined cold model-scale jet)", a.out.display()))
            .num("sample_rate_hz", "sample rate", fs, "Hz")
            .num("duration_s", "duration", a.seconds, "s")
            .num("screech_hz", "screech fundamental", a.screech_hz, "Hz")
            .num("screech_db", "fundamental level", a.screech_db, "dB re 20 uPa")
            .num("hump_hz", "shock-noise hump centre", a.hump_hz, "Hz")
            .num("full_scale_pa", "full scale (use --pa-per-unit)", a.full_scale_pa, "Pa")
            .int("microphones", "microphones on the ring", u64::from(a.ring), "")
            .text(
                "analyse_with",
                "analyse with",
                if mics > 1 {
                    let az: Vec<String> =
                        (0..mics).map(|j| format!("{}", 360.0 * j as f64 / mics as f64)).collect();
                    format!(
                        "jetloop tones {} --pa-per-unit {} --azimuths-deg {}",
                        a.out.display(),
                        a.full_scale_pa,
                        az.join(",")
                    )
                } else {
                    format!("jetloop tones {} --pa-per-unit {}", a.out.display(), a.full_scale_pa)
                },
            ))
    }
}
