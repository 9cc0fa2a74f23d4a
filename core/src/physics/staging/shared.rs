//! Shared-loop models across stages (one convection ratio, source cell and delay, or one
//! delay and path factor, for every stage; a loop order per stage).

use super::*;
use crate::physics::lsq::{weighted_lsq, LinearFit};

/// Shared-loop model across stages for pressure sweeps:
/// `n_s / f = N Ls (1/(kappa Uj) + 1/a) + tau0`, with one convection ratio kappa, one whole source cell N and one delay tau0 for
/// every stage and a loop order n_s per stage. N is an integer searched over its bounds (or
/// held at the given value, as in the per-stage fits); for each N the model is linear in
/// (1/kappa, tau0): y = n/f - N Ls/a = (1/kappa) N Ls/Uj + tau0. Orders come from the per-stage
/// cell ratios scaled together; kappa must lie in its bounds.
pub(super) fn shared_pressure(
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
    let solve = |orders: &[u32], cells: f64| -> Option<LinearFit> {
        let mut rows = Vec::with_capacity(points.len());
        let mut y = Vec::with_capacity(points.len());
        let mut w = Vec::with_capacity(points.len());
        for (i, p) in points.iter().enumerate() {
            if res.stages[res.stage_of[i]].fit.is_none() {
                continue;
            }
            let n = f64::from(orders[res.stage_of[i]]);
            let q = ph[i];
            let x = cells * q.ls_m / q.uj_m_s;
            rows.push(if cfg.fit_delay { vec![x, 1.0] } else { vec![x] });
            y.push(n / p.f - cells * q.ls_m / cfg.a_amb);
            w.push(weight(p, n));
        }
        weighted_lsq(&rows, &y, &w)
    };
    let cell_range: Vec<u32> = match cfg.source_cells_fixed {
        Some(n) => vec![n.round() as u32],
        None => (cfg.source_cells.0.ceil() as u32..=cfg.source_cells.1.floor() as u32).collect(),
    };
    let mut best: Option<(Vec<u32>, u32, LinearFit)> = None;
    for base in 1..=cfg.max_order {
        let orders: Vec<u32> = ratios
            .iter()
            .map(|r| ((f64::from(base) * rmax / r).round() as u32).clamp(1, cfg.max_order))
            .collect();
        for &cells in &cell_range {
            let Some(fit) = solve(&orders, f64::from(cells)) else { continue };
            if fit.coef[0] <= 0.0 {
                continue;
            }
            let kappa = 1.0 / fit.coef[0];
            let physical = kappa >= cfg.kappa.0 && kappa <= cfg.kappa.1;
            let better = best.as_ref().is_none_or(|(_, _, b)| fit.chi2 < 0.999 * b.chi2);
            if physical && better {
                best = Some((orders.clone(), cells, fit));
            }
        }
    }
    let (orders, cells, fit) = best?;
    let kappa = 1.0 / fit.coef[0];
    // Delta method: kappa = 1 / c0.
    let kappa_se = fit.se(0).map(|s| s * kappa * kappa);
    let mut params = vec![param("convection_ratio", kappa, kappa_se, "")];
    params.push(match cfg.source_cells_fixed {
        Some(_) => Param { fixed: true, ..fixed("source_cells", f64::from(cells), "cells") },
        None => Param { se: None, fixed: true, ..param("source_cells", f64::from(cells), None, "cells") },
    });
    params.push(if cfg.fit_delay {
        param("fixed_delay_s", fit.coef[1], fit.se(1), "s")
    } else {
        fixed("fixed_delay_s", 0.0, "s")
    });
    let cells_text = match cfg.source_cells_fixed {
        Some(n) => format!("N held at the given {n}"),
        None => format!("whole N in [{}, {}]", cfg.source_cells.0, cfg.source_cells.1),
    };
    Some(SharedLoop {
        verdict: FitVerdict::NoFreedom,
        p_value: None,
        orders,
        params,
        chi2: fit.chi2,
        // kappa (and tau0) fitted; N chosen from a finite set of integers.
        free: fit.coef.len() + usize::from(cfg.source_cells_fixed.is_none()),
        resolution: format!(
            "all loop orders scale together; chose the lowest orders and the source cell that fit best with \
             kappa in [{}, {}] and {cells_text}",
            cfg.kappa.0, cfg.kappa.1
        ),
    })
}

/// Shared reflector loop: y = n_s / f = tau0 + g d / a with n per stage from the stage fits.
pub(super) fn shared_reflector(points: &[Point], res: &StagingResult, cfg: &FitConfig) -> Option<SharedLoop> {
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
    // A free path factor that falls outside its bounds is held at the nearer bound and the
    // delay refitted: bounds are bounds in every model.
    if let ReflectorPath::Free(lo, hi) = cfg.reflector {
        let g = fit.coef[1];
        if g < lo || g > hi {
            let gb = g.clamp(lo, hi);
            let mut y = Vec::with_capacity(rows.len());
            let mut rows_b = Vec::with_capacity(rows.len());
            for (i, p) in points.iter().enumerate() {
                if orders[res.stage_of[i]] == 0 {
                    continue;
                }
                let n = f64::from(orders[res.stage_of[i]]);
                rows_b.push(vec![1.0]);
                y.push(n / p.f - gb * p.x / a);
            }
            let fit_b = weighted_lsq(&rows_b, &y, &w)?;
            return Some(SharedLoop {
                verdict: FitVerdict::NoFreedom,
                p_value: None,
                orders,
                params: vec![
                    param("fixed_delay_s", fit_b.coef[0], fit_b.se(0), "s"),
                    Param { at_bound: true, ..fixed("reflector_path_factor", gb, "") },
                ],
                chi2: fit_b.chi2,
                free: 1,
                resolution: format!(
                    "loop orders per stage from the stage fits; one delay for all stages; the path factor \
                     ({g:.3} unconstrained) held at its bound {gb}"
                ),
            });
        }
    }
    let mut params = vec![param("fixed_delay_s", fit.coef[0], fit.se(0), "s")];
    params.push(match cfg.reflector {
        ReflectorPath::Fixed(g) => fixed("reflector_path_factor", g, ""),
        ReflectorPath::Free(..) => param("reflector_path_factor", fit.coef[1], fit.se(1), ""),
    });
    Some(SharedLoop {
        verdict: FitVerdict::NoFreedom,
        p_value: None,
        orders,
        params,
        chi2: fit.chi2,
        free: fit.coef.len(),
        resolution: "loop orders per stage from the stage fits; one delay (and path factor) for all stages"
            .into(),
    })
}
