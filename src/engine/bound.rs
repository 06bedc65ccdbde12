//! Bounds on the work of one heavy batch that leave its result alone.
//!
//! [`prune_pairs`] trims the GNN assignment problem of a batch in which
//! many plots fall in few tracks' gates (heavy clutter): with `T` tracks
//! holding gated pairs, each track keeps only its `T` cheapest pairs (and
//! any tied with the `T`-th). The optimum is unchanged: in an optimal
//! assignment, a track holding a plot outside its `T` cheapest leaves one
//! of those free (the other `T - 1` tracks hold at most `T - 1` plots), and
//! moving it there costs no more, since a plot or track left alone costs
//! nothing in the engine's problem. So some optimal assignment uses kept
//! pairs only, and the solver sees at most about `T²` pairs however many
//! plots the batch holds. Pairs keep their order, and a batch with no
//! track over `T` pairs (every batch of a normal scene) is left as it is.

/// Scratch space of [`prune_pairs`], reused from batch to batch.
#[derive(Default)]
pub(super) struct PruneScratch {
    per_col: Vec<u32>,
    start: Vec<u32>,
    costs: Vec<f64>,
    limit: Vec<f64>,
}

/// Keeps, for each column (track), its `T` cheapest `(row, col, cost)`
/// pairs and those tied with the `T`-th, `T` the number of columns with a
/// pair; see the module docs. Costs must not be NaN.
pub(super) fn prune_pairs(pairs: &mut Vec<(u32, u32, f64)>, n_cols: usize, s: &mut PruneScratch) {
    // No pair or one (most batches): no column can hold more than T.
    if pairs.len() <= 1 {
        return;
    }
    s.per_col.clear();
    s.per_col.resize(n_cols, 0);
    for p in pairs.iter() {
        s.per_col[p.1 as usize] += 1;
    }
    let t = s.per_col.iter().filter(|&&n| n > 0).count() as u32;
    if s.per_col.iter().all(|&n| n <= t) {
        return;
    }
    // Costs bucketed by column (a counting sort), then each heavy column's
    // T-th cheapest by selection: linear in the pairs.
    s.start.clear();
    let mut at = 0u32;
    for &n in &s.per_col {
        s.start.push(at);
        at += n;
    }
    s.costs.clear();
    s.costs.resize(pairs.len(), 0.0);
    let mut fill = std::mem::take(&mut s.start);
    for p in pairs.iter() {
        let slot = &mut fill[p.1 as usize];
        s.costs[*slot as usize] = p.2;
        *slot += 1;
    }
    s.limit.clear();
    s.limit.resize(n_cols, f64::INFINITY);
    for ((&n, &end), limit) in s.per_col.iter().zip(&fill).zip(s.limit.iter_mut()) {
        if n <= t {
            continue;
        }
        let col = &mut s.costs[(end - n) as usize..end as usize];
        let (_, nth, _) = col.select_nth_unstable_by((t - 1) as usize, f64::total_cmp);
        *limit = *nth;
    }
    s.start = fill;
    let limit = &s.limit;
    pairs.retain(|p| p.2 <= limit[p.1 as usize]);
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    /// The least total cost over every assignment of tracks to distinct
    /// plots through the given pairs (a track may take none; nothing left
    /// alone costs anything), by brute force over the definition.
    fn brute_optimum(pairs: &[(u32, u32, f64)], n_cols: usize) -> f64 {
        fn go(col: usize, n_cols: usize, pairs: &[(u32, u32, f64)], used: &mut Vec<u32>) -> f64 {
            if col == n_cols {
                return 0.0;
            }
            let mut best = go(col + 1, n_cols, pairs, used);
            for p in pairs.iter().filter(|p| p.1 as usize == col) {
                if used.contains(&p.0) {
                    continue;
                }
                used.push(p.0);
                best = best.min(p.2 + go(col + 1, n_cols, pairs, used));
                used.pop();
            }
            best
        }
        go(0, n_cols, pairs, &mut Vec::new())
    }

    #[test]
    fn pruning_keeps_the_optimum() {
        // Random dense gates: 1–4 tracks, 1–10 plots, costs of both signs
        // (a pair worse than leaving both alone is never taken), some tied.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(41);
        let mut scratch = PruneScratch::default();
        let (mut pruned_cases, mut removed) = (0, 0);
        for _ in 0..3000 {
            let n_cols = rng.random_range(1..=4usize);
            let n_rows = rng.random_range(1..=10u32);
            let mut pairs = Vec::new();
            for r in 0..n_rows {
                for c in 0..n_cols as u32 {
                    if rng.random_bool(0.7) {
                        let cost = if rng.random_bool(0.1) { -1.0 } else { rng.random_range(-8.0..2.0) };
                        pairs.push((r, c, cost));
                    }
                }
            }
            let want = brute_optimum(&pairs, n_cols);
            let before = pairs.clone();
            prune_pairs(&mut pairs, n_cols, &mut scratch);
            let got = brute_optimum(&pairs, n_cols);
            assert!((got - want).abs() < 1e-12, "optimum moved: {want} → {got}");
            // Order kept, only removals; each track within its bound
            // unless tied.
            assert!(pairs.iter().all(|p| before.contains(p)));
            let t = (0..n_cols as u32).filter(|c| before.iter().any(|p| p.1 == *c)).count();
            for c in 0..n_cols as u32 {
                let kept: Vec<f64> = pairs.iter().filter(|p| p.1 == c).map(|p| p.2).collect();
                if kept.len() > t {
                    let mut k = kept.clone();
                    k.sort_by(f64::total_cmp);
                    assert_eq!(k[t - 1], k[k.len() - 1], "more than T kept without a tie");
                }
            }
            if pairs.len() < before.len() {
                pruned_cases += 1;
                removed += before.len() - pairs.len();
            }
        }
        assert!(pruned_cases > 500 && removed > 1000, "{pruned_cases} cases pruned, {removed} pairs");
    }

    #[test]
    fn normal_batches_are_untouched() {
        let mut pairs = vec![(0, 0, -3.0), (1, 0, -2.0), (1, 1, -4.0), (2, 1, 1.0)];
        let before = pairs.clone();
        prune_pairs(&mut pairs, 3, &mut PruneScratch::default());
        assert_eq!(pairs, before);
    }
}
