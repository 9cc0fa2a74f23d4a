//! Stage segmentation and feedback-loop fits of measured tone sweeps.
//!
//! **Segmentation (model-free).** Points are taken in order of increasing control value x
//! (ties by frequency). Each point joins the open branch whose prediction at x (the last
//! frequency, extended along the branch's recent slope) is nearest, if within
//! `jump_fraction` of it; otherwise it starts a new branch. A branch closes after an x gap of
//! twenty median point spacings. Several branches can be open at once, so coexisting stages at
//! one x are kept apart, and an up-sweep and a down-sweep share the same stages. Jumps are
//! read per sweep direction (in acquisition order where given) as the x where the set of
//! stages present changes; hysteresis intervals are where the increasing and the decreasing
//! sweep jump between the same two stages at different x.
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
//! stages, n per stage) is compared with the per-stage model by AIC and BIC.

use super::lsq::{weighted_lsq, LinearFit};

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
}

/// Infers directions from acquisition order where not given: the sign of the x change from
/// the previous acquisition.
pub fn infer_directions(points: &mut [Point]) {
    let mut idx: Vec<usize> = (0..points.len()).filter(|&i| points[i].order.is_some()).collect();
    idx.sort_by_key(|&i| points[i].order);
    for k in 0..idx.len() {
        let i = idx[k];
        if points[i].direction != Direction::Unknown {
            continue;
        }
        let (a, b) = if k > 0 {
            (idx[k - 1], i)
        } else if idx.len() > 1 {
            (i, idx[1])
        } else {
            continue;
        };
        let dx = points[b].x - points[a].x;
        points[i].direction = if dx > 0.0 {
            Direction::Increasing
        } else if dx < 0.0 {
            Direction::Decreasing
        } else if k > 0 {
            points[idx[k - 1]].direction
        } else {
            Direction::Unknown
        };
    }
}

struct Branch {
    members: Vec<usize>,
}

/// Model-free segmentation into stages.
pub fn segment(points: &[Point], jump_fraction: f64) -> Vec<Vec<usize>> {
    let mut order: Vec<usize> = (0..points.len()).collect();
    order.sort_by(|&a, &b| points[a].x.total_cmp(&points[b].x).then(points[a].f.total_cmp(&points[b].f)));
    let mut xs: Vec<f64> = order.iter().map(|&i| points[i].x).collect();
    xs.dedup();
    let mut gaps: Vec<f64> = xs.windows(2).map(|w| w[1] - w[0]).collect();
    gaps.sort_by(f64::total_cmp);
    let gap_limit = gaps.get(gaps.len() / 2).map_or(f64::INFINITY, |g| 20.0 * g);
    let mut branches: Vec<Branch> = Vec::new();
    for &i in &order {
        let p = points[i];
        let mut best: Option<(usize, f64)> = None;
        for (bi, b) in branches.iter().enumerate() {
            let last = points[*b.members.last().unwrap_or(&i)];
            if p.x - last.x > gap_limit {
                continue;
            }
            let pred = predict(points, &b.members, p.x);
            let d = ((p.f - pred) / pred).abs();
            if d <= jump_fraction && best.is_none_or(|(_, bd)| d < bd) {
                best = Some((bi, d));
            }
        }
        match best {
            Some((bi, _)) => branches[bi].members.push(i),
            None => branches.push(Branch { members: vec![i] }),
        }
    }
    merge_continuations(points, branches.into_iter().map(|b| b.members).collect(), jump_fraction, gap_limit)
}

