//! Checks of skerry's motion models and Kalman update against outside
//! references: filterpy/sympy fixtures (tests/fixtures/
//! make_filter_fixtures.py), Kalata's α-β relations, circle geometry,
//! finite differences, and Monte Carlo consistency (NEES/NIS) with
//! acceptance bounds from scipy.stats.chi2.

mod common;

use common::*;
use nalgebra::{Cholesky, Matrix2, Matrix4, SMatrix, Vector2, Vector4};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use skerry::engine::filter::{
    Gaussian, Motion, StateCov, StateVec, cv_transition, dwna_noise, gain, innovation,
    predict_linear, update,
};

/// Fixture agreement: "~1e-9 relative" (brief); the observed agreement is
/// ~1e-13.
const FIXTURE_TOL: f64 = 1e-9;

fn run_fixture_case(case: &serde_json::Value, model: Motion) {
    let mut g = gaussian(&case["x0"], &case["p0"]);
    for (k, step) in case["steps"].as_array().expect("steps").iter().enumerate() {
        let prior = model.predict(&g, num(&step["dt"]));
        let want_p = cov(&step["p_prior"]);
        assert_state_close(
            &prior.x,
            &state(&step["x_prior"]),
            &want_p,
            FIXTURE_TOL,
            &format!("step {k} x_prior"),
        );
        assert_cov_close(&prior.p, &want_p, FIXTURE_TOL, &format!("step {k} p_prior"));
        assert_symmetric(&prior.p, "prior");

        let (z, r) = (v2(&step["z"]), m2(&step["r"]));
        let (post, inn) = update(&prior, &z, &r).expect("update");
        let want_p = cov(&step["p_post"]);
        assert_state_close(
            &post.x,
            &state(&step["x_post"]),
            &want_p,
            FIXTURE_TOL,
            &format!("step {k} x_post"),
        );
        assert_cov_close(&post.p, &want_p, FIXTURE_TOL, &format!("step {k} p_post"));
        assert_symmetric(&post.p, "posterior");
        let want_s = m2(&step["s"]);
        assert_cov_close(&inn.s, &want_s, FIXTURE_TOL, &format!("step {k} S"));
        let want_nu = v2(&step["nu"]);
        for i in 0..2 {
            assert_rel(
                inn.nu[i],
                want_nu[i],
                FIXTURE_TOL * want_s[(i, i)].sqrt(),
                &format!("step {k} nu"),
            );
        }
        // filterpy: scipy.stats.multivariate_normal.logpdf(ν; 0, S).
        assert_rel(
            inn.log_likelihood(),
            num(&step["log_likelihood"]),
            FIXTURE_TOL,
            &format!("step {k} ln N"),
        );
        g = post;
    }
}

/// The CV model with continuous white-noise acceleration, through a
/// 30-step sequence with irregular intervals, a 12 s gap and a zero
/// interval, and rotated correlated measurement covariances.
/// Checked against: filterpy 2.0.0 KalmanFilter with Q from
/// filterpy.common.Q_continuous_white_noise (fixture filter_cases.json).
#[test]
fn cv_matches_filterpy_kalman_filter() {
    let fx = fixture("filter_cases.json");
    let case = &fx["kf_cv"];
    run_fixture_case(
        case,
        Motion::ConstantVelocity {
            accel_psd: num(&case["accel_psd"]),
        },
    );
}

/// The CT EKF through a straight leg (|ωT| < 0.1: the series branch) and a
/// 3°/s turn (the closed forms).
/// Checked against: filterpy 2.0.0 ExtendedKalmanFilter with the CT mean
/// of BLK 2001 §11.7.2 and its Jacobian differentiated by sympy 1.14 and
/// evaluated at 40 digits (fixture filter_cases.json).
#[test]
fn ct_matches_filterpy_extended_kalman_filter() {
    let fx = fixture("filter_cases.json");
    let case = &fx["ekf_ct"];
    run_fixture_case(
        case,
        Motion::CoordinatedTurn {
            accel_psd: num(&case["accel_psd"]),
            turn_psd: num(&case["turn_psd"]),
        },
    );
}

