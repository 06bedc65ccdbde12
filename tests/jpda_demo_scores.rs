//! The demo scenarios tracked with JPDA, scored beside GNN with skerry's
//! scoring (GOSPA and continuity, src/score). JPDA must stay within the
//! bounds the GNN guard (tests/demo_scores.rs) sets for each demo.

use skerry::config::{Association, Config};
use skerry::geo::{Geodetic, LocalFrame};
use skerry::offline::read_feeds;
use skerry::score::{ScoreOptions, parse_truth_jsonl, score};
use std::path::PathBuf;

/// name, GOSPA, switches, breaks, false tracks: the GNN guard's bounds.
const BOUNDS: [(&str, f64, u64, u64, usize); 3] = [
    ("quiet-morning", 19.5, 1, 1, 0),
    ("busy-afternoon", 72.0, 10, 8, 2),
    ("close-pass", 12.5, 0, 0, 0),
];

#[test]
fn jpda_demo_scores_within_the_gnn_bounds() {
    for (name, gospa_max, switches_max, breaks_max, false_max) in BOUNDS {
        let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
            .join("demo-feeds")
            .join(name);
        let mut cfg =
            Config::load(Some(&dir.join("config.toml")), &Default::default()).expect("config");
        let feed = read_feeds(&[dir.join("feed.jsonl")], &cfg).expect("feed");
        let truth = parse_truth_jsonl(
            &std::fs::read_to_string(dir.join("truth.jsonl")).expect("truth"),
            "truth",
        )
        .expect("truth");
        let frame = LocalFrame::new(Geodetic::new(
            cfg.site.lat_deg,
            cfg.site.lon_deg,
            cfg.site.height_m,
        ));
        let mut scored = Vec::new();
        for assoc in [Association::Gnn, Association::Jpda] {
            cfg.tracking.association = assoc;
            let tracks = skerry::cli::run_engine(&cfg, &feed.records).expect("engine");
            let r = score(&truth, &tracks, &frame, &ScoreOptions::default()).expect("score");
            let c = &r.continuity;
            eprintln!(
                "{name} {assoc:?}: GOSPA {:.2} m, switches {}, breaks {}, false {}",
                r.gospa_mean, c.id_switches, c.track_breaks, c.false_tracks
            );
            if std::env::var("JPDA_DEBUG").is_ok() {
                for v in r
                    .per_vessel
                    .iter()
                    .filter(|v| v.id_switches + v.track_breaks > 0)
                {
                    eprintln!(
                        "    {}: switches {} breaks {} tracks {:?}",
                        v.vessel, v.id_switches, v.track_breaks, v.tracks
                    );
                }
            }
            scored.push(r);
        }
        let (r, c) = (&scored[1], &scored[1].continuity);
        assert!(r.gospa_mean <= gospa_max, "{name}: GOSPA {}", r.gospa_mean);
        assert!(
            c.id_switches <= switches_max
                && c.track_breaks <= breaks_max
                && c.false_tracks <= false_max,
            "{name}: {c:?}"
        );
    }
}
