//! Tone extraction: options, the validated question and the per-channel answer.

use super::*;
use crate::api::Compute;
use crate::cancel::Cancel;

/// Tone options at `tones`: each checked against its bounds or its default applied and
/// recorded (defaults are the [`ToneConfig`] settings).
pub(super) fn tone_config(
    check: &mut Check,
    defaults: &mut Defaults,
    o: Option<pb::ToneOptions>,
) -> ToneConfig {
    let pb::ToneOptions {
        threshold_db,
        min_separation_hz,
        floor_window_bins,
        max_tones,
        harmonic_tolerance_bins,
        max_harmonic_order,
    } = o.unwrap_or_default();
    let d = ToneConfig::default();
    let mut f = crate::api::field::Fields::new(check, defaults, "tones");
    ToneConfig {
        threshold_db: f.read(threshold_db, &ToneConfig::THRESHOLD_DB).unwrap_or(d.threshold_db),
        min_separation_hz: f
            .read(min_separation_hz, &ToneConfig::MIN_SEPARATION_HZ)
            .unwrap_or(d.min_separation_hz),
        floor_window_bins: f
            .read_count(floor_window_bins, &ToneConfig::FLOOR_WINDOW_BINS)
            .unwrap_or(d.floor_window_bins),
        max_tones: f.read_count(max_tones, &ToneConfig::MAX_TONES).unwrap_or(d.max_tones),
        harmonic_tolerance_bins: f
            .read(harmonic_tolerance_bins, &ToneConfig::HARMONIC_TOLERANCE_BINS)
            .unwrap_or(d.harmonic_tolerance_bins),
        max_harmonic_order: f
            .read_count(max_harmonic_order, &ToneConfig::MAX_HARMONIC_ORDER)
            .map_or(d.max_harmonic_order, |v| v as u32),
    }
}

/// A validated tone-extraction question with its decoded samples.
#[derive(Debug, Clone)]
pub struct ToneQuery {
    pub(super) started: std::time::Instant,
    pub(super) samples: SampleSet,
    pub(super) welch: WelchConfig,
    pub(super) tones: ToneConfig,
    pub(super) predicted: Option<(f64, f64)>,
    pub(super) bands: Option<f64>,
    pub(super) psd_points: Option<Option<usize>>,
    pub(super) stages: Option<crate::api::stage_labels::StageContext>,
    /// Level corrections, one per channel, or none.
    pub(super) corrections: Vec<crate::dsp::corrections::ChannelCorrection>,
    pub(super) defaults: Defaults,
}

impl ToneQuery {
    /// The same question, its analysis stopped once `cancel` is set.
    pub fn with_cancel(mut self, cancel: crate::cancel::Cancel) -> Self {
        self.samples.cancel = cancel;
        self
    }
}

impl TryFrom<pb::ExtractTonesRequest> for ToneQuery {
    type Error = ApiError;

    fn try_from(req: pb::ExtractTonesRequest) -> Result<Self, ApiError> {
        tone_query(req, None)
    }
}

/// Converts a tone request. `stream` is `Some(expected frames per channel, if known)` for the
/// first message of a block stream, whose data is still to come.
pub(super) fn tone_query(
    req: pb::ExtractTonesRequest,
    stream: Option<Option<u64>>,
) -> Result<ToneQuery, ApiError> {
    let pb::ExtractTonesRequest {
        samples,
        welch,
        tones,
        predicted_screech_hz,
        match_tolerance_fraction,
        include_band_levels,
        max_band_frequency_hz,
        psd_output,
        stage_labels,
        corrections,
    } = req;
    let started = std::time::Instant::now();
    let mut defaults = Defaults::default();
    let (samples, known) = samples_and_known(samples, &mut defaults, stream)?;
    let stages = match stage_labels {
        Some(o) => Some(crate::api::stage_labels::stage_context(o, "stage_labels", &mut defaults)?),
        None => None,
    };
    let mut check = Check::new();
    let w = welch_config(&mut check, &mut defaults, welch, samples.fs, known);
    let tones = tone_config(&mut check, &mut defaults, tones);
    let corrections =
        level_corrections(&mut check, &mut defaults, corrections, samples.recording.channel_count());
    let predicted = predicted_screech_hz.and_then(|f| {
        let f = check.range("", PREDICTED.check("predicted_screech_hz", f))?;
        let tol = match match_tolerance_fraction {
            None => 0.05,
            Some(t) => check.range("", MATCH_TOL.check("match_tolerance_fraction", t))?,
        };
        Some((f, tol))
    });
    let bands = include_band_levels.then(|| match max_band_frequency_hz {
        None => 100_000.0,
        Some(f) => check.range("", BAND_MAX.check("max_band_frequency_hz", f)).unwrap_or(100_000.0),
    });
    let psd_points = psd_output.filter(|p| p.include).map(|p| {
        p.max_points.and_then(|m| {
            check.range("psd_output", PSD_POINTS.check("max_points", f64::from(m))).map(|v| v as usize)
        })
    });
    let q = w.map(|welch| ToneQuery {
        started,
        samples,
        welch,
        tones,
        predicted,
        bands,
        psd_points,
        stages,
        corrections,
        defaults,
    });
    check.finish(q)
}

