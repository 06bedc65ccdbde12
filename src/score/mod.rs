//! Track scoring against ground truth: `skerry score` (CONTRACT.md §6).
//!
//! ```text
//! skerry score --truth TRUTH.jsonl --tracks TRACKS.jsonl --config CONFIG.toml
//!              [--cutoff-m C] [--order P] [--json] [--plot OUT.svg]
//! ```
//!
//! # Instants and estimates
//!
//! The score is evaluated at every distinct `time` of the truth file. At
//! instant t the estimates are the tracks whose latest record at or before
//! t has status `confirmed` or `coasting`, moved to t at constant velocity
//! from the record's `east_m`, `north_m`, `vel_east_mps`, `vel_north_mps`.
//! Truth positions are converted into the configuration's site plane
//! (height 0). Records of other types in either file are skipped.
//!
//! # GOSPA
//!
//! Per instant, GOSPA with α = 2, cut-off C (default 100 m) and order P
//! (default 2) from an exact optimal assignment ([`gospa::gospa`]). Its
//! p-th power splits into localisation (Σ dᵖ over assigned pairs), missed
//! ((Cᵖ/2)·missed truths) and false ((Cᵖ/2)·false estimates) parts. The
//! report gives `gospa_mean` (mean of GOSPA over instants, metres), the
//! means of the p-th power and of its three parts (they add up), and the
//! mean numbers of assigned pairs, missed truths and false estimates per
//! instant.
//!
//! # Continuity (definitions)
//!
//! "Assigned" means paired by the instant's optimal GOSPA assignment at a
//! distance below the cut-off. Each vessel is followed over the instants
//! at which it has a truth record (a label should appear at most once per
//! instant).
//! - **ID switch**: the vessel is assigned to track j at an instant, and
//!   at its most recent earlier assigned instant it was assigned to a
//!   track other than j.
//! - **Track break**: a run of one or more instants at which the vessel is
//!   present but unassigned, preceded and followed by instants at which it
//!   is assigned (to any track). Each such run counts once.
//! - **False track**: a track number that is an estimate (firm) at one or
//!   more instants and is assigned to a truth at fewer than half of them.
//! - **Time to confirm** of a vessel: its first assigned instant minus its
//!   first truth instant. The mean and maximum are over vessels ever
//!   assigned; vessels never assigned are listed apart.
//!
//! # Errors of assigned pairs
//!
//! Percentiles 50 and 95 (linear interpolation between order statistics,
//! numpy's default) of the position error (m), the speed error (|Δ| kn)
//! and the course error (|Δ| wrapped to [0, 180], degrees; only where the
//! true speed is at least 1 kn, since a course means little below). A
//! truth record without velocity takes it from the vessel's neighbouring
//! records (central difference).

pub mod gospa;
mod plot;

pub use plot::plot_svg;

use crate::config::Config;
use crate::feed::tracks::{MPS_PER_KNOT, VesselLabel};
use crate::feed::{TrackRecord, TruthRecord};
use crate::geo::{Geodetic, LocalFrame};
use anyhow::Context;
use nalgebra::Vector2;
use serde::Serialize;
use std::collections::BTreeMap;
use std::fmt::Write;
use std::path::PathBuf;

/// Scoring parameters.
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct ScoreOptions {
    /// GOSPA cut-off c, metres; also the assignment gate for continuity.
    pub cutoff_m: f64,
    /// GOSPA order p ≥ 1.
    pub order: f64,
}

