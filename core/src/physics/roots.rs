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

/// Brent's method (Brent 1973, "Algorithms for Minimization without Derivatives", ch. 4):
/// a root of `f` on `[a, b]` where `f(a)` and `f(b)` differ in sign, by inverse quadratic
/// interpolation and secant steps safeguarded by bisection. Converges whenever the bracket is
/// valid; stops when the bracket is below `2 eps |x| + tol` or after 200 iterations. Returns
/// `None` when the ends do not bracket a sign change.
pub(crate) fn brent(f: impl Fn(f64) -> f64, a: f64, b: f64, tol: f64) -> Option<f64> {
    let (mut a, mut b) = (a, b);
    let (mut fa, mut fb) = (f(a), f(b));
    if fa == 0.0 {
        return Some(a);
    }
    if fb == 0.0 {
        return Some(b);
    }
    if !(fa.is_finite() && fb.is_finite()) || (fa > 0.0) == (fb > 0.0) {
        return None;
    }
    let (mut c, mut fc) = (a, fa);
    let mut d = b - a;
    let mut e = d;
    for _ in 0..200 {
        if (fb > 0.0) == (fc > 0.0) {
            c = a;
            fc = fa;
            d = b - a;
            e = d;
        }
        if fc.abs() < fb.abs() {
            a = b;
            b = c;
            c = a;
            fa = fb;
            fb = fc;
            fc = fa;
        }
        let tol1 = 2.0 * f64::EPSILON * b.abs() + 0.5 * tol;
        let xm = 0.5 * (c - b);
        if xm.abs() <= tol1 || fb == 0.0 {
            return Some(b);
        }
        if e.abs() >= tol1 && fa.abs() > fb.abs() {
            let s = fb / fa;
            let (mut p, mut q);
            if a == c {
                p = 2.0 * xm * s;
                q = 1.0 - s;
            } else {
                let qq = fa / fc;
                let r = fb / fc;
                p = s * (2.0 * xm * qq * (qq - r) - (b - a) * (r - 1.0));
                q = (qq - 1.0) * (r - 1.0) * (s - 1.0);
            }
            if p > 0.0 {
                q = -q;
            }
            p = p.abs();
            let min1 = 3.0 * xm * q - (tol1 * q).abs();
            let min2 = (e * q).abs();
            if 2.0 * p < min1.min(min2) {
                e = d;
                d = p / q;
            } else {
                d = xm;
                e = d;
            }
        } else {
            d = xm;
            e = d;
        }
        a = b;
        fa = fb;
        b += if d.abs() > tol1 { d } else { tol1.copysign(xm) };
        fb = f(b);
        if !fb.is_finite() {
            return None;
        }
    }
    Some(b)
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

    #[test]
    fn brent_finds_roots_and_refuses_non_brackets() {
        // cos x = x at 0.739085133215160641655312087673873 (the Dottie number; closed form
        // known to many digits, e.g. OEIS A003957).
        let r = super::brent(|x| x.cos() - x, 0.0, 1.0, 0.0).unwrap();
        assert!((r - 0.739_085_133_215_160_6).abs() < 1e-15);
        assert!(super::brent(|x| x * x + 1.0, -1.0, 1.0, 0.0).is_none());
    }
}