/// Mean-square ratio of the mean to the spread above which an undetrended channel is flagged
/// (the offset is then above 10 % of the rms: common practice for DC leakage).
const OFFSET_RATIO: f64 = 0.01;

/// Sentences about what may make channel `c`'s figures wrong.
fn channel_warnings(q: &ToneQuery, c: usize, psd: &Psd, set: &ToneSet) -> Vec<String> {
    let mut w = Vec::new();
    if let Some((n, full)) = q.samples.recording.clipped(c) {
        if n > 0 {
            w.push(format!(
                "{n} samples are at full scale ({full:.4e} Pa): the signal is clipped, levels read low and \
                 clipping adds spurious harmonics; reduce the gain or raise the range"
            ));
        }
    }
    let m = &psd.moments;
    let var = m.rms_about_mean().powi(2);
    if psd.config.detrend == Detrend::None && m.mean * m.mean > OFFSET_RATIO * var {
        w.push(format!(
            "the mean is {:.4e} Pa against an rms of {:.4e} Pa about it and detrending is off: the offset \
             leaks into the lowest bins (and low tones read high); use DETREND_KIND_MEAN",
            m.mean,
            m.rms_about_mean()
        ));
    }
    for &(a, b) in &set.unresolved {
        let (fa, fb) = (set.tones[a].frequency_hz, set.tones[b].frequency_hz);
        w.push(format!(
            "the tones at {fa:.2} Hz and {fb:.2} Hz lie closer than the window's main lobe ({} bins): their \
             frequencies and levels are biased; use a longer segment (finer resolution) to separate them",
            2 * psd.config.window.main_lobe_half_width_bins()
        ));
    }
    for &i in &set.broad {
        let t = &set.tones[i];
        w.push(format!(
            "the peak at {:.2} Hz is {:.2} Hz wide at -3 dB, more than {} times the widest a single steady tone \
             shows with this window ({:.2} Hz): two tones inside one main lobe, or a tone wandering in frequency; \
             its frequency and level are not those of one tone; use a longer segment to resolve it",
            t.frequency_hz,
            t.bandwidth_3db_hz,
            crate::dsp::tones::BROAD_FACTOR,
            crate::dsp::tones::single_tone_width_bins(psd.config.window) * psd.resolution_hz()
        ));
    }
    if set.below_dynamic_range > 0 {
        w.push(format!(
            "{} peaks more than {} dB below the strongest line were left out (rounding noise, beyond any \
             measurement chain's dynamic range)",
            set.below_dynamic_range,
            crate::dsp::tones::DYNAMIC_RANGE_DB
        ));
    }
    w
}

