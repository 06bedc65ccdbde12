//! The scenario generator behind `skerry simulate`: invented vessels seen
//! by rotating radars and a transponder receiver, written as a feed
//! (CONTRACT.md §1), its ground truth (§6) and a configuration (§3).
//!
//! ```text
//! skerry simulate SCENARIO.toml --out DIR [--seed N]
//! ```
//!
//! writes `DIR/feed.jsonl`, `DIR/truth.jsonl` and `DIR/config.toml`. The
//! same scenario and seed give the same files, byte for byte.
//!
//! # Scenario files
//!
//! A scenario is TOML. Unknown keys are errors; every error names its key
//! (`vessels[3].legs[1].angle_deg`).
//!
//! ```toml
//! [scenario]
//! name = "close-pass"                 # required
//! description = "free text"
//! start = 2026-05-14T06:00:00Z        # UTC; a TOML date-time or an RFC 3339 string
//! duration_s = 300.0
//! truth_interval_s = 1.0              # default 1 s
//!
//! [site]                              # origin of the east/north plane, as in CONTRACT.md §3
//! name = "Brannoch Sound"
//! lat_deg = 56.45
//! lon_deg = 7.35
//! height_m = 0.0                      # default 0
//!
//! [[radars]]                          # any number; each becomes a `radar` sensor
//! id = "kestrel-point"
//! lat_deg = 56.462
//! lon_deg = 7.343
//! height_m = 32.0                     # antenna height above the ellipsoid
//! range_sigma_m = 12.0                # 1-sigma Gaussian range error
//! bearing_sigma_deg = 0.2             # 1-sigma Gaussian bearing error
//! detection_probability = 0.9         # in (0, 1)
//! clutter_per_scan = 40.0             # Poisson mean of false plots per scan
//! max_range_m = 18000.0               # slant range of the coverage disc
//! scan_period_s = 2.5
//! first_scan_s = 0.0                  # when the first scan starts (default 0)
//!
//! [transponder]                       # optional: the shore receiver
//! id = "sound-ais"
//! position_sigma_m = 10.0             # 1-sigma error of a reported position, per axis
//! reception_probability = 1.0         # default 1
//!
//! [tracking]                          # optional: copied into config.toml
//! association = "gnn"                 # the default when absent
//!
//! [[vessels]]
//! name = "Corrie Dawn"                # required, unique: the truth label
//! kind = "trawler"                    # free text
//! east_m = -4000.0                    # start in the site plane ...
//! north_m = 250.0
//! # lat_deg = 56.45, lon_deg = 7.29   # ... or as a WGS-84 position
//! course_deg = 80.0                   # initial course, site plane, [0, 360)
//! speed_kn = 9.0                      # initial speed
//! enter_s = 0.0                       # appears at this time (default 0)
//! exit_s = 240.0                      # leaves at this time (default: stays)
//! detection_probability = 0.6         # optional, overrides every radar's
//! mmsi = "200100001"                  # optional: carries a transponder
//! class = "A"                         # "A" (default) or "B"
//! report_interval_s = 10.0            # optional: fixed interval instead of the table
//! at_anchor = false                   # Class A: at anchor or moored
//! legs = [
//!   { leg = "straight", duration_s = 60.0 },
//!   { leg = "turn", rate_deg_s = 3.0, angle_deg = 90.0 },            # signed: + is starboard
//!   { leg = "turn", direction = "port", rate_deg_s = 1.5, duration_s = 20.0 },
//!   { leg = "turn", direction = "starboard", rate_deg_s = 2.0, to_course_deg = 180.0 },
//!   { leg = "speed", to_kn = 4.0, accel_mps2 = 0.1 },
//! ]
//! ```
//!
//! After its last leg a vessel runs straight on. A turn keeps the speed and
//! ends after `angle_deg`, `duration_s` or on reaching `to_course_deg`
//! (exactly one). A speed leg keeps the course and changes the speed at
//! `accel_mps2` until `to_kn`. Motion is exact (closed form per leg).
//!
//! # What is simulated
//!
//! - Vessels move in the site's east/north plane; a position is placed on
//!   the WGS-84 ellipsoid at height 0 with
//!   [`LocalFrame::plane_to_geodetic`](crate::geo::LocalFrame::plane_to_geodetic),
//!   and seen from each antenna through
//!   [`Antenna::range_bearing_to`](crate::geo::Antenna::range_bearing_to)
//!   (slant range, true bearing at the antenna).
//! - A radar's beam sweeps clockwise from north at a constant rate; scan
//!   `k` runs over `[first_scan_s + k·T, first_scan_s + (k+1)·T)`. A
//!   vessel's plot is stamped with the time at which the beam's bearing
//!   equals the vessel's bearing, solved with the vessel moving during the
//!   scan. It is kept with the detection probability if the slant range is
//!   within `max_range_m`, and gets Gaussian range and bearing noise.
//! - Clutter: a Poisson number of false plots per scan with mean
//!   `clutter_per_scan`, uniform in area over the coverage disc
//!   (range = `max_range_m`·√u), each stamped at its bearing's beam time.
//! - A `scan_end` (full circle) closes each scan at the end of the sweep.
//!   Only whole scans within the duration are written.
//! - Transponder reports: true position plus Gaussian noise of
//!   `position_sigma_m` on each axis, speed over ground (0.1 kn) and true
//!   course over ground (0.1°, absent at zero speed) at the vessel's own
//!   north, a true heading (1°) for Class A. Intervals, unless fixed:
//!   ITU-R M.1371-5 Annex 1 Table 1 for Class A (10 s at 0–14 kn, 3⅓ s
//!   when turning; 6 s at 14–23 kn, 2 s when turning; 2 s above 23 kn; at
//!   anchor 3 min at ≤ 3 kn, else 10 s) and Table 2 for Class B "CS"
//!   (30 s above 2 kn, 3 min at ≤ 2 kn). The first report falls at a
//!   random phase of the first interval.
//! - Truth: every vessel present, every `truth_interval_s` from the start,
//!   with its site-plane velocity.
//! - Feed resolution: times 1 ms, ranges 1 cm, bearings 1e-4°, positions
//!   1e-8°. Random numbers: ChaCha8, one stream per radar's plots, per
//!   radar's clutter and per vessel's transponder.

