//! skerry's assignment solvers against fixtures made by
//! scipy.optimize.linear_sum_assignment (scipy 1.17.1; the generating
//! script is tests/fixtures/make_assign_fixtures.py, which also records the
//! versions in the JSON).

use serde::Deserialize;
use skerry::engine::assign::{AssignError, LapSolver, SparseAssigner};

#[derive(Deserialize)]
struct Fixtures {
    reference: String,
    dense: Vec<Dense>,
    sparse: Vec<Sparse>,
}

#[derive(Deserialize)]
struct Dense {
    name: String,
    rows: usize,
    cols: usize,
    /// `null` marks a forbidden pair.
    cost: Vec<Vec<Option<f64>>>,
    feasible: bool,
    total: Option<f64>,
}

#[derive(Deserialize)]
struct Sparse {
    name: String,
    row_alone: Vec<f64>,
    col_alone: Vec<f64>,
    pairs: Vec<(u32, u32, f64)>,
    total: f64,
}

fn fixtures() -> Fixtures {
    let f: Fixtures = serde_json::from_str(include_str!("fixtures/assign_scipy.json")).expect("fixture parses");
    assert!(f.reference.contains("scipy"));
    f
}

// Dense and rectangular problems with forbidden pairs: skerry's optimal
// total equals scipy's to 1e-9, and its assignment is valid and costs
// what it reports.
#[test]
fn dense_totals_match_scipy() {
    let f = fixtures();
    let mut solver = LapSolver::new();
    let mut r2c = Vec::new();
    let mut feasible = 0;
    for case in f.dense.iter().filter(|c| c.feasible) {
        let flat: Vec<f64> = case.cost.iter().flatten().map(|c| c.unwrap_or(f64::INFINITY)).collect();
        assert_eq!(flat.len(), case.rows * case.cols, "{}", case.name);
        let total = solver.solve(case.rows, case.cols, &flat, &mut r2c).unwrap_or_else(|e| panic!("{}: {e}", case.name));
        let want = case.total.expect("feasible case has a total");
        assert!((total - want).abs() <= 1e-9, "{}: skerry {total}, scipy {want}", case.name);

        let mut used = vec![false; case.cols];
        let mut sum = 0.0;
        for (i, &j) in r2c.iter().enumerate() {
            assert!(!used[j], "{}: column {j} used twice", case.name);
            used[j] = true;
            sum += case.cost[i][j].unwrap_or_else(|| panic!("{}: forbidden pair ({i}, {j}) chosen", case.name));
        }
        assert!((sum - total).abs() <= 1e-9, "{}", case.name);
        feasible += 1;
    }
    assert_eq!(feasible, 5);
}

// Matrices scipy reports as infeasible are infeasible for skerry too.
#[test]
fn infeasible_like_scipy() {
    let f = fixtures();
    let mut solver = LapSolver::new();
    let mut r2c = Vec::new();
    let mut seen = 0;
    for case in f.dense.iter().filter(|c| !c.feasible) {
        let flat: Vec<f64> = case.cost.iter().flatten().map(|c| c.unwrap_or(f64::INFINITY)).collect();
        match solver.solve(case.rows, case.cols, &flat, &mut r2c) {
            Err(AssignError::Infeasible(row)) => {
                assert!(row < case.rows, "{}", case.name);
                if case.name.starts_with("hall_") {
                    // Rows 0..3 share columns 0..2 and every other row has
                    // dozens of allowed columns, so only one of the three
                    // can be the row left with nowhere to go.
                    assert!(row < 3, "{}: row {row}", case.name);
                }
            }
            other => panic!("{}: expected Infeasible, got {other:?}", case.name),
        }
        seen += 1;
    }
    assert_eq!(seen, 2);
}

// Gated problems with leave-alone costs: scipy solved the textbook square
// augmented matrix; skerry's clustered front end must reach the same total.
#[test]
fn sparse_totals_match_scipy_augmented_form() {
    let f = fixtures();
    let mut assigner = SparseAssigner::new();
    let mut r2c = Vec::new();
    for case in &f.sparse {
        let total = assigner.solve(&case.row_alone, &case.col_alone, &case.pairs, &mut r2c);
        assert!((total - case.total).abs() <= 1e-9, "{}: skerry {total}, scipy {}", case.name, case.total);
        assert!(r2c.iter().filter(|c| c.is_some()).count() > 0, "{}: the check is vacuous", case.name);
    }
    assert_eq!(f.sparse.len(), 3);
}
