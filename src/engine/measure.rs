//! Measurement conversion: polar radar plots into Cartesian position
//! measurements with their covariance.
//!
//! A plot is a horizontal range r and a true bearing b (clockwise from
//! north) with independent zero-mean Gaussian errors of standard deviation
//! σ_r and σ_b. In the antenna's horizontal frame, east = r·sin b and
//! north = r·cos b.
//!
//! The plain conversion r_m·(sin b_m, cos b_m) is biased towards the
//! antenna: E[cos w] = λ = exp(−σ_b²/2) < 1 for bearing error w, so its mean
//! is λ·r·(sin b, cos b), about r·σ_b²/2 short (12 m at 20 km with
//! σ_b = 2°). [`polar_to_cartesian`] uses the unbiased converted measurement
//! (UCM) of Mo, Song, Zhou, Sun & Bar-Shalom, "Unbiased converted
//! measurements for tracking", IEEE Trans. Aerospace and Electronic Systems
//! 34(3), 1998, pp. 1023–1027:
//!
//! - mean: λ⁻¹·r_m·(sin b_m, cos b_m), whose expectation given the true
//!   position is exactly the true position;
//! - covariance: that paper's covariance evaluated at the measured values,
//!   E[(z − x)(z − x)ᵀ | r_m, b_m], where z is the converted measurement,
//!   x the true position, and the truth is taken as the measurement minus
//!   the noise.
//!
//! Consistency: the covariance matches the actual spread of the converted
//! error when r·σ_b² ≪ σ_r (a bearing-induced range bias well below the
//! range noise): for example r = 20 km, σ_b = 0.3°, σ_r = 15 m. Beyond that
//! it overstates the range-direction variance (it is conservative): by
//! about 2·r²·σ_b⁴ on average, 2.7 times the actual range variance at
//! 20 km, σ_b = 2°, σ_r = 20 m. The cross-range variance, which dominates,
//! stays right. The tests pin both facts. This is the "compatibility
//! problem" discussed by Duan, Han & Li, "Comments on 'Unbiased converted
//! measurements for tracking'", IEEE T-AES 40(4), 2004, whose modified
//! conversion (MUCM) also conditions the mean on the measurement; that
//! variant is not implemented here.

use nalgebra::{Matrix2, Vector2};

/// Converts a polar plot (horizontal range `range_m`, bearing `bearing_rad`
/// clockwise from north) with 1-sigma errors `sigma_r_m`, `sigma_b_rad`
/// into an (east, north) mean and covariance in the antenna's horizontal
/// frame, by the unbiased conversion of Mo et al. (1998): the mean is
/// unbiased, and the covariance is the mean squared conversion error
/// conditioned on the measured range and bearing. See the module docs for
/// where that covariance is consistent.
///
/// Expects range ≥ 0 and sigmas ≥ 0 (not checked: the callers validate
/// plots at the boundary). The covariance is positive semi-definite by
/// construction (a conditional second moment).
pub fn polar_to_cartesian(range_m: f64, bearing_rad: f64, sigma_r_m: f64, sigma_b_rad: f64) -> (Vector2<f64>, Matrix2<f64>) {
    polar_to_cartesian_with(range_m, bearing_rad.sin_cos(), sigma_r_m, &BearingNoise::new(sigma_b_rad))
}

/// The factors of [`polar_to_cartesian`] that depend on the bearing error
/// alone, worked out once per sensor rather than per plot (three
/// exponentials).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BearingNoise {
    /// λ⁻¹ = exp(σ_b²/2).
    inv_lambda: f64,
    /// g = λ⁻² − 1.
    g: f64,
    /// h = 1 − λ', λ' = exp(−2σ_b²).
    h: f64,
}

impl BearingNoise {
    pub fn new(sigma_b_rad: f64) -> BearingNoise {
        let var_b = sigma_b_rad * sigma_b_rad;
        // λ = E[cos w] = exp(−σ_b²/2) for Gaussian w.
        BearingNoise { inv_lambda: (0.5 * var_b).exp(), g: var_b.exp_m1(), h: -(-2.0 * var_b).exp_m1() }
    }
}

