//! StagingService: measured sweeps converted to domain points (with the jet physics at each
//! x for pressure sweeps), and the staging result turned into the response.

use super::conditions::jet_spec;
use super::error::{ApiError, Check};
use super::field::Fields;
use super::provenance::{provenance, Defaults};
use super::Compute;
use crate::cancel::Cancel;
use crate::physics::bounds::Bounds;
use crate::physics::gas::Gas;
use crate::physics::jet;
use crate::physics::models;
use crate::physics::staging::limits::{CELLS, FREQ, MACH_X, REFLECTOR_X, SIGMA};
use crate::physics::staging::{
    compare_models, fit_stages_until, infer_directions, pressure_sweep_physics, Direction, FitConfig,
    FitDefaults, FitVerdict, Param, Point, PointPhysics, ReflectorPath, StagingResult, SweepKind,
};
use jetloop_proto::pb;

/// Most points in one request.
pub const MAX_POINTS: usize = 100_000;
/// Most points in one request with stage labels (each point's guided modes take about half a
/// millisecond).
pub const MAX_LABELLED_POINTS: usize = 2_000;

/// What stage labels need: the jet conditions (pressure replaced per point for NPR and Mj
/// sweeps) and the guided-mode settings.
#[derive(Debug, Clone)]
struct LabelPlan {
    gas: Gas,
    nozzle: jet::Nozzle,
    op: jet::OperatingPoint,
    options: crate::physics::guided::ClosureOptions,
    tolerance: f64,
}

/// A validated staging question with the physics evaluated at each point.
#[derive(Debug, Clone)]
pub struct StagingQuery {
    kind: SweepKind,
    points: Vec<Point>,
    physics: Option<Vec<PointPhysics>>,
    labels: Option<LabelPlan>,
    config: FitConfig,
    defaults: Defaults,
    started: std::time::Instant,
}

/// Records the first five bad points, each at `points[i].<leaf>` (the point itself when the
/// leaf is empty).
fn bad_points(check: &mut Check, bad: &[(usize, &str, String)]) {
    for (i, leaf, msg) in bad.iter().take(5) {
        let path = if leaf.is_empty() { format!("points[{i}]") } else { format!("points[{i}].{leaf}") };
        check.other(path.clone(), format!("{path}: {msg}"));
    }
    if bad.len() > 5 {
        check.other(
            "points",
            format!("points: {} more points are invalid (the first 5 are listed)", bad.len() - 5),
        );
    }
}

impl TryFrom<pb::FitStagesRequest> for StagingQuery {
    type Error = ApiError;

    fn try_from(req: pb::FitStagesRequest) -> Result<Self, ApiError> {
        let started = std::time::Instant::now();
        let pb::FitStagesRequest { control, points, jet: jet_msg, options, stage_labels } = req;
        check_sizes(&points, stage_labels.is_some())?;
        let mut check = Check::new();
        let mut defaults = Defaults::default();
        let kind = control_kind(&mut check, control);
        if points.len() < 3 {
            check.other("points", format!("points has {} entries; at least 3 are needed", points.len()));
        }
        let (mut config, rel) = fit_options(&mut check, &mut defaults, options, kind);
        let pts = measured_points(&mut check, &mut defaults, &points, kind, rel);
        let jet = sweep_jet(&mut check, &mut defaults, jet_msg, kind, &pts)?;
        config.a_amb = jet.a_amb;
        let labels = label_plan(&mut check, &mut defaults, stage_labels, kind, &jet);
        let physics = jet.physics;
        let q =
            kind.map(|kind| StagingQuery { kind, points: pts, physics, labels, config, defaults, started });
        check.finish(q)
    }
}

/// Refuses more points than one request may carry (fewer with stage labels).
fn check_sizes(points: &[pb::MeasuredTone], labelled: bool) -> Result<(), ApiError> {
    if labelled && points.len() > MAX_LABELLED_POINTS {
        return Err(ApiError::TooLarge {
            field: "points".into(),
            limit: format!("{MAX_LABELLED_POINTS} points with stage_labels"),
            actual: format!("{} points", points.len()),
        });
    }
    if points.len() > MAX_POINTS {
        return Err(ApiError::TooLarge {
            field: "points".into(),
            limit: format!("{MAX_POINTS} points"),
            actual: format!("{} points", points.len()),
        });
    }
    Ok(())
}

