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

    /// The same prediction as [`Motion::predict`] (the same formulas,
    /// summed in another order: equal to rounding) with fewer operations:
    /// `F P Fᵀ` is written out over the upper triangle for the transition's
    /// structure (the CV model's `[I dt·I; 0 I]` block, the coordinated
    /// turn's Jacobian with its identity columns and last row), the noise is
    /// added on its non-zero entries only, and the result mirrored, so it
    /// is exactly symmetric. The engine's hot path uses this one; the
    /// reference above stays the one the filterpy and Kalata checks pin,
    /// and the tests below hold the two together.
    pub fn predict_fast(&self, g: &Gaussian, dt: f64) -> Gaussian {
        let mut out = Gaussian { x: StateVec::zeros(), p: StateCov::zeros() };
        self.predict_upper(&g.x, &g.p, dt, &mut out);
        out
    }

    /// [`Motion::predict_fast`] of the Gaussian with mean `x` and the
    /// symmetric covariance whose upper triangle is that of `p` (the lower
    /// triangle is not read), written into `out`. For the CV model only
    /// the first four entries of `x` and rows and columns of `p` are read
    /// (its prediction sets the turn rate to 0; see the module docs).
    pub(crate) fn predict_upper(&self, x: &StateVec, p: &StateCov, dt: f64, out: &mut Gaussian) {
        let dt = sanitize_dt(dt);
        let u = Upper(&p.data.0);
        let o = &mut out.p.data.0;
        match *self {
            Motion::ConstantVelocity { accel_psd: q } => {
                out.x = StateVec::new(x[0] + x[2] * dt, x[1] + x[3] * dt, x[2], x[3], 0.0);
                let (qpp, qpv, qvv) = cwna_terms(dt, q);
                // Per axis a (position a, velocity a + 2) and across axes,
                // F P Fᵀ with F = [I dt·I; 0 I]: (P + dt·Pᵥ) rows, then columns.
                let m = |i: usize, j: usize| u.at(i, j) + u.at(i + 2, j) * dt;
                let mut v = [[0.0; 4]; 4];
                for (i, j) in [(0, 0), (0, 1), (1, 1)] {
                    v[i][j] = m(i, j) + m(i, j + 2) * dt;
                }
                for i in 0..2 {
                    for j in 2..4 {
                        v[i][j] = m(i, j);
                    }
                }
                v[2][2] = u.at(2, 2);
                v[2][3] = u.at(2, 3);
                v[3][3] = u.at(3, 3);
                v[0][0] += qpp;
                v[1][1] += qpp;
                v[0][2] += qpv;
                v[1][3] += qpv;
                v[2][2] += qvv;
                v[3][3] += qvv;
                for j in 0..5 {
                    for i in 0..=j {
                        let e = if j < 4 { v[i][j] } else { 0.0 };
                        o[j][i] = e;
                        o[i][j] = e;
                    }
                }
            }
            Motion::CoordinatedTurn { accel_psd, turn_psd } => {
                let (mean, a, b) = ct_parts(x, dt, turn_coeffs_fast);
                out.x = mean;
                // M = F P, the rows and columns of it that the upper
                // triangle of M Fᵀ reads.
                let (m0, m1) = turn_position_rows(&u, &a);
                let mut mv = [[0.0; 5]; 2];
                for (r, row) in mv.iter_mut().enumerate() {
                    for (c, e) in row.iter_mut().enumerate().skip(2) {
                        *e = b[r][0] * u.at(2, c) + b[r][1] * u.at(3, c) + b[r][2] * u.at(4, c);
                    }
                }
                let rows = [m0, m1, mv[0], mv[1], [0.0, 0.0, u.at(4, 2), u.at(4, 3), u.at(4, 4)]];
                let (qpp, qpv, qvv) = cwna_terms(dt, accel_psd);
                let dot3 = |m: &[f64; 5], f: &[f64; 3]| m[2] * f[0] + m[3] * f[1] + m[4] * f[2];
                for (i, m) in rows.iter().enumerate() {
                    for j in i..5 {
                        let mut e = match j {
                            0 | 1 => m[j] + dot3(m, &a[j]),
                            2 | 3 => dot3(m, &b[j - 2]),
                            _ => m[4],
                        };
                        e += match (i, j) {
                            (0, 0) | (1, 1) => qpp,
                            (0, 2) | (1, 3) => qpv,
                            (2, 2) | (3, 3) => qvv,
                            (4, 4) => turn_psd * dt,
                            _ => 0.0,
                        };
                        o[j][i] = e;
                        o[i][j] = e;
                    }
                }
            }
        }
    }

    /// The part of [`Motion::predict_fast`] that gating and position
    /// reports read: the predicted position and velocity
    /// `[e, n, ve, vn]` and the position covariance `[ee, en, nn]`, the
    /// same numbers as the full fast prediction's. Only the upper triangle
    /// of `p` is read; for the CV model only its first four rows and
    /// columns.
    pub fn predict_position(&self, g: &Gaussian, dt: f64) -> ([f64; 4], [f64; 3]) {
        self.position_upper(&g.x, &g.p, dt)
    }

    /// [`Motion::predict_position`] from a mean and the upper triangle of
    /// a covariance, as [`Motion::predict_upper`] reads them.
    pub(crate) fn position_upper(&self, x: &StateVec, p: &StateCov, dt: f64) -> ([f64; 4], [f64; 3]) {
        let dt = sanitize_dt(dt);
        if self.moves_as_cv(x) {
            let q = self.position_noise(dt);
            let (mean, pe) = cv_position(x, p, dt);
            return (mean, [pe[0] + q, pe[1], pe[2] + q]);
        }
        let u = Upper(&p.data.0);
        let (mean, a, _) = ct_parts(x, dt, turn_coeffs_fast);
        let (m0, m1) = turn_position_rows(&u, &a);
        let dot3 = |m: &[f64; 5], f: &[f64; 3]| m[2] * f[0] + m[3] * f[1] + m[4] * f[2];
        let q = self.position_noise(dt);
        (
            [mean[0], mean[1], mean[2], mean[3]],
            [m0[0] + dot3(&m0, &a[0]) + q, m0[1] + dot3(&m0, &a[1]), m1[1] + dot3(&m1, &a[1]) + q],
        )
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
        cwna_terms(dt, q).0
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
    let (pp, pv, vv) = cwna_terms(dt, q);
    axis_blocks(pp, pv, vv)
}

