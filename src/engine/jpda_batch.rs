//! JPDA association of one batch (`tracking.association = "jpda"`).
//!
//! Gating is that of the GNN path: each plot of the batch is tested
//! against the tracks near it with each track's IMM prediction at the
//! batch's first plot time, moved to the plot's own time at the predicted
//! velocity; a plot inside any model's gate is in the track's gate (the
//! widest model decides at the onset of a manoeuvre). A gated pair has
//! the weight `Pd · N(z; ẑ, S) / λ` from the track's combined
//! (moment-matched) prediction and each track the no-plot weight
//! `1 − Pd·Pg` (parametric Poisson clutter, Bar-Shalom & Fortmann 1988,
//! §9.3), where λ is the density of plots that are no existing track's:
//! the sensor's clutter density (`clutter_per_scan` over its coverage
//! disc) plus the density of new vessels (`new_track_density_per_km2`),
//! the same split the GNN costs use. Pd is the sensor's
//! `detection_probability`, Pg the configured `gate_probability`. A cheap
//! conservative bound ([`Reach`]) skips the IMM prediction of tracks that
//! no plot of the batch can reach.
//!
//! The tracks and plots linked by gated pairs fall into independent
//! clusters. Each cluster's marginal association probabilities come from
//! exact enumeration of its feasible joint events while their bound
//! Π(1 + deg_i) is at most `tracking.jpda_max_events`, with the JPDA*
//! pruning (Blom & Bloem 2000) against track coalescence, and from loopy
//! belief propagation beyond (see [`super::jpda_cluster`]). A batch also
//! has an event budget (`BATCH_EVENT_BUDGET`): once spent, its remaining
//! clusters use belief propagation, so a batch's time stays bounded
//! however many clusters heavy clutter makes.
//!
//! Each track with plots in its gate then takes an IMM-PDA update
//! ([`super::pda`]) with those β's:
//! - *Plot times.* Plots in a batch differ in time by a fraction of a
//!   second. The track is predicted (with the full IMM prediction) to the
//!   time of its most probable plot and updated there; every other plot's
//!   innovation is taken against that prediction moved to the plot's own
//!   time at each model's predicted velocity. The track's time becomes
//!   that of its most probable plot.
//! - *Hits.* The update counts a hit for the look when β₀ < 0.5, i.e. it is
//!   more likely than not that one of the plots was the track's (common
//!   practice). Only a hit is noted for the one-plot-per-scan rule, so a
//!   track whose plot fell in the next batch of the same scan still gets
//!   it. A track updated with β₀ ≥ 0.5 still takes the PDA update (its
//!   covariance grows towards the prediction's) and writes a record.
//! - *New tracks.* A plot whose total association probability to existing
//!   tracks is below 0.5, and that is not inside the gate of a firm track,
//!   starts a tentative track (at most `tracking.max_new_tracks_per_batch`
//!   per batch, in time order; the rest are counted as dropped starts) (as with GNN: a plot in a firm track's gate
//!   is more likely a split plot or multipath echo — common practice) —
//!   unless a coasting track with no plot in its gate in this batch takes
//!   it through its manoeuvre gate (the GNN path's second chance).
//! - *Lifecycle.* As with GNN: M-of-N confirmation, misses counted at the
//!   sensor's `scan_end`, a tentative track faster than
//!   `tracking.max_speed_kn` ended.

use super::imm::ImmState;
use super::jpda::Method;
use super::jpda_cluster::{ClusterSolver, Edge, Marginals, Variant};
use super::pda::{PdaParams, PdaPlot, imm_pda_update};
use super::*;

/// Joint events one batch may enumerate exactly, over all its clusters.
/// At the measured ~40 ns an event (BENCHMARKS.md) this is about
/// 4 ms of enumeration per batch.
pub(super) const BATCH_EVENT_BUDGET: u64 = 100_000;

const NONE: u32 = u32::MAX;