impl Default for ScoreOptions {
    fn default() -> Self {
        ScoreOptions { cutoff_m: 100.0, order: 2.0 }
    }
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ScoreError {
    #[error("the cut-off must be a positive number of metres (got {0})")]
    BadCutoff(f64),
    #[error("the order must be a number ≥ 1 (got {0})")]
    BadOrder(f64),
    #[error("the truth has no records")]
    NoTruth,
}

/// A line of a JSON Lines file that could not be read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{file}:{line}: {message}")]
pub struct ReadError {
    pub file: String,
    pub line: usize,
    pub message: String,
}

/// Two percentiles of a sample (absent when the sample is empty).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Percentiles {
    pub samples: usize,
    pub p50: Option<f64>,
    pub p95: Option<f64>,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Errors {
    pub position_m: Percentiles,
    pub speed_kn: Percentiles,
    pub course_deg: Percentiles,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct VesselScore {
    pub vessel: String,
    pub instants: usize,
    pub assigned: usize,
    pub id_switches: u64,
    pub track_breaks: u64,
    /// Absent when never assigned.
    pub time_to_confirm_s: Option<f64>,
    /// Track numbers assigned to this vessel, in order of first assignment.
    pub tracks: Vec<u64>,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Continuity {
    pub id_switches: u64,
    pub track_breaks: u64,
    /// Track numbers that were firm estimates at one instant or more.
    pub firm_tracks: usize,
    pub false_tracks: usize,
    pub false_track_numbers: Vec<u64>,
    pub time_to_confirm_mean_s: Option<f64>,
    pub time_to_confirm_max_s: Option<f64>,
    pub vessels_never_assigned: Vec<String>,
}

/// The result of [`score`]; `--json` prints it as one object.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ScoreReport {
    pub instants: usize,
    pub vessels: usize,
    pub cutoff_m: f64,
    pub order: f64,
    pub alpha: f64,
    /// Mean over instants of GOSPA (m).
    pub gospa_mean: f64,
    /// Mean over instants of GOSPA^p, and of its three parts (m^p);
    /// the parts add up to it.
    pub gospa_pow_mean: f64,
    pub localisation_pow_mean: f64,
    pub missed_pow_mean: f64,
    pub false_pow_mean: f64,
    pub assigned_per_instant: f64,
    pub missed_per_instant: f64,
    pub false_per_instant: f64,
    pub continuity: Continuity,
    pub errors: Errors,
    pub per_vessel: Vec<VesselScore>,
}

/// Percentile `q` (0–100) of sorted data by linear interpolation between
/// order statistics (Hyndman & Fan type 7, numpy's default).
pub fn percentile_sorted(sorted: &[f64], q: f64) -> Option<f64> {
    if sorted.is_empty() {
        return None;
    }
    let h = (sorted.len() - 1) as f64 * q / 100.0;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    Some(sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo]))
}

fn percentiles(mut v: Vec<f64>) -> Percentiles {
    v.sort_by(f64::total_cmp);
    Percentiles { samples: v.len(), p50: percentile_sorted(&v, 50.0), p95: percentile_sorted(&v, 95.0) }
}

#[derive(Default)]
struct Follow {
    first_time: Option<crate::time::Timestamp>,
    first_assigned: Option<crate::time::Timestamp>,
    last_track: Option<u64>,
    was_assigned: bool,
    in_gap: bool,
    instants: usize,
    assigned: usize,
    switches: u64,
    breaks: u64,
    tracks: Vec<u64>,
}

/// Truth positions in the plane and velocities (given or by central
/// difference over the vessel's records).
fn truth_kinematics(truth: &[TruthRecord], frame: &LocalFrame) -> (Vec<Vector2<f64>>, Vec<Option<Vector2<f64>>>) {
    let pos: Vec<Vector2<f64>> = truth.iter().map(|t| frame.geodetic_to_plane(Geodetic::new(t.lat_deg, t.lon_deg, 0.0))).collect();
    let mut vel: Vec<Option<Vector2<f64>>> = truth
        .iter()
        .map(|t| match (t.vel_east_mps, t.vel_north_mps) {
            (Some(e), Some(n)) => Some(Vector2::new(e, n)),
            _ => None,
        })
        .collect();
    let mut by_vessel: BTreeMap<&VesselLabel, Vec<usize>> = BTreeMap::new();
    for (i, t) in truth.iter().enumerate() {
        by_vessel.entry(&t.vessel).or_default().push(i);
    }
    for idx in by_vessel.values_mut() {
        idx.sort_by_key(|&i| truth[i].time);
        for k in 0..idx.len() {
            if vel[idx[k]].is_some() {
                continue;
            }
            let a = idx[k.saturating_sub(1)];
            let b = idx[(k + 1).min(idx.len() - 1)];
            let dt = truth[b].time.secs_since(truth[a].time);
            if dt > 0.0 {
                vel[idx[k]] = Some((pos[b] - pos[a]) / dt);
            }
        }
    }
    (pos, vel)
}

