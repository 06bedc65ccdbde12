//! Memory per live track: builds an engine holding 10,000 live tracks and
//! reads the process's resident set size before and after
//! (/proc/self/statm, Linux). Prints the figures for BENCHMARKS.md.
//! Run: `cargo bench --bench memory`.

use skerry::config::Config;
use skerry::engine::Engine;
use skerry::feed::{Detection, Record};
use skerry::time::Timestamp;

fn rss_bytes() -> u64 {
    let s = std::fs::read_to_string("/proc/self/statm").unwrap_or_default();
    let pages: u64 = s.split_whitespace().nth(1).and_then(|v| v.parse().ok()).unwrap_or(0);
    pages * 4096
}

fn main() {
    // Only run under `cargo bench` (criterion-style harness flag).
    if !std::env::args().any(|a| a == "--bench") {
        return;
    }
    let mut cfg = Config::load(None, &Default::default()).expect("demo config");
    // One radar; a large range so that 10,000 well-separated plots fit.
    cfg.sensors.truncate(1);
    cfg.sensors[0].max_range_m = Some(60_000.0);
    cfg.sensors[0].clutter_per_scan = 0.0;
    let n = 10_000usize;
    let t0 = Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").expect("time");
    let before = rss_bytes();
    let mut engine = Engine::new(&cfg).expect("engine");
    let mut out = Vec::new();
    // Plots 300 m apart on a spiral of bearings and ranges: each starts its
    // own track. All within one second so that none times out.
    for i in 0..n {
        let d = Record::Detection(Detection {
            sensor: 0,
            time: t0.plus_secs(i as f64 * 1e-4),
            scan: Some(0),
            range_m: 1000.0 + (i / 100) as f64 * 300.0,
            bearing_deg: (i % 100) as f64 * 3.6,
            radial_speed_mps: None,
            snr_db: None,
        });
        engine.handle(&d, &mut out);
        out.clear();
    }
    engine.finish(&mut out);
    let after = rss_bytes();
    let live = engine.live_tracks();
    let per = (after.saturating_sub(before)) as f64 / live as f64;
    println!("memory: {live} live tracks; resident set grew {:.1} MB; {:.0} bytes per live track (size_of Track = {} bytes)", (after - before) as f64 / 1e6, per, std::mem::size_of::<skerry::engine::track::Track>());
    println!("memory: resident set with {live} live tracks: {:.1} MB", after as f64 / 1e6);
}
