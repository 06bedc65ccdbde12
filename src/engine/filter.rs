//! Motion models and Kalman filtering in the site plane.
//!
//! The state is `[east, north, vel_east, vel_north, turn_rate]` (metres,
//! m/s, rad/s; turn rate positive counter-clockwise, i.e. turning to port
//! when seen from above with east to the right and north up). Every model
//! uses the same 5-state so that an IMM can mix them.
//!
//! Contract:
//! - [`Motion::predict`] takes `dt ≥ 0` seconds. A negative or non-finite
//!   `dt` is treated as 0 (ordering records is the reorder buffer's job; a
//!   negative dt would make the process noise indefinite).
//! - Measurements are positions `z = [east, north]` with `H = [I₂ 0]`.
//!   [`innovation`] and [`update`] return `None` when the innovation
//!   covariance `S` is not positive definite or anything is non-finite,
//!   so bad input never panics.
//! - Every covariance returned is exactly symmetric.
//! - Everything is fixed-size nalgebra on the stack: no heap.
//!
//! The constant-velocity model and the turn rate: the CV model *asserts*
//! that the turn rate is zero. Its prediction sets ω to 0 with zero
//! variance and zero cross-covariance (the ω row of its transition matrix
//! is zero and it adds no ω noise). Inside an IMM this is what makes the
//! models interact sensibly: when the CV model is likely, the mixed prior
//! of the coordinated-turn model is pulled towards ω = 0 in proportion to
//! the CV probability, and the spread between the models' ω shows up in
//! the mixed ω variance through the moment matching. Keeping a stale ω in
//! the CV component instead would hand the CT model a turn rate that no
//! model has been estimating. A consequence: a CV component's covariance
//! has rank ≤ 4, so consistency tests of a CV filter on its own use the
//! first four states.

use nalgebra::{Matrix2, SMatrix, SVector, Vector2};

pub type StateVec = SVector<f64, 5>;
pub type StateCov = SMatrix<f64, 5, 5>;
/// A Kalman gain for a position measurement.
pub type Gain = SMatrix<f64, 5, 2>;

