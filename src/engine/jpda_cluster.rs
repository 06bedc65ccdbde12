//! Marginal association probabilities of one cluster given as a sparse
//! list of gated (track, plot) pairs, with scratch space reused from
//! cluster to cluster so that the engine's hot path does not allocate.
//!
//! The model and the weights are those of [`super::jpda`]: track i takes
//! no plot with weight `w0[i]` (1 − Pd·Pg) and plot j with weight `w_ij`
//! (Pd · N(z_j; ẑ_i, S_i) / λ); a joint event's probability is
//! proportional to the product of its weights.
//!
//! - [`Variant::Jpda`]: exact marginals over every feasible joint event
//!   (Bar-Shalom & Fortmann 1988, §9.3).
//! - [`Variant::JpdaStar`]: the JPDA* pruning of Blom & Bloem (2000),
//!   "Probabilistic data association avoiding track coalescence", IEEE
//!   T-AC 45(2): joint events that assign the same set of plots to the
//!   same set of tracks, differing only in which of those tracks took
//!   which plot, form one group, and only the most probable event of each
//!   group is kept before normalising. Two tracks sharing two plots then
//!   no longer average over the swap, which is what pulls the estimates of
//!   two close vessels together (coalescence). Pruning needs the plot set
//!   as a key, so it applies to clusters of up to 128 plots; larger
//!   clusters fall back to plain JPDA (counted in [`Outcome::unpruned`]).
//! - Beyond the event bound Π(1 + deg_i) > `max_events`, loopy belief
//!   propagation (Williams & Lau 2014, the equations of
//!   [`super::jpda::belief_propagation`]) over the edges only, so its cost
//!   is O(iterations × edges). Belief propagation approximates the plain
//!   JPDA marginals; no pruning applies there.
//!
//! Input contract: edges sorted by track, every track and plot index in
//! range, weights positive and finite, `w0` positive. Output: `beta0[i]`
//! and `beta[e]` (per edge, same order) with β₀ᵢ + Σ_e∈i β_e = 1.

use super::jpda::Method;

/// A gated pair with its weight.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Edge {
    pub track: u32,
    pub plot: u32,
    pub w: f64,
}

/// Which marginals exact enumeration gives.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum Variant {
    Jpda,
    JpdaStar,
}

/// How one cluster was solved.
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Outcome {
    pub method: Method,
    /// The bound Π(1 + deg_i) on the cluster's joint events.
    pub bound: f64,
    /// Joint events visited (exact) or message sweeps (belief propagation).
    pub work: u64,
    /// JPDA* was asked for but the cluster was too large to prune.
    pub unpruned: bool,
}

/// Most sweeps of belief propagation.
const BP_MAX_ITER: usize = 200;
/// Converged when no message changes by more than this.
const BP_TOL: f64 = 1e-9;
/// Edge updates allowed for one cluster's belief propagation: bounds the
/// time of a pathological cluster (a few ms; see BENCHMARKS.md). At
/// least `BP_MIN_ITER` sweeps are always made.
const BP_MAX_WORK: usize = 1_000_000;
const BP_MIN_ITER: usize = 10;

const NONE: u32 = u32::MAX;

#[derive(Clone, Copy)]
struct Event {
    tracks: u64,
    plots: u128,
    p: f64,
    /// Index of the event's first choice in `event_choices`.
    start: u32,
}

/// A cluster's marginals: `beta0[i]` per track, `beta[e]` per edge.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Marginals {
    pub beta0: Vec<f64>,
    pub beta: Vec<f64>,
}

/// Scratch space for [`ClusterSolver::solve`].
#[derive(Default)]
pub struct ClusterSolver {
    track_start: Vec<u32>,
    choice: Vec<u32>,
    used: Vec<bool>,
    events: Vec<Event>,
    event_choices: Vec<u32>,
    plot_start: Vec<u32>,
    plot_edges: Vec<u32>,
    nu: Vec<f64>,
    mu: Vec<f64>,
}

struct Dfs<'a> {
    w0: &'a [f64],
    edges: &'a [Edge],
    track_start: &'a [u32],
    choice: &'a mut [u32],
    used: &'a mut [bool],
    beta0: &'a mut [f64],
    beta: &'a mut [f64],
    /// Some: JPDA*, leaves are stored; None: plain, leaves are summed.
    store: Option<(&'a mut Vec<Event>, &'a mut Vec<u32>)>,
    total: f64,
    leaves: u64,
}

