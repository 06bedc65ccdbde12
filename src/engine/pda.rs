//! Probabilistic data association (PDA) update of one track with the
//! plots in its gate and their association probabilities, for a single
//! Gaussian and for an IMM state (IMM-PDA).
//!
//! The PDAF update (Bar-Shalom & Fortmann 1988, ch. 6; Bar-Shalom, Daum &
//! Huang 2009, "The probabilistic data association filter", IEEE Control
//! Systems Magazine 29(6)), with β₀ the probability that no plot is the
//! track's and β_j that plot j is:
//!
//! ```text
//! ν  = Σ_j β_j ν_j                      combined innovation
//! x⁺ = x + K ν
//! P⁺ = β₀ P + (1 − β₀)(P − K S Kᵀ) + K [Σ_j β_j ν_j ν_jᵀ − ν νᵀ] Kᵀ
//! ```
//!
//! IMM-PDA: the β's come from the track's combined (moment-matched)
//! prediction and are shared by every model; each model then does the
//! PDA update above with its own prediction, and the model probabilities
//! are updated with each model's likelihood of the validated set
//! (Bar-Shalom, Li & Kirubarajan 2001, ch. 11, the IMM-PDAF; section from
//! memory), up to a factor common to all models:
//!
//! ```text
//! Λ_m = (1 − Pd·Pg) + Σ_j Pd · N(ν_jm; 0, S_jm) / λ
//! μ_m⁺ ∝ c̄_m · Λ_m
//! ```
//!
//! Contract:
//! - Plots carry their own time offset from the update time (`lead_s`):
//!   a plot's innovation is taken against the model's prediction moved
//!   to the plot's time at the model's predicted velocity (position only;
//!   within one batch offsets are a fraction of a second, so the growth of
//!   the covariance over them is neglected — common practice).
//! - The gain uses one innovation covariance `S = H P Hᵀ + R̄`, with `R̄`
//!   the β-weighted mean of the plots' covariances: plots near one track in
//!   one batch come from one radar at nearly the same range and bearing,
//!   so their `R` differ by a few per cent at most, and the single-gain
//!   form of the PDAF is kept. The likelihood of each plot uses its own
//!   `R_j`.
//! - `β₀ + Σ β_j` must be 1 (the caller's marginals).
//! - Everything is on the stack; `None` when `S` is not positive definite
//!   or a result is not finite.

use super::filter::{Gaussian, StateCov, innovation};
use super::imm::{Imm, ImmState, MAX_MODELS};
use nalgebra::{Matrix2, Vector2};

/// One validated plot's part in a PDA update.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PdaPlot {
    /// Plot position in the site plane.
    pub z: Vector2<f64>,
    /// Its covariance.
    pub r: Matrix2<f64>,
    /// Association probability β_j of this plot to the track.
    pub beta: f64,
    /// Plot time minus update time (s).
    pub lead_s: f64,
}

/// The clutter model's parameters for the model likelihoods.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PdaParams {
    /// Detection probability.
    pub pd: f64,
    /// Gate probability.
    pub pg: f64,
    /// Spatial density of plots that are not the track's (per m²).
    pub lambda: f64,
}

/// The prediction `g` moved by `lead` seconds at its own velocity.
#[inline]
fn moved(g: &Gaussian, lead: f64) -> Gaussian {
    let mut m = *g;
    m.x[0] += g.x[2] * lead;
    m.x[1] += g.x[3] * lead;
    m
}