/// A Gaussian state estimate.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
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
        let dt = sanitize_dt(dt);
        let (x, f) = self.transition(&g.x, dt);
        let q = self.process_noise(dt);
        Gaussian {
            x,
            p: symmetric(f * g.p * f.transpose() + q),
        }
    }

    /// The same prediction as [`Motion::predict`], to the bit for finite
    /// input (zeros may differ in sign), with fewer operations: the
    /// products with the transition matrix's structural zeros (each ±0,
    /// which leaves a sum unchanged) are skipped, and for the CV model the
    /// known ones too. The engine's hot path uses this one; the reference
    /// above stays the one the filterpy and Kalata checks pin, and the
    /// tests below hold the two together.
    pub fn predict_fast(&self, g: &Gaussian, dt: f64) -> Gaussian {
        let dt = sanitize_dt(dt);
        let (x, f) = self.transition(&g.x, dt);
        let q = self.process_noise(dt);
        let fp = match *self {
            Motion::ConstantVelocity { .. } => cv_sandwich(&g.p, dt),
            Motion::CoordinatedTurn { .. } => turn_sandwich(&g.p, &f),
        };
        Gaussian { x, p: symmetric_sum(&fp, &q) }
    }

    /// The part of [`Motion::predict_fast`] that gating and position
    /// reports read: the predicted position and velocity
    /// `[e, n, ve, vn]` and the position covariance `[ee, en, nn]`, the
    /// same numbers as the full prediction's. `p` must be exactly
    /// symmetric; for the CV model only its first four rows and columns
    /// are read.
    pub fn predict_position(&self, g: &Gaussian, dt: f64) -> ([f64; 4], [f64; 3]) {
        let dt = sanitize_dt(dt);
        if self.moves_as_cv(&g.x) {
            let (mean, x) = cv_position_parts(g, dt);
            let q = self.position_noise(dt);
            return (mean, [x[0] + q, x[1], x[2] + q]);
        }
        let p = &g.p;
        let (x, f) = self.transition(&g.x, dt);
        let q = self.process_noise(dt);
        let mut m = [[0.0; 5]; 2];
        for j in 0..5 {
            m[0][j] = p[(0, j)] + p[(2, j)] * f[(0, 2)] + p[(3, j)] * f[(0, 3)] + p[(4, j)] * f[(0, 4)];
            m[1][j] = p[(1, j)] + p[(2, j)] * f[(1, 2)] + p[(3, j)] * f[(1, 3)] + p[(4, j)] * f[(1, 4)];
        }
        let col = |i: usize, k: usize| m[i][k] + m[i][2] * f[(k, 2)] + m[i][3] * f[(k, 3)] + m[i][4] * f[(k, 4)];
        let en = ((col(0, 1) + q[(0, 1)]) + (col(1, 0) + q[(1, 0)])) * 0.5;
        ([x[0], x[1], x[2], x[3]], [col(0, 0) + q[(0, 0)], en, col(1, 1) + q[(1, 1)]])
    }

    /// Whether this model predicts the position from state `x` as the CV
    /// model does: always for CV; for the coordinated turn when the
    /// velocity and the turn rate are exactly 0 (as in a new track), where
    /// its Jacobian's position rows are the CV's `[I, dt·I, 0]` exactly
    /// (s = dt, c = 0 and both ω-derivative terms 0) and its noise has the
    /// CV's position block.
    pub fn moves_as_cv(&self, x: &StateVec) -> bool {
        match self {
            Motion::ConstantVelocity { .. } => true,
            Motion::CoordinatedTurn { .. } => x[2] == 0.0 && x[3] == 0.0 && x[4] == 0.0,
        }
    }

    /// The position-variance term of the process noise over `dt` (each
    /// axis; the east–north term is 0): `q dt³/3` as [`cwna_noise`] forms it.
    pub fn position_noise(&self, dt: f64) -> f64 {
        let dt = sanitize_dt(dt);
        let q = match *self {
            Motion::ConstantVelocity { accel_psd } | Motion::CoordinatedTurn { accel_psd, .. } => accel_psd,
        };
        q * dt * dt * dt / 3.0
    }

    /// The predicted mean `f(x)` after `dt` seconds and the Jacobian of the
    /// transition at `x` (for the CV model, the transition matrix itself).
    pub fn transition(&self, x: &StateVec, dt: f64) -> (StateVec, StateCov) {
        let dt = sanitize_dt(dt);
        match *self {
            Motion::ConstantVelocity { .. } => {
                let f = cv_transition(dt);
                (f * x, f)
            }
            Motion::CoordinatedTurn { .. } => ct_transition(x, dt),
        }
    }

    /// The process noise covariance over `dt` seconds.
    ///
    /// Both models put the continuous white-noise acceleration block
    /// (Bar-Shalom, Li & Kirubarajan 2001, §6.2.2) on each linear axis. For
    /// the CT model that block ignores the rotation of the velocity during
    /// the interval; the exact discretisation differs by O((ωT)²), which is
    /// well below the noise-level uncertainty for vessels (ωT ≲ 0.15 for
    /// 3°/s and a 3 s scan) — common practice. The CT turn rate is a random
    /// walk driven by white noise of PSD `turn_psd`, so its variance grows
    /// by `turn_psd·dt`; its coupling into position within one interval is
    /// neglected (common practice).
    pub fn process_noise(&self, dt: f64) -> StateCov {
        let dt = sanitize_dt(dt);
        match *self {
            Motion::ConstantVelocity { accel_psd } => cwna_noise(dt, accel_psd),
            Motion::CoordinatedTurn {
                accel_psd,
                turn_psd,
            } => {
                let mut q = cwna_noise(dt, accel_psd);
                q[(4, 4)] = turn_psd * dt;
                q
            }
        }
    }

    /// True if the model's parameters are finite and non-negative.
    pub fn is_valid(&self) -> bool {
        let ok = |v: f64| v.is_finite() && v >= 0.0;
        match *self {
            Motion::ConstantVelocity { accel_psd } => ok(accel_psd),
            Motion::CoordinatedTurn {
                accel_psd,
                turn_psd,
            } => ok(accel_psd) && ok(turn_psd),
        }
    }
}

