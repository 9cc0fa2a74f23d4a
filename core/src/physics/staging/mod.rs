//! Stage segmentation and feedback-loop fits of measured tone sweeps.
//!
//! **Segmentation.** Points are split into sweep passes: in acquisition order where given,
//! cut where the direction changes (directions inferred from the order where not given);
//! otherwise one pass per direction. Inside a pass, each point joins the open branch whose
//! prediction is nearest, if within the jump threshold of it; otherwise it starts a branch.
//! Pressure sweeps compare f T(x), with T = Ls (1/(kappa Uj) + 1/a) the loop time per loop
//! order of Powell's model at mid-range kappa: constant along a stage however fast f moves
//! (near Mj = 1), and different loop orders stay apart by their ratio. Other sweeps follow
//! local straight lines in f. Branches are linked into stages across passes where they overlap
//! and agree, or continue each other across a gap; two branches of one pass that overlap in x
//! coexist and are never one stage. The threshold is the jump fraction, raised to four
//! standard deviations of the stated frequency uncertainty when that is larger (with a
//! warning: stages closer than the noise cannot be separated). Jumps are read per pass as the
//! x where the set of stages present changes; hysteresis intervals are where an increasing and
//! a decreasing pass jump between the same two stages at different x.
//!
//! **Loop fits.** Powell's criterion `f = n / tau(x)` with an integer loop order n per stage:
//! - pressure sweeps (x = NPR or Mj): `tau = N Ls(x) (1/(kappa Uj(x)) + 1/a) + tau0`, the
//!   source N (whole) shock cells downstream, vortex-sheet spacing Ls and jet velocity Uj
//!   computed from the jet at each x;
//! - reflector sweeps (x = displacement d): `tau = tau0 + g d / a`.
//!
//! Both are linear in their continuous parameters once written for n/f, so every fit inside
//! is a weighted linear least-squares problem (weights from the frequency uncertainties),
//! with the covariance giving standard errors. The integer part is a grid: pressure sweeps
//! try every loop order n in 1..=n_max and every whole source cell N (or the given one) and
//! keep the lowest chi^2; reflector sweeps get n from the slope g/n with g fixed (or, with g
//! free, the smallest n putting g within its bounds). The alias — n, N and tau0 all doubled
//! fit exactly as well — goes to the smallest n, and the fits the data cannot tell apart
//! (delta chi^2 <= 1) are reported. Physical bounds on kappa (default 0.4-0.9) constrain the
//! fit: with N fixed, a wrong n needs a kappa outside them, which is how the bounds resolve the
//! loop order; a kappa outside them is held at the bound and flagged. Without a given N, one
//! stage of a pressure sweep constrains only the loop time, so N and n stay ambiguous between
//! neighbours (reported). A shared-loop model (one kappa, N, tau0 or one tau0, g for all
//! stages, n per stage) is compared with the per-stage model by AIC and BIC. Every fit carries
//! a verdict from the chi-square upper tail with its degrees of freedom: below 0.001 the
//! residuals are far above the stated noise, and the answer says so.

use super::bounds::Setting;
use super::cells;
use super::gas::Gas;
use super::jet::{jet_state, ExpandedJet, Nozzle, OperatingPoint};
use crate::cancel::{Cancel, Stopped};

mod pressure;
mod reflector;
mod segment;
mod shared;

pub use pressure::fit_pressure_stage;
pub use reflector::fit_reflector_stage;
pub use segment::{infer_directions, loop_scale, segment, stages, Separation, NOISE_SIGMAS};
use shared::{shared_pressure, shared_reflector};

/// What the control value means.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SweepKind {
    /// Nozzle pressure ratio.
    Npr,
    /// Fully expanded Mach number.
    Mach,
    /// Reflector displacement, m.
    Reflector,
    /// A plain variable: segmentation only.
    Plain,
}

/// Sweep direction of a point.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Direction {
    /// Control value increasing.
    Increasing,
    /// Control value decreasing.
    Decreasing,
    /// Not known.
    Unknown,
}

/// One measured tone.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Point {
    /// Control value.
    pub x: f64,
    /// Frequency, Hz.
    pub f: f64,
    /// Standard uncertainty of f, Hz.
    pub sigma: f64,
    /// Sweep direction.
    pub direction: Direction,
    /// Acquisition index.
    pub order: Option<u64>,
}