impl Dfs<'_> {
    fn run(&mut self, i: usize, p: f64) {
        if i == self.w0.len() {
            self.leaf(p);
            return;
        }
        self.choice[i] = NONE;
        self.run(i + 1, p * self.w0[i]);
        for e in self.track_start[i]..self.track_start[i + 1] {
            let edge = self.edges[e as usize];
            let j = edge.plot as usize;
            if !self.used[j] {
                self.used[j] = true;
                self.choice[i] = e;
                self.run(i + 1, p * edge.w);
                self.used[j] = false;
            }
        }
        self.choice[i] = NONE;
    }

    fn leaf(&mut self, p: f64) {
        self.leaves += 1;
        match &mut self.store {
            None => {
                self.total += p;
                for (i, &c) in self.choice.iter().enumerate() {
                    if c == NONE {
                        self.beta0[i] += p;
                    } else {
                        self.beta[c as usize] += p;
                    }
                }
            }
            Some((events, choices)) => {
                let mut tracks = 0u64;
                let mut plots = 0u128;
                for (i, &c) in self.choice.iter().enumerate() {
                    if c != NONE {
                        tracks |= 1u64 << i;
                        plots |= 1u128 << self.edges[c as usize].plot;
                    }
                }
                events.push(Event {
                    tracks,
                    plots,
                    p,
                    start: choices.len() as u32,
                });
                choices.extend_from_slice(self.choice);
            }
        }
    }
}

impl ClusterSolver {
    pub fn new() -> Self {
        Self::default()
    }

    /// Marginals of one cluster of `w0.len()` tracks and `n_plots` plots.
    pub fn solve(
        &mut self,
        w0: &[f64],
        n_plots: usize,
        edges: &[Edge],
        variant: Variant,
        max_events: u64,
        out: &mut Marginals,
    ) -> Outcome {
        let Marginals { beta0, beta } = out;
        let nt = w0.len();
        beta0.clear();
        beta0.resize(nt, 0.0);
        beta.clear();
        beta.resize(edges.len(), 0.0);
        self.track_start.clear();
        self.track_start.resize(nt + 1, 0);
        for e in edges {
            self.track_start[e.track as usize + 1] += 1;
        }
        for i in 0..nt {
            self.track_start[i + 1] += self.track_start[i];
        }
        let bound: f64 = (0..nt)
            .map(|i| 1.0 + (self.track_start[i + 1] - self.track_start[i]) as f64)
            .product();
        if bound > max_events as f64 {
            let sweeps = self.belief_propagation(w0, n_plots, edges, beta0, beta);
            return Outcome {
                method: Method::BeliefPropagation,
                bound,
                work: sweeps as u64,
                unpruned: false,
            };
        }
        // Every track has at least one edge in a real cluster, so nt ≤
        // log2(max_events) < 64 and the track mask fits.
        let prune = variant == Variant::JpdaStar && nt > 1 && nt <= 64 && n_plots <= 128;
        self.choice.clear();
        self.choice.resize(nt, NONE);
        self.used.clear();
        self.used.resize(n_plots, false);
        self.events.clear();
        self.event_choices.clear();
        let mut dfs = Dfs {
            w0,
            edges,
            track_start: &self.track_start,
            choice: &mut self.choice,
            used: &mut self.used,
            beta0,
            beta,
            store: if prune {
                Some((&mut self.events, &mut self.event_choices))
            } else {
                None
            },
            total: 0.0,
            leaves: 0,
        };
        dfs.run(0, 1.0);
        let (mut total, leaves) = (dfs.total, dfs.leaves);
        if prune {
            // Group by (tracks, plots); the most probable of each group
            // first, ties to the earlier event (the order is fixed).
            self.events.sort_unstable_by(|a, b| {
                (a.tracks, a.plots)
                    .cmp(&(b.tracks, b.plots))
                    .then(b.p.total_cmp(&a.p))
                    .then(a.start.cmp(&b.start))
            });
            let mut k = 0;
            while k < self.events.len() {
                let best = self.events[k];
                total += best.p;
                let s = best.start as usize;
                for (i, &c) in self.event_choices[s..s + nt].iter().enumerate() {
                    if c == NONE {
                        beta0[i] += best.p;
                    } else {
                        beta[c as usize] += best.p;
                    }
                }
                k += 1;
                while k < self.events.len()
                    && (self.events[k].tracks, self.events[k].plots) == (best.tracks, best.plots)
                {
                    k += 1;
                }
            }
        }
        if total > 0.0 {
            beta0.iter_mut().for_each(|v| *v /= total);
            beta.iter_mut().for_each(|v| *v /= total);
        } else {
            // Every event underflowed: no information, keep the tracks.
            beta0.iter_mut().for_each(|v| *v = 1.0);
            beta.iter_mut().for_each(|v| *v = 0.0);
        }
        Outcome {
            method: Method::Exact,
            bound,
            work: leaves,
            unpruned: variant == Variant::JpdaStar && nt > 1 && !prune,
        }
    }