/// Counts of how clusters were solved, for tuning and benches.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct JpdaCounters {
    /// Clusters of more than one track.
    pub shared_clusters: u64,
    pub exact: u64,
    pub belief_propagation: u64,
    /// Clusters solved by belief propagation because the batch's event
    /// budget was spent (included in `belief_propagation`).
    pub over_budget: u64,
    /// JPDA* clusters too large to prune (plain JPDA used).
    pub unpruned: u64,
    pub events: u64,
    pub largest_cluster_tracks: u64,
}

/// A cheap, conservative bound on where a track's gate can reach, from
/// its current IMM state (see [`Reach::of`]).
#[derive(Clone, Copy, Default)]
struct Reach {
    /// Position of the first model's component.
    centre: Vector2<f64>,
    /// Spread of the component positions about `centre` plus the drift
    /// over the prediction (m).
    drift: f64,
    /// Largest component speed (m/s), for the drift over a plot's lead.
    vmax: f64,
    /// Upper bound on the trace of the combined predicted position
    /// covariance (m²).
    pos_trace: f64,
}

impl Reach {
    /// Bounds for the IMM prediction of `s` over `dt` (models `models`,
    /// the first `n` used), by the triangle inequality throughout:
    /// - mixing takes convex combinations, so every mixed mean lies in the
    ///   hull of the components, within `dp` (positions), `dv`
    ///   (velocities), `dw` (turn rates) of the first component, and a
    ///   mixed covariance's trace is at most the largest component trace
    ///   plus that spread squared;
    /// - a model's predicted position is `p + M v` with `M` the identity
    ///   times dt (CV) or a scaled rotation of scale 2|sin(ωT/2)/ω| ≤ dt
    ///   (CT), so every predicted mean, and their mixture, lies within
    ///   `dp + dt·vmax` of the first component's position;
    /// - the predicted position covariance is that of `p + M v + g ω`
    ///   (`g` the CT Jacobian's turn column, |g| ≤ |v|·T², as
    ///   |∂s/∂ω|, |∂c/∂ω| ≤ T²/2), whose root trace is at most the sum of
    ///   the parts' root traces, plus the process noise 2qT³/3;
    /// - the combined covariance adds the spread of the predicted means,
    ///   at most the disc's diameter squared.
    fn of(s: &ImmState, models: &[Motion], dt: f64) -> Reach {
        let n = models.len();
        let c0 = &s.comps[0];
        let centre = Vector2::new(c0.x[0], c0.x[1]);
        let (mut dp, mut dv, mut dw, mut vmax) = (0.0f64, 0.0f64, 0.0f64, 0.0f64);
        let (mut tp, mut tv, mut tw) = (0.0f64, 0.0f64, 0.0f64);
        for c in &s.comps[..n] {
            let (x, p) = (&c.x, &c.p);
            dp = dp.max((x[0] - c0.x[0]).hypot(x[1] - c0.x[1]));
            dv = dv.max((x[2] - c0.x[2]).hypot(x[3] - c0.x[3]));
            dw = dw.max((x[4] - c0.x[4]).abs());
            vmax = vmax.max(x[2].hypot(x[3]));
            tp = tp.max(p[(0, 0)] + p[(1, 1)]);
            tv = tv.max(p[(2, 2)] + p[(3, 3)]);
            tw = tw.max(p[(4, 4)]);
        }
        // Mixed means lie within the hull: speeds up to vmax, and the
        // spread about any mixed mean up to the hull's diameter (2·d).
        let sp = (tp + 4.0 * dp * dp).sqrt();
        let sv = (tv + 4.0 * dv * dv).sqrt();
        let sw = (tw + 4.0 * dw * dw).sqrt();
        let q = models
            .iter()
            .map(|m| match *m {
                Motion::ConstantVelocity { accel_psd } => accel_psd,
                Motion::CoordinatedTurn { accel_psd, .. } => accel_psd,
            })
            .fold(0.0f64, f64::max);
        let root = sp + dt * sv + vmax * dt * dt * sw;
        let drift = dp + dt * vmax;
        let pos_trace = root * root + 2.0 * q * dt * dt * dt / 3.0 + 4.0 * drift * drift;
        Reach {
            centre,
            drift,
            vmax,
            pos_trace,
        }
    }

