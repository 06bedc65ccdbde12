//! Two-plot track initiation (`tracking.plots_to_start = 2`, the default).
//!
//! A radar plot that no track takes, and that lies in no firm track's
//! gate, does not start a track at once. It is held as a *candidate*: its
//! position, its error covariance, its time and sensor. A later plot that
//! no track takes (in a later batch) starts a tentative track with a
//! candidate when it falls inside the gate that a track started on the
//! candidate would have: the same filter as any new track (the IMM
//! started at the candidate's plot with zero velocity and
//! `tracking.init_speed_sigma_mps`), predicted to the plot and gated as any
//! track is. The track is started at the candidate and then updated with
//! the plot, so its number, filter and look history are those of a track
//! started on the first plot and updated by the second; its first track
//! record is the one of that update. Of several candidates in the gate the
//! most likely is taken (ties: the oldest).
//!
//! What it changes: a lone plot, nearly always clutter, makes no track, no
//! track record and no work in later scans. Holding single plots until a
//! second one agrees is common practice in track initiation (logic-based
//! initiation, M-of-N on the first looks).
//!
//! A candidate lives 1.5 scan periods of its own radar: one scan to be
//! seen again by its radar, or by any other sensor in between. Looks are
//! not counted for candidates, so a vessel whose second plot is missed
//! starts from its next pair of plots. Candidates are kept in creation
//! order with a grid of their own; entries that were used or have expired
//! are skipped and dropped when they outnumber the live ones. The order in
//! which they are searched is fixed, so the result does not depend on the
//! grid's layout.
//!
//! `tracking.plots_to_start = 1` starts a tentative track on every plot no
//! track takes, as before.

use super::*;
use serde::{Deserialize, Serialize};

/// How many of its radar's scan periods a candidate waits for a second plot.
pub(crate) const CANDIDATE_SCANS: f64 = 1.5;

/// The cheap reject of [`Engine::pair_likelihood`] is `|ν|² > this ×
/// gate_d2 × var`: 1 % above the exact bound, against rounding.
const PAIR_BOUND_MARGIN: f64 = 1.01;

/// A plot that no track took, waiting for a second one.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Candidate {
    /// Position in the site plane (m).
    pub z: [f64; 2],
    /// Error covariance: `[xx, xy, yy]` (m²).
    pub r: [f64; 3],
    pub time: Timestamp,
    /// No plot after this time pairs with it.
    pub expires: Timestamp,
    pub sensor: SensorId,
    /// Already started a track.
    pub used: bool,
}

impl Candidate {
    fn live_at(&self, t: Timestamp) -> bool {
        !self.used && t <= self.expires
    }
}

/// A dense grid over the radars' coverage, for finding the candidates
/// near a plot. Its cells are at least twice the farthest reach of a
/// candidate pair, so the four cells nearest a plot (its own and the
/// neighbours on the sides of the cell it is closer to) hold every
/// candidate it can pair with: a point within half a cell of the plot
/// lies in its own cell or in the neighbour on that side, on each axis.
/// A candidate outside the grid (a plot beyond every radar's range and
/// reach) goes in a list that every search reads.
#[derive(Clone, Debug, Default)]
struct CandidateGrid {
    x0: f64,
    y0: f64,
    cell: f64,
    nx: usize,
    ny: usize,
    /// `nx` and `ny` as floats (an integer-to-float conversion is not
    /// free, and every search and filing compares against them).
    nx_f: f64,
    ny_f: f64,
    cells: Vec<Vec<u32>>,
    outside: Vec<u32>,
}

/// Most cells the dense grid has on a side; wider coverage gets larger
/// cells.
const MAX_CELLS_PER_SIDE: f64 = 256.0;

