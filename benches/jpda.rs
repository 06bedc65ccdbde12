//! JPDA speed: the engine with `association = "jpda"` on the busy demo
//! harbour (GNN beside it), and the time of one pathological heavy-clutter
//! batch. Figures go in BENCHMARKS.md.
//!
//! - `jpda/busy_afternoon_{jpda,gnn}`: demo-feeds/busy-afternoon (35
//!   vessels, two radars, 60 + 45 clutter plots per scan, 8 minutes), the
//!   whole feed through a fresh engine; throughput in plots.
//! - `jpda/heavy_batch_K`: 30 vessels lying in a 500 m box 2 km from the
//!   radar, tracked clean for 60 s; then one batch in which K clutter plots
//!   fall in that box (K = 500: ~15 per gate; K = 5000: ~150 per gate; up
//!   to K = 50 000) on top of the vessels' own plots, with the default
//!   overload limits (`tracking.max_plots_per_batch`,
//!   `max_new_tracks_per_batch`); the printed line also gives the time
//!   with the limits off. Only that batch is timed (the 60 s
//!   warm-up is set-up). Before the timing, one pass prints how the
//!   clusters were solved and the time of the scan that follows (which
//!   carries the tentative tracks the clutter started).

use criterion::{BatchSize, Criterion, Throughput, criterion_group, criterion_main};
use skerry::config::{Association, Config};
use skerry::engine::Engine;
use skerry::feed::{Detection, Record, TrackRecord};
use skerry::geo::{Antenna, Geodetic, LocalFrame, geodetic_to_ecef};
use skerry::offline::read_feeds;
use skerry::sim::{Scenario, generate};
use std::hint::black_box;
use std::path::PathBuf;
use std::time::Instant;

fn run_engine(cfg: &Config, records: &[Record]) -> usize {
    let mut engine = Engine::new(cfg).expect("engine");
    let mut out = Vec::with_capacity(4096);
    let mut n = 0;
    for r in records {
        engine.handle(r, &mut out);
        n += out.len();
        out.clear();
    }
    engine.finish(&mut out);
    n + out.len()
}

fn busy(c: &mut Criterion) {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-feeds/busy-afternoon");
    let mut cfg =
        Config::load(Some(&dir.join("config.toml")), &Default::default()).expect("demo config");
    let records = read_feeds(&[dir.join("feed.jsonl")], &cfg)
        .expect("feed")
        .records;
    let plots = records
        .iter()
        .filter(|r| matches!(r, Record::Detection(_)))
        .count() as u64;
    let mut g = c.benchmark_group("jpda");
    g.sample_size(20);
    g.throughput(Throughput::Elements(plots));
    cfg.tracking.association = Association::Jpda;
    {
        let mut e = Engine::new(&cfg).expect("engine");
        let mut out = Vec::new();
        for r in &records {
            e.handle(r, &mut out);
        }
        e.finish(&mut out);
        eprintln!(
            "busy afternoon, JPDA: {plots} plots, {} track records, clusters {:?}",
            out.len(),
            e.jpda_counters()
        );
    }
    g.bench_function("busy_afternoon_jpda", |b| {
        b.iter(|| black_box(run_engine(&cfg, &records)))
    });
    cfg.tracking.association = Association::Gnn;
    g.bench_function("busy_afternoon_gnn", |b| {
        b.iter(|| black_box(run_engine(&cfg, &records)))
    });
    g.finish();
}

const SCENE: &str = r#"
[scenario]
name = "moored-fleet"
start = 2026-05-14T09:30:00Z
duration_s = 70.0

[site]
lat_deg = 56.45
lon_deg = 7.35

[[radars]]
id = "kestrel-point"
lat_deg = 56.45
lon_deg = 7.35
height_m = 20.0
range_sigma_m = 10.0
bearing_sigma_deg = 0.2
detection_probability = 0.95
clutter_per_scan = 40.0
max_range_m = 6000.0
scan_period_s = 2.5
"#;

