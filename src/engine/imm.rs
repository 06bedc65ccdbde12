//! Interacting multiple model (IMM) estimator over the motion models of
//! [`super::filter`] (Blom & Bar-Shalom 1988; Bar-Shalom, Li &
//! Kirubarajan 2001, §11.6).
//!
//! One cycle is [`Imm::predict`] (mixing, then each model's prediction)
//! followed by [`Imm::update`] (each model's Kalman update, then the model
//! probabilities from their likelihoods). [`Imm::combine`] gives the
//! moment-matched single Gaussian of a state, predicted or updated.
//!
//! Contract:
//! - `ImmState::mu` sums to 1 over the first `n_models()` entries after
//!   every call; entries past the model count are 0 and their components
//!   are ignored.
//! - [`ImmState::mu`] after [`Imm::predict`] holds the *predicted* model
//!   probabilities `c̄_j = Σ_i π_ij μ_i`, so `combine` of a predicted state is
//!   the predicted mixture.
//! - Likelihoods are combined in logs, so a measurement far from every
//!   model (likelihoods that would underflow to 0 as plain numbers) still
//!   gives normalised probabilities; a model whose probability underflows
//!   to 0 comes back through the switching at the next prediction.
//! - All covariances returned are exactly symmetric; no heap is used.

use super::filter::{Gaussian, Motion, StateCov, StateVec, update as kalman_update};
use nalgebra::{Matrix2, Vector2};

pub const MAX_MODELS: usize = 3;

/// A Kalman update with a position measurement ([`super::filter::update`]
/// or its fast twin).
type KalmanUpdate = fn(&Gaussian, &Vector2<f64>, &Matrix2<f64>) -> Option<(Gaussian, super::filter::Innovation)>;

/// Allowed error in a row sum of a [`Switching::Fixed`] matrix.
const ROW_SUM_TOLERANCE: f64 = 1e-9;

/// How the IMM's models switch.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Switching {
    /// A fixed Markov transition matrix per prediction step, row i giving
    /// P(model j at k+1 | model i at k).
    Fixed([[f64; MAX_MODELS]; MAX_MODELS]),
    /// Continuous-time switching: mean time in each model (s); leaving a
    /// model, the others are chosen with equal probability. The transition
    /// matrix over dt is built from these.
    ///
    /// Over an interval `dt` the stay probability is `π_ii = exp(−dt/τ_i)`
    /// (the sojourn in model i is exponential with mean τ_i) and the rest,
    /// `1 − π_ii`, is split evenly among the other models. This treats at
    /// most one switch per interval, which is the usual approximation for
    /// scan intervals short against the sojourn times (common practice).
    /// τ_i = ∞ means model i is never left.
    Sojourn([f64; MAX_MODELS]),
}

#[derive(Clone, Debug, PartialEq)]
pub struct Imm {
    models: [Motion; MAX_MODELS],
    n: usize,
    switching: Switching,
}

/// The IMM's per-track state: one Gaussian and one probability per model
/// (entries past the model count are unused).
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ImmState {
    pub comps: [Gaussian; MAX_MODELS],
    pub mu: [f64; MAX_MODELS],
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ImmError {
    #[error("an IMM needs 1 to {MAX_MODELS} models")]
    ModelCount,
    #[error("transition probabilities must be in [0, 1] and each row must sum to 1")]
    Transition,
    #[error("mean sojourn times must be positive (infinity allowed)")]
    Sojourn,
    #[error("motion model parameters must be finite and non-negative")]
    ModelParameter,
}

/// What gating and status reports need of a predicted [`ImmState`]: per
/// model the position and velocity `[e, n, ve, vn]` and the position
/// covariance `[ee, en, nn]`, and the model probabilities.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PositionPrediction {
    pub x: [[f64; 4]; MAX_MODELS],
    pub p: [[f64; 3]; MAX_MODELS],
    pub mu: [f64; MAX_MODELS],
}

impl PositionPrediction {
    /// The position part of a state as it is (no time step).
    pub fn of(s: &ImmState) -> PositionPrediction {
        let mut out = PositionPrediction { x: [[0.0; 4]; MAX_MODELS], p: [[0.0; 3]; MAX_MODELS], mu: s.mu };
        for (j, c) in s.comps.iter().enumerate() {
            out.x[j] = [c.x[0], c.x[1], c.x[2], c.x[3]];
            out.p[j] = [c.p[(0, 0)], c.p[(0, 1)], c.p[(1, 1)]];
        }
        out
    }

