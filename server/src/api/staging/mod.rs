//! StagingService: measured sweeps converted to domain points (with the jet physics at each
//! x for pressure sweeps), and the staging result turned into the response.

use super::conditions::jet_spec;
use super::error::{ApiError, Check};
use super::field::Fields;
use super::provenance::Defaults;
use crate::physics::bounds::Bounds;
use crate::physics::gas::Gas;
use crate::physics::jet;
use crate::physics::staging::limits::{CELLS, FREQ, MACH_X, REFLECTOR_X, SIGMA};
use crate::physics::staging::{
    pressure_sweep_physics, Direction, FitConfig, FitDefaults, Point, PointPhysics, ReflectorPath, SweepKind,
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
    /// The nozzle's size (m) that scales the loop model of an NPR or Mj sweep, for the caution
    /// when the fit misses by orders of magnitude (a size in the wrong unit).
    nozzle_size_m: Option<f64>,
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
        let nozzle_size_m = jet.spec.as_ref().map(|(_, n, _)| n.shape().reference_length_m());
        let q = kind.map(|kind| StagingQuery {
            kind,
            points: pts,
            physics,
            labels,
            config,
            defaults,
            started,
            nozzle_size_m,
        });
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
        // Not used by this sweep, so no default is recorded; a given value is still checked
        // against the bounds staging.proto documents for every sweep (NaN and infinities
        // refused, not carried into the fit configuration).
        let given = reflector_path_factor
            .and_then(|g| check.range("options", FitDefaults::REFLECTOR_PATH_FACTOR.check(g)));
        ReflectorPath::Fixed(given.unwrap_or(d.path_factor))
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
                    defaults.absorb(&spec.defaults);
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

mod compute;
