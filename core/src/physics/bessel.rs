//! Bessel functions of the first kind of integer order and their zeros, and the modified
//! Bessel functions K0, K1 of the second kind.
//!
//! `J_n(x) = (1/2pi) * integral over one period of cos(n t - x sin t) dt` (Bessel's integral).
//! The integrand is smooth and periodic, so the trapezoidal rule converges geometrically; with
//! more nodes than `|x| + n + 40` the error is at the level of rounding for the arguments used
//! here (|x| up to a few hundred), and no term exceeds 1 in magnitude, so there is no
//! cancellation.

use std::f64::consts::PI;

fn nodes(n: u32, x: f64) -> usize {
    // Exponential convergence sets in once the node count exceeds the bandwidth |x| + n.
    let need = 2.0 * (x.abs() + f64::from(n)) + 48.0;
    need.min(1.0e6) as usize
}

/// J_n(x) for integer order `n` >= 0 and finite `x`.
pub fn jn(n: u32, x: f64) -> f64 {
    let m = nodes(n, x);
    let h = 2.0 * PI / m as f64;
    let nf = f64::from(n);
    let s: f64 = (0..m)
        .map(|k| {
            let t = k as f64 * h;
            (nf * t - x * t.sin()).cos()
        })
        .sum();
    s / m as f64
}

/// The first `count` positive zeros of J0 (j0,1 = 2.404825557695773, ...), by Newton's method
/// from McMahon's asymptotic expansion (Abramowitz & Stegun 9.5.12), J0' = -J1.
pub fn j0_zeros(count: usize) -> Vec<f64> {
    (1..=count)
        .map(|s| {
            let beta = (s as f64 - 0.25) * PI;
            let b8 = 8.0 * beta;
            let mut x = beta + 1.0 / b8 - 124.0 / (3.0 * b8.powi(3)) + 120_928.0 / (15.0 * b8.powi(5));
            for _ in 0..30 {
                let step = jn(0, x) / jn(1, x); // x - J0/J0' = x + J0/J1
                x += step;
                if step.abs() < 1e-15 * x {
                    break;
                }
            }
            x
        })
        .collect()
}

/// Most zeros kept in the cache.
pub const CACHED_ZEROS: usize = 20;

/// The first [`CACHED_ZEROS`] zeros of J0, computed once per process.
pub fn j0_zeros_cached() -> &'static [f64] {
    static ZEROS: std::sync::OnceLock<Vec<f64>> = std::sync::OnceLock::new();
    ZEROS.get_or_init(|| j0_zeros(CACHED_ZEROS))
}

/// First zero of J0.
pub fn j01() -> f64 {
    j0_zeros_cached()[0]
}

/// J_0(x), J_1(x), J_2(x), J_3(x) together for `x` >= 0, by Miller's backward recurrence
/// `J_{n-1} = (2n/x) J_n - J_{n+1}` from an order far above x (where J_n is below 1e-20 of
/// the largest value), normalized by `J_0 + 2 (J_2 + J_4 + ...) = 1` (Abramowitz & Stegun
/// 9.1.27 and 9.1.46; Numerical Recipes' bessj). Stable downward; rescaled to avoid overflow.
/// Agrees with [`jn`] to 1e-14 (tests) at a tenth of its cost.
pub fn j0_to_j3(x: f64) -> [f64; 4] {
    if x < 1e-300 {
        return [1.0, 0.0, 0.0, 0.0];
    }
    let start = 2 * (((x + 30.0 + 8.0 * x.cbrt()) / 2.0) as usize + 2);
    let mut out = [0.0; 4];
    let (mut jp, mut j) = (0.0_f64, 1e-250_f64);
    let mut even_sum = 0.0;
    for n in (1..=start).rev() {
        // j holds J_n, jp holds J_{n+1}; step down to J_{n-1}.
        let jm = 2.0 * n as f64 / x * j - jp;
        jp = j;
        j = jm;
        if j.abs() > 1e200 {
            j *= 1e-200;
            jp *= 1e-200;
            even_sum *= 1e-200;
            for o in &mut out {
                *o *= 1e-200;
            }
        }
        let k = n - 1;
        if k < 4 {
            out[k] = j;
        }
        if k > 0 && k % 2 == 0 {
            even_sum += j;
        }
    }
    let norm = j + 2.0 * even_sum;
    out.map(|v| v / norm)
}

