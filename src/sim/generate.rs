//! The generator: radar scans, clutter, transponder reports and truth from
//! a checked [`Scenario`].

use super::motion::State;
use super::scenario::{Scenario, ScenarioError, Transponder, TransponderClass};
use crate::config::Config;
use crate::feed::tracks::{MPS_PER_KNOT, VesselLabel};
use crate::feed::{Detection, Record, Report, ScanEnd, SensorKind, SensorTable, TruthRecord, encode_record};
use crate::geo::{Antenna, LocalFrame, geodetic_to_ecef};
use crate::time::Timestamp;
use nalgebra::Vector2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal, Poisson};
use std::fmt::Write;
use std::sync::Arc;

/// Where a feed record came from.
#[derive(Copy, Clone, Debug, PartialEq)]
pub enum Origin {
    /// A plot of vessel `vessel` (its index in the scenario), with the
    /// noise-free slant range and bearing at the exact beam-crossing time
    /// `time_s` (seconds after the scenario start, before the feed's
    /// rounding to the millisecond).
    Vessel { vessel: usize, range_m: f64, bearing_deg: f64, time_s: f64 },
    /// A false plot.
    Clutter,
    /// A transponder report of vessel `vessel`, with its true position in
    /// the site plane.
    Report { vessel: usize, east_m: f64, north_m: f64 },
    /// A `scan_end`.
    ScanEnd,
}

/// Counts for the command's summary.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Summary {
    pub scans: u64,
    pub vessel_plots: u64,
    pub clutter_plots: u64,
    pub reports: u64,
    pub truth_records: u64,
}

/// The output of one run.
#[derive(Clone, Debug)]
pub struct Generated {
    /// Feed records in time order (ties: `scan_end` first, then plots,
    /// then reports, each in generation order).
    pub feed: Vec<Record>,
    /// `origins[i]` says where `feed[i]` came from.
    pub origins: Vec<Origin>,
    /// Truth records in time order, vessels in scenario order.
    pub truth: Vec<TruthRecord>,
    /// A skerry configuration (CONTRACT.md §3) for the scenario's site and
    /// sensors; it loads with [`Config::from_toml_str`].
    pub config_toml: String,
    /// The sensors of `config_toml`, in its order (radars, then the
    /// transponder receiver).
    pub sensors: SensorTable,
    pub summary: Summary,
}

impl Generated {
    /// The feed as JSON Lines (CONTRACT.md §1).
    pub fn feed_jsonl(&self) -> String {
        let mut s = String::with_capacity(self.feed.len() * 128);
        for r in &self.feed {
            encode_record(r, &self.sensors, None, &mut s);
            s.push('\n');
        }
        s
    }

    /// The truth as JSON Lines (CONTRACT.md §6).
    pub fn truth_jsonl(&self) -> String {
        let mut s = String::with_capacity(self.truth.len() * 140);
        for t in &self.truth {
            s.push_str(&t.to_json());
            s.push('\n');
        }
        s
    }

    /// Writes `feed.jsonl`, `truth.jsonl` and `config.toml` into `dir`
    /// (created if missing).
    pub fn write_dir(&self, dir: &std::path::Path) -> std::io::Result<()> {
        std::fs::create_dir_all(dir)?;
        std::fs::write(dir.join("feed.jsonl"), self.feed_jsonl())?;
        std::fs::write(dir.join("truth.jsonl"), self.truth_jsonl())?;
        std::fs::write(dir.join("config.toml"), &self.config_toml)?;
        Ok(())
    }
}

// Feed resolution. Times to 1 ms: a vessel moves millimetres in that time.
// Ranges to 1 cm and bearings to 1e-4° (3 cm at 18 km): far below any radar
// sigma, and they keep the lines short.
const RANGE_SCALE: f64 = 100.0;
const BEARING_SCALE: f64 = 10_000.0;
const LATLON_SCALE: f64 = 1e8;

fn round_scaled(x: f64, scale: f64) -> f64 {
    (x * scale).round() / scale
}

/// A bearing in degrees, rounded to the feed resolution, in [0, 360).
fn feed_bearing(b: f64) -> f64 {
    let b = round_scaled(b.rem_euclid(360.0), BEARING_SCALE);
    if b >= 360.0 { 0.0 } else { b }
}

/// Seconds after the scenario start → feed time, rounded to the millisecond.
fn feed_time(start: Timestamp, t_s: f64) -> Timestamp {
    let ns = start.unix_nanos() + (t_s * 1e9).round() as i64;
    Timestamp::from_unix_nanos((ns + 500_000).div_euclid(1_000_000) * 1_000_000)
}

/// Difference of two bearings in degrees, in [-180, 180).
fn wrap180(d: f64) -> f64 {
    (d + 180.0).rem_euclid(360.0) - 180.0
}