/// Second pass: a branch that ends just before another begins is the same stage when the
/// later branch, extended backwards along its own slope, meets the earlier one's last point
/// within `jump_fraction`. This rejoins a stage split where its frequency moves fast (near
/// Mj = 1) and the first step of a branch had no slope to follow.
fn merge_continuations(
    points: &[Point],
    mut branches: Vec<Vec<usize>>,
    jump_fraction: f64,
    gap_limit: f64,
) -> Vec<Vec<usize>> {
    loop {
        let mut merged = false;
        'outer: for a in 0..branches.len() {
            for b in 0..branches.len() {
                if a == b {
                    continue;
                }
                let last_a = points[*branches[a].last().unwrap_or(&0)];
                let first_b = points[branches[b][0]];
                let a_max = branches[a].iter().map(|&i| points[i].x).fold(f64::MIN, f64::max);
                let b_min = branches[b].iter().map(|&i| points[i].x).fold(f64::MAX, f64::min);
                if !(a_max < b_min && b_min - a_max <= gap_limit) || first_b.x != b_min {
                    continue;
                }
                let head: Vec<usize> = branches[b].iter().take(4).rev().copied().collect();
                let pred = predict(points, &head, last_a.x);
                if ((last_a.f - pred) / pred).abs() <= jump_fraction {
                    let tail = std::mem::take(&mut branches[b]);
                    branches[a].extend(tail);
                    branches.remove(b);
                    merged = true;
                    break 'outer;
                }
            }
        }
        if !merged {
            return branches;
        }
    }
}

/// Frequency a branch predicts at x: its last point's frequency moved along the slope of its
/// last (up to) four points at distinct x.
fn predict(points: &[Point], members: &[usize], x: f64) -> f64 {
    let tail: Vec<&Point> = members.iter().rev().take(4).map(|&i| &points[i]).collect();
    let last = tail[0];
    let distinct = tail.iter().any(|p| p.x != last.x);
    if !distinct {
        return last.f;
    }
    let n = tail.len() as f64;
    let mx = tail.iter().map(|p| p.x).sum::<f64>() / n;
    let mf = tail.iter().map(|p| p.f).sum::<f64>() / n;
    let sxx: f64 = tail.iter().map(|p| (p.x - mx).powi(2)).sum();
    let sxf: f64 = tail.iter().map(|p| (p.x - mx) * (p.f - mf)).sum();
    let slope = if sxx > 0.0 { sxf / sxx } else { 0.0 };
    let pred = last.f + slope * (x - last.x);
    // Guard against wild extrapolation from a few noisy points.
    pred.clamp(0.5 * last.f, 1.5 * last.f)
}

fn smooth_fit(points: &[Point], members: &[usize]) -> (Vec<f64>, f64) {
    let mut xs: Vec<f64> = members.iter().map(|&i| points[i].x).collect();
    xs.dedup();
    let deg = (xs.len().saturating_sub(1)).min(2);
    let x0 = xs.iter().sum::<f64>() / xs.len() as f64;
    let rows: Vec<Vec<f64>> =
        members.iter().map(|&i| (0..=deg).map(|k| (points[i].x - x0).powi(k as i32)).collect()).collect();
    let y: Vec<f64> = members.iter().map(|&i| points[i].f).collect();
    let w = vec![1.0; y.len()];
    match weighted_lsq(&rows, &y, &w) {
        Some(f) => {
            // Coefficients in powers of (x - x0) converted to powers of x.
            let c = &f.coef;
            let coef = match deg {
                0 => vec![c[0]],
                1 => vec![c[0] - c[1] * x0, c[1]],
                _ => vec![c[0] - c[1] * x0 + c[2] * x0 * x0, c[1] - 2.0 * c[2] * x0, c[2]],
            };
            (coef, (f.chi2 / y.len() as f64).sqrt())
        }
        None => (vec![y.iter().sum::<f64>() / y.len() as f64], 0.0),
    }
}

