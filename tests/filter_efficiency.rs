//! Filter efficiency: over 60 Monte Carlo runs of a vessel following the
//! nearly-constant-velocity model, seen in range and bearing by one radar,
//! the position RMSE of skerry's converted-measurement Kalman filter stays
//! within 10% above the posterior Cramér-Rao bound, and its NEES stays in
//! the two-sided 95% chi-square interval.
//!
//! The bound is the recursion of Tichavsky, Muravchik & Nehorai (1998),
//! "Posterior Cramér-Rao bounds for discrete-time nonlinear filtering",
//! IEEE T-SP 46(5), for linear Gaussian dynamics and a nonlinear
//! measurement: J(k+1) = (Q + F J(k)⁻¹ Fᵀ)⁻¹ + E[Hᵀ R⁻¹ H], with H the
//! Jacobian of (range, bearing) at the true position and the expectation
//! taken over the simulated true trajectories. NEES interval: Bar-Shalom,
//! Li & Kirubarajan (2001) §5.4.2, quantiles from skerry::stats (checked
//! against scipy).

use nalgebra::{Matrix2, Matrix2x4, Matrix4, Vector2, Vector4};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use skerry::engine::filter::{Gaussian, Motion, StateCov, StateVec, update};
use skerry::engine::measure::polar_to_cartesian;
use skerry::stats::chi2_quantile;

const RUNS: usize = 60;
const STEPS: usize = 120;
const T: f64 = 2.5;
const Q: f64 = 0.01;
const SIGMA_R: f64 = 12.0;
const SIGMA_B: f64 = 0.2 * std::f64::consts::PI / 180.0;

fn f4() -> Matrix4<f64> {
    Matrix4::new(1.0, 0.0, T, 0.0, 0.0, 1.0, 0.0, T, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, 1.0)
}

/// Continuous white-noise acceleration, BLK 2001 §6.2.2.
fn q4() -> Matrix4<f64> {
    let (a, b, c) = (Q * T * T * T / 3.0, Q * T * T / 2.0, Q * T);
    Matrix4::new(a, 0.0, b, 0.0, 0.0, a, 0.0, b, b, 0.0, c, 0.0, 0.0, b, 0.0, c)
}

/// Jacobian of (range, bearing clockwise from north) with respect to the
/// state, at position (e, n).
fn polar_jacobian(e: f64, n: f64) -> Matrix2x4<f64> {
    let r2 = e * e + n * n;
    let r = r2.sqrt();
    Matrix2x4::new(e / r, n / r, 0.0, 0.0, n / r2, -e / r2, 0.0, 0.0)
}

#[test]
fn rmse_near_the_posterior_cramer_rao_bound_and_nees_consistent() {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2026);
    let unit = Normal::new(0.0, 1.0).unwrap();
    let q_chol = q4().cholesky().unwrap().l();
    let p0 = Matrix4::from_diagonal(&Vector4::new(400.0, 400.0, 4.0, 4.0));
    let p0_chol = p0.cholesky().unwrap().l();
    let r_inv = Matrix2::from_diagonal(&Vector2::new(1.0 / (SIGMA_R * SIGMA_R), 1.0 / (SIGMA_B * SIGMA_B)));
    let model = Motion::ConstantVelocity { accel_psd: Q };

    let mut sq_err = vec![0.0; STEPS];
    let mut nees = vec![0.0; STEPS];
    let mut info = vec![Matrix4::<f64>::zeros(); STEPS];
    for _ in 0..RUNS {
        // True state: 5 km north-east of the radar, 6 m/s.
        let mut x = Vector4::new(3500.0, 3500.0, 4.0, -4.5);
        let mut est = {
            let noise = p0_chol * Vector4::from_fn(|_, _| unit.sample(&mut rng));
            let m = x + noise;
            let mut p = StateCov::zeros();
            p.fixed_view_mut::<4, 4>(0, 0).copy_from(&p0);
            Gaussian { x: StateVec::new(m[0], m[1], m[2], m[3], 0.0), p }
        };
        for k in 0..STEPS {
            x = f4() * x + q_chol * Vector4::from_fn(|_, _| unit.sample(&mut rng));
            let r = x[0].hypot(x[1]) + SIGMA_R * unit.sample(&mut rng);
            let b = x[0].atan2(x[1]) + SIGMA_B * unit.sample(&mut rng);
            let (z, rz) = polar_to_cartesian(r, b, SIGMA_R, SIGMA_B);
            let pred = model.predict(&est, T);
            est = update(&pred, &z, &rz).expect("update").0;
            let d = Vector4::new(est.x[0] - x[0], est.x[1] - x[1], est.x[2] - x[2], est.x[3] - x[3]);
            sq_err[k] += d[0] * d[0] + d[1] * d[1];
            let p4: Matrix4<f64> = est.p.fixed_view::<4, 4>(0, 0).into_owned();
            nees[k] += (d.transpose() * p4.try_inverse().unwrap() * d)[0];
            let h = polar_jacobian(x[0], x[1]);
            info[k] += h.transpose() * r_inv * h / RUNS as f64;
        }
    }
    // The bound.
    let mut j = p0.try_inverse().unwrap();
    let mut bound_sq = vec![0.0; STEPS];
    for k in 0..STEPS {
        let prior = (q4() + f4() * j.try_inverse().unwrap() * f4().transpose()).try_inverse().unwrap();
        j = prior + info[k];
        let c = j.try_inverse().unwrap();
        bound_sq[k] = c[(0, 0)] + c[(1, 1)];
    }
    // Compare mean squared errors over the settled part (after 20 scans).
    let settled = 20..STEPS;
    let mse: f64 = settled.clone().map(|k| sq_err[k] / RUNS as f64).sum::<f64>() / settled.len() as f64;
    let crb: f64 = settled.clone().map(|k| bound_sq[k]).sum::<f64>() / settled.len() as f64;
    let ratio = (mse / crb).sqrt();
    eprintln!("position RMSE {:.2} m, PCRB {:.2} m, ratio {ratio:.3}", mse.sqrt(), crb.sqrt());
    assert!(ratio <= 1.10, "RMSE is {ratio:.3} × the bound");
    assert!(ratio >= 0.90, "RMSE below the bound by more than sampling allows: {ratio:.3}");
    // NEES: the run-average at each settled step, 4 degrees of freedom;
    // its time average against the interval for RUNS × steps × 4 dof.
    let n = (RUNS * settled.len()) as f64;
    let mean_nees: f64 = settled.clone().map(|k| nees[k]).sum::<f64>() / n;
    let lo = chi2_quantile(0.025, 4.0 * n) / n;
    let hi = chi2_quantile(0.975, 4.0 * n) / n;
    eprintln!("NEES {mean_nees:.3}, 95% interval [{lo:.3}, {hi:.3}]");
    assert!(mean_nees > lo && mean_nees < hi, "NEES {mean_nees} outside [{lo}, {hi}]");
}