/// Physics at each point for pressure sweeps.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PointPhysics {
    /// Vortex-sheet shock-cell spacing, m.
    pub ls_m: f64,
    /// Fully expanded jet velocity, m/s.
    pub uj_m_s: f64,
}

/// Fit settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitConfig {
    /// Relative frequency change that separates stages.
    pub jump_fraction: f64,
    /// Highest loop order.
    pub max_order: u32,
    /// Bounds on kappa = Uc/Uj.
    pub kappa: (f64, f64),
    /// Bounds on the source position in cells (searched when not given).
    pub source_cells: (f64, f64),
    /// Source position in cells when given (held fixed).
    pub source_cells_fixed: Option<f64>,
    /// Reflector path factor g (fixed) or its bounds (free).
    pub reflector: ReflectorPath,
    /// Fit the fixed delay tau0 (pressure sweeps).
    pub fit_delay: bool,
    /// Ambient sound speed, m/s.
    pub a_amb: f64,
}

/// Allowed ranges of the staging inputs, defined once.
pub mod limits {
    use crate::physics::Bounds;

    /// Allowed tone frequency of a measured point, Hz.
    pub const FREQ: Bounds = Bounds::open_closed(0.0, 1e7, "Hz");
    /// Allowed frequency uncertainty of a point, Hz.
    pub const SIGMA: Bounds = Bounds::open_closed(0.0, 1e6, "Hz");
    /// Allowed relative frequency change that separates stages.
    pub const JUMP: Bounds = Bounds::open_closed(0.0, 1.0, "");
    /// Allowed highest loop order.
    pub const ORDER: Bounds = Bounds::closed(1.0, 50.0, "");
    /// Allowed convection ratio bounds Uc/Uj.
    pub const KAPPA: Bounds = Bounds::open_closed(0.0, 1.5, "");
    /// Allowed source position, whole shock cells.
    pub const CELLS: Bounds = Bounds::closed(1.0, 50.0, "cells");
    /// Allowed reflector path factor.
    pub const G: Bounds = Bounds::open_closed(0.0, 10.0, "");
    /// Allowed default relative frequency uncertainty.
    pub const REL: Bounds = Bounds::open_closed(0.0, 0.5, "");
    /// Allowed reflector displacement of a reflector sweep, m.
    pub const REFLECTOR_X: Bounds = Bounds::closed(0.0, 1000.0, "m");
    /// Allowed fully expanded Mach number of an Mj sweep.
    pub const MACH_X: Bounds = Bounds::open_closed(1.0, 6.0, "");
}

/// Default fit settings, in one place (the API records each one it applies).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitDefaults {
    /// Relative frequency change that separates stages.
    pub jump_fraction: f64,
    /// Highest loop order searched.
    pub max_order: u32,
    /// Bounds on kappa = Uc/Uj (physical convection ratios; common practice).
    pub kappa: (f64, f64),
    /// Source cells searched when not given.
    pub source_cells: (f64, f64),
    /// Reflector path factor when held fixed (twice the displacement; common practice).
    pub path_factor: f64,
    /// Bounds of the reflector path factor when fitted.
    pub path_factor_bounds: (f64, f64),
    /// Relative frequency uncertainty of points that give none.
    pub relative_uncertainty: f64,
}