pub(super) fn analysis(psd: &Psd, samples: usize, tones: Option<&ToneSet>) -> pb::AnalysisParameters {
    pb::AnalysisParameters {
        window: psd.config.window.name().to_string(),
        segment_length: psd.config.nperseg as u32,
        overlap_samples: psd.config.noverlap as u32,
        averages: psd.segments as u32,
        frequency_resolution_hz: psd.resolution_hz(),
        enbw_hz: psd.enbw_hz(),
        enbw_bins: psd.sums.enbw_bins(),
        coherent_gain: psd.sums.coherent_gain(),
        detrend: match psd.config.detrend {
            Detrend::Mean => "mean",
            Detrend::None => "none",
        }
        .into(),
        window_kind: super::welch::window_kind(psd.config.window) as i32,
        detrend_kind: match psd.config.detrend {
            Detrend::Mean => pb::DetrendKind::Mean,
            Detrend::None => pb::DetrendKind::None,
        } as i32,
        normalized_random_error: psd.normalized_random_error(),
        sample_rate_hz: psd.fs,
        samples_per_channel: samples as u64,
        unused_samples: psd.unused_samples as u64,
        frequency_estimator: tones.map(|t| t.estimator.to_string()).unwrap_or_default(),
        floor_estimator: tones
            .map(|_| "running median of ln(PSD) over floor_window_bins bins".to_string())
            .unwrap_or_default(),
    }
}

pub(super) fn caution(level_db: f64, what: &str) -> String {
    format!(
        "{what} reaches {level_db:.1} dB re 20 uPa, above {CAUTION_LEVEL_DB} dB: hearing damage is possible \
         near the rig. Follow local occupational-noise codes (common limits 85 dB(A) daily exposure, \
         140 dB(C) peak) and the facility's procedures."
    )
}

fn psd_data(psd: &Psd, floor: Option<&[f64]>, max_points: Option<usize>) -> pb::PsdData {
    let bins = psd.density.len();
    let g = max_points.map_or(1, |m| bins.div_ceil(m).max(1));
    let avg =
        |v: &[f64]| -> Vec<f64> { v.chunks(g).map(|c| c.iter().sum::<f64>() / c.len() as f64).collect() };
    let freqs: Vec<f64> = (0..bins).map(|k| psd.frequency(k)).collect();
    pb::PsdData {
        frequency_hz: avg(&freqs),
        density_pa2_per_hz: avg(&psd.density),
        floor_pa2_per_hz: floor.map(avg).unwrap_or_default(),
        decimation: g as u32,
    }
}

pub(super) const SPECTRUM_MODELS: [Model; 2] = [models::WELCH_PSD, models::SPL];

impl Compute for ToneQuery {
    type Response = pb::ExtractTonesResponse;

    /// Runs the tone extraction and builds the response.
    ///
    /// # Errors
    /// None in practice: every configuration was checked against the data length; a failure is
    /// reported as FAILED_PRECONDITION.
    fn compute(self, cancel: &Cancel) -> Result<pb::ExtractTonesResponse, ApiError> {
        let q = &self.with_cancel(cancel.clone());
        let psds = (0..q.samples.recording.channel_count())
            .map(|c| q.samples.psd(c, q.welch))
            .collect::<Result<Vec<_>, _>>()?;
        Ok(tones_message(q, &psds, q.started))
    }
}