fn stage_sets(points: &[Point], stage_of: &[usize], dir: Direction) -> Vec<(f64, Vec<(usize, f64)>)> {
    let mut idx: Vec<usize> = (0..points.len()).filter(|&i| points[i].direction == dir).collect();
    let descending = dir == Direction::Decreasing;
    idx.sort_by(|&a, &b| match (points[a].order, points[b].order) {
        (Some(oa), Some(ob)) => oa.cmp(&ob),
        _ if descending => points[b].x.total_cmp(&points[a].x),
        _ => points[a].x.total_cmp(&points[b].x),
    });
    let mut out: Vec<(f64, Vec<(usize, f64)>)> = Vec::new();
    for i in idx {
        match out.last_mut() {
            Some((x, set)) if *x == points[i].x => set.push((stage_of[i], points[i].f)),
            _ => out.push((points[i].x, vec![(stage_of[i], points[i].f)])),
        }
    }
    out
}

fn jumps_in(points: &[Point], stage_of: &[usize], dir: Direction) -> Vec<Jump> {
    let sets = stage_sets(points, stage_of, dir);
    let mut jumps = Vec::new();
    for w in sets.windows(2) {
        let (xa, a) = &w[0];
        let (xb, b) = &w[1];
        let gone: Vec<&(usize, f64)> = a.iter().filter(|s| !b.iter().any(|t| t.0 == s.0)).collect();
        let new: Vec<&(usize, f64)> = b.iter().filter(|s| !a.iter().any(|t| t.0 == s.0)).collect();
        for (g, n) in gone.iter().zip(&new) {
            jumps.push(Jump {
                direction: dir,
                x_before: *xa,
                x_after: *xb,
                from: g.0,
                to: n.0,
                f_before: g.1,
                f_after: n.1,
            });
        }
    }
    jumps
}

/// Segments, reads jumps and hysteresis, and makes the smooth fits (no loop fits).
pub fn stages(points: &[Point], jump_fraction: f64) -> StagingResult {
    let branches = segment(points, jump_fraction);
    let mut stage_of = vec![0; points.len()];
    let mut stages = Vec::with_capacity(branches.len());
    for (s, members) in branches.into_iter().enumerate() {
        for &i in &members {
            stage_of[i] = s;
        }
        let lo = members.iter().map(|&i| points[i].x).fold(f64::INFINITY, f64::min);
        let hi = members.iter().map(|&i| points[i].x).fold(f64::NEG_INFINITY, f64::max);
        let (smooth, smooth_rms_hz) = smooth_fit(points, &members);
        stages.push(Stage { points: members, x_range: (lo, hi), smooth, smooth_rms_hz, fit: None });
    }
    let mut jumps = Vec::new();
    for d in [Direction::Increasing, Direction::Decreasing, Direction::Unknown] {
        jumps.extend(jumps_in(points, &stage_of, d));
    }
    let mut hysteresis = Vec::new();
    for up in jumps.iter().filter(|j| j.direction == Direction::Increasing) {
        for down in jumps.iter().filter(|j| j.direction == Direction::Decreasing) {
            if up.from == down.to && up.to == down.from {
                let xu = 0.5 * (up.x_before + up.x_after);
                let xd = 0.5 * (down.x_before + down.x_after);
                if xu != xd {
                    hysteresis.push(Hysteresis {
                        x_low: xu.min(xd),
                        x_high: xu.max(xd),
                        stages: (up.from, up.to),
                    });
                }
            }
        }
    }
    StagingResult { stage_of, stages, jumps, hysteresis, shared: None }
}

fn param(name: &'static str, value: f64, se: Option<f64>, unit: &'static str) -> Param {
    Param { name, value, se, unit, at_bound: false, fixed: false }
}

fn fixed(name: &'static str, value: f64, unit: &'static str) -> Param {
    Param { name, value, se: None, unit, at_bound: false, fixed: true }
}

/// Weights for y = n/f: sigma_y = n sigma_f / f^2 -> w = f^4 / (n^2 sigma_f^2).
fn weight(p: &Point, n: f64) -> f64 {
    let s = n * p.sigma / (p.f * p.f);
    1.0 / (s * s)
}