impl CandidateGrid {
    /// A grid over `[x0, x1] × [y0, y1]` for pairs reaching `reach` metres.
    fn new(x0: f64, y0: f64, x1: f64, y1: f64, reach: f64) -> CandidateGrid {
        if !(x1 > x0 && y1 > y0 && reach.is_finite()) {
            return CandidateGrid::default();
        }
        let side = (x1 - x0).max(y1 - y0);
        let cell = (2.0 * reach).max(side / MAX_CELLS_PER_SIDE).max(1.0);
        let nx = ((x1 - x0) / cell).ceil() as usize + 1;
        let ny = ((y1 - y0) / cell).ceil() as usize + 1;
        CandidateGrid { x0, y0, cell, nx, ny, nx_f: nx as f64, ny_f: ny as f64, cells: vec![Vec::new(); nx * ny], outside: Vec::new() }
    }

    /// The cell's column and row, if inside the grid.
    fn locate(&self, x: f64, y: f64) -> Option<(usize, usize)> {
        let fx = (x - self.x0) / self.cell;
        let fy = (y - self.y0) / self.cell;
        if !(fx >= 0.0 && fy >= 0.0 && fx < self.nx_f && fy < self.ny_f) {
            return None;
        }
        // In [0, n) with n ≤ MAX_CELLS_PER_SIDE + 2: truncation through
        // u32 is the same as through usize, and cheaper.
        Some((fx as u32 as usize, fy as u32 as usize))
    }

    fn file(&mut self, i: u32, x: f64, y: f64) {
        match self.locate(x, y) {
            Some((ix, iy)) => self.cells[iy * self.nx + ix].push(i),
            None => self.outside.push(i),
        }
    }

    fn clear(&mut self) {
        for c in &mut self.cells {
            c.clear();
        }
        self.outside.clear();
    }

    /// Calls `f` with every candidate filed where a pair with a plot at
    /// (x, y) can reach: the up to four nearest cells, then the outside
    /// list. A plot less than half a cell outside the grid reads the
    /// edge cells beside it; one farther out can reach nothing inside.
    fn near(&self, x: f64, y: f64, mut f: impl FnMut(u32)) {
        if self.nx > 0 && self.ny > 0 {
            let (cols, nc) = near_on_axis((x - self.x0) / self.cell, self.nx, self.nx_f);
            let (rows, nr) = near_on_axis((y - self.y0) / self.cell, self.ny, self.ny_f);
            for &iy in &rows[..nr] {
                for &ix in &cols[..nc] {
                    for &i in &self.cells[iy * self.nx + ix] {
                        f(i);
                    }
                }
            }
        }
        for &i in &self.outside {
            f(i);
        }
    }
}

/// The cells on one axis within half a cell of the coordinate `f` (in
/// cells from the grid's edge) on a grid of `n` cells: its own and the
/// nearer neighbour, clipped to the grid. `top` is `n` as a float.
fn near_on_axis(f: f64, n: usize, top: f64) -> ([usize; 2], usize) {
    if !(f >= -0.5 && f < top + 0.5) {
        return ([0, 0], 0);
    }
    if f < 0.0 {
        return ([0, 0], 1);
    }
    if f >= top {
        return ([n - 1, 0], 1);
    }
    // In [0, n): as in `locate`.
    let iu = f as u32;
    let i = iu as usize;
    if f - f64::from(iu) >= 0.5 {
        if i + 1 < n { ([i, i + 1], 2) } else { ([i, 0], 1) }
    } else if i > 0 {
        ([i, i - 1], 2)
    } else {
        ([i, 0], 1)
    }
}

/// The candidates, in creation order, and a grid of them.
#[derive(Clone, Debug, Default)]
pub(crate) struct Candidates {
    pub(crate) list: Vec<Candidate>,
    grid: CandidateGrid,
    /// Entries in `list` when it was last compacted.
    after_compact: usize,
}

impl Candidates {
    /// An empty store whose grid covers every radar's range (in the site
    /// plane) for pairs reaching `reach` metres.
    pub(crate) fn new(models: &[SensorModel], reach: f64) -> Candidates {
        let (x0, y0, x1, y1) = super::sensors::coverage_box(models, reach);
        Candidates { list: Vec::new(), grid: CandidateGrid::new(x0, y0, x1, y1, reach), after_compact: 0 }
    }