    /// The moment-matched position and velocity and position covariance
    /// of the mixture over the first `n` models: the same numbers as
    /// those entries of [`Imm::combine_fast`] of the full state.
    pub fn combine(&self, n: usize) -> ([f64; 4], [f64; 3]) {
        let mut x = [0.0; 4];
        for (c, &wi) in self.x[..n].iter().zip(&self.mu[..n]) {
            for k in 0..4 {
                x[k] += c[k] * wi;
            }
        }
        let mut p = [0.0; 3];
        for ((c, cp), &wi) in self.x[..n].iter().zip(&self.p[..n]).zip(&self.mu[..n]) {
            if wi == 0.0 {
                continue;
            }
            let (d0, d1) = (c[0] - x[0], c[1] - x[1]);
            p[0] += (cp[0] + d0 * d0) * wi;
            p[1] += (cp[1] + d0 * d1) * wi;
            p[2] += (cp[2] + d1 * d1) * wi;
        }
        (x, p)
    }
}

/// Initial model probabilities for a new track with [`Imm::vessel_default`]:
/// most new tracks are vessels under way on a steady course (common
/// practice).
pub const VESSEL_MU0: [f64; MAX_MODELS] = [0.8, 0.1, 0.1];

impl Imm {
    pub fn new(models: &[Motion], switching: Switching) -> Result<Imm, ImmError> {
        let n = models.len();
        if n == 0 || n > MAX_MODELS {
            return Err(ImmError::ModelCount);
        }
        if !models.iter().all(Motion::is_valid) {
            return Err(ImmError::ModelParameter);
        }
        match &switching {
            Switching::Fixed(m) => {
                for row in m.iter().take(n) {
                    let row = &row[..n];
                    if !row.iter().all(|p| (0.0..=1.0).contains(p))
                        || (row.iter().sum::<f64>() - 1.0).abs() > ROW_SUM_TOLERANCE
                    {
                        return Err(ImmError::Transition);
                    }
                }
            }
            Switching::Sojourn(tau) => {
                if tau[..n].iter().any(|t| t.is_nan() || *t <= 0.0) {
                    return Err(ImmError::Sojourn);
                }
            }
        }
        let mut all = [models[0]; MAX_MODELS];
        all[..n].copy_from_slice(models);
        Ok(Imm {
            models: all,
            n,
            switching,
        })
    }

    /// A default IMM for vessels seen by a harbour or coastal radar, in
    /// this order:
    ///
    /// 0. quiet CV, `accel_psd` 0.02 m²/s³: a vessel on a steady course.
    ///    Over a 3 s scan the velocity wanders by √(qT) ≈ 0.25 m/s,
    ///    which covers wind, current and helm noise of ships and most
    ///    small craft (the usual sizing √(qT) ≈ typical velocity change per
    ///    scan, BLK 2001 §6.2.2, from memory; values common practice).
    /// 1. CT, `accel_psd` 0.05 m²/s³ and `turn_psd` 1e-4 rad²/s³: the turn
    ///    rate random-walks by √(1e-4·3) ≈ 0.017 rad/s (1°/s) per 3 s scan
    ///    and ≈ 2.2°/s over 15 s, so a turn of up to ~3°/s (fast boats;
    ///    large ships turn at well under 1°/s) is reached within a few
    ///    scans (common practice).
    /// 2. manoeuvring CV, `accel_psd` 0.5 m²/s³: speed changes; √(qT) ≈
    ///    1.2 m/s per 3 s scan, i.e. about 0.4 m/s² of sustained
    ///    acceleration or braking (fast craft; common practice).
    ///
    /// Switching is [`Switching::Sojourn`] with mean times 60 s (steady
    /// legs last minutes), 20 s (a turn takes tens of seconds) and 15 s
    /// (speed changes are short) — common practice. Start tracks with
    /// [`VESSEL_MU0`].
    pub fn vessel_default() -> Imm {
        let models = [
            Motion::ConstantVelocity { accel_psd: 0.02 },
            Motion::CoordinatedTurn {
                accel_psd: 0.05,
                turn_psd: 1e-4,
            },
            Motion::ConstantVelocity { accel_psd: 0.5 },
        ];
        Imm {
            models,
            n: 3,
            switching: Switching::Sojourn([60.0, 20.0, 15.0]),
        }
    }

