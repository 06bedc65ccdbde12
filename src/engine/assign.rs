//! Assignment: a rectangular shortest-augmenting-path solver (Jonker &
//! Volgenant 1987 style) with forbidden pairs, and a sparse front end that
//! splits a gated problem into independent clusters.
//!
//! # Contract
//!
//! [`LapSolver::solve`] takes a dense row-major `rows × cols` cost matrix
//! with `rows ≤ cols` and assigns every row to a distinct column at minimum
//! total cost. `f64::INFINITY` forbids a pair; NaN and `-inf` are rejected
//! ([`AssignError::BadCost`]); a problem where the rows cannot all be
//! placed on allowed pairs is rejected ([`AssignError::Infeasible`]). Ties
//! between equally cheap assignments are broken deterministically: the same
//! matrix always gives the same assignment. Finite costs are assumed to be
//! of ordinary magnitude (far from ±1e300), so that their differences do
//! not overflow.
//!
//! [`SparseAssigner::solve`] takes a gated problem: the allowed
//! (row, column, cost) pairs, plus the cost of leaving each row and each
//! column unassigned. In skerry the rows are the plots of a scan and the
//! columns are the tracks. It returns the minimum of
//! Σ chosen pair costs + Σ `row_alone` of unassigned rows + Σ `col_alone`
//! of unassigned columns, and the choice, per row. The result depends only
//! on the set of pairs, not on their order.
//!
//! Both keep their scratch buffers between calls: once they have seen a
//! problem of a given size, solving problems up to that size does not touch
//! the heap (the caller's output `Vec` is reused the same way).
//!
//! # Method
//!
//! The dense solver follows Jonker & Volgenant (1987), "A shortest
//! augmenting path algorithm for dense and sparse linear assignment
//! problems", Computing 38: an auction-like *augmenting row reduction*
//! pass that places most rows cheaply, then one Dijkstra search per
//! remaining free row over reduced costs `c[i][j] - v[j]`, scanning all
//! columns that share the current minimum distance at once. For rectangular
//! problems the column duals start at zero and only ever decrease on columns
//! that are (or become) assigned, so every unassigned column keeps the same
//! dual; this is the optimality condition for the rectangular case
//! discussed by Crouse (2016), "On implementing 2D rectangular assignment
//! algorithms", IEEE T-AES 52(4) (from memory; the condition itself is the
//! complementary slackness of the LP with `Σ_i x_ij ≤ 1`, and the brute
//! force and scipy tests check the result). JV's column reduction is
//! therefore not used (it would give unassigned columns unequal duals).
//!
//! The sparse front end unions the allowed pairs into connected clusters.
//! A cluster with a single row or a single column is decided directly; a
//! larger one becomes a small dense problem of `n_r × (n_c + n_r)`: row i
//! may take column j at `cost(i, j) − col_alone[j]` or its own private
//! "stay alone" column at `row_alone[i]`; its optimum plus the cluster's
//! `Σ col_alone` is the cluster's objective, so its argmin is the
//! cluster's. Every row has its private column, so the small problem is
//! always feasible. The returned total is summed from the choices, in row
//! then column index order. The dense form costs O(n_r·(n_c + n_r))
//! memory and up to cubic time per cluster: fine for gated scans, where
//! clusters are a few tens of plots, not meant for one giant cluster.
//!
//! Most gated scans are trivial: no pairs, or every cluster a *star* (one
//! row with any number of columns each in no other pair, or one column
//! with rows each in no other pair; a lone pair is both). A fast path
//! recognises that from the pairs' degrees and decides each star by the
//! same rule, with the same tie-breaking, that the single-row and
//! single-column cluster cases use, without the union-find and the
//! counting sort. A connected set of pairs in which every pair has an end
//! of degree 1 is a star (two ends of degree ≥ 2 in one cluster would be
//! joined by a path whose first pair has both ends of degree ≥ 2), so the
//! fast path takes exactly the problems whose clusters would all have gone
//! to those two cases, and hands every other problem, untouched, to the
//! general route.

const NONE: usize = usize::MAX;

/// Bound on how many displaced rows the augmenting row reduction re-bids
/// immediately, per row of the problem. The reduction is an auction without
/// a minimum bid increment, so on near-ties it can trade tiny price steps
/// for a long time; past this budget the remaining rows go to the
/// shortest-path phase, which is exact. Any stopping point leaves a valid
/// partial solution, so the budget affects speed only.
const BID_BUDGET_PER_ROW: usize = 4;

/// Number of passes of augmenting row reduction (Jonker & Volgenant use two).
const REDUCTION_PASSES: usize = 2;

/// Why an assignment problem has no solution.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum AssignError {
    #[error("row {0} has no allowed column left")]
    Infeasible(usize),
    #[error("more rows ({rows}) than columns ({cols})")]
    Shape { rows: usize, cols: usize },
    #[error("a cost is NaN or -inf")]
    BadCost,
    #[error("cost matrix has {got} entries, expected rows × cols = {expected}")]
    CostLength { expected: usize, got: usize },
}

/// Reusable solver: keeps its scratch buffers between calls so that the
/// per-scan path does not allocate once warmed up.
#[derive(Default, Debug)]
pub struct LapSolver {
    /// Column duals; the reduced cost of (i, j) is `c[i][j] - v[j]`.
    v: Vec<f64>,
    /// Shortest-path distance of each column from the current free row.
    dist: Vec<f64>,
    /// Row from which each column was reached in the current search.
    pred: Vec<usize>,
    /// Column order of the current search: `[0, low)` done, `[low, up)` at
    /// the current minimum distance, `[up, cols)` not yet reached at it.
    order: Vec<usize>,
    /// Row holding each column, or `NONE`.
    col_row: Vec<usize>,
    /// Column held by each row, or `NONE`.
    row_col: Vec<usize>,
    /// Rows still to place.
    free: Vec<usize>,
    /// Tests set this to send every row through the shortest-path phase.
    skip_reduction: bool,
}

impl LapSolver {
    pub fn new() -> Self {
        LapSolver::default()
    }