mod generate;
mod motion;
mod scenario;

pub use generate::{Generated, Origin, Summary, config_toml, generate_with, report_interval_s};
pub use motion::{Leg, Motion, State};
pub use scenario::{Radar, Receiver, Scenario, ScenarioError, Transponder, TransponderClass, Vessel};

use anyhow::Context;
use std::path::PathBuf;

/// Runs `sc` with `seed`.
pub fn generate(sc: &Scenario, seed: u64) -> Result<Generated, ScenarioError> {
    generate_with(sc, seed, &mut |_, _| {})
}

/// Reads a scenario file.
pub fn load(path: &std::path::Path) -> anyhow::Result<Scenario> {
    let text = std::fs::read_to_string(path).with_context(|| format!("{}: cannot read", path.display()))?;
    Scenario::from_toml_str(&text).with_context(|| format!("{}", path.display()))
}

/// `skerry simulate`: generate a feed, its truth and a configuration.
#[derive(clap::Args, Debug, Clone)]
pub struct SimulateArgs {
    /// The scenario file (TOML).
    pub scenario: PathBuf,
    /// Folder for feed.jsonl, truth.jsonl and config.toml (created if missing).
    #[arg(long)]
    pub out: PathBuf,
    /// Random seed: the same seed gives the same files.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
}

pub fn run(args: &SimulateArgs) -> anyhow::Result<()> {
    let sc = load(&args.scenario)?;
    let bar = indicatif::ProgressBar::new(0);
    if let Ok(style) = indicatif::ProgressStyle::with_template("{msg} [{bar:40}] {pos}/{len} scans") {
        bar.set_style(style.progress_chars("=> "));
    }
    bar.set_message(format!("simulating {}", sc.name));
    let g = generate_with(&sc, args.seed, &mut |done, total| {
        bar.set_length(total);
        bar.set_position(done);
    })
    .with_context(|| format!("{}", args.scenario.display()))?;
    bar.finish_and_clear();
    g.write_dir(&args.out).with_context(|| format!("{}: cannot write", args.out.display()))?;
    let s = &g.summary;
    eprintln!(
        "{}: {} scans, {} vessel plots, {} clutter plots, {} reports, {} truth records -> {}",
        sc.name,
        s.scans,
        s.vessel_plots,
        s.clutter_plots,
        s.reports,
        s.truth_records,
        args.out.display()
    );
    Ok(())
}
