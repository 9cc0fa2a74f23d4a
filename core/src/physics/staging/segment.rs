//! Model-free and model-guided segmentation: branches by frequency continuity inside each
//! sweep pass, branches linked across passes into stages, jumps per pass, hysteresis
//! intervals and smooth fits (see the module documentation of `staging`).

use super::*;
use crate::physics::lsq::weighted_lsq;
use std::collections::{HashMap, HashSet};

/// Point-to-point changes up to this many standard deviations of the stated frequency
/// uncertainty are taken as noise, never as a jump.
pub const NOISE_SIGMAS: f64 = 4.0;

/// Infers directions from acquisition order where not given: the direction of travel into
/// each point (the sign of the x change from the last acquisition at another x). Points
/// before the first change of x take the direction out of them, so a repeated first value
/// or a repeated turnaround value never leaves a point without a direction or with the
/// direction of the pass it does not belong to.
pub fn infer_directions(points: &mut [Point]) {
    let mut idx: Vec<usize> = (0..points.len()).filter(|&i| points[i].order.is_some()).collect();
    idx.sort_by_key(|&i| points[i].order);
    let sign = |dx: f64| {
        if dx > 0.0 {
            Direction::Increasing
        } else if dx < 0.0 {
            Direction::Decreasing
        } else {
            Direction::Unknown
        }
    };
    // Direction into each acquisition, from the previous acquisition at a different x.
    let mut into = vec![Direction::Unknown; idx.len()];
    let mut prev: Option<f64> = None;
    for k in 0..idx.len() {
        let x = points[idx[k]].x;
        if k > 0 && x != points[idx[k - 1]].x {
            prev = Some(points[idx[k - 1]].x);
        }
        into[k] = prev.map_or(Direction::Unknown, |p| sign(x - p));
    }
    // Before the first change: the direction out of the first run.
    if let Some(first_known) = into.iter().position(|d| *d != Direction::Unknown) {
        let d = into[first_known];
        into[..first_known].fill(d);
    }
    for (k, &i) in idx.iter().enumerate() {
        if points[i].direction == Direction::Unknown {
            points[i].direction = into[k];
        }
    }
}

/// The loop-model scale of each point of a pressure sweep: T(x) = Ls (1/(kappa Uj) + 1/a)
/// with kappa the middle of its bounds, divided by its median. For one loop order, source
/// cell and convection ratio, f T is constant (Powell's criterion), so a stage is a level
/// line in f T however fast f itself moves (near Mj = 1 the tone falls 10-20 % per step),
/// and stages of different loop orders stay apart by the ratio of their orders.
pub fn loop_scale(physics: &[PointPhysics], cfg: &FitConfig) -> Vec<f64> {
    let kappa = 0.5 * (cfg.kappa.0 + cfg.kappa.1);
    let t: Vec<f64> = physics.iter().map(|q| q.ls_m * (1.0 / (kappa * q.uj_m_s) + 1.0 / cfg.a_amb)).collect();
    let mut sorted = t.clone();
    sorted.sort_by(f64::total_cmp);
    let mid = sorted.get(sorted.len() / 2).copied().unwrap_or(1.0);
    t.iter().map(|v| v / mid).collect()
}

/// How far apart stages must be to be told apart.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Separation {
    /// The requested relative frequency change that separates stages.
    pub requested: f64,
    /// Median relative frequency uncertainty of the points.
    pub median_relative_sigma: f64,
    /// [`NOISE_SIGMAS`] times that: changes below it are noise.
    pub noise_floor: f64,
}

impl Separation {
    /// Of a set of points and a requested jump fraction.
    pub fn of(points: &[Point], requested: f64) -> Separation {
        let mut rel: Vec<f64> = points.iter().map(|p| p.sigma / p.f).filter(|r| r.is_finite()).collect();
        rel.sort_by(f64::total_cmp);
        let median_relative_sigma = rel.get(rel.len() / 2).copied().unwrap_or(0.0);
        Separation { requested, median_relative_sigma, noise_floor: NOISE_SIGMAS * median_relative_sigma }
    }

    /// The threshold used: the larger of the two.
    pub fn threshold(&self) -> f64 {
        self.requested.max(self.noise_floor)
    }