    pub fn n_models(&self) -> usize {
        self.n
    }

    pub fn models(&self) -> &[Motion] {
        &self.models[..self.n]
    }

    pub fn switching(&self) -> &Switching {
        &self.switching
    }

    /// The model transition matrix over `dt` seconds: entry `[i][j]` is
    /// P(model j after dt | model i before). Entries past the model count
    /// are 0.
    pub fn transition_matrix(&self, dt: f64) -> [[f64; MAX_MODELS]; MAX_MODELS] {
        let n = self.n;
        let mut out = [[0.0; MAX_MODELS]; MAX_MODELS];
        match &self.switching {
            Switching::Fixed(m) => {
                for i in 0..n {
                    out[i][..n].copy_from_slice(&m[i][..n]);
                }
            }
            Switching::Sojourn(_) if n == 1 => out[0][0] = 1.0,
            Switching::Sojourn(tau) => {
                let dt = if dt.is_finite() && dt > 0.0 { dt } else { 0.0 };
                for (i, row) in out.iter_mut().enumerate().take(n) {
                    let stay = (-dt / tau[i]).exp();
                    let leave = (1.0 - stay) / (n - 1) as f64;
                    for (j, p) in row.iter_mut().enumerate().take(n) {
                        *p = if i == j { stay } else { leave };
                    }
                }
            }
        }
        out
    }

    /// Every model starts from `g`; `mu0` gives the initial model
    /// probabilities (uniform if `None`). `mu0`'s first `n_models()`
    /// entries are used; negative or non-finite entries count as 0, and if
    /// nothing positive remains (or `mu0` is too short) the probabilities
    /// are uniform.
    pub fn init(&self, g: Gaussian, mu0: Option<&[f64]>) -> ImmState {
        let n = self.n;
        let mut mu = [0.0; MAX_MODELS];
        let mut total = 0.0;
        if let Some(m) = mu0.filter(|m| m.len() >= n) {
            for (dst, &v) in mu.iter_mut().zip(&m[..n]) {
                *dst = if v.is_finite() && v > 0.0 { v } else { 0.0 };
                total += *dst;
            }
        }
        if total > 0.0 && total.is_finite() {
            mu[..n].iter_mut().for_each(|m| *m /= total);
        } else {
            mu = [0.0; MAX_MODELS];
            mu[..n].iter_mut().for_each(|m| *m = 1.0 / n as f64);
        }
        ImmState {
            comps: [g; MAX_MODELS],
            mu,
        }
    }

    /// Mixing, then each model's prediction over `dt` seconds.
    pub fn predict(&self, s: &ImmState, dt: f64) -> ImmState {
        let n = self.n;
        let pi = self.transition_matrix(dt);
        let mut out = *s;
        let mut cbar = [0.0; MAX_MODELS];
        for j in 0..n {
            cbar[j] = (0..n).map(|i| pi[i][j] * s.mu[i]).sum();
        }
        for j in 0..n {
            // Mixing weights μ_{i|j} = π_ij μ_i / c̄_j. A model that cannot
            // be reached (c̄_j = 0) has weight 0 afterwards, so any proper
            // mixture will do for its prior; the current μ is used.
            let mut w = [0.0; MAX_MODELS];
            for i in 0..n {
                w[i] = if cbar[j] > 0.0 {
                    pi[i][j] * s.mu[i] / cbar[j]
                } else {
                    s.mu[i]
                };
            }
            let mixed = moment_match(&s.comps[..n], &w[..n]);
            out.comps[j] = self.models[j].predict(&mixed, dt);
        }
        out.mu = normalized(cbar, n);
        out
    }

