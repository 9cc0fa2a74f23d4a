//! Loop fits of one stage of a pressure (NPR or Mj) sweep: the integer grid over n and N with
//! kappa and tau0 by weighted linear least squares inside.

use super::*;
use crate::cancel::{Cancel, Stopped};
use crate::physics::lsq::{weighted_lsq, LinearFit};

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
    fit_pressure_stage_until(pts, ph, cfg, &Cancel::default()).unwrap_or(None)
}

/// As [`fit_pressure_stage`], checking `cancel` before each cell of the integer grid.
///
/// # Errors
/// [`Stopped`] once `cancel` is set.
pub fn fit_pressure_stage_until(
    pts: &[Point],
    ph: &[PointPhysics],
    cfg: &FitConfig,
    cancel: &Cancel,
) -> Result<Option<StageLoop>, Stopped> {
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
            cancel.check()?;
            if let Some((params, fit, free)) = pressure_fixed_n(pts, ph, n, c, cfg) {
                all.push((n, c, params, fit.chi2, free));
            }
        }
    }
    Ok(best_of(all, ph, cfg))
}

/// The best grid fit and the fits the data cannot tell from it.
fn best_of(
    mut all: Vec<(u32, f64, Vec<Param>, f64, usize)>,
    ph: &[PointPhysics],
    cfg: &FitConfig,
) -> Option<StageLoop> {
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
    let model_hz: Vec<f64> = ph.iter().map(|q| model_pressure(&params, n, q, cfg.a_amb)).collect();
    let (verdict, p_value) = FitVerdict::of(chi2, model_hz.len(), free);
    Some(StageLoop {
        n,
        params,
        equivalent_orders: orders,
        resolution,
        chi2,
        free,
        model_hz,
        verdict,
        p_value,
    })
}