/// CT mean and Jacobian at turn rates from 1e-9 to 1.3 rad/s on both
/// sides of the series threshold.
/// Checked against: sympy 1.14 symbolic Jacobian at 40 digits (fixture).
#[test]
fn ct_jacobian_matches_sympy() {
    let fx = fixture("filter_cases.json");
    let ct = Motion::CoordinatedTurn {
        accel_psd: 0.0,
        turn_psd: 0.0,
    };
    for pt in fx["ct_jacobian"].as_array().expect("points") {
        let (x, dt) = (state(&pt["x"]), num(&pt["dt"]));
        let (mean, jac) = ct.transition(&x, dt);
        let (want_mean, want_jac) = (state(&pt["f"]), cov(&pt["jacobian"]));
        for i in 0..5 {
            let row_scale = (0..5).map(|j| want_jac[(i, j)].abs()).fold(0.0, f64::max);
            for j in 0..5 {
                let err = (jac[(i, j)] - want_jac[(i, j)]).abs();
                assert!(
                    err <= 1e-12 * row_scale,
                    "ω={} dt={dt} J[{i},{j}]: {} vs {}",
                    x[4],
                    jac[(i, j)],
                    want_jac[(i, j)]
                );
            }
            let err = (mean[i] - want_mean[i]).abs();
            assert!(
                err <= 1e-13 * want_mean[i].abs().max(1.0),
                "ω={} dt={dt} f[{i}]: {} vs {}",
                x[4],
                mean[i],
                want_mean[i]
            );
        }
    }
}

/// The analytic Jacobian, including at ω = 0 exactly where only the
/// series limit exists.
/// Checked against: central differences of the transition (definition of
/// the derivative; step 1e-6 in each state, error O(h²)).
#[test]
fn ct_jacobian_matches_central_differences() {
    let ct = Motion::CoordinatedTurn {
        accel_psd: 0.0,
        turn_psd: 0.0,
    };
    for &w in &[0.0, 1e-12, -0.02, 0.05, 0.6] {
        for &dt in &[1.0, 3.0] {
            let x = StateVec::new(50.0, -20.0, 7.0, -2.5, w);
            let (_, jac) = ct.transition(&x, dt);
            for j in 0..5 {
                let h = 1e-6 * if j < 4 { 1.0 } else { 0.1 };
                let mut hi = x;
                let mut lo = x;
                hi[j] += h;
                lo[j] -= h;
                let d = (ct.transition(&hi, dt).0 - ct.transition(&lo, dt).0) / (2.0 * h);
                for i in 0..5 {
                    let err = (jac[(i, j)] - d[i]).abs();
                    assert!(
                        err <= 1e-6 * (1.0 + d[i].abs()),
                        "ω={w} dt={dt} J[{i},{j}]: {} vs {}",
                        jac[(i, j)],
                        d[i]
                    );
                }
            }
        }
    }
}

/// With ω = 0, no turn noise and no turn-rate uncertainty, the CT
/// prediction is the CV prediction (the ω → 0 limit, BLK 2001 §11.7.2).
/// Checked against: the CV model (itself checked against filterpy).
#[test]
fn ct_at_zero_turn_rate_is_cv() {
    let mut p = StateCov::from_diagonal(&StateVec::new(100.0, 80.0, 4.0, 3.0, 0.0));
    p[(0, 2)] = 5.0;
    p[(2, 0)] = 5.0;
    p[(1, 3)] = -3.0;
    p[(3, 1)] = -3.0;
    let g = Gaussian {
        x: StateVec::new(10.0, 20.0, 3.0, -4.0, 0.0),
        p,
    };
    let cv = Motion::ConstantVelocity { accel_psd: 0.1 }.predict(&g, 2.5);
    let ct = Motion::CoordinatedTurn {
        accel_psd: 0.1,
        turn_psd: 0.0,
    }
    .predict(&g, 2.5);
    assert_state_close(&ct.x, &cv.x, &cv.p, 1e-14, "mean");
    assert_cov_close(&ct.p, &cv.p, 1e-14, "covariance");
}

