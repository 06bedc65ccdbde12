//! Interacting multiple model (IMM) estimator over the motion models of
//! [`super::filter`].
//!
//! STUB: to be implemented.

use super::filter::{Gaussian, Motion};
use nalgebra::{Matrix2, Vector2};

pub const MAX_MODELS: usize = 3;

/// How the IMM's models switch.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Switching {
    /// A fixed Markov transition matrix per prediction step, row i giving
    /// P(model j at k+1 | model i at k).
    Fixed([[f64; MAX_MODELS]; MAX_MODELS]),
    /// Continuous-time switching: mean time in each model (s); leaving a
    /// model, the others are chosen with equal probability. The transition
    /// matrix over dt is built from these.
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
#[derive(Clone, Copy, Debug, PartialEq)]
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
}

impl Imm {
    pub fn new(models: &[Motion], switching: Switching) -> Result<Imm, ImmError> {
        let _ = (models, switching);
        todo!()
    }
    pub fn n_models(&self) -> usize {
        self.n
    }
    /// Every model starts from `g`; `mu0` gives the initial model
    /// probabilities (uniform if `None`).
    pub fn init(&self, g: Gaussian, mu0: Option<&[f64]>) -> ImmState {
        let _ = (g, mu0);
        todo!()
    }
    /// Mixing, then each model's prediction over `dt` seconds.
    pub fn predict(&self, s: &ImmState, dt: f64) -> ImmState {
        let _ = (s, dt);
        todo!()
    }
    /// The moment-matched single Gaussian of the mixture.
    pub fn combine(&self, s: &ImmState) -> Gaussian {
        let _ = s;
        todo!()
    }
    /// Updates each model with position measurement `z` (covariance `r`)
    /// and the model probabilities with their likelihoods. Returns the new
    /// state and the mixture's log-likelihood ln Σ μ_j N_j; `None` if no
    /// model could be updated.
    pub fn update(&self, pred: &ImmState, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<(ImmState, f64)> {
        let _ = (pred, z, r);
        todo!()
    }
}