    /// False only if a plot at `z` with covariance `r`, `lead` seconds
    /// after the prediction time, is certainly outside the gate `gate_d2`:
    /// d² ≤ g implies |ν|² ≤ g·λ_max(S) ≤ g·tr(S).
    #[inline]
    fn may_gate(&self, z: &Vector2<f64>, r: &Matrix2<f64>, lead: f64, gate_d2: f64) -> bool {
        let reach = (gate_d2 * (self.pos_trace + r[(0, 0)] + r[(1, 1)])).sqrt()
            + self.drift
            + lead.abs() * self.vmax;
        // A small relative margin covers rounding in the bound itself.
        (z - self.centre).norm() <= reach * (1.0 + 1e-9) + 1e-6
    }
}

#[derive(Clone, Copy)]
struct Pair {
    row: u32,
    col: u32,
    cluster: u32,
    ln_w: f64,
}

/// JPDA settings and the scratch space reused by every batch.
#[derive(Default)]
pub(super) struct Jpda {
    pub(super) max_events: u64,
    pub(super) prune: bool,
    /// Skip the IMM prediction of tracks no plot can gate with (on by
    /// default; off only to check that it changes nothing).
    pub(super) pregate: bool,
    cand: Vec<u32>,
    col_track: Vec<u32>,
    gate_pred: Vec<ImmState>,
    gate_comb: Vec<Gaussian>,
    /// Whether `gate_pred[col]` has been computed (it is computed only for
    /// a track some plot may gate with).
    predicted: Vec<bool>,
    reach: Vec<Reach>,
    col_taken: Vec<bool>,
    pairs: Vec<Pair>,
    sorted: Vec<Pair>,
    col_start: Vec<u32>,
    col_order: Vec<u32>,
    near_firm: Vec<bool>,
    parent: Vec<u32>,
    row_local: Vec<u32>,
    w0: Vec<f64>,
    edges: Vec<Edge>,
    marg: Marginals,
    pair_beta: Vec<f64>,
    col_beta0: Vec<f64>,
    plot_total: Vec<f64>,
    pda_plots: Vec<PdaPlot>,
    solver: ClusterSolver,
    pub(super) counters: JpdaCounters,
}

impl Jpda {
    pub(super) fn new(max_events: u64, prune: bool) -> Self {
        Jpda {
            max_events,
            prune,
            pregate: true,
            ..Default::default()
        }
    }
}

fn find(parent: &mut [u32], mut a: u32) -> u32 {
    while parent[a as usize] != a {
        let up = parent[parent[a as usize] as usize];
        parent[a as usize] = up;
        a = up;
    }
    a
}

impl Engine {
    /// Chooses plain JPDA (`false`) or the JPDA* pruning (`true`) for
    /// exact enumeration, overriding `tracking.jpda_pruning` (the
    /// coalescence comparison in tests/jpda_close_pass.rs uses both).
    pub fn set_jpda_pruning(&mut self, on: bool) {
        self.jpda.prune = on;
    }

    /// Turns the conservative pre-gate off (`false`) or on (the default):
    /// for the check that it never changes the output.
    #[doc(hidden)]
    pub fn set_jpda_pregate(&mut self, on: bool) {
        self.jpda.pregate = on;
    }

    /// How the JPDA clusters have been solved so far.
    pub fn jpda_counters(&self) -> JpdaCounters {
        self.jpda.counters
    }

