//! Checks of skerry's IMM against filterpy's IMMEstimator (fixtures made
//! by tests/fixtures/make_filter_fixtures.py), against the definitions of
//! the switching matrix and of Bayes' rule, and of its behaviour on a
//! turning vessel.

mod common;

use common::*;
use nalgebra::{Matrix2, Vector2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use skerry::engine::filter::{Gaussian, Motion, StateCov, StateVec, innovation, update};
use skerry::engine::imm::{Imm, ImmError, MAX_MODELS, Switching, VESSEL_MU0};

/// Fixture agreement: "~1e-9 relative" (brief).
const FIXTURE_TOL: f64 = 1e-9;

fn motion(v: &serde_json::Value) -> Motion {
    match v["kind"].as_str() {
        Some("cv") => Motion::ConstantVelocity {
            accel_psd: num(&v["accel_psd"]),
        },
        Some("ct") => Motion::CoordinatedTurn {
            accel_psd: num(&v["accel_psd"]),
            turn_psd: num(&v["turn_psd"]),
        },
        other => panic!("unknown model {other:?}"),
    }
}

fn assert_mu(got: &[f64], want: &serde_json::Value, what: &str) {
    let want = want.as_array().expect("mu");
    assert_eq!(want.len(), got.len());
    for (j, (g, w)) in got.iter().zip(want).enumerate() {
        let w = num(w);
        assert!(
            (g - w).abs() <= FIXTURE_TOL * w.abs() + 1e-15,
            "{what}[{j}]: got {g:e}, want {w:e}"
        );
    }
}

fn run_imm_case(case: &serde_json::Value, imm: &Imm) {
    let n = imm.n_models();
    let mu0: Vec<f64> = case["mu0"]
        .as_array()
        .expect("mu0")
        .iter()
        .map(num)
        .collect();
    let mut s = imm.init(gaussian(&case["x0"], &case["p0"]), Some(&mu0));
    for (k, step) in case["steps"].as_array().expect("steps").iter().enumerate() {
        let pred = imm.predict(&s, num(&step["dt"]));
        for j in 0..n {
            let want_p = cov(&step["prior_p"][j]);
            let what = format!("step {k} model {j} prior");
            assert_state_close(
                &pred.comps[j].x,
                &state(&step["prior_x"][j]),
                &want_p,
                FIXTURE_TOL,
                &what,
            );
            assert_cov_close(&pred.comps[j].p, &want_p, FIXTURE_TOL, &what);
            assert_symmetric(&pred.comps[j].p, &what);
        }
        assert_mu(
            &pred.mu[..n],
            &step["prior_mu"],
            &format!("step {k} predicted mu"),
        );

        let (post, ll) = imm
            .update(&pred, &v2(&step["z"]), &m2(&step["r"]))
            .expect("update");
        for j in 0..n {
            let want_p = cov(&step["post_p"][j]);
            let what = format!("step {k} model {j} posterior");
            assert_state_close(
                &post.comps[j].x,
                &state(&step["post_x"][j]),
                &want_p,
                FIXTURE_TOL,
                &what,
            );
            assert_cov_close(&post.comps[j].p, &want_p, FIXTURE_TOL, &what);
            assert_symmetric(&post.comps[j].p, &what);
        }
        assert_mu(&post.mu[..n], &step["post_mu"], &format!("step {k} mu"));
        assert!((post.mu[..n].iter().sum::<f64>() - 1.0).abs() < 1e-15);
        let comb = imm.combine(&post);
        let want_p = cov(&step["combined_p"]);
        assert_state_close(
            &comb.x,
            &state(&step["combined_x"]),
            &want_p,
            FIXTURE_TOL,
            &format!("step {k} combined"),
        );
        assert_cov_close(&comb.p, &want_p, FIXTURE_TOL, &format!("step {k} combined"));
        assert_symmetric(&comb.p, "combined");
        assert_rel(
            ll,
            num(&step["log_likelihood"]),
            FIXTURE_TOL,
            &format!("step {k} mixture ln-likelihood"),
        );
        s = post;
    }
}

/// Three CV models of different noise, fixed transition matrix, a speed
/// change in the middle.
/// Checked against: filterpy 2.0.0 IMMEstimator over KalmanFilter
/// (fixture imm_cases.json).
#[test]
fn fixed_switching_matches_filterpy_imm() {
    let fx = fixture("imm_cases.json");
    let case = &fx["fixed_cv3"];
    let models: Vec<Motion> = case["models"]
        .as_array()
        .expect("models")
        .iter()
        .map(motion)
        .collect();
    let rows = case["transition"].as_array().expect("transition");
    let mut m = [[0.0; MAX_MODELS]; MAX_MODELS];
    for (i, row) in rows.iter().enumerate() {
        for (j, v) in row.as_array().expect("row").iter().enumerate() {
            m[i][j] = num(v);
        }
    }
    let imm = Imm::new(&models, Switching::Fixed(m)).expect("imm");
    run_imm_case(case, &imm);
}

/// CV / CT / CV with interval-dependent sojourn switching, through a 3°/s
/// turn.
/// Checked against: filterpy 2.0.0 IMMEstimator with the CT prediction of
/// BLK 2001 §11.7.2 (sympy Jacobian) and the switching matrix exp(−dt/τ)
/// built per interval in the script (fixture imm_cases.json).
#[test]
fn sojourn_switching_matches_filterpy_imm() {
    let fx = fixture("imm_cases.json");
    let case = &fx["sojourn_cv_ct_cv"];
    let models: Vec<Motion> = case["models"]
        .as_array()
        .expect("models")
        .iter()
        .map(motion)
        .collect();
    let tau = case["sojourn"].as_array().expect("sojourn");
    let tau = [num(&tau[0]), num(&tau[1]), num(&tau[2])];
    let imm = Imm::new(&models, Switching::Sojourn(tau)).expect("imm");
    // The fixture uses the documented default vessel models and times.
    assert_eq!(imm, Imm::vessel_default());
    assert_eq!(
        &case["mu0"]
            .as_array()
            .expect("mu0")
            .iter()
            .map(num)
            .collect::<Vec<_>>()[..],
        &VESSEL_MU0[..]
    );
    run_imm_case(case, &imm);
}

/// π_ii = exp(−dt/τ_i), the rest split evenly; identity at dt = 0; a
/// model with τ = ∞ is never left.
/// Checked against: the definition of continuous-time exponential sojourn
/// (documented on `Switching::Sojourn`).
#[test]
fn sojourn_transition_matrix_follows_definition() {
    let cv = Motion::ConstantVelocity { accel_psd: 0.1 };
    let imm = Imm::new(
        &[cv, cv, cv],
        Switching::Sojourn([10.0, 5.0, f64::INFINITY]),
    )
    .expect("imm");
    for &dt in &[0.0, 0.5, 3.0, 100.0] {
        let m = imm.transition_matrix(dt);
        for i in 0..3 {
            let tau = [10.0, 5.0, f64::INFINITY][i];
            let stay = (-dt / tau).exp();
            assert!((m[i][i] - stay).abs() < 1e-15);
            for j in (0..3).filter(|&j| j != i) {
                assert!((m[i][j] - (1.0 - stay) / 2.0).abs() < 1e-15);
            }
            assert!((m[i].iter().sum::<f64>() - 1.0).abs() < 1e-15);
        }
    }
    assert_eq!(
        imm.transition_matrix(0.0),
        [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]
    );
    assert_eq!(imm.transition_matrix(7.0)[2], [0.0, 0.0, 1.0]);
    let two = Imm::new(&[cv, cv], Switching::Sojourn([4.0, 8.0, 0.0])).expect("imm");
    let m = two.transition_matrix(2.0);
    assert!(
        (m[0][1] - (1.0 - (-0.5f64).exp())).abs() < 1e-15 && m[0][2] == 0.0 && m[2] == [0.0; 3]
    );
    let one = Imm::new(&[cv], Switching::Sojourn([4.0, 0.0, 0.0])).expect("imm");
    assert_eq!(one.transition_matrix(2.0)[0], [1.0, 0.0, 0.0]);
}

/// A one-model IMM is the plain filter.
/// Checked against: `Motion::predict` and `filter::update` (themselves
/// checked against filterpy).
#[test]
fn one_model_imm_is_the_kalman_filter() {
    let ct = Motion::CoordinatedTurn {
        accel_psd: 0.05,
        turn_psd: 1e-4,
    };
    let imm = Imm::new(
        &[ct],
        Switching::Fixed([[1.0, 0.0, 0.0], [0.0; 3], [0.0; 3]]),
    )
    .expect("imm");
    let g0 = Gaussian {
        x: StateVec::new(0.0, 0.0, 5.0, 1.0, 0.02),
        p: StateCov::from_diagonal(&StateVec::new(100.0, 100.0, 4.0, 4.0, 1e-4)),
    };
    let r = Matrix2::new(25.0, 5.0, 5.0, 16.0);
    let (mut s, mut g) = (imm.init(g0, None), g0);
    for k in 0..20 {
        let z = Vector2::new(5.0 * k as f64, 1.2 * k as f64);
        let pred = imm.predict(&s, 2.5);
        let prior = ct.predict(&g, 2.5);
        let (post, ll) = imm.update(&pred, &z, &r).expect("imm update");
        let (gp, inn) = update(&prior, &z, &r).expect("update");
        assert_state_close(&imm.combine(&post).x, &gp.x, &gp.p, 1e-15, "state");
        assert_cov_close(&imm.combine(&post).p, &gp.p, 1e-15, "covariance");
        assert!((ll - inn.log_likelihood()).abs() < 1e-12);
        assert_eq!(post.mu[0], 1.0);
        (s, g) = (post, gp);
    }
}

/// A plot 100 km from the track: every model's likelihood underflows as a
/// plain number, yet the model probabilities stay finite and normalised.
/// With two identical models the likelihoods are equal, so Bayes' rule
/// leaves the predicted probabilities unchanged; with the vessel default,
/// the widest model (largest S) takes almost all the probability.
/// Checked against: Bayes' rule (μ_j ∝ c̄_j N_j).
#[test]
fn far_plot_does_not_underflow_model_probabilities() {
    let z = Vector2::new(1.0e5, -1.0e5);
    let r = Matrix2::identity() * 100.0;
    let g0 = Gaussian {
        x: StateVec::new(0.0, 0.0, 5.0, 0.0, 0.0),
        p: StateCov::from_diagonal(&StateVec::new(100.0, 100.0, 1.0, 1.0, 1e-6)),
    };
    let cv = Motion::ConstantVelocity { accel_psd: 0.02 };
    let twins = Imm::new(
        &[cv, cv],
        Switching::Fixed([[0.9, 0.1, 0.0], [0.2, 0.8, 0.0], [0.0; 3]]),
    )
    .expect("imm");
    let pred = twins.predict(&twins.init(g0, Some(&[0.3, 0.7])), 3.0);
    for j in 0..2 {
        let inn = innovation(&pred.comps[j], &z, &r).expect("innovation");
        assert_eq!(
            inn.log_likelihood().exp(),
            0.0,
            "likelihood did not underflow"
        );
    }
    let (post, ll) = twins.update(&pred, &z, &r).expect("update");
    assert!(ll.is_finite() && ll < -1e6);
    // The two models' mixed priors differ by rounding, which at |ln N| ≈
    // 1e8 shifts their log-likelihoods by up to a few ε·|ln N|.
    let tol = 8.0 * f64::EPSILON * ll.abs();
    for j in 0..2 {
        assert!(
            (post.mu[j] - pred.mu[j]).abs() <= tol * pred.mu[j],
            "{} vs {}",
            post.mu[j],
            pred.mu[j]
        );
    }

    let vessel = Imm::vessel_default();
    let pred = vessel.predict(&vessel.init(g0, Some(&VESSEL_MU0)), 3.0);
    let (post, ll) = vessel.update(&pred, &z, &r).expect("update");
    assert!(ll.is_finite());
    assert!(post.mu.iter().all(|m| m.is_finite() && *m >= 0.0));
    assert!((post.mu.iter().sum::<f64>() - 1.0).abs() < 1e-15);
    let widest = (0..3)
        .max_by(|&a, &b| {
            let sa = pred.comps[a].p.fixed_view::<2, 2>(0, 0).determinant();
            let sb = pred.comps[b].p.fixed_view::<2, 2>(0, 0).determinant();
            sa.total_cmp(&sb)
        })
        .expect("models");
    assert!(post.mu[widest] > 0.999, "{:?}", post.mu);
}

/// A model that cannot reach the others keeps a proper mixture: with
/// probability exactly 0 and no way in, it stays at 0 and nothing is NaN.
#[test]
fn unreachable_model_stays_at_zero() {
    let cv = Motion::ConstantVelocity { accel_psd: 0.02 };
    let ct = Motion::CoordinatedTurn {
        accel_psd: 0.05,
        turn_psd: 1e-4,
    };
    let imm = Imm::new(
        &[cv, ct],
        Switching::Fixed([[1.0, 0.0, 0.0], [0.5, 0.5, 0.0], [0.0; 3]]),
    )
    .expect("imm");
    let g0 = Gaussian {
        x: StateVec::new(0.0, 0.0, 5.0, 0.0, 0.0),
        p: StateCov::identity() * 10.0,
    };
    let mut s = imm.init(g0, Some(&[1.0, 0.0]));
    for k in 1..10 {
        let pred = imm.predict(&s, 2.0);
        assert_eq!(pred.mu[1], 0.0);
        s = imm
            .update(
                &pred,
                &Vector2::new(10.0 * k as f64, 0.0),
                &Matrix2::identity(),
            )
            .expect("update")
            .0;
        assert!(
            s.comps
                .iter()
                .all(|c| c.x.iter().chain(c.p.iter()).all(|v| v.is_finite()))
        );
        assert_eq!(s.mu[..2], [1.0, 0.0]);
    }
}

#[test]
fn invalid_configurations_are_rejected() {
    let cv = Motion::ConstantVelocity { accel_psd: 0.1 };
    let fixed = Switching::Fixed([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]);
    assert_eq!(Imm::new(&[], fixed), Err(ImmError::ModelCount));
    assert_eq!(Imm::new(&[cv; 4], fixed), Err(ImmError::ModelCount));
    let bad_sum = Switching::Fixed([[0.9, 0.2, 0.0], [0.1, 0.9, 0.0], [0.0; 3]]);
    assert_eq!(Imm::new(&[cv, cv], bad_sum), Err(ImmError::Transition));
    let negative = Switching::Fixed([[1.1, -0.1, 0.0], [0.1, 0.9, 0.0], [0.0; 3]]);
    assert_eq!(Imm::new(&[cv, cv], negative), Err(ImmError::Transition));
    let nan = Switching::Fixed([[f64::NAN, 1.0, 0.0], [0.1, 0.9, 0.0], [0.0; 3]]);
    assert_eq!(Imm::new(&[cv, cv], nan), Err(ImmError::Transition));
    for tau in [0.0, -1.0, f64::NAN] {
        assert_eq!(
            Imm::new(&[cv, cv], Switching::Sojourn([10.0, tau, 1.0])),
            Err(ImmError::Sojourn)
        );
    }
    // Entries past the model count are not looked at.
    assert!(Imm::new(&[cv, cv], Switching::Sojourn([10.0, 5.0, f64::NAN])).is_ok());
    let bad_model = Motion::CoordinatedTurn {
        accel_psd: 0.1,
        turn_psd: f64::NAN,
    };
    assert_eq!(
        Imm::new(&[cv, bad_model], fixed),
        Err(ImmError::ModelParameter)
    );
    let negative_model = Motion::ConstantVelocity { accel_psd: -1.0 };
    assert_eq!(
        Imm::new(&[negative_model], fixed),
        Err(ImmError::ModelParameter)
    );
}

#[test]
fn init_sanitises_model_probabilities() {
    let imm = Imm::vessel_default();
    let g = Gaussian {
        x: StateVec::zeros(),
        p: StateCov::identity(),
    };
    let third = 1.0 / 3.0;
    assert_eq!(imm.init(g, None).mu, [third; 3]);
    assert_eq!(imm.init(g, Some(&[2.0, 1.0, 1.0])).mu, [0.5, 0.25, 0.25]);
    assert_eq!(
        imm.init(g, Some(&[-1.0, f64::NAN, 1.0])).mu,
        [0.0, 0.0, 1.0]
    );
    assert_eq!(imm.init(g, Some(&[0.0, 0.0, 0.0])).mu, [third; 3]);
    assert_eq!(imm.init(g, Some(&[1.0])).mu, [third; 3]);
}

/// The default vessel IMM on a vessel at 6 m/s that holds course, turns to
/// port at 3°/s for 60 s and holds course again: the quiet CV model leads
/// on the straight legs and the CT model during the turn (the purpose of
/// the model set — common practice). The truth is the closed-form circle.
#[test]
fn vessel_default_follows_a_turn() {
    let (v, w, dt) = (6.0, 3.0f64.to_radians(), 2.5);
    let truth = |t: f64| -> Vector2<f64> {
        // Straight east to t = 60 s, a 60 s turn about a centre to the
        // north, then straight on the new heading.
        let p1 = Vector2::new(v * 60.0, 0.0);
        let rad = v / w;
        let centre = p1 + Vector2::new(0.0, rad);
        if t <= 60.0 {
            Vector2::new(v * t, 0.0)
        } else if t <= 120.0 {
            let th = w * (t - 60.0);
            centre + rad * Vector2::new(th.sin(), -th.cos())
        } else {
            let th = w * 60.0;
            let p2 = centre + rad * Vector2::new(th.sin(), -th.cos());
            p2 + (t - 120.0) * v * Vector2::new(th.cos(), th.sin())
        }
    };
    let imm = Imm::vessel_default();
    let r = Matrix2::identity() * 25.0;
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let g0 = Gaussian {
        x: StateVec::new(0.0, 0.0, v, 0.0, 0.0),
        p: StateCov::from_diagonal(&StateVec::new(25.0, 25.0, 4.0, 4.0, 1e-4)),
    };
    let mut s = imm.init(g0, Some(&VESSEL_MU0));
    let (mut straight, mut turning) = ([0.0; 3], [0.0; 3]);
    let mut t = 0.0;
    while t < 180.0 {
        t += dt;
        let noise = Vector2::new(
            rng.sample::<f64, _>(StandardNormal),
            rng.sample::<f64, _>(StandardNormal),
        ) * 5.0;
        let pred = imm.predict(&s, dt);
        s = imm
            .update(&pred, &(truth(t) + noise), &r)
            .expect("update")
            .0;
        let acc = if (30.0..60.0).contains(&t) {
            &mut straight
        } else if (75.0..120.0).contains(&t) {
            &mut turning
        } else {
            continue;
        };
        acc.iter_mut().zip(s.mu).for_each(|(a, m)| *a += m);
    }
    eprintln!("straight {straight:?} turning {turning:?}");
    assert!(
        straight[0] > straight[1] && straight[0] > straight[2],
        "straight leg: {straight:?}"
    );
    assert!(
        turning[1] > turning[0] && turning[1] > turning[2],
        "turn: {turning:?}"
    );
    let est = imm.combine(&s);
    assert!((est.x.fixed_rows::<2>(0) - truth(t)).norm() < 20.0);
}

/// Cost of the filter pieces and of the default (3-model) IMM. Run with
/// `cargo test --release --test imm_checks -- --ignored --nocapture`.
#[test]
#[ignore]
fn timing_of_filter_pieces() {
    use std::hint::black_box;
    let g = Gaussian {
        x: StateVec::new(0.0, 0.0, 5.0, 1.0, 0.01),
        p: StateCov::from_diagonal(&StateVec::new(25.0, 25.0, 4.0, 4.0, 1e-4)),
    };
    let r = Matrix2::identity() * 25.0;
    let z = Vector2::new(3.0, -2.0);
    // The machine is shared: report the fastest of many short batches,
    // which is the cost without preemption by other processes.
    let time = |what: &str, f: &dyn Fn() -> f64| {
        let (batches, per_batch) = (300, 2_000);
        let mut best = f64::INFINITY;
        let mut acc = 0.0;
        for _ in 0..batches {
            let t0 = std::time::Instant::now();
            for _ in 0..per_batch {
                acc += f();
            }
            best = best.min(t0.elapsed().as_nanos() as f64 / per_batch as f64);
        }
        eprintln!("{what}: {best:.0} ns (checksum {acc:e})");
    };
    let cv = Motion::ConstantVelocity { accel_psd: 0.02 };
    let ct = Motion::CoordinatedTurn {
        accel_psd: 0.05,
        turn_psd: 1e-4,
    };
    time("CV predict", &|| {
        cv.predict(black_box(&g), black_box(2.5)).p[(0, 0)]
    });
    time("CT predict", &|| {
        ct.predict(black_box(&g), black_box(2.5)).p[(0, 0)]
    });
    time("innovation", &|| {
        innovation(black_box(&g), black_box(&z), &r).map_or(0.0, |i| i.d2)
    });
    time("update", &|| {
        update(black_box(&g), black_box(&z), &r).map_or(0.0, |u| u.0.p[(0, 0)])
    });
    let imm = Imm::vessel_default();
    let s = imm.init(g, Some(&VESSEL_MU0));
    let pred = imm.predict(&s, 2.5);
    time("IMM predict", &|| {
        imm.predict(black_box(&s), black_box(2.5)).mu[0]
    });
    time("IMM update", &|| {
        imm.update(black_box(&pred), black_box(&z), &r)
            .map_or(0.0, |u| u.1)
    });
    time("IMM combine", &|| imm.combine(black_box(&pred)).p[(0, 0)]);
}
