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

/// The candidates, in creation order, and a grid of them.
#[derive(Clone, Debug, Default)]
pub(crate) struct Candidates {
    pub(crate) list: Vec<Candidate>,
    grid: CellMap,
    /// Entries in `list` when it was last compacted.
    after_compact: usize,
}

impl Candidates {
    pub(crate) fn from_list(list: Vec<Candidate>) -> Candidates {
        let mut c = Candidates { list, grid: CellMap::default(), after_compact: 0 };
        c.refile();
        c
    }

    fn refile(&mut self) {
        for v in self.grid.values_mut() {
            v.clear();
        }
        for (i, c) in self.list.iter().enumerate() {
            self.grid.entry(cell_of(&Vector2::new(c.z[0], c.z[1]))).or_default().push(i as u32);
        }
        self.grid.retain(|_, v| !v.is_empty());
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
        self.grid.entry(cell_of(&Vector2::new(c.z[0], c.z[1]))).or_default().push(i);
        self.list.push(c);
    }

    #[cfg(test)]
    pub(crate) fn live(&self, now: Timestamp) -> usize {
        self.list.iter().filter(|c| c.live_at(now)).count()
    }
}

impl Engine {
    /// The cells around a plot's own that may hold a candidate it can
    /// pair with: the reach of the bound in [`Engine::pair_with_candidate`]
    /// at its widest (the longest-lived candidate, the widest plot errors),
    /// in whole cells.
    pub(crate) fn candidate_reach_cells(&self) -> i32 {
        let life = self.models.iter().filter(|m| m.radar.is_some()).map(|m| CANDIDATE_SCANS * m.scan_period_s).fold(0.0, f64::max);
        let v2 = self.init_speed_sigma * self.init_speed_sigma;
        let var = 2.0 * self.max_plot_var + life * life * 2.0 * v2 + 2.0 * self.max_accel_psd * life * life * life / 3.0;
        let reach = (SECOND_CHANCE_SCALE * self.gate_d2 * var).sqrt();
        ((reach / CELL_M).ceil() as i32).clamp(1, 64)
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

    /// Looks for the candidate that `z` is most likely the second plot of;
    /// if there is one, starts the track (at the candidate, updated with
    /// `z`) and returns true.
    fn pair_with_candidate(&mut self, z: &Vector2<f64>, r: &Matrix2<f64>, time: Timestamp, sensor: SensorId, min_gap: f64, out: &mut Vec<TrackRecord>) -> bool {
        let (cx, cy) = cell_of(z);
        let k = self.candidate_cells;
        let v2 = self.init_speed_sigma * self.init_speed_sigma;
        let mut best: Option<(f64, u32)> = None;
        for dx in -k..=k {
            for dy in -k..=k {
                let Some(v) = self.candidates.grid.get(&(cx + dx, cy + dy)) else { continue };
                for &i in v {
                    let c = &self.candidates.list[i as usize];
                    if !c.live_at(time) {
                        continue;
                    }
                    let dt = time.secs_since(c.time);
                    // One plot per sensor per scan, as for tracks; a plot
                    // never pairs with one of its own batch or an earlier
                    // time.
                    if dt <= 0.0 || (c.sensor == sensor && dt < min_gap) {
                        continue;
                    }
                    // The bound the grid search uses for tracks, for the
                    // track the candidate would start (zero velocity, so
                    // no turn drift).
                    let (de, dn) = (z.x - c.z[0], z.y - c.z[1]);
                    let var = c.r[0] + c.r[2] + dt * dt * 2.0 * v2 + 2.0 * self.max_accel_psd * dt * dt * dt / 3.0 + r[(0, 0)] + r[(1, 1)];
                    if de * de + dn * dn > SECOND_CHANCE_SCALE * self.gate_d2 * var {
                        continue;
                    }
                    let g = self.start_gaussian(&Vector2::new(c.z[0], c.z[1]), &Matrix2::new(c.r[0], c.r[1], c.r[1], c.r[2]));
                    let state = self.imm.init(g, Some(&self.mu0));
                    let pred = self.imm.predict_position(&state, dt);
                    let Some(ll) = imm_gate_position(self.imm.n_models(), &pred, 0.0, z, r, self.gate_d2) else { continue };
                    if best.is_none_or(|(b, bi)| ll > b || (ll == b && i < bi)) {
                        best = Some((ll, i));
                    }
                }
            }
        }
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
        let mut c = Candidates::default();
        for i in 0..200 {
            c.push(cand(f64::from(i) * 137.0, f64::from(i) * 0.05));
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
        for (cell, v) in &c.grid {
            for &i in v {
                let x = &c.list[i as usize];
                assert_eq!(cell_of(&Vector2::new(x.z[0], x.z[1])), *cell);
                filed += 1;
            }
            assert!(v.windows(2).all(|w| w[0] < w[1]), "creation order within a cell");
        }
        assert_eq!(filed, c.list.len());
        assert_eq!(c.live(now), want.len());
    }
}