    /// Minimum-cost assignment of every row to a distinct column.
    /// `cost` is row-major, `rows × cols`, rows ≤ cols; `f64::INFINITY`
    /// forbids a pair. Writes the chosen column of each row into
    /// `row_to_col` (resized to `rows`) and returns the total cost.
    ///
    /// Errors: [`AssignError::CostLength`] if `cost.len() != rows * cols`,
    /// [`AssignError::Shape`] if `rows > cols`, [`AssignError::BadCost`] if
    /// any entry is NaN or `-inf` (checked before feasibility), and
    /// [`AssignError::Infeasible`] naming the first row with no allowed
    /// column at all, or else the row whose augmenting search found no free
    /// column. On error `row_to_col` is left empty.
    pub fn solve(&mut self, rows: usize, cols: usize, cost: &[f64], row_to_col: &mut Vec<usize>) -> Result<f64, AssignError> {
        row_to_col.clear();
        let expected = rows.checked_mul(cols).ok_or(AssignError::CostLength { expected: usize::MAX, got: cost.len() })?;
        if cost.len() != expected {
            return Err(AssignError::CostLength { expected, got: cost.len() });
        }
        if rows > cols {
            return Err(AssignError::Shape { rows, cols });
        }
        if rows == 0 {
            return Ok(0.0);
        }
        validate(cols, cost)?;

        self.v.clear();
        self.v.resize(cols, 0.0);
        self.col_row.clear();
        self.col_row.resize(cols, NONE);
        self.row_col.clear();
        self.row_col.resize(rows, NONE);
        self.free.clear();
        self.free.extend(0..rows);

        if !self.skip_reduction {
            self.reduce_rows(cols, cost);
        }

        self.dist.clear();
        self.dist.resize(cols, 0.0);
        self.pred.clear();
        self.pred.resize(cols, NONE);
        self.order.clear();
        self.order.resize(cols, 0);
        for k in 0..self.free.len() {
            let f = self.free[k];
            self.augment(f, cols, cost)?;
        }

        // Summed from the original entries in row order, not from the
        // duals, so the figure is exact to the last rounding of the sum.
        let mut total = 0.0;
        row_to_col.extend_from_slice(&self.row_col);
        for (i, &j) in row_to_col.iter().enumerate() {
            total += cost[i * cols + j];
        }
        Ok(total)
    }

    /// Augmenting row reduction (Jonker & Volgenant 1987): each free
    /// row takes its cheapest column by reduced cost and lowers that
    /// column's dual by the gap to its second cheapest, displacing the
    /// previous holder, which bids again. Leaves the rows it could not
    /// place in `self.free`.
    fn reduce_rows(&mut self, cols: usize, cost: &[f64]) {
        let mut budget = BID_BUDGET_PER_ROW.saturating_mul(self.row_col.len());
        for _ in 0..REDUCTION_PASSES {
            let pending = self.free.len();
            if pending == 0 {
                break;
            }
            let mut k = 0;
            let mut kept = 0;
            // Invariant: kept ≤ k, so writing free[kept] or free[k - 1]
            // never overwrites a row still to be read.
            while k < pending {
                let i = self.free[k];
                k += 1;
                let row = &cost[i * cols..(i + 1) * cols];
                let (mut u1, mut j1, mut u2, mut j2) = (f64::INFINITY, NONE, f64::INFINITY, NONE);
                for (j, (&c, &vj)) in row.iter().zip(&self.v).enumerate() {
                    let h = c - vj;
                    if h < u2 {
                        if h < u1 {
                            u2 = u1;
                            j2 = j1;
                            u1 = h;
                            j1 = j;
                        } else {
                            u2 = h;
                            j2 = j;
                        }
                    }
                }
                // validate() guarantees a finite entry in every row and the
                // duals stay finite, so j1 is set.
                let mut holder = self.col_row[j1];
                if u2 == f64::INFINITY {
                    // One allowed column only: no second price to bid up
                    // to. Take it if free, else leave it to the search.
                    if holder == NONE {
                        self.col_row[j1] = i;
                        self.row_col[i] = j1;
                    } else {
                        self.free[kept] = i;
                        kept += 1;
                    }
                    continue;
                }
                let strict = u1 < u2;
                if strict {
                    self.v[j1] -= u2 - u1;
                } else if holder != NONE {
                    // A tie: take the equally cheap second column instead
                    // of displacing anyone for nothing.
                    j1 = j2;
                    holder = self.col_row[j1];
                }
                self.col_row[j1] = i;
                self.row_col[i] = j1;
                if holder != NONE {
                    self.row_col[holder] = NONE;
                    if strict && budget > 0 {
                        budget -= 1;
                        k -= 1;
                        self.free[k] = holder;
                    } else {
                        self.free[kept] = holder;
                        kept += 1;
                    }
                }
            }
            self.free.truncate(kept);
        }
    }

    /// One Dijkstra search over reduced costs from free row `f` to the
    /// nearest free column, then the dual update and the flip of the
    /// alternating path (Jonker & Volgenant 1987, the augmentation procedure).
    fn augment(&mut self, f: usize, cols: usize, cost: &[f64]) -> Result<(), AssignError> {
        let v = &mut self.v[..cols];
        let dist = &mut self.dist[..cols];
        let pred = &mut self.pred[..cols];
        let order = &mut self.order[..cols];
        let col_row = &mut self.col_row[..cols];

        let row_f = &cost[f * cols..(f + 1) * cols];
        for j in 0..cols {
            dist[j] = row_f[j] - v[j];
            pred[j] = f;
            order[j] = j;
        }
        let mut low = 0;
        let mut up = 0;
        let mut done = 0;
        let mut min = 0.0;
        let end = 'search: loop {
            if up == low {
                // Every column at the old minimum is scanned: gather all
                // columns at the next smallest distance.
                done = low;
                if up == cols {
                    return Err(AssignError::Infeasible(f));
                }
                min = dist[order[up]];
                up += 1;
                // `up` grows inside: the columns swapped to it are ones
                // this loop has already passed.
                let start = up;
                for k in start..cols {
                    let j = order[k];
                    let h = dist[j];
                    if h <= min {
                        if h < min {
                            up = low;
                            min = h;
                        }
                        order[k] = order[up];
                        order[up] = j;
                        up += 1;
                    }
                }
                if min == f64::INFINITY {
                    return Err(AssignError::Infeasible(f));
                }
                for &j in &order[low..up] {
                    if col_row[j] == NONE {
                        break 'search j;
                    }
                }
            }
            let j1 = order[low];
            low += 1;
            let i = col_row[j1];
            let row_i = &cost[i * cols..(i + 1) * cols];
            let base = row_i[j1] - v[j1] - min;
            let start = up;
            for k in start..cols {
                let j = order[k];
                let h = row_i[j] - v[j] - base;
                if h < dist[j] {
                    pred[j] = i;
                    if h == min {
                        if col_row[j] == NONE {
                            break 'search j;
                        }
                        order[k] = order[up];
                        order[up] = j;
                        up += 1;
                    }
                    dist[j] = h;
                }
            }
        };