/// The per-axis entries of [`cwna_noise`]: position, position–velocity
/// and velocity variance.
fn cwna_terms(dt: f64, q: f64) -> (f64, f64, f64) {
    (q * dt * dt * dt / 3.0, q * dt * dt / 2.0, q * dt)
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

/// A symmetric 5×5 matrix read from the upper triangle of nalgebra's
/// column-major storage (`m[j][i]` is entry (i, j)).
#[derive(Clone, Copy)]
struct Upper<'a>(&'a [[f64; 5]; 5]);

impl Upper<'_> {
    #[inline(always)]
    fn at(&self, i: usize, j: usize) -> f64 {
        if i <= j { self.0[j][i] } else { self.0[i][j] }
    }
}

/// The CV prediction of the position without process noise, as
/// [`Motion::predict_upper`] sums it: the mean `[e, n, ve, vn]` and
/// `[ee, en, nn]` of `F P Fᵀ` from the upper triangle of `p`. `dt` must
/// be sanitised.
#[inline(always)]
pub(crate) fn cv_position(x: &StateVec, p: &StateCov, dt: f64) -> ([f64; 4], [f64; 3]) {
    let u = Upper(&p.data.0);
    let mean = [x[0] + x[2] * dt, x[1] + x[3] * dt, x[2], x[3]];
    let m = |i: usize, j: usize| u.at(i, j) + u.at(i + 2, j) * dt;
    let pe = |i: usize, j: usize| m(i, j) + m(i, j + 2) * dt;
    (mean, [pe(0, 0), pe(0, 1), pe(1, 1)])
}