    /// The same step as [`Imm::predict`] for the engine's hot path: the
    /// mixing sums only one triangle of each covariance
    /// ([`moment_match_fast`]) and each model predicts with
    /// [`Motion::predict_fast`], which gives the reference's numbers to
    /// the bit (zeros may differ in sign). One exception: when every
    /// component is the same Gaussian (a track no measurement has updated
    /// yet), mixing is skipped, since any mixture of one Gaussian is that
    /// Gaussian; the reference's sum then differs from it by rounding
    /// (relative 1e-15). The reference above stays the one the filterpy
    /// checks pin; the tests hold the two together.
    pub fn predict_fast(&self, s: &ImmState, dt: f64) -> ImmState {
        let n = self.n;
        let same = one_component(s, n);
        let pi = self.transition_matrix(dt);
        let mut out = *s;
        let mut cbar = [0.0; MAX_MODELS];
        for j in 0..n {
            cbar[j] = (0..n).map(|i| pi[i][j] * s.mu[i]).sum();
        }
        for j in 0..n {
            let mut w = [0.0; MAX_MODELS];
            for i in 0..n {
                w[i] = if cbar[j] > 0.0 {
                    pi[i][j] * s.mu[i] / cbar[j]
                } else {
                    s.mu[i]
                };
            }
            let mixed = if same { s.comps[0] } else { moment_match_fast(&s.comps[..n], &w[..n]) };
            out.comps[j] = self.models[j].predict_fast(&mixed, dt);
        }
        out.mu = normalized(cbar, n);
        out
    }

    /// [`Imm::combine`] by [`moment_match_fast`]: the same bits when the
    /// components' covariances are exactly symmetric, as every state the
    /// IMM returns is; a state whose components are all the same Gaussian
    /// gives that Gaussian (the reference: the same up to rounding).
    pub fn combine_fast(&self, s: &ImmState) -> Gaussian {
        if one_component(s, self.n) {
            return s.comps[0];
        }
        moment_match_fast(&s.comps[..self.n], &s.mu[..self.n])
    }

    /// The part of [`Imm::predict_fast`] that gating and status reports
    /// read ([`PositionPrediction`]), with the same numbers: the mixing
    /// of a CV model sums only the position and velocity block, which is
    /// all its prediction of the position reads.
    pub fn predict_position(&self, s: &ImmState, dt: f64) -> PositionPrediction {
        let n = self.n;
        let same = one_component(s, n);
        let pi = self.transition_matrix(dt);
        let mut out = PositionPrediction { x: [[0.0; 4]; MAX_MODELS], p: [[0.0; 3]; MAX_MODELS], mu: [0.0; MAX_MODELS] };
        let mut cbar = [0.0; MAX_MODELS];
        for j in 0..n {
            cbar[j] = (0..n).map(|i| pi[i][j] * s.mu[i]).sum();
        }
        out.mu = normalized(cbar, n);
        let g0 = &s.comps[0];
        if same && self.models[..n].iter().all(|m| m.moves_as_cv(&g0.x)) {
            // One Gaussian that every model moves as CV does (a new
            // track): the models differ only in their noise term.
            let dt = if dt.is_finite() && dt > 0.0 { dt } else { 0.0 };
            let (mean, x) = super::filter::cv_position_parts(g0, dt);
            for j in 0..n {
                let q = self.models[j].position_noise(dt);
                out.x[j] = mean;
                out.p[j] = [x[0] + q, x[1], x[2] + q];
            }
            return out;
        }
        for j in 0..n {
            let mut w = [0.0; MAX_MODELS];
            for i in 0..n {
                w[i] = if cbar[j] > 0.0 {
                    pi[i][j] * s.mu[i] / cbar[j]
                } else {
                    s.mu[i]
                };
            }
            let mixed = match self.models[j] {
                _ if same => s.comps[0],
                Motion::ConstantVelocity { .. } => moment_match_block::<4>(&s.comps[..n], &w[..n]),
                Motion::CoordinatedTurn { .. } => moment_match_block::<5>(&s.comps[..n], &w[..n]),
            };
            (out.x[j], out.p[j]) = self.models[j].predict_position(&mixed, dt);
        }
        out
    }