/// Geometry of a coordinated turn at speed v and rate ω > 0 (counter-
/// clockwise): radius v/ω; after a half turn from heading east the
/// position is 2v/ω north and the velocity is reversed; after a full turn
/// it is back at the start.
/// Checked against: circle geometry (definition of a constant-rate turn).
#[test]
fn ct_turn_geometry() {
    let ct = Motion::CoordinatedTurn {
        accel_psd: 0.0,
        turn_psd: 0.0,
    };
    let (v, w) = (6.0, 0.05);
    let x = StateVec::new(0.0, 0.0, v, 0.0, w);
    let period = 2.0 * std::f64::consts::PI / w;
    let (half, _) = ct.transition(&x, period / 2.0);
    let expect_half = StateVec::new(0.0, 2.0 * v / w, -v, 0.0, w);
    let (full, _) = ct.transition(&x, period);
    for i in 0..5 {
        assert!(
            (half[i] - expect_half[i]).abs() < 1e-12 * 240.0,
            "half turn [{i}]: {}",
            half[i]
        );
        assert!(
            (full[i] - x[i]).abs() < 1e-12 * 240.0,
            "full turn [{i}]: {}",
            full[i]
        );
    }
    // A quarter turn in small steps lands where one long step does.
    let mut g = x;
    for _ in 0..100 {
        g = ct.transition(&g, period / 400.0).0;
    }
    let (quarter, _) = ct.transition(&x, period / 4.0);
    assert!((g - quarter).norm() < 1e-9, "{g} vs {quarter}");
    assert!((quarter[0] - v / w).abs() < 1e-9 && (quarter[1] - v / w).abs() < 1e-9);
}

/// A negative or non-finite interval predicts nothing (interval 0).
#[test]
fn non_positive_interval_is_zero() {
    let g = Gaussian {
        x: StateVec::new(1.0, 2.0, 3.0, 4.0, 0.01),
        p: StateCov::identity(),
    };
    for m in [
        Motion::ConstantVelocity { accel_psd: 1.0 },
        Motion::CoordinatedTurn {
            accel_psd: 1.0,
            turn_psd: 0.1,
        },
    ] {
        assert_eq!(m.predict(&g, -3.0), m.predict(&g, 0.0));
        assert_eq!(m.predict(&g, f64::NAN), m.predict(&g, 0.0));
    }
}

/// Kalata (1984), "The tracking index: a generalized parameter for α-β
/// and α-β-γ target trackers", IEEE T-AES 20(2): steady-state gains of
/// the α-β filter for piecewise-constant (discrete white noise)
/// acceleration in terms of the tracking index Λ = σ_a T²/σ_w:
///   α = −(Λ² + 8Λ − (Λ + 4)√(Λ² + 8Λ))/8,  β = (Λ² + 4Λ − Λ√(Λ² + 8Λ))/4.
/// The formulas are from memory; the fixture's scipy DARE solution agrees
/// with them to ≤ 1e-13.
fn kalata(lam: f64) -> (f64, f64) {
    let r = (lam * lam + 8.0 * lam).sqrt();
    (
        -(lam * lam + 8.0 * lam - (lam + 4.0) * r) / 8.0,
        (lam * lam + 4.0 * lam - lam * r) / 4.0,
    )
}

/// The CV Kalman filter with discrete white-noise acceleration Q run to
/// steady state has gains K = [α, β/T] per axis.
/// Checked against: Kalata's closed form (above) to 1e-6, and scipy
/// solve_discrete_are (fixture) to 1e-9.
#[test]
fn steady_state_gains_match_kalata() {
    let fx = fixture("filter_cases.json");
    for case in fx["alpha_beta_dare"].as_array().expect("cases") {
        let (lam, t, sw) = (
            num(&case["tracking_index"]),
            num(&case["dt"]),
            num(&case["sigma_w"]),
        );
        let sa = lam * sw / (t * t);
        let (f, q) = (cv_transition(t), dwna_noise(t, sa * sa));
        let r = Matrix2::identity() * (sw * sw);
        let z = Vector2::zeros();
        let mut g = Gaussian {
            x: StateVec::zeros(),
            p: StateCov::from_diagonal(&StateVec::new(1e4, 1e4, 1e2, 1e2, 0.0)),
        };
        let (mut alpha, mut beta) = (f64::NAN, f64::NAN);
        for _ in 0..200_000 {
            let prior = predict_linear(&g, &f, &q);
            let inn = innovation(&prior, &z, &r).expect("innovation");
            let k = gain(&prior, &inn);
            let (a, b) = (k[(0, 0)], k[(2, 0)] * t);
            // Both axes are independent and identical.
            assert!((k[(1, 1)] - a).abs() < 1e-12 && k[(0, 1)].abs() < 1e-12);
            let done = (a - alpha).abs() < 1e-15 && (b - beta).abs() < 1e-15;
            (alpha, beta) = (a, b);
            g = update(&prior, &z, &r).expect("update").0;
            if done {
                break;
            }
        }
        let (ka, kb) = kalata(lam);
        assert!(
            (alpha - ka).abs() <= 1e-6 * ka,
            "Λ={lam}: α {alpha} vs Kalata {ka}"
        );
        assert!(
            (beta - kb).abs() <= 1e-6 * kb,
            "Λ={lam}: β {beta} vs Kalata {kb}"
        );
        assert!(
            (alpha - num(&case["alpha"])).abs() <= 1e-9,
            "Λ={lam}: α vs DARE"
        );
        assert!(
            (beta - num(&case["beta"])).abs() <= 1e-9,
            "Λ={lam}: β vs DARE"
        );
    }
}