        // Columns scanned before the last minimum was set moved closer than
        // `min`; lowering their duals keeps every reduced cost ≥ 0 and
        // makes the new path tight. Columns scanned at `min` change by 0.
        for &j in &order[..done] {
            v[j] += dist[j] - min;
        }
        let mut j = end;
        loop {
            let i = pred[j];
            col_row[j] = i;
            let prev = self.row_col[i];
            self.row_col[i] = j;
            if i == f {
                break;
            }
            j = prev;
        }
        Ok(())
    }
}

/// Rejects NaN and -inf anywhere, then finds the first row with no finite
/// entry (so bad input is reported the same way whatever the row order).
fn validate(cols: usize, cost: &[f64]) -> Result<(), AssignError> {
    let mut first_empty = None;
    for (i, row) in cost.chunks_exact(cols).enumerate() {
        let mut any_finite = false;
        let mut bad = false;
        for &c in row {
            bad |= c.is_nan() || c == f64::NEG_INFINITY;
            any_finite |= c < f64::INFINITY;
        }
        if bad {
            return Err(AssignError::BadCost);
        }
        if !any_finite && first_empty.is_none() {
            first_empty = Some(i);
        }
    }
    match first_empty {
        Some(i) => Err(AssignError::Infeasible(i)),
        None => Ok(()),
    }
}

/// Leave-alone costs are clamped to this magnitude (see
/// [`SparseAssigner::solve`]).
pub const ALONE_COST_LIMIT: f64 = 1e12;

/// A sparse assignment where every row and column may stay unassigned:
/// `pairs` lists the allowed (row, col, cost) entries; leaving row i
/// unassigned costs `row_alone[i]`, leaving column j unassigned costs
/// `col_alone[j]`. The problem is split into connected clusters of allowed
/// pairs and each cluster is solved exactly. Returns, per row, the column
/// it took, or `None`.
#[derive(Default, Debug)]
pub struct SparseAssigner {
    lap: LapSolver,
    /// Union-find over rows `0..n_r` then columns `n_r..n_r + n_c`.
    parent: Vec<u32>,
    size: Vec<u32>,
    /// Cluster id of each union-find root, or `u32::MAX`.
    cluster_of_root: Vec<u32>,
    /// Per cluster: offsets into `row_list`, `col_list`, `pair_list`.
    row_off: Vec<u32>,
    col_off: Vec<u32>,
    pair_off: Vec<u32>,
    /// Members of each cluster, in increasing index order.
    row_list: Vec<u32>,
    col_list: Vec<u32>,
    pair_list: Vec<u32>,
    /// Position of each row / column inside its cluster.
    local: Vec<u32>,
    /// Fill cursors for the counting sort.
    cursor: Vec<u32>,
    /// The cluster's dense problem (reduced costs) and its raw pair costs.
    dense: Vec<f64>,
    raw: Vec<f64>,
    cluster_choice: Vec<usize>,
    /// Cost paid by each row (its pair, or its leave-alone cost).
    row_cost: Vec<f64>,
    col_taken: Vec<bool>,
    /// Clamped leave-alone costs.
    row_alone: Vec<f64>,
    col_alone: Vec<f64>,
    /// Fast path: the state of each row and each column.
    row_star: Vec<Star>,
    col_star: Vec<Star>,
    /// Tests set this to send every problem through the general route.
    no_fast_path: bool,
    /// Whether the last problem was decided by the fast path (for tests).
    last_fast: bool,
}

/// One row's or column's part in the fast path: its clamped leave-alone
/// cost, how many valid pairs it has, as a star's centre its best pair so
/// far (key, the other end, raw cost; `other == u32::MAX` for none yet),
/// and the outcome: the cost a row pays, whether a column is taken.
#[derive(Clone, Copy, Debug)]
struct Star {
    alone: f64,
    degree: u32,
    other: u32,
    key: f64,
    w: f64,
    paid: f64,
    taken: bool,
}

impl Star {
    fn new(alone: f64) -> Star {
        Star { alone, degree: 0, other: u32::MAX, key: f64::INFINITY, w: 0.0, paid: alone, taken: false }
    }

    /// The cluster cases' rule: the lower key, on a tie the lower index.
    /// Keys are finite (a finite cost less a clamped leave-alone cost), so
    /// the first pair offered always wins over none.
    fn offer(&mut self, key: f64, other: u32, w: f64) {
        if key < self.key || (key == self.key && other < self.other) {
            self.key = key;
            self.other = other;
            self.w = w;
        }
    }
}

impl SparseAssigner {
    pub fn new() -> Self {
        SparseAssigner::default()
    }

    /// Solves the gated problem; see the module docs for the objective.
    /// Writes each row's column (or `None`) into `row_to_col`, resized to
    /// `row_alone.len()`, and returns the total cost.
    ///
    /// Pairs naming a row or column out of range, or whose cost is not
    /// finite, are skipped (`+inf` means "not allowed" anyway). A repeated
    /// (row, col) pair counts at its lowest cost. Leave-alone costs are
    /// expected finite; a non-finite one is a caller bug and is clamped to
    /// ±[`ALONE_COST_LIMIT`] (NaN to +) so a scan always completes.
    pub fn solve(&mut self, row_alone: &[f64], col_alone: &[f64], pairs: &[(u32, u32, f64)], row_to_col: &mut Vec<Option<u32>>) -> f64 {
        let n_r = row_alone.len();
        let n_c = col_alone.len();
        row_to_col.clear();
        row_to_col.resize(n_r, None);
        self.last_fast = !self.no_fast_path;
        if self.last_fast {
            if pairs.is_empty() {
                // Nothing to choose: the sums the end of this function
                // makes, in the same order.
                let rows_total: f64 = row_alone.iter().map(|&a| clamp_alone(a)).sum();
                let cols_total: f64 = col_alone.iter().map(|&a| clamp_alone(a)).sum();
                return rows_total + cols_total;
            }
            if let Some(total) = self.solve_stars(row_alone, col_alone, pairs, row_to_col) {
                return total;
            }
            self.last_fast = false;
        }

        self.row_alone.clear();
        self.row_alone.extend(row_alone.iter().map(|&a| clamp_alone(a)));
        self.col_alone.clear();
        self.col_alone.extend(col_alone.iter().map(|&a| clamp_alone(a)));
        self.row_cost.clear();
        self.row_cost.extend_from_slice(&self.row_alone);
        self.col_taken.clear();
        self.col_taken.resize(n_c, false);

        self.solve_clusters(pairs, row_to_col);

        // Summed in index order so the figure does not depend on the
        // order the clusters were found in.
        let rows_total: f64 = self.row_cost.iter().sum();
        let cols_total: f64 = self.col_alone.iter().zip(&self.col_taken).filter(|(_, t)| !**t).map(|(a, _)| *a).sum();
        rows_total + cols_total
    }