/// Box of the fleet: east 1750–2250 m, north −250–250 m.
fn scene() -> (Config, Vec<Record>, Vec<Record>) {
    let mut text = SCENE.to_string();
    for k in 0..30 {
        let (e, n) = (
            1760.0 + 480.0 * ((k * 7) % 30) as f64 / 30.0,
            -240.0 + 480.0 * ((k * 11) % 30) as f64 / 30.0,
        );
        text.push_str(&format!("\n[[vessels]]\nname = \"v{k}\"\neast_m = {e}\nnorth_m = {n}\ncourse_deg = {}\nspeed_kn = 0.5\n", (k * 37) % 360));
    }
    let sc = Scenario::from_toml_str(&text).expect("scenario");
    let g = generate(&sc, 1).expect("generate");
    let mut cfg =
        Config::from_toml_str(&g.config_toml, "generated", &Default::default()).expect("config");
    cfg.tracking.association = Association::Jpda;
    // Warm-up: the first 24 scans (60 s); the rest is the measured scan
    // and the one after it.
    let split = g
        .feed
        .iter()
        .position(|r| {
            r.time().secs_since(g.feed[0].time()) >= 60.0 - 1e-9 && matches!(r, Record::ScanEnd(_))
        })
        .expect("split");
    let warm = g.feed[..=split].to_vec();
    let rest = g.feed[split + 1..].to_vec();
    (cfg, warm, rest)
}

/// `k` clutter plots uniform over the fleet's box, stamped with the beam
/// time of their bearing in the scan that starts at `scan_start`.
fn clutter(cfg: &Config, scan_start: skerry::time::Timestamp, k: usize) -> Vec<Record> {
    let site = LocalFrame::new(Geodetic::new(cfg.site.lat_deg, cfg.site.lon_deg, 0.0));
    let s = &cfg.sensors[0];
    let antenna = Antenna::new(
        Geodetic::new(
            s.lat_deg.unwrap_or(0.0),
            s.lon_deg.unwrap_or(0.0),
            s.height_m,
        ),
        &site,
    );
    let period = s.scan_period_s.unwrap_or(2.5);
    // splitmix64: a fixed, dependency-free stream.
    let mut state = 0x5eed_u64;
    let mut unif = move || {
        state = state.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    };
    (0..k)
        .map(|_| {
            let en = nalgebra::Vector2::new(1750.0 + 500.0 * unif(), -250.0 + 500.0 * unif());
            let (range_m, b) =
                antenna.range_bearing_to(geodetic_to_ecef(site.plane_to_geodetic(en, 0.0)));
            let bearing_deg = b.to_degrees().rem_euclid(360.0);
            let time = scan_start.plus_secs(period * bearing_deg / 360.0);
            Record::Detection(Detection {
                sensor: 0,
                time,
                scan: None,
                range_m,
                bearing_deg,
                radial_speed_mps: None,
                snr_db: None,
            })
        })
        .collect()
}

/// The measured batch (the next scan's records up to the end of the
/// fleet's sector, with the clutter merged in by time) and the records
/// after it.
fn heavy_scan(
    cfg: &Config,
    warm: &[Record],
    rest: &[Record],
    k: usize,
) -> (Vec<Record>, Vec<Record>) {
    let scan_start = warm.last().expect("warm-up").time();
    let mut batch: Vec<Record> = rest
        .iter()
        .take_while(|r| r.time().secs_since(scan_start) < 2.5)
        .cloned()
        .collect();
    let after: Vec<Record> = rest[batch.len()..].to_vec();
    batch.extend(clutter(cfg, scan_start, k));
    batch.sort_by_key(|r| r.time());
    (batch, after)
}

fn warmed(cfg: &Config, warm: &[Record]) -> Engine {
    let mut e = Engine::new(cfg).expect("engine");
    let mut out = Vec::new();
    for r in warm {
        e.handle(r, &mut out);
    }
    e
}