/// Pressure sweep: fit with n and N fixed: n/f - N Ls/a = (N/kappa) Ls/Uj + tau0.
fn pressure_fixed_n(
    pts: &[Point],
    ph: &[PointPhysics],
    n: u32,
    cells: f64,
    cfg: &FitConfig,
) -> Option<(Vec<Param>, LinearFit, usize)> {
    let nf = f64::from(n);
    let y: Vec<f64> = pts.iter().zip(ph).map(|(p, q)| nf / p.f - cells * q.ls_m / cfg.a_amb).collect();
    let w: Vec<f64> = pts.iter().map(|p| weight(p, nf)).collect();
    let rows: Vec<Vec<f64>> = ph
        .iter()
        .map(|q| if cfg.fit_delay { vec![q.ls_m / q.uj_m_s, 1.0] } else { vec![q.ls_m / q.uj_m_s] })
        .collect();
    let mut fit = weighted_lsq(&rows, &y, &w)?;
    let mut kappa = cells / fit.coef[0];
    let mut kappa_se = fit.se(0).map(|s| kappa * s / fit.coef[0].abs());
    let mut at_bound = false;
    if !(kappa.is_finite() && kappa >= cfg.kappa.0 && kappa <= cfg.kappa.1) {
        // Hold kappa at the nearer bound and fit tau0 alone.
        kappa = if kappa.is_finite() && kappa > cfg.kappa.1 { cfg.kappa.1 } else { cfg.kappa.0 };
        kappa_se = None;
        at_bound = true;
        let y2: Vec<f64> = y.iter().zip(ph).map(|(v, q)| v - cells / kappa * q.ls_m / q.uj_m_s).collect();
        fit = if cfg.fit_delay {
            let f = weighted_lsq(&vec![vec![1.0]; y2.len()], &y2, &w)?;
            LinearFit {
                coef: vec![cells / kappa, f.coef[0]],
                cov: f.cov.map(|c| vec![0.0, 0.0, 0.0, c[0]]),
                chi2: f.chi2,
            }
        } else {
            let chi2 = y2.iter().zip(&w).map(|(v, wi)| wi * v * v).sum();
            LinearFit { coef: vec![cells / kappa], cov: None, chi2 }
        };
    }
    let mut tau_at_bound = false;
    if cfg.fit_delay && fit.coef[1] < 0.0 {
        // A negative delay is unphysical: hold tau0 at zero and fit N/kappa alone.
        tau_at_bound = true;
        let f = weighted_lsq(&ph.iter().map(|q| vec![q.ls_m / q.uj_m_s]).collect::<Vec<_>>(), &y, &w)?;
        let k = cells / f.coef[0];
        if k.is_finite() && k >= cfg.kappa.0 && k <= cfg.kappa.1 {
            kappa = k;
            kappa_se = f.se(0).map(|s| k * s / f.coef[0].abs());
            at_bound = false;
            fit = LinearFit { coef: vec![f.coef[0], 0.0], cov: None, chi2: f.chi2 };
        } else {
            kappa = if k.is_finite() && k > cfg.kappa.1 { cfg.kappa.1 } else { cfg.kappa.0 };
            kappa_se = None;
            at_bound = true;
            let chi2 = y
                .iter()
                .zip(ph)
                .zip(&w)
                .map(|((v, q), wi)| {
                    let r = v - cells / kappa * q.ls_m / q.uj_m_s;
                    wi * r * r
                })
                .sum();
            fit = LinearFit { coef: vec![cells / kappa, 0.0], cov: None, chi2 };
        }
    }
    let mut params = vec![
        Param { name: "convection_ratio", value: kappa, se: kappa_se, unit: "", at_bound, fixed: false },
        fixed("source_cells", cells, "cells"),
    ];
    let mut free = usize::from(!at_bound);
    if cfg.fit_delay && !tau_at_bound {
        params.push(param("fixed_delay_s", fit.coef[1], fit.se(1), "s"));
        free += 1;
    } else if cfg.fit_delay {
        params.push(Param {
            name: "fixed_delay_s",
            value: 0.0,
            se: None,
            unit: "s",
            at_bound: true,
            fixed: false,
        });
    } else {
        params.push(fixed("fixed_delay_s", 0.0, "s"));
    }
    Some((params, fit, free))
}