/// [`polar_to_cartesian`] with the bearing's sine and cosine and the
/// bearing factors given: the same numbers.
pub fn polar_to_cartesian_with(range_m: f64, (s, c): (f64, f64), sigma_r_m: f64, noise: &BearingNoise) -> (Vector2<f64>, Matrix2<f64>) {
    let var_r = sigma_r_m * sigma_r_m;
    let inv_lambda = noise.inv_lambda;
    let mean = Vector2::new(range_m * s * inv_lambda, range_m * c * inv_lambda);

    // Mo et al.'s covariance, north component for example,
    //   (λ⁻² − 2)·r²·cos²b + ½(r² + σ_r²)(1 + λ'·cos 2b),  λ' = exp(−2σ_b²),
    // regrouped with g = λ⁻² − 1 and h = 1 − λ' so that no term of size r²
    // cancels against another when σ_b is small:
    //   R = (g·r² + σ_r²)·u uᵀ + ½(r² + σ_r²)·h·[[cos 2b, −sin 2b], [−sin 2b, −cos 2b]]
    // in (east, north), with u = (sin b, cos b) the range direction.
    let r2 = range_m * range_m;
    let (g, h) = (noise.g, noise.h);
    let radial = g * r2 + var_r;
    let spread = 0.5 * (r2 + var_r) * h;
    let cos2 = c * c - s * s;
    let sin2 = 2.0 * s * c;
    let ee = radial * s * s + spread * cos2;
    let nn = radial * c * c - spread * cos2;
    let en = radial * s * c - spread * sin2;
    (mean, Matrix2::new(ee, en, en, nn))
}