    /// Puts back a saved list (the grid is rebuilt).
    pub(crate) fn restore(&mut self, list: Vec<Candidate>) {
        self.list = list;
        self.refile();
    }

    fn refile(&mut self) {
        self.grid.clear();
        for (i, c) in self.list.iter().enumerate() {
            self.grid.file(i as u32, c.z[0], c.z[1]);
        }
        self.after_compact = self.list.len();
    }

    /// Drops used and expired entries once the list has doubled since the
    /// last time (amortized constant work per candidate).
    fn compact(&mut self, now: Timestamp) {
        if self.list.len() < 64 || self.list.len() < 2 * self.after_compact {
            return;
        }
        self.list.retain(|c| c.live_at(now));
        self.refile();
    }

    fn push(&mut self, c: Candidate) {
        let i = self.list.len() as u32;
        self.grid.file(i, c.z[0], c.z[1]);
        self.list.push(c);
    }

    #[cfg(test)]
    pub(crate) fn live(&self, now: Timestamp) -> usize {
        self.list.iter().filter(|c| c.live_at(now)).count()
    }
}

impl Engine {
    /// The farthest a candidate pair can be apart and pass the bound in
    /// [`Engine::pair_with_candidate`]: the longest-lived candidate, the
    /// widest plot errors (m).
    pub(crate) fn candidate_reach_m(&self) -> f64 {
        let life = self.models.iter().filter(|m| m.radar.is_some()).map(|m| CANDIDATE_SCANS * m.scan_period_s).fold(0.0, f64::max);
        let v2 = self.init_speed_sigma * self.init_speed_sigma;
        let var = 2.0 * self.max_plot_var + life * life * 2.0 * v2 + 2.0 * self.max_accel_psd * life * life * life / 3.0;
        (SECOND_CHANCE_SCALE * self.gate_d2 * var).sqrt()
    }

    /// The state a track started on a plot at `z` with error `r` begins
    /// with (also what [`Engine::new_track`] builds).
    pub(crate) fn start_gaussian(&self, z: &Vector2<f64>, r: &Matrix2<f64>) -> Gaussian {
        let mut p = StateCov::zeros();
        p.fixed_view_mut::<2, 2>(0, 0).copy_from(r);
        let v2 = self.init_speed_sigma * self.init_speed_sigma;
        p[(2, 2)] = v2;
        p[(3, 3)] = v2;
        p[(4, 4)] = INIT_TURN_SIGMA * INIT_TURN_SIGMA;
        Gaussian { x: StateVec::new(z.x, z.y, 0.0, 0.0, 0.0), p }
    }

    /// A plot of `sensor` that no track took and that may start one:
    /// with two-plot initiation, pairs it with the most likely candidate
    /// in its gate and starts a tentative track from the two, or else
    /// keeps it as a candidate; with one-plot initiation, starts a
    /// tentative track on it. Counts against the batch's start limit.
    pub(crate) fn start_or_hold(&mut self, z: &Vector2<f64>, r: &Matrix2<f64>, time: Timestamp, sensor: SensorId, min_gap: f64, out: &mut Vec<TrackRecord>) {
        if !self.may_start(sensor) {
            return;
        }
        if self.plots_to_start <= 1 {
            let idx = self.new_track(z, r, time, sensor);
            let t = &self.tracks[idx as usize];
            out.push(self.record_of(t, time, &t.est, Some(sensor)));
            return;
        }
        if self.pair_with_candidate(z, r, time, sensor, min_gap, out) {
            return;
        }
        self.candidates.compact(time);
        let life = CANDIDATE_SCANS * self.models[sensor as usize].scan_period_s;
        self.candidates.push(Candidate { z: [z.x, z.y], r: [r[(0, 0)], r[(0, 1)], r[(1, 1)]], time, expires: time.plus_secs(life), sensor, used: false });
    }