fn model_pressure(params: &[Param], n: u32, q: &PointPhysics, a: f64) -> f64 {
    let (kappa, cells, tau0) = (params[0].value, params[1].value, params[2].value);
    f64::from(n) / (cells * q.ls_m * (1.0 / (kappa * q.uj_m_s) + 1.0 / a) + tau0)
}

/// Fits one stage of a pressure sweep by enumerating the integer part: every loop order n in
/// 1..=n_max and every whole source cell N (the given one, or each in the source bounds), with
/// kappa and tau0 fitted by linear least squares inside. The fit with the lowest chi^2 wins;
/// ties (the exact alias n, N, tau0 -> 2n, 2N, 2 tau0) go to the smallest n. Fits within
/// delta chi^2 <= 1 of the best are reported as equivalent: the data cannot tell them apart.
pub fn fit_pressure_stage(pts: &[Point], ph: &[PointPhysics], cfg: &FitConfig) -> Option<StageLoop> {
    let cells: Vec<f64> = match cfg.source_cells_fixed {
        Some(c) => vec![c],
        None => {
            let lo = cfg.source_cells.0.ceil().max(1.0) as u32;
            let hi = cfg.source_cells.1.floor() as u32;
            (lo..=hi).map(f64::from).collect()
        }
    };
    let mut all: Vec<(u32, f64, Vec<Param>, f64, usize)> = Vec::new();
    for &c in &cells {
        for n in 1..=cfg.max_order {
            if let Some((params, fit, free)) = pressure_fixed_n(pts, ph, n, c, cfg) {
                all.push((n, c, params, fit.chi2, free));
            }
        }
    }
    all.sort_by(|a, b| a.3.total_cmp(&b.3).then(a.0.cmp(&b.0)));
    let best_chi2 = all.first()?.3;
    let tol = (1e-9 * best_chi2).max(1e-12);
    let min_n = all.iter().filter(|f| f.3 <= best_chi2 + tol).map(|f| f.0).min()?;
    let best = all.iter().find(|f| f.3 <= best_chi2 + tol && f.0 == min_n)?.clone();
    let equivalent: Vec<(u32, f64)> =
        all.iter().filter(|f| f.3 <= best_chi2 + 1.0).map(|f| (f.0, f.1)).collect();
    let mut orders: Vec<u32> = equivalent.iter().map(|e| e.0).collect();
    orders.sort_unstable();
    orders.dedup();
    let list: Vec<String> = equivalent.iter().map(|(n, c)| format!("n={n}/N={c}")).collect();
    let resolution = format!(
        "grid over loop order n in 1..={} and source cell N in {} with kappa (held in [{}, {}]) and tau0 >= 0 \
         fitted inside; lowest chi^2 wins, exact aliases (n, N, tau0 all scaled) go to the smallest n; within \
         delta chi^2 <= 1 of the best: {}",
        cfg.max_order,
        match cfg.source_cells_fixed {
            Some(c) => format!("{{{c}}} (given)"),
            None => format!("[{}, {}]", cfg.source_cells.0, cfg.source_cells.1),
        },
        cfg.kappa.0,
        cfg.kappa.1,
        list.join(", ")
    );
    let (n, _, params, chi2, free) = best;
    let model_hz = ph.iter().map(|q| model_pressure(&params, n, q, cfg.a_amb)).collect();
    Some(StageLoop { n, params, equivalent_orders: orders, resolution, chi2, free, model_hz })
}

