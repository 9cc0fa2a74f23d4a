//! One-third-octave band levels: the validated question and the answer.

use super::*;
use crate::api::Compute;
use crate::cancel::Cancel;

/// A validated band-level question.
#[derive(Debug, Clone)]
pub struct BandQuery {
    samples: SampleSet,
    welch: WelchConfig,
    max_hz: f64,
    corrections: Vec<crate::dsp::corrections::ChannelCorrection>,
    defaults: Defaults,
}

impl BandQuery {
    /// The same question, its analysis stopped once `cancel` is set.
    pub fn with_cancel(mut self, cancel: crate::cancel::Cancel) -> Self {
        self.samples.cancel = cancel;
        self
    }
}

impl TryFrom<pb::BandLevelsRequest> for BandQuery {
    type Error = ApiError;

    fn try_from(req: pb::BandLevelsRequest) -> Result<Self, ApiError> {
        let pb::BandLevelsRequest { samples, welch, max_band_frequency_hz, corrections } = req;
        let mut defaults = Defaults::default();
        let samples = sample_set(samples, &mut defaults)?;
        let mut check = Check::new();
        let w = welch_config(&mut check, &mut defaults, welch, samples.fs, samples.recording.len());
        let max_hz = match max_band_frequency_hz {
            None => 100_000.0,
            Some(f) => check.range("", BAND_MAX.check("max_band_frequency_hz", f)).unwrap_or(100_000.0),
        };
        let corrections =
            level_corrections(&mut check, &mut defaults, corrections, samples.recording.channel_count());
        check.finish(w.map(|welch| BandQuery { samples, welch, max_hz, corrections, defaults }))
    }
}

pub(super) fn band_summary(b: &BandLevels) -> pb::BandSummary {
    pb::BandSummary {
        bands: b
            .bands
            .iter()
            .map(|x| pb::OneThirdOctaveBand {
                nominal_hz: x.nominal_hz,
                exact_hz: x.exact_hz,
                lower_edge_hz: x.lower_hz,
                upper_edge_hz: x.upper_hz,
                level_db: x.level_db,
                a_weighted_level_db: x.a_weighted_level_db,
                resolved: x.resolved,
            })
            .collect(),
        overall_level_db: b.overall_db,
        a_weighted_overall_db: b.a_weighted_overall_db,
        band_span_level_db: b.band_span_db,
        outside_span_level_db: b.outside_span_db,
    }
}

impl Compute for BandQuery {
    type Response = pb::BandLevelsResponse;

    /// Runs the band analysis and builds the response.
    ///
    /// # Errors
    /// As [`ToneQuery::compute`].
    fn compute(self, cancel: &Cancel) -> Result<pb::BandLevelsResponse, ApiError> {
        let q = &self.with_cancel(cancel.clone());
        let mut out = Vec::new();
        for c in 0..q.samples.recording.channel_count() {
            let mut psd = q.samples.psd(c, q.welch)?;
            let applied = q.corrections.get(c).map(|cc| cc.apply(&mut psd)).unwrap_or_default();
            let b = band_levels(&psd, q.max_hz);
            let mut cautions = Vec::new();
            if b.overall_db >= CAUTION_LEVEL_DB {
                cautions.push(caution(b.overall_db, "The overall level"));
            }
            out.push(pb::ChannelBands {
                channel: c as u32,
                name: q.samples.names.get(c).cloned().unwrap_or_default(),
                analysis: Some(analysis(&psd, q.samples.recording.len(), None)),
                bands: Some(band_summary(&b)),
                cautions,
                corrections_applied: applied.notes.into_iter().chain(applied.warnings).collect(),
            });
        }
        let mut used = SPECTRUM_MODELS.to_vec();
        used.extend([models::THIRD_OCTAVE, models::A_WEIGHTING]);
        used.extend(super::corrections::correction_models(&q.corrections));
        Ok(pb::BandLevelsResponse {
            channels: out,
            provenance: Some(provenance(&used, &q.defaults, Vec::new())),
        })
    }
}