/// Random streams: one per radar for plots, one per radar for clutter, one
/// per vessel for its transponder, so that adding a vessel leaves the
/// clutter and the other vessels' reports as they were.
const STREAM_PLOTS: u64 = 0x1_0000;
const STREAM_CLUTTER: u64 = 0x2_0000;
const STREAM_REPORTS: u64 = 0x3_0000;

fn rng(seed: u64, stream: u64) -> ChaCha8Rng {
    let mut r = ChaCha8Rng::seed_from_u64(seed);
    r.set_stream(stream);
    r
}

/// Slant range (m) and true bearing (degrees) from an antenna to the point
/// at height 0 whose site-plane position is `en`.
fn look(frame: &LocalFrame, antenna: &Antenna, en: Vector2<f64>) -> (f64, f64) {
    let g = frame.plane_to_geodetic(en, 0.0);
    let (r, b) = antenna.range_bearing_to(geodetic_to_ecef(g));
    (r, b.to_degrees())
}

/// Reporting interval of a transponder in a given state: the fixed one if
/// the scenario gives it, else the nominal intervals of ITU-R M.1371-5
/// Annex 1 Table 1 (Class A) and Table 2 (Class B "CS"). A speed on a band
/// edge takes the slower band's interval.
pub fn report_interval_s(tp: &Transponder, state: &State) -> f64 {
    if let Some(i) = tp.interval_s {
        return i;
    }
    let kn = state.speed_mps / MPS_PER_KNOT;
    match tp.class {
        TransponderClass::A => {
            if tp.at_anchor {
                if kn <= 3.0 { 180.0 } else { 10.0 }
            } else if kn <= 14.0 {
                if state.turning { 10.0 / 3.0 } else { 10.0 }
            } else if kn <= 23.0 {
                if state.turning { 2.0 } else { 6.0 }
            } else {
                2.0
            }
        }
        TransponderClass::B => {
            if kn <= 2.0 {
                180.0
            } else {
                30.0
            }
        }
    }
}

