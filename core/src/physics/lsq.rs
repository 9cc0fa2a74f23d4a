//! Weighted linear least squares for a few parameters, with the covariance of the estimate.

/// Solution of a weighted linear least-squares problem.
#[derive(Debug, Clone, PartialEq)]
pub struct LinearFit {
    /// Coefficients.
    pub coef: Vec<f64>,
    /// Covariance of the coefficients, scaled by the residual variance chi^2 / (m - p) when
    /// m > p (row-major p x p); `None` when there are no degrees of freedom or the normal
    /// matrix is singular.
    pub cov: Option<Vec<f64>>,
    /// Weighted sum of squared residuals chi^2.
    pub chi2: f64,
}

impl LinearFit {
    /// Standard error of coefficient `k`.
    pub fn se(&self, k: usize) -> Option<f64> {
        let p = self.coef.len();
        self.cov.as_ref().map(|c| c[k * p + k].max(0.0).sqrt())
    }
}

/// Solves min sum w_i (y_i - sum_k a_ik c_k)^2 for rows `a` (each of length p). Returns `None`
/// when the normal matrix is singular (collinear columns) or there are fewer rows than
/// columns.
pub fn weighted_lsq(a: &[Vec<f64>], y: &[f64], w: &[f64]) -> Option<LinearFit> {
    let p = a.first()?.len();
    let m = y.len();
    if m < p || p == 0 {
        return None;
    }
    // Normal equations, with columns scaled to unit norm for conditioning.
    let mut scale = vec![0.0; p];
    for (row, wi) in a.iter().zip(w) {
        for k in 0..p {
            scale[k] += wi * row[k] * row[k];
        }
    }
    for s in &mut scale {
        *s = if *s > 0.0 { s.sqrt() } else { 1.0 };
    }
    let mut n = vec![0.0; p * p];
    let mut b = vec![0.0; p];
    for ((row, yi), wi) in a.iter().zip(y).zip(w) {
        for j in 0..p {
            let rj = row[j] / scale[j];
            b[j] += wi * rj * yi;
            for k in 0..p {
                n[j * p + k] += wi * rj * row[k] / scale[k];
            }
        }
    }
    let inv = invert(&n, p)?;
    let coef: Vec<f64> =
        (0..p).map(|j| (0..p).map(|k| inv[j * p + k] * b[k]).sum::<f64>() / scale[j]).collect();
    let chi2: f64 = a
        .iter()
        .zip(y)
        .zip(w)
        .map(|((row, yi), wi)| {
            let r = yi - row.iter().zip(&coef).map(|(x, c)| x * c).sum::<f64>();
            wi * r * r
        })
        .sum();
    let cov = (m > p).then(|| {
        let s2 = chi2 / (m - p) as f64;
        (0..p * p).map(|i| inv[i] * s2 / (scale[i / p] * scale[i % p])).collect()
    });
    Some(LinearFit { coef, cov, chi2 })
}

/// Gauss-Jordan inverse with partial pivoting; `None` when singular.
fn invert(a: &[f64], p: usize) -> Option<Vec<f64>> {
    let mut m = a.to_vec();
    let mut inv: Vec<f64> = (0..p * p).map(|i| if i / p == i % p { 1.0 } else { 0.0 }).collect();
    for col in 0..p {
        let piv = (col..p).max_by(|&i, &j| m[i * p + col].abs().total_cmp(&m[j * p + col].abs()))?;
        if m[piv * p + col].abs() < 1e-13 {
            return None;
        }
        for k in 0..p {
            m.swap(col * p + k, piv * p + k);
            inv.swap(col * p + k, piv * p + k);
        }
        let d = m[col * p + col];
        for k in 0..p {
            m[col * p + k] /= d;
            inv[col * p + k] /= d;
        }
        for r in 0..p {
            if r != col {
                let f = m[r * p + col];
                if f != 0.0 {
                    for k in 0..p {
                        m[r * p + k] -= f * m[col * p + k];
                        inv[r * p + k] -= f * inv[col * p + k];
                    }
                }
            }
        }
    }
    Some(inv)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn straight_line_with_known_covariance() {
        // y = 2 + 3x exactly: coefficients recovered, chi^2 zero.
        let a: Vec<Vec<f64>> = (0..10).map(|i| vec![1.0, f64::from(i)]).collect();
        let y: Vec<f64> = (0..10).map(|i| 2.0 + 3.0 * f64::from(i)).collect();
        let f = weighted_lsq(&a, &y, &[1.0; 10]).unwrap();
        assert!((f.coef[0] - 2.0).abs() < 1e-12 && (f.coef[1] - 3.0).abs() < 1e-12);
        assert!(f.chi2 < 1e-20);
        // Textbook slope variance s^2 / sum (x - xbar)^2 with alternating +-1 residuals.
        let y2: Vec<f64> =
            y.iter().enumerate().map(|(i, v)| v + if i % 2 == 0 { 1.0 } else { -1.0 }).collect();
        let f2 = weighted_lsq(&a, &y2, &[1.0; 10]).unwrap();
        let sxx: f64 = (0..10).map(|i| (f64::from(i) - 4.5).powi(2)).sum();
        let s2 = f2.chi2 / 8.0;
        assert!((f2.se(1).unwrap() - (s2 / sxx).sqrt()).abs() < 1e-12);
        assert!(weighted_lsq(&[vec![1.0, 1.0], vec![2.0, 2.0], vec![3.0, 3.0]], &[1.0, 2.0, 3.0], &[1.0; 3])
            .is_none());
    }
}