    /// The same step as [`Imm::update`], to the bit for finite input, with
    /// each model updated by [`super::filter::update_fast`].
    pub fn update_fast(&self, pred: &ImmState, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<(ImmState, f64)> {
        self.update_with(pred, z, r, super::filter::update_fast)
    }

    /// The moment-matched single Gaussian of the mixture.
    pub fn combine(&self, s: &ImmState) -> Gaussian {
        moment_match(&s.comps[..self.n], &s.mu[..self.n])
    }

    /// Updates each model with position measurement `z` (covariance `r`)
    /// and the model probabilities with their likelihoods. Returns the new
    /// state and the mixture's log-likelihood ln Σ μ_j N_j; `None` if no
    /// model could be updated.
    pub fn update(
        &self,
        pred: &ImmState,
        z: &Vector2<f64>,
        r: &Matrix2<f64>,
    ) -> Option<(ImmState, f64)> {
        self.update_with(pred, z, r, kalman_update)
    }

    /// [`Imm::update`] with the per-model Kalman update given.
    fn update_with(&self, pred: &ImmState, z: &Vector2<f64>, r: &Matrix2<f64>, kalman_update: KalmanUpdate) -> Option<(ImmState, f64)> {
        let n = self.n;
        let mut out = *pred;
        let mut log_w = [f64::NEG_INFINITY; MAX_MODELS];
        for ((comp, lw), mu) in out.comps.iter_mut().zip(&mut log_w).zip(pred.mu).take(n) {
            // A model that cannot take the measurement keeps its prediction
            // and drops to probability 0 for this scan.
            if let Some((post, inn)) = kalman_update(comp, z, r) {
                *comp = post;
                *lw = mu.ln() + inn.log_likelihood();
            }
        }
        let max = log_w[..n].iter().copied().fold(f64::NEG_INFINITY, f64::max);
        if !max.is_finite() {
            return None;
        }
        out.mu = [0.0; MAX_MODELS];
        for (m, lw) in out.mu.iter_mut().zip(log_w).take(n) {
            *m = (lw - max).exp();
        }
        // sum ≥ 1: the largest term is exp(0).
        let sum: f64 = out.mu.iter().sum();
        out.mu.iter_mut().for_each(|m| *m /= sum);
        Some((out, max + sum.ln()))
    }
}

/// Σ w_i N(x_i, P_i) moment-matched: x̄ = Σ w_i x_i,
/// P̄ = Σ w_i (P_i + (x_i − x̄)(x_i − x̄)ᵀ). `w` sums to 1.
fn moment_match(comps: &[Gaussian], w: &[f64]) -> Gaussian {
    let mut x = StateVec::zeros();
    for (c, &wi) in comps.iter().zip(w) {
        x += c.x * wi;
    }
    let mut p = StateCov::zeros();
    for (c, &wi) in comps.iter().zip(w) {
        if wi == 0.0 {
            continue;
        }
        let d = c.x - x;
        p += (c.p + d * d.transpose()) * wi;
    }
    Gaussian {
        x,
        p: (p + p.transpose()) * 0.5,
    }
}

/// Whether the first `n` components are one and the same Gaussian, as
/// [`Imm::init`] leaves them.
fn one_component(s: &ImmState, n: usize) -> bool {
    let (x0, p0) = (s.comps[0].x.as_slice(), s.comps[0].p.as_slice());
    // Entry by entry without a branch each (nalgebra's `==` is slower);
    // the means first, which differ as soon as a measurement came in.
    let same = |a: &[f64], b: &[f64]| a.iter().zip(b).fold(true, |ok, (u, v)| ok & (u == v));
    s.comps[1..n].iter().all(|c| same(c.x.as_slice(), x0)) && s.comps[1..n].iter().all(|c| same(c.p.as_slice(), p0))
}

/// [`moment_match`] summing the upper triangle only and mirroring it. For
/// exactly symmetric `P_i` the reference's sum is exactly symmetric (each
/// entry and its mirror are the same products in the same order) and its
/// final symmetrisation changes nothing, so the two agree to the bit.
fn moment_match_fast(comps: &[Gaussian], w: &[f64]) -> Gaussian {
    moment_match_block::<5>(comps, w)
}

/// [`moment_match_fast`] with the covariance summed over its first `D`
/// rows and columns only (the rest left 0); the mean is whole. `D` is a
/// constant so that the loops unroll.
fn moment_match_block<const D: usize>(comps: &[Gaussian], w: &[f64]) -> Gaussian {
    let mut x = StateVec::zeros();
    for (c, &wi) in comps.iter().zip(w) {
        x += c.x * wi;
    }
    // Column-major, as nalgebra stores it: entry (i, j) at i + 5 j.
    let mut p = [0.0; 25];
    for (c, &wi) in comps.iter().zip(w) {
        if wi == 0.0 {
            continue;
        }
        let d = c.x - x;
        let cp = c.p.as_slice();
        for j in 0..D {
            for i in 0..=j {
                p[i + 5 * j] += (cp[i + 5 * j] + d[i] * d[j]) * wi;
            }
        }
    }
    for j in 0..D {
        for i in 0..j {
            p[j + 5 * i] = p[i + 5 * j];
        }
    }
    Gaussian { x, p: StateCov::from_column_slice(&p) }
}

fn normalized(mut mu: [f64; MAX_MODELS], n: usize) -> [f64; MAX_MODELS] {
    let total: f64 = mu[..n].iter().sum();
    if total > 0.0 && total.is_finite() {
        mu[..n].iter_mut().for_each(|m| *m /= total);
    } else {
        mu[..n].iter_mut().for_each(|m| *m = 1.0 / n as f64);
    }
    mu
}

#[cfg(test)]
mod fast_path_tests {
    //! The fast IMM steps against the reference ones: equal as numbers
    //! (`==`, so ±0 alike), entry by entry, on random states and on
    //! states the filter itself produced. The reference is the path the
    //! filterpy checks pin.
    use super::*;
    use crate::engine::filter::fast_path_tests::random_gaussian;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn same(a: &ImmState, b: &ImmState, n: usize) -> bool {
        let g = |s: &ImmState| -> Vec<f64> { s.comps[..n].iter().flat_map(|c| c.x.iter().chain(c.p.iter()).copied().collect::<Vec<_>>()).chain(s.mu.iter().copied()).collect() };
        g(a).iter().zip(g(b).iter()).all(|(x, y)| x == y)
    }