    /// The fast path (see the module docs): if every cluster of valid
    /// pairs is a star, decides each as [`SparseAssigner::solve_cluster`]
    /// would (the same keys, comparisons and tie-breaking), writes the
    /// choice and returns the total, summed as [`SparseAssigner::solve`]
    /// sums it; otherwise writes nothing to `row_to_col` and returns `None`.
    fn solve_stars(&mut self, row_alone: &[f64], col_alone: &[f64], pairs: &[(u32, u32, f64)], row_to_col: &mut [Option<u32>]) -> Option<f64> {
        let (n_r, n_c) = (row_alone.len(), col_alone.len());
        self.row_star.clear();
        self.row_star.extend(row_alone.iter().map(|&a| Star::new(clamp_alone(a))));
        self.col_star.clear();
        self.col_star.extend(col_alone.iter().map(|&a| Star::new(clamp_alone(a))));
        // Same filter as the general route's.
        let valid = |&(r, c, w): &(u32, u32, f64)| (r as usize) < n_r && (c as usize) < n_c && w.is_finite();
        for p in pairs.iter().filter(|p| valid(p)) {
            self.row_star[p.0 as usize].degree += 1;
            self.col_star[p.1 as usize].degree += 1;
        }
        // Each pair is offered to one end only, its star's centre.
        for &(r, c, w) in pairs.iter().filter(|p| valid(p)) {
            let (ri, ci) = (r as usize, c as usize);
            if self.col_star[ci].degree == 1 {
                // Centred on the row, or a lone pair: the general route's
                // one-row cluster.
                let key = w - self.col_star[ci].alone;
                self.row_star[ri].offer(key, c, w);
            } else if self.row_star[ri].degree == 1 {
                // Centred on the column, with two rows or more: its
                // one-column cluster.
                let key = w - self.row_star[ri].alone;
                self.col_star[ci].offer(key, r, w);
            } else {
                return None;
            }
        }
        for r in 0..n_r {
            let st = self.row_star[r];
            if st.other != u32::MAX && st.key < st.alone {
                row_to_col[r] = Some(st.other);
                self.row_star[r].paid = st.w;
                self.col_star[st.other as usize].taken = true;
            }
        }
        for c in 0..n_c {
            let st = self.col_star[c];
            if st.other != u32::MAX && st.key < st.alone {
                row_to_col[st.other as usize] = Some(c as u32);
                self.row_star[st.other as usize].paid = st.w;
                self.col_star[c].taken = true;
            }
        }
        let rows_total: f64 = self.row_star.iter().map(|s| s.paid).sum();
        let cols_total: f64 = self.col_star.iter().filter(|s| !s.taken).map(|s| s.alone).sum();
        Some(rows_total + cols_total)
    }

    /// The general route: clusters by union-find, each solved exactly.
    fn solve_clusters(&mut self, pairs: &[(u32, u32, f64)], row_to_col: &mut [Option<u32>]) {
        let (n_r, n_c) = (self.row_alone.len(), self.col_alone.len());
        let n = n_r + n_c;
        let valid = |&(r, c, w): &(u32, u32, f64)| (r as usize) < n_r && (c as usize) < n_c && w.is_finite();

        // Union the allowed pairs into clusters.
        self.parent.clear();
        self.parent.extend(0..n as u32);
        self.size.clear();
        self.size.resize(n, 1);
        for p in pairs.iter().filter(|p| valid(p)) {
            union(&mut self.parent, &mut self.size, p.0, n_r as u32 + p.1);
        }
        for x in 0..n as u32 {
            find(&mut self.parent, x);
        }

        // Number clusters by their lowest row; only nodes with a pair get
        // one (a node alone is its own root with size 1).
        self.cluster_of_root.clear();
        self.cluster_of_root.resize(n, u32::MAX);
        let mut clusters = 0u32;
        for r in 0..n_r {
            let root = self.parent[r] as usize;
            if self.size[root] > 1 && self.cluster_of_root[root] == u32::MAX {
                self.cluster_of_root[root] = clusters;
                clusters += 1;
            }
        }
        let k = clusters as usize;

        // Counting sort of rows, columns and pairs by cluster.
        for off in [&mut self.row_off, &mut self.col_off, &mut self.pair_off] {
            off.clear();
            off.resize(k + 1, 0);
        }
        for x in 0..n {
            let id = self.cluster_of_root[self.parent[x] as usize];
            if id != u32::MAX {
                if x < n_r {
                    self.row_off[id as usize + 1] += 1;
                } else {
                    self.col_off[id as usize + 1] += 1;
                }
            }
        }
        for p in pairs.iter().filter(|p| valid(p)) {
            let id = self.cluster_of_root[self.parent[p.0 as usize] as usize];
            self.pair_off[id as usize + 1] += 1;
        }
        for off in [&mut self.row_off, &mut self.col_off, &mut self.pair_off] {
            for c in 1..=k {
                off[c] += off[c - 1];
            }
        }
        self.row_list.clear();
        self.row_list.resize(self.row_off[k] as usize, 0);
        self.col_list.clear();
        self.col_list.resize(self.col_off[k] as usize, 0);
        self.pair_list.clear();
        self.pair_list.resize(self.pair_off[k] as usize, 0);
        self.local.clear();
        self.local.resize(n, 0);

        self.cursor.clear();
        self.cursor.extend_from_slice(&self.row_off[..k]);
        for x in 0..n_r {
            let id = self.cluster_of_root[self.parent[x] as usize];
            if id != u32::MAX {
                let at = &mut self.cursor[id as usize];
                self.local[x] = *at - self.row_off[id as usize];
                self.row_list[*at as usize] = x as u32;
                *at += 1;
            }
        }
        self.cursor.clear();
        self.cursor.extend_from_slice(&self.col_off[..k]);
        for x in n_r..n {
            let id = self.cluster_of_root[self.parent[x] as usize];
            if id != u32::MAX {
                let at = &mut self.cursor[id as usize];
                self.local[x] = *at - self.col_off[id as usize];
                self.col_list[*at as usize] = (x - n_r) as u32;
                *at += 1;
            }
        }
        self.cursor.clear();
        self.cursor.extend_from_slice(&self.pair_off[..k]);
        for (pi, p) in pairs.iter().enumerate() {
            if valid(p) {
                let id = self.cluster_of_root[self.parent[p.0 as usize] as usize];
                let at = &mut self.cursor[id as usize];
                self.pair_list[*at as usize] = pi as u32;
                *at += 1;
            }
        }

        for c in 0..k {
            self.solve_cluster(c, pairs, row_to_col);
        }
    }