/// Runs the scenario with `seed`. `progress(done, total)` is called as
/// scans are generated.
pub fn generate_with(sc: &Scenario, seed: u64, progress: &mut dyn FnMut(u64, u64)) -> Result<Generated, ScenarioError> {
    let frame = sc.frame();
    let config_toml = config_toml(sc);
    let cfg = Config::from_toml_str(&config_toml, "generated config.toml", &Default::default()).map_err(|e| ScenarioError::Config(e.to_string()))?;
    let sensors = cfg.sensor_table();

    // (record, rank for equal times, origin)
    let mut out: Vec<(Record, u8, Origin)> = Vec::new();
    let mut summary = Summary::default();

    let scans_of = |r: &super::Radar| -> u64 {
        let n = ((sc.duration_s - r.first_scan_s) / r.scan_period_s + 1e-9).floor();
        if n > 0.0 { n as u64 } else { 0 }
    };
    let total: u64 = sc.radars.iter().map(scans_of).sum();
    let mut done = 0;

    for (ri, radar) in sc.radars.iter().enumerate() {
        let sensor = ri as u16;
        let antenna = Antenna::new(radar.position, &frame);
        let mut plot_rng = rng(seed, STREAM_PLOTS + ri as u64);
        let mut clutter_rng = rng(seed, STREAM_CLUTTER + ri as u64);
        let range_noise = Normal::new(0.0, radar.range_sigma_m).map_err(|e| ScenarioError::Invalid { key: format!("radars[{ri}].range_sigma_m"), message: e.to_string() })?;
        let bearing_noise =
            Normal::new(0.0, radar.bearing_sigma_deg).map_err(|e| ScenarioError::Invalid { key: format!("radars[{ri}].bearing_sigma_deg"), message: e.to_string() })?;
        let clutter_count = if radar.clutter_per_scan > 0.0 {
            Some(Poisson::new(radar.clutter_per_scan).map_err(|e| ScenarioError::Invalid { key: format!("radars[{ri}].clutter_per_scan"), message: e.to_string() })?)
        } else {
            None
        };
        let period = radar.scan_period_s;
        for k in 0..scans_of(radar) {
            let ts = radar.first_scan_s + k as f64 * period;
            let te = ts + period;
            summary.scans += 1;

            // Clutter: Poisson count, uniform in area over the coverage disc.
            let n = clutter_count.as_ref().map(|p| p.sample(&mut clutter_rng) as u64).unwrap_or(0);
            for _ in 0..n {
                let u: f64 = 1.0 - clutter_rng.random::<f64>();
                let b = 360.0 * clutter_rng.random::<f64>();
                let range = round_scaled(radar.max_range_m * u.sqrt(), RANGE_SCALE).max(1.0 / RANGE_SCALE);
                let t = ts + period * b / 360.0;
                let rec = Detection { sensor, time: feed_time(sc.start, t), scan: Some(k), range_m: range, bearing_deg: feed_bearing(b), radial_speed_mps: None, snr_db: None };
                out.push((Record::Detection(rec), 1, Origin::Clutter));
                summary.clutter_plots += 1;
            }

            // Vessels: each beam crossing in [ts, te).
            for (vi, v) in sc.vessels.iter().enumerate() {
                if v.enter_s > te || v.exit_s < ts {
                    continue;
                }
                let beta = |t: f64| look(&frame, &antenna, v.motion.state_at(t).pos).1;
                let b0 = beta(ts);
                // The vessel's bearing made continuous across north within
                // this scan (it moves far less than 180° in one scan).
                let cont = |b: f64| b0 + wrap180(b - b0);
                // d(t) = beam angle swept − vessel bearing grows strictly
                // (the beam turns far faster than any vessel's bearing), so
                // it meets each multiple of 360° at most once.
                let d_start = -b0;
                let d_end = 360.0 - cont(beta(te));
                for m in 0..2 {
                    let target = 360.0 * m as f64;
                    if !(d_start <= target && target < d_end) {
                        continue;
                    }
                    // Fixed point t = ts + T·(target + β(t))/360: a
                    // contraction since T·|dβ/dt|/360 ≪ 1.
                    let mut t = ts + period * (target + b0) / 360.0;
                    for _ in 0..50 {
                        let next = (ts + period * (target + cont(beta(t))) / 360.0).clamp(ts, te);
                        let step = (next - t).abs();
                        t = next;
                        if step < 1e-10 {
                            break;
                        }
                    }
                    if !v.present(t) || t < 0.0 || t > sc.duration_s {
                        continue;
                    }
                    let (range, bearing) = look(&frame, &antenna, v.motion.state_at(t).pos);
                    if range > radar.max_range_m {
                        continue;
                    }
                    let pd = v.detection_probability.unwrap_or(radar.detection_probability);
                    if !plot_rng.random_bool(pd) {
                        continue;
                    }
                    let r_meas = range + range_noise.sample(&mut plot_rng);
                    let b_meas = bearing + bearing_noise.sample(&mut plot_rng);
                    let r_meas = round_scaled(r_meas, RANGE_SCALE);
                    if r_meas <= 0.0 {
                        continue;
                    }
                    let rec = Detection { sensor, time: feed_time(sc.start, t), scan: Some(k), range_m: r_meas, bearing_deg: feed_bearing(b_meas), radial_speed_mps: None, snr_db: None };
                    out.push((Record::Detection(rec), 1, Origin::Vessel { vessel: vi, range_m: range, bearing_deg: bearing, time_s: t }));
                    summary.vessel_plots += 1;
                }
            }

            out.push((Record::ScanEnd(ScanEnd { sensor, time: feed_time(sc.start, te), scan: k, sector_deg: None }), 0, Origin::ScanEnd));
            done += 1;
            progress(done, total);
        }
    }

    if let Some(rx) = &sc.transponder {
        let sensor = sc.radars.len() as u16;
        let noise = Normal::new(0.0, rx.position_sigma_m).map_err(|e| ScenarioError::Invalid { key: "transponder.position_sigma_m".into(), message: e.to_string() })?;
        for (vi, v) in sc.vessels.iter().enumerate() {
            let Some(tp) = &v.transponder else { continue };
            let mut r = rng(seed, STREAM_REPORTS + vi as u64);
            let id: Arc<str> = Arc::from(tp.mmsi.as_str());
            let end = v.exit_s.min(sc.duration_s);
            // The first report falls at a random phase of the first interval.
            let mut t = v.enter_s + r.random::<f64>() * report_interval_s(tp, &v.motion.state_at(v.enter_s));
            while t <= end {
                let st = v.motion.state_at(t);
                if t >= 0.0 && r.random_bool(rx.reception_probability) {
                    let en = st.pos + Vector2::new(noise.sample(&mut r), noise.sample(&mut r));
                    let g = frame.plane_to_geodetic(en, 0.0);
                    let sog = round_scaled(st.speed_mps / MPS_PER_KNOT, 10.0);
                    // Course and heading are true, at the vessel's own north.
                    let course = true_course_deg(&frame, &st, g);
                    let cog = (sog > 0.0).then(|| {
                        let c = round_scaled(course, 10.0);
                        if c >= 360.0 { 0.0 } else { c }
                    });
                    let heading = (tp.class == TransponderClass::A).then(|| course.round().rem_euclid(360.0));
                    let rec = Report {
                        sensor,
                        time: feed_time(sc.start, t),
                        id: id.clone(),
                        lat_deg: round_scaled(g.lat_deg, LATLON_SCALE),
                        lon_deg: round_scaled(g.lon_deg, LATLON_SCALE),
                        sog_kn: Some(sog),
                        cog_deg: cog,
                        heading_deg: heading,
                        vessel: None,
                    };
                    out.push((Record::Report(rec), 2, Origin::Report { vessel: vi, east_m: st.pos.x, north_m: st.pos.y }));
                    summary.reports += 1;
                }
                t += report_interval_s(tp, &st);
            }
        }
    }

    out.sort_by_key(|(r, rank, _)| (r.time(), *rank));
    let (feed, origins): (Vec<Record>, Vec<Origin>) = out.into_iter().map(|(r, _, o)| (r, o)).unzip();

    let mut truth = Vec::new();
    let steps = (sc.duration_s / sc.truth_interval_s + 1e-9).floor() as u64;
    for k in 0..=steps {
        let t = k as f64 * sc.truth_interval_s;
        for v in &sc.vessels {
            if !v.present(t) {
                continue;
            }
            let st = v.motion.state_at(t);
            let g = frame.plane_to_geodetic(st.pos, 0.0);
            truth.push(TruthRecord {
                time: feed_time(sc.start, t),
                vessel: VesselLabel::Text(v.name.clone()),
                lat_deg: round_scaled(g.lat_deg, LATLON_SCALE),
                lon_deg: round_scaled(g.lon_deg, LATLON_SCALE),
                vel_east_mps: Some(round_scaled(st.vel.x, 1000.0)),
                vel_north_mps: Some(round_scaled(st.vel.y, 1000.0)),
            });
        }
    }
    summary.truth_records = truth.len() as u64;

    Ok(Generated { feed, origins, truth, config_toml, sensors, summary })
}