    /// Sparse loopy belief propagation; returns the sweeps made.
    fn belief_propagation(
        &mut self,
        w0: &[f64],
        n_plots: usize,
        edges: &[Edge],
        beta0: &mut [f64],
        beta: &mut [f64],
    ) -> usize {
        let ne = edges.len();
        // Edges by plot.
        self.plot_start.clear();
        self.plot_start.resize(n_plots + 1, 0);
        for e in edges {
            self.plot_start[e.plot as usize + 1] += 1;
        }
        for j in 0..n_plots {
            self.plot_start[j + 1] += self.plot_start[j];
        }
        self.plot_edges.clear();
        self.plot_edges.resize(ne, 0);
        // Fill using `used`-free cursors: reuse `choice` as cursors.
        self.choice.clear();
        self.choice.extend_from_slice(&self.plot_start[..n_plots]);
        for (k, e) in edges.iter().enumerate() {
            let c = &mut self.choice[e.plot as usize];
            self.plot_edges[*c as usize] = k as u32;
            *c += 1;
        }
        self.nu.clear();
        self.nu.resize(ne, 1.0);
        self.mu.clear();
        self.mu.resize(ne, 0.0);
        let max_iter = BP_MAX_ITER.min((BP_MAX_WORK / ne.max(1)).max(BP_MIN_ITER));
        let mut sweeps = 0;
        for _ in 0..max_iter {
            sweeps += 1;
            for (i, &w0i) in w0.iter().enumerate() {
                let (a, b) = (
                    self.track_start[i] as usize,
                    self.track_start[i + 1] as usize,
                );
                let s: f64 = w0i
                    + edges[a..b]
                        .iter()
                        .zip(&self.nu[a..b])
                        .map(|(e, nu)| e.w * nu)
                        .sum::<f64>();
                for ((e, nu), mu) in edges[a..b]
                    .iter()
                    .zip(&self.nu[a..b])
                    .zip(&mut self.mu[a..b])
                {
                    let denom = s - e.w * nu;
                    *mu = if denom > 0.0 { e.w / denom } else { 1e300 };
                }
            }
            let mut change: f64 = 0.0;
            for j in 0..n_plots {
                let (a, b) = (self.plot_start[j] as usize, self.plot_start[j + 1] as usize);
                let t: f64 = self.plot_edges[a..b]
                    .iter()
                    .map(|&e| self.mu[e as usize])
                    .sum();
                for &e in &self.plot_edges[a..b] {
                    let e = e as usize;
                    let v = 1.0 / (1.0 + t - self.mu[e]);
                    change = change.max((v - self.nu[e]).abs());
                    self.nu[e] = v;
                }
            }
            if change < BP_TOL {
                break;
            }
        }
        for (i, &w0i) in w0.iter().enumerate() {
            let (a, b) = (
                self.track_start[i] as usize,
                self.track_start[i + 1] as usize,
            );
            let s: f64 = w0i
                + edges[a..b]
                    .iter()
                    .zip(&self.nu[a..b])
                    .map(|(e, nu)| e.w * nu)
                    .sum::<f64>();
            beta0[i] = w0i / s;
            for ((e, nu), b) in edges[a..b].iter().zip(&self.nu[a..b]).zip(&mut beta[a..b]) {
                *b = e.w * nu / s;
            }
        }
        sweeps
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::jpda::{Weights, belief_propagation, exact};
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// A random sparse cluster; every track gets at least one edge.
    fn random(rng: &mut ChaCha8Rng, nt: usize, np: usize, density: f64) -> (Vec<f64>, Vec<Edge>) {
        let w0: Vec<f64> = (0..nt).map(|_| rng.random_range(0.05..0.5)).collect();
        let mut edges = Vec::new();
        for i in 0..nt {
            let before = edges.len();
            for j in 0..np {
                if rng.random::<f64>() < density {
                    edges.push(Edge {
                        track: i as u32,
                        plot: j as u32,
                        w: rng.random_range(0.01..20.0),
                    });
                }
            }
            if edges.len() == before {
                let j = rng.random_range(0..np);
                edges.push(Edge {
                    track: i as u32,
                    plot: j as u32,
                    w: rng.random_range(0.01..20.0),
                });
            }
        }
        (w0, edges)
    }

    fn dense(w0: &[f64], np: usize, edges: &[Edge]) -> Weights {
        let mut w = Weights::new(w0.len(), np);
        for (i, &v) in w0.iter().enumerate() {
            w.set(i, 0, v);
        }
        for e in edges {
            w.set(e.track as usize, e.plot as usize + 1, e.w);
        }
        w
    }

    /// Brute force from the definitions: every vector a ∈ {0..=P}^T, kept
    /// when no plot is used twice and every weight is non-zero (Bar-Shalom
    /// & Fortmann 1988, §9.3); with `star`, only the most probable event of
    /// each (set of tracks with a plot, set of plots used) group is kept
    /// (Blom & Bloem 2000, JPDA*).
    fn brute(w: &Weights, star: bool) -> Vec<f64> {
        let cols = w.n_plots + 1;
        let mut kept: Vec<(Vec<usize>, f64)> = Vec::new();
        for code in 0..cols.pow(w.n_tracks as u32) {
            let mut a = vec![0; w.n_tracks];
            let mut c = code;
            for slot in a.iter_mut() {
                *slot = c % cols;
                c /= cols;
            }
            let feasible = (0..w.n_tracks).all(|i| a[i] == 0 || (0..i).all(|k| a[k] != a[i]));
            let p: f64 = (0..w.n_tracks).map(|i| w.get(i, a[i])).product();
            if feasible && p > 0.0 {
                kept.push((a, p));
            }
        }
        if star {
            let key = |a: &[usize]| {
                let tracks: Vec<bool> = a.iter().map(|&c| c > 0).collect();
                let mut plots: Vec<usize> = a.iter().copied().filter(|&c| c > 0).collect();
                plots.sort();
                (tracks, plots)
            };
            let mut best: std::collections::HashMap<_, f64> = std::collections::HashMap::new();
            for (a, p) in &kept {
                let b = best.entry(key(a)).or_insert(0.0);
                *b = b.max(*p);
            }
            kept.retain(|(a, p)| best[&key(a)] == *p);
        }
        let total: f64 = kept.iter().map(|(_, p)| p).sum();
        let mut out = vec![0.0; w.n_tracks * cols];
        for (a, p) in &kept {
            for i in 0..w.n_tracks {
                out[i * cols + a[i]] += p / total;
            }
        }
        out
    }

    fn check(
        w0: &[f64],
        np: usize,
        edges: &[Edge],
        beta0: &[f64],
        beta: &[f64],
        want: &[f64],
        tol: f64,
    ) {
        let cols = np + 1;
        for i in 0..w0.len() {
            assert!(
                (beta0[i] - want[i * cols]).abs() < tol,
                "track {i}: β₀ {} vs {}",
                beta0[i],
                want[i * cols]
            );
        }
        for (k, e) in edges.iter().enumerate() {
            let r = want[e.track as usize * cols + e.plot as usize + 1];
            assert!((beta[k] - r).abs() < tol, "edge {k}: {} vs {r}", beta[k]);
        }
    }

    #[test]
    fn exact_jpda_matches_brute_force() {
        let mut rng = ChaCha8Rng::seed_from_u64(21);
        let mut solver = ClusterSolver::new();
        let mut m = Marginals::default();
        for _ in 0..300 {
            let nt = rng.random_range(1..=5);
            let np = rng.random_range(1..=5);
            let (w0, edges) = random(&mut rng, nt, np, 0.6);
            let o = solver.solve(&w0, np, &edges, Variant::Jpda, 1 << 20, &mut m);
            assert_eq!(o.method, Method::Exact);
            check(
                &w0,
                np,
                &edges,
                &m.beta0,
                &m.beta,
                &brute(&dense(&w0, np, &edges), false),
                1e-12,
            );
        }
    }

    #[test]
    fn jpda_star_matches_brute_force() {
        let mut rng = ChaCha8Rng::seed_from_u64(22);
        let mut solver = ClusterSolver::new();
        let mut m = Marginals::default();
        let mut differs = 0;
        for _ in 0..300 {
            let nt = rng.random_range(1..=5);
            let np = rng.random_range(1..=5);
            let (w0, edges) = random(&mut rng, nt, np, 0.7);
            solver.solve(&w0, np, &edges, Variant::JpdaStar, 1 << 20, &mut m);
            let d = dense(&w0, np, &edges);
            let (star, plain) = (brute(&d, true), brute(&d, false));
            check(&w0, np, &edges, &m.beta0, &m.beta, &star, 1e-12);
            differs += star.iter().zip(&plain).any(|(a, b)| (a - b).abs() > 1e-6) as usize;
        }
        // The pruning must actually change something on shared clusters.
        assert!(differs > 50, "{differs}");
    }

    #[test]
    fn sparse_bp_is_the_dense_bp() {
        // Same equations (Williams & Lau 2014) over the edges only: equal
        // to the dense implementation of jpda.rs up to convergence.
        let mut rng = ChaCha8Rng::seed_from_u64(23);
        let mut solver = ClusterSolver::new();
        let mut m = Marginals::default();
        for _ in 0..100 {
            let nt = rng.random_range(2..=7);
            let np = rng.random_range(2..=8);
            let (w0, edges) = random(&mut rng, nt, np, 0.6);
            let o = solver.solve(&w0, np, &edges, Variant::Jpda, 0, &mut m);
            assert_eq!(o.method, Method::BeliefPropagation);
            let mut want = Vec::new();
            belief_propagation(&dense(&w0, np, &edges), 500, 1e-13, &mut want);
            check(&w0, np, &edges, &m.beta0, &m.beta, &want, 1e-7);
        }
    }

    /// Error of belief propagation against exact enumeration, on random
    /// clusters shaped like the engine's (sparse gates). The figure is
    /// reported in BENCHMARKS.md.
    #[test]
    fn bp_error_against_exact() {
        let mut rng = ChaCha8Rng::seed_from_u64(24);
        let mut solver = ClusterSolver::new();
        let mut m = Marginals::default();
        let (mut worst, mut sum, mut n) = (0.0f64, 0.0, 0.0);
        for _ in 0..200 {
            let nt = rng.random_range(2..=6);
            let np = rng.random_range(2..=7);
            let (w0, edges) = random(&mut rng, nt, np, 0.5);
            solver.solve(&w0, np, &edges, Variant::Jpda, 0, &mut m);
            let mut want = Vec::new();
            exact(&dense(&w0, np, &edges), &mut want);
            let cols = np + 1;
            for (i, b0) in m.beta0.iter().enumerate() {
                let d = (b0 - want[i * cols]).abs();
                worst = worst.max(d);
                sum += d;
                n += 1.0;
            }
            for (k, e) in edges.iter().enumerate() {
                let d = (m.beta[k] - want[e.track as usize * cols + e.plot as usize + 1]).abs();
                worst = worst.max(d);
                sum += d;
                n += 1.0;
            }
        }
        let mean = sum / n;
        eprintln!(
            "sparse belief propagation vs exact: mean |Δβ| = {mean:.4}, max |Δβ| = {worst:.4} over {n} probabilities"
        );
        assert!(mean < 0.02 && worst < 0.25, "mean {mean} max {worst}");
    }

    #[test]
    fn bp_work_is_bounded() {
        // A huge dense cluster: the sweep count drops so the edge updates
        // stay within the budget.
        let mut rng = ChaCha8Rng::seed_from_u64(25);
        let (w0, edges) = random(&mut rng, 200, 2000, 0.5);
        let mut solver = ClusterSolver::new();
        let mut m = Marginals::default();
        let o = solver.solve(&w0, 2000, &edges, Variant::JpdaStar, 20_000, &mut m);
        assert_eq!(o.method, Method::BeliefPropagation);
        assert!(o.work as usize * edges.len() <= BP_MAX_WORK.max(BP_MIN_ITER * edges.len()));
        for (i, b0) in m.beta0.iter().enumerate() {
            let s: f64 = b0
                + edges
                    .iter()
                    .zip(&m.beta)
                    .filter(|(e, _)| e.track == i as u32)
                    .map(|(_, v)| v)
                    .sum::<f64>();
            assert!((s - 1.0).abs() < 1e-9);
        }
    }
}