/// The CV transition matrix over `dt`; the turn-rate row is zero (see the
/// module docs).
pub fn cv_transition(dt: f64) -> StateCov {
    let mut f = StateCov::identity();
    f[(0, 2)] = dt;
    f[(1, 3)] = dt;
    f[(4, 4)] = 0.0;
    f
}

/// Continuous white-noise acceleration process noise with PSD `q` (m²/s³)
/// on each axis: `q·[[dt³/3, dt²/2], [dt²/2, dt]]` per axis (Bar-Shalom, Li
/// & Kirubarajan 2001, §6.2.2). Zero on the turn rate.
pub fn cwna_noise(dt: f64, q: f64) -> StateCov {
    axis_blocks(q * dt * dt * dt / 3.0, q * dt * dt / 2.0, q * dt)
}

/// Discrete white-noise acceleration ("piecewise constant acceleration")
/// process noise with acceleration variance `accel_var` (m²/s⁴):
/// `Γ σ² Γᵀ` with `Γ = [dt²/2, dt]` per axis (Bar-Shalom, Li &
/// Kirubarajan 2001, §6.3.3, section from memory). The CV model uses [`cwna_noise`]; this one is
/// the model of the classical α-β steady-state relations and is exposed
/// for filters that want it with [`predict_linear`].
pub fn dwna_noise(dt: f64, accel_var: f64) -> StateCov {
    let dt2 = dt * dt;
    axis_blocks(
        accel_var * dt2 * dt2 / 4.0,
        accel_var * dt2 * dt / 2.0,
        accel_var * dt2,
    )
}

fn axis_blocks(pp: f64, pv: f64, vv: f64) -> StateCov {
    let mut q = StateCov::zeros();
    for axis in 0..2 {
        let (p, v) = (axis, axis + 2);
        q[(p, p)] = pp;
        q[(p, v)] = pv;
        q[(v, p)] = pv;
        q[(v, v)] = vv;
    }
    q
}

/// A linear prediction `x ← F x`, `P ← F P Fᵀ + Q` (result symmetrised).
pub fn predict_linear(g: &Gaussian, f: &StateCov, q: &StateCov) -> Gaussian {
    Gaussian {
        x: f * g.x,
        p: symmetric(f * g.p * f.transpose() + q),
    }
}

/// The CV prediction of the position without process noise: the mean
/// `[e, n, ve, vn]` after `dt` and `[x_ee, x_en, x_nn]` of `F P Fᵀ`, the
/// east–north term symmetrised as [`Motion::predict`] does (its noise
/// term there is 0). Summed as [`cv_sandwich`] sums.
pub fn cv_position_parts(g: &Gaussian, dt: f64) -> ([f64; 4], [f64; 3]) {
    let (x, p) = (&g.x, &g.p);
    let mean = [x[0] + x[2] * dt, x[1] + x[3] * dt, x[2], x[3]];
    let m0 = |j: usize| p[(0, j)] + p[(2, j)] * dt;
    let m1 = |j: usize| p[(1, j)] + p[(3, j)] * dt;
    let en = ((m0(1) + m0(3) * dt + 0.0) + (m1(0) + m1(2) * dt + 0.0)) * 0.5;
    (mean, [m0(0) + m0(2) * dt, en, m1(1) + m1(3) * dt])
}