/// J_m(x) and its derivative J_m'(x) for m = 0, 1, 2 (J_m' = (J_{m-1} - J_{m+1}) / 2,
/// J_{-1} = -J_1).
pub fn jm_and_derivative(m: u32, x: f64) -> (f64, f64) {
    let j = j0_to_j3(x);
    match m {
        0 => (j[0], -j[1]),
        1 => (j[1], 0.5 * (j[0] - j[2])),
        _ => (j[2], 0.5 * (j[1] - j[3])),
    }
}

/// `e^x K_0(x)` and `e^x K_1(x)` for `x` > 0, from `K_nu(x) = integral over t >= 0 of
/// exp(-x cosh t) cosh(nu t) dt` (Watson 1944, 6.22; Abramowitz & Stegun 9.6.24) by the
/// trapezoidal rule. The integrand is analytic and decays double-exponentially, so the rule
/// converges geometrically: the step is at most 0.2 and at most 0.6 / sqrt(x) (the integrand's
/// width), the sum stops where `x (cosh t - 1)` exceeds 40; the error is at the level of
/// rounding (checked against tabulated values and, in tests/python, scipy.special.k0e/k1e).
pub fn k0_k1_scaled(x: f64) -> (f64, f64) {
    let h = 0.2_f64.min(0.6 / x.sqrt());
    let t_max = (1.0 + 40.0 / x).acosh();
    let n = (t_max / h).ceil() as usize;
    let (mut k0, mut k1) = (0.5, 0.5);
    // cosh(i h) and sinh(i h) by the addition formulas (one exp per node instead of three).
    let (chh, shh) = (h.cosh(), h.sinh());
    let (mut ch, mut sh) = (1.0_f64, 0.0_f64);
    for _ in 1..=n {
        let c2 = ch * chh + sh * shh;
        sh = sh * chh + ch * shh;
        ch = c2;
        let e = (-x * (ch - 1.0)).exp();
        k0 += e;
        k1 += e * ch;
    }
    (k0 * h, k1 * h)
}

/// `-x K_m'(x) / K_m(x)` for m = 0, 1, 2 and `x` >= 0 (positive, increasing, tending to m as
/// x -> 0): from K_0' = -K_1, K_1' = -K_0 - K_1/x, K_2 = K_0 + 2 K_1/x, K_2' = -K_1 - 2 K_2/x.
pub fn k_log_derivative(m: u32, x: f64) -> f64 {
    if x < 1e-12 {
        return f64::from(m.min(2));
    }
    let (k0, k1) = k0_k1_scaled(x);
    match m {
        0 => x * k1 / k0,
        1 => 1.0 + x * k0 / k1,
        _ => 2.0 + x * k1 / (k0 + 2.0 * k1 / x),
    }
}

/// The first `count` positive zeros of `f` (continuous on x > 0), found by stepping 0.05 from
/// 0.01 and refining each sign change by Brent's method.
fn zeros_of(f: impl Fn(f64) -> f64, count: usize) -> Vec<f64> {
    let mut out = Vec::with_capacity(count);
    let mut x0 = 0.01;
    let mut f0 = f(x0);
    while out.len() < count && x0 < 1000.0 {
        let x1 = x0 + 0.05;
        let f1 = f(x1);
        if (f0 > 0.0) != (f1 > 0.0) {
            if let Some(z) = super::roots::brent(&f, x0, x1, 0.0) {
                out.push(z);
            }
        }
        x0 = x1;
        f0 = f1;
    }
    out
}

/// Zeros of J_m (m = 0, 1, 2) and of J_m' (m = 1, 2; those of J_0' are the zeros of J_1), the
/// first [`ORDER_ZEROS`] of each, computed once per process. Index `[m]`.
pub struct OrderZeros {
    /// Positive zeros j_{m,s} of J_m.
    pub of_j: [Vec<f64>; 3],
    /// Positive zeros j'_{m,s} of J_m' (x = 0 excluded).
    pub of_derivative: [Vec<f64>; 3],
}

/// Zeros kept per order.
pub const ORDER_ZEROS: usize = 8;