    /// The IMM prediction of column `col`'s track at the batch start, and
    /// its combined Gaussian.
    fn gate_prediction(&self, sc: &mut Jpda, col: usize, at: Timestamp) {
        let t = &self.tracks[sc.col_track[col] as usize];
        let dt = at.secs_since(t.time).max(0.0);
        let pred = if dt > 0.0 {
            self.imm.predict(&t.state, dt)
        } else {
            t.state
        };
        sc.gate_comb[col] = self.imm.combine(&pred);
        sc.gate_pred[col] = pred;
        sc.predicted[col] = true;
    }

    pub(super) fn close_batch_jpda(&mut self, out: &mut Vec<TrackRecord>) {
        let batch = std::mem::take(&mut self.batch);
        self.batch_serial += 1;
        self.stats.batches += 1;
        self.batch_starts = 0;
        let serial = self.batch_serial;
        let sensor = batch.sensor;
        let model = &self.models[sensor as usize];
        let pd = model.pd;
        let min_gap = 0.5 * model.scan_period_s;
        let lambda = (model.clutter_density + self.new_track_density).max(1e-15);
        // The gate's probability from its chi-square(2) threshold (the
        // inverse of the closed form in Engine::new).
        let pg = 1.0 - (-0.5 * self.gate_d2).exp();
        let params = PdaParams { pd, pg, lambda };
        let ln_w0 = (1.0 - pd * pg).ln();
        let ln_pd_l = pd.ln() - lambda.ln();
        let variant = if self.jpda.prune {
            Variant::JpdaStar
        } else {
            Variant::Jpda
        };
        let max_events = self.jpda.max_events;
        let mut sc = std::mem::take(&mut self.jpda);
        let n_rows = batch.plots.len();
        sc.col_track.clear();
        sc.gate_pred.clear();
        sc.gate_comb.clear();
        sc.predicted.clear();
        sc.reach.clear();
        sc.pairs.clear();
        sc.near_firm.clear();
        sc.near_firm.resize(n_rows, false);

        // Gating, as in the GNN path.
        for (row, plot) in batch.plots.iter().enumerate() {
            let (cx, cy) = cell_of(&plot.z);
            sc.cand.clear();
            for dx in -1..=1 {
                for dy in -1..=1 {
                    if let Some(v) = self.grid.get(&(cx + dx, cy + dy)) {
                        sc.cand
                            .extend(v.iter().copied().filter(|&i| !self.tracks[i as usize].wide));
                    }
                }
            }
            sc.cand.extend(self.wide.iter().copied());
            // No sort: the cells are read in a fixed order and the grid's
            // contents follow from the input alone, so the column order is
            // deterministic; a track is in one cell or in `wide`, never
            // twice.
            for ci in 0..sc.cand.len() {
                let idx = sc.cand[ci];
                let t = &mut self.tracks[idx as usize];
                if t.status == TrackStatus::Ended {
                    continue;
                }
                if t.visit != serial {
                    // First plot of this batch to look at this track: a
                    // column, and the cheap bound on its gate's reach.
                    t.visit = serial;
                    t.col = sc.col_track.len() as u32;
                    let dt = batch.first.secs_since(t.time).max(0.0);
                    sc.col_track.push(idx);
                    sc.gate_pred.push(t.state);
                    sc.gate_comb.push(t.est);
                    sc.predicted.push(false);
                    sc.reach.push(Reach::of(&t.state, self.imm.models(), dt));
                }
                let t = &self.tracks[idx as usize];
                if t.last_hit(sensor)
                    .is_some_and(|h| plot.det.time.secs_since(h) < min_gap)
                {
                    continue;
                }
                let col = t.col;
                let lead = plot.det.time.secs_since(batch.first);
                if sc.pregate
                    && !sc.reach[col as usize].may_gate(&plot.z, &plot.r, lead, self.gate_d2)
                {
                    continue;
                }
                if !sc.predicted[col as usize] {
                    self.gate_prediction(&mut sc, col as usize, batch.first);
                }
                // The gate: inside any model's gate, as with GNN (the widest
                // model decides at the onset of a manoeuvre). The weight:
                // the combined prediction's likelihood.
                if imm_gate(
                    self.imm.n_models(),
                    &sc.gate_pred[col as usize],
                    lead,
                    &plot.z,
                    &plot.r,
                    self.gate_d2,
                )
                .is_none()
                {
                    continue;
                }
                let g = &sc.gate_comb[col as usize];
                let mut moved = *g;
                moved.x[0] += g.x[2] * lead;
                moved.x[1] += g.x[3] * lead;
                let Some(inn) = innovation(&moved, &plot.z, &plot.r) else {
                    continue;
                };
                if t.status.is_firm() {
                    sc.near_firm[row] = true;
                }
                sc.pairs.push(Pair {
                    row: row as u32,
                    col,
                    cluster: 0,
                    ln_w: ln_pd_l + inn.log_likelihood(),
                });
            }
        }

        // Clusters: union-find over columns [0, n_cols) and rows after.
        let n_cols = sc.col_track.len();
        sc.parent.clear();
        sc.parent.extend(0..(n_cols + n_rows) as u32);
        for k in 0..sc.pairs.len() {
            let (a, b) = (sc.pairs[k].col, n_cols as u32 + sc.pairs[k].row);
            let (ra, rb) = (find(&mut sc.parent, a), find(&mut sc.parent, b));
            if ra != rb {
                sc.parent[ra.max(rb) as usize] = ra.min(rb);
            }
        }
        for k in 0..sc.pairs.len() {
            sc.pairs[k].cluster = find(&mut sc.parent, sc.pairs[k].col);
        }
        // Group by (cluster, column, row) in linear time: the pairs were
        // made row by row, so a stable counting sort by column keeps rows
        // ascending; the columns are then ordered by cluster.
        sc.col_start.clear();
        sc.col_start.resize(n_cols, 0);
        for p in &sc.pairs {
            sc.col_start[p.col as usize] += 1;
        }
        sc.col_order.clear();
        sc.col_order
            .extend((0..n_cols as u32).filter(|&c| sc.col_start[c as usize] > 0));
        sc.col_order
            .sort_unstable_by_key(|&c| (find(&mut sc.parent, c), c));
        // Counts become each column's first slot, in cluster order.
        let mut at = 0u32;
        for &c in &sc.col_order {
            let n = sc.col_start[c as usize];
            sc.col_start[c as usize] = at;
            at += n;
        }
        sc.sorted.clear();
        sc.sorted.resize(
            sc.pairs.len(),
            Pair {
                row: 0,
                col: 0,
                cluster: 0,
                ln_w: 0.0,
            },
        );
        for p in &sc.pairs {
            let slot = &mut sc.col_start[p.col as usize];
            sc.sorted[*slot as usize] = *p;
            *slot += 1;
        }
        std::mem::swap(&mut sc.pairs, &mut sc.sorted);

        // Marginals per cluster.
        sc.pair_beta.clear();
        sc.pair_beta.resize(sc.pairs.len(), 0.0);
        sc.col_beta0.clear();
        sc.col_beta0.resize(n_cols, 1.0);
        sc.plot_total.clear();
        sc.plot_total.resize(n_rows, 0.0);
        sc.row_local.clear();
        sc.row_local.resize(n_rows, NONE);
        let mut budget = BATCH_EVENT_BUDGET;
        let mut start = 0;
        while start < sc.pairs.len() {
            let cluster = sc.pairs[start].cluster;
            let mut end = start;
            while end < sc.pairs.len() && sc.pairs[end].cluster == cluster {
                end += 1;
            }
            // Local indices: tracks in column order, plots in first-seen order.
            sc.w0.clear();
            sc.edges.clear();
            let mut n_plots = 0u32;
            let mut k = start;
            while k < end {
                let col = sc.pairs[k].col;
                let mut top = ln_w0;
                let mut e = k;
                while e < end && sc.pairs[e].col == col {
                    top = top.max(sc.pairs[e].ln_w);
                    e += 1;
                }
                // Scale each track's weights by its largest: the marginals
                // do not change (each event holds one weight of every
                // track) and products cannot overflow.
                let track = sc.w0.len() as u32;
                sc.w0.push((ln_w0 - top).exp());
                for p in &sc.pairs[k..e] {
                    let local = &mut sc.row_local[p.row as usize];
                    if *local == NONE {
                        *local = n_plots;
                        n_plots += 1;
                    }
                    sc.edges.push(Edge {
                        track,
                        plot: *local,
                        w: (p.ln_w - top).exp(),
                    });
                }
                k = e;
            }
            let allowed = max_events.min(budget);
            let o = sc.solver.solve(
                &sc.w0,
                n_plots as usize,
                &sc.edges,
                variant,
                allowed,
                &mut sc.marg,
            );
            let c = &mut sc.counters;
            if sc.w0.len() > 1 {
                c.shared_clusters += 1;
            }
            c.largest_cluster_tracks = c.largest_cluster_tracks.max(sc.w0.len() as u64);
            match o.method {
                Method::Exact => {
                    c.exact += 1;
                    c.events += o.work;
                    budget = budget.saturating_sub(o.work);
                }
                Method::BeliefPropagation => {
                    c.belief_propagation += 1;
                    if o.bound <= max_events as f64 {
                        c.over_budget += 1;
                    }
                }
            }
            c.unpruned += o.unpruned as u64;
            let mut local_track = 0;
            for k in start..end {
                let p = sc.pairs[k];
                if k == start || sc.pairs[k - 1].col != p.col {
                    sc.col_beta0[p.col as usize] = sc.marg.beta0[local_track];
                    local_track += 1;
                }
                let b = sc.marg.beta[k - start];
                sc.pair_beta[k] = b;
                sc.plot_total[p.row as usize] += b;
                sc.row_local[p.row as usize] = NONE;
            }
            start = end;
        }

        // IMM-PDA update of every track with plots in its gate.
        let rules = self.rules;
        let mut start = 0;
        while start < sc.pairs.len() {
            let col = sc.pairs[start].col;
            let mut end = start;
            while end < sc.pairs.len() && sc.pairs[end].col == col {
                end += 1;
            }
            let range = start..end;
            start = end;
            let mut best = range.start;
            for k in range.clone() {
                if sc.pair_beta[k] > sc.pair_beta[best] {
                    best = k;
                }
            }
            // Every β zero (or not a number): nothing to update with.
            if sc.pair_beta[best].is_nan() || sc.pair_beta[best] <= 0.0 {
                continue;
            }
            let at = batch.plots[sc.pairs[best].row as usize].det.time;
            sc.pda_plots.clear();
            for k in range {
                let plot = &batch.plots[sc.pairs[k].row as usize];
                sc.pda_plots.push(PdaPlot {
                    z: plot.z,
                    r: plot.r,
                    beta: sc.pair_beta[k],
                    lead_s: plot.det.time.secs_since(at),
                });
            }
            let beta0 = sc.col_beta0[col as usize];
            let idx = sc.col_track[col as usize];
            let t = &self.tracks[idx as usize];
            let dt = at.secs_since(t.time).max(0.0);
            let pred = if dt > 0.0 {
                self.imm.predict(&t.state, dt)
            } else {
                t.state
            };
            let Some(state) = imm_pda_update(&self.imm, &pred, &sc.pda_plots, beta0, &params)
            else {
                continue;
            };
            let hit = beta0 < 0.5;
            let first_hit_this_scan = t
                .last_hit(sensor)
                .is_none_or(|h| Some(h) <= self.sensor_state[sensor as usize].last_scan_end);
            let est = self.imm.combine(&state);
            let t = &mut self.tracks[idx as usize];
            t.state = state;
            t.est = est;
            t.time = at;
            if hit {
                t.note_hit(sensor, at);
                // As with GNN: a tentative track faster than any vessel
                // here is clutter strung together; end it.
                if t.status == TrackStatus::Tentative
                    && est.x[2].hypot(est.x[3]) > self.max_speed_mps
                {
                    t.status = TrackStatus::Ended;
                    self.pending_compact = true;
                    out.push(self.record_of(&self.tracks[idx as usize], at, &est, Some(sensor)));
                    continue;
                }
                if first_hit_this_scan {
                    t.look(true, &rules);
                }
            }
            out.push(self.record_of(&self.tracks[idx as usize], at, &est, Some(sensor)));
            self.refile(idx);
        }

        // New tracks from plots no track is likely to hold.
        sc.col_taken.clear();
        sc.col_taken.resize(n_cols, false);
        for p in &sc.pairs {
            sc.col_taken[p.col as usize] = true;
        }
        for (row, plot) in batch.plots.iter().enumerate() {
            if sc.plot_total[row] >= 0.5 {
                self.stats.plots_associated += 1;
                continue;
            }
            if sc.near_firm[row] {
                continue;
            }
            // Second chance, as with GNN: a coasting track with no plot in
            // its gate in this batch takes the most likely such plot inside
            // its manoeuvre gate (SECOND_CHANCE_SCALE × the gate's d²), by
            // a plain IMM update, so that a vessel turning harder than its
            // filter foresaw keeps its number (common practice).
            let lead = plot.det.time.secs_since(batch.first);
            let wide_d2 = SECOND_CHANCE_SCALE * self.gate_d2;
            let mut best: Option<(f64, usize)> = None;
            for col in 0..n_cols {
                let idx = sc.col_track[col];
                let t = &self.tracks[idx as usize];
                if t.status != TrackStatus::Coasting
                    || sc.col_taken[col]
                    || t.last_hit(sensor)
                        .is_some_and(|h| plot.det.time.secs_since(h) < min_gap)
                {
                    continue;
                }
                if sc.pregate && !sc.reach[col].may_gate(&plot.z, &plot.r, lead, wide_d2) {
                    continue;
                }
                if !sc.predicted[col] {
                    self.gate_prediction(&mut sc, col, batch.first);
                }
                if let Some(ll) = imm_gate(
                    self.imm.n_models(),
                    &sc.gate_pred[col],
                    lead,
                    &plot.z,
                    &plot.r,
                    wide_d2,
                ) && best.is_none_or(|(b, _)| ll > b)
                {
                    best = Some((ll, col));
                }
            }
            if let Some((_, col)) = best {
                sc.col_taken[col] = true;
                if self.update_track(
                    sc.col_track[col],
                    &plot.z,
                    &plot.r,
                    plot.det.time,
                    sensor,
                    out,
                ) {
                    self.stats.plots_associated += 1;
                    continue;
                }
            }
            self.start_or_hold(&plot.z, &plot.r, plot.det.time, sensor, min_gap, out);
        }
        self.jpda = sc;
        let mut plots = batch.plots;
        plots.clear();
        self.batch.plots = plots;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::imm::Switching;
    use nalgebra::SMatrix;
    use rand::{Rng, SeedableRng};

    /// The reach bound against its definition: for random IMM states
    /// (spread components, turning, long silences) and plots, whenever
    /// the exact gate test passes (the combined prediction's gate, or any
    /// model's gate, normal or manoeuvre), the bound must let the pair
    /// through.
    #[test]
    fn reach_never_drops_a_gated_pair() {
        let imm = Imm::new(
            &[
                Motion::ConstantVelocity { accel_psd: 1e-4 },
                Motion::CoordinatedTurn {
                    accel_psd: 0.01,
                    turn_psd: 1e-4,
                },
                Motion::ConstantVelocity { accel_psd: 0.3 },
            ],
            Switching::Sojourn([1800.0, 10.0, 10.0]),
        )
        .expect("imm");
        let gate_d2 = -2.0 * (1.0f64 - 0.999).ln();
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(31);
        let (mut gated, mut checked, mut model_gated) = (0, 0, 0);
        for _ in 0..3000 {
            let mut s = imm.init(
                Gaussian {
                    x: StateVec::zeros(),
                    p: StateCov::identity(),
                },
                None,
            );
            let base = StateVec::new(
                rng.random_range(-500.0..500.0),
                rng.random_range(-500.0..500.0),
                rng.random_range(-10.0..10.0),
                rng.random_range(-10.0..10.0),
                0.0,
            );
            for c in s.comps.iter_mut() {
                let mut x = base;
                x[0] += rng.random_range(-30.0..30.0);
                x[1] += rng.random_range(-30.0..30.0);
                x[2] += rng.random_range(-2.0..2.0);
                x[3] += rng.random_range(-2.0..2.0);
                x[4] = rng.random_range(-0.1..0.1);
                let a = SMatrix::<f64, 5, 5>::from_fn(|_, _| rng.random_range(-1.0..1.0));
                let scale = StateCov::from_diagonal(&StateVec::new(20.0, 20.0, 2.0, 2.0, 0.02));
                c.x = x;
                c.p = scale * (a * a.transpose() + StateCov::identity() * 0.1) * scale;
            }
            let mu: [f64; 3] = [
                rng.random_range(0.01..1.0),
                rng.random_range(0.01..1.0),
                rng.random_range(0.01..1.0),
            ];
            let total: f64 = mu.iter().sum();
            s.mu = mu.map(|m| m / total);
            let dt = if rng.random_bool(0.2) {
                rng.random_range(0.0..40.0)
            } else {
                rng.random_range(0.0..3.0)
            };
            let reach = Reach::of(&s, imm.models(), dt);
            let pred = imm.predict(&s, dt);
            let g = imm.combine(&pred);
            for _ in 0..20 {
                let lead = rng.random_range(0.0..0.2);
                let sigma = rng.random_range(5.0..40.0);
                let r = Matrix2::new(sigma * sigma, 0.0, 0.0, 0.5 * sigma * sigma);
                // Plots spread around the prediction out to a few gate radii.
                let spread = 4.0 * (g.p[(0, 0)] + g.p[(1, 1)] + r[(0, 0)] + r[(1, 1)]).sqrt();
                let z = Vector2::new(
                    g.x[0] + g.x[2] * lead + rng.random_range(-spread..spread),
                    g.x[1] + g.x[3] * lead + rng.random_range(-spread..spread),
                );
                let mut moved = g;
                moved.x[0] += g.x[2] * lead;
                moved.x[1] += g.x[3] * lead;
                let Some(inn) = innovation(&moved, &z, &r) else {
                    continue;
                };
                checked += 1;
                if inn.d2 <= gate_d2 {
                    gated += 1;
                    assert!(
                        reach.may_gate(&z, &r, lead, gate_d2),
                        "dropped a gated pair: d2 {}",
                        inn.d2
                    );
                }
                // Any model's gate, normal and manoeuvre (the engine's gates).
                for scale in [1.0, SECOND_CHANCE_SCALE] {
                    if imm_gate(3, &pred, lead, &z, &r, scale * gate_d2).is_some() {
                        model_gated += 1;
                        assert!(
                            reach.may_gate(&z, &r, lead, scale * gate_d2),
                            "dropped a pair in a model's gate ×{scale}"
                        );
                    }
                }
            }
        }
        assert!(
            gated > 1000 && model_gated > gated && checked > gated,
            "{gated}, {model_gated} of {checked}"
        );
    }
}