/// `F P Fᵀ` for the CV transition over `dt`, term by term in the order
/// nalgebra's product sums them (ascending inner index), leaving out the
/// terms with a structural zero of F. Row and column 4 are zero.
fn cv_sandwich(p: &StateCov, dt: f64) -> StateCov {
    // m = F P for rows and columns 0..4: F's row 4 is zero, and column 4
    // of m meets only zeros of Fᵀ.
    let mut m = [[0.0; 4]; 4];
    for j in 0..4 {
        m[0][j] = p[(0, j)] + p[(2, j)] * dt;
        m[1][j] = p[(1, j)] + p[(3, j)] * dt;
        m[2][j] = p[(2, j)];
        m[3][j] = p[(3, j)];
    }
    let mut out = StateCov::zeros();
    for (i, row) in m.iter().enumerate() {
        out[(i, 0)] = row[0] + row[2] * dt;
        out[(i, 1)] = row[1] + row[3] * dt;
        out[(i, 2)] = row[2];
        out[(i, 3)] = row[3];
    }
    out
}

/// `F P Fᵀ` for a Jacobian with the coordinated turn's zero pattern
/// (first two columns the identity's, last row `[0, 0, 0, 0, f44]`), in
/// nalgebra's summation order without the structural zeros.
fn turn_sandwich(p: &StateCov, f: &StateCov) -> StateCov {
    let mut m = StateCov::zeros();
    for j in 0..5 {
        m[(0, j)] = p[(0, j)] + p[(2, j)] * f[(0, 2)] + p[(3, j)] * f[(0, 3)] + p[(4, j)] * f[(0, 4)];
        m[(1, j)] = p[(1, j)] + p[(2, j)] * f[(1, 2)] + p[(3, j)] * f[(1, 3)] + p[(4, j)] * f[(1, 4)];
        for i in 2..4 {
            m[(i, j)] = p[(2, j)] * f[(i, 2)] + p[(3, j)] * f[(i, 3)] + p[(4, j)] * f[(i, 4)];
        }
        m[(4, j)] = p[(4, j)] * f[(4, 4)];
    }
    let mut out = StateCov::zeros();
    for i in 0..5 {
        out[(i, 0)] = m[(i, 0)] + m[(i, 2)] * f[(0, 2)] + m[(i, 3)] * f[(0, 3)] + m[(i, 4)] * f[(0, 4)];
        out[(i, 1)] = m[(i, 1)] + m[(i, 2)] * f[(1, 2)] + m[(i, 3)] * f[(1, 3)] + m[(i, 4)] * f[(1, 4)];
        for j in 2..4 {
            out[(i, j)] = m[(i, 2)] * f[(j, 2)] + m[(i, 3)] * f[(j, 3)] + m[(i, 4)] * f[(j, 4)];
        }
        out[(i, 4)] = m[(i, 4)] * f[(4, 4)];
    }
    out
}

/// `symmetric(a + q)` as [`Motion::predict`] forms it.
fn symmetric_sum(a: &StateCov, q: &StateCov) -> StateCov {
    let mut out = StateCov::zeros();
    for i in 0..5 {
        // (y + y)·0.5 is y exactly.
        out[(i, i)] = a[(i, i)] + q[(i, i)];
        for j in i + 1..5 {
            let v = ((a[(i, j)] + q[(i, j)]) + (a[(j, i)] + q[(j, i)])) * 0.5;
            out[(i, j)] = v;
            out[(j, i)] = v;
        }
    }
    out
}

fn sanitize_dt(dt: f64) -> f64 {
    if dt.is_finite() && dt > 0.0 { dt } else { 0.0 }
}

fn symmetric<const N: usize>(p: SMatrix<f64, N, N>) -> SMatrix<f64, N, N> {
    (p + p.transpose()) * 0.5
}