    /// A sentence for the answer when the noise raised the threshold.
    pub fn warning(&self) -> Option<String> {
        (self.noise_floor > self.requested).then(|| {
            format!(
                "At the stated frequency uncertainty (median {:.2} % of f), changes up to {:.1} % ({} standard \
                 deviations) are within the noise: stages whose frequencies differ by less than that cannot be \
                 separated and are reported as one (the jump fraction {:.1} % was raised to {:.1} %). State \
                 smaller uncertainties only if the tones are known better.",
                100.0 * self.median_relative_sigma,
                100.0 * self.noise_floor,
                NOISE_SIGMAS,
                100.0 * self.requested,
                100.0 * self.noise_floor,
            )
        })
    }
}

/// The values segmentation compares: f, or f times the loop-model scale.
struct Levels<'a> {
    points: &'a [Point],
    y: Vec<f64>,
    /// True when y is a loop-model level (flat within a stage): predictions are local means;
    /// otherwise local straight lines.
    flat: bool,
}

impl Levels<'_> {
    /// The level predicted at x from `near` (up to four members): their mean (flat) or the
    /// straight line through them, clamped to half and one and a half times the level of the
    /// member nearest in x.
    fn predict_from(&self, near: &[usize], x: f64) -> f64 {
        let n = near.len() as f64;
        let my = near.iter().map(|&i| self.y[i]).sum::<f64>() / n;
        if self.flat {
            return my;
        }
        let nearest = near
            .iter()
            .min_by(|&&a, &&b| (self.points[a].x - x).abs().total_cmp(&(self.points[b].x - x).abs()))
            .map_or(my, |&i| self.y[i]);
        let mx = near.iter().map(|&i| self.points[i].x).sum::<f64>() / n;
        let sxx: f64 = near.iter().map(|&i| (self.points[i].x - mx).powi(2)).sum();
        let sxy: f64 = near.iter().map(|&i| (self.points[i].x - mx) * (self.y[i] - my)).sum();
        let slope = if sxx > 0.0 { sxy / sxx } else { 0.0 };
        (my + slope * (x - mx)).clamp(0.5 * nearest, 1.5 * nearest)
    }

    /// The level a branch predicts for its next point at x: from its last (up to) four members.
    fn next(&self, members: &[usize], x: f64) -> f64 {
        let tail: Vec<usize> = members.iter().rev().take(4).copied().collect();
        self.predict_from(&tail, x)
    }

    /// The level a group predicts at x from its (up to) four members nearest in x;
    /// `sorted` holds the members by increasing x.
    fn at(&self, sorted: &[usize], x: f64) -> f64 {
        let pos = sorted.partition_point(|&i| self.points[i].x < x);
        let lo = pos.saturating_sub(4);
        let hi = (pos + 4).min(sorted.len());
        let mut near: Vec<usize> = sorted[lo..hi].to_vec();
        near.sort_by(|&a, &b| (self.points[a].x - x).abs().total_cmp(&(self.points[b].x - x).abs()));
        near.truncate(4);
        self.predict_from(&near, x)
    }
}

/// Sweep passes: points with an acquisition index in acquisition order, cut where the
/// direction changes; the others grouped by direction, increasing and unknown by increasing
/// x, decreasing by decreasing x (ties by frequency).
fn passes(points: &[Point]) -> Vec<Vec<usize>> {
    let mut out: Vec<Vec<usize>> = Vec::new();
    let mut ordered: Vec<usize> = (0..points.len()).filter(|&i| points[i].order.is_some()).collect();
    ordered.sort_by_key(|&i| (points[i].order, i));
    let mut last_dir = None;
    for i in ordered {
        let d = points[i].direction;
        match out.last_mut() {
            Some(pass) if last_dir == Some(d) => pass.push(i),
            _ => out.push(vec![i]),
        }
        last_dir = Some(d);
    }
    for dir in [Direction::Increasing, Direction::Decreasing, Direction::Unknown] {
        let mut idx: Vec<usize> =
            (0..points.len()).filter(|&i| points[i].order.is_none() && points[i].direction == dir).collect();
        idx.sort_by(|&a, &b| {
            let by_x = points[a].x.total_cmp(&points[b].x);
            let by_x = if dir == Direction::Decreasing { by_x.reverse() } else { by_x };
            by_x.then(points[a].f.total_cmp(&points[b].f))
        });
        if !idx.is_empty() {
            out.push(idx);
        }
    }
    out
}