/// PDA update of the Gaussian `g` with `plots` and the no-plot
/// probability `beta0`. Returns the updated Gaussian and
/// ln Λ = ln((1 − Pd·Pg) + Σ_j Pd·N(ν_j; 0, S_j)/λ).
pub fn pda_update(
    g: &Gaussian,
    plots: &[PdaPlot],
    beta0: f64,
    params: &PdaParams,
) -> Option<(Gaussian, f64)> {
    // ln Λ by a running log-sum-exp: plot terms are large when λ is small.
    let miss = (1.0 - params.pd * params.pg).max(0.0);
    let (mut top, mut acc) = if miss > 0.0 {
        (miss.ln(), 1.0)
    } else {
        (f64::NEG_INFINITY, 0.0)
    };
    let ln_pd_over_l = params.pd.ln() - params.lambda.ln();
    let mut sum_beta = 0.0;
    let mut rbar = Matrix2::zeros();
    for p in plots {
        let inn = innovation(&moved(g, p.lead_s), &p.z, &p.r)?;
        let term = ln_pd_over_l + inn.log_likelihood();
        if term > top {
            acc = acc * (top - term).exp() + 1.0;
            top = term;
        } else {
            acc += (term - top).exp();
        }
        sum_beta += p.beta;
        rbar += p.r * p.beta;
    }
    let ln_lambda = top + acc.ln();
    if sum_beta.is_nan() || sum_beta <= 0.0 {
        return ln_lambda.is_finite().then_some((*g, ln_lambda));
    }
    let rbar = rbar / sum_beta;
    let hx = g.x.fixed_rows::<2>(0).into_owned();
    // S and the gain from the common R̄; ν_j against the moved prediction.
    let inn0 = innovation(g, &hx, &rbar)?;
    let k = g.p.fixed_columns::<2>(0) * inn0.s_inv;
    let mut nu = Vector2::zeros();
    let mut spread = Matrix2::zeros();
    for p in plots {
        let nu_j = p.z - hx - g.x.fixed_rows::<2>(2) * p.lead_s;
        nu += nu_j * p.beta;
        spread += nu_j * nu_j.transpose() * p.beta;
    }
    spread -= nu * nu.transpose();
    let x = g.x + k * nu;
    // P − K S Kᵀ in Joseph form, (I − KH) P (I − KH)ᵀ + K R̄ Kᵀ, which is
    // equal for this gain and stays positive semi-definite under rounding
    // (as in filter::update).
    let a = g.p - k * g.p.fixed_rows::<2>(0);
    let pc = a - a.fixed_columns::<2>(0) * k.transpose() + k * rbar * k.transpose();
    let p: StateCov = g.p * beta0 + pc * (1.0 - beta0) + k * spread * k.transpose();
    let out = Gaussian {
        x,
        p: (p + p.transpose()) * 0.5,
    };
    if !(ln_lambda.is_finite() && out.x.iter().chain(out.p.iter()).all(|v| v.is_finite())) {
        return None;
    }
    Some((out, ln_lambda))
}

