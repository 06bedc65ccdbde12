//! Shared helpers for the filter and IMM checks: fixture loading and
//! tolerance-aware comparisons.
#![allow(dead_code)]

use nalgebra::{Matrix2, SMatrix, Vector2};
use serde_json::Value;
use skerry::engine::filter::{Gaussian, StateCov, StateVec};

pub fn fixture(name: &str) -> Value {
    let path = format!("{}/tests/fixtures/{name}", env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{path}: {e}"))
}

pub fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

fn nums(v: &Value) -> Vec<f64> {
    v.as_array()
        .unwrap_or_else(|| panic!("not an array: {v}"))
        .iter()
        .map(num)
        .collect()
}

pub fn smat<const R: usize, const C: usize>(v: &Value) -> SMatrix<f64, R, C> {
    let rows = v.as_array().expect("matrix rows");
    assert_eq!(rows.len(), R);
    let mut m = SMatrix::<f64, R, C>::zeros();
    for (i, row) in rows.iter().enumerate() {
        let row = nums(row);
        assert_eq!(row.len(), C);
        for (j, x) in row.into_iter().enumerate() {
            m[(i, j)] = x;
        }
    }
    m
}

pub fn state(v: &Value) -> StateVec {
    let x = nums(v);
    assert_eq!(x.len(), 5);
    StateVec::from_column_slice(&x)
}

pub fn cov(v: &Value) -> StateCov {
    smat::<5, 5>(v)
}

pub fn v2(v: &Value) -> Vector2<f64> {
    let x = nums(v);
    assert_eq!(x.len(), 2);
    Vector2::new(x[0], x[1])
}

pub fn m2(v: &Value) -> Matrix2<f64> {
    smat::<2, 2>(v)
}

pub fn gaussian(x: &Value, p: &Value) -> Gaussian {
    Gaussian {
        x: state(x),
        p: cov(p),
    }
}

/// Covariances agree to `tol` on the correlation scale:
/// |Pᵢⱼ − Rᵢⱼ| ≤ tol·√(RᵢᵢRⱼⱼ). Entries whose variances are 0 (the CV
/// model's turn rate) must match exactly.
pub fn assert_cov_close<const N: usize>(
    got: &SMatrix<f64, N, N>,
    want: &SMatrix<f64, N, N>,
    tol: f64,
    what: &str,
) {
    for i in 0..N {
        for j in 0..N {
            let scale = (want[(i, i)].abs() * want[(j, j)].abs()).sqrt();
            let err = (got[(i, j)] - want[(i, j)]).abs();
            assert!(
                err <= tol * scale,
                "{what}[{i},{j}]: got {:e}, want {:e} (err {err:e}, scale {scale:e})",
                got[(i, j)],
                want[(i, j)]
            );
        }
    }
}

/// A state agrees to `tol` relative to the larger of its magnitude and its
/// standard deviation under `p`.
pub fn assert_state_close(got: &StateVec, want: &StateVec, p: &StateCov, tol: f64, what: &str) {
    for i in 0..5 {
        let scale = want[i].abs().max(p[(i, i)].abs().sqrt());
        let err = (got[i] - want[i]).abs();
        assert!(
            err <= tol * scale,
            "{what}[{i}]: got {:e}, want {:e} (err {err:e})",
            got[i],
            want[i]
        );
    }
}

pub fn assert_rel(got: f64, want: f64, tol: f64, what: &str) {
    let err = (got - want).abs();
    assert!(
        err <= tol * want.abs().max(1.0),
        "{what}: got {got:e}, want {want:e} (err {err:e})"
    );
}

pub fn assert_symmetric(p: &StateCov, what: &str) {
    assert_eq!(*p, p.transpose(), "{what} not exactly symmetric");
}