impl FitDefaults {
    /// Relative frequency change that separates stages: 5 %, above the drift of a stage
    /// over a sweep step and below the 10-20 % jumps between stages (common practice).
    pub const JUMP_FRACTION: Setting =
        Setting::new("jump_fraction", limits::JUMP, 0.05, "5 % separates stages");
    /// Highest loop order searched.
    pub const MAX_LOOP_ORDER: Setting =
        Setting::new("max_loop_order", limits::ORDER, 10.0, "loop orders searched up to 10");
    /// Lower bound on kappa = Uc/Uj.
    pub const CONVECTION_RATIO_MIN: Setting = Setting::new(
        "convection_ratio_min",
        limits::KAPPA,
        0.4,
        "physical convection ratios of screeching jets (common practice)",
    );
    /// Upper bound on kappa = Uc/Uj.
    pub const CONVECTION_RATIO_MAX: Setting = Setting::new(
        "convection_ratio_max",
        limits::KAPPA,
        0.9,
        "physical convection ratios of screeching jets (common practice)",
    );
    /// Fewest source cells searched when `source_cells` is not given.
    pub const SOURCE_CELLS_MIN: Setting = Setting::new(
        "source_cells_min",
        limits::CELLS,
        1.0,
        "whole source cells searched (when source_cells is not given)",
    );
    /// Most source cells searched when `source_cells` is not given.
    pub const SOURCE_CELLS_MAX: Setting = Setting::new(
        "source_cells_max",
        limits::CELLS,
        10.0,
        "whole source cells searched (when source_cells is not given)",
    );
    /// Reflector path factor when held fixed: the acoustic path grows by twice the
    /// reflector's displacement (common practice).
    pub const REFLECTOR_PATH_FACTOR: Setting = Setting::new(
        "reflector_path_factor",
        limits::G,
        2.0,
        "the acoustic path grows by twice the displacement (common practice)",
    );
    /// Relative frequency uncertainty of points that give none.
    pub const DEFAULT_RELATIVE_UNCERTAINTY: Setting = Setting::new(
        "default_relative_uncertainty",
        limits::REL,
        0.01,
        "1 % of each frequency where a point gives no uncertainty",
    );

    /// The defaults.
    pub const DEFAULT: FitDefaults = FitDefaults {
        jump_fraction: Self::JUMP_FRACTION.default,
        max_order: Self::MAX_LOOP_ORDER.default as u32,
        kappa: (Self::CONVECTION_RATIO_MIN.default, Self::CONVECTION_RATIO_MAX.default),
        source_cells: (Self::SOURCE_CELLS_MIN.default, Self::SOURCE_CELLS_MAX.default),
        path_factor: Self::REFLECTOR_PATH_FACTOR.default,
        path_factor_bounds: (1.5, 2.5),
        relative_uncertainty: Self::DEFAULT_RELATIVE_UNCERTAINTY.default,
    };
}

/// The reflector path factor g.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ReflectorPath {
    /// Held at this value.
    Fixed(f64),
    /// Fitted within these bounds.
    Free(f64, f64),
}

/// One fitted parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct Param {
    /// Name.
    pub name: &'static str,
    /// Value.
    pub value: f64,
    /// Standard error.
    pub se: Option<f64>,
    /// Unit.
    pub unit: &'static str,
    /// Held at a physical bound.
    pub at_bound: bool,
    /// Held fixed (integer or given).
    pub fixed: bool,
}

/// The loop fit of one stage.
#[derive(Debug, Clone, PartialEq)]
pub struct StageLoop {
    /// Loop order n.
    pub n: u32,
    /// Parameters.
    pub params: Vec<Param>,
    /// Other loop orders that fit equally well (the alias), with n.
    pub equivalent_orders: Vec<u32>,
    /// How the alias was resolved, in words.
    pub resolution: String,
    /// Weighted chi^2.
    pub chi2: f64,
    /// Number of free continuous parameters.
    pub free: usize,
    /// Model frequency at each point of the stage (same order as the stage's points).
    pub model_hz: Vec<f64>,
    /// Goodness of fit against the stated uncertainties.
    pub verdict: FitVerdict,
    /// Probability that a right model with right uncertainties gives this chi^2 or more.
    pub p_value: Option<f64>,
}

/// Below this chi-square tail probability, residuals are far above the stated noise.
pub const POOR_FIT_P: f64 = 1e-3;

/// Goodness of a loop fit against the stated frequency uncertainties.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FitVerdict {
    /// chi^2 is what the stated noise gives (tail probability at least [`POOR_FIT_P`]).
    Consistent,
    /// Residuals far above the stated noise: the stage may hold points of two stages, the
    /// model may not apply, or the uncertainties are understated.
    ResidualsAboveNoise,
    /// No degrees of freedom left: nothing to judge.
    NoFreedom,
}

impl FitVerdict {
    /// The verdict and tail probability of a weighted chi^2 with `m` points and `free` fitted
    /// parameters.
    pub fn of(chi2: f64, m: usize, free: usize) -> (FitVerdict, Option<f64>) {
        if m <= free {
            return (FitVerdict::NoFreedom, None);
        }
        let p = crate::physics::chi2::chi2_sf(chi2, (m - free) as f64);
        (if p < POOR_FIT_P { FitVerdict::ResidualsAboveNoise } else { FitVerdict::Consistent }, Some(p))
    }
}