/// Below this |ωT| the CT coefficients come from their Taylor series: the
/// closed forms of the derivatives cancel catastrophically near 0 (relative
/// error ≈ 3ε/(ωT)², i.e. ≈ 7e-14 at the threshold), while the series,
/// truncated after five terms, is accurate to < 1e-17 relative below it.
const CT_SERIES_BELOW: f64 = 0.1;

/// The coordinated-turn coefficients for turn rate `w` over `dt`:
/// `s = sin(wT)/w`, `c = (1 − cos wT)/w` and their derivatives in `w`.
#[derive(Clone, Copy, Debug, PartialEq)]
struct TurnCoeffs {
    s: f64,
    c: f64,
    ds: f64,
    dc: f64,
    sin: f64,
    cos: f64,
}

fn turn_coeffs(w: f64, dt: f64) -> TurnCoeffs {
    let a = w * dt;
    let (sin, cos) = a.sin_cos();
    if a.abs() < CT_SERIES_BELOW {
        let a2 = a * a;
        // Horner forms of the Maclaurin series in a = wT:
        //   sin a / a              = Σ (-1)^n a^(2n) / (2n+1)!
        //   (1 - cos a) / a        = Σ (-1)^n a^(2n+1) / (2n+2)!
        //   (a cos a - sin a) / a² = Σ_{n≥1} (-1)^n 2n a^(2n-1) / (2n+1)!
        //   (a sin a - 1 + cos a) / a² = Σ_{m≥1} (-1)^(m-1) (2m-1) a^(2m-2) / (2m)!
        let s0 = 1.0 - a2 / 6.0 * (1.0 - a2 / 20.0 * (1.0 - a2 / 42.0 * (1.0 - a2 / 72.0)));
        let c0 =
            a / 2.0 * (1.0 - a2 / 12.0 * (1.0 - a2 / 30.0 * (1.0 - a2 / 56.0 * (1.0 - a2 / 90.0))));
        let ds0 = a
            * (-1.0 / 3.0
                + a2 * (1.0 / 30.0
                    + a2 * (-1.0 / 840.0 + a2 * (1.0 / 45_360.0 - a2 / 3_991_680.0))));
        let dc0 =
            0.5 + a2 * (-1.0 / 8.0 + a2 * (1.0 / 144.0 + a2 * (-1.0 / 5_760.0 + a2 / 403_200.0)));
        TurnCoeffs {
            s: dt * s0,
            c: dt * c0,
            ds: dt * dt * ds0,
            dc: dt * dt * dc0,
            sin,
            cos,
        }
    } else {
        let s = sin / w;
        // 1 − cos a = 2 sin²(a/2) avoids the cancellation of 1 − cos a.
        let half = (0.5 * a).sin();
        let c = 2.0 * half * half / w;
        TurnCoeffs {
            s,
            c,
            ds: (dt * cos - s) / w,
            dc: (dt * sin - c) / w,
            sin,
            cos,
        }
    }
}

/// Coordinated-turn mean and Jacobian (Bar-Shalom, Li & Kirubarajan 2001,
/// §11.7.2, with the state reordered to [e, n, ve, vn, ω]).
fn ct_transition(x: &StateVec, dt: f64) -> (StateVec, StateCov) {
    let (ve, vn, w) = (x[2], x[3], x[4]);
    let k = turn_coeffs(w, dt);
    let mean = StateVec::new(
        x[0] + k.s * ve - k.c * vn,
        x[1] + k.c * ve + k.s * vn,
        k.cos * ve - k.sin * vn,
        k.sin * ve + k.cos * vn,
        w,
    );
    #[rustfmt::skip]
    let f = StateCov::new(
        1.0, 0.0, k.s,   -k.c,  k.ds * ve - k.dc * vn,
        0.0, 1.0, k.c,    k.s,  k.dc * ve + k.ds * vn,
        0.0, 0.0, k.cos, -k.sin, -dt * (k.sin * ve + k.cos * vn),
        0.0, 0.0, k.sin,  k.cos,  dt * (k.cos * ve - k.sin * vn),
        0.0, 0.0, 0.0,    0.0,   1.0,
    );
    (mean, f)
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
    let pos = Vector2::new(g.x[0], g.x[1]);
    let p = g.p.fixed_view::<2, 2>(0, 0).into_owned();
    innovation_of_position(&pos, &p, z, r)
}