/// The cached [`OrderZeros`].
pub fn order_zeros() -> &'static OrderZeros {
    static Z: std::sync::OnceLock<OrderZeros> = std::sync::OnceLock::new();
    Z.get_or_init(|| OrderZeros {
        of_j: [0, 1, 2].map(|m| zeros_of(|x| jm_and_derivative(m, x).0, ORDER_ZEROS)),
        of_derivative: [0, 1, 2].map(|m| zeros_of(|x| jm_and_derivative(m, x).1, ORDER_ZEROS)),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn first_zeros_of_j0_match_published_values() {
        // Abramowitz & Stegun (1964) Table 9.5; scipy.special.jn_zeros(0, 5) gives the same
        // digits (cross-checked in tests/python to 1e-13).
        let published = [
            2.404_825_557_695_773,
            5.520_078_110_286_311,
            8.653_727_912_911_013,
            11.791_534_439_014_281,
            14.930_917_708_487_787,
        ];
        for (z, p) in j0_zeros(5).iter().zip(published) {
            assert!((z - p).abs() < 1e-13, "{z} vs {p}");
        }
        // Pack's constant pi / j0,1, usually quoted as 1.306 (Pack 1950; the "1.3065" in our
        // working notes was misrounded: the closed form is 1.306370...).
        assert!((PI / j01() - 1.306).abs() < 5e-4);
        assert!((PI / j01() - 1.306_370_286_832_766).abs() < 1e-14);
    }

    #[test]
    fn bessel_values_match_tables() {
        // Abramowitz & Stegun Table 9.1: J0(1) = 0.765197686557967, J1(1) = 0.440050585744934,
        // J2(5) = 0.046565116277752 (memory; agree with scipy.special.jv).
        assert!((jn(0, 1.0) - 0.765_197_686_557_966_6).abs() < 1e-15);
        assert!((jn(1, 1.0) - 0.440_050_585_744_933_5).abs() < 1e-15);
        assert!((jn(2, 5.0) - 0.046_565_116_277_752_2).abs() < 1e-14);
        for x in [1e-3, 0.3, 1.0, 2.404_825_557_695_773, 5.0, 17.5, 40.0, 120.0] {
            let j = j0_to_j3(x);
            for (n, v) in j.iter().enumerate() {
                assert!((v - jn(n as u32, x)).abs() < 1e-14, "J{n}({x})");
            }
        }
    }

    #[test]
    fn modified_bessel_k_matches_tables() {
        // Abramowitz & Stegun Table 9.8 to its 10 digits; the full digits below are those
        // scipy.special.k0 / k1 print (SciPy 1.x): K0(1), K1(1), K0(0.1), K1(2), K0(10).
        let k = |x: f64| {
            let (a, b) = k0_k1_scaled(x);
            (a * (-x).exp(), b * (-x).exp())
        };
        let rel = |a: f64, b: f64| ((a - b) / b).abs();
        assert!(rel(k(1.0).0, 0.421_024_438_240_708_3) < 1e-13);
        assert!(rel(k(1.0).1, 0.601_907_230_197_234_6) < 1e-13);
        assert!(rel(k(0.1).0, 2.427_069_024_702_016_4) < 1e-13);
        assert!(rel(k(2.0).1, 0.139_865_881_816_522_4) < 1e-13);
        assert!(rel(k(10.0).0, 1.778_006_231_616_765e-5) < 1e-12);
        // Limits: -x K_m'/K_m -> m as x -> 0, and ~ x + 1/2 for large x (A&S 9.7.2).
        assert!((k_log_derivative(1, 1e-9) - 1.0).abs() < 1e-6);
        assert!((k_log_derivative(2, 1e-6) - 2.0).abs() < 1e-6);
        assert!((k_log_derivative(0, 200.0) - 200.5).abs() < 2e-3);
    }

    #[test]
    fn zeros_of_orders_match_tables() {
        // Abramowitz & Stegun Table 9.5 (memory; scipy.special.jn_zeros / jnp_zeros agree):
        // j1,1 = 3.831705970207512, j2,1 = 5.135622301840683, j'1,1 = 1.841183781340659,
        // j'2,1 = 3.054236928227140, j0,2 = 5.520078110286311.
        let z = order_zeros();
        assert!((z.of_j[1][0] - 3.831_705_970_207_512).abs() < 1e-13);
        assert!((z.of_j[2][0] - 5.135_622_301_840_683).abs() < 1e-13);
        assert!((z.of_derivative[1][0] - 1.841_183_781_340_659).abs() < 1e-13);
        assert!((z.of_derivative[2][0] - 3.054_236_928_227_14).abs() < 1e-13);
        assert!((z.of_j[0][1] - 5.520_078_110_286_311).abs() < 1e-13);
        assert!((z.of_derivative[0][0] - z.of_j[1][0]).abs() < 1e-13);
    }
}