/// Scores `tracks` against `truth` in the plane of `frame`.
pub fn score(truth: &[TruthRecord], tracks: &[TrackRecord], frame: &LocalFrame, opts: &ScoreOptions) -> Result<ScoreReport, ScoreError> {
    let c = opts.cutoff_m;
    let p = opts.order;
    if !(c.is_finite() && c > 0.0) {
        return Err(ScoreError::BadCutoff(c));
    }
    if !(p.is_finite() && p >= 1.0) {
        return Err(ScoreError::BadOrder(p));
    }
    if truth.is_empty() {
        return Err(ScoreError::NoTruth);
    }
    let (tpos, tvel) = truth_kinematics(truth, frame);
    let mut tix: Vec<usize> = (0..truth.len()).collect();
    tix.sort_by_key(|&i| truth[i].time);
    let mut kix: Vec<usize> = (0..tracks.len()).collect();
    kix.sort_by_key(|&i| tracks[i].time);

    let mut latest: BTreeMap<u64, &TrackRecord> = BTreeMap::new();
    let mut next_track = 0;
    let mut follow: BTreeMap<&VesselLabel, Follow> = BTreeMap::new();
    // Per track: (instants as an estimate, instants assigned).
    let mut track_life: BTreeMap<u64, (usize, usize)> = BTreeMap::new();
    let (mut pos_err, mut speed_err, mut course_err) = (Vec::new(), Vec::new(), Vec::new());
    let (mut sum_d, mut sum_pow, mut sum_loc, mut sum_miss, mut sum_false) = (0.0, 0.0, 0.0, 0.0, 0.0);
    let (mut sum_assigned, mut sum_n_miss, mut sum_n_false) = (0usize, 0usize, 0usize);
    let mut instants = 0usize;

    let mut truth_pts = Vec::new();
    let mut est: Vec<(u64, Vector2<f64>, Vector2<f64>)> = Vec::new();
    let mut est_pts = Vec::new();
    let mut start = 0;
    while start < tix.len() {
        let t = truth[tix[start]].time;
        let mut end = start;
        while end < tix.len() && truth[tix[end]].time == t {
            end += 1;
        }
        let group = &tix[start..end];
        start = end;
        instants += 1;

        while next_track < kix.len() && tracks[kix[next_track]].time <= t {
            let r = &tracks[kix[next_track]];
            latest.insert(r.track, r);
            next_track += 1;
        }
        est.clear();
        for (&no, r) in &latest {
            if r.status.is_firm() {
                let dt = t.secs_since(r.time);
                let v = Vector2::new(r.vel_east_mps, r.vel_north_mps);
                est.push((no, Vector2::new(r.east_m, r.north_m) + v * dt, v));
            }
        }
        truth_pts.clear();
        truth_pts.extend(group.iter().map(|&i| tpos[i]));
        est_pts.clear();
        est_pts.extend(est.iter().map(|e| e.1));

        let g = gospa::gospa(&truth_pts, &est_pts, c, p);
        sum_d += g.distance;
        sum_loc += g.localisation;
        sum_miss += g.missed;
        sum_false += g.false_;
        sum_pow += g.localisation + g.missed + g.false_;
        sum_n_miss += g.n_missed;
        sum_n_false += g.n_false;
        sum_assigned += truth_pts.len() - g.n_missed;

        let mut est_assigned = vec![false; est.len()];
        for (k, &ti) in group.iter().enumerate() {
            let f = follow.entry(&truth[ti].vessel).or_default();
            f.first_time.get_or_insert(t);
            f.instants += 1;
            match g.assignment[k] {
                Some(j) => {
                    est_assigned[j] = true;
                    let (no, epos, evel) = est[j];
                    f.assigned += 1;
                    if f.last_track.is_some_and(|last| last != no) {
                        f.switches += 1;
                    }
                    if f.in_gap {
                        f.breaks += 1;
                        f.in_gap = false;
                    }
                    if !f.tracks.contains(&no) {
                        f.tracks.push(no);
                    }
                    f.last_track = Some(no);
                    f.was_assigned = true;
                    f.first_assigned.get_or_insert(t);

                    pos_err.push((epos - tpos[ti]).norm());
                    if let Some(tv) = tvel[ti] {
                        let (es, ec) = crate::feed::tracks::speed_course(evel.x, evel.y);
                        let (ts, tc) = crate::feed::tracks::speed_course(tv.x, tv.y);
                        speed_err.push((es - ts).abs());
                        if tv.norm() >= MPS_PER_KNOT {
                            course_err.push(((ec - tc + 180.0).rem_euclid(360.0) - 180.0).abs());
                        }
                    }
                }
                None => {
                    if f.was_assigned {
                        f.in_gap = true;
                    }
                    f.was_assigned = false;
                }
            }
        }
        for (j, e) in est.iter().enumerate() {
            let life = track_life.entry(e.0).or_default();
            life.0 += 1;
            if est_assigned[j] {
                life.1 += 1;
            }
        }
    }

    let n = instants as f64;
    let false_track_numbers: Vec<u64> = track_life.iter().filter(|(_, (life, hit))| 2 * hit < *life).map(|(no, _)| *no).collect();
    let mut per_vessel = Vec::with_capacity(follow.len());
    let mut ttc = Vec::new();
    let mut never = Vec::new();
    for (label, f) in &follow {
        let t_confirm = match (f.first_time, f.first_assigned) {
            (Some(a), Some(b)) => Some(b.secs_since(a)),
            _ => None,
        };
        match t_confirm {
            Some(x) => ttc.push(x),
            None => never.push(label.to_string()),
        }
        per_vessel.push(VesselScore {
            vessel: label.to_string(),
            instants: f.instants,
            assigned: f.assigned,
            id_switches: f.switches,
            track_breaks: f.breaks,
            time_to_confirm_s: t_confirm,
            tracks: f.tracks.clone(),
        });
    }
    let continuity = Continuity {
        id_switches: follow.values().map(|f| f.switches).sum(),
        track_breaks: follow.values().map(|f| f.breaks).sum(),
        firm_tracks: track_life.len(),
        false_tracks: false_track_numbers.len(),
        false_track_numbers,
        time_to_confirm_mean_s: (!ttc.is_empty()).then(|| ttc.iter().sum::<f64>() / ttc.len() as f64),
        time_to_confirm_max_s: ttc.iter().copied().reduce(f64::max),
        vessels_never_assigned: never,
    };
    Ok(ScoreReport {
        instants,
        vessels: follow.len(),
        cutoff_m: c,
        order: p,
        alpha: 2.0,
        gospa_mean: sum_d / n,
        gospa_pow_mean: sum_pow / n,
        localisation_pow_mean: sum_loc / n,
        missed_pow_mean: sum_miss / n,
        false_pow_mean: sum_false / n,
        assigned_per_instant: sum_assigned as f64 / n,
        missed_per_instant: sum_n_miss as f64 / n,
        false_per_instant: sum_n_false as f64 / n,
        continuity,
        errors: Errors { position_m: percentiles(pos_err), speed_kn: percentiles(speed_err), course_deg: percentiles(course_err) },
        per_vessel,
    })
}

