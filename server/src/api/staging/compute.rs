//! FitStages: the fit of a validated question and its response message (point and stage
//! labels, fitted parameters, verdict).

use super::{LabelPlan, StagingQuery};
use crate::api::error::ApiError;
use crate::api::provenance::provenance;
use crate::api::Compute;
use crate::cancel::Cancel;
use crate::physics::jet;
use crate::physics::models;
use crate::physics::staging::{
    compare_models, fit_stages_until, infer_directions, Direction, FitVerdict, Param, Point, StagingResult,
    SweepKind,
};
use jetloop_proto::pb;

/// The best guided-mode match of each point's tone, from the jet at its x.
fn label_points(
    plan: &LabelPlan,
    kind: SweepKind,
    points: &[Point],
    cancel: &Cancel,
) -> Result<Vec<Option<pb::StageMatch>>, ApiError> {
    let mut out = Vec::with_capacity(points.len());
    for p in points {
        cancel.check().map_err(ApiError::Stopped)?;
        let npr = match kind {
            SweepKind::Npr => Some(p.x),
            SweepKind::Mach => Some(plan.gas.npr_for_mach(p.x)),
            SweepKind::Reflector | SweepKind::Plain => None,
        };
        let op = match npr {
            Some(n) => plan.op.with_npr(n).ok(),
            None => Some(plan.op),
        };
        let jet = op
            .and_then(|op| jet::ExpandedJet::from_state(&jet::jet_state(&plan.gas, &plan.nozzle, &op)).ok());
        let ctx = jet.and_then(|j| {
            crate::api::stage_labels::StageContext::for_jet(&j, &plan.options, plan.tolerance, Vec::new())
        });
        out.push(ctx.and_then(|c| c.label(p.f).into_iter().next()));
    }
    Ok(out)
}

/// The mode most of a stage's points fit, its match at the fitting point nearest the middle of
/// the stage's x range, and the fraction of points that fit it.
fn stage_label(
    members: &[usize],
    points: &[Point],
    labels: &[Option<pb::StageMatch>],
) -> Option<(pb::StageMatch, f64)> {
    let mut counts: Vec<(pb::GuidedModeId, usize)> = Vec::new();
    for &i in members {
        if let Some(m) = labels[i].as_ref().and_then(|l| l.mode) {
            match counts.iter_mut().find(|(id, _)| *id == m) {
                Some((_, c)) => *c += 1,
                None => counts.push((m, 1)),
            }
        }
    }
    let (mode, count) = counts.into_iter().max_by_key(|(_, c)| *c)?;
    let (lo, hi) = members
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &i| (a.min(points[i].x), b.max(points[i].x)));
    let mid = 0.5 * (lo + hi);
    let best = members
        .iter()
        .filter(|&&i| labels[i].as_ref().and_then(|l| l.mode) == Some(mode))
        .min_by(|&&a, &&b| (points[a].x - mid).abs().total_cmp(&(points[b].x - mid).abs()))
        .and_then(|&i| labels[i].clone())?;
    Some((best, count as f64 / members.len() as f64))
}

fn param_msg(p: &Param) -> pb::FittedParameter {
    pb::FittedParameter {
        name: p.name.to_string(),
        value: p.value,
        standard_error: p.se,
        unit: p.unit.to_string(),
        at_bound: p.at_bound,
        fixed: p.fixed,
    }
}

fn direction_msg(d: Direction) -> pb::SweepDirection {
    match d {
        Direction::Increasing => pb::SweepDirection::Increasing,
        Direction::Decreasing => pb::SweepDirection::Decreasing,
        Direction::Unknown => pb::SweepDirection::Unspecified,
    }
}

impl Compute for StagingQuery {
    type Response = pb::FitStagesResponse;

