//! Shared-loop models across stages (one convection ratio, source cell and delay, or one
//! delay and path factor, for every stage; a loop order per stage).

use super::*;
use crate::physics::lsq::{weighted_lsq, LinearFit};

/// Shared-loop model across stages for pressure sweeps: y = n_s / f = (N/kappa) Ls/Uj +
/// (N/a) Ls + tau0, with n per stage taken from the per-stage cell ratios.
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