impl ScoreReport {
    /// The readable table printed by default.
    pub fn table(&self) -> String {
        let mut s = String::new();
        let opt = |v: Option<f64>, unit: &str| v.map(|x| format!("{x:.2} {unit}")).unwrap_or_else(|| "-".into());
        let _ = writeln!(s, "skerry score: {} instants, {} vessels; GOSPA cut-off {} m, order {}, alpha 2", self.instants, self.vessels, self.cutoff_m, self.order);
        let _ = writeln!(s);
        let _ = writeln!(s, "{:<34} {:>14}", "GOSPA mean", format!("{:.2} m", self.gospa_mean));
        let _ = writeln!(s, "{:<34} {:>14}", "GOSPA^p mean", format!("{:.1}", self.gospa_pow_mean));
        let _ = writeln!(s, "{:<34} {:>14}", "  localisation part", format!("{:.1}", self.localisation_pow_mean));
        let _ = writeln!(s, "{:<34} {:>14}", "  missed part", format!("{:.1}", self.missed_pow_mean));
        let _ = writeln!(s, "{:<34} {:>14}", "  false part", format!("{:.1}", self.false_pow_mean));
        let _ = writeln!(s, "{:<34} {:>14.2}", "assigned pairs per instant", self.assigned_per_instant);
        let _ = writeln!(s, "{:<34} {:>14.2}", "missed truths per instant", self.missed_per_instant);
        let _ = writeln!(s, "{:<34} {:>14.2}", "false estimates per instant", self.false_per_instant);
        let _ = writeln!(s);
        let c = &self.continuity;
        let _ = writeln!(s, "{:<34} {:>14}", "ID switches", c.id_switches);
        let _ = writeln!(s, "{:<34} {:>14}", "track breaks", c.track_breaks);
        let _ = writeln!(s, "{:<34} {:>14}", "firm tracks", c.firm_tracks);
        let _ = writeln!(s, "{:<34} {:>14}", "false tracks", c.false_tracks);
        let _ = writeln!(s, "{:<34} {:>14}", "time to confirm, mean", opt(c.time_to_confirm_mean_s, "s"));
        let _ = writeln!(s, "{:<34} {:>14}", "time to confirm, max", opt(c.time_to_confirm_max_s, "s"));
        let _ = writeln!(s, "{:<34} {:>14}", "vessels never assigned", c.vessels_never_assigned.len());
        let _ = writeln!(s);
        let _ = writeln!(s, "{:<34} {:>9} {:>12} {:>12}", "error of assigned pairs", "samples", "p50", "p95");
        for (name, p, unit) in [("position", &self.errors.position_m, "m"), ("speed", &self.errors.speed_kn, "kn"), ("course", &self.errors.course_deg, "deg")] {
            let _ = writeln!(s, "{:<34} {:>9} {:>12} {:>12}", format!("  {name}"), p.samples, opt(p.p50, unit), opt(p.p95, unit));
        }
        if !c.vessels_never_assigned.is_empty() {
            let _ = writeln!(s, "\nnever assigned: {}", c.vessels_never_assigned.join(", "));
        }
        s
    }
}

