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
    /// of the mixture over the first `n` models: those entries of
    /// [`Imm::combine_fast`] of the full state, to rounding.
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

    /// The mixing weights `w[j][i] = μ_{i|j}` into each model `j` and the
    /// predicted model probabilities `c̄_j`, as [`Imm::predict`] forms them.
    fn mixing(&self, s: &ImmState, dt: f64) -> ([[f64; MAX_MODELS]; MAX_MODELS], [f64; MAX_MODELS]) {
        let n = self.n;
        let pi = self.transition_matrix(dt);
        let mut cbar = [0.0; MAX_MODELS];
        for j in 0..n {
            cbar[j] = (0..n).map(|i| pi[i][j] * s.mu[i]).sum();
        }
        let mut w = [[0.0; MAX_MODELS]; MAX_MODELS];
        for j in 0..n {
            for i in 0..n {
                w[j][i] = if cbar[j] > 0.0 { pi[i][j] * s.mu[i] / cbar[j] } else { s.mu[i] };
            }
        }
        (w, normalized(cbar, n))
    }

    /// The same step as [`Imm::predict`] for the engine's hot path, equal
    /// to rounding: the mixing sums only the upper triangle of each
    /// covariance, and only the first four rows and columns where the
    /// model is CV (its prediction reads no more; see
    /// [`super::filter`]'s module docs), and each model predicts with
    /// [`Motion::predict_fast`]'s arithmetic. When every component is the
    /// same Gaussian (a track no measurement has updated yet), mixing is
    /// skipped, since any mixture of one Gaussian is that Gaussian. The
    /// reference above stays the one the filterpy checks pin; the tests
    /// hold the two together.
    #[inline]
    pub fn predict_fast(&self, s: &ImmState, dt: f64) -> ImmState {
        let mut out = ImmState { comps: [ZERO_GAUSSIAN; MAX_MODELS], mu: [0.0; MAX_MODELS] };
        self.predict_fast_into(s, dt, &mut out);
        out
    }

    /// [`Imm::predict_fast`] written into `out` (every entry of it set),
    /// for a caller that keeps the prediction in a table: no copy of the
    /// state on the way.
    #[inline]
    pub fn predict_fast_into(&self, s: &ImmState, dt: f64, out: &mut ImmState) {
        let n = self.n;
        let same = one_component(s, n);
        let (w, mu) = self.mixing(s, dt);
        out.mu = mu;
        // Components past the model count are carried as the reference
        // carries them.
        out.comps[n..].copy_from_slice(&s.comps[n..]);
        let mut mixed = Gaussian { x: StateVec::zeros(), p: StateCov::zeros() };
        for j in 0..n {
            let m = &self.models[j];
            let prior = if same {
                &s.comps[0]
            } else {
                mix_for(m, &s.comps[..n], &w[j][..n], &mut mixed);
                &mixed
            };
            m.predict_upper(&prior.x, &prior.p, dt, &mut out.comps[j]);
        }
    }

    /// [`Imm::combine`] summing one triangle of the covariance, equal to
    /// rounding; a state whose components are all the same Gaussian gives
    /// that Gaussian (the reference: the same up to rounding).
    pub fn combine_fast(&self, s: &ImmState) -> Gaussian {
        if one_component(s, self.n) {
            return s.comps[0];
        }
        moment_match_fast(&s.comps[..self.n], &s.mu[..self.n])
    }

    /// The part of [`Imm::predict_fast`] that gating and status reports
    /// read ([`PositionPrediction`]), the same to rounding: only the
    /// position rows of each model's prediction.
    pub fn predict_position(&self, s: &ImmState, dt: f64) -> PositionPrediction {
        let n = self.n;
        let same = one_component(s, n);
        let (w, mu) = self.mixing(s, dt);
        let mut out = PositionPrediction { x: [[0.0; 4]; MAX_MODELS], p: [[0.0; 3]; MAX_MODELS], mu };
        // One Gaussian (a new track) mixes to itself.
        let (comps, w) = if same { (&s.comps[..1], [[1.0; MAX_MODELS]; MAX_MODELS]) } else { (&s.comps[..n], w) };
        // The CV transition is linear, so mixing commutes with it:
        // F (Σ w_i (P_i + d_i d_iᵀ)) Fᵀ = Σ w_i (F P_i Fᵀ + (F d_i)(F d_i)ᵀ)
        // with F d_i = F x_i − F x̄. Each component's CV position
        // prediction is formed once and mixed for every CV model (three
        // entries each instead of the 4×4 block).
        let mut cv = [([0.0; 4], [0.0; 3]); MAX_MODELS];
        if self.models[..n].iter().any(|m| cv_block(m) == 4) {
            let dt = super::filter::sanitize_dt(dt);
            for (c, part) in comps.iter().zip(cv.iter_mut()) {
                *part = super::filter::cv_position(&c.x, &c.p, dt);
            }
        }
        let mut mixed = Gaussian { x: StateVec::zeros(), p: StateCov::zeros() };
        for j in 0..n {
            let m = &self.models[j];
            let wj = &w[j][..comps.len()];
            if cv_block(m) == 4 {
                let mut x = [0.0; 4];
                for ((y, _), &wi) in cv.iter().zip(wj) {
                    for k in 0..4 {
                        x[k] += y[k] * wi;
                    }
                }
                let mut p = [0.0; 3];
                for ((y, g), &wi) in cv.iter().zip(wj) {
                    if wi == 0.0 {
                        continue;
                    }
                    let (d0, d1) = (y[0] - x[0], y[1] - x[1]);
                    p[0] += (g[0] + d0 * d0) * wi;
                    p[1] += (g[1] + d0 * d1) * wi;
                    p[2] += (g[2] + d1 * d1) * wi;
                }
                let q = m.position_noise(dt);
                out.x[j] = x;
                out.p[j] = [p[0] + q, p[1], p[2] + q];
            } else {
                let prior = if same {
                    &s.comps[0]
                } else {
                    mix_upper::<5>(comps, wj, &mut mixed);
                    &mixed
                };
                (out.x[j], out.p[j]) = m.position_upper(&prior.x, &prior.p, dt);
            }
        }
        out
    }

    /// The same step as [`Imm::update`], equal to rounding, with each
    /// model updated by [`super::filter::update_fast`]'s arithmetic.
    #[inline]
    pub fn update_fast(&self, pred: &ImmState, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<(ImmState, f64)> {
        let n = self.n;
        let mut out = ImmState { comps: [ZERO_GAUSSIAN; MAX_MODELS], mu: [0.0; MAX_MODELS] };
        out.comps[n..].copy_from_slice(&pred.comps[n..]);
        let mut log_w = [f64::NEG_INFINITY; MAX_MODELS];
        for j in 0..n {
            // As in the reference: a model that cannot take the
            // measurement keeps its prediction and drops to probability 0.
            match super::filter::update_into(&pred.comps[j], z, r, &mut out.comps[j]) {
                Some(inn) => {
                    // ln μ_j + ln N_j = ln(μ_j / √det S) − d²/2 − ln 2π, in one
                    // logarithm where the quotient is a normal number (else
                    // as the reference, which keeps such tiny weights).
                    let mu = pred.mu[j];
                    let t = mu / inn.det.sqrt();
                    let ln_scale = if t >= f64::MIN_POSITIVE { t.ln() } else { mu.ln() - 0.5 * inn.det.ln() };
                    log_w[j] = ln_scale - 0.5 * inn.d2 - LN_2PI;
                }
                None => out.comps[j] = pred.comps[j],
            }
        }
        let ll = probabilities_from_logs(&log_w, n, &mut out.mu)?;
        Some((out, ll))
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
        out.mu = [0.0; MAX_MODELS];
        let ll = probabilities_from_logs(&log_w, n, &mut out.mu)?;
        Some((out, ll))
    }
}

