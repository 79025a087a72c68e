//! Distribution functions for the calibration tests: Student's t (intercept
//! test, prediction bounds) and Fisher's F (lack of fit).
//!
//! Both reduce to the regularised incomplete beta function I_x(a, b),
//! evaluated by its continued fraction with the modified Lentz method
//! (Press et al., *Numerical Recipes*, 3rd ed., §6.4), with ln Γ from the
//! Lanczos approximation (g = 7, 9 terms; Lanczos, SIAM J. Numer. Anal. B
//! 1:86, 1964).

/// ln Γ(x) for x > 0 (the shared implementation in `diagnostics::stats`).
pub fn ln_gamma(x: f64) -> f64 {
    crate::diagnostics::stats::ln_gamma(x)
}

/// The regularised incomplete beta function I_x(a, b), a, b > 0 (the shared
/// implementation in `diagnostics::stats`).
pub fn regularized_beta(a: f64, b: f64, x: f64) -> f64 {
    crate::diagnostics::stats::beta_inc(a, b, x)
}

/// Two-sided p-value of Student's t statistic with `df` degrees of freedom:
/// P(|T| ≥ |t|).
pub fn student_t_two_sided_p(t: f64, df: f64) -> f64 {
    if !t.is_finite() {
        return 0.0;
    }
    regularized_beta(0.5 * df, 0.5, df / (df + t * t))
}

/// The t value exceeded in absolute value with probability `alpha` (two-sided
/// critical value), e.g. alpha = 0.01 for a 99 % bound.
pub fn student_t_critical(alpha: f64, df: f64) -> f64 {
    let mut hi = 1.0;
    while student_t_two_sided_p(hi, df) > alpha && hi < 1e12 {
        hi *= 2.0;
    }
    let mut lo = 0.0;
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if student_t_two_sided_p(mid, df) > alpha {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Upper-tail p-value of Fisher's F statistic with (d1, d2) degrees of
/// freedom: P(F ≥ f).
pub fn f_upper_p(f: f64, d1: f64, d2: f64) -> f64 {
    if f <= 0.0 {
        return 1.0;
    }
    if !f.is_finite() {
        return 0.0;
    }
    regularized_beta(0.5 * d2, 0.5 * d1, d2 / (d2 + d1 * f))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Agreement asked of the special functions: they are accurate to about
    /// 1e-14; 1e-10 leaves room for the printed reference digits.
    const TOL: f64 = 1e-10;

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= TOL * b.abs().max(1e-300) || (a - b).abs() < 1e-14
    }

    #[test]
    fn ln_gamma_matches_scipy() {
        // scipy.special.gammaln 1.17.1.
        for (x, want) in [
            (0.5, 0.5723649429247),
            (1.0, 0.0),
            (3.5, 1.2009736023470743),
            (10.0, 12.801827480081469),
            (100.5, 361.43554046777757),
        ] {
            assert!(close(ln_gamma(x), want), "{x}: {}", ln_gamma(x));
        }
    }

    #[test]
    fn incomplete_beta_matches_scipy() {
        // scipy.special.betainc(a, b, x) 1.17.1.
        for (a, b, x, want) in [
            (0.5, 2.5, 0.3, 0.7968893362799453),
            (5.0, 0.5, 0.9, 0.3166429150200122),
            (10.0, 10.0, 0.5, 0.5),
            (2.0, 3.0, 0.05, 0.014018749999999998),
        ] {
            let got = regularized_beta(a, b, x);
            assert!(close(got, want), "({a}, {b}, {x}): {got}");
        }
    }

    #[test]
    fn t_and_f_tails_match_scipy() {
        // 2·scipy.stats.t.sf(|t|, df) and scipy.stats.f.sf(f, d1, d2), 1.17.1.
        for (t, df, want) in [
            (2.0, 5.0, 0.10193947882985835),
            (0.5, 1.0, 0.7048327646991335),
            (3.7, 12.0, 0.0030357709644811513),
            (10.0, 3.0, 0.0021283990584141503),
            (1.96, 1000.0, 0.050273184955748736),
        ] {
            let got = student_t_two_sided_p(t, df);
            assert!(close(got, want), "t {t} df {df}: {got}");
        }
        for (f, d1, d2, want) in [
            (3.0, 3.0, 10.0, 0.08174695180982475),
            (0.8, 2.0, 5.0, 0.49953413669564334),
            (12.5, 1.0, 4.0, 0.024110110551390906),
            (2.2, 4.0, 30.0, 0.09289644138330096),
        ] {
            let got = f_upper_p(f, d1, d2);
            assert!(close(got, want), "F {f} ({d1}, {d2}): {got}");
        }
    }

    #[test]
    fn t_critical_values_match_scipy() {
        // scipy.stats.t.ppf(1 − alpha/2, df) 1.17.1.
        for (alpha, df, want) in [
            (0.05, 2.0, 4.302652729749462),
            (0.01, 4.0, 4.604094871349992),
            (0.01, 10.0, 3.16927267261695),
            (0.05, 30.0, 2.0422724563012378),
        ] {
            let got = student_t_critical(alpha, df);
            assert!((got - want).abs() < 1e-9 * want, "{alpha} {df}: {got}");
        }
    }
}