/// Fits one stage of a reflector sweep.
pub fn fit_reflector_stage(pts: &[Point], cfg: &FitConfig) -> Option<StageLoop> {
    // 1/f = tau0/n + (g/n) d/a.
    let a = cfg.a_amb;
    let y: Vec<f64> = pts.iter().map(|p| 1.0 / p.f).collect();
    let w: Vec<f64> = pts.iter().map(|p| weight(p, 1.0)).collect();
    let rows: Vec<Vec<f64>> = pts.iter().map(|p| vec![1.0, p.x / a]).collect();
    let free = weighted_lsq(&rows, &y, &w)?;
    let g_over_n = free.coef[1];
    if g_over_n.is_nan() || g_over_n <= 0.0 {
        return None;
    }
    let (n, g, equivalent, resolution) = match cfg.reflector {
        ReflectorPath::Fixed(g) => {
            let est = g / g_over_n;
            let n = (est.round() as u32).clamp(1, cfg.max_order);
            (
                n,
                g,
                vec![n],
                format!(
                    "the path factor g = {g} is fixed, so n = g / slope = {est:.3} is identified (rounded); no alias"
                ),
            )
        }
        ReflectorPath::Free(lo, hi) => {
            let cands: Vec<u32> =
                (1..=cfg.max_order).filter(|&n| (lo..=hi).contains(&(f64::from(n) * g_over_n))).collect();
            let n = cands.first().copied().unwrap_or(1);
            (
                n,
                f64::from(n) * g_over_n,
                cands.clone(),
                format!(
                    "n, tau0 and g scale together; chose the smallest n in 1..={} with g in [{lo}, {hi}]",
                    cfg.max_order
                ),
            )
        }
    };
    let nf = f64::from(n);
    let wn: Vec<f64> = pts.iter().map(|p| weight(p, nf)).collect();
    let (params, fit, free_count) = match cfg.reflector {
        ReflectorPath::Fixed(_) => {
            let y2: Vec<f64> = pts.iter().map(|p| nf / p.f - g * p.x / a).collect();
            let f = weighted_lsq(&vec![vec![1.0]; y2.len()], &y2, &wn)?;
            (
                vec![param("fixed_delay_s", f.coef[0], f.se(0), "s"), fixed("reflector_path_factor", g, "")],
                f,
                1,
            )
        }
        ReflectorPath::Free(..) => {
            let y2: Vec<f64> = pts.iter().map(|p| nf / p.f).collect();
            let f = weighted_lsq(&rows, &y2, &wn)?;
            (
                vec![
                    param("fixed_delay_s", f.coef[0], f.se(0), "s"),
                    param("reflector_path_factor", f.coef[1], f.se(1), ""),
                ],
                f,
                2,
            )
        }
    };
    let (tau0, g) = (params[0].value, params[1].value);
    let model_hz = pts.iter().map(|p| nf / (tau0 + g * p.x / a)).collect();
    Some(StageLoop {
        n,
        params,
        equivalent_orders: equivalent,
        resolution,
        chi2: fit.chi2,
        free: free_count,
        model_hz,
    })
}