/// Carries a covariance from one horizontal frame into another through the
/// linear map `to_site` between them (for example
/// [`crate::geo::Antenna::to_site`]): J·C·Jᵀ.
pub fn covariance_in_site(cov: &Matrix2<f64>, to_site: &Matrix2<f64>) -> Matrix2<f64> {
    let m = to_site * cov * to_site.transpose();
    // Exact symmetry, so later Cholesky/inverse steps see a symmetric input.
    let off = 0.5 * (m[(0, 1)] + m[(1, 0)]);
    Matrix2::new(m[(0, 0)], off, off, m[(1, 1)])
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::chi2_quantile;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;
    use rand_distr::StandardNormal;

    /// Moments of a Monte Carlo run at one true position, in the
    /// range / cross-range frame of the true bearing.
    struct Moments {
        n: f64,
        /// Mean converted error (range, cross-range), UCM.
        mean: Vector2<f64>,
        /// Mean error of the plain conversion r_m (sin b_m, cos b_m).
        plain_mean: Vector2<f64>,
        /// Sample second moment of the UCM error, E[e eᵀ].
        mse: Matrix2<f64>,
        /// Average of the returned covariances.
        avg_cov: Matrix2<f64>,
        /// Standard errors of the entries of `mse` and `avg_cov`, and of
        /// the two means (from the sample variances).
        se_mse: Matrix2<f64>,
        se_avg_cov: Matrix2<f64>,
        /// Sample covariances of the UCM and plain errors (for the mean tests).
        err_cov: Matrix2<f64>,
        plain_err_cov: Matrix2<f64>,
    }

    fn run(seed: u64, n: usize, r: f64, b: f64, sr: f64, sb: f64) -> Moments {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let truth = Vector2::new(r * b.sin(), r * b.cos());
        // Rows: range direction, cross-range direction (90° clockwise of it).
        let to_rc = Matrix2::new(b.sin(), b.cos(), b.cos(), -b.sin());
        let mut s1 = Vector2::zeros();
        let mut p1 = Vector2::zeros();
        let mut p2 = Matrix2::zeros();
        let mut m2 = Matrix2::zeros();
        let mut m4 = Matrix2::zeros(); // Σ (e_i e_j)²
        let mut c1 = Matrix2::zeros();
        let mut c2 = Matrix2::zeros(); // Σ R_ij²
        for _ in 0..n {
            let rm = r + sr * rng.sample::<f64, _>(StandardNormal);
            let bm = b + sb * rng.sample::<f64, _>(StandardNormal);
            let (z, cov) = polar_to_cartesian(rm, bm, sr, sb);
            let e = to_rc * (z - truth);
            let plain = to_rc * (Vector2::new(rm * bm.sin(), rm * bm.cos()) - truth);
            let cov_rc = to_rc * cov * to_rc.transpose();
            let outer = e * e.transpose();
            s1 += e;
            p1 += plain;
            p2 += plain * plain.transpose();
            m2 += outer;
            m4 += outer.component_mul(&outer);
            c1 += cov_rc;
            c2 += cov_rc.component_mul(&cov_rc);
        }
        let nf = n as f64;
        let mean = s1 / nf;
        let plain_mean = p1 / nf;
        let mse = m2 / nf;
        let avg_cov = c1 / nf;
        let se = |sq: Matrix2<f64>, first: Matrix2<f64>| (sq / nf - first.component_mul(&first)).map(|v| (v.max(0.0) / nf).sqrt());
        Moments {
            n: nf,
            mean,
            plain_mean,
            mse,
            avg_cov,
            se_mse: se(m4, mse),
            se_avg_cov: se(c2, avg_cov),
            err_cov: mse - mean * mean.transpose(),
            plain_err_cov: p2 / nf - plain_mean * plain_mean.transpose(),
        }
    }

    /// Hotelling-style statistic of a sample mean against zero: N·m̄ᵀ S⁻¹ m̄,
    /// approximately χ²(2) when the true mean is zero.
    fn mean_statistic(mean: Vector2<f64>, cov: Matrix2<f64>, n: f64) -> f64 {
        let inv = cov.try_inverse().expect("sample covariance is invertible");
        n * (mean.transpose() * inv * mean)[(0, 0)]
    }

    /// The covariance of the UCM error given the truth (Mo et al. 1998, the
    /// covariance conditioned on the true range and bearing), in the range /
    /// cross-range frame. Derived from E[cos² w] = ½(1 + λ'), E[sin² w] = ½(1 − λ').
    fn true_cov_rc(r: f64, sr: f64, sb: f64) -> Matrix2<f64> {
        let lam2 = (sb * sb).exp(); // λ⁻²
        let lp = (-2.0 * sb * sb).exp(); // λ'
        let range = lam2 * (r * r + sr * sr) * 0.5 * (1.0 + lp) - r * r;
        let cross = lam2 * (r * r + sr * sr) * 0.5 * (1.0 - lp);
        Matrix2::new(range, 0.0, 0.0, cross)
    }

    #[test]
    fn ucm_mean_is_unbiased_where_plain_conversion_is_not() {
        // Source of the expectation: Mo et al. 1998 (mean of the conversion
        // given the truth is λ·r for the plain one, r for the UCM).
        // σ_b = 2° at 20 km: the plain conversion's range bias is
        // (λ − 1)·r = −12.2 m, far above the Monte Carlo standard error.
        let (r, sr, sb) = (20_000.0, 20.0, 2.0_f64.to_radians());
        let n = 100_000;
        let threshold = chi2_quantile(1.0 - 1e-4, 2.0);
        let predicted_bias = ((-0.5 * sb * sb).exp() - 1.0) * r;
        for (i, &bdeg) in [30.0_f64, 135.0, 250.0, 359.0].iter().enumerate() {
            let m = run(11 + i as u64, n, r, bdeg.to_radians(), sr, sb);
            let t_ucm = mean_statistic(m.mean, m.err_cov, m.n);
            assert!(t_ucm < threshold, "bearing {bdeg}: UCM mean {:?} statistic {t_ucm}", m.mean);
            let t_plain = mean_statistic(m.plain_mean, m.plain_err_cov, m.n);
            println!(
                "bearing {bdeg}: UCM mean error (range, cross) = ({:.3}, {:.3}) m, statistic {t_ucm:.2}; plain = ({:.3}, {:.3}) m, statistic {t_plain:.0}; predicted plain range bias {predicted_bias:.3} m",
                m.mean.x, m.mean.y, m.plain_mean.x, m.plain_mean.y
            );
            assert!(t_plain > 100.0 * threshold, "bearing {bdeg}: plain statistic {t_plain}");
            // The plain bias is along the range direction and of the predicted size.
            let se_range = (m.plain_err_cov[(0, 0)] / m.n).sqrt();
            assert!((m.plain_mean.x - predicted_bias).abs() < 5.0 * se_range, "bearing {bdeg}: {} vs {predicted_bias}", m.plain_mean.x);
            assert!(predicted_bias.abs() > 50.0 * se_range);
        }
    }

    #[test]
    fn ucm_covariance_matches_sample_covariance_when_consistent() {
        // Where r·σ_b² ≪ σ_r, the average returned covariance equals the
        // actual mean squared error, entry by entry in the range /
        // cross-range frame, within 5 combined standard errors.
        let cases = [
            (20_000.0, 15.0, 0.3_f64.to_radians(), 40.0_f64.to_radians()),
            (2_000.0, 10.0, 1.0_f64.to_radians(), 200.0_f64.to_radians()),
            (8_000.0, 25.0, 0.5_f64.to_radians(), 315.0_f64.to_radians()),
        ];
        for (i, &(r, sr, sb, b)) in cases.iter().enumerate() {
            let m = run(101 + i as u64, 100_000, r, b, sr, sb);
            for (j, k) in [(0, 0), (1, 1), (0, 1)] {
                let tol = 5.0 * m.se_mse[(j, k)].hypot(m.se_avg_cov[(j, k)]);
                let diff = (m.mse[(j, k)] - m.avg_cov[(j, k)]).abs();
                assert!(diff < tol, "case {i} entry ({j},{k}): sample {} vs E[cov] {} (tol {tol})", m.mse[(j, k)], m.avg_cov[(j, k)]);
            }
            // And both agree with the covariance given the truth (closed form).
            let t = true_cov_rc(r, sr, sb);
            for (j, k) in [(0, 0), (1, 1)] {
                assert!((m.mse[(j, k)] - t[(j, k)]).abs() < 5.0 * m.se_mse[(j, k)], "case {i} ({j},{k})");
            }
        }
    }

    #[test]
    fn ucm_covariance_is_conservative_in_range_at_large_bearing_noise() {
        // σ_b = 2° at 20 km: the sample error covariance equals the
        // covariance given the truth, while the returned covariance
        // averages to that plus D, with D = +X along range and −X across,
        // X = ½·r²·(1 − λ')² − σ_r²·λ'(1 − λ'). D follows from taking the
        // expectation of Mo et al.'s measured-value covariance over the
        // measurement noise (E[r_m²] = r² + σ_r², E[cos 2b_m] = λ'·cos 2b).
        let (r, sr, sb, b) = (20_000.0, 20.0, 2.0_f64.to_radians(), 30.0_f64.to_radians());
        let m = run(7, 100_000, r, b, sr, sb);
        let t = true_cov_rc(r, sr, sb);
        let lp = (-2.0 * sb * sb).exp();
        let x = 0.5 * r * r * (1.0 - lp).powi(2) - sr * sr * lp * (1.0 - lp);
        for (j, k, d) in [(0, 0, x), (1, 1, -x), (0, 1, 0.0)] {
            assert!((m.mse[(j, k)] - t[(j, k)]).abs() < 5.0 * m.se_mse[(j, k)], "sample ({j},{k}) {} vs {}", m.mse[(j, k)], t[(j, k)]);
            let want = t[(j, k)] + d;
            assert!(
                (m.avg_cov[(j, k)] - want).abs() < 5.0 * m.se_avg_cov[(j, k)] + 1e-9 * want.abs(),
                "E[cov] ({j},{k}) {} vs {want}",
                m.avg_cov[(j, k)]
            );
        }
        // The overstatement is large here: about 2.7× the actual range variance.
        let ratio = m.avg_cov[(0, 0)] / m.mse[(0, 0)];
        println!(
            "range variance: sample {:.1} m², given truth {:.1} m², E[returned] {:.1} m² (predicted {:.1}), ratio {ratio:.2}",
            m.mse[(0, 0)],
            t[(0, 0)],
            m.avg_cov[(0, 0)],
            t[(0, 0)] + x
        );
        assert!(ratio > 2.4 && ratio < 3.0, "ratio {ratio}");
    }

    #[test]
    fn ucm_covariance_is_the_measurement_conditioned_mean_square_error() {
        // Definition check by quadrature (no sampling noise): for a fixed
        // measurement, average (z − x)(z − x)ᵀ over the truth
        // x = (r_m − w_r)(sin(b_m − w_b), cos(b_m − w_b)). The integrand is
        // quadratic in w_r, so the 3-point Gauss–Hermite rule (nodes 0, ±√3σ,
        // weights 2/3, 1/6, 1/6) is exact in w_r; in w_b the trapezoid rule
        // over ±12σ converges geometrically for this smooth Gaussian integrand.
        for &(rm, bm, sr, sb) in &[
            (20_000.0, 0.7, 20.0, 2.0_f64.to_radians()),
            (3_500.0, 4.0, 5.0, 5.0_f64.to_radians()),
            (150.0, 2.2, 30.0, 0.2_f64.to_radians()),
        ] {
            let (z, cov) = polar_to_cartesian(rm, bm, sr, sb);
            let mut acc = Matrix2::zeros();
            let steps = 2000;
            let span = 12.0 * sb;
            let dw = 2.0 * span / steps as f64;
            let mut wsum = 0.0;
            for i in 0..=steps {
                let wb = -span + i as f64 * dw;
                let trap = if i == 0 || i == steps { 0.5 } else { 1.0 };
                let wt_b = trap * (-0.5 * (wb / sb).powi(2)).exp();
                wsum += wt_b;
                for (node, wt_r) in [(0.0, 2.0 / 3.0), (3.0_f64.sqrt(), 1.0 / 6.0), (-(3.0_f64.sqrt()), 1.0 / 6.0)] {
                    let rt = rm - node * sr;
                    let bt = bm - wb;
                    let e = z - Vector2::new(rt * bt.sin(), rt * bt.cos());
                    acc += e * e.transpose() * (wt_b * wt_r);
                }
            }
            let want = acc / wsum;
            let err = (cov - want).norm() / want.norm();
            assert!(err < 1e-9, "r {rm} b {bm}: {cov} vs {want} (rel {err:e})");
        }
    }

    #[test]
    fn zero_bearing_noise_reduces_to_range_noise_only() {
        // With σ_b = 0 the conversion is exact in bearing: the mean is the
        // plain conversion and the covariance is σ_r² along the bearing
        // (definition of the polar-to-Cartesian map).
        let (z, cov) = polar_to_cartesian(1000.0, 0.5, 7.0, 0.0);
        assert!((z - Vector2::new(1000.0 * 0.5_f64.sin(), 1000.0 * 0.5_f64.cos())).norm() < 1e-9);
        let u = Vector2::new(0.5_f64.sin(), 0.5_f64.cos());
        assert!((cov - 49.0 * u * u.transpose()).norm() < 1e-9);
    }

    #[test]
    fn covariance_in_site_rotates_the_ellipse() {
        // A covariance with variances a along bearing φ and c across it has
        // entries ee = a sin²φ + c cos²φ, nn = a cos²φ + c sin²φ,
        // en = (a − c) sin φ cos φ. A map that turns directions clockwise by
        // γ (as an antenna whose north sits at bearing γ in the site plane)
        // must give the same ellipse at bearing φ + γ.
        let ellipse = |a: f64, c: f64, phi: f64| {
            let (s, co) = phi.sin_cos();
            Matrix2::new(a * s * s + c * co * co, (a - c) * s * co, (a - c) * s * co, a * co * co + c * s * s)
        };
        let (a, c, phi) = (900.0, 25.0, 0.4);
        for &gamma in &[0.0024_f64, -0.01, 1.2] {
            // East/north columns: antenna east ↦ (cos γ, −sin γ), antenna north ↦ (sin γ, cos γ).
            let j = Matrix2::new(gamma.cos(), gamma.sin(), -gamma.sin(), gamma.cos());
            let got = covariance_in_site(&ellipse(a, c, phi), &j);
            assert!((got - ellipse(a, c, phi + gamma)).norm() < 1e-9 * a, "gamma {gamma}");
        }
        // A general (non-orthogonal) map against the index sum Σ J_ik C_kl J_jl.
        let j = Matrix2::new(1.1, -0.3, 0.2, 0.9);
        let cv = ellipse(400.0, 9.0, 2.0);
        let got = covariance_in_site(&cv, &j);
        for r in 0..2 {
            for s in 0..2 {
                let mut want = 0.0;
                for k in 0..2 {
                    for l in 0..2 {
                        want += j[(r, k)] * cv[(k, l)] * j[(s, l)];
                    }
                }
                assert!((got[(r, s)] - want).abs() < 1e-9);
            }
        }
    }
}
