//! Snapshot and restore, by property: for random feeds from skerry's
//! simulator (random seeds, vessels, clutter, two radars, transponder
//! reports, exact duplicates; GNN and JPDA), running records[0..k],
//! snapshotting, restoring and running records[k..] gives the same track
//! records, byte for byte, as one run over all records. The reference is
//! the definition itself: the uninterrupted run.
//!
//! Also: two snapshots of one state are equal bytes, and so is the
//! snapshot of a restored state; restore refuses truncated, damaged and
//! foreign bytes and a changed configuration with an error, never a panic.

use proptest::prelude::*;
use rand::{Rng, SeedableRng};
use skerry::config::{Association, Config};
use skerry::feed::{Record, TrackRecord};
use skerry::offline::feed_order;
use skerry::sim::{Scenario, generate};
use skerry::snapshot::{Pipeline, SnapshotError};

/// A scenario at the invented demo harbour: `vessels` vessels at random
/// positions, courses and speeds, some turning, every other one with a
/// transponder; two radars with `clutter` false plots per scan.
fn scenario(seed: u64, vessels: usize, clutter: f64) -> String {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut s = format!(
        r#"
[scenario]
name = "snapshot-props"
start = 2026-05-14T06:00:00Z
duration_s = 75.0

[site]
lat_deg = 56.45
lon_deg = 7.35

[[radars]]
id = "kestrel-point"
lat_deg = 56.462
lon_deg = 7.343
height_m = 32.0
range_sigma_m = 12.0
bearing_sigma_deg = 0.25
detection_probability = 0.88
clutter_per_scan = {clutter}
max_range_m = 9000.0
scan_period_s = 2.5

[[radars]]
id = "gullhead"
lat_deg = 56.431
lon_deg = 7.392
height_m = 25.0
range_sigma_m = 15.0
bearing_sigma_deg = 0.3
detection_probability = 0.85
clutter_per_scan = {clutter}
max_range_m = 9000.0
scan_period_s = 3.0
first_scan_s = 0.7

[transponder]
id = "sound-ais"
position_sigma_m = 10.0
"#
    );
    for i in 0..vessels {
        let east = rng.random_range(-5000.0..5000.0f64).round();
        let north = rng.random_range(-4000.0..4000.0f64).round();
        // Rounded, 359.5 and up would give 360, which a scenario refuses.
        let course = rng.random_range(0.0..360.0f64).round() % 360.0;
        let speed = rng.random_range(3.0..18.0f64).round();
        s.push_str(&format!("\n[[vessels]]\nname = \"v{i}\"\neast_m = {east:.1}\nnorth_m = {north:.1}\ncourse_deg = {course:.1}\nspeed_kn = {speed:.1}\n"));
        if i % 2 == 0 {
            s.push_str(&format!("mmsi = \"2009000{i:02}\"\nreport_interval_s = 4.0\n"));
        }
        if rng.random_bool(0.5) {
            s.push_str("legs = [{ leg = \"straight\", duration_s = 20.0 }, { leg = \"turn\", rate_deg_s = 3.0, angle_deg = 60.0 }]\n");
        }
    }
    s
}

struct Case {
    cfg: Config,
    records: Vec<Record>,
    /// After record i, tell the engine feed time has reached it (as the
    /// daemon does between batches).
    advance: Vec<bool>,
}

fn case(seed: u64, vessels: usize, clutter: f64, association: Association) -> Case {
    let g = generate(&Scenario::from_toml_str(&scenario(seed, vessels, clutter)).expect("scenario"), seed).expect("generate");
    let mut cfg = Config::from_toml_str(&g.config_toml, "generated", &Default::default()).expect("config");
    cfg.tracking.association = association;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed ^ 0x5eed);
    let mut records = g.feed.clone();
    // Exact duplicates, which the screen must still know after a restore.
    for r in &g.feed {
        if rng.random_bool(0.03) {
            records.push(r.clone());
        }
    }
    records.sort_by(feed_order);
    let advance = (0..records.len()).map(|_| rng.random_bool(0.05)).collect();
    Case { cfg, records, advance }
}

fn write(out: &[TrackRecord], bytes: &mut String) {
    for r in out {
        r.write_json(bytes);
        bytes.push('\n');
    }
}

/// Runs records[range] through `p`, appending the JSON lines made.
fn run(p: &mut Pipeline, c: &Case, range: std::ops::Range<usize>, text: &mut String) {
    let mut out = Vec::new();
    for i in range {
        let _ = p.handle(&c.records[i], &mut out);
        if c.advance[i] {
            p.advance(c.records[i].time(), &mut out);
        }
    }
    write(&out, text);
}