    /// The log-likelihood of plot `z` (error `r`) in the gate of the track
    /// that candidate `c` would start, predicted `dt > 0` seconds on, or
    /// `None` outside the gate.
    ///
    /// A cheap reject comes first. Such a track starts at `c.z` with zero
    /// velocity and turn rate, so every model predicts it as the CV model
    /// does: mean `c.z`, position covariance `c.r + dt²·v²·I + q·dt³/3·I`
    /// with `q` at most `max_accel_psd`. Its innovation covariance `S`
    /// (that plus `r`) therefore has trace at most `var` below, and for a
    /// positive definite `S` (the gate refuses any other)
    /// `d² = νᵀ S⁻¹ ν ≥ |ν|² / λ_max(S) ≥ |ν|² / tr(S)`, so `|ν|² > gate_d2 ·
    /// var` puts the plot outside every model's gate. The test is made
    /// with a 1 % margin, far above the rounding of `var`, of `tr(S)` and
    /// of the Cholesky `d²` when every term of `var` is ≥ 0; with a
    /// negative variance on a diagonal (no real plot has one) the wider
    /// bound of the grid search for tracks is used instead.
    // Inlined into the search loop: most candidates stop at the reject,
    // and the call would cost about as much as the test.
    #[inline]
    fn pair_likelihood(&self, c: &Candidate, z: &Vector2<f64>, r: &Matrix2<f64>, dt: f64) -> Option<f64> {
        let v2 = self.init_speed_sigma * self.init_speed_sigma;
        let (de, dn) = (z.x - c.z[0], z.y - c.z[1]);
        let var = c.r[0] + c.r[2] + dt * dt * 2.0 * v2 + 2.0 * self.max_accel_psd * dt * dt * dt / 3.0 + r[(0, 0)] + r[(1, 1)];
        let terms_nonneg = c.r[0] >= 0.0 && c.r[2] >= 0.0 && r[(0, 0)] >= 0.0 && r[(1, 1)] >= 0.0 && self.max_accel_psd >= 0.0;
        let scale = if terms_nonneg { PAIR_BOUND_MARGIN } else { SECOND_CHANCE_SCALE };
        if de * de + dn * dn > scale * self.gate_d2 * var {
            return None;
        }
        self.pair_likelihood_exact(c, z, r, dt)
    }

    /// [`Engine::pair_likelihood`] without its cheap reject: the IMM
    /// started on the candidate, predicted and gated as any track is.
    #[inline(never)]
    fn pair_likelihood_exact(&self, c: &Candidate, z: &Vector2<f64>, r: &Matrix2<f64>, dt: f64) -> Option<f64> {
        let g = self.start_gaussian(&Vector2::new(c.z[0], c.z[1]), &Matrix2::new(c.r[0], c.r[1], c.r[1], c.r[2]));
        let state = self.imm.init(g, Some(&self.mu0));
        let pred = self.imm.predict_position(&state, dt);
        imm_gate_position(self.imm.n_models(), &pred, 0.0, z, r, self.gate_d2)
    }