/// The update equals the literal Joseph form (I − KH)P(I − KH)ᵀ + KRKᵀ
/// and the standard form (I − KH)P for the optimal gain, is exactly symmetric and positive definite; the
/// innovation's S⁻¹, d² and ln det S agree with the direct 2×2 formulas.
/// Checked against: the textbook identity (BLK 2001 §5.2.3, section from
/// memory) and the
/// definitions.
#[test]
fn update_is_joseph_form_and_innovation_is_consistent() {
    let mut p = StateCov::from_diagonal(&StateVec::new(300.0, 120.0, 9.0, 4.0, 1e-4));
    p[(0, 1)] = 40.0;
    p[(1, 0)] = 40.0;
    p[(0, 2)] = 30.0;
    p[(2, 0)] = 30.0;
    p[(1, 4)] = 0.05;
    p[(4, 1)] = 0.05;
    let g = Gaussian {
        x: StateVec::new(5.0, -3.0, 2.0, 1.0, 0.02),
        p,
    };
    let r = Matrix2::new(50.0, -12.0, -12.0, 30.0);
    let z = Vector2::new(17.0, -25.0);
    let (post, inn) = update(&g, &z, &r).expect("update");
    assert_symmetric(&post.p, "posterior");
    let s = g.p.fixed_view::<2, 2>(0, 0) + r;
    let det = s[(0, 0)] * s[(1, 1)] - s[(0, 1)] * s[(1, 0)];
    let s_inv = Matrix2::new(s[(1, 1)], -s[(0, 1)], -s[(1, 0)], s[(0, 0)]) / det;
    let nu = z - g.x.fixed_rows::<2>(0);
    assert!((inn.s_inv - s_inv).norm() < 1e-15);
    assert!((inn.d2 - (nu.transpose() * s_inv * nu)[0]).abs() < 1e-12);
    assert!((inn.ln_det_s - det.ln()).abs() < 1e-12);
    let k = g.p.fixed_columns::<2>(0) * s_inv;
    let mut kh = StateCov::zeros();
    kh.fixed_columns_mut::<2>(0).copy_from(&k);
    let i_kh = StateCov::identity() - kh;
    let joseph = i_kh * g.p * i_kh.transpose() + k * r * k.transpose();
    assert_cov_close(&post.p, &joseph, 1e-14, "literal Joseph form");
    let standard = i_kh * g.p;
    assert_cov_close(&post.p, &standard, 1e-12, "Joseph vs standard");
    assert!(
        Cholesky::new(post.p).is_some(),
        "posterior not positive definite"
    );
}

/// Bad input gives `None`, never a panic.
#[test]
fn bad_measurements_are_rejected() {
    let g = Gaussian {
        x: StateVec::zeros(),
        p: StateCov::identity(),
    };
    let r = Matrix2::identity();
    assert!(update(&g, &Vector2::new(f64::NAN, 0.0), &r).is_none());
    assert!(update(&g, &Vector2::new(f64::INFINITY, 0.0), &r).is_none());
    assert!(update(&g, &Vector2::zeros(), &Matrix2::new(-5.0, 0.0, 0.0, 1.0)).is_none());
    assert!(update(&g, &Vector2::zeros(), &Matrix2::new(1.0, 3.0, 3.0, 1.0)).is_none());
    assert!(
        innovation(
            &g,
            &Vector2::zeros(),
            &Matrix2::new(f64::NAN, 0.0, 0.0, 1.0)
        )
        .is_none()
    );
}

// ---------------------------------------------------------------------------
// Monte Carlo consistency (BLK 2001 §5.4.2). The truth is simulated from the
// continuous-time definition of each motion model by sub-stepping (white
// noise as piecewise-constant draws over 1/50 of the interval), not from
// skerry's discretised Q, so the truth does not inherit a mistake in it
// (the Q itself is pinned by the filterpy fixtures; NEES alone would not
// notice every error in it, e.g. a position variance 1.5× too large).