/// [`innovation`] from the position part of a state alone: its mean and
/// its 2×2 covariance block (the same arithmetic).
pub fn innovation_of_position(pos: &Vector2<f64>, p: &Matrix2<f64>, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<Innovation> {
    let nu = z - pos;
    let s = symmetric(p + r);
    // 2×2 Cholesky by hand: S = L Lᵀ, L = [[l11, 0], [l21, l22]].
    let (a, b, d) = (s[(0, 0)], s[(1, 0)], s[(1, 1)]);
    if !a.is_finite() || a <= 0.0 {
        return None;
    }
    let l11 = a.sqrt();
    let l21 = b / l11;
    let schur = d - l21 * l21;
    if !schur.is_finite() || schur <= 0.0 {
        return None;
    }
    let l22 = schur.sqrt();
    let det = a * schur;
    let s_inv = Matrix2::new(d, -b, -b, a) / det;
    // d² = |L⁻¹ ν|², by forward substitution.
    let y1 = nu[0] / l11;
    let y2 = (nu[1] - l21 * y1) / l22;
    let d2 = y1 * y1 + y2 * y2;
    let ln_det_s = det.ln();
    if !d2.is_finite() || !ln_det_s.is_finite() || !s_inv.iter().all(|v| v.is_finite()) {
        return None;
    }
    Some(Innovation {
        nu,
        s,
        s_inv,
        d2,
        ln_det_s,
    })
}

/// The Kalman gain `K = P Hᵀ S⁻¹` for a position measurement.
pub fn gain(g: &Gaussian, inn: &Innovation) -> Gain {
    g.p.fixed_columns::<2>(0) * inn.s_inv
}

/// Kalman update with a position measurement (Joseph form).
pub fn update(g: &Gaussian, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<(Gaussian, Innovation)> {
    let inn = innovation(g, z, r)?;
    let k = gain(g, &inn);
    let x = g.x + k * inn.nu;
    // Joseph form (I − KH) P (I − KH)ᵀ + K R Kᵀ: it stays positive
    // semi-definite under rounding and for any gain (Bar-Shalom, Li &
    // Kirubarajan 2001, §5.2.3, section from memory). H picks the first two states, so
    // (I − KH) M = M − K·(first two rows of M) and
    // M (I − KH)ᵀ = M − (first two columns of M)·Kᵀ: the same products
    // without multiplying by the zeros of KH.
    let r = symmetric(*r);
    let a = g.p - k * g.p.fixed_rows::<2>(0);
    let b = a - a.fixed_columns::<2>(0) * k.transpose();
    let p = b + k * r * k.transpose();
    let out = Gaussian { x, p: symmetric(p) };
    if !out.x.iter().chain(out.p.iter()).all(|v| v.is_finite()) {
        return None;
    }
    Some((out, inn))
}

/// The same update as [`update`], to the bit for finite input (zeros may
/// differ in sign): the Joseph form written out entry by entry in the
/// order nalgebra's products sum it, so the engine's hot path avoids the
/// generic matrix products. [`update`] stays the reference the filterpy
/// checks pin; the tests hold the two together.
pub fn update_fast(g: &Gaussian, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<(Gaussian, Innovation)> {
    let inn = innovation(g, z, r)?;
    let p = g.p.as_slice();
    let si = &inn.s_inv;
    // Column-major 5×5: entry (i, j) at i + 5 j.
    let at = |m: &[f64], i: usize, j: usize| m[i + 5 * j];
    // K = P[:, 0..2] S⁻¹.
    let mut k = [[0.0; 2]; 5];
    for (i, ki) in k.iter_mut().enumerate() {
        for (c, kic) in ki.iter_mut().enumerate() {
            *kic = si[(0, c)] * at(p, i, 0) + si[(1, c)] * at(p, i, 1);
        }
    }
    let mut x = g.x;
    for (i, xi) in x.iter_mut().enumerate() {
        *xi += inn.nu[0] * k[i][0] + inn.nu[1] * k[i][1];
    }
    let r01 = (r[(0, 1)] + r[(1, 0)]) * 0.5;
    let r = [[r[(0, 0)], r01], [r01, r[(1, 1)]]];
    // A = P − K P[0..2, :], B = A − A[:, 0..2] Kᵀ, and K R (5×2).
    let mut a = [0.0; 25];
    for j in 0..5 {
        for i in 0..5 {
            a[i + 5 * j] = at(p, i, j) - (at(p, 0, j) * k[i][0] + at(p, 1, j) * k[i][1]);
        }
    }
    let mut kr = [[0.0; 2]; 5];
    for (i, kri) in kr.iter_mut().enumerate() {
        for (c, v) in kri.iter_mut().enumerate() {
            *v = r[0][c] * k[i][0] + r[1][c] * k[i][1];
        }
    }
    let full = |i: usize, j: usize| {
        let b = a[i + 5 * j] - (k[j][0] * a[i] + k[j][1] * a[i + 5]);
        b + (k[j][0] * kr[i][0] + k[j][1] * kr[i][1])
    };
    let mut out = StateCov::zeros();
    for i in 0..5 {
        // (v + v)·0.5 is v exactly.
        out[(i, i)] = full(i, i);
        for j in i + 1..5 {
            let v = (full(i, j) + full(j, i)) * 0.5;
            out[(i, j)] = v;
            out[(j, i)] = v;
        }
    }
    // Every entry finite, without a branch per entry.
    let finite = out.as_slice().iter().chain(x.as_slice()).fold(true, |ok, v| ok & v.is_finite());
    if !finite {
        return None;
    }
    Some((Gaussian { x, p: out }, inn))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn direct(w: f64, dt: f64) -> (f64, f64, f64, f64) {
        let a = w * dt;
        let s = a.sin() / w;
        let c = (1.0 - a.cos()) / w;
        (s, c, (dt * a.cos() - s) / w, (dt * a.sin() - c) / w)
    }

    /// The series branch agrees with the closed forms where both are
    /// accurate (at the threshold the closed forms lose ~3ε/(ωT)² ≈ 7e-14).
    /// Checked against: the closed forms of s, c and their w-derivatives.
    #[test]
    fn turn_series_meets_closed_form_at_threshold() {
        let dt = 2.0;
        for &a in &[0.0999999, -0.0999999, 0.05, 0.02] {
            let w = a / dt;
            let k = turn_coeffs(w, dt);
            let (s, c, ds, dc) = direct(w, dt);
            for (got, want, scale) in [
                (k.s, s, dt),
                (k.c, c, dt),
                (k.ds, ds, dt * dt),
                (k.dc, dc, dt * dt),
            ] {
                let tol = 4.0 * f64::EPSILON / (a * a) * want.abs() + 1e-18 * scale;
                assert!((got - want).abs() <= tol, "a={a}: {got} vs {want}");
            }
        }
    }

    /// At ω = 0 the coefficients take their limits: s → T, c → 0,
    /// ds/dω → 0, dc/dω → T²/2 (the limits of the closed forms, BLK 2001
    /// §11.7.2), with no division.
    #[test]
    fn turn_coeffs_limit_at_zero() {
        let dt = 3.0;
        let k = turn_coeffs(0.0, dt);
        assert_eq!((k.s, k.c, k.ds, k.dc), (dt, 0.0, 0.0, dt * dt / 2.0));
        let k = turn_coeffs(0.0, 0.0);
        assert_eq!((k.s, k.c, k.ds, k.dc), (0.0, 0.0, 0.0, 0.0));
    }
}

#[cfg(test)]
pub(crate) mod fast_path_tests {
    //! The fast prediction against the reference one, on random states:
    //! equal as numbers (`==`, so ±0 alike), entry by entry. The
    //! reference is the path the filterpy and Kalata checks pin.
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// A random Gaussian with an exactly symmetric positive definite
    /// covariance, as the filters keep them.
    pub(crate) fn random_gaussian(rng: &mut ChaCha8Rng) -> Gaussian {
        let mut a = StateCov::zeros();
        for v in a.iter_mut() {
            *v = rng.random_range(-30.0..30.0);
        }
        let p = a * a.transpose() + StateCov::identity() * 1e-3;
        let mut x = StateVec::zeros();
        for (i, v) in x.iter_mut().enumerate() {
            *v = match i {
                0 | 1 => rng.random_range(-20_000.0..20_000.0),
                2 | 3 => rng.random_range(-15.0..15.0),
                // Turn rates on both sides of the series threshold.
                _ => rng.random_range(-0.12..0.12) * if rng.random::<bool>() { 1.0 } else { 0.01 },
            };
        }
        Gaussian { x, p: symmetric(p) }
    }

    #[test]
    fn fast_update_is_the_reference_update() {
        let mut rng = ChaCha8Rng::seed_from_u64(0x0bda);
        for trial in 0..20_000 {
            let g = random_gaussian(&mut rng);
            let z = Vector2::new(g.x[0] + rng.random_range(-200.0..200.0), g.x[1] + rng.random_range(-200.0..200.0));
            let (a, b, c): (f64, f64, f64) = (rng.random_range(10.0..3000.0), rng.random_range(10.0..3000.0), rng.random_range(-0.9..0.9));
            let off = c * (a * b).sqrt();
            // Now and then a covariance off its symmetry by rounding.
            let r = Matrix2::new(a, off, off * if trial % 3 == 0 { 1.0 + 1e-15 } else { 1.0 }, b);
            let (want, wi) = update(&g, &z, &r).unwrap();
            let (got, gi) = update_fast(&g, &z, &r).unwrap();
            assert_eq!(wi, gi);
            for (x, y) in got.x.iter().chain(got.p.iter()).zip(want.x.iter().chain(want.p.iter())) {
                assert!(x == y, "trial {trial}: {x:e} vs {y:e}");
            }
        }
    }

    #[test]
    fn fast_prediction_is_the_reference_prediction() {
        let mut rng = ChaCha8Rng::seed_from_u64(0xfa57);
        let models = [
            Motion::ConstantVelocity { accel_psd: 0.02 },
            Motion::CoordinatedTurn { accel_psd: 0.05, turn_psd: 1e-4 },
            Motion::ConstantVelocity { accel_psd: 0.5 },
        ];
        for trial in 0..20_000 {
            let g = random_gaussian(&mut rng);
            let dt = match trial % 4 {
                0 => 0.0,
                1 => rng.random_range(0.0..0.05),
                _ => rng.random_range(0.0..40.0),
            };
            for m in &models {
                let want = m.predict(&g, dt);
                let got = m.predict_fast(&g, dt);
                for (a, b) in got.x.iter().chain(got.p.iter()).zip(want.x.iter().chain(want.p.iter())) {
                    assert!(a == b, "trial {trial} {m:?} dt {dt}: {a:e} vs {b:e}");
                }
                let (x, p) = m.predict_position(&g, dt);
                let want_p = [want.p[(0, 0)], want.p[(0, 1)], want.p[(1, 1)]];
                assert!(x.iter().zip(want.x.iter()).all(|(a, b)| a == b), "trial {trial} {m:?}: {x:?}");
                assert!(p.iter().zip(want_p.iter()).all(|(a, b)| a == b), "trial {trial} {m:?}: {p:?} vs {want_p:?}");
            }
        }
    }
}
