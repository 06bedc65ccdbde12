//! GOSPA and the exact assignment under it, checked against brute force
//! over the definition and against scipy's assignment solver.

use nalgebra::Vector2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use skerry::score::gospa::{gospa, min_cost_assignment};

fn pts(v: &serde_json::Value) -> Vec<Vector2<f64>> {
    v.as_array().unwrap().iter().map(|p| Vector2::new(p[0].as_f64().unwrap(), p[1].as_f64().unwrap())).collect()
}

fn fixture() -> serde_json::Value {
    // Made by tests/fixtures/make_score_gospa.py (scipy 1.17.1, numpy 2.4.6).
    serde_json::from_str(include_str!("fixtures/score_gospa.json")).unwrap()
}

/// GOSPA^p by the definition (Rahmathullah, García-Fernández & Svensson
/// 2017, α = 2): the minimum over every partial assignment γ of
/// Σ d^p + (c^p/2)(|X| + |Y| − 2|γ|). Returns (total, localisation, #assigned).
fn brute_force(x: &[Vector2<f64>], y: &[Vector2<f64>], c: f64, p: f64) -> (f64, f64, usize) {
    struct Search<'a> {
        x: &'a [Vector2<f64>],
        y: &'a [Vector2<f64>],
        c: f64,
        p: f64,
        used: Vec<bool>,
        best: (f64, f64, usize),
    }
    impl Search<'_> {
        fn rec(&mut self, i: usize, loc: f64, k: usize) {
            if i == self.x.len() {
                let total = loc + 0.5 * self.c.powf(self.p) * (self.x.len() + self.y.len() - 2 * k) as f64;
                if total < self.best.0 {
                    self.best = (total, loc, k);
                }
                return;
            }
            // x_i left unassigned ...
            self.rec(i + 1, loc, k);
            // ... or paired with any free y_j.
            for j in 0..self.y.len() {
                if !self.used[j] {
                    self.used[j] = true;
                    let d = (self.x[i] - self.y[j]).norm().powf(self.p);
                    self.rec(i + 1, loc + d, k + 1);
                    self.used[j] = false;
                }
            }
        }
    }
    let mut s = Search { x, y, c, p, used: vec![false; y.len()], best: (f64::INFINITY, 0.0, 0) };
    s.rec(0, 0.0, 0);
    s.best
}

#[test]
fn worked_example() {
    // truth {(0,0),(10,0),(20,0)}, estimates {(1,0),(10,3),(20,7),(40,0)},
    // c = 5, p = 2: 6.8920243760, computed with scipy.optimize.
    // linear_sum_assignment (tests/fixtures/make_score_gospa.py): pairs at 1
    // and 3 m, one truth missed (7 m ≥ c), two estimates false:
    // (1 + 9 + 12.5 + 2·12.5)^(1/2).
    let x = [Vector2::new(0.0, 0.0), Vector2::new(10.0, 0.0), Vector2::new(20.0, 0.0)];
    let y = [Vector2::new(1.0, 0.0), Vector2::new(10.0, 3.0), Vector2::new(20.0, 7.0), Vector2::new(40.0, 0.0)];
    let g = gospa(&x, &y, 5.0, 2.0);
    assert!((g.distance - 6.8920243760).abs() < 1e-9, "{}", g.distance);
    let w = &fixture()["worked"];
    assert!((g.distance - w["distance"].as_f64().unwrap()).abs() < 1e-12);
    assert!((g.localisation - w["localisation"].as_f64().unwrap()).abs() < 1e-12);
    assert!((g.missed - w["missed"].as_f64().unwrap()).abs() < 1e-12);
    assert!((g.false_ - w["false"].as_f64().unwrap()).abs() < 1e-12);
    assert_eq!(g.assignment, vec![Some(0), Some(1), None]);
    assert_eq!((g.n_missed, g.n_false), (1, 2));
}