    /// Looks for the candidate that `z` is most likely the second plot of;
    /// if there is one, starts the track (at the candidate, updated with
    /// `z`) and returns true.
    fn pair_with_candidate(&mut self, z: &Vector2<f64>, r: &Matrix2<f64>, time: Timestamp, sensor: SensorId, min_gap: f64, out: &mut Vec<TrackRecord>) -> bool {
        let mut best: Option<(f64, u32)> = None;
        let cands = &self.candidates;
        cands.grid.near(z.x, z.y, |i| {
            let c = &cands.list[i as usize];
            if !c.live_at(time) {
                return;
            }
            let dt = time.secs_since(c.time);
            // One plot per sensor per scan, as for tracks; a plot never
            // pairs with one of its own batch or an earlier time.
            if dt <= 0.0 || (c.sensor == sensor && dt < min_gap) {
                return;
            }
            let Some(ll) = self.pair_likelihood(c, z, r, dt) else { return };
            if best.is_none_or(|(b, bi)| ll > b || (ll == b && i < bi)) {
                best = Some((ll, i));
            }
        });
        let Some((_, i)) = best else { return false };
        let c = self.candidates.list[i as usize];
        self.candidates.list[i as usize].used = true;
        let idx = self.new_track(&Vector2::new(c.z[0], c.z[1]), &Matrix2::new(c.r[0], c.r[1], c.r[1], c.r[2]), c.time, c.sensor);
        if self.update_track(idx, z, r, time, sensor, out) {
            self.stats.plots_associated += 1;
        } else {
            // The filter refused the second plot (not seen in practice):
            // the track stands on its first plot, and says so.
            let t = &self.tracks[idx as usize];
            out.push(self.record_of(t, c.time, &t.est, Some(c.sensor)));
        }
        true
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ts(s: f64) -> Timestamp {
        Timestamp::from_unix_nanos((s * 1e9) as i64)
    }

    fn cand(x: f64, t: f64) -> Candidate {
        Candidate { z: [x, 0.0], r: [100.0, 0.0, 100.0], time: ts(t), expires: ts(t + 3.75), sensor: 0, used: false }
    }

    /// Compaction keeps exactly the live entries, in order, each filed in
    /// the cell of its position (brute force over the definition).
    #[test]
    fn compaction_keeps_the_live_candidates_in_order() {
        let mut c = Candidates { list: Vec::new(), grid: CandidateGrid::new(-1000.0, -5000.0, 30_000.0, 5000.0, 400.0), after_compact: 0 };
        for i in 0..200 {
            let mut x = cand(f64::from(i) * 137.0, f64::from(i) * 0.05);
            // Some beyond the grid, in the outside list.
            if i % 7 == 0 {
                x.z[1] = 9000.0;
            }
            c.push(x);
        }
        for i in (0..200).step_by(3) {
            c.list[i].used = true;
        }
        let now = ts(5.0);
        let want: Vec<Candidate> = c.list.iter().copied().filter(|x| x.live_at(now)).collect();
        c.after_compact = 100;
        c.compact(now);
        assert_eq!(c.list, want);
        let mut filed = 0;
        for (k, v) in c.grid.cells.iter().enumerate() {
            for &i in v {
                let x = &c.list[i as usize];
                let (ix, iy) = c.grid.locate(x.z[0], x.z[1]).unwrap();
                assert_eq!(iy * c.grid.nx + ix, k);
                filed += 1;
            }
            assert!(v.windows(2).all(|w| w[0] < w[1]), "creation order within a cell");
        }
        for &i in &c.grid.outside {
            let x = &c.list[i as usize];
            assert!(c.grid.locate(x.z[0], x.z[1]).is_none());
        }
        assert!(!c.grid.outside.is_empty());
        filed += c.grid.outside.len();
        assert_eq!(filed, c.list.len());
        assert_eq!(c.live(now), want.len());
    }

    /// A radar-like plot covariance `[xx, xy, yy]`: a range and a
    /// cross-range sigma (m) along a bearing (rad).
    fn radar_cov(sr: f64, sx: f64, b: f64) -> [f64; 3] {
        let (s, c) = b.sin_cos();
        let (a, d) = (sr * sr, sx * sx);
        [a * s * s + d * c * c, (a - d) * s * c, a * c * c + d * s * s]
    }

    /// The cheap reject before the IMM never refuses a plot the gate
    /// takes: the likelihood with it equals the one without it (the IMM
    /// started on the candidate, predicted and gated as any track is, the
    /// definition), on random candidates and plots around the gate's edge,
    /// with the vessel IMM and with the single CV model.
    #[test]
    fn the_cheap_pair_reject_keeps_every_gated_plot() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(0x9a1e);
        let base = include_str!("../../demo-feeds/busy-afternoon/config.toml");
        for motion in ["imm", "cv"] {
            let text = format!("{base}\nmotion = \"{motion}\"\n");
            let cfg = Config::from_toml_str(&text, "busy-afternoon", &HashMap::new()).unwrap();
            let e = Engine::new(&cfg).unwrap();
            let (mut inside, mut only_tight, mut max_ratio) = (0, 0, 0.0f64);
            for _ in 0..20_000 {
                let cb = rng.random_range(0.0..6.3f64);
                let cr = radar_cov(rng.random_range(5.0..30.0), rng.random_range(1.0..120.0), cb);
                let pr = radar_cov(rng.random_range(5.0..30.0), rng.random_range(1.0..120.0), rng.random_range(0.0..6.3));
                let c = Candidate { z: [rng.random_range(-9000.0..9000.0), rng.random_range(-9000.0..9000.0)], r: cr, time: ts(100.0), expires: ts(104.5), sensor: 0, used: false };
                let r = Matrix2::new(pr[0], pr[1], pr[1], pr[2]);
                let dt = rng.random_range(0.01..4.5);
                let v2 = e.init_speed_sigma * e.init_speed_sigma;
                let var = c.r[0] + c.r[2] + dt * dt * 2.0 * v2 + 2.0 * e.max_accel_psd * dt * dt * dt / 3.0 + r[(0, 0)] + r[(1, 1)];
                // A distance up to 1.3× the bound's, in a random direction
                // or along one of the candidate's axes (along the longer
                // one d² comes closest to the bound).
                let dist = (rng.random_range(0.0..1.3f64) * e.gate_d2 * var).sqrt();
                let dir = if rng.random_bool(0.5) { rng.random_range(0.0..6.3f64) } else { cb + std::f64::consts::FRAC_PI_2 * f64::from(rng.random_range(0..4u8)) };
                let z = Vector2::new(c.z[0] + dist * dir.sin(), c.z[1] + dist * dir.cos());
                let got = e.pair_likelihood(&c, &z, &r, dt);
                let want = e.pair_likelihood_exact(&c, &z, &r, dt);
                assert_eq!(got.map(f64::to_bits), want.map(f64::to_bits), "{c:?} {z:?} {r:?} {dt}");
                let ratio = dist * dist / (e.gate_d2 * var);
                if want.is_some() {
                    inside += 1;
                    max_ratio = max_ratio.max(ratio);
                } else if ratio > PAIR_BOUND_MARGIN && ratio <= SECOND_CHANCE_SCALE {
                    only_tight += 1;
                }
            }
            // Both outcomes seen, the reject did work the wider bound did
            // not, and the gate reaches close to the bound (it is tight).
            assert!(inside > 1000 && only_tight > 1000 && max_ratio > 0.8, "{motion}: {inside} inside, {only_tight} rejected by the tight bound only, max ratio {max_ratio}");
        }
    }