    fn solve_cluster(&mut self, c: usize, pairs: &[(u32, u32, f64)], row_to_col: &mut [Option<u32>]) {
        let n_r = self.row_alone.len();
        let rows = &self.row_list[self.row_off[c] as usize..self.row_off[c + 1] as usize];
        let cols = &self.col_list[self.col_off[c] as usize..self.col_off[c + 1] as usize];
        let cluster_pairs = &self.pair_list[self.pair_off[c] as usize..self.pair_off[c + 1] as usize];
        let (nr, nc) = (rows.len(), cols.len());

        if nr == 1 {
            // One row: its best saving against staying alone, if any.
            let r = rows[0] as usize;
            let mut best: Option<(f64, u32, f64)> = None;
            for &pi in cluster_pairs {
                let (_, col, w) = pairs[pi as usize];
                let key = w - self.col_alone[col as usize];
                let better = match best {
                    None => true,
                    Some((bk, bc, _)) => key < bk || (key == bk && col < bc),
                };
                if better {
                    best = Some((key, col, w));
                }
            }
            if let Some((key, col, w)) = best
                && key < self.row_alone[r]
            {
                self.take(r, col as usize, w, row_to_col);
            }
            return;
        }
        if nc == 1 {
            // One column: the row that saves most by taking it, if any.
            let col = cols[0] as usize;
            let mut best: Option<(f64, u32, f64)> = None;
            for &pi in cluster_pairs {
                let (row, _, w) = pairs[pi as usize];
                let key = w - self.row_alone[row as usize];
                let better = match best {
                    None => true,
                    Some((bk, br, _)) => key < bk || (key == bk && row < br),
                };
                if better {
                    best = Some((key, row, w));
                }
            }
            if let Some((key, row, w)) = best
                && key < self.col_alone[col]
            {
                self.take(row as usize, col, w, row_to_col);
            }
            return;
        }

        // Dense problem: columns 0..nc are the cluster's columns, column
        // nc + i is row i's private "stay alone" column.
        let width = nc + nr;
        self.dense.clear();
        self.dense.resize(nr * width, f64::INFINITY);
        self.raw.clear();
        self.raw.resize(nr * nc, f64::INFINITY);
        for &pi in cluster_pairs {
            let (row, col, w) = pairs[pi as usize];
            let li = self.local[row as usize] as usize;
            let lj = self.local[n_r + col as usize] as usize;
            let raw = &mut self.raw[li * nc + lj];
            if w < *raw {
                *raw = w;
                self.dense[li * width + lj] = w - self.col_alone[col as usize];
            }
        }
        for (li, &row) in rows.iter().enumerate() {
            self.dense[li * width + nc + li] = self.row_alone[row as usize];
        }
        let mut choice = std::mem::take(&mut self.cluster_choice);
        // Always feasible with finite entries; an error means a reduced
        // cost overflowed to -inf. Then the cluster stays unassigned rather
        // than stall the scan.
        if self.lap.solve(nr, width, &self.dense, &mut choice).is_ok() {
            for (li, &lj) in choice.iter().enumerate() {
                if lj < nc {
                    let row = self.row_list[self.row_off[c] as usize + li] as usize;
                    let col = self.col_list[self.col_off[c] as usize + lj] as usize;
                    let w = self.raw[li * nc + lj];
                    self.take(row, col, w, row_to_col);
                }
            }
        }
        self.cluster_choice = choice;
    }

    fn take(&mut self, row: usize, col: usize, w: f64, row_to_col: &mut [Option<u32>]) {
        row_to_col[row] = Some(col as u32);
        self.row_cost[row] = w;
        self.col_taken[col] = true;
    }
}

fn clamp_alone(a: f64) -> f64 {
    if a.is_nan() { ALONE_COST_LIMIT } else { a.clamp(-ALONE_COST_LIMIT, ALONE_COST_LIMIT) }
}

fn find(parent: &mut [u32], mut x: u32) -> u32 {
    let mut root = x;
    while parent[root as usize] != root {
        root = parent[root as usize];
    }
    while parent[x as usize] != root {
        let next = parent[x as usize];
        parent[x as usize] = root;
        x = next;
    }
    root
}

fn union(parent: &mut [u32], size: &mut [u32], a: u32, b: u32) {
    let (ra, rb) = (find(parent, a), find(parent, b));
    if ra == rb {
        return;
    }
    let (big, small) = if size[ra as usize] >= size[rb as usize] { (ra, rb) } else { (rb, ra) };
    parent[small as usize] = big;
    size[big as usize] += size[small as usize];
}

#[cfg(test)]
mod tests {
    //! Checks against brute force over the definitions: every full
    //! assignment of a small dense problem, every injective partial
    //! assignment of a small sparse one.
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    const INF: f64 = f64::INFINITY;

    /// Minimum over every injective map rows → cols (brute force over the
    /// definition of the rectangular assignment problem); `None` if every
    /// such map uses a forbidden pair.
    fn brute_dense(rows: usize, cols: usize, cost: &[f64]) -> Option<f64> {
        fn go(i: usize, rows: usize, cols: usize, cost: &[f64], used: &mut [bool], acc: f64, best: &mut f64) {
            if i == rows {
                if acc < *best {
                    *best = acc;
                }
                return;
            }
            for j in 0..cols {
                let c = cost[i * cols + j];
                if !used[j] && c < INF {
                    used[j] = true;
                    go(i + 1, rows, cols, cost, used, acc + c, best);
                    used[j] = false;
                }
            }
        }
        let mut best = INF;
        go(0, rows, cols, cost, &mut vec![false; cols], 0.0, &mut best);
        (best < INF).then_some(best)
    }

    /// Minimum over every injective partial assignment using allowed pairs
    /// (brute force over the definition of the sparse objective).
    fn brute_sparse(row_alone: &[f64], col_alone: &[f64], pairs: &[(u32, u32, f64)]) -> f64 {
        fn go(i: usize, ra: &[f64], ca: &[f64], pairs: &[(u32, u32, f64)], used: &mut [bool], acc: f64, best: &mut f64) {
            if i == ra.len() {
                let cols: f64 = ca.iter().zip(used.iter()).filter(|(_, u)| !**u).map(|(a, _)| *a).sum();
                if acc + cols < *best {
                    *best = acc + cols;
                }
                return;
            }
            go(i + 1, ra, ca, pairs, used, acc + ra[i], best);
            for &(r, c, w) in pairs {
                if r as usize == i && !used[c as usize] && w.is_finite() {
                    used[c as usize] = true;
                    go(i + 1, ra, ca, pairs, used, acc + w, best);
                    used[c as usize] = false;
                }
            }
        }
        let mut best = INF;
        go(0, row_alone, col_alone, pairs, &mut vec![false; col_alone.len()], 0.0, &mut best);
        best
    }