/// Shared-loop model across stages for pressure sweeps: y = n_s / f = (N/kappa) Ls/Uj +
/// (N/a) Ls + tau0, with n per stage taken from the per-stage cell ratios.
fn shared_pressure(
    points: &[Point],
    ph: &[PointPhysics],
    res: &StagingResult,
    cfg: &FitConfig,
) -> Option<SharedLoop> {
    // Only stages with their own fit take part; points of the others are left out.
    let fitted: Vec<usize> = (0..res.stages.len()).filter(|&s| res.stages[s].fit.is_some()).collect();
    if fitted.len() < 2 {
        return None;
    }
    let ratio_of = |s: usize| res.stages[s].fit.as_ref().map_or(1.0, |f| f.params[1].value / f64::from(f.n));
    let ratios: Vec<f64> = (0..res.stages.len()).map(ratio_of).collect();
    let rmax = fitted.iter().map(|&s| ratios[s]).fold(f64::MIN, f64::max);
    let solve = |orders: &[u32]| -> Option<LinearFit> {
        let mut rows = Vec::with_capacity(points.len());
        let mut y = Vec::with_capacity(points.len());
        let mut w = Vec::with_capacity(points.len());
        for (i, p) in points.iter().enumerate() {
            if res.stages[res.stage_of[i]].fit.is_none() {
                continue;
            }
            let n = f64::from(orders[res.stage_of[i]]);
            let q = ph[i];
            rows.push(if cfg.fit_delay {
                vec![q.ls_m / q.uj_m_s, q.ls_m, 1.0]
            } else {
                vec![q.ls_m / q.uj_m_s, q.ls_m]
            });
            y.push(n / p.f);
            w.push(weight(p, n));
        }
        weighted_lsq(&rows, &y, &w)
    };
    let mut best: Option<(Vec<u32>, LinearFit)> = None;
    for base in 1..=cfg.max_order {
        let orders: Vec<u32> = ratios
            .iter()
            .map(|r| ((f64::from(base) * rmax / r).round() as u32).clamp(1, cfg.max_order))
            .collect();
        let Some(fit) = solve(&orders) else { continue };
        let cells = fit.coef[1] * cfg.a_amb;
        let kappa = cells / fit.coef[0];
        let physical = kappa >= cfg.kappa.0
            && kappa <= cfg.kappa.1
            && cells >= cfg.source_cells.0
            && cells <= cfg.source_cells.1;
        let better = best.as_ref().is_none_or(|(_, b)| fit.chi2 < 0.999 * b.chi2);
        if physical && better {
            best = Some((orders, fit));
        }
    }
    let (orders, fit) = best?;
    let cells = fit.coef[1] * cfg.a_amb;
    let kappa = cells / fit.coef[0];
    let p = fit.coef.len();
    let cov = |j: usize, k: usize| fit.cov.as_ref().map(|c| c[j * p + k]);
    // Delta method for kappa = a c2 / c1 and N = a c2.
    let kappa_se = match (cov(0, 0), cov(1, 1), cov(0, 1)) {
        (Some(v11), Some(v22), Some(v12)) => {
            let (c1, c2) = (fit.coef[0], fit.coef[1]);
            let d1 = -cfg.a_amb * c2 / (c1 * c1);
            let d2 = cfg.a_amb / c1;
            Some((d1 * d1 * v11 + d2 * d2 * v22 + 2.0 * d1 * d2 * v12).max(0.0).sqrt())
        }
        _ => None,
    };
    let mut params = vec![
        param("convection_ratio", kappa, kappa_se, ""),
        param("source_cells", cells, fit.se(1).map(|s| s * cfg.a_amb), "cells"),
    ];
    params.push(if cfg.fit_delay {
        param("fixed_delay_s", fit.coef[2], fit.se(2), "s")
    } else {
        fixed("fixed_delay_s", 0.0, "s")
    });
    Some(SharedLoop {
        orders,
        params,
        chi2: fit.chi2,
        free: fit.coef.len(),
        resolution: format!(
            "all loop orders, N and tau0 scale together; chose the lowest orders that fit best with kappa in [{}, {}] \
             and N in [{}, {}]",
            cfg.kappa.0, cfg.kappa.1, cfg.source_cells.0, cfg.source_cells.1
        ),
    })
}