    fn same_gaussian(a: &Gaussian, b: &Gaussian) -> bool {
        a.x.iter().chain(a.p.iter()).zip(b.x.iter().chain(b.p.iter())).all(|(x, y)| x == y)
    }

    #[test]
    fn fast_predict_and_combine_are_the_reference_ones() {
        let mut rng = ChaCha8Rng::seed_from_u64(0x1aa);
        let imm = Imm::vessel_default();
        let n = imm.n_models();
        for trial in 0..5_000 {
            let mut s = imm.init(random_gaussian(&mut rng), Some(&VESSEL_MU0));
            for c in s.comps.iter_mut() {
                *c = random_gaussian(&mut rng);
            }
            let mut mu = [rng.random::<f64>(), rng.random::<f64>(), rng.random::<f64>()];
            if trial % 5 == 0 {
                mu[trial % 3] = 0.0;
            }
            let total: f64 = mu.iter().sum();
            s.mu = mu.map(|m| m / total);
            let dt = if trial % 7 == 0 { 0.0 } else { rng.random_range(0.0..30.0) };
            let (want, got) = (imm.predict(&s, dt), imm.predict_fast(&s, dt));
            assert!(same(&want, &got, n), "trial {trial}");
            let comb = imm.combine(&want);
            assert!(same_gaussian(&comb, &imm.combine_fast(&want)), "trial {trial}");
            // The position-only prediction: each model's entries, the
            // probabilities, and the combined position part.
            let pp = imm.predict_position(&s, dt);
            assert_eq!(pp, PositionPrediction::of(&want), "trial {trial}");
            let (x, p) = pp.combine(n);
            let want_x = [comb.x[0], comb.x[1], comb.x[2], comb.x[3]];
            let want_p = [comb.p[(0, 0)], comb.p[(0, 1)], comb.p[(1, 1)]];
            assert!(x == want_x && p == want_p, "trial {trial}: {x:?} {p:?} vs {want_x:?} {want_p:?}");
        }
    }

    /// Relative difference, against the larger magnitude of the pair and
    /// a floor for entries that are 0 in one path.
    fn close(a: f64, b: f64, scale: f64) -> bool {
        (a - b).abs() <= 1e-12 * a.abs().max(b.abs()).max(scale)
    }