/// IMM-PDA update of the predicted IMM state `pred` (its `mu` the
/// predicted model probabilities c̄). A model whose update fails keeps its
/// prediction and drops to probability 0 for this scan, as in
/// [`Imm::update`]; `None` if every model fails.
pub fn imm_pda_update(
    imm: &Imm,
    pred: &ImmState,
    plots: &[PdaPlot],
    beta0: f64,
    params: &PdaParams,
) -> Option<ImmState> {
    let n = imm.n_models();
    let mut out = *pred;
    let mut log_w = [f64::NEG_INFINITY; MAX_MODELS];
    for ((comp, lw), mu) in out.comps.iter_mut().zip(&mut log_w).zip(pred.mu).take(n) {
        if let Some((g, ln_l)) = pda_update(comp, plots, beta0, params) {
            *comp = g;
            *lw = mu.ln() + ln_l;
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
    let sum: f64 = out.mu.iter().sum();
    out.mu.iter_mut().for_each(|m| *m /= sum);
    Some(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::filter::{Motion, StateVec, update as kalman_update};

    fn prior() -> Gaussian {
        let x = StateVec::new(100.0, -50.0, 3.0, 1.5, 0.01);
        let mut p = StateCov::identity() * 4.0;
        p[(0, 0)] = 400.0;
        p[(1, 1)] = 250.0;
        p[(0, 1)] = 30.0;
        p[(1, 0)] = 30.0;
        p[(0, 2)] = 20.0;
        p[(2, 0)] = 20.0;
        p[(1, 3)] = 15.0;
        p[(3, 1)] = 15.0;
        p[(4, 4)] = 1e-4;
        Gaussian { x, p }
    }

    const PARAMS: PdaParams = PdaParams {
        pd: 0.9,
        pg: 0.999,
        lambda: 1e-6,
    };

    /// Definition: with one plot and β₀ = 0 the PDAF is the Kalman filter
    /// (Bar-Shalom, Daum & Huang 2009: the spread term vanishes and
    /// P⁺ = P − K S Kᵀ).
    #[test]
    fn one_sure_plot_is_the_kalman_update() {
        let g = prior();
        let z = Vector2::new(112.0, -41.0);
        let r = Matrix2::new(144.0, 10.0, 10.0, 300.0);
        let (k, _) = kalman_update(&g, &z, &r).unwrap();
        let plot = PdaPlot {
            z,
            r,
            beta: 1.0,
            lead_s: 0.0,
        };
        let (p, _) = pda_update(&g, &[plot], 0.0, &PARAMS).unwrap();
        for (a, b) in p.x.iter().zip(k.x.iter()) {
            assert!((a - b).abs() < 1e-9 * b.abs().max(1.0));
        }
        for (a, b) in p.p.iter().zip(k.p.iter()) {
            assert!((a - b).abs() < 1e-9 * b.abs().max(1.0));
        }
    }

    /// Definition: with β₀ = 1 no plot is the track's and the update
    /// returns the prediction.
    #[test]
    fn no_plot_is_the_prediction() {
        let g = prior();
        let plots = [
            PdaPlot {
                z: Vector2::new(130.0, -20.0),
                r: Matrix2::identity() * 100.0,
                beta: 0.0,
                lead_s: 0.01,
            },
            PdaPlot {
                z: Vector2::new(80.0, -60.0),
                r: Matrix2::identity() * 120.0,
                beta: 0.0,
                lead_s: -0.02,
            },
        ];
        let (p, ln_l) = pda_update(&g, &plots, 1.0, &PARAMS).unwrap();
        assert_eq!(p, g);
        // Λ ≥ 1 − Pd·Pg: the miss term alone.
        assert!(ln_l >= (1.0 - PARAMS.pd * PARAMS.pg).ln());
    }

    /// The moved innovation: a plot taken `lead` seconds later at the
    /// position the track will then have has zero innovation.
    #[test]
    fn lead_moves_the_prediction() {
        let g = prior();
        let lead = 0.12;
        let z = Vector2::new(g.x[0] + g.x[2] * lead, g.x[1] + g.x[3] * lead);
        let plot = PdaPlot {
            z,
            r: Matrix2::identity() * 100.0,
            beta: 1.0,
            lead_s: lead,
        };
        let (p, _) = pda_update(&g, &[plot], 0.0, &PARAMS).unwrap();
        assert!((p.x - g.x).norm() < 1e-12);
    }

    /// Definition: IMM-PDA with one model is the PDA update with μ = 1.
    #[test]
    fn one_model_imm_is_pda() {
        let imm = Imm::new(
            &[Motion::ConstantVelocity { accel_psd: 0.1 }],
            crate::engine::imm::Switching::Sojourn([60.0, 1.0, 1.0]),
        )
        .unwrap();
        let s = imm.init(prior(), None);
        let pred = imm.predict(&s, 2.5);
        let plots = [
            PdaPlot {
                z: Vector2::new(110.0, -45.0),
                r: Matrix2::identity() * 100.0,
                beta: 0.6,
                lead_s: 0.0,
            },
            PdaPlot {
                z: Vector2::new(95.0, -30.0),
                r: Matrix2::identity() * 110.0,
                beta: 0.3,
                lead_s: 0.05,
            },
        ];
        let u = imm_pda_update(&imm, &pred, &plots, 0.1, &PARAMS).unwrap();
        let (g, _) = pda_update(&pred.comps[0], &plots, 0.1, &PARAMS).unwrap();
        assert_eq!(u.comps[0], g);
        assert_eq!(u.mu[0], 1.0);
    }
}