/// The answer from one PSD per channel; `t` is when the server's work began.
pub(super) fn tones_message(q: &ToneQuery, psds: &[Psd], t: std::time::Instant) -> pb::ExtractTonesResponse {
    let mut out = Vec::with_capacity(psds.len());
    for (c, measured) in psds.iter().enumerate() {
        // Corrections act on a copy of the PSD; the rms then comes from the corrected density.
        let mut corrected = None;
        let mut applied = crate::dsp::corrections::Applied::default();
        if let Some(cc) = q.corrections.get(c).filter(|cc| !cc.is_empty()) {
            let mut p = measured.clone();
            applied = cc.apply(&mut p);
            corrected = Some(p);
        }
        let psd = corrected.as_ref().unwrap_or(measured);
        let set = find_tones(psd, &q.tones);
        let rms_pa = match &corrected {
            Some(p) => p.mean_square_pa2().sqrt(),
            None => psd.moments.rms_about_mean(),
        };
        let overall = spl_db(rms_pa * rms_pa);
        let mut cautions = Vec::new();
        if let Some(t) = set.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db)) {
            if t.level_db >= CAUTION_LEVEL_DB {
                cautions.push(caution(t.level_db, &format!("The tone at {:.1} Hz", t.frequency_hz)));
            }
        }
        if overall >= CAUTION_LEVEL_DB {
            cautions.push(caution(overall, "The overall level"));
        }
        let mut warnings = channel_warnings(q, c, psd, &set);
        warnings.extend(applied.warnings);
        let predicted_match = q.predicted.map(|(f, tol)| {
            let m = match_prediction(&set, f, tol);
            pb::PredictionMatch {
                predicted_hz: m.predicted_hz,
                tone_index: m.nearest.map(|(i, _)| i as u32),
                tone_frequency_hz: m.nearest.map(|(_, f)| f),
                difference_hz: m.difference_hz(),
                relative_difference: m.difference_hz().map(|d| d / m.predicted_hz),
                matched: m.matched(),
                tolerance_hz: m.tolerance_hz,
            }
        });
        out.push(pb::ChannelSpectrum {
            channel: c as u32,
            name: q.samples.names.get(c).cloned().unwrap_or_default(),
            analysis: Some(analysis(psd, q.samples.recording.len(), Some(&set))),
            rms_pa,
            overall_level_db: overall,
            tones: set
                .tones
                .iter()
                .map(|t| {
                    let harmonic = t.family.is_some_and(|f| f.1 >= 2);
                    let stages = match &q.stages {
                        Some(ctx) if !harmonic => ctx.label(t.frequency_hz),
                        _ => Vec::new(),
                    };
                    pb::ExtractedTone {
                        best_stage: stages.first().cloned(),
                        stages,
                        frequency_hz: t.frequency_hz,
                        peak_bin_frequency_hz: t.peak_bin_hz,
                        level_db: t.level_db,
                        mean_square_pa2: t.mean_square_pa2,
                        peak_density_pa2_per_hz: t.peak_density,
                        floor_density_pa2_per_hz: t.floor_density,
                        tone_to_floor_db: t.tone_to_floor_db,
                        bandwidth_3db_hz: t.bandwidth_3db_hz,
                        family: t.family.map(|f| f.0 as u32),
                        harmonic_order: t.family.map(|f| f.1),
                    }
                })
                .collect(),
            families: set
                .families
                .iter()
                .enumerate()
                .map(|(i, f)| pb::HarmonicFamily {
                    id: i as u32,
                    fundamental_hz: f.fundamental_hz,
                    tone_indices: f.members.iter().map(|m| m.0 as u32).collect(),
                    orders: f.members.iter().map(|m| m.1).collect(),
                    level_db: f.level_db,
                })
                .collect(),
            combinations: set
                .combinations
                .iter()
                .map(|c| pb::CombinationTone {
                    tone_index: c.tone as u32,
                    family_a: c.families.0 as u32,
                    family_b: c.families.1 as u32,
                    is_sum: c.sum,
                    expected_hz: c.expected_hz,
                })
                .collect(),
            predicted_match,
            bands: q.bands.map(|m| band_summary(&band_levels(psd, m))),
            psd: q.psd_points.map(|m| psd_data(psd, Some(&set.floor), m)),
            cautions,
            warnings,
            corrections_applied: applied.notes,
        });
    }
    let mut used = SPECTRUM_MODELS.to_vec();
    used.push(models::TONE_EXTRACTION);
    used.extend(super::corrections::correction_models(&q.corrections));
    if q.bands.is_some() {
        used.push(models::THIRD_OCTAVE);
        used.push(models::A_WEIGHTING);
    }
    let notes = q.stages.as_ref().map(crate::api::stage_labels::StageContext::notes).unwrap_or_default();
    if q.stages.is_some() {
        used.push(models::GUIDED_JET_MODES);
        used.push(models::FULLY_EXPANDED_JET);
    }
    pb::ExtractTonesResponse {
        channels: out,
        compute_time_s: t.elapsed().as_secs_f64(),
        stage_bands: q.stages.as_ref().map(crate::api::stage_labels::StageContext::bands).unwrap_or_default(),
        stage_sheet: q.stages.as_ref().map(crate::api::stage_labels::StageContext::sheet),
        provenance: Some(provenance(&used, &q.defaults, notes)),
    }
}