/// The model probabilities `mu` (first `n`, the rest left as they are)
/// from the log weights `ln μ_j + ln N_j`, normalised in logs; returns
/// the mixture's log-likelihood, `None` if no weight is finite.
fn probabilities_from_logs(log_w: &[f64; MAX_MODELS], n: usize, mu: &mut [f64; MAX_MODELS]) -> Option<f64> {
    let max = log_w[..n].iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !max.is_finite() {
        return None;
    }
    for (m, lw) in mu.iter_mut().zip(log_w).take(n) {
        *m = (lw - max).exp();
    }
    // sum ≥ 1: the largest term is exp(0).
    let sum: f64 = mu[..n].iter().sum();
    mu[..n].iter_mut().for_each(|m| *m /= sum);
    Some(max + sum.ln())
}

/// ln 2π, the constant of a bivariate normal density (the double nearest
/// it, as Python's `math.log(2 * math.pi)` prints it).
const LN_2PI: f64 = 1.837_877_066_409_345_3;

/// A placeholder component, overwritten before it is read.
const ZERO_GAUSSIAN: Gaussian = Gaussian { x: StateVec::new(0.0, 0.0, 0.0, 0.0, 0.0), p: StateCov::new(0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0) };

/// How many leading rows and columns of a mixed covariance model `m`'s
/// prediction reads: 4 for CV (it sets the turn rate to 0), else 5.
fn cv_block(m: &Motion) -> usize {
    match m {
        Motion::ConstantVelocity { .. } => 4,
        Motion::CoordinatedTurn { .. } => 5,
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

/// [`moment_match`] summing the upper triangle only and mirroring it
/// (equal to rounding; for exactly symmetric `P_i` the reference's sum is
/// exactly symmetric, each entry and its mirror being the same products).
fn moment_match_fast(comps: &[Gaussian], w: &[f64]) -> Gaussian {
    let mut out = Gaussian { x: StateVec::zeros(), p: StateCov::zeros() };
    mix_upper::<5>(comps, w, &mut out);
    let p = &mut out.p.data.0;
    for j in 0..5 {
        for i in 0..j {
            p[i][j] = p[j][i];
        }
    }
    out
}

/// The moment-matched mean (whole) and the upper triangle of the
/// covariance over its first `D` rows and columns (4 or 5; a constant so
/// that the loops unroll) into `out`; the rest of `out.p` is left as it
/// was.
#[inline(always)]
fn mix_upper<const D: usize>(comps: &[Gaussian], w: &[f64], out: &mut Gaussian) {
    let mut x = StateVec::zeros();
    for (c, &wi) in comps.iter().zip(w) {
        x += c.x * wi;
    }
    out.x = x;
    let mut p = [[0.0; D]; D];
    for (c, &wi) in comps.iter().zip(w) {
        if wi == 0.0 {
            continue;
        }
        let d = c.x - x;
        let cp = &c.p.data.0;
        for j in 0..D {
            for i in 0..=j {
                p[j][i] += (cp[j][i] + d[i] * d[j]) * wi;
            }
        }
    }
    let o = &mut out.p.data.0;
    for j in 0..D {
        o[j][..=j].copy_from_slice(&p[j][..=j]);
    }
}

/// [`mix_upper`] over the block model `m`'s prediction reads
/// ([`cv_block`]).
fn mix_for(m: &Motion, comps: &[Gaussian], w: &[f64], out: &mut Gaussian) {
    if cv_block(m) == 4 {
        mix_upper::<4>(comps, w, out);
    } else {
        mix_upper::<5>(comps, w, out);
    }
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
    //! The fast IMM steps against the reference ones ([`Imm::predict`],
    //! [`Imm::update`], [`Imm::combine`]: the paths the filterpy checks
    //! pin), on random states and on states the filter itself produced:
    //! equal to 1e-9 relative, entry by entry, with the scales of
    //! [`close_gaussian`].
    use super::*;
    use crate::engine::filter::fast_path_tests::{TOL, close_gaussian, random_gaussian};
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn close_state(got: &ImmState, want: &ImmState, n: usize, tol: f64) -> Result<(), String> {
        for j in 0..n {
            close_gaussian(&got.comps[j], &want.comps[j], tol).map_err(|e| format!("model {j}: {e}"))?;
        }
        // Probabilities against 1 (they are in [0, 1] and sum to 1).
        if got.mu.iter().zip(&want.mu).any(|(a, b)| !((a - b).abs() <= tol)) {
            return Err(format!("mu {:?} vs {:?}", got.mu, want.mu));
        }
        Ok(())
    }

    /// The position prediction against a full one's position entries.
    fn close_position(pp: &PositionPrediction, full: &ImmState, n: usize, tol: f64) -> Result<(), String> {
        let want = PositionPrediction::of(full);
        for j in 0..n {
            let c = &full.comps[j];
            let sd = |i: usize| c.p[(i, i)].sqrt();
            for i in 0..4 {
                if !((pp.x[j][i] - want.x[j][i]).abs() <= tol * (want.x[j][i].abs() + sd(i))) {
                    return Err(format!("model {j} x[{i}]: {:?} vs {:?}", pp.x[j], want.x[j]));
                }
            }
            let scales = [sd(0) * sd(0), sd(0) * sd(1), sd(1) * sd(1)];
            if (0..3).any(|k| !((pp.p[j][k] - want.p[j][k]).abs() <= tol * scales[k])) {
                return Err(format!("model {j} p: {:?} vs {:?}", pp.p[j], want.p[j]));
            }
        }
        if pp.mu != want.mu {
            return Err(format!("mu {:?} vs {:?}", pp.mu, want.mu));
        }
        Ok(())
    }

    fn random_state(imm: &Imm, rng: &mut ChaCha8Rng, trial: usize) -> ImmState {
        let mut s = imm.init(random_gaussian(rng), Some(&VESSEL_MU0));
        for c in s.comps.iter_mut() {
            *c = random_gaussian(rng);
        }
        if trial % 3 == 1 {
            // As the filter keeps them: the CV components' turn rate 0
            // with no variance.
            for j in [0, 2] {
                s.comps[j].x[4] = 0.0;
                for k in 0..5 {
                    s.comps[j].p[(4, k)] = 0.0;
                    s.comps[j].p[(k, 4)] = 0.0;
                }
            }
        }
        let mut mu = [rng.random::<f64>(), rng.random::<f64>(), rng.random::<f64>()];
        if trial % 5 == 0 {
            mu[trial % 3] = 0.0;
        }
        let total: f64 = mu.iter().sum();
        s.mu = mu.map(|m| m / total);
        s
    }

    #[test]
    fn fast_predict_and_combine_are_the_reference_ones() {
        let mut rng = ChaCha8Rng::seed_from_u64(0x1aa);
        let imm = Imm::vessel_default();
        let n = imm.n_models();
        for trial in 0..5_000 {
            let s = random_state(&imm, &mut rng, trial);
            let dt = if trial % 7 == 0 { 0.0 } else { rng.random_range(0.0..30.0) };
            let (want, got) = (imm.predict(&s, dt), imm.predict_fast(&s, dt));
            if let Err(e) = close_state(&got, &want, n, TOL) {
                panic!("trial {trial}: {e}");
            }
            let comb = imm.combine(&want);
            if let Err(e) = close_gaussian(&imm.combine_fast(&want), &comb, TOL) {
                panic!("trial {trial}: {e}");
            }
            // The position-only prediction against the reference's
            // position entries, and the combined position part against
            // the reference's combined prediction.
            let pp = imm.predict_position(&s, dt);
            if let Err(e) = close_position(&pp, &want, n, TOL) {
                panic!("trial {trial}: {e}");
            }
            let (x, p) = pp.combine(n);
            let one = PositionPrediction { x: [x, [0.0; 4], [0.0; 4]], p: [p, [0.0; 3], [0.0; 3]], mu: [1.0, 0.0, 0.0] };
            let comb_state = ImmState { comps: [comb; MAX_MODELS], mu: [1.0, 0.0, 0.0] };
            if let Err(e) = close_position(&one, &comb_state, 1, TOL) {
                panic!("trial {trial}: combined: {e}");
            }
        }
    }

    #[test]
    fn fast_update_is_the_reference_update() {
        let mut rng = ChaCha8Rng::seed_from_u64(0x4dd);
        let imm = Imm::vessel_default();
        let n = imm.n_models();
        for trial in 0..5_000 {
            let s = random_state(&imm, &mut rng, trial);
            let c = &s.comps[trial % 3];
            let z = Vector2::new(c.x[0] + rng.random_range(-300.0..300.0), c.x[1] + rng.random_range(-300.0..300.0));
            let (a, b, k): (f64, f64, f64) = (rng.random_range(10.0..3000.0), rng.random_range(10.0..3000.0), rng.random_range(-0.9..0.9));
            let off = k * (a * b).sqrt();
            let r = Matrix2::new(a, off, off, b);
            let (want, wl) = imm.update(&s, &z, &r).unwrap();
            let (got, gl) = imm.update_fast(&s, &z, &r).unwrap();
            if let Err(e) = close_state(&got, &want, n, TOL) {
                panic!("trial {trial}: {e}");
            }
            assert!((gl - wl).abs() <= TOL * (wl.abs() + 1.0), "trial {trial}: {gl} vs {wl}");
        }
    }

    #[test]
    fn fresh_track_shortcut_is_the_reference_to_rounding() {
        // All components one Gaussian (a new track): the fast paths skip
        // the mixing; the reference mixes and rounds.
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
            if let Err(e) = close_state(&got, &want, n, TOL) {
                panic!("trial {trial}: {e}");
            }
            assert_eq!(got.mu, want.mu);
            let pp = imm.predict_position(&s, dt);
            if let Err(e) = close_position(&pp, &got, n, 1e-12) {
                panic!("trial {trial}: {e}");
            }
            let c_ref = imm.combine(&s);
            assert!(imm.combine_fast(&s) == g);
            if let Err(e) = close_gaussian(&c_ref, &g, TOL) {
                panic!("trial {trial}: {e}");
            }
        }
    }

    #[test]
    fn fast_path_follows_the_reference_over_a_run() {
        // Predict and update in turn along a turning track, starting both
        // paths from the same state: they stay equal to rounding step
        // after step (the filter does not amplify rounding).
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
            if let Err(e) = close_state(&pb, &pa, n, TOL) {
                panic!("step {k}: {e}");
            }
            let (ua, la) = imm.update(&pa, &z, &r).unwrap();
            let (ub, lb) = imm.update_fast(&pb, &z, &r).unwrap();
            if let Err(e) = close_state(&ub, &ua, n, TOL) {
                panic!("step {k}: {e}");
            }
            assert!((la - lb).abs() <= TOL * (la.abs() + 1.0), "step {k}");
            (a, b) = (ua, ub);
            if let Err(e) = close_gaussian(&imm.combine_fast(&b), &imm.combine(&a), TOL) {
                panic!("step {k}: {e}");
            }
        }
    }
}
