//! Transponder-aided association: what a position report does, in both
//! association modes.
//!
//! - A report whose identity a live track holds updates that track if the
//!   report lies within `tracking.identity_gate_m` of the track's position
//!   moved to the report's time. The gate is wide on purpose: a vessel's
//!   own report is the best evidence of where it is, and the track may
//!   have gone without an update for minutes (reports at anchor come every
//!   few minutes). A consistent report clears an earlier conflict.
//! - Outside that gate the report raises an identity conflict: counted in
//!   [`EngineStats::identity_conflicts`] and flagged on the track, whose
//!   records then carry `identity_conflict: true` until a consistent
//!   report comes. The report is not used: either the track has drifted
//!   onto another vessel or the report is wrong, and the engine cannot
//!   tell which.
//! - A report with an identity no track holds is gated (chi-square gate
//!   of `tracking.gate_probability`, on the track's combined IMM
//!   prediction and the report's covariance) against the live tracks that
//!   hold no identity; the most likely one takes the identity and the
//!   update. With none in the gate, the report starts a tentative track
//!   with that identity.
//! - Radar plots near an identified track still go through the normal
//!   association (GNN or JPDA); the identity only rides on the track.
//! - Static data rides with the identity: a report that updates or starts
//!   a track and carries `vessel` data (name, ship type, length, beam)
//!   replaces the track's, so its records show what the vessel last said
//!   about itself. A report without any leaves the track's as it was; a
//!   conflicting report, which is not used, changes nothing.

use super::*;

impl Engine {
    pub(super) fn report(&mut self, r: &Report, out: &mut Vec<TrackRecord>) {
        let model = &self.models[r.sensor as usize];
        self.stats.reports += 1;
        let sigma = model.position_sigma_m;
        let z = self
            .site
            .geodetic_to_plane(Geodetic::new(r.lat_deg, r.lon_deg, 0.0));
        let rcov = Matrix2::new(sigma * sigma, 0.0, 0.0, sigma * sigma);
        // An entry for a track that has ended (and is not compacted away
        // yet) is no longer an identity held.
        if let Some(&idx) = self.identities.get(&r.id)
            && self.tracks[idx as usize].status != TrackStatus::Ended
        {
            let t = &self.tracks[idx as usize];
            let dt = r.time.secs_since(t.time).max(0.0);
            let g = t.est;
            let at = Vector2::new(g.x[0] + g.x[2] * dt, g.x[1] + g.x[3] * dt);
            if (at - z).norm() <= self.identity_gate_m {
                let t = &mut self.tracks[idx as usize];
                t.identity_conflict = false;
                take_vessel(t, r);
                self.update_track(idx, &z, &rcov, r.time, r.sensor, out);
            } else {
                self.stats.identity_conflicts += 1;
                self.tracks[idx as usize].identity_conflict = true;
            }
            return;
        }
        // A new identity: the most likely gated track that holds none.
        let (cx, cy) = cell_of(&z);
        let mut cands = std::mem::take(&mut self.report_cand);
        cands.clear();
        self.grid.gather_around(cx, cy, &mut cands);
        cands.extend(self.wide.iter().copied());
        cands.sort_unstable();
        cands.dedup();
        let mut best: Option<(f64, u32)> = None;
        for &idx in &cands {
            let t = &self.tracks[idx as usize];
            if t.identity.is_some() || t.status == TrackStatus::Ended {
                continue;
            }
            let dt = r.time.secs_since(t.time).max(0.0);
            let g = self.imm.combine_fast(&if dt > 0.0 {
                self.imm.predict_fast(&t.state, dt)
            } else {
                t.state
            });
            let Some(inn) = innovation(&g, &z, &rcov) else {
                continue;
            };
            if inn.d2 > self.gate_d2 {
                continue;
            }
            // Minus twice the log-likelihood, up to a constant.
            let cost = inn.d2 + inn.ln_det_s;
            if best.is_none_or(|(c, _)| cost < c) {
                best = Some((cost, idx));
            }
        }
        self.report_cand = cands;
        match best {
            Some((_, idx)) => {
                let t = &mut self.tracks[idx as usize];
                t.identity = Some(r.id.clone());
                take_vessel(t, r);
                self.identities.insert(r.id.clone(), idx);
                self.update_track(idx, &z, &rcov, r.time, r.sensor, out);
            }
            None => {
                let idx = self.new_track(&z, &rcov, r.time, r.sensor);
                let t = &mut self.tracks[idx as usize];
                t.identity = Some(r.id.clone());
                take_vessel(t, r);
                self.identities.insert(r.id.clone(), idx);
                let t = &self.tracks[idx as usize];
                out.push(self.record_of(t, r.time, &t.est, Some(r.sensor)));
            }
        }
    }
}

/// A report's static data, if it has any, becomes the track's.
fn take_vessel(t: &mut Track, r: &Report) {
    if r.vessel.is_some() {
        t.vessel.clone_from(&r.vessel);
    }
}
