//! Same scenario and seed: the same bytes. Also the committed demo feeds:
//! their scenarios load, their configurations load and match the demo
//! site, their feeds decode in time order, and the small ones regenerate
//! byte for byte.

use skerry::config::{Config, DEMO_TOML};
use skerry::sim::{Scenario, generate};
use std::collections::HashMap;
use std::path::PathBuf;

fn demo_dir(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-feeds").join(name)
}

const SEED: u64 = 20260514; // the seed demo-feeds/regenerate.sh uses

fn load(name: &str) -> Scenario {
    Scenario::from_toml_str(&std::fs::read_to_string(demo_dir(name).join("scenario.toml")).unwrap()).unwrap()
}

#[test]
fn same_seed_same_bytes() {
    let sc = load("close-pass");
    let a = generate(&sc, 77).unwrap();
    let b = generate(&sc, 77).unwrap();
    assert_eq!(a.feed_jsonl(), b.feed_jsonl());
    assert_eq!(a.truth_jsonl(), b.truth_jsonl());
    assert_eq!(a.config_toml, b.config_toml);
    let c = generate(&sc, 78).unwrap();
    assert_ne!(a.feed_jsonl(), c.feed_jsonl());
    // Truth does not depend on the seed.
    assert_eq!(a.truth_jsonl(), c.truth_jsonl());
}

#[test]
fn demo_feeds_are_consistent() {
    let demo = Config::from_toml_str(DEMO_TOML, "demo-site.toml", &HashMap::new()).unwrap();
    for name in ["quiet-morning", "busy-afternoon", "close-pass"] {
        let dir = demo_dir(name);
        let sc = load(name);
        let cfg_text = std::fs::read_to_string(dir.join("config.toml")).unwrap();
        let cfg = Config::from_toml_str(&cfg_text, name, &HashMap::new()).unwrap();
        // The demo site and its sensor ids.
        assert_eq!((cfg.site.lat_deg, cfg.site.lon_deg), (demo.site.lat_deg, demo.site.lon_deg), "{name}");
        let ids = |c: &Config| c.sensors.iter().map(|s| (s.id.clone(), s.kind, s.lat_deg, s.lon_deg)).collect::<Vec<_>>();
        assert_eq!(ids(&cfg), ids(&demo), "{name}");
        assert_eq!(cfg_text, skerry::sim::config_toml(&sc), "{name}: config.toml is stale");

        let feed = std::fs::read(dir.join("feed.jsonl")).unwrap();
        assert!(feed.len() < 6_000_000, "{name}: {} bytes", feed.len());
        let table = cfg.sensor_table();
        let mut last = None;
        for (i, line) in feed.split(|&b| b == b'\n').filter(|l| !l.is_empty()).enumerate() {
            let r = skerry::feed::decode_line(line, &table).unwrap_or_else(|e| panic!("{name}:{}: {:?}", i + 1, e.reason));
            assert!(last.is_none_or(|t| t <= r.time()), "{name}:{}: out of time order", i + 1);
            last = Some(r.time());
        }
        let truth = std::fs::read_to_string(dir.join("truth.jsonl")).unwrap();
        assert!(skerry::score::parse_truth_jsonl(&truth, name).unwrap().len() > 100);
    }
}

#[test]
fn small_demo_feeds_regenerate() {
    for name in ["quiet-morning", "close-pass"] {
        let g = generate(&load(name), SEED).unwrap();
        let dir = demo_dir(name);
        assert!(g.feed_jsonl() == std::fs::read_to_string(dir.join("feed.jsonl")).unwrap(), "{name}: feed.jsonl is stale, run demo-feeds/regenerate.sh");
        assert!(g.truth_jsonl() == std::fs::read_to_string(dir.join("truth.jsonl")).unwrap(), "{name}: truth.jsonl is stale");
    }
}