/// The control variable of the sweep.
fn control_kind(check: &mut Check, control: i32) -> Option<SweepKind> {
    match pb::ControlVariable::try_from(control) {
        Ok(pb::ControlVariable::NozzlePressureRatio) => Some(SweepKind::Npr),
        Ok(pb::ControlVariable::FullyExpandedMachNumber) => Some(SweepKind::Mach),
        Ok(pb::ControlVariable::ReflectorDistanceM) => Some(SweepKind::Reflector),
        Ok(pb::ControlVariable::Plain) => Some(SweepKind::Plain),
        Ok(pb::ControlVariable::Unspecified) | Err(_) => {
            check.other(
                "control",
                format!("control = {control} must be CONTROL_VARIABLE_NOZZLE_PRESSURE_RATIO, _FULLY_EXPANDED_MACH_NUMBER, _REFLECTOR_DISTANCE_M or _PLAIN"),
            );
            None
        }
    }
}

/// The fit options at `options` (each checked or its default recorded), as a fit
/// configuration whose ambient sound speed is set later, and the default relative frequency
/// uncertainty of points.
fn fit_options(
    check: &mut Check,
    defaults: &mut Defaults,
    options: Option<pb::FitOptions>,
    kind: Option<SweepKind>,
) -> (FitConfig, f64) {
    // Unpacked by name: a new option fails to compile here until its meaning is decided.
    let pb::FitOptions {
        jump_fraction,
        max_loop_order,
        convection_ratio_min,
        convection_ratio_max,
        source_cells,
        source_cells_min,
        source_cells_max,
        fit_fixed_delay,
        reflector_path_factor,
        fit_reflector_path_factor,
        default_relative_uncertainty,
    } = options.unwrap_or_default();
    let d = FitDefaults::DEFAULT;
    // Each option checked against its bounds, or its default applied and recorded.
    let mut f = Fields::new(check, defaults, "options");
    let rel = f
        .read(default_relative_uncertainty, &FitDefaults::DEFAULT_RELATIVE_UNCERTAINTY)
        .unwrap_or(d.relative_uncertainty);
    let jump_fraction = f.read(jump_fraction, &FitDefaults::JUMP_FRACTION).unwrap_or(d.jump_fraction);
    let max_order =
        f.read_count(max_loop_order, &FitDefaults::MAX_LOOP_ORDER).map_or(d.max_order, |v| v as u32);
    let kmin = f.read(convection_ratio_min, &FitDefaults::CONVECTION_RATIO_MIN).unwrap_or(d.kappa.0);
    let kmax = f.read(convection_ratio_max, &FitDefaults::CONVECTION_RATIO_MAX).unwrap_or(d.kappa.1);
    let cmin =
        f.read(source_cells_min.map(f64::from), &FitDefaults::SOURCE_CELLS_MIN).unwrap_or(d.source_cells.0);
    let cmax =
        f.read(source_cells_max.map(f64::from), &FitDefaults::SOURCE_CELLS_MAX).unwrap_or(d.source_cells.1);
    if kmin >= kmax {
        check.other(
            "options.convection_ratio_max",
            format!("options.convection_ratio_max = {kmax} must exceed convection_ratio_min = {kmin}"),
        );
    }
    if cmin > cmax {
        check.other(
            "options.source_cells_max",
            format!("options.source_cells_max = {cmax} is below source_cells_min = {cmin}"),
        );
    }
    let fixed_cells =
        source_cells.and_then(|c| check.range("options", CELLS.check("source_cells", f64::from(c))));
    let reflector = if fit_reflector_path_factor {
        if reflector_path_factor.is_some() {
            check.other(
                "options.reflector_path_factor",
                "options.reflector_path_factor must be unset when fit_reflector_path_factor is true \
                 (the factor is then fitted within its bounds)",
            );
        }
        ReflectorPath::Free(d.path_factor_bounds.0, d.path_factor_bounds.1)
    } else if kind == Some(SweepKind::Reflector) {
        ReflectorPath::Fixed(
            Fields::new(check, defaults, "options")
                .read(reflector_path_factor, &FitDefaults::REFLECTOR_PATH_FACTOR)
                .unwrap_or(d.path_factor),
        )
    } else {
        ReflectorPath::Fixed(reflector_path_factor.unwrap_or(d.path_factor))
    };
    let fit_delay = match fit_fixed_delay {
        Some(b) => b,
        None => {
            defaults.note("options.fit_fixed_delay", "true", "the fixed loop delay is fitted");
            true
        }
    };

    let config = FitConfig {
        jump_fraction,
        max_order,
        kappa: (kmin, kmax),
        source_cells: (cmin, cmax),
        source_cells_fixed: fixed_cells,
        reflector,
        fit_delay,
        a_amb: f64::NAN,
    };
    (config, rel)
}

