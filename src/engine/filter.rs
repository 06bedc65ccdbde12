//! Motion models and Kalman filtering in the site plane.
//!
//! The state is `[east, north, vel_east, vel_north, turn_rate]` (metres,
//! m/s, rad/s; turn rate positive counter-clockwise, i.e. turning to port
//! when seen from above with east to the right and north up). Every model
//! uses the same 5-state so that an IMM can mix them; the
//! constant-velocity model leaves the turn rate at zero.
//!
//! STUB: to be implemented.

use nalgebra::{Matrix2, SMatrix, SVector, Vector2};

pub type StateVec = SVector<f64, 5>;
pub type StateCov = SMatrix<f64, 5, 5>;

/// A Gaussian state estimate.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Gaussian {
    pub x: StateVec,
    pub p: StateCov,
}

/// A motion model.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Motion {
    /// Nearly constant velocity: continuous white-noise acceleration with
    /// power spectral density `accel_psd` (m²/s³) on each axis.
    ConstantVelocity { accel_psd: f64 },
    /// Coordinated turn with the turn rate in the state (extended Kalman
    /// filter): `accel_psd` (m²/s³) on the linear axes, `turn_psd`
    /// (rad²/s³) on the turn rate.
    CoordinatedTurn { accel_psd: f64, turn_psd: f64 },
}

impl Motion {
    /// Predicts `g` forward by `dt` seconds (dt ≥ 0).
    pub fn predict(&self, g: &Gaussian, dt: f64) -> Gaussian {
        let _ = (g, dt);
        todo!()
    }
}

/// The innovation of a position measurement against a state.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Innovation {
    /// z - H x
    pub nu: Vector2<f64>,
    /// H P Hᵀ + R
    pub s: Matrix2<f64>,
    pub s_inv: Matrix2<f64>,
    /// Squared Mahalanobis distance νᵀ S⁻¹ ν.
    pub d2: f64,
    /// ln det S
    pub ln_det_s: f64,
}

impl Innovation {
    /// ln N(ν; 0, S).
    pub fn log_likelihood(&self) -> f64 {
        -0.5 * (self.d2 + self.ln_det_s) - (2.0 * std::f64::consts::PI).ln()
    }
}

/// Innovation of position measurement `z` with covariance `r`; `None` if S
/// is not positive definite.
pub fn innovation(g: &Gaussian, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<Innovation> {
    let _ = (g, z, r);
    todo!()
}

/// Kalman update with a position measurement (Joseph form).
pub fn update(g: &Gaussian, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<(Gaussian, Innovation)> {
    let _ = (g, z, r);
    todo!()
}