#[test]
fn matches_scipy_cases() {
    // 40 random cases solved with scipy's linear_sum_assignment.
    let f = fixture();
    for (i, case) in f["cases"].as_array().unwrap().iter().enumerate() {
        let x = pts(&case["truth"]);
        let y = pts(&case["estimates"]);
        let c = case["c"].as_f64().unwrap();
        let p = case["p"].as_f64().unwrap();
        let g = gospa(&x, &y, c, p);
        let tol = 1e-9 * (1.0 + case["distance"].as_f64().unwrap());
        assert!((g.distance - case["distance"].as_f64().unwrap()).abs() < tol, "case {i}: {} vs {}", g.distance, case["distance"]);
        for (mine, key) in [(g.localisation, "localisation"), (g.missed, "missed"), (g.false_, "false")] {
            let want = case[key].as_f64().unwrap();
            assert!((mine - want).abs() < 1e-9 * (1.0 + want), "case {i} {key}: {mine} vs {want}");
        }
    }
}

#[test]
fn matches_brute_force_over_partial_assignments() {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    for case in 0..400 {
        let n = rng.random_range(0..=5);
        let m = rng.random_range(0..=5);
        // Points clustered so that some pairs fall inside and some outside the cut-off.
        let mut draw = |k: usize| -> Vec<Vector2<f64>> { (0..k).map(|_| Vector2::new(rng.random_range(0.0..30.0), rng.random_range(0.0..30.0))).collect() };
        let x = draw(n);
        let y = draw(m);
        let c = [3.0, 8.0, 15.0][case % 3];
        let p = [1.0, 2.0, 2.5][(case / 3) % 3];
        let (total, loc, k) = brute_force(&x, &y, c, p);
        let g = gospa(&x, &y, c, p);
        let pow = g.localisation + g.missed + g.false_;
        assert!((pow - total).abs() < 1e-9 * (1.0 + total), "case {case}: {pow} vs {total}");
        assert!((g.distance - total.powf(1.0 / p)).abs() < 1e-9 * (1.0 + g.distance));
        assert!((g.localisation - loc).abs() < 1e-9 * (1.0 + loc), "case {case}");
        assert_eq!(n - g.n_missed, k, "case {case}");
        // The assignment is one-to-one and within the cut-off.
        let mut seen = vec![false; m];
        for (i, a) in g.assignment.iter().enumerate() {
            if let Some(j) = *a {
                assert!(!seen[j]);
                seen[j] = true;
                assert!((x[i] - y[j]).norm() < c);
            }
        }
    }
}

#[test]
fn assignment_matches_every_permutation() {
    fn best(cost: &[f64], n: usize) -> f64 {
        fn perms(k: usize, n: usize, used: &mut Vec<bool>, acc: f64, cost: &[f64], best: &mut f64) {
            if k == n {
                *best = best.min(acc);
                return;
            }
            for j in 0..n {
                if !used[j] {
                    used[j] = true;
                    perms(k + 1, n, used, acc + cost[k * n + j], cost, best);
                    used[j] = false;
                }
            }
        }
        let mut b = f64::INFINITY;
        perms(0, n, &mut vec![false; n], 0.0, cost, &mut b);
        b
    }
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    for case in 0..300 {
        let n = 1 + case % 7;
        // Small integers make many ties; reals make none.
        let cost: Vec<f64> = (0..n * n).map(|_| if case % 2 == 0 { rng.random_range(0..5) as f64 } else { rng.random_range(-10.0..10.0) }).collect();
        let perm = min_cost_assignment(&cost, n);
        let mut cols = perm.clone();
        cols.sort();
        assert_eq!(cols, (0..n).collect::<Vec<_>>(), "not a permutation");
        let got: f64 = perm.iter().enumerate().map(|(i, &j)| cost[i * n + j]).sum();
        assert!((got - best(&cost, n)).abs() < 1e-9, "case {case}");
    }
    assert!(min_cost_assignment(&[], 0).is_empty());
}

#[test]
fn empty_sets() {
    // Definition: with no truth, every estimate is false at c^p/2 each.
    let y = [Vector2::new(0.0, 0.0), Vector2::new(5.0, 5.0)];
    let g = gospa(&[], &y, 10.0, 2.0);
    assert!((g.distance - (2.0 * 50.0f64).sqrt()).abs() < 1e-12);
    let g = gospa(&y, &[], 10.0, 1.0);
    assert!((g.distance - 10.0).abs() < 1e-12 && g.n_missed == 2);
    assert_eq!(gospa(&[], &[], 10.0, 2.0).distance, 0.0);
}