/// The course over ground measured from true north at the vessel: the
/// site-plane velocity turned through ECEF into the vessel's own frame.
fn true_course_deg(frame: &LocalFrame, st: &State, at: crate::geo::Geodetic) -> f64 {
    let v_ecef = frame.rotation().transpose() * nalgebra::Vector3::new(st.vel.x, st.vel.y, 0.0);
    let local = LocalFrame::new(at).rotation() * v_ecef;
    if st.speed_mps == 0.0 {
        return st.course_deg;
    }
    let c = local.x.atan2(local.y).to_degrees().rem_euclid(360.0);
    if c >= 360.0 { 0.0 } else { c }
}

/// A TOML string literal.
fn toml_str(s: &str) -> String {
    toml::Value::String(s.to_string()).to_string()
}

/// A TOML float literal (Rust's shortest round-trip form is valid TOML).
fn toml_f64(x: f64) -> String {
    let s = format!("{x:?}");
    if s.contains(['.', 'e', 'E']) || s.contains("inf") || s.contains("NaN") { s } else { format!("{s}.0") }
}

/// The skerry configuration for a scenario: its site, its radars and
/// receiver as `[[sensors]]`, and its `[tracking]` table.
pub fn config_toml(sc: &Scenario) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "# skerry configuration written by `skerry simulate` for the scenario {}.", toml_str(&sc.name));
    let _ = writeln!(s, "\n[site]\nname = {}\nlat_deg = {}\nlon_deg = {}", toml_str(&sc.site_name), toml_f64(sc.site.lat_deg), toml_f64(sc.site.lon_deg));
    if sc.site.h_m != 0.0 {
        let _ = writeln!(s, "height_m = {}", toml_f64(sc.site.h_m));
    }
    for r in &sc.radars {
        let _ = writeln!(s, "\n[[sensors]]\nid = {}\nkind = \"{}\"", toml_str(&r.id), SensorKind::Radar.as_str());
        for (k, v) in [
            ("lat_deg", r.position.lat_deg),
            ("lon_deg", r.position.lon_deg),
            ("height_m", r.position.h_m),
            ("range_sigma_m", r.range_sigma_m),
            ("bearing_sigma_deg", r.bearing_sigma_deg),
            ("detection_probability", r.detection_probability),
            ("clutter_per_scan", r.clutter_per_scan),
            ("max_range_m", r.max_range_m),
            ("scan_period_s", r.scan_period_s),
        ] {
            let _ = writeln!(s, "{k} = {}", toml_f64(v));
        }
    }
    if let Some(t) = &sc.transponder {
        let _ = writeln!(s, "\n[[sensors]]\nid = {}\nkind = \"{}\"\nposition_sigma_m = {}", toml_str(&t.id), SensorKind::Transponder.as_str(), toml_f64(t.position_sigma_m));
    }
    let mut root = toml::Table::new();
    root.insert("tracking".into(), toml::Value::Table(sc.tracking.clone()));
    let _ = write!(s, "\n{}", toml::to_string(&root).unwrap_or_default());
    s
}