/// A stage.
#[derive(Debug, Clone, PartialEq)]
pub struct Stage {
    /// Indices of its points (input order), by increasing x.
    pub points: Vec<usize>,
    /// Smallest and largest x.
    pub x_range: (f64, f64),
    /// Quadratic (or lower) polynomial f(x) coefficients, constant first.
    pub smooth: Vec<f64>,
    /// RMS of the smooth fit, Hz.
    pub smooth_rms_hz: f64,
    /// Loop fit, when the sweep kind has one.
    pub fit: Option<StageLoop>,
}

/// A jump between stages.
#[derive(Debug, Clone, PartialEq)]
pub struct Jump {
    /// Direction of the sweep it was seen in.
    pub direction: Direction,
    /// Last x before the jump.
    pub x_before: f64,
    /// First x after it.
    pub x_after: f64,
    /// Stage left.
    pub from: usize,
    /// Stage entered.
    pub to: usize,
    /// Frequency before, Hz.
    pub f_before: f64,
    /// Frequency after, Hz.
    pub f_after: f64,
}

/// An interval where the stage depends on the sweep direction.
#[derive(Debug, Clone, PartialEq)]
pub struct Hysteresis {
    /// Lower end (a jump location).
    pub x_low: f64,
    /// Upper end.
    pub x_high: f64,
    /// Stage pair (lower-x stage, higher-x stage).
    pub stages: (usize, usize),
}

/// The shared-loop model.
#[derive(Debug, Clone, PartialEq)]
pub struct SharedLoop {
    /// Loop order per stage.
    pub orders: Vec<u32>,
    /// Parameters.
    pub params: Vec<Param>,
    /// Weighted chi^2.
    pub chi2: f64,
    /// Free continuous parameters.
    pub free: usize,
    /// How the alias was resolved.
    pub resolution: String,
    /// Goodness of fit against the stated uncertainties.
    pub verdict: FitVerdict,
    /// Chi-square tail probability.
    pub p_value: Option<f64>,
}

/// Everything found.
#[derive(Debug, Clone, PartialEq)]
pub struct StagingResult {
    /// Stage of each point (input order).
    pub stage_of: Vec<usize>,
    /// Stages by first appearance in x.
    pub stages: Vec<Stage>,
    /// Jumps.
    pub jumps: Vec<Jump>,
    /// Hysteresis intervals.
    pub hysteresis: Vec<Hysteresis>,
    /// Shared-loop model, when fitted.
    pub shared: Option<SharedLoop>,
    /// Cautions about the result, one sentence each: stages that the stated noise cannot
    /// separate, fits whose residuals are far above it.
    pub warnings: Vec<String>,
}

pub(super) fn param(name: &'static str, value: f64, se: Option<f64>, unit: &'static str) -> Param {
    Param { name, value, se, unit, at_bound: false, fixed: false }
}

pub(super) fn fixed(name: &'static str, value: f64, unit: &'static str) -> Param {
    Param { name, value, se: None, unit, at_bound: false, fixed: true }
}

/// Weights for y = n/f: sigma_y = n sigma_f / f^2 -> w = f^4 / (n^2 sigma_f^2).
pub(super) fn weight(p: &Point, n: f64) -> f64 {
    let s = n * p.sigma / (p.f * p.f);
    1.0 / (s * s)
}

/// Segments and fits. `physics` holds Ls and Uj per point for pressure sweeps.
pub fn fit_stages(
    points: &[Point],
    kind: SweepKind,
    physics: Option<&[PointPhysics]>,
    cfg: &FitConfig,
) -> StagingResult {
    match fit_stages_until(points, kind, physics, cfg, &Cancel::default()) {
        Ok(r) => r,
        Err(Stopped) => stages(points, scale_of(kind, physics, cfg).as_deref(), cfg.jump_fraction),
    }
}