    fn random_dense(rng: &mut ChaCha8Rng, rows: usize, cols: usize, p_forbid: f64, integer: bool) -> Vec<f64> {
        (0..rows * cols)
            .map(|_| {
                if rng.random::<f64>() < p_forbid {
                    INF
                } else if integer {
                    // Small integers make many exact ties.
                    rng.random_range(0..4) as f64
                } else {
                    rng.random_range(-5.0..10.0)
                }
            })
            .collect()
    }

    /// The returned assignment is injective, uses allowed pairs only, and
    /// its cost is the returned total.
    fn check_dense_solution(rows: usize, cols: usize, cost: &[f64], r2c: &[usize], total: f64) {
        assert_eq!(r2c.len(), rows);
        let mut used = vec![false; cols];
        let mut sum = 0.0;
        for (i, &j) in r2c.iter().enumerate() {
            assert!(j < cols && !used[j], "column {j} reused or out of range");
            used[j] = true;
            assert!(cost[i * cols + j] < INF, "forbidden pair chosen");
            sum += cost[i * cols + j];
        }
        assert!((sum - total).abs() <= 1e-12 * (1.0 + sum.abs()));
    }

    // Brute force over every full assignment of random problems up to 6×7,
    // with and without forbidden pairs and with many ties.
    #[test]
    fn dense_matches_brute_force() {
        let mut rng = ChaCha8Rng::seed_from_u64(0x5e44);
        let mut with_reduction = LapSolver::new();
        let mut search_only = LapSolver { skip_reduction: true, ..LapSolver::default() };
        let mut r2c = Vec::new();
        let (mut feasible, mut infeasible) = (0, 0);
        for trial in 0..6000 {
            let rows = rng.random_range(1..=6);
            let cols = rng.random_range(rows..=7);
            let p_forbid = [0.0, 0.2, 0.5][trial / 2 % 3];
            let cost = random_dense(&mut rng, rows, cols, p_forbid, trial / 2 % 2 == 1);
            let solver = if trial % 2 == 0 { &mut with_reduction } else { &mut search_only };
            match (brute_dense(rows, cols, &cost), solver.solve(rows, cols, &cost, &mut r2c)) {
                (Some(best), Ok(total)) => {
                    assert!((best - total).abs() <= 1e-9, "trial {trial}: brute {best}, solver {total}");
                    check_dense_solution(rows, cols, &cost, &r2c, total);
                    feasible += 1;
                }
                (None, Err(AssignError::Infeasible(row))) => {
                    assert!(row < rows);
                    assert!(r2c.is_empty());
                    infeasible += 1;
                }
                (b, s) => panic!("trial {trial}: brute {b:?}, solver {s:?}"),
            }
        }
        // Both branches must have been exercised for the check to mean much.
        assert!(feasible > 2000 && infeasible > 200, "{feasible} / {infeasible}");
    }

    // Brute force over every injective partial assignment (the sparse
    // objective's definition), with pair order shuffled: the result must
    // not depend on it.
    #[test]
    fn sparse_matches_brute_force_and_ignores_pair_order() {
        let mut rng = ChaCha8Rng::seed_from_u64(0xa55e);
        let mut sa = SparseAssigner::new();
        let mut sb = SparseAssigner::new();
        let (mut r2c, mut r2c_b) = (Vec::new(), Vec::new());
        for trial in 0..3000 {
            let nr = rng.random_range(0..=6);
            let nc = rng.random_range(0..=7);
            let density = [0.15, 0.4, 0.8][trial % 3];
            let integer = trial % 2 == 1;
            let draw = |rng: &mut ChaCha8Rng| if integer { rng.random_range(-2..4) as f64 } else { rng.random_range(-3.0..6.0) };
            let row_alone: Vec<f64> = (0..nr).map(|_| draw(&mut rng)).collect();
            let col_alone: Vec<f64> = (0..nc).map(|_| draw(&mut rng)).collect();
            let mut pairs = Vec::new();
            for r in 0..nr as u32 {
                for c in 0..nc as u32 {
                    if rng.random::<f64>() < density {
                        pairs.push((r, c, draw(&mut rng)));
                        if rng.random::<f64>() < 0.1 {
                            // A repeated pair: the cheaper entry counts.
                            pairs.push((r, c, draw(&mut rng)));
                        }
                    }
                }
            }
            let best = brute_sparse(&row_alone, &col_alone, &pairs);
            let total = sa.solve(&row_alone, &col_alone, &pairs, &mut r2c);
            assert!((best - total).abs() <= 1e-9, "trial {trial}: brute {best}, solver {total}");

            // The returned choice is injective, allowed, and costs `total`.
            assert_eq!(r2c.len(), nr);
            let mut used = vec![false; nc];
            let mut sum = 0.0;
            for (r, choice) in r2c.iter().enumerate() {
                match *choice {
                    None => sum += row_alone[r],
                    Some(c) => {
                        assert!(!used[c as usize]);
                        used[c as usize] = true;
                        let w = pairs.iter().filter(|p| p.0 as usize == r && p.1 == c).map(|p| p.2).fold(INF, f64::min);
                        assert!(w < INF, "pair not allowed");
                        sum += w;
                    }
                }
            }
            sum += col_alone.iter().zip(&used).filter(|(_, u)| !**u).map(|(a, _)| a).sum::<f64>();
            assert!((sum - total).abs() <= 1e-12 * (1.0 + sum.abs()));

            // Reverse then rotate the pairs: same choice, same total bits.
            pairs.reverse();
            let rot = if pairs.is_empty() { 0 } else { trial % pairs.len() };
            pairs.rotate_left(rot);
            let total_b = sb.solve(&row_alone, &col_alone, &pairs, &mut r2c_b);
            assert_eq!(r2c, r2c_b, "trial {trial}");
            assert_eq!(total.to_bits(), total_b.to_bits());
        }
    }

