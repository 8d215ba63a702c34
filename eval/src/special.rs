//! The few special functions the significance tests need, written out so the
//! crate has no numerical dependency.
//!
//! - Chi-square survival function with one degree of freedom:
//!   `P(X > x) = Q(1/2, x/2)`, the regularised upper incomplete gamma function,
//!   evaluated by its power series for `x/2 < 3/2` and by its continued fraction
//!   (modified Lentz) otherwise (common practice), with `Gamma(1/2) = sqrt(pi)`.
//! - Binomial lower tail with success probability 1/2:
//!   `P(K <= k) = sum_{j <= k} C(n, j) / 2^n`, summed in log space so large `n`
//!   neither overflows nor underflows.

const A: f64 = 0.5;

fn ln_gamma_half() -> f64 {
    0.5 * std::f64::consts::PI.ln()
}

/// Regularised lower incomplete gamma `P(1/2, x)` by its series.
fn gamma_p_series(x: f64) -> f64 {
    let mut term = 1.0 / A;
    let mut sum = term;
    let mut ap = A;
    for _ in 0..1000 {
        ap += 1.0;
        term *= x / ap;
        sum += term;
        if term.abs() < sum.abs() * 1e-17 {
            break;
        }
    }
    sum * (-x + A * x.ln() - ln_gamma_half()).exp()
}

/// Regularised upper incomplete gamma `Q(1/2, x)` by its continued fraction.
fn gamma_q_fraction(x: f64) -> f64 {
    let tiny = 1e-300;
    let mut b = x + 1.0 - A;
    let mut c = 1.0 / tiny;
    let mut d = 1.0 / b;
    let mut h = d;
    for i in 1..1000 {
        let an = -(i as f64) * (i as f64 - A);
        b += 2.0;
        d = an * d + b;
        if d.abs() < tiny {
            d = tiny;
        }
        c = b + an / c;
        if c.abs() < tiny {
            c = tiny;
        }
        d = 1.0 / d;
        let delta = d * c;
        h *= delta;
        if (delta - 1.0).abs() < 1e-16 {
            break;
        }
    }
    (-x + A * x.ln() - ln_gamma_half()).exp() * h
}

/// `P(X > x)` for a chi-square variable with one degree of freedom.
pub fn chi2_sf_1dof(x: f64) -> f64 {
    if x <= 0.0 {
        return 1.0;
    }
    let half = x / 2.0;
    if half < A + 1.0 {
        1.0 - gamma_p_series(half)
    } else {
        gamma_q_fraction(half)
    }
}

/// `P(K <= k)` for `K ~ Binomial(n, 1/2)`.
pub fn binomial_half_cdf(k: u64, n: u64) -> f64 {
    if k >= n {
        return 1.0;
    }
    let mut ln_pmf = -(n as f64) * std::f64::consts::LN_2;
    let mut sum = ln_pmf.exp();
    for j in 0..k {
        ln_pmf += ((n - j) as f64).ln() - ((j + 1) as f64).ln();
        sum += ln_pmf.exp();
    }
    sum.min(1.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chi2_known_quantiles() {
        // 3.841458820694124 is the 95th percentile of chi-square(1)
        // (scipy.stats.chi2.ppf(0.95, 1), from memory; also checked against
        // scipy in tests/reference).
        assert!((chi2_sf_1dof(3.841458820694124) - 0.05).abs() < 1e-12);
        // Closed form for one degree of freedom: P(X > z^2) = 2 (1 - Phi(z));
        // z = 1 gives 0.31731050786291415 (from memory).
        assert!((chi2_sf_1dof(1.0) - 0.31731050786291415).abs() < 1e-12);
        assert_eq!(chi2_sf_1dof(0.0), 1.0);
        assert!(chi2_sf_1dof(400.0) > 0.0 && chi2_sf_1dof(400.0) < 1e-80);
    }

    #[test]
    fn binomial_by_hand() {
        // n = 4: pmf 1, 4, 6, 4, 1 over 16.
        assert!((binomial_half_cdf(0, 4) - 1.0 / 16.0).abs() < 1e-15);
        assert!((binomial_half_cdf(1, 4) - 5.0 / 16.0).abs() < 1e-15);
        assert!((binomial_half_cdf(2, 4) - 11.0 / 16.0).abs() < 1e-15);
        assert_eq!(binomial_half_cdf(4, 4), 1.0);
        // Large n does not underflow: P(K <= 1000) for n = 2000 is just over 1/2.
        let p = binomial_half_cdf(1000, 2000);
        assert!(p > 0.5 && p < 0.52, "{p}");
    }
}