fn read_jsonl<T>(text: &str, file: &str, parse: impl Fn(&str) -> Result<Option<T>, serde_json::Error>) -> Result<Vec<T>, ReadError> {
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        match parse(line) {
            Ok(Some(r)) => out.push(r),
            Ok(None) => {}
            Err(e) => return Err(ReadError { file: file.into(), line: i + 1, message: e.to_string() }),
        }
    }
    Ok(out)
}

/// Reads the `truth` lines of a JSON Lines text (`file` names it in errors).
pub fn parse_truth_jsonl(text: &str, file: &str) -> Result<Vec<TruthRecord>, ReadError> {
    read_jsonl(text, file, TruthRecord::from_json)
}

/// Reads the `track` lines of a JSON Lines text.
pub fn parse_tracks_jsonl(text: &str, file: &str) -> Result<Vec<TrackRecord>, ReadError> {
    read_jsonl(text, file, TrackRecord::from_json)
}

/// `skerry score`: GOSPA and track continuity against ground truth.
#[derive(clap::Args, Debug, Clone)]
pub struct ScoreArgs {
    /// Ground truth (JSON Lines, `truth` records).
    #[arg(long)]
    pub truth: PathBuf,
    /// Tracker output (JSON Lines, `track` records).
    #[arg(long)]
    pub tracks: PathBuf,
    /// The configuration whose site defines the east/north plane.
    #[arg(long)]
    pub config: PathBuf,
    /// GOSPA cut-off, metres.
    #[arg(long, default_value_t = 100.0)]
    pub cutoff_m: f64,
    /// GOSPA order p (≥ 1).
    #[arg(long, default_value_t = 2.0)]
    pub order: f64,
    /// Print one JSON object instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Also draw truth and tracks on the site plane into this SVG file.
    #[arg(long)]
    pub plot: Option<PathBuf>,
}

pub fn run(args: &ScoreArgs) -> anyhow::Result<()> {
    let cfg = Config::load(Some(&args.config), &Config::env_overrides())?;
    let frame = LocalFrame::new(Geodetic::new(cfg.site.lat_deg, cfg.site.lon_deg, cfg.site.height_m));
    let read = |p: &PathBuf| std::fs::read_to_string(p).with_context(|| format!("{}: cannot read", p.display()));
    let truth = parse_truth_jsonl(&read(&args.truth)?, &args.truth.display().to_string())?;
    let tracks = parse_tracks_jsonl(&read(&args.tracks)?, &args.tracks.display().to_string())?;
    let report = score(&truth, &tracks, &frame, &ScoreOptions { cutoff_m: args.cutoff_m, order: args.order }).with_context(|| format!("{}", args.truth.display()))?;
    let text = if args.json { serde_json::to_string_pretty(&report)? + "\n" } else { report.table() };
    {
        use std::io::Write;
        let mut out = std::io::stdout().lock();
        // A closed pipe (`| head`) is not an error of the scoring.
        match out.write_all(text.as_bytes()).and_then(|_| out.flush()) {
            Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => return Err(e).context("cannot write to standard output"),
            _ => {}
        }
    }
    if let Some(path) = &args.plot {
        plot_svg(path, &truth, &tracks, &frame).with_context(|| format!("{}: cannot draw", path.display()))?;
    }
    Ok(())
}