fn heavy(c: &mut Criterion) {
    let (cfg, warm, rest) = scene();
    let mut g = c.benchmark_group("jpda");
    g.sample_size(20);
    for k in [500usize, 5000, 20000, 50000] {
        let (scan, after) = heavy_scan(&cfg, &warm, &rest, k);
        {
            // Ten fresh passes for the record: the cluster counts, the worst
            // and median time of the heavy scan, and of the scan after it
            // (which carries the tentative tracks the clutter started).
            let (mut t_scan, mut t_next) = (Vec::new(), Vec::new());
            let mut line = String::new();
            for pass in 0..10 {
                let mut e = warmed(&cfg, &warm);
                let before = e.jpda_counters();
                let mut out: Vec<TrackRecord> = Vec::new();
                let t0 = Instant::now();
                for r in &scan {
                    e.handle(r, &mut out);
                }
                // Close the last batch.
                e.advance(scan.last().expect("scan").time().plus_secs(1.0), &mut out);
                t_scan.push(t0.elapsed().as_secs_f64() * 1e3);
                let c1 = e.jpda_counters();
                let next: Vec<&Record> = after
                    .iter()
                    .take_while(|r| r.time().secs_since(scan[0].time()) < 5.0)
                    .collect();
                let t1 = Instant::now();
                for r in &next {
                    e.handle(r, &mut out);
                }
                t_next.push(t1.elapsed().as_secs_f64() * 1e3);
                if pass == 0 {
                    line = format!(
                        "{} records; clusters: exact {} ({} events), belief propagation {} (over budget {}), largest {} tracks; {} plots and {} starts dropped; {} live tracks after; next scan {} records",
                        scan.len(),
                        c1.exact - before.exact,
                        c1.events - before.events,
                        c1.belief_propagation - before.belief_propagation,
                        c1.over_budget - before.over_budget,
                        c1.largest_cluster_tracks,
                        e.stats().plots_dropped,
                        e.stats().starts_dropped,
                        e.live_tracks(),
                        next.len()
                    );
                }
            }
            let stat = |v: &mut Vec<f64>| {
                v.sort_by(f64::total_cmp);
                (v[v.len() / 2], v[v.len() - 1])
            };
            let ((sm, sx), (nm, nx)) = (stat(&mut t_scan), stat(&mut t_next));
            // The same scan through the GNN path, for scale.
            let mut gcfg = cfg.clone();
            gcfg.tracking.association = Association::Gnn;
            let mut t_gnn: Vec<f64> = (0..10)
                .map(|_| {
                    let mut e = warmed(&gcfg, &warm);
                    let mut out: Vec<TrackRecord> = Vec::new();
                    let t0 = Instant::now();
                    for r in &scan {
                        e.handle(r, &mut out);
                    }
                    e.advance(scan[scan.len() - 1].time().plus_secs(1.0), &mut out);
                    t0.elapsed().as_secs_f64() * 1e3
                })
                .collect();
            let (gm, gx) = stat(&mut t_gnn);
            // Both again with the overload limits off, for comparison.
            let mut ucfg = cfg.clone();
            ucfg.tracking.max_new_tracks_per_batch = u32::MAX;
            ucfg.tracking.max_plots_per_batch = u32::MAX;
            let mut ugcfg = gcfg.clone();
            ugcfg.tracking.max_new_tracks_per_batch = u32::MAX;
            ugcfg.tracking.max_plots_per_batch = u32::MAX;
            let mut t_unc: Vec<f64> = [&ucfg, &ugcfg]
                .iter()
                .map(|c| {
                    let mut v: Vec<f64> = (0..5)
                        .map(|_| {
                            let mut e = warmed(c, &warm);
                            let mut out: Vec<TrackRecord> = Vec::new();
                            let t0 = Instant::now();
                            for r in &scan {
                                e.handle(r, &mut out);
                            }
                            e.advance(scan[scan.len() - 1].time().plus_secs(1.0), &mut out);
                            t0.elapsed().as_secs_f64() * 1e3
                        })
                        .collect();
                    stat(&mut v).0
                })
                .collect();
            let (um, ugm) = (t_unc[0], t_unc[1]);
            t_unc.clear();
            eprintln!(
                "heavy batch K={k}: {line}; heavy scan median {sm:.2} ms, max {sx:.2} ms; next scan median {nm:.2} ms, max {nx:.2} ms; GNN heavy scan median {gm:.2} ms, max {gx:.2} ms; with the overload limits off: JPDA {um:.2} ms, GNN {ugm:.2} ms (medians of 5)"
            );
        }
        g.throughput(Throughput::Elements(scan.len() as u64));
        g.bench_function(format!("heavy_batch_{k}"), |b| {
            b.iter_batched(
                || warmed(&cfg, &warm),
                |mut e| {
                    let mut out = Vec::new();
                    for r in &scan {
                        e.handle(r, &mut out);
                    }
                    e.advance(scan[scan.len() - 1].time().plus_secs(1.0), &mut out);
                    black_box(out.len())
                },
                BatchSize::PerIteration,
            )
        });
    }
    g.finish();
}

criterion_group!(benches, busy, heavy);
criterion_main!(benches);