/// As [`fit_stages`], checking `cancel` between stages and inside each grid search.
///
/// # Errors
/// [`Stopped`] once `cancel` is set.
pub fn fit_stages_until(
    points: &[Point],
    kind: SweepKind,
    physics: Option<&[PointPhysics]>,
    cfg: &FitConfig,
    cancel: &Cancel,
) -> Result<StagingResult, Stopped> {
    let mut res = stages(points, scale_of(kind, physics, cfg).as_deref(), cfg.jump_fraction);
    for s in &mut res.stages {
        cancel.check()?;
        let pts: Vec<Point> = s.points.iter().map(|&i| points[i]).collect();
        s.fit = match (kind, physics) {
            (SweepKind::Npr | SweepKind::Mach, Some(ph)) => {
                let q: Vec<PointPhysics> = s.points.iter().map(|&i| ph[i]).collect();
                pressure::fit_pressure_stage_until(&pts, &q, cfg, cancel)?
            }
            (SweepKind::Reflector, _) => fit_reflector_stage(&pts, cfg),
            _ => None,
        };
    }
    cancel.check()?;
    res.shared = match (kind, physics) {
        (SweepKind::Npr | SweepKind::Mach, Some(ph)) => shared_pressure(points, ph, &res, cfg),
        (SweepKind::Reflector, _) => shared_reflector(points, &res, cfg),
        _ => None,
    };
    if let Some(sh) = res.shared.as_mut() {
        // Judged on the points of the stages with a loop fit (the ones the shared model takes).
        let m = res.stage_of.iter().filter(|&&s| res.stages[s].fit.is_some()).count();
        (sh.verdict, sh.p_value) = FitVerdict::of(sh.chi2, m, sh.free);
    }
    for (k, s) in res.stages.iter().enumerate() {
        if let Some(fit) = s.fit.as_ref().filter(|f| f.verdict == FitVerdict::ResidualsAboveNoise) {
            let dof = s.points.len() - fit.free;
            res.warnings.push(format!(
                "stage {k}: the loop fit's residuals are far above the stated noise (chi-square {:.1} on {dof} \
                 degrees of freedom, tail probability {:.1e}): the stage may hold points of two stages, the loop \
                 model may not apply, or the uncertainties are understated.",
                fit.chi2,
                fit.p_value.unwrap_or(0.0)
            ));
        }
    }
    Ok(res)
}

/// The loop-model scale for segmentation of pressure sweeps (none for the other kinds).
fn scale_of(kind: SweepKind, physics: Option<&[PointPhysics]>, cfg: &FitConfig) -> Option<Vec<f64>> {
    match (kind, physics) {
        (SweepKind::Npr | SweepKind::Mach, Some(ph)) => Some(loop_scale(ph, cfg)),
        _ => None,
    }
}

/// Jet physics of each point of a pressure sweep: the fundamental vortex-sheet spacing and Uj
/// at x = NPR ([`SweepKind::Npr`]) or x = Mj ([`SweepKind::Mach`], NPR from
/// [`Gas::npr_for_mach`]), with the nozzle, gas and the rest of the operating point `op` (its
/// own NPR is replaced). Returns the physics of the supersonic points and the indices of the
/// points that are not supersonic jets (or out of the NPR range); other kinds give nothing.
pub fn pressure_sweep_physics(
    gas: &Gas,
    nozzle: &Nozzle,
    op: &OperatingPoint,
    kind: SweepKind,
    xs: &[f64],
) -> (Vec<PointPhysics>, Vec<usize>) {
    let (mut ph, mut bad) = (Vec::with_capacity(xs.len()), Vec::new());
    for (i, &x) in xs.iter().enumerate() {
        let npr = match kind {
            SweepKind::Npr => x,
            SweepKind::Mach => gas.npr_for_mach(x),
            SweepKind::Reflector | SweepKind::Plain => return (Vec::new(), Vec::new()),
        };
        let jet =
            op.with_npr(npr).ok().and_then(|op| ExpandedJet::from_state(&jet_state(gas, nozzle, &op)).ok());
        match jet {
            Some(j) => ph.push(PointPhysics { ls_m: cells::spacing(&j, 1.0), uj_m_s: j.uj_m_s }),
            None => bad.push(i),
        }
    }
    (ph, bad)
}

impl Stage {
    /// Rms relative error of the stage's loop fit, sqrt(mean(((f - f_model) / f)^2)) over its
    /// points (`points` in input order); `None` without a loop fit.
    pub fn rms_relative_error(&self, points: &[Point]) -> Option<f64> {
        let fit = self.fit.as_ref()?;
        let sq: f64 = self
            .points
            .iter()
            .zip(&fit.model_hz)
            .map(|(&i, m)| ((points[i].f - m) / points[i].f).powi(2))
            .sum();
        Some((sq / self.points.len() as f64).sqrt())
    }
}