const SUBSTEPS: usize = 50;

fn normal(rng: &mut ChaCha8Rng) -> f64 {
    rng.sample(StandardNormal)
}

/// One interval of the continuous model: white acceleration (PSD q) on
/// each axis, the velocity turning at ω, ω a random walk of PSD qw.
fn truth_step(x: &mut StateVec, dt: f64, q: f64, qw: f64, rng: &mut ChaCha8Rng) {
    let h = dt / SUBSTEPS as f64;
    for _ in 0..SUBSTEPS {
        let (sin, cos) = (x[4] * h).sin_cos();
        let (ae, an) = (normal(rng) * (q / h).sqrt(), normal(rng) * (q / h).sqrt());
        let ve = cos * x[2] - sin * x[3] + ae * h;
        let vn = sin * x[2] + cos * x[3] + an * h;
        x[0] += 0.5 * (x[2] + ve) * h;
        x[1] += 0.5 * (x[3] + vn) * h;
        x[2] = ve;
        x[3] = vn;
        x[4] += normal(rng) * (qw * h).sqrt();
    }
}

fn draw_initial(g: &Gaussian, rng: &mut ChaCha8Rng) -> StateVec {
    // The initial covariances below are diagonal.
    StateVec::from_fn(|i, _| g.x[i] + g.p[(i, i)].sqrt() * normal(rng))
}

fn measure(x: &StateVec, r_chol: &Matrix2<f64>, rng: &mut ChaCha8Rng) -> Vector2<f64> {
    x.fixed_rows::<2>(0).into_owned() + r_chol * Vector2::new(normal(rng), normal(rng))
}

struct Bounds {
    runs: usize,
    lo: f64,
    hi: f64,
}

fn bounds(name: &str) -> Bounds {
    let fx = fixture("nees_bounds.json");
    let case = fx["cases"]
        .as_array()
        .expect("cases")
        .iter()
        .find(|c| c["name"] == name)
        .expect("case");
    Bounds {
        runs: num(&case["runs"]) as usize,
        lo: num(&case["lo"]),
        hi: num(&case["hi"]),
    }
}

/// Per-step N-run averages of a χ² statistic: the overall average must lie
/// in the 95 % interval (averaging over steps can only shrink the spread,
/// so this is conservative) and at least 90 % of the steps must (95 %
/// expected).
fn assert_consistent(per_step: &[f64], b: &Bounds, what: &str) {
    let inside = per_step
        .iter()
        .filter(|a| (b.lo..=b.hi).contains(*a))
        .count();
    let mean = per_step.iter().sum::<f64>() / per_step.len() as f64;
    eprintln!(
        "{what}: mean {mean:.3} in [{:.3}, {:.3}]; {inside}/{} steps inside",
        b.lo,
        b.hi,
        per_step.len()
    );
    assert!(
        (b.lo..=b.hi).contains(&mean),
        "{what}: mean {mean} outside [{}, {}]",
        b.lo,
        b.hi
    );
    assert!(
        inside as f64 >= 0.9 * per_step.len() as f64,
        "{what}: only {inside}/{} steps inside",
        per_step.len()
    );
}

fn nees<const N: usize>(e: &SMatrix<f64, N, 1>, p: &SMatrix<f64, N, N>) -> f64 {
    let chol = Cholesky::new(*p).expect("covariance not positive definite");
    e.dot(&chol.solve(e))
}

struct Run {
    nees: Vec<f64>,
    nis: Vec<f64>,
}

/// The truth and the filter of one Monte Carlo experiment.
struct Experiment {
    model: Motion,
    /// The filter's initial estimate; the truth starts from a draw of
    /// `truth0` (the same as `filter0` for a matched experiment).
    filter0: Gaussian,
    truth0: Gaussian,
    /// PSDs of the continuous truth: acceleration, turn rate.
    truth_q: f64,
    truth_qw: f64,
    steps: usize,
    dt: f64,
    /// NEES over the first four states only (CV filters, see filter.rs).
    four_states: bool,
}

