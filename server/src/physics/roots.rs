//! Safeguarded Newton iteration for monotonic functions on a bracket.

/// Finds x in `[lo, hi]` with `f(x) = 0` for a function that changes sign once on the bracket.
/// `f` returns the value and the derivative; a Newton step that leaves the current bracket is
/// replaced by bisection, so the iteration always converges. Stops when the bracket or step is
/// below 4 ulp relative, or after 400 iterations.
pub(crate) fn newton_bracketed(f: impl Fn(f64) -> (f64, f64), mut lo: f64, mut hi: f64) -> f64 {
    let (flo, _) = f(lo);
    let rising = flo < 0.0;
    let mut x = 0.5 * (lo + hi);
    for _ in 0..400 {
        let (fx, dfx) = f(x);
        if fx == 0.0 {
            return x;
        }
        if (fx < 0.0) == rising {
            lo = x;
        } else {
            hi = x;
        }
        let newton = x - fx / dfx;
        let next = if newton.is_finite() && newton > lo && newton < hi { newton } else { 0.5 * (lo + hi) };
        if (next - x).abs() <= 4.0 * f64::EPSILON * x.abs().max(f64::MIN_POSITIVE)
            || (hi - lo) <= 4.0 * f64::EPSILON * hi.abs()
        {
            return next;
        }
        x = next;
    }
    x
}

#[cfg(test)]
mod tests {
    #[test]
    fn finds_square_root_of_two() {
        let r = super::newton_bracketed(|x| (x * x - 2.0, 2.0 * x), 0.0, 10.0);
        assert!((r - std::f64::consts::SQRT_2).abs() < 1e-15);
        let r = super::newton_bracketed(|x| (2.0 - x * x, -2.0 * x), 0.0, 10.0);
        assert!((r - std::f64::consts::SQRT_2).abs() < 1e-15);
    }
}