/// One loop model scored for comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelScore {
    /// Model name.
    pub name: &'static str,
    /// Free parameters (loop orders included).
    pub parameter_count: usize,
    /// chi^2.
    pub chi2: f64,
    /// Akaike information criterion.
    pub aic: f64,
    /// Bayesian information criterion.
    pub bic: f64,
    /// Lowest BIC of the models compared.
    pub preferred: bool,
}

/// Per-stage loops against the shared loop, both on the points of the stages that have a loop
/// fit, by [`information_criteria`]; the lowest BIC is preferred. Empty without loop fits.
pub fn compare_models(res: &StagingResult) -> Vec<ModelScore> {
    let fits: Vec<_> = res.stages.iter().filter_map(|s| s.fit.as_ref()).collect();
    if fits.is_empty() {
        return Vec::new();
    }
    let m: usize = res.stages.iter().filter(|s| s.fit.is_some()).map(|s| s.points.len()).sum();
    let score = |name, chi2: f64, k: usize| {
        let (aic, bic) = information_criteria(chi2, k, m);
        ModelScore { name, parameter_count: k, chi2, aic, bic, preferred: false }
    };
    let mut out = vec![score(
        "per-stage loops",
        fits.iter().map(|f| f.chi2).sum(),
        fits.iter().map(|f| f.free + 1).sum::<usize>(),
    )];
    if let Some(sh) = &res.shared {
        out.push(score("shared loop", sh.chi2, sh.free + fits.len()));
    }
    if let Some(best) = out.iter().enumerate().min_by(|a, b| a.1.bic.total_cmp(&b.1.bic)).map(|(i, _)| i) {
        out[best].preferred = true;
    }
    out
}

/// AIC and BIC from chi^2 with `k` parameters and `m` points (Gaussian errors of known scale).
pub fn information_criteria(chi2: f64, k: usize, m: usize) -> (f64, f64) {
    (chi2 + 2.0 * k as f64, chi2 + k as f64 * (m as f64).ln())
}

#[cfg(test)]
mod sweep_tests;
#[cfg(test)]
mod tests {
    pub(super) use super::*;
    use crate::physics::cells;
    use crate::physics::gas::Gas;
    use crate::physics::jet::{jet_state, ExpandedJet, Nozzle, OperatingPoint};

    use crate::test_rng::Rng;

    pub(super) fn physics_at_mj(mj: f64) -> PointPhysics {
        let air = Gas::AIR;
        let npr = air.npr_for_mach(mj);
        let s = jet_state(
            &air,
            &Nozzle::round_convergent(0.0254).unwrap(),
            &OperatingPoint::new(npr, 101_325.0, 288.15, 288.15).unwrap(),
        );
        let j = ExpandedJet::from_state(&s).unwrap();
        PointPhysics { ls_m: cells::spacing(&j, 1.0), uj_m_s: j.uj_m_s }
    }

    pub(super) fn a_amb() -> f64 {
        Gas::AIR.sound_speed(288.15)
    }

    pub(super) fn cfg() -> FitConfig {
        FitConfig {
            jump_fraction: 0.05,
            max_order: 10,
            kappa: (0.4, 0.9),
            source_cells: (1.0, 10.0),
            source_cells_fixed: None,
            reflector: ReflectorPath::Fixed(2.0),
            fit_delay: true,
            a_amb: a_amb(),
        }
    }

    /// (n, N, kappa, tau0, Mj range) of synthetic stages.
    type Truth = (u32, f64, f64, f64, (f64, f64));
    const TRUTH: [Truth; 3] = [
        (1, 4.0, 0.60, 2.0e-5, (1.10, 1.24)),
        (2, 4.0, 0.62, 1.0e-5, (1.22, 1.40)),
        (1, 4.0, 0.75, 5.0e-6, (1.38, 1.60)),
    ];

    fn truth_f(stage: usize, ph: &PointPhysics) -> f64 {
        let (n, cells, kappa, tau0, _) = TRUTH[stage];
        f64::from(n) / (cells * ph.ls_m * (1.0 / (kappa * ph.uj_m_s) + 1.0 / a_amb()) + tau0)
    }

