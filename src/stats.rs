//! Distribution functions the tracker needs: chi-square quantiles for
//! gates and for the consistency (NEES/NIS) tests.
//!
//! STUB: to be implemented (regularized incomplete gamma, its inverse).

/// Lower regularized incomplete gamma function P(a, x).
pub fn gamma_p(a: f64, x: f64) -> f64 {
    let _ = (a, x);
    todo!("gamma_p")
}

/// Chi-square cumulative distribution function with `dof` degrees of freedom.
pub fn chi2_cdf(x: f64, dof: f64) -> f64 {
    gamma_p(dof / 2.0, x / 2.0)
}

/// The `p` quantile of the chi-square distribution with `dof` degrees of
/// freedom: the x with chi2_cdf(x, dof) = p. `p` in (0, 1).
pub fn chi2_quantile(p: f64, dof: f64) -> f64 {
    let _ = (p, dof);
    todo!("chi2_quantile")
}