/// Shared reflector loop: y = n_s / f = tau0 + g d / a with n per stage from the stage fits.
fn shared_reflector(points: &[Point], res: &StagingResult, cfg: &FitConfig) -> Option<SharedLoop> {
    let orders: Vec<u32> = res.stages.iter().map(|s| s.fit.as_ref().map_or(0, |f| f.n)).collect();
    if orders.iter().filter(|&&n| n > 0).count() < 2 {
        return None;
    }
    let a = cfg.a_amb;
    let mut rows = Vec::new();
    let mut y = Vec::new();
    let mut w = Vec::new();
    for (i, p) in points.iter().enumerate() {
        if orders[res.stage_of[i]] == 0 {
            continue;
        }
        let n = f64::from(orders[res.stage_of[i]]);
        match cfg.reflector {
            ReflectorPath::Fixed(g) => {
                rows.push(vec![1.0]);
                y.push(n / p.f - g * p.x / a);
            }
            ReflectorPath::Free(..) => {
                rows.push(vec![1.0, p.x / a]);
                y.push(n / p.f);
            }
        }
        w.push(weight(p, n));
    }
    let fit = weighted_lsq(&rows, &y, &w)?;
    let mut params = vec![param("fixed_delay_s", fit.coef[0], fit.se(0), "s")];
    params.push(match cfg.reflector {
        ReflectorPath::Fixed(g) => fixed("reflector_path_factor", g, ""),
        ReflectorPath::Free(..) => param("reflector_path_factor", fit.coef[1], fit.se(1), ""),
    });
    Some(SharedLoop {
        orders,
        params,
        chi2: fit.chi2,
        free: fit.coef.len(),
        resolution: "loop orders per stage from the stage fits; one delay (and path factor) for all stages"
            .into(),
    })
}

/// Segments and fits. `physics` holds Ls and Uj per point for pressure sweeps.
pub fn fit_stages(
    points: &[Point],
    kind: SweepKind,
    physics: Option<&[PointPhysics]>,
    cfg: &FitConfig,
) -> StagingResult {
    let mut res = stages(points, cfg.jump_fraction);
    for s in &mut res.stages {
        let pts: Vec<Point> = s.points.iter().map(|&i| points[i]).collect();
        s.fit = match (kind, physics) {
            (SweepKind::Npr | SweepKind::Mach, Some(ph)) => {
                let q: Vec<PointPhysics> = s.points.iter().map(|&i| ph[i]).collect();
                fit_pressure_stage(&pts, &q, cfg)
            }
            (SweepKind::Reflector, _) => fit_reflector_stage(&pts, cfg),
            _ => None,
        };
    }
    res.shared = match (kind, physics) {
        (SweepKind::Npr | SweepKind::Mach, Some(ph)) => shared_pressure(points, ph, &res, cfg),
        (SweepKind::Reflector, _) => shared_reflector(points, &res, cfg),
        _ => None,
    };
    res
}

/// AIC and BIC from chi^2 with `k` parameters and `m` points (Gaussian errors of known scale).
pub fn information_criteria(chi2: f64, k: usize, m: usize) -> (f64, f64) {
    (chi2 + 2.0 * k as f64, chi2 + k as f64 * (m as f64).ln())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::cells;
    use crate::physics::gas::Gas;
    use crate::physics::jet::{jet_state, ExpandedJet, Nozzle, OperatingPoint};

    use crate::test_rng::Rng;

    fn physics_at_mj(mj: f64) -> PointPhysics {
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

    fn a_amb() -> f64 {
        Gas::AIR.sound_speed(288.15)
    }

    fn cfg() -> FitConfig {
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
        let res = stages(&pts, 0.05);
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
        let res = stages(&pts, 0.05);
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
    fn thousand_points_in_six_stages_is_fast_enough_to_measure() {
        // Not a timed test: checks that 6 stages of 1000 points are found (the benchmark
        // measures the time).
        let mut pts = Vec::new();
        for k in 0..1000 {
            let x = 1.0 + f64::from(k) / 1000.0;
            let s = (k / 167) as f64;
            let f = 3000.0 * 1.12f64.powf(s) * (1.0 - 0.02 * (x - 1.0));
            pts.push(Point { x, f, sigma: 0.005 * f, direction: Direction::Unknown, order: None });
        }
        assert_eq!(stages(&pts, 0.05).stages.len(), 6);
    }
}
