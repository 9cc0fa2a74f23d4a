//! The report of a stage fit (`fit`): stages with their loop-model parameters and how well
//! they fit, jumps, hysteresis loops and the model comparison.

use crate::render::report::fmt_plain;
use crate::render::report::fmt_uncertain;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::render::rows::mode_label;
use jetloop_proto::pb;
use std::path::Path;

/// A fitted parameter as text: its value with the digits its standard error supports, and
/// whether it was held fixed or ended at a bound.
pub(crate) fn param_text(p: &pb::FittedParameter) -> String {
    let mut s = match p.standard_error {
        Some(se) => fmt_uncertain(p.value, se),
        None => fmt_plain(p.value),
    };
    if p.fixed {
        s.push_str(" (fixed)");
    }
    if p.at_bound {
        s.push_str(" (at bound)");
    }
    s
}

/// The loop fit's verdict against the stated noise, with its reduced chi^2.
pub(crate) fn verdict_text(s: &pb::StageResult) -> Option<Val> {
    let chi = s.reduced_chi_square.map(|c| format!(" (chi^2/dof {c:.2})")).unwrap_or_default();
    match pb::FitVerdict::try_from(s.fit_verdict) {
        Ok(pb::FitVerdict::Consistent) => Some(Val::Text(format!("ok{chi}"))),
        Ok(pb::FitVerdict::ResidualsAboveNoise) => Some(Val::Text(format!("ABOVE NOISE{chi}"))),
        Ok(pb::FitVerdict::NoFreedom) => Some(Val::Text("no freedom".into())),
        _ => None,
    }
}

/// The parameter called `name`, if the fit has one.
pub(crate) fn find<'a>(ps: &'a [pb::FittedParameter], name: &str) -> Option<&'a pb::FittedParameter> {
    ps.iter().find(|p| p.name == name)
}

/// One row per stage: its x range, points, loop order, convection ratio, source cells, fixed
/// delay (s), reflector path factor, error and verdict, and with `labelled` the guided mode
/// its points fit.
pub(crate) fn stages_table(stages: &[pb::StageResult], labelled: bool) -> Table {
    let mut t = Table::new("stages", "Stages")
        .col("stage", "stage")
        .col("x_min", "x from")
        .col("x_max", "x to")
        .col("point_count", "points")
        .col("loop_order", "n")
        .col("convection_ratio", "Uc/Uj")
        .col("source_cells", "N cells")
        .col("fixed_delay_s", "tau0 [s]")
        .col("reflector_path_factor", "path factor g")
        .col("rms_relative_error", "rms rel. err.")
        .col("fit_verdict", "fit vs noise");
    if labelled {
        t = t.col("stage_label", "guided mode (share of points)");
    }
    for s in stages {
        let text = |n: &str| find(&s.parameters, n).map(|p| Val::Text(param_text(p)));
        let label = s.best_stage.as_ref().map(|b| {
            let id = b.mode.as_ref().map(mode_label).unwrap_or_default();
            let letters =
                if b.customary_stage.is_empty() { String::new() } else { format!(" {}", b.customary_stage) };
            Val::Text(format!("{id}{letters} ({:.0} %)", 100.0 * s.best_stage_point_fraction))
        });
        let mut row = vec![
            Some(Val::Int(s.stage.into())),
            Some(Val::Num(s.x_min)),
            Some(Val::Num(s.x_max)),
            Some(Val::Int(s.point_count.into())),
            s.loop_order.map(|n| Val::Int(n.into())),
            text("convection_ratio"),
            text("source_cells"),
            text("fixed_delay_s"),
            text("reflector_path_factor"),
            s.rms_relative_error.map(Val::Num),
            verdict_text(s),
        ];
        if labelled {
            row.push(Some(label.unwrap_or(Val::Text("none".into()))));
        }
        t.row(row);
    }
    t
}

/// The FitStages answer for `file`: the stages (see [`stages_table`]), jumps, hysteresis,
/// model comparison, warnings and loop-order ambiguities.
pub(crate) fn fit_report(r: pb::FitStagesResponse, file: &Path, labelled: bool) -> Report {
    let stages = stages_table(&r.stages, labelled);
    let mut jumps = Table::new("jumps", "Jumps")
        .col("direction", "sweep")
        .col("x_before", "x before")
        .col("x_after", "x after")
        .col("from_stage", "from")
        .col("to_stage", "to")
        .col("frequency_before_hz", "f before [Hz]")
        .col("frequency_after_hz", "f after [Hz]");
    for j in &r.jumps {
        let d = match pb::SweepDirection::try_from(j.direction) {
            Ok(pb::SweepDirection::Increasing) => "up",
            Ok(pb::SweepDirection::Decreasing) => "down",
            _ => "-",
        };
        jumps.row(vec![
            Some(Val::Text(d.into())),
            Some(Val::Num(j.x_before)),
            Some(Val::Num(j.x_after)),
            Some(Val::Int(j.from_stage.into())),
            Some(Val::Int(j.to_stage.into())),
            Some(Val::Num(j.frequency_before_hz)),
            Some(Val::Num(j.frequency_after_hz)),
        ]);
    }
    let mut hyst = Table::new("hysteresis", "Hysteresis")
        .col("x_low", "x from")
        .col("x_high", "x to")
        .col("lower_stage", "stage below")
        .col("upper_stage", "stage above");
    for h in &r.hysteresis {
        hyst.row(vec![
            Some(Val::Num(h.x_low)),
            Some(Val::Num(h.x_high)),
            Some(Val::Int(h.lower_stage.into())),
            Some(Val::Int(h.upper_stage.into())),
        ]);
    }
    let mut models = Table::new("models", "Model comparison")
        .col("model", "model")
        .col("parameter_count", "parameters")
        .col("chi_square", "chi^2")
        .col("aic", "AIC")
        .col("bic", "BIC")
        .col("preferred", "preferred");
    for m in &r.models {
        models.row(vec![
            Some(Val::Text(m.model.clone())),
            Some(Val::Int(m.parameter_count.into())),
            Some(Val::Num(m.chi_square)),
            Some(Val::Num(m.aic)),
            Some(Val::Num(m.bic)),
            Some(Val::Flag(m.preferred)),
        ]);
    }
    let mut rep = Report::new(format!(
        "Stages of {} ({} points, {:.2} ms server time)",
        file.display(),
        r.points.len(),
        r.compute_time_s * 1e3
    ))
    .table(stages)
    .table(jumps)
    .table(hyst)
    .table(models);
    for w in &r.warnings {
        rep = rep.text("warning", "warning", w.clone());
    }
    for s in &r.stages {
        if !s.alias_resolution.is_empty() {
            rep = rep.text(
                "alias",
                "loop-order ambiguity",
                format!("stage {}: {}", s.stage, s.alias_resolution),
            );
        }
    }
    rep.provenance(r.provenance)
}

