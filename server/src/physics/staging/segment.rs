//! Model-free segmentation: branches by frequency continuity, jumps per sweep direction,
//! hysteresis intervals and smooth fits (see the module documentation of `staging`).

use super::*;
use crate::physics::lsq::weighted_lsq;

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