/// A piece of one stage inside one pass: (pass, smallest x, largest x).
type Run = (usize, f64, f64);

/// Branches linked so far: their members by increasing x and the runs they came from.
struct Group {
    sorted: Vec<usize>,
    runs: Vec<Run>,
    lo: f64,
    hi: f64,
}

impl Group {
    fn of(points: &[Point], pass: usize, mut members: Vec<usize>) -> Group {
        members.sort_by(|&a, &b| points[a].x.total_cmp(&points[b].x).then(a.cmp(&b)));
        let (lo, hi) = (points[members[0]].x, points[members[members.len() - 1]].x);
        Group { sorted: members, runs: vec![(pass, lo, hi)], lo, hi }
    }

    /// Two runs of one pass that overlap in x coexist: never one stage.
    fn clashes(&self, other: &Group) -> bool {
        self.runs.iter().any(|r| other.runs.iter().any(|s| r.0 == s.0 && r.1.max(s.1) <= r.2.min(s.2)))
    }

    /// Up to `k` members spread evenly over those with x in [lo, hi].
    fn sample_in(&self, points: &[Point], lo: f64, hi: f64, k: usize) -> Vec<usize> {
        let a = self.sorted.partition_point(|&i| points[i].x < lo);
        let b = self.sorted.partition_point(|&i| points[i].x <= hi);
        let inside = &self.sorted[a..b];
        let step = inside.len().div_ceil(k).max(1);
        inside.iter().step_by(step).copied().collect()
    }
}

/// Values of x a branch of an acquired pass may miss (another stage's points taking them)
/// and still continue: intermittent switching between coexisting stages, not a stage change.
const MAX_MISSED_STEPS: usize = 3;

/// Most members compared per group when two groups overlap.
const OVERLAP_SAMPLE: usize = 64;
/// Most rounds of linking (a stage cut into single points where it moves fast is rejoined
/// one piece per round; sixteen covers any such run seen in practice and bounds the work on
/// data without stages).
const LINK_ROUNDS: usize = 16;