/// Rows 0 and 1 of `M = F P` for a Jacobian whose rows 0–1 are
/// `[I₂ | a]`: row 0 in full, row 1 from column 1 on (what the upper
/// triangle of `M Fᵀ` reads).
#[inline(always)]
fn turn_position_rows(u: &Upper<'_>, a: &[[f64; 3]; 2]) -> ([f64; 5], [f64; 5]) {
    let mut m = [[0.0; 5]; 2];
    for (r, row) in m.iter_mut().enumerate() {
        for (c, e) in row.iter_mut().enumerate().skip(r) {
            *e = u.at(r, c) + a[r][0] * u.at(2, c) + a[r][1] * u.at(3, c) + a[r][2] * u.at(4, c);
        }
    }
    (m[0], m[1])
}

pub(crate) fn sanitize_dt(dt: f64) -> f64 {
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
        turn_series(a, dt, sin, cos)
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

/// [`turn_coeffs`] with fewer trigonometric calls, the same closed forms
/// and series otherwise. Below the series threshold none: the series give
/// `sin a / a` and `(1 − cos a) / a`, so `sin a = a·(sin a / a)` and
/// `cos a = 1 − a·((1 − cos a) / a)`, to about an ulp. Above it one, of the
/// half angle `h = a/2`: `sin a = 2 sin h cos h`, `cos a = 1 − 2 sin² h`
/// (accurate to a few ulp in absolute terms, as the reference's cosine).
fn turn_coeffs_fast(w: f64, dt: f64) -> TurnCoeffs {
    let a = w * dt;
    if a.abs() < CT_SERIES_BELOW {
        let (s0, c0) = series_ratios(a);
        return turn_series(a, dt, a * s0, 1.0 - a * c0);
    }
    let (sh, ch) = (0.5 * a).sin_cos();
    let sin = 2.0 * sh * ch;
    let cos = 1.0 - 2.0 * sh * sh;
    let s = sin / w;
    let c = 2.0 * sh * sh / w;
    TurnCoeffs {
        s,
        c,
        ds: (dt * cos - s) / w,
        dc: (dt * sin - c) / w,
        sin,
        cos,
    }
}

/// `sin a / a` and `(1 − cos a) / a` by the series of [`turn_series`].
#[inline(always)]
fn series_ratios(a: f64) -> (f64, f64) {
    let a2 = a * a;
    let s0 = 1.0 - a2 / 6.0 * (1.0 - a2 / 20.0 * (1.0 - a2 / 42.0 * (1.0 - a2 / 72.0)));
    let c0 = a / 2.0 * (1.0 - a2 / 12.0 * (1.0 - a2 / 30.0 * (1.0 - a2 / 56.0 * (1.0 - a2 / 90.0))));
    (s0, c0)
}

/// The coefficients for `|a| = |wT|` below [`CT_SERIES_BELOW`].
#[inline(always)]
fn turn_series(a: f64, dt: f64, sin: f64, cos: f64) -> TurnCoeffs {
    let a2 = a * a;
    // Horner forms of the Maclaurin series in a = wT:
    //   sin a / a              = Σ (-1)^n a^(2n) / (2n+1)!
    //   (1 - cos a) / a        = Σ (-1)^n a^(2n+1) / (2n+2)!
    //   (a cos a - sin a) / a² = Σ_{n≥1} (-1)^n 2n a^(2n-1) / (2n+1)!
    //   (a sin a - 1 + cos a) / a² = Σ_{m≥1} (-1)^(m-1) (2m-1) a^(2m-2) / (2m)!
    let (s0, c0) = series_ratios(a);
    let ds0 = a * (-1.0 / 3.0 + a2 * (1.0 / 30.0 + a2 * (-1.0 / 840.0 + a2 * (1.0 / 45_360.0 - a2 / 3_991_680.0))));
    let dc0 = 0.5 + a2 * (-1.0 / 8.0 + a2 * (1.0 / 144.0 + a2 * (-1.0 / 5_760.0 + a2 / 403_200.0)));
    TurnCoeffs {
        s: dt * s0,
        c: dt * c0,
        ds: dt * dt * ds0,
        dc: dt * dt * dc0,
        sin,
        cos,
    }
}

/// Coordinated-turn mean and Jacobian (Bar-Shalom, Li & Kirubarajan 2001,
/// §11.7.2, with the state reordered to [e, n, ve, vn, ω]).
fn ct_transition(x: &StateVec, dt: f64) -> (StateVec, StateCov) {
    let (mean, a, b) = ct_parts(x, dt, turn_coeffs);
    #[rustfmt::skip]
    let f = StateCov::new(
        1.0, 0.0, a[0][0], a[0][1], a[0][2],
        0.0, 1.0, a[1][0], a[1][1], a[1][2],
        0.0, 0.0, b[0][0], b[0][1], b[0][2],
        0.0, 0.0, b[1][0], b[1][1], b[1][2],
        0.0, 0.0, 0.0,     0.0,     1.0,
    );
    (mean, f)
}

/// The coordinated-turn mean and the free entries of its Jacobian: rows
/// 0–1 are `[I₂ | a]`, rows 2–3 are `[0 | b]` and row 4 is `[0 0 0 0 1]`.
#[inline(always)]
fn ct_parts(x: &StateVec, dt: f64, coeffs: fn(f64, f64) -> TurnCoeffs) -> (StateVec, [[f64; 3]; 2], [[f64; 3]; 2]) {
    let (ve, vn, w) = (x[2], x[3], x[4]);
    let k = coeffs(w, dt);
    let mean = StateVec::new(
        x[0] + k.s * ve - k.c * vn,
        x[1] + k.c * ve + k.s * vn,
        k.cos * ve - k.sin * vn,
        k.sin * ve + k.cos * vn,
        w,
    );
    let a = [[k.s, -k.c, k.ds * ve - k.dc * vn], [k.c, k.s, k.dc * ve + k.ds * vn]];
    let b = [[k.cos, -k.sin, -dt * (k.sin * ve + k.cos * vn)], [k.sin, k.cos, dt * (k.cos * ve - k.sin * vn)]];
    (mean, a, b)
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

/// The same update as [`update`] (the Joseph form, equal to rounding),
/// written out for a symmetric `P` and `H = [I₂ 0]`: with `U = P Hᵀ`
/// (P's first two columns) and the gain `K = U S⁻¹`,
/// `(I − KH) P (I − KH)ᵀ + K R Kᵀ = P − K Uᵀ − U Kᵀ + K S Kᵀ
/// = P − K Uᵀ + E Kᵀ` with `E = K S − U`, for any K (E is the gain's
/// rounding error, so the form keeps the Joseph form's first-order
/// insensitivity to it). Only the upper triangle is summed and then
/// mirrored. [`update`] stays the reference the filterpy checks pin; the
/// tests hold the two together.
pub fn update_fast(g: &Gaussian, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<(Gaussian, Innovation)> {
    let mut out = Gaussian { x: StateVec::zeros(), p: StateCov::zeros() };
    let f = update_into(g, z, r, &mut out)?;
    let inn = Innovation { nu: f.nu, s: f.s, s_inv: f.s_inv, d2: f.d2, ln_det_s: f.det.ln() };
    Some((out, inn))
}

/// The innovation as [`update_into`] forms it: [`Innovation`] with
/// `det S` in place of its logarithm, which the IMM folds into one
/// logarithm with the model probability.
#[derive(Clone, Copy, Debug)]
pub(crate) struct FastInnovation {
    pub nu: Vector2<f64>,
    pub s: Matrix2<f64>,
    pub s_inv: Matrix2<f64>,
    pub d2: f64,
    pub det: f64,
}

/// [`innovation`] in closed form for the 2×2 `S`: `S` is positive
/// definite iff `S₀₀ > 0` and `det S > 0` (Sylvester's criterion), `S⁻¹`
/// is the adjugate over the determinant and `d² = νᵀ S⁻¹ ν`; the
/// reference reaches the same numbers (to rounding) through a Cholesky factor, with two
/// square roots and more divisions.
#[inline(always)]
fn innovation_fast(g: &Gaussian, z: &Vector2<f64>, r: &Matrix2<f64>) -> Option<FastInnovation> {
    let nu = Vector2::new(z[0] - g.x[0], z[1] - g.x[1]);
    let a = g.p[(0, 0)] + r[(0, 0)];
    let b = ((g.p[(0, 1)] + r[(0, 1)]) + (g.p[(1, 0)] + r[(1, 0)])) * 0.5;
    let d = g.p[(1, 1)] + r[(1, 1)];
    let det = a * d - b * b;
    // Negated comparisons so that NaN fails them.
    if !(a > 0.0 && det > 0.0 && a.is_finite() && det.is_finite()) {
        return None;
    }
    let inv = 1.0 / det;
    let (i00, i01, i11) = (d * inv, -b * inv, a * inv);
    let d2 = nu[0] * (i00 * nu[0] + i01 * nu[1]) + nu[1] * (i01 * nu[0] + i11 * nu[1]);
    if !(d2.is_finite() && inv.is_finite() && i00.is_finite() && i01.is_finite() && i11.is_finite()) {
        return None;
    }
    Some(FastInnovation { nu, s: Matrix2::new(a, b, b, d), s_inv: Matrix2::new(i00, i01, i01, i11), d2, det })
}

/// [`update_fast`] written into `out`; `None` (with `out` unspecified)
/// where [`update`] gives `None`. `g.p` must be exactly symmetric.
pub(crate) fn update_into(g: &Gaussian, z: &Vector2<f64>, r: &Matrix2<f64>, out: &mut Gaussian) -> Option<FastInnovation> {
    let inn = innovation_fast(g, z, r)?;
    let p = &g.p.data.0;
    // A CV component (turn rate 0 with no variance or covariance, as the
    // CV prediction leaves it) keeps that structure exactly: its gain's
    // turn-rate row is 0, so the general sums give 0 there. Only the 4×4
    // block is summed then.
    let cv = g.x[4] == 0.0 && p[4].iter().fold(true, |ok, v| ok & (*v == 0.0));
    let finite = if cv {
        out.x[4] = 0.0;
        for i in 0..5 {
            out.p.data.0[4][i] = 0.0;
            out.p.data.0[i][4] = 0.0;
        }
        joseph::<4>(g, &inn, out)
    } else {
        joseph::<5>(g, &inn, out)
    };
    finite.then_some(inn)
}

/// The mean and the covariance of [`update_into`] over the first `D`
/// states (`D` a constant so that the loops unroll); whether every entry
/// written is finite.
#[inline(always)]
fn joseph<const D: usize>(g: &Gaussian, inn: &FastInnovation, out: &mut Gaussian) -> bool {
    let p = &g.p.data.0;
    let (si, s) = (&inn.s_inv.data.0, &inn.s.data.0);
    // U's row i is [P(i, 0), P(i, 1)] = [p[0][i], p[1][i]].
    let mut k = [[0.0; 2]; D];
    let mut e = [[0.0; 2]; D];
    for i in 0..D {
        let (u0, u1) = (p[0][i], p[1][i]);
        for c in 0..2 {
            k[i][c] = u0 * si[c][0] + u1 * si[c][1];
        }
        e[i][0] = k[i][0] * s[0][0] + k[i][1] * s[0][1] - u0;
        e[i][1] = k[i][0] * s[1][0] + k[i][1] * s[1][1] - u1;
    }
    let mut finite = true;
    for i in 0..D {
        let v = g.x[i] + (k[i][0] * inn.nu[0] + k[i][1] * inn.nu[1]);
        finite &= v.is_finite();
        out.x[i] = v;
    }
    let o = &mut out.p.data.0;
    for j in 0..D {
        for i in 0..=j {
            let v = p[j][i] - (k[i][0] * p[0][j] + k[i][1] * p[1][j]) + (e[i][0] * k[j][0] + e[i][1] * k[j][1]);
            // Without a branch per entry.
            finite &= v.is_finite();
            o[j][i] = v;
            o[i][j] = v;
        }
    }
    finite
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

    /// The fast evaluation against the reference one, on both sides
    /// of the series threshold and over the turn rates and intervals of
    /// the filters (up to 0.12 rad/s, 40 s): equal to a few ulp of each
    /// coefficient's scale (T for s and c, T² for the derivatives, 1 for
    /// sine and cosine).
    #[test]
    fn fast_turn_coefficients_are_the_reference_ones() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(0x7a1f);
        for trial in 0..20_000 {
            let dt: f64 = rng.random_range(0.0..40.0);
            let w: f64 = rng.random_range(-0.12..0.12) * if trial % 2 == 0 { 1.0 } else { 0.01 };
            let (k, f) = (turn_coeffs(w, dt), turn_coeffs_fast(w, dt));
            for (got, want, scale) in [(f.s, k.s, dt), (f.c, k.c, dt), (f.ds, k.ds, dt * dt), (f.dc, k.dc, dt * dt), (f.sin, k.sin, 1.0), (f.cos, k.cos, 1.0)] {
                assert!((got - want).abs() <= 1e-14 * scale, "trial {trial} w {w} dt {dt}: {got:e} vs {want:e}");
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
    //! The fast prediction and update against the reference ones
    //! ([`Motion::predict`], [`update`]: the paths the filterpy and Kalata
    //! checks pin), on random states: the same formulas summed in another
    //! order, so equal to rounding. Each entry is held to 1e-9 relative:
    //! a covariance entry (i, j) against `√(P_ii P_jj)` (the size an
    //! off-diagonal entry can have), a mean entry against its own size
    //! plus its standard deviation.
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    pub(crate) const TOL: f64 = 1e-9;

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

    /// `got` equals `want` to relative `tol` entry by entry (scales as in
    /// the module docs); exactly symmetric.
    pub(crate) fn close_gaussian(got: &Gaussian, want: &Gaussian, tol: f64) -> Result<(), String> {
        let sd = |i: usize| want.p[(i, i)].abs().max(got.p[(i, i)].abs()).sqrt();
        for i in 0..5 {
            let scale = want.x[i].abs().max(got.x[i].abs()) + sd(i);
            if !((got.x[i] - want.x[i]).abs() <= tol * scale) {
                return Err(format!("x[{i}]: {:e} vs {:e}", got.x[i], want.x[i]));
            }
            for j in 0..5 {
                let (a, b) = (got.p[(i, j)], want.p[(i, j)]);
                if !((a - b).abs() <= tol * sd(i) * sd(j)) {
                    return Err(format!("p[{i},{j}]: {a:e} vs {b:e}"));
                }
                if got.p[(i, j)] != got.p[(j, i)] {
                    return Err(format!("p[{i},{j}] not symmetric"));
                }
            }
        }
        Ok(())
    }

    /// Relative closeness of innovations (scale: √(S_ii S_jj); ν and d²
    /// against their own size plus 1).
    fn close_innovation(a: &Innovation, b: &Innovation) -> bool {
        let c = |u: f64, v: f64, s: f64| (u - v).abs() <= TOL * s;
        let sd = |i: usize| b.s[(i, i)].sqrt();
        (0..2).all(|i| c(a.nu[i], b.nu[i], b.nu[i].abs() + sd(i)))
            && (0..2).all(|i| (0..2).all(|j| c(a.s[(i, j)], b.s[(i, j)], sd(i) * sd(j)) && c(a.s_inv[(i, j)], b.s_inv[(i, j)], 1.0 / (sd(i) * sd(j)))))
            && c(a.d2, b.d2, b.d2 + 1.0)
            && c(a.ln_det_s, b.ln_det_s, b.ln_det_s.abs() + 1.0)
    }

    /// The upper triangle of `g.p` with the lower one overwritten by noise:
    /// what the fast paths may be handed.
    fn garbled_lower(g: &Gaussian, rng: &mut ChaCha8Rng) -> Gaussian {
        let mut out = *g;
        for j in 0..5 {
            for i in j + 1..5 {
                out.p[(i, j)] = rng.random_range(-1e6..1e6);
            }
        }
        out
    }

    #[test]
    fn fast_update_is_the_reference_update() {
        let mut rng = ChaCha8Rng::seed_from_u64(0x0bda);
        for trial in 0..20_000 {
            let mut g = random_gaussian(&mut rng);
            if trial % 4 == 1 {
                // A CV component: turn-rate row and column 0.
                g.x[4] = 0.0;
                for k in 0..5 {
                    g.p[(4, k)] = 0.0;
                    g.p[(k, 4)] = 0.0;
                }
            }
            let z = Vector2::new(g.x[0] + rng.random_range(-200.0..200.0), g.x[1] + rng.random_range(-200.0..200.0));
            let (a, b, c): (f64, f64, f64) = (rng.random_range(10.0..3000.0), rng.random_range(10.0..3000.0), rng.random_range(-0.9..0.9));
            let off = c * (a * b).sqrt();
            // Now and then a covariance off its symmetry by rounding.
            let r = Matrix2::new(a, off, off * if trial % 3 == 0 { 1.0 + 1e-15 } else { 1.0 }, b);
            let (want, wi) = update(&g, &z, &r).unwrap();
            let (got, gi) = update_fast(&g, &z, &r).unwrap();
            assert!(close_innovation(&gi, &wi), "trial {trial}: {gi:?} vs {wi:?}");
            if let Err(e) = close_gaussian(&got, &want, TOL) {
                panic!("trial {trial}: {e}");
            }
            if trial % 4 == 1 {
                // The CV structure survives the update exactly.
                assert!(got.x[4] == 0.0 && (0..5).all(|k| got.p[(4, k)] == 0.0), "trial {trial}");
            }
        }
    }

    #[test]
    fn fast_update_refuses_what_the_reference_refuses() {
        // Checked against: the reference's `None` cases (S not positive
        // definite, non-finite input).
        let g = Gaussian { x: StateVec::zeros(), p: StateCov::identity() };
        let z = Vector2::new(1.0, 2.0);
        for r in [Matrix2::new(-1.0, 0.0, 0.0, 1.0), Matrix2::new(1.0, 3.0, 3.0, 1.0), Matrix2::new(f64::NAN, 0.0, 0.0, 1.0)] {
            assert!(update(&g, &z, &r).is_none() && update_fast(&g, &z, &r).is_none(), "{r:?}");
        }
        let bad = Vector2::new(f64::INFINITY, 0.0);
        let r = Matrix2::identity();
        assert_eq!(update(&g, &bad, &r).is_none(), update_fast(&g, &bad, &r).is_none());
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
            let mut g = random_gaussian(&mut rng);
            if trial % 5 == 3 {
                // At rest and not turning, as a new track starts.
                g.x[2] = 0.0;
                g.x[3] = 0.0;
                g.x[4] = 0.0;
            }
            let dt = match trial % 4 {
                0 => 0.0,
                1 => rng.random_range(0.0..0.05),
                _ => rng.random_range(0.0..40.0),
            };
            for m in &models {
                let want = m.predict(&g, dt);
                let got = m.predict_fast(&g, dt);
                if let Err(e) = close_gaussian(&got, &want, TOL) {
                    panic!("trial {trial} {m:?} dt {dt}: {e}");
                }
                // Only the upper triangle is read.
                let h = garbled_lower(&g, &mut rng);
                assert_eq!(m.predict_fast(&h, dt), got, "trial {trial} {m:?}");
                // The position part: the full fast prediction's numbers
                // (the same arithmetic), so the reference's to rounding.
                let (x, p) = m.predict_position(&h, dt);
                let got_p = [got.p[(0, 0)], got.p[(0, 1)], got.p[(1, 1)]];
                assert!(x.iter().zip(got.x.iter()).all(|(a, b)| a == b), "trial {trial} {m:?}: {x:?}");
                assert!(p.iter().zip(got_p.iter()).all(|(a, b)| a == b), "trial {trial} {m:?}: {p:?} vs {got_p:?}");
            }
        }
    }
}