    #[test]
    fn pressure_sweep_parameters_recovered_within_three_standard_errors() {
        // 1000 points over Mj 1.10-1.60, 0.5 % frequency noise, the stage picked at random where
        // two overlap (seeded), the source cell given (N = 4) as a lab fixes it from flow
        // visualization; n, kappa and tau0 are fitted.
        let mut rng = Rng(42);
        let mut pts = Vec::new();
        let mut ph = Vec::new();
        let mut truth = Vec::new();
        for k in 0..1000 {
            let mj = 1.10 + 0.5 * f64::from(k) / 999.0;
            let options: Vec<usize> =
                (0..3).filter(|&s| mj >= TRUTH[s].4 .0 && mj <= TRUTH[s].4 .1).collect();
            let s = options[(rng.uniform() * options.len() as f64) as usize % options.len()];
            let q = physics_at_mj(mj);
            let f = truth_f(s, &q) * (1.0 + 0.005 * rng.gauss());
            pts.push(Point { x: mj, f, sigma: 0.005 * f, direction: Direction::Unknown, order: None });
            ph.push(q);
            truth.push(s);
        }
        let given = FitConfig { source_cells_fixed: Some(4.0), ..cfg() };
        let res = fit_stages(&pts, SweepKind::Mach, Some(&ph), &given);
        assert_eq!(res.stages.len(), 3, "{:?}", res.stages.iter().map(|s| s.x_range).collect::<Vec<_>>());
        let mut correct = 0;
        for (s, stage) in res.stages.iter().enumerate() {
            let fit = stage.fit.as_ref().unwrap();
            let (n, cells, kappa, tau0, _) = TRUTH[s];
            assert_eq!(fit.n, n, "stage {s}: {}", fit.resolution);
            assert_eq!(fit.params[1].value, cells);
            for (p, want) in [(&fit.params[0], kappa), (&fit.params[2], tau0)] {
                let se = p.se.unwrap();
                assert!(
                    (p.value - want).abs() <= 3.0 * se,
                    "stage {s} {}: {} +- {se} vs {want}",
                    p.name,
                    p.value
                );
            }
            for &i in &stage.points {
                correct += usize::from(truth[i] == s);
            }
        }
        assert!(
            correct as f64 >= 0.99 * pts.len() as f64,
            "{correct} of {} points in the right stage",
            pts.len()
        );
        // Without the source cell, the fit still reproduces the data (chi^2 per degree of
        // freedom near 1) and lists the (n, N) pairs it cannot tell apart.
        let free = fit_stages(&pts, SweepKind::Mach, Some(&ph), &cfg());
        for st in &free.stages {
            let fit = st.fit.as_ref().unwrap();
            let dof = (st.points.len() - fit.free) as f64;
            assert!(fit.chi2 / dof < 1.5, "{}", fit.chi2 / dof);
            assert!(!fit.equivalent_orders.is_empty());
        }
    }

    #[test]
    fn reflector_lines_n_2_3_4_recovered() {
        // Lines f_n(d) = n / (tau0 + 2 d / a) for n = 2, 3, 4 (the reflector experiments of
        // the field; common practice), 0.5 % noise.
        let mut rng = Rng(7);
        let a = a_amb();
        let tau0 = 3.0e-4;
        let mut pts = Vec::new();
        let mut truth = Vec::new();
        for n in [2u32, 3, 4] {
            for k in 0..40 {
                let d = 0.002 * f64::from(k);
                let f = f64::from(n) / (tau0 + 2.0 * d / a) * (1.0 + 0.005 * rng.gauss());
                pts.push(Point { x: d, f, sigma: 0.005 * f, direction: Direction::Unknown, order: None });
                truth.push(n);
            }
        }
        let res = fit_stages(&pts, SweepKind::Reflector, None, &cfg());
        assert_eq!(res.stages.len(), 3);
        let mut orders: Vec<u32> = res.stages.iter().map(|s| s.fit.as_ref().unwrap().n).collect();
        orders.sort_unstable();
        assert_eq!(orders, vec![2, 3, 4]);
        for s in &res.stages {
            let fit = s.fit.as_ref().unwrap();
            for &i in &s.points {
                assert_eq!(truth[i], fit.n);
            }
            let p = &fit.params[0];
            assert!((p.value - tau0).abs() <= 3.0 * p.se.unwrap(), "{} +- {:?}", p.value, p.se);
        }
        let shared = res.shared.unwrap();
        assert!((shared.params[0].value - tau0).abs() <= 3.0 * shared.params[0].se.unwrap());
    }

