//! Loop fit of one stage of a reflector sweep: 1/f = tau0/n + (g/n) d/a.

use super::*;
use crate::physics::lsq::weighted_lsq;

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
    let (verdict, p_value) = FitVerdict::of(fit.chi2, pts.len(), free_count);
    Some(StageLoop {
        n,
        params,
        equivalent_orders: equivalent,
        resolution,
        chi2: fit.chi2,
        free: free_count,
        model_hz,
        verdict,
        p_value,
    })
}