    #[test]
    fn fresh_track_shortcut_is_the_reference_to_rounding() {
        // All components one Gaussian (a new track): the fast paths skip
        // the mixing; the reference mixes and rounds. Equal to 1e-12
        // relative (scale: the largest entry of each covariance).
        let mut rng = ChaCha8Rng::seed_from_u64(0x3cc);
        let imm = Imm::vessel_default();
        let n = imm.n_models();
        for trial in 0..5_000 {
            let mut g = random_gaussian(&mut rng);
            if trial % 2 == 0 {
                // As a new track starts: at rest, not turning (the turn
                // model then moves as CV does).
                g.x[2] = 0.0;
                g.x[3] = 0.0;
                g.x[4] = 0.0;
            }
            let s = imm.init(g, Some(&VESSEL_MU0));
            let dt = rng.random_range(0.0..30.0);
            let (want, got) = (imm.predict(&s, dt), imm.predict_fast(&s, dt));
            for j in 0..n {
                let (a, b) = (&got.comps[j], &want.comps[j]);
                let scale = b.p.amax();
                // Scales per group of the state: position, velocity, turn rate.
                let group = |i: usize| match i {
                    0 | 1 => b.x[0].abs().max(b.x[1].abs()),
                    2 | 3 => b.x[2].abs().max(b.x[3].abs()),
                    _ => 1e-9,
                };
                assert!(a.x.iter().zip(b.x.iter()).enumerate().all(|(i, (u, v))| close(*u, *v, group(i))), "trial {trial} model {j}: {:?} {:?}", a.x, b.x);
                let worst = a.p.iter().zip(b.p.iter()).map(|(u, v)| (u - v).abs() / u.abs().max(v.abs()).max(scale)).fold(0.0, f64::max);
                assert!(worst <= 1e-12, "trial {trial} model {j}: {worst:e} {:?} {:?}", a.x, b.x);
            }
            assert_eq!(got.mu, want.mu);
            let pp = imm.predict_position(&s, dt);
            assert_eq!(pp, PositionPrediction::of(&got), "trial {trial}");
            let (c_ref, c_fast) = (imm.combine(&s), imm.combine_fast(&s));
            assert!(c_fast == g && c_ref.x.iter().zip(g.x.iter()).all(|(u, v)| close(*u, *v, 1e-9)));
            assert!(c_ref.p.iter().zip(g.p.iter()).all(|(u, v)| close(*u, *v, g.p.amax())), "trial {trial}");
        }
    }

    #[test]
    fn fast_path_follows_the_reference_over_a_run() {
        // Predict and update in turn along a turning track, starting both
        // paths from the same state: they stay equal step after step.
        let imm = Imm::vessel_default();
        let n = imm.n_models();
        let mut rng = ChaCha8Rng::seed_from_u64(0x2bb);
        let g0 = Gaussian { x: StateVec::new(100.0, -50.0, 0.0, 0.0, 0.0), p: StateCov::from_diagonal(&StateVec::new(400.0, 400.0, 49.0, 49.0, 7e-4)) };
        // Distinct components from the start (the shortcut for one
        // component is checked above, to rounding).
        let mut s0 = imm.init(g0, Some(&VESSEL_MU0));
        s0.comps[1].x[4] = 0.01;
        s0.comps[2].x[2] = 0.5;
        let (mut a, mut b) = (s0, s0);
        let r = Matrix2::new(150.0, 20.0, 20.0, 90.0);
        for k in 1..400 {
            let t = k as f64 * 2.5;
            let z = Vector2::new(100.0 + 300.0 * (t / 200.0).sin() + rng.random_range(-10.0..10.0), -50.0 + 300.0 * (1.0 - (t / 200.0).cos()) + rng.random_range(-10.0..10.0));
            let (pa, pb) = (imm.predict(&a, 2.5), imm.predict_fast(&b, 2.5));
            assert!(same(&pa, &pb, n), "step {k}");
            let (ua, la) = imm.update(&pa, &z, &r).unwrap();
            let (ub, lb) = imm.update_fast(&pb, &z, &r).unwrap();
            assert!(same(&ua, &ub, n) && la == lb, "step {k}");
            (a, b) = (ua, ub);
            assert!(same_gaussian(&imm.combine(&a), &imm.combine_fast(&b)), "step {k}");
        }
    }
}
