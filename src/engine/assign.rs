//! Assignment: a rectangular shortest-augmenting-path solver (Jonker &
//! Volgenant 1987 style) with forbidden pairs, and a sparse front end that
//! splits a gated problem into independent clusters.
//!
//! STUB: to be implemented.

/// Why an assignment problem has no solution.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum AssignError {
    #[error("row {0} has no allowed column left")]
    Infeasible(usize),
    #[error("more rows ({rows}) than columns ({cols})")]
    Shape { rows: usize, cols: usize },
    #[error("a cost is NaN or -inf")]
    BadCost,
}

/// Reusable solver: keeps its scratch buffers between calls so that the
/// per-scan path does not allocate once warmed up.
#[derive(Default, Debug)]
pub struct LapSolver {}

impl LapSolver {
    pub fn new() -> Self {
        LapSolver::default()
    }

    /// Minimum-cost assignment of every row to a distinct column.
    /// `cost` is row-major, `rows × cols`, rows ≤ cols; `f64::INFINITY`
    /// forbids a pair. Writes the chosen column of each row into
    /// `row_to_col` (resized to `rows`) and returns the total cost.
    pub fn solve(&mut self, rows: usize, cols: usize, cost: &[f64], row_to_col: &mut Vec<usize>) -> Result<f64, AssignError> {
        let _ = (rows, cols, cost, row_to_col);
        todo!()
    }
}

/// A sparse assignment where every row and column may stay unassigned:
/// `pairs` lists the allowed (row, col, cost) entries; leaving row i
/// unassigned costs `row_alone[i]`, leaving column j unassigned costs
/// `col_alone[j]`. The problem is split into connected clusters of allowed
/// pairs and each cluster is solved exactly. Returns, per row, the column
/// it took, or `None`.
#[derive(Default, Debug)]
pub struct SparseAssigner {}

impl SparseAssigner {
    pub fn new() -> Self {
        SparseAssigner::default()
    }
    pub fn solve(&mut self, row_alone: &[f64], col_alone: &[f64], pairs: &[(u32, u32, f64)], row_to_col: &mut Vec<Option<u32>>) -> f64 {
        let _ = (row_alone, col_alone, pairs, row_to_col);
        todo!()
    }
}
