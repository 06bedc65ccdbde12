//! Measurement conversion: polar radar plots into Cartesian position
//! measurements with their covariance.
//!
//! STUB: to be implemented.

use nalgebra::{Matrix2, Vector2};

/// Converts a polar plot (horizontal range `range_m`, bearing `bearing_rad`
/// clockwise from north) with 1-sigma errors `sigma_r_m`, `sigma_b_rad`
/// into an (east, north) mean and covariance in the antenna's horizontal
/// frame, by the unbiased conversion (Mo et al. 1998 / Lerro &
/// Bar-Shalom 1993): the mean is unbiased and the covariance is the true
/// covariance of the converted error, evaluated at the measurement.
pub fn polar_to_cartesian(range_m: f64, bearing_rad: f64, sigma_r_m: f64, sigma_b_rad: f64) -> (Vector2<f64>, Matrix2<f64>) {
    let _ = (range_m, bearing_rad, sigma_r_m, sigma_b_rad);
    todo!("polar_to_cartesian")
}