    #[test]
    fn hysteresis_interval_within_one_point_spacing() {
        // Up-sweep jumps from stage 1 to stage 2 at Mj 1.17, the down-sweep back at 1.13.
        let dx = 0.005;
        let mut pts = Vec::new();
        let mut order = 0u64;
        let f_of = |mj: f64, upper: bool| {
            if upper {
                5200.0 - 4000.0 * (mj - 1.1)
            } else {
                6400.0 - 5000.0 * (mj - 1.1)
            }
        };
        for k in 0..=40 {
            let mj = 1.05 + dx * f64::from(k);
            pts.push(Point {
                x: mj,
                f: f_of(mj, mj > 1.17),
                sigma: 5.0,
                direction: Direction::Unknown,
                order: Some(order),
            });
            order += 1;
        }
        for k in (0..=40).rev() {
            let mj = 1.05 + dx * f64::from(k);
            pts.push(Point {
                x: mj,
                f: f_of(mj, mj > 1.13),
                sigma: 5.0,
                direction: Direction::Unknown,
                order: Some(order),
            });
            order += 1;
        }
        infer_directions(&mut pts);
        let res = stages(&pts, None, 0.05);
        assert_eq!(res.stages.len(), 2);
        assert_eq!(res.hysteresis.len(), 1, "{:?}", res.jumps);
        let h = &res.hysteresis[0];
        assert!((h.x_low - 1.13).abs() <= dx && (h.x_high - 1.17).abs() <= dx, "{h:?}");
    }

    #[test]
    fn cold_round_jet_stages_a1_a2_b_c_d() {
        // Stages of cold round convergent jets in increasing Mj: A1, A2 (axisymmetric), B
        // (flapping), C (helical), D (flapping), with jumps near Mj 1.07, 1.15, 1.30 and 1.60
        // (Powell 1953; Ponton & Seiner 1992; Raman 1999 review; values from memory, +-0.03).
        // Synthetic tones follow the Tam, Seiner & Yu (1986) trend times a per-stage factor.
        let jumps = [1.07, 1.15, 1.30, 1.60];
        let factor = [1.10, 1.00, 0.88, 0.97, 0.84];
        let mut rng = Rng(3);
        let mut pts = Vec::new();
        let dx = 0.0025;
        for k in 0..=264 {
            let mj = 1.04 + dx * f64::from(k);
            let stage = jumps.iter().filter(|&&j| mj > j).count();
            let q = physics_at_mj(mj);
            let st = 0.67 / (mj * mj - 1.0).sqrt() / (1.0 + 0.7 * q.uj_m_s / a_amb());
            let f = factor[stage] * st * q.uj_m_s / 0.0254 * (1.0 + 0.003 * rng.gauss());
            pts.push(Point { x: mj, f, sigma: 0.005 * f, direction: Direction::Increasing, order: None });
        }
        let res = stages(&pts, None, 0.05);
        assert_eq!(res.stages.len(), 5, "{:?}", res.stages.iter().map(|s| s.x_range).collect::<Vec<_>>());
        assert_eq!(res.jumps.len(), 4);
        for (j, want) in res.jumps.iter().zip(jumps) {
            assert!(
                j.x_before <= want + 1e-9 && j.x_after >= want - 1e-9 && j.x_after - j.x_before <= dx + 1e-9,
                "{j:?}"
            );
        }
    }

    #[test]
    fn thousand_points_in_six_stages_are_assigned_to_the_stage_they_came_from() {
        // Six stages 12 % apart (above the 5 % jump fraction), each sloping gently: every
        // point lands in the stage it was generated in, and the stages follow in x order.
        let mut pts = Vec::new();
        for k in 0..1000 {
            let x = 1.0 + f64::from(k) / 1000.0;
            let s = (k / 167) as f64;
            let f = 3000.0 * 1.12f64.powf(s) * (1.0 - 0.02 * (x - 1.0));
            pts.push(Point { x, f, sigma: 0.005 * f, direction: Direction::Unknown, order: None });
        }
        let r = stages(&pts, None, 0.05);
        assert_eq!(r.stages.len(), 6);
        for (k, &st) in r.stage_of.iter().enumerate() {
            assert_eq!(st, k / 167, "point {k}");
        }
        assert_eq!(r.jumps.len(), 5);
    }
}
