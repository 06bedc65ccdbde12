//! GOSPA at one instant, with α = 2 (Rahmathullah, García-Fernández &
//! Svensson, "Generalized optimal sub-pattern assignment metric", FUSION
//! 2017), and the exact assignment it needs.
//!
//! For truth set X (n points), estimates Y (m points), cut-off c and
//! order p:
//!
//! ```text
//! GOSPA^p = min over partial assignments γ of
//!           Σ_{(i,j)∈γ} d(x_i, y_j)^p + (c^p/2)·(n − |γ|) + (c^p/2)·(m − |γ|)
//! ```
//!
//! With α = 2 this equals the padded square problem with cost
//! min(d, c)^p on real pairs and 0 on dummies, plus (c^p/2)·|n − m|: a
//! pair at distance ≥ c costs exactly one miss plus one false estimate.
//! Pairs of the optimal assignment at distance < c are "assigned"; the
//! others count as missed truths and false estimates.

use nalgebra::Vector2;

/// GOSPA at one instant, split as in the paper's Proposition 1:
/// `distance^p = localisation + missed + false_`.
#[derive(Clone, Debug, PartialEq)]
pub struct Gospa {
    pub distance: f64,
    /// Σ d^p over assigned pairs (m^p).
    pub localisation: f64,
    /// (c^p/2) · number of missed truths (m^p).
    pub missed: f64,
    /// (c^p/2) · number of false estimates (m^p).
    pub false_: f64,
    pub n_missed: usize,
    pub n_false: usize,
    /// For each truth point, the estimate it is assigned to (distance < c).
    pub assignment: Vec<Option<usize>>,
}

/// Minimum-cost perfect matching of a square `n×n` cost matrix (row
/// major): `result[row] = column`. Shortest augmenting paths with
/// potentials (Kuhn–Munkres in the Jonker–Volgenant form), O(n³).
pub fn min_cost_assignment(cost: &[f64], n: usize) -> Vec<usize> {
    assert_eq!(cost.len(), n * n, "cost matrix must be n×n");
    if n == 0 {
        return Vec::new();
    }
    // 1-based arrays with column 0 as the virtual start of each path.
    let mut u = vec![0.0f64; n + 1];
    let mut v = vec![0.0f64; n + 1];
    let mut row_of = vec![0usize; n + 1];
    let mut way = vec![0usize; n + 1];
    let mut minv = vec![0.0f64; n + 1];
    let mut used = vec![false; n + 1];
    for i in 1..=n {
        row_of[0] = i;
        let mut j0 = 0;
        minv.iter_mut().for_each(|x| *x = f64::INFINITY);
        used.iter_mut().for_each(|x| *x = false);
        loop {
            used[j0] = true;
            let i0 = row_of[j0];
            let mut delta = f64::INFINITY;
            let mut j1 = 0;
            for j in 1..=n {
                if !used[j] {
                    let cur = cost[(i0 - 1) * n + (j - 1)] - u[i0] - v[j];
                    if cur < minv[j] {
                        minv[j] = cur;
                        way[j] = j0;
                    }
                    if minv[j] < delta {
                        delta = minv[j];
                        j1 = j;
                    }
                }
            }
            for j in 0..=n {
                if used[j] {
                    u[row_of[j]] += delta;
                    v[j] -= delta;
                } else {
                    minv[j] -= delta;
                }
            }
            j0 = j1;
            if row_of[j0] == 0 {
                break;
            }
        }
        loop {
            let j1 = way[j0];
            row_of[j0] = row_of[j1];
            j0 = j1;
            if j0 == 0 {
                break;
            }
        }
    }
    let mut out = vec![0usize; n];
    for j in 1..=n {
        if row_of[j] > 0 {
            out[row_of[j] - 1] = j - 1;
        }
    }
    out
}

/// GOSPA (α = 2) between `truth` and `estimates` with cut-off `c` > 0 and
/// order `p` ≥ 1.
pub fn gospa(truth: &[Vector2<f64>], estimates: &[Vector2<f64>], c: f64, p: f64) -> Gospa {
    let n = truth.len();
    let m = estimates.len();
    let k = n.max(m);
    let cp = c.powf(p);
    let mut cost = vec![0.0; k * k];
    for (i, x) in truth.iter().enumerate() {
        for (j, y) in estimates.iter().enumerate() {
            cost[i * k + j] = (x - y).norm().min(c).powf(p);
        }
    }
    let perm = min_cost_assignment(&cost, k);
    let mut assignment = vec![None; n];
    let mut localisation = 0.0;
    let mut assigned = 0;
    for (i, slot) in assignment.iter_mut().enumerate() {
        let j = perm[i];
        if j < m {
            let d = (truth[i] - estimates[j]).norm();
            if d < c {
                *slot = Some(j);
                localisation += d.powf(p);
                assigned += 1;
            }
        }
    }
    let n_missed = n - assigned;
    let n_false = m - assigned;
    let missed = 0.5 * cp * n_missed as f64;
    let false_ = 0.5 * cp * n_false as f64;
    let distance = (localisation + missed + false_).powf(1.0 / p);
    Gospa { distance, localisation, missed, false_, n_missed, n_false, assignment }
}