/// The measured tones as fit points; bad points (the first five) are recorded at
/// `points[i].<field>`.
fn measured_points(
    check: &mut Check,
    defaults: &mut Defaults,
    points: &[pb::MeasuredTone],
    kind: Option<SweepKind>,
    rel: f64,
) -> Vec<Point> {
    // Points.
    let mut pts = Vec::with_capacity(points.len());
    let mut bad = Vec::new();
    for (i, p) in points.iter().enumerate() {
        // Unpacked by name: a new field fails to compile here until its meaning is decided.
        let pb::MeasuredTone {
            x,
            frequency_hz,
            level_db: _,
            frequency_uncertainty_hz,
            direction,
            acquisition_index,
        } = *p;
        if !x.is_finite() {
            bad.push((i, "x", format!("x = {x} is not a finite number")));
            continue;
        }
        let range = match kind {
            Some(SweepKind::Reflector) => Some(REFLECTOR_X),
            Some(SweepKind::Mach) => Some(MACH_X),
            // The gas's own critical ratio is applied per point below, with the jet physics
            // (a gas other than air has another one).
            Some(SweepKind::Npr) => Some(Bounds::open_closed(jet::NPR.min, jet::NPR.max, "")),
            Some(SweepKind::Plain) | None => None,
        };
        if let Some(b) = range.filter(|b| !b.contains(x)) {
            bad.push((i, "x", format!("x = {x} is outside the allowed range {b} for this control variable")));
            continue;
        }
        if !FREQ.contains(frequency_hz) {
            bad.push((
                i,
                "frequency_hz",
                format!("frequency_hz = {frequency_hz} is outside the allowed range {FREQ}"),
            ));
            continue;
        }
        let sigma = match frequency_uncertainty_hz {
            Some(s) if !SIGMA.contains(s) => {
                bad.push((
                    i,
                    "frequency_uncertainty_hz",
                    format!("frequency_uncertainty_hz = {s} is outside the allowed range {SIGMA}"),
                ));
                continue;
            }
            Some(s) => s,
            None => rel * frequency_hz,
        };
        let direction = match pb::SweepDirection::try_from(direction) {
            Ok(pb::SweepDirection::Increasing) => Direction::Increasing,
            Ok(pb::SweepDirection::Decreasing) => Direction::Decreasing,
            Ok(pb::SweepDirection::Unspecified) => Direction::Unknown,
            Err(_) => {
                bad.push((i, "direction", format!("direction = {direction} is not a SweepDirection value")));
                continue;
            }
        };
        pts.push(Point { x, f: frequency_hz, sigma, direction, order: acquisition_index });
    }
    bad_points(check, &bad);
    if bad.is_empty() && pts.len() >= 3 && pts.iter().all(|p| p.x == pts[0].x && p.f == pts[0].f) {
        check.other(
            "points",
            "points: all points are the same (x and frequency): there is nothing to segment or fit",
        );
    }
    if points.iter().any(|p| p.frequency_uncertainty_hz.is_none()) {
        defaults.note(
            "points[].frequency_uncertainty_hz",
            &format!("{rel} x frequency"),
            "default relative uncertainty",
        );
    }

    pts
}

/// The jet of a sweep: the ambient sound speed (all kinds), the physics at each point
/// (pressure sweeps), and the conditions kept for stage labels.
struct SweepJet {
    a_amb: f64,
    physics: Option<Vec<PointPhysics>>,
    pressure_given: bool,
    spec: Option<(Gas, jet::Nozzle, jet::OperatingPoint)>,
}