    // Larger clusters than brute force can reach: the sparse front end must
    // agree with the dense solver run on the whole problem in the
    // augmented form (a different route to the same optimum).
    #[test]
    fn sparse_agrees_with_one_dense_problem() {
        let mut rng = ChaCha8Rng::seed_from_u64(0xc105);
        let mut sa = SparseAssigner::new();
        let mut lap = LapSolver::new();
        let (mut r2c, mut dense_r2c) = (Vec::new(), Vec::new());
        for _ in 0..40 {
            let nr = rng.random_range(10..60);
            let nc = rng.random_range(10..60);
            let row_alone: Vec<f64> = (0..nr).map(|_| rng.random_range(0.0..3.0)).collect();
            let col_alone: Vec<f64> = (0..nc).map(|_| rng.random_range(0.0..3.0)).collect();
            let mut pairs = Vec::new();
            for r in 0..nr as u32 {
                for c in 0..nc as u32 {
                    if rng.random::<f64>() < 0.08 {
                        pairs.push((r, c, rng.random_range(-1.0..4.0)));
                    }
                }
            }
            let total = sa.solve(&row_alone, &col_alone, &pairs, &mut r2c);
            // Square augmented form (nr + nc) × (nc + nr): [[C, diag(row
            // alone)], [diag(col alone), 0]] with inf off the diagonals.
            let n = nr + nc;
            let mut m = vec![INF; n * n];
            for &(r, c, w) in &pairs {
                m[r as usize * n + c as usize] = w;
            }
            for r in 0..nr {
                m[r * n + nc + r] = row_alone[r];
            }
            for c in 0..nc {
                m[(nr + c) * n + c] = col_alone[c];
                for r in 0..nr {
                    m[(nr + c) * n + nc + r] = 0.0;
                }
            }
            let dense_total = lap.solve(n, n, &m, &mut dense_r2c).unwrap();
            assert!((total - dense_total).abs() <= 1e-9, "{total} vs {dense_total}");
        }
    }

    /// A random problem whose clusters are mostly stars (lone pairs, one
    /// row with several columns, one column with several rows), then at
    /// times an extra pair (which may join two stars into a cluster the
    /// fast path must hand back), a repeated pair, or an unusable one.
    /// Integer costs and leave-alone costs make exact ties and pairs
    /// exactly as cheap as leaving both alone.
    fn random_star_problem(rng: &mut ChaCha8Rng, integer: bool) -> (Vec<f64>, Vec<f64>, Vec<(u32, u32, f64)>) {
        let nr = rng.random_range(0..=6usize);
        let nc = rng.random_range(0..=6usize);
        let draw = |rng: &mut ChaCha8Rng| if integer { rng.random_range(-2..3) as f64 } else { rng.random_range(-3.0..4.0) };
        let row_alone: Vec<f64> = (0..nr).map(|_| draw(rng)).collect();
        let col_alone: Vec<f64> = (0..nc).map(|_| draw(rng)).collect();
        let mut rows: Vec<u32> = (0..nr as u32).collect();
        let mut cols: Vec<u32> = (0..nc as u32).collect();
        let mut pairs = Vec::new();
        while !rows.is_empty() && !cols.is_empty() {
            match rng.random_range(0..4) {
                0 => {
                    // A node left alone.
                    if rng.random_bool(0.5) {
                        rows.swap_remove(rng.random_range(0..rows.len()));
                    } else {
                        cols.swap_remove(rng.random_range(0..cols.len()));
                    }
                }
                1 => {
                    let r = rows.swap_remove(rng.random_range(0..rows.len()));
                    for _ in 0..rng.random_range(1..=cols.len().min(3)) {
                        let c = cols.swap_remove(rng.random_range(0..cols.len()));
                        pairs.push((r, c, draw(rng)));
                    }
                }
                2 => {
                    let c = cols.swap_remove(rng.random_range(0..cols.len()));
                    for _ in 0..rng.random_range(1..=rows.len().min(3)) {
                        let r = rows.swap_remove(rng.random_range(0..rows.len()));
                        pairs.push((r, c, draw(rng)));
                    }
                }
                _ => {
                    let r = rows.swap_remove(rng.random_range(0..rows.len()));
                    let c = cols.swap_remove(rng.random_range(0..cols.len()));
                    pairs.push((r, c, draw(rng)));
                }
            }
        }
        if nr > 0 && nc > 0 && rng.random_bool(0.3) {
            let (r, c) = (rng.random_range(0..nr as u32), rng.random_range(0..nc as u32));
            pairs.push((r, c, draw(rng)));
        }
        if !pairs.is_empty() && rng.random_bool(0.1) {
            let p = pairs[rng.random_range(0..pairs.len())];
            pairs.push((p.0, p.1, draw(rng)));
        }
        if rng.random_bool(0.1) {
            // Skipped by both routes: out of range, or not finite.
            let bad = [(nr as u32, 0, 1.0), (0, nc as u32, -1.0), (0, 0, f64::NAN), (0, 0, INF)];
            pairs.push(bad[rng.random_range(0..bad.len())]);
        }
        let rot = if pairs.is_empty() { 0 } else { rng.random_range(0..pairs.len()) };
        pairs.rotate_left(rot);
        (row_alone, col_alone, pairs)
    }

    // The fast path against the general route (the same choice, the same
    // total to the bit, ties included) and against brute force over the
    // sparse objective's definition, on problems it takes and on problems
    // it must hand back.
    #[test]
    fn fast_path_matches_general_route_and_brute_force() {
        let mut rng = ChaCha8Rng::seed_from_u64(0x57a2);
        let mut fast = SparseAssigner::new();
        let mut general = SparseAssigner { no_fast_path: true, ..SparseAssigner::default() };
        let (mut r2c_f, mut r2c_g) = (Vec::new(), Vec::new());
        let (mut taken, mut handed_back, mut with_pairs_taken, mut tie_cases) = (0, 0, 0, 0);
        for trial in 0..20_000 {
            let (row_alone, col_alone, pairs) = random_star_problem(&mut rng, trial % 2 == 0);
            let total_f = fast.solve(&row_alone, &col_alone, &pairs, &mut r2c_f);
            let total_g = general.solve(&row_alone, &col_alone, &pairs, &mut r2c_g);
            assert!(!general.last_fast);
            assert_eq!(r2c_f, r2c_g, "trial {trial}: {row_alone:?} {col_alone:?} {pairs:?}");
            assert_eq!(total_f.to_bits(), total_g.to_bits(), "trial {trial}");
            // The brute force reads only pairs inside the problem (the
            // solver skips the others, as its docs say).
            let inside: Vec<_> = pairs.iter().copied().filter(|p| (p.0 as usize) < row_alone.len() && (p.1 as usize) < col_alone.len()).collect();
            let best = brute_sparse(&row_alone, &col_alone, &inside);
            assert!((best - total_f).abs() <= 1e-9, "trial {trial}: brute {best}, solver {total_f}");
            if fast.last_fast {
                taken += 1;
                with_pairs_taken += usize::from(r2c_f.iter().any(Option::is_some));
                // A pair exactly as cheap as leaving both ends alone.
                tie_cases += usize::from(pairs.iter().any(|&(r, c, w)| {
                    (r as usize) < row_alone.len() && (c as usize) < col_alone.len() && w - col_alone[c as usize] == row_alone[r as usize]
                }));
            } else {
                handed_back += 1;
            }
        }
        assert!(taken > 10_000 && handed_back > 2000 && with_pairs_taken > 5000 && tie_cases > 1000, "{taken} taken ({with_pairs_taken} with a pair, {tie_cases} with a tie), {handed_back} handed back");
    }