/// Segmentation into stages. `scale` is the loop-model scale of each point (pressure sweeps,
/// [`loop_scale`]) or `None` (local straight lines in f). Inside each pass, a point joins the
/// open branch whose prediction is nearest, if within `threshold` of it; a branch closes
/// after an x gap of twenty median point spacings. Branches are then linked into stages in
/// rounds, best agreement first: two groups are one stage when they overlap in x and agree
/// there (median deviation within half the threshold) or when one continues the other across
/// a gap holding no other point (within the threshold); two branches of one pass that overlap
/// in x are never one stage (they coexist). Rounds repeat so that a stage cut into pieces where it moves fast
/// is rejoined piece by piece.
pub fn segment(points: &[Point], scale: Option<&[f64]>, threshold: f64) -> Vec<Vec<usize>> {
    let levels = Levels {
        points,
        y: match scale {
            Some(s) => points.iter().zip(s).map(|(p, s)| p.f * s).collect(),
            None => points.iter().map(|p| p.f).collect(),
        },
        flat: scale.is_some(),
    };
    // The sweep's step: the median x step between successive points of a pass. (Not the
    // spacing of all distinct x values: an up and a down pass of a continuous ramp sample
    // interleaved x values a hair apart, and that spacing would close every branch.)
    let all_passes = passes(points);
    let mut gaps: Vec<f64> = all_passes
        .iter()
        .flat_map(|pass| pass.windows(2).map(|w| (points[w[1]].x - points[w[0]].x).abs()))
        .filter(|&d| d > 0.0)
        .collect();
    gaps.sort_by(f64::total_cmp);
    let gap_limit = gaps.get(gaps.len() / 2).map_or(f64::INFINITY, |g| 20.0 * g);
    let rel = |a: f64, b: f64| ((a - b) / b).abs();
    let mut all_x: Vec<f64> = points.iter().map(|p| p.x).collect();
    all_x.sort_by(f64::total_cmp);

    let mut groups: Vec<Group> = Vec::new();
    for (pass, members) in all_passes.into_iter().enumerate() {
        // In acquisition order, a branch that other branches have passed by for more than
        // MAX_MISSED_STEPS values of x is closed: the tone went to another stage, and a later
        // tone at a similar level is a stage of its own (A2 -> B -> C with C near A2).
        let ordered = members.first().is_some_and(|&i| points[i].order.is_some());
        let mut open: Vec<(Vec<usize>, usize)> = Vec::new();
        let (mut step, mut last_x) = (0usize, None::<f64>);
        for i in members {
            let p = points[i];
            if last_x.is_some_and(|x| x != p.x) {
                step += 1;
            }
            last_x = Some(p.x);
            // Branches left behind by more than the gap (or passed by) are closed.
            let (keep, closed): (Vec<_>, Vec<_>) = open.into_iter().partition(|(b, at)| {
                b.last().is_some_and(|&l| (p.x - points[l].x).abs() <= gap_limit)
                    && !(ordered && step - at > MAX_MISSED_STEPS + 1)
            });
            open = keep;
            groups.extend(closed.into_iter().map(|(m, _)| Group::of(points, pass, m)));
            let mut best: Option<(usize, f64)> = None;
            for (bi, (b, _)) in open.iter().enumerate() {
                let d = rel(levels.y[i], levels.next(b, p.x));
                if d <= threshold && best.is_none_or(|(_, bd)| d < bd) {
                    best = Some((bi, d));
                }
            }
            match best {
                Some((bi, _)) => {
                    open[bi].0.push(i);
                    open[bi].1 = step;
                }
                None => open.push((vec![i], step)),
            }
        }
        groups.extend(open.into_iter().map(|(m, _)| Group::of(points, pass, m)));
    }

    // Disagreement of two groups, None when they cannot be one stage.
    let score = |ga: &Group, gb: &Group| -> Option<f64> {
        let overlap = ga.lo.max(gb.lo) <= ga.hi.min(gb.hi);
        if overlap {
            let (lo, hi) = (ga.lo.max(gb.lo), ga.hi.min(gb.hi));
            let mut dev: Vec<f64> = Vec::new();
            for (from, to) in [(ga, gb), (gb, ga)] {
                for i in to.sample_in(points, lo, hi, OVERLAP_SAMPLE) {
                    dev.push(rel(levels.y[i], levels.at(&from.sorted, points[i].x)));
                }
            }
            dev.sort_by(f64::total_cmp);
            let m = dev[dev.len() / 2];
            (m <= 0.5 * threshold).then_some(m)
        } else {
            let (early, late) = if ga.hi < gb.lo { (ga, gb) } else { (gb, ga) };
            if late.lo - early.hi > gap_limit {
                return None;
            }
            // Never across points of another stage: a tone that left and came back at a
            // similar level is not the same stage continued (A2 -> B -> C with C near A2).
            let inside = all_x.partition_point(|&x| x <= early.hi) < all_x.partition_point(|&x| x < late.lo);
            if inside {
                return None;
            }
            let end = |g: &Group, x: f64| {
                let a = g.sorted.partition_point(|&i| points[i].x < x);
                let b = g.sorted.partition_point(|&i| points[i].x <= x);
                levels.at(&g.sorted[a..b], x)
            };
            let forward = rel(end(late, late.lo), levels.at(&early.sorted, late.lo));
            let backward = rel(end(early, early.hi), levels.at(&late.sorted, early.hi));
            let d = forward.min(backward);
            (d <= threshold).then_some(d)
        }
    };
    for _ in 0..LINK_ROUNDS {
        let mut order: Vec<usize> = (0..groups.len()).collect();
        order.sort_by(|&a, &b| groups[a].lo.total_cmp(&groups[b].lo));
        let mut links: Vec<(f64, usize, usize)> = Vec::new();
        for (k, &a) in order.iter().enumerate() {
            for &b in &order[k + 1..] {
                if groups[b].lo > groups[a].hi + gap_limit {
                    break;
                }
                if groups[a].clashes(&groups[b]) {
                    continue;
                }
                if let Some(d) = score(&groups[a], &groups[b]) {
                    links.push((d, a, b));
                }
            }
        }
        if links.is_empty() {
            break;
        }
        links.sort_by(|l, m| l.0.total_cmp(&m.0));
        // Best first; a group joins at most one link per round (scores of merged groups
        // change, so they are scored again next round).
        let mut touched = vec![false; groups.len()];
        let mut into: Vec<Option<usize>> = vec![None; groups.len()];
        for (_, a, b) in links {
            if touched[a] || touched[b] {
                continue;
            }
            touched[a] = true;
            touched[b] = true;
            into[b] = Some(a);
        }
        let mut merged: Vec<Option<Group>> = groups.into_iter().map(Some).collect();
        for b in 0..merged.len() {
            if let Some(a) = into[b] {
                let gb = merged[b].take().expect("merged once");
                let ga = merged[a].as_mut().expect("target kept");
                ga.sorted.extend(gb.sorted);
                ga.sorted.sort_by(|&p, &q| points[p].x.total_cmp(&points[q].x).then(p.cmp(&q)));
                ga.runs.extend(gb.runs);
                ga.lo = ga.lo.min(gb.lo);
                ga.hi = ga.hi.max(gb.hi);
            }
        }
        groups = merged.into_iter().flatten().collect();
    }
    let mut stages: Vec<Vec<usize>> = groups
        .into_iter()
        .map(|g| {
            let mut m = g.sorted;
            m.sort_by(|&a, &b| {
                points[a]
                    .x
                    .total_cmp(&points[b].x)
                    .then(points[a].order.cmp(&points[b].order))
                    .then(a.cmp(&b))
            });
            m
        })
        .collect();
    // Stages by first appearance in x, then by frequency there.
    stages.sort_by(|a, b| {
        let (pa, pb) = (points[a[0]], points[b[0]]);
        pa.x.total_cmp(&pb.x).then(pa.f.total_cmp(&pb.f))
    });
    stages
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

/// The stages present at each x of one pass, in pass order.
fn stage_sets(points: &[Point], stage_of: &[usize], pass: &[usize]) -> Vec<(f64, Vec<(usize, f64)>)> {
    let mut out: Vec<(f64, Vec<(usize, f64)>)> = Vec::new();
    for &i in pass {
        match out.last_mut() {
            Some((x, set)) if *x == points[i].x => set.push((stage_of[i], points[i].f)),
            _ => out.push((points[i].x, vec![(stage_of[i], points[i].f)])),
        }
    }
    out
}

/// Jumps inside one pass: where the set of stages present changes from one x to the next.
fn jumps_in(points: &[Point], stage_of: &[usize], pass: &[usize]) -> Vec<Jump> {
    let dir = pass.first().map_or(Direction::Unknown, |&i| points[i].direction);
    let sets = stage_sets(points, stage_of, pass);
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

/// Segments, reads jumps and hysteresis, and makes the smooth fits (no loop fits). `scale`
/// as in [`segment`]; the threshold is the jump fraction raised to the noise floor
/// ([`Separation`]), with a warning when it was.
pub fn stages(points: &[Point], scale: Option<&[f64]>, jump_fraction: f64) -> StagingResult {
    let sep = Separation::of(points, jump_fraction);
    let branches = segment(points, scale, sep.threshold());
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
    for pass in passes(points) {
        jumps.extend(jumps_in(points, &stage_of, &pass));
    }
    // Hysteresis: an up-jump and the nearest down-jump between the same two stages, at a
    // different x.
    let mut downs: HashMap<(usize, usize), Vec<f64>> = HashMap::new();
    for d in jumps.iter().filter(|j| j.direction == Direction::Decreasing) {
        downs.entry((d.to, d.from)).or_default().push(0.5 * (d.x_before + d.x_after));
    }
    let mut hysteresis: Vec<Hysteresis> = Vec::new();
    let mut seen = HashSet::new();
    for up in jumps.iter().filter(|j| j.direction == Direction::Increasing) {
        let xu = 0.5 * (up.x_before + up.x_after);
        let nearest = downs
            .get(&(up.from, up.to))
            .and_then(|xs| xs.iter().copied().min_by(|a, b| (a - xu).abs().total_cmp(&(b - xu).abs())));
        if let Some(xd) = nearest.filter(|&xd| xd != xu) {
            let h = Hysteresis { x_low: xu.min(xd), x_high: xu.max(xd), stages: (up.from, up.to) };
            if seen.insert((h.x_low.to_bits(), h.x_high.to_bits(), h.stages)) {
                hysteresis.push(h);
            }
        }
    }
    let warnings = sep.warning().into_iter().collect();
    StagingResult { stage_of, stages, jumps, hysteresis, shared: None, warnings }
}