    /// The four-cell search finds every filed point within half a cell of
    /// the plot (brute force over random points, plots and grids,
    /// including plots and points outside the grid).
    #[test]
    fn the_four_nearest_cells_hold_everything_within_reach() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        for _ in 0..200 {
            let reach = rng.random_range(10.0..2000.0);
            let (x0, y0) = (rng.random_range(-30_000.0..0.0), rng.random_range(-30_000.0..0.0));
            let g0 = CandidateGrid::new(x0, y0, x0 + rng.random_range(1000.0..60_000.0), y0 + rng.random_range(1000.0..60_000.0), reach);
            let reach = g0.cell / 2.0;
            let mut g = g0.clone();
            let pts: Vec<(f64, f64)> = (0..300).map(|_| (rng.random_range(x0 - 5000.0..x0 + 70_000.0), rng.random_range(y0 - 5000.0..y0 + 70_000.0))).collect();
            for (i, p) in pts.iter().enumerate() {
                g.file(i as u32, p.0, p.1);
            }
            for _ in 0..50 {
                let q = pts[rng.random_range(0..pts.len())];
                let q = (q.0 + rng.random_range(-reach..reach), q.1 + rng.random_range(-reach..reach));
                let mut seen = std::collections::BTreeSet::new();
                g.near(q.0, q.1, |i| {
                    seen.insert(i);
                });
                for (i, p) in pts.iter().enumerate() {
                    if (p.0 - q.0).hypot(p.1 - q.1) <= reach {
                        assert!(seen.contains(&(i as u32)), "point {p:?} within {reach} m of {q:?} not visited");
                    }
                }
            }
        }
    }
}