fn whole(c: &Case) -> String {
    let mut p = Pipeline::new(&c.cfg).unwrap();
    let mut text = String::new();
    run(&mut p, c, 0..c.records.len(), &mut text);
    let mut out = Vec::new();
    p.finish(&mut out);
    write(&out, &mut text);
    text
}

/// Runs records[..k], snapshots, restores, runs the rest; returns the
/// output and the snapshot.
fn split(c: &Case, k: usize) -> (String, Vec<u8>) {
    let mut p = Pipeline::new(&c.cfg).unwrap();
    let mut text = String::new();
    run(&mut p, c, 0..k, &mut text);
    let bytes = p.snapshot();
    assert_eq!(p.snapshot(), bytes, "two snapshots of one state differ");
    drop(p);
    let mut q = Pipeline::restore(&c.cfg, &bytes).expect("restore");
    assert_eq!(q.snapshot(), bytes, "the snapshot of the restored state differs");
    run(&mut q, c, k..c.records.len(), &mut text);
    let mut out = Vec::new();
    q.finish(&mut out);
    write(&out, &mut text);
    (text, bytes)
}

fn refusals(c: &Case, bytes: &[u8], rng: &mut rand_chacha::ChaCha8Rng) {
    // Truncated anywhere.
    for _ in 0..8 {
        let n = rng.random_range(0..bytes.len());
        assert!(Pipeline::restore(&c.cfg, &bytes[..n]).is_err(), "truncated to {n} bytes");
    }
    // One byte changed anywhere: the checksum (or the magic) catches it.
    for _ in 0..16 {
        let mut b = bytes.to_vec();
        let at = rng.random_range(0..b.len());
        b[at] ^= rng.random_range(1..=255u8);
        assert!(Pipeline::restore(&c.cfg, &b).is_err(), "byte {at} changed");
    }
    // Bytes appended.
    let mut b = bytes.to_vec();
    b.push(0);
    assert!(Pipeline::restore(&c.cfg, &b).is_err());
    // Noise, and noise behind a good magic.
    let noise: Vec<u8> = (0..rng.random_range(0..300)).map(|_| rng.random()).collect();
    assert!(Pipeline::restore(&c.cfg, &noise).is_err());
    let mut b = b"SKERRYST".to_vec();
    b.extend_from_slice(&noise);
    assert!(Pipeline::restore(&c.cfg, &b).is_err());
    // A changed configuration, section by section.
    let mut cfg = c.cfg.clone();
    cfg.tracking.gate_probability = 0.995;
    assert_eq!(Pipeline::restore(&cfg, bytes).err(), Some(SnapshotError::ConfigChanged("[tracking] section")));
    let mut cfg = c.cfg.clone();
    cfg.sensors[1].range_sigma_m = Some(16.0);
    assert_eq!(Pipeline::restore(&cfg, bytes).err(), Some(SnapshotError::ConfigChanged("sensor table")));
    let mut cfg = c.cfg.clone();
    cfg.sensors.swap(0, 1);
    assert_eq!(Pipeline::restore(&cfg, bytes).err(), Some(SnapshotError::ConfigChanged("sensor table")));
    let mut cfg = c.cfg.clone();
    cfg.site.lat_deg += 1e-6;
    assert_eq!(Pipeline::restore(&cfg, bytes).err(), Some(SnapshotError::ConfigChanged("site origin")));
    // Keys that do not touch tracking do not matter.
    let mut cfg = c.cfg.clone();
    cfg.serve.reorder_window_s = 2.0;
    cfg.sensors[0].allow_from = vec!["10.0.0.0/8".into()];
    assert!(Pipeline::restore(&cfg, bytes).is_ok());
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 24, failure_persistence: None, ..ProptestConfig::default() })]

    #[test]
    fn split_runs_equal_one_run(
        seed in 0u64..1_000_000,
        vessels in 2usize..6,
        clutter in 0.0f64..20.0,
        jpda in any::<bool>(),
        fractions in proptest::collection::vec(0.0f64..1.0, 3),
    ) {
        let association = if jpda { Association::Jpda } else { Association::Gnn };
        let c = case(seed, vessels, clutter.round(), association);
        let want = whole(&c);
        prop_assert!(want.lines().count() > 20, "a feed that makes few tracks checks little");
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        // The ends too: a snapshot of a fresh pipeline, and of a whole run.
        let ks: Vec<usize> = fractions.iter().map(|f| (f * c.records.len() as f64) as usize).chain([0, c.records.len()]).collect();
        for (j, &k) in ks.iter().enumerate() {
            let (got, bytes) = split(&c, k);
            prop_assert!(got == want, "split at {} of {} ({:?}): output differs", k, c.records.len(), association);
            if j == 0 {
                refusals(&c, &bytes, &mut rng);
            }
        }
    }
}