    /// Runs the staging and builds the response.
    ///
    /// # Errors
    /// [`ApiError::Stopped`] once `cancel` is set.
    fn compute(self, cancel: &Cancel) -> Result<pb::FitStagesResponse, ApiError> {
        let q = self;
        let StagingQuery { kind, mut points, physics, labels, config, mut defaults, started, nozzle_size_m } =
            q;
        infer_directions(&mut points);
        let res: StagingResult = fit_stages_until(&points, kind, physics.as_deref(), &config, cancel)?;
        let point_labels = match &labels {
            Some(plan) => Some(label_points(plan, kind, &points, cancel)?),
            None => None,
        };
        let mut out_points: Vec<pb::PointResult> = points
            .iter()
            .enumerate()
            .map(|(i, p)| pb::PointResult {
                index: i as u32,
                stage: res.stage_of[i] as u32,
                direction: direction_msg(p.direction) as i32,
                best_stage: point_labels.as_ref().and_then(|l| l[i].clone()),
                ..Default::default()
            })
            .collect();
        let mut stages = Vec::with_capacity(res.stages.len());
        for (s, st) in res.stages.iter().enumerate() {
            let mut msg = pb::StageResult {
                stage: s as u32,
                x_min: st.x_range.0,
                x_max: st.x_range.1,
                point_count: st.points.len() as u32,
                smooth_coefficients: st.smooth.clone(),
                smooth_rms_hz: st.smooth_rms_hz,
                ..Default::default()
            };
            msg.rms_relative_error = st.rms_relative_error(&points);
            if let Some(l) = &point_labels {
                if let Some((best, fraction)) = stage_label(&st.points, &points, l) {
                    msg.best_stage = Some(best);
                    msg.best_stage_point_fraction = fraction;
                }
            }
            if let Some(fit) = &st.fit {
                for (k, &i) in st.points.iter().enumerate() {
                    let model = fit.model_hz[k];
                    let p = &mut out_points[i];
                    p.loop_order = Some(fit.n);
                    p.model_frequency_hz = Some(model);
                    p.residual_hz = Some(points[i].f - model);
                }
                msg.loop_order = Some(fit.n);
                msg.parameters = fit.params.iter().map(param_msg).collect();
                msg.equivalent_loop_orders = fit.equivalent_orders.clone();
                msg.alias_resolution = fit.resolution.clone();
                msg.chi_square = Some(fit.chi2);
                msg.fit_verdict = verdict_msg(fit.verdict) as i32;
                msg.fit_p_value = fit.p_value;
                let dof = st.points.len().saturating_sub(fit.free);
                msg.reduced_chi_square = (dof > 0).then(|| fit.chi2 / dof as f64);
                if let (Some(r), Some(d), SweepKind::Npr | SweepKind::Mach) =
                    (msg.reduced_chi_square, nozzle_size_m, kind)
                {
                    defaults.caution(misfit_caution(r, d));
                }
            }
            stages.push(msg);
        }
        let jumps = res
            .jumps
            .iter()
            .map(|j| pb::StageJump {
                direction: direction_msg(j.direction) as i32,
                x_before: j.x_before,
                x_after: j.x_after,
                from_stage: j.from as u32,
                to_stage: j.to as u32,
                frequency_before_hz: j.f_before,
                frequency_after_hz: j.f_after,
            })
            .collect();
        let hysteresis = res
            .hysteresis
            .iter()
            .map(|h| pb::HysteresisInterval {
                x_low: h.x_low,
                x_high: h.x_high,
                lower_stage: h.stages.0 as u32,
                upper_stage: h.stages.1 as u32,
            })
            .collect();
        let models_cmp: Vec<pb::ModelComparison> = compare_models(&res)
            .into_iter()
            .map(|m| pb::ModelComparison {
                model: m.name.into(),
                parameter_count: m.parameter_count as u32,
                chi_square: m.chi2,
                aic: m.aic,
                bic: m.bic,
                preferred: m.preferred,
            })
            .collect();
        let shared_loop = res.shared.as_ref().map(|sh| pb::SharedLoopResult {
            loop_orders: sh.orders.clone(),
            parameters: sh.params.iter().map(param_msg).collect(),
            alias_resolution: sh.resolution.clone(),
            fit_verdict: verdict_msg(sh.verdict) as i32,
            fit_p_value: sh.p_value,
        });
        let mut used = vec![models::STAGE_SEGMENTATION];
        let mut notes = Vec::new();
        match kind {
            SweepKind::Npr | SweepKind::Mach => {
                used.extend([models::POWELL_LOOP, models::VORTEX_SHEET_CELLS, models::FULLY_EXPANDED_JET])
            }
            SweepKind::Reflector => used.push(models::POWELL_LOOP),
            SweepKind::Plain => notes.push(
                "A plain control variable has no loop model: stages, jumps and smooth fits only.".to_string(),
            ),
        }
        if matches!(kind, SweepKind::Npr | SweepKind::Mach) && config.source_cells_fixed.is_none() {
            notes.push(
                "The source cell was searched, not given: one stage of a pressure sweep constrains the loop time, so \
                 neighbouring (n, N) pairs can fit almost equally well; see each stage's alias_resolution."
                    .to_string(),
            );
        }
        if let Some(plan) = &labels {
            used.push(models::GUIDED_JET_MODES);
            notes.extend(crate::api::guided::guided_notes());
            notes.push(format!(
                "Stage labels: each point's tone against the guided-mode bands of the jet at its x \
                 (in a band or within {} % of an edge); a stage takes the mode most of its points fit.",
                100.0 * plan.tolerance
            ));
        }
        Ok(pb::FitStagesResponse {
            points: out_points,
            stages,
            jumps,
            hysteresis,
            models: models_cmp,
            shared_loop,
            compute_time_s: started.elapsed().as_secs_f64(),
            warnings: res.warnings,
            provenance: Some(provenance(&used, &defaults, notes)),
        })
    }
}

fn verdict_msg(v: FitVerdict) -> pb::FitVerdict {
    match v {
        FitVerdict::Consistent => pb::FitVerdict::Consistent,
        FitVerdict::ResidualsAboveNoise => pb::FitVerdict::ResidualsAboveNoise,
        FitVerdict::NoFreedom => pb::FitVerdict::NoFreedom,
    }
}

/// Reduced chi-square above which a loop fit is said to miss by orders of magnitude: a fit
/// within its stated noise has chi^2/dof near 1 (Bevington & Robinson, Data Reduction and
/// Error Analysis, ch. 11), so 10^3 is three orders beyond it.
pub const MISFIT_REDUCED_CHI_SQUARE: f64 = 1e3;

/// A caution for a stage fit of an NPR or Mj sweep whose chi^2/dof `reduced` is orders of
/// magnitude above the stated noise, naming the nozzle size `d_m` (m) that scales the loop
/// frequencies (millimetres typed as metres give a loop 1000 times too slow).
fn misfit_caution(reduced: f64, d_m: f64) -> Option<String> {
    (reduced > MISFIT_REDUCED_CHI_SQUARE).then(|| {
        format!(
            "caution: a stage's loop fit misses its points by far more than their stated noise \
             (chi^2/dof = {reduced:.3e}); the loop frequencies scale with 1/(nozzle size): check the unit of \
             jet.nozzle's exit size ({d_m} m){}",
            if d_m > crate::physics::jet::plausible::LARGEST_USUAL_LENGTH_M {
                format!(", which reads as millimetres ({} m)", d_m / 1000.0)
            } else {
                String::new()
            }
        )
    })
}
