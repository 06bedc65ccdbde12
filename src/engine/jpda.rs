//! Marginal association probabilities for joint probabilistic data
//! association (JPDA), per cluster of tracks that share plots.
//!
//! The parametric model (Bar-Shalom & Fortmann 1988, §9.3): in a joint
//! event each plot belongs to at most one track or is clutter, and each
//! track takes at most one plot. With `w[i][0]` the weight of track i
//! taking no plot (1 − Pd·Pg) and `w[i][j]` the weight of track i taking
//! plot j (Pd · N(z_j; ẑ_i, S_i) / λ, λ the clutter density), an event's
//! probability is proportional to the product of its weights. The marginal
//! β[i][j] sums the events in which track i takes plot j.
//!
//! Small clusters are enumerated exactly, depth first over tracks. When the
//! bound Π(1 + deg_i) on the number of joint events exceeds the configured
//! limit, loopy belief propagation gives the marginals instead (Williams &
//! Lau 2014, "Approximate evaluation of marginal association probabilities
//! with belief propagation", IEEE T-AES 50(4)); its error against the exact
//! result is measured in the tests.

/// A cluster's association weights: `n_tracks` rows of `1 + n_plots`
/// entries, column 0 the no-plot weight, column j ≥ 1 plot j − 1. A zero
/// weight means the pair is outside the gate.
#[derive(Clone, Debug, Default)]
pub struct Weights {
    pub n_tracks: usize,
    pub n_plots: usize,
    pub w: Vec<f64>,
}

impl Weights {
    pub fn new(n_tracks: usize, n_plots: usize) -> Self {
        Weights { n_tracks, n_plots, w: vec![0.0; n_tracks * (n_plots + 1)] }
    }
    #[inline]
    pub fn get(&self, i: usize, j: usize) -> f64 {
        self.w[i * (self.n_plots + 1) + j]
    }
    #[inline]
    pub fn set(&mut self, i: usize, j: usize, v: f64) {
        self.w[i * (self.n_plots + 1) + j] = v;
    }
    /// Upper bound on the number of feasible joint events: Π (1 + deg_i).
    pub fn event_bound(&self) -> f64 {
        (0..self.n_tracks)
            .map(|i| 1.0 + (1..=self.n_plots).filter(|&j| self.get(i, j) > 0.0).count() as f64)
            .product()
    }
}

/// How the marginals were computed.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum Method {
    Exact,
    BeliefPropagation,
}

/// Marginals in the same layout as [`Weights`]: row i sums to 1.
pub fn marginals(w: &Weights, max_events: u64, out: &mut Vec<f64>) -> Method {
    if w.n_plots <= 64 && w.event_bound() <= max_events as f64 {
        exact(w, out);
        Method::Exact
    } else {
        belief_propagation(w, 200, 1e-10, out);
        Method::BeliefPropagation
    }
}

/// Exact marginals by depth-first enumeration of every feasible joint
/// event (plots ≤ 64).
pub fn exact(w: &Weights, out: &mut Vec<f64>) {
    let cols = w.n_plots + 1;
    out.clear();
    out.resize(w.n_tracks * cols, 0.0);
    let mut choice = vec![0usize; w.n_tracks];
    let mut total = 0.0;
    fn dfs(w: &Weights, i: usize, used: u64, p: f64, choice: &mut [usize], out: &mut [f64], total: &mut f64) {
        if i == w.n_tracks {
            *total += p;
            let cols = w.n_plots + 1;
            for (t, &c) in choice.iter().enumerate() {
                out[t * cols + c] += p;
            }
            return;
        }
        let w0 = w.get(i, 0);
        if w0 > 0.0 {
            choice[i] = 0;
            dfs(w, i + 1, used, p * w0, choice, out, total);
        }
        for j in 1..=w.n_plots {
            let wij = w.get(i, j);
            if wij > 0.0 && used & (1u64 << (j - 1)) == 0 {
                choice[i] = j;
                dfs(w, i + 1, used | (1u64 << (j - 1)), p * wij, choice, out, total);
            }
        }
    }
    dfs(w, 0, 0, 1.0, &mut choice, out, &mut total);
    if total > 0.0 {
        for v in out.iter_mut() {
            *v /= total;
        }
    }
}