#[cfg(test)]
mod tests {
    //! Fit answers built by hand -> rows, without a server.

    use super::*;
    use serde_json::json;

    fn param(name: &str, value: f64, standard_error: Option<f64>, fixed: bool) -> pb::FittedParameter {
        pb::FittedParameter { name: name.into(), value, standard_error, fixed, ..Default::default() }
    }

    #[test]
    fn parameters_keep_the_digits_their_error_supports_and_say_when_fixed() {
        assert_eq!(
            param_text(&param("convection_ratio", 0.6234, Some(0.0021), false)),
            fmt_uncertain(0.6234, 0.0021)
        );
        assert_eq!(param_text(&param("source_cells", 4.0, None, true)), "4 (fixed)");
        let at_bound = pb::FittedParameter { at_bound: true, ..param("convection_ratio", 0.9, None, false) };
        assert_eq!(param_text(&at_bound), "0.9 (at bound)");
        let s = pb::StageResult {
            fit_verdict: pb::FitVerdict::ResidualsAboveNoise as i32,
            reduced_chi_square: Some(4.321),
            ..Default::default()
        };
        assert_eq!(verdict_text(&s), Some(Val::Text("ABOVE NOISE (chi^2/dof 4.32)".into())));
    }

    #[test]
    fn a_stage_row_shows_its_loop_fit_and_its_guided_mode_when_labelled() {
        let s = pb::StageResult {
            stage: 2,
            x_min: 3.15,
            x_max: 3.8,
            point_count: 14,
            loop_order: Some(4),
            parameters: vec![
                param("convection_ratio", 0.58, None, false),
                param("source_cells", 4.0, None, true),
            ],
            fit_verdict: pb::FitVerdict::Consistent as i32,
            reduced_chi_square: Some(0.97),
            best_stage: Some(pb::StageMatch {
                mode: Some(pb::GuidedModeId {
                    shape: pb::ModeShape::Round as i32,
                    azimuthal_order: 1,
                    radial_order: 1,
                }),
                customary_stage: "C".into(),
                ..Default::default()
            }),
            best_stage_point_fraction: 0.857,
            ..Default::default()
        };
        let csv = stages_table(std::slice::from_ref(&s), true).to_csv();
        assert_eq!(
            csv.lines().nth(1),
            Some("2,3.15,3.8,14,4,0.58,4 (fixed),,,,ok (chi^2/dof 0.97),m=1 r1 C (86 %)")
        );
        let unlabelled = stages_table(&[s], false).to_csv();
        assert!(!unlabelled.contains("stage_label"), "{unlabelled}");
    }

    #[test]
    fn jumps_hysteresis_models_and_ambiguities_are_all_reported() {
        let r = pb::FitStagesResponse {
            stages: vec![pb::StageResult {
                stage: 1,
                alias_resolution: "n = 4 over 5".into(),
                ..Default::default()
            }],
            jumps: vec![pb::StageJump {
                direction: pb::SweepDirection::Decreasing as i32,
                x_before: 2.9,
                x_after: 2.85,
                from_stage: 2,
                to_stage: 1,
                ..Default::default()
            }],
            hysteresis: vec![pb::HysteresisInterval {
                x_low: 2.875,
                x_high: 3.125,
                lower_stage: 1,
                upper_stage: 2,
            }],
            models: vec![pb::ModelComparison {
                model: "shared loop".into(),
                preferred: true,
                ..Default::default()
            }],
            warnings: vec!["few points".into()],
            compute_time_s: 0.0016,
            ..Default::default()
        };
        let rep = fit_report(r, Path::new("sweep.csv"), false);
        let v = rep.to_json();
        assert_eq!(v["jumps"][0]["direction"], json!("down"));
        assert_eq!(
            v["hysteresis"][0],
            json!({"x_low": 2.875, "x_high": 3.125, "lower_stage": 1, "upper_stage": 2})
        );
        assert_eq!(v["models"][0]["preferred"], json!(true));
        assert_eq!(v["alias"], json!("stage 1: n = 4 over 5"));
        assert_eq!(v["warning"], json!("few points"));
        assert!(rep.to_table().starts_with("Stages of sweep.csv (0 points, 1.60 ms server time)\n"));
    }
}