/// Converts the sweep's jet and evaluates the physics at each point of a pressure sweep.
fn sweep_jet(
    check: &mut Check,
    defaults: &mut Defaults,
    jet_msg: Option<pb::JetConditions>,
    kind: Option<SweepKind>,
    pts: &[Point],
) -> Result<SweepJet, ApiError> {
    // Jet physics at each x for pressure sweeps; the ambient sound speed for all kinds.
    let mut a_amb = Gas::AIR.sound_speed(jet::ISA_SEA_LEVEL_TEMPERATURE_K);
    let mut physics = None;
    let mut pressure_given = false;
    let mut spec_kept = None;
    let needs_jet = matches!(kind, Some(SweepKind::Npr | SweepKind::Mach));
    match jet_msg {
        None if needs_jet => check.missing("jet", "NPR and Mj sweeps need the nozzle, temperatures and gas"),
        None => defaults.note("jet", "ISA sea level, dry air", "ambient sound speed 340.29 m/s"),
        Some(mut c) => {
            // The pressure is replaced by each point's x: fill a placeholder so the
            // conditions convert.
            let op = c.operating_point.get_or_insert_with(Default::default);
            pressure_given = op.pressure.is_some();
            if op.pressure.is_none() {
                op.pressure = Some(pb::operating_point::Pressure::NozzlePressureRatio(2.0));
            }
            match jet_spec(Some(c), "jet") {
                Err(ApiError::Invalid(v)) => {
                    for fv in v {
                        check.other(fv.field, fv.description);
                    }
                }
                Err(e) => return Err(e),
                Ok(spec) => {
                    a_amb = spec.op.ambient_gas().sound_speed(spec.op.ambient_temperature_k());
                    spec_kept = Some((spec.gas, spec.nozzle, spec.op));
                    defaults.0.extend(spec.defaults.0.iter().cloned());
                    if let (true, Some(kind)) = (needs_jet && check.is_clean(), kind) {
                        let xs: Vec<f64> = pts.iter().map(|p| p.x).collect();
                        let (ph, not_supersonic) =
                            pressure_sweep_physics(&spec.gas, &spec.nozzle, &spec.op, kind, &xs);
                        let bad: Vec<_> = not_supersonic
                            .into_iter()
                            .map(|i| {
                                (
                                    i,
                                    "x",
                                    format!(
                                        "x = {}: the jet is not supersonic there (no shock cells)",
                                        xs[i]
                                    ),
                                )
                            })
                            .collect();
                        bad_points(check, &bad);
                        physics = Some(ph);
                    }
                }
            }
        }
    }
    Ok(SweepJet { a_amb, physics, pressure_given, spec: spec_kept })
}

/// What stage labels need, when asked for.
fn label_plan(
    check: &mut Check,
    defaults: &mut Defaults,
    stage_labels: Option<pb::StageLabelSettings>,
    kind: Option<SweepKind>,
    jet: &SweepJet,
) -> Option<LabelPlan> {
    match stage_labels {
        None => None,
        Some(st) => {
            let pb::StageLabelSettings { modes, band_tolerance_fraction } = st;
            match (kind, jet.spec) {
                (Some(SweepKind::Plain), _) => {
                    check.other(
                        "stage_labels",
                        "stage_labels: a plain control variable gives no jet to label stages with",
                    );
                    None
                }
                (Some(SweepKind::Reflector), _) if !jet.pressure_given => {
                    check.other(
                        "jet.operating_point.pressure",
                        "stage_labels of a reflector sweep need the jet's pressure in jet.operating_point",
                    );
                    None
                }
                (Some(_), None) => {
                    check.missing("jet", "stage labels need the jet conditions");
                    None
                }
                (Some(_), Some((gas, nozzle, op))) => {
                    let size = jet::jet_state(&gas, &nozzle, &op).size;
                    if matches!(size, jet::JetSize::Rectangular { .. }) {
                        check.other(
                            "stage_labels",
                            "stage_labels need a round or planar nozzle (guided modes); this one is rectangular",
                        );
                        None
                    } else {
                        let round = matches!(size, jet::JetSize::Round { .. });
                        super::stage_labels::label_settings(
                            check,
                            defaults,
                            modes,
                            band_tolerance_fraction,
                            "stage_labels",
                            round,
                        )
                        .map(|(options, tolerance)| LabelPlan {
                            gas,
                            nozzle,
                            op,
                            options,
                            tolerance,
                        })
                    }
                }
                (None, _) => None,
            }
        }
    }
}

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
            super::stage_labels::StageContext::for_jet(&j, &plan.options, plan.tolerance, Vec::new())
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
        let StagingQuery { kind, mut points, physics, labels, config, defaults, started } = q;
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
            notes.extend(super::guided::guided_notes());
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