/// Marginals by loopy belief propagation between tracks and plots
/// (Williams & Lau 2014, eqs. 30–31), at most `max_iter` sweeps or until
/// the messages change by less than `tol`.
pub fn belief_propagation(w: &Weights, max_iter: usize, tol: f64, out: &mut Vec<f64>) {
    let (nt, np) = (w.n_tracks, w.n_plots);
    let cols = np + 1;
    // nu[i][j]: plot j → track i; mu[i][j]: track i → plot j.
    let mut nu = vec![1.0; nt * np];
    let mut mu = vec![0.0; nt * np];
    for _ in 0..max_iter {
        for i in 0..nt {
            let s: f64 = w.get(i, 0) + (0..np).map(|j| w.get(i, j + 1) * nu[i * np + j]).sum::<f64>();
            for j in 0..np {
                let wij = w.get(i, j + 1);
                let denom = s - wij * nu[i * np + j];
                mu[i * np + j] = if wij > 0.0 && denom > 0.0 { wij / denom } else if wij > 0.0 { 1e300 } else { 0.0 };
            }
        }
        let mut change: f64 = 0.0;
        for j in 0..np {
            let s: f64 = (0..nt).map(|i| mu[i * np + j]).sum();
            for i in 0..nt {
                let v = 1.0 / (1.0 + s - mu[i * np + j]);
                change = change.max((v - nu[i * np + j]).abs());
                nu[i * np + j] = v;
            }
        }
        if change < tol {
            break;
        }
    }
    out.clear();
    out.resize(nt * cols, 0.0);
    for i in 0..nt {
        let s: f64 = w.get(i, 0) + (0..np).map(|j| w.get(i, j + 1) * nu[i * np + j]).sum::<f64>();
        if s <= 0.0 {
            out[i * cols] = 1.0;
            continue;
        }
        out[i * cols] = w.get(i, 0) / s;
        for j in 0..np {
            out[i * cols + j + 1] = w.get(i, j + 1) * nu[i * np + j] / s;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    /// Brute force from the definition: every vector a ∈ {0..=P}^T, kept
    /// when no plot is used twice and every weight is non-zero.
    fn brute(w: &Weights) -> Vec<f64> {
        let cols = w.n_plots + 1;
        let mut out = vec![0.0; w.n_tracks * cols];
        let mut total = 0.0;
        let n_events = cols.pow(w.n_tracks as u32);
        for code in 0..n_events {
            let mut a = vec![0; w.n_tracks];
            let mut c = code;
            for slot in a.iter_mut() {
                *slot = c % cols;
                c /= cols;
            }
            let feasible = (0..w.n_tracks).all(|i| a[i] == 0 || (0..i).all(|k| a[k] != a[i]));
            if !feasible {
                continue;
            }
            let p: f64 = (0..w.n_tracks).map(|i| w.get(i, a[i])).product();
            if p == 0.0 {
                continue;
            }
            total += p;
            for i in 0..w.n_tracks {
                out[i * cols + a[i]] += p;
            }
        }
        out.iter().map(|v| v / total).collect()
    }

    fn random_cluster(rng: &mut rand_chacha::ChaCha8Rng, nt: usize, np: usize, density: f64) -> Weights {
        let mut w = Weights::new(nt, np);
        for i in 0..nt {
            w.set(i, 0, rng.random_range(0.05..0.5));
            for j in 1..=np {
                if rng.random::<f64>() < density {
                    w.set(i, j, rng.random_range(0.01..20.0));
                }
            }
        }
        w
    }

    #[test]
    fn exact_matches_brute_force() {
        // Definition of the marginals: Bar-Shalom & Fortmann (1988) §9.3.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        for _ in 0..300 {
            let nt = rng.random_range(1..=5);
            let np = rng.random_range(0..=5);
            let w = random_cluster(&mut rng, nt, np, 0.6);
            let b = brute(&w);
            let mut e = Vec::new();
            exact(&w, &mut e);
            for (x, y) in e.iter().zip(&b) {
                assert!((x - y).abs() < 1e-12, "{x} vs {y}");
            }
            for i in 0..nt {
                let s: f64 = e[i * (np + 1)..(i + 1) * (np + 1)].iter().sum();
                assert!((s - 1.0).abs() < 1e-12);
            }
        }
    }

    #[test]
    fn belief_propagation_error_is_small() {
        // Measured error of the approximation against exact enumeration
        // over random dense clusters (the figure goes in BENCHMARKS.md).
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let mut worst: f64 = 0.0;
        let mut sum = 0.0;
        let mut n = 0.0;
        for _ in 0..200 {
            let nt = rng.random_range(2..=6);
            let np = rng.random_range(2..=7);
            let w = random_cluster(&mut rng, nt, np, 0.7);
            let mut e = Vec::new();
            exact(&w, &mut e);
            let mut b = Vec::new();
            belief_propagation(&w, 500, 1e-12, &mut b);
            for (x, y) in e.iter().zip(&b) {
                worst = worst.max((x - y).abs());
                sum += (x - y).abs();
                n += 1.0;
            }
        }
        let mean = sum / n;
        eprintln!("belief propagation vs exact: mean |Δβ| = {mean:.4}, max |Δβ| = {worst:.4}");
        assert!(mean < 0.02, "mean error {mean}");
        assert!(worst < 0.25, "max error {worst}");
    }

    #[test]
    fn bound_picks_method() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let w = random_cluster(&mut rng, 4, 4, 1.0);
        let mut out = Vec::new();
        assert_eq!(marginals(&w, 1000, &mut out), Method::Exact);
        assert_eq!(marginals(&w, 10, &mut out), Method::BeliefPropagation);
    }
}