    // The rule of the cluster cases, worked by hand: a pair is taken only
    // if strictly cheaper than leaving both alone; equal keys go to the
    // lower index.
    #[test]
    fn fast_path_rule_and_ties_by_hand() {
        let mut s = SparseAssigner::new();
        let mut r2c = Vec::new();
        // 3 − 2 = 1, not below row 0's 1: left alone. Total 1 + 2.
        assert_eq!(s.solve(&[1.0], &[2.0], &[(0, 0, 3.0)], &mut r2c), 3.0);
        assert!(s.last_fast);
        assert_eq!(r2c, vec![None]);
        // One row, two columns at equal keys (4 − 3 = 2 − 1 = 1 < 2):
        // column 0, whatever the pair order.
        for pairs in [[(0, 1, 2.0), (0, 0, 4.0)], [(0, 0, 4.0), (0, 1, 2.0)]] {
            assert_eq!(s.solve(&[2.0], &[3.0, 1.0], &pairs, &mut r2c), 5.0);
            assert!(s.last_fast);
            assert_eq!(r2c, vec![Some(0)]);
        }
        // One column, two rows at equal keys (0 − 1 = 1 − 2 = −1 < 0):
        // row 0; row 1 pays its own 2.
        assert_eq!(s.solve(&[1.0, 2.0], &[0.0], &[(1, 0, 1.0), (0, 0, 0.0)], &mut r2c), 2.0);
        assert!(s.last_fast);
        assert_eq!(r2c, vec![Some(0), None]);
        // A path of three pairs is no star: handed back, and solved.
        assert_eq!(s.solve(&[0.0, 0.0], &[0.0, 0.0], &[(0, 0, -1.0), (1, 0, -1.0), (1, 1, -1.0)], &mut r2c), -2.0);
        assert!(!s.last_fast);
        assert_eq!(r2c, vec![Some(0), Some(1)]);
        // A repeated pair too.
        assert_eq!(s.solve(&[0.0], &[0.0], &[(0, 0, -1.0), (0, 0, -2.0)], &mut r2c), -2.0);
        assert!(!s.last_fast);
    }

    // Bad input reported as typed errors (the contract in the docs).
    #[test]
    fn dense_errors() {
        let mut s = LapSolver::new();
        let mut r2c = vec![7];
        assert_eq!(s.solve(3, 2, &[0.0; 6], &mut r2c), Err(AssignError::Shape { rows: 3, cols: 2 }));
        assert_eq!(s.solve(2, 2, &[0.0; 3], &mut r2c), Err(AssignError::CostLength { expected: 4, got: 3 }));
        assert_eq!(s.solve(2, 2, &[0.0, f64::NAN, 1.0, 2.0], &mut r2c), Err(AssignError::BadCost));
        assert_eq!(s.solve(2, 2, &[0.0, 1.0, f64::NEG_INFINITY, 2.0], &mut r2c), Err(AssignError::BadCost));
        // BadCost wins over an all-forbidden row found earlier.
        assert_eq!(s.solve(2, 2, &[INF, INF, f64::NAN, 2.0], &mut r2c), Err(AssignError::BadCost));
        // Row 1 has no allowed column at all.
        assert_eq!(s.solve(3, 3, &[1.0, 2.0, 3.0, INF, INF, INF, 1.0, 1.0, 1.0], &mut r2c), Err(AssignError::Infeasible(1)));
        // Hall's condition fails: rows 0..3 share two allowed columns.
        let cost = [1.0, 2.0, INF, INF, 3.0, 1.0, INF, INF, 2.0, 2.0, INF, INF];
        assert!(matches!(s.solve(3, 4, &cost, &mut r2c), Err(AssignError::Infeasible(r)) if r < 3));
        assert!(r2c.is_empty());
        // Empty problem.
        assert_eq!(s.solve(0, 5, &[], &mut r2c), Ok(0.0));
        // The solver still works after errors.
        assert_eq!(s.solve(2, 2, &[4.0, 1.0, 2.0, 8.0], &mut r2c), Ok(3.0));
        assert_eq!(r2c, vec![1, 0]);
    }

    // Skipped and clamped input of the sparse front end, per its docs.
    #[test]
    fn sparse_bad_input_is_contained() {
        let mut s = SparseAssigner::new();
        let mut r2c = Vec::new();
        let pairs = [(0, 0, 1.0), (5, 0, -100.0), (0, 9, -100.0), (1, 0, f64::NAN), (1, 1, INF), (1, 1, f64::NEG_INFINITY)];
        let total = s.solve(&[2.0, 3.0], &[2.0, 1.0], &pairs, &mut r2c);
        // Only (0, 0, 1.0) is usable: 1 + row 1 alone 3 + col 1 alone 1.
        assert_eq!(r2c, vec![Some(0), None]);
        assert_eq!(total, 5.0);
        let total = s.solve(&[f64::NAN], &[], &[], &mut r2c);
        assert_eq!((total, r2c.as_slice()), (ALONE_COST_LIMIT, &[None][..]));
        assert_eq!(s.solve(&[], &[], &[], &mut r2c), 0.0);
        assert!(r2c.is_empty());
    }

    // A solver reused across shapes gives what a fresh one gives.
    #[test]
    fn reuse_across_shapes() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let mut warm = LapSolver::new();
        let (mut a, mut b) = (Vec::new(), Vec::new());
        for _ in 0..200 {
            let rows = rng.random_range(1..40);
            let cols = rng.random_range(rows..50);
            let cost = random_dense(&mut rng, rows, cols, 0.1, false);
            let x = warm.solve(rows, cols, &cost, &mut a);
            let y = LapSolver::new().solve(rows, cols, &cost, &mut b);
            assert_eq!(x, y);
            assert_eq!(a, b);
        }
    }
}