impl Experiment {
    fn run(&self, seed: u64, runs: usize) -> Run {
        let r = Matrix2::new(100.0, 30.0, 30.0, 64.0);
        let r_chol = Cholesky::new(r).expect("R").l();
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut out = Run {
            nees: vec![0.0; self.steps],
            nis: vec![0.0; self.steps],
        };
        for _ in 0..runs {
            let mut truth = draw_initial(&self.truth0, &mut rng);
            let mut g = self.filter0;
            for k in 0..self.steps {
                truth_step(&mut truth, self.dt, self.truth_q, self.truth_qw, &mut rng);
                let prior = self.model.predict(&g, self.dt);
                let z = measure(&truth, &r_chol, &mut rng);
                let (post, inn) = update(&prior, &z, &r).expect("update");
                g = post;
                let e = truth - g.x;
                let eps = if self.four_states {
                    nees::<4>(
                        &Vector4::from_fn(|i, _| e[i]),
                        &Matrix4::from_fn(|i, j| g.p[(i, j)]),
                    )
                } else {
                    nees::<5>(&e, &g.p)
                };
                out.nees[k] += eps / runs as f64;
                out.nis[k] += inn.d2 / runs as f64;
            }
        }
        out
    }
}

/// CV filter on a target that moves by the CV model it assumes: NEES (4
/// states; ω is identically 0 in both) and NIS (2) consistent.
/// Checked against: the two-sided 95 % χ² interval for N-run averages
/// (BLK 2001 §5.4.2), bounds from scipy.stats.chi2.ppf (fixture).
#[test]
fn cv_nees_and_nis_are_consistent_on_matched_model() {
    let (b_nees, b_nis) = (bounds("cv_nees"), bounds("cv_nis"));
    let q = 0.05;
    let g0 = Gaussian {
        x: StateVec::new(0.0, 0.0, 5.0, -3.0, 0.0),
        p: StateCov::from_diagonal(&StateVec::new(400.0, 400.0, 4.0, 4.0, 0.0)),
    };
    let exp = Experiment {
        model: Motion::ConstantVelocity { accel_psd: q },
        filter0: g0,
        truth0: g0,
        truth_q: q,
        truth_qw: 0.0,
        steps: 50,
        dt: 2.5,
        four_states: true,
    };
    let run = exp.run(7, b_nees.runs);
    assert_consistent(&run.nees, &b_nees, "CV NEES");
    assert_consistent(&run.nis, &b_nis, "CV NIS");
}

fn turning_start() -> Gaussian {
    Gaussian {
        x: StateVec::new(0.0, 0.0, 8.0, 0.0, 0.05),
        p: StateCov::from_diagonal(&StateVec::new(100.0, 100.0, 1.0, 1.0, 1e-4)),
    }
}

/// CT EKF on a target turning at ~2.9°/s (ω a slow random walk): NEES over
/// all 5 states consistent.
/// Checked against: the two-sided 95 % χ² interval (BLK 2001 §5.4.2),
/// bounds from scipy.stats.chi2.ppf (fixture).
#[test]
fn ct_nees_is_consistent_on_turning_target() {
    let b = bounds("ct_nees");
    let (q, qw) = (0.05, 1e-5);
    let model = Motion::CoordinatedTurn {
        accel_psd: q,
        turn_psd: qw,
    };
    let exp = Experiment {
        model,
        filter0: turning_start(),
        truth0: turning_start(),
        truth_q: q,
        truth_qw: qw,
        steps: 40,
        dt: 2.0,
        four_states: false,
    };
    let run = exp.run(11, b.runs);
    assert_consistent(&run.nees, &b, "CT NEES");
}

/// The consistency check has power: a CV filter on the same turning
/// target is far outside the interval.
#[test]
fn cv_nees_fails_on_turning_target() {
    let b = bounds("cv_nees");
    let mut g0 = turning_start();
    g0.x[4] = 0.0;
    g0.p[(4, 4)] = 0.0;
    let exp = Experiment {
        model: Motion::ConstantVelocity { accel_psd: 0.05 },
        filter0: g0,
        truth0: turning_start(),
        truth_q: 0.05,
        truth_qw: 1e-5,
        steps: 40,
        dt: 2.0,
        four_states: true,
    };
    let per_step = exp.run(13, b.runs).nees;
    let mean = per_step.iter().sum::<f64>() / per_step.len() as f64;
    eprintln!(
        "mismatched CV NEES: mean {mean:.1} vs upper bound {:.3}",
        b.hi
    );
    assert!(
        mean > 3.0 * b.hi,
        "mismatched CV filter looks consistent: mean NEES {mean}"
    );
}
