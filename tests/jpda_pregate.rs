//! The JPDA path skips the IMM prediction of a track when a cheap bound
//! shows no plot of the batch can fall in its gate (jpda_batch.rs,
//! `Reach`). The bound is conservative, so the output must be the same to
//! the byte with the pre-gate on and off: checked on the busy demo
//! harbour (35 vessels, heavy clutter, manoeuvres).

use skerry::config::{Association, Config};
use skerry::engine::Engine;
use skerry::offline::read_feeds;
use std::path::PathBuf;

#[test]
fn pregate_changes_nothing_on_the_busy_harbour() {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-feeds/busy-afternoon");
    let mut cfg =
        Config::load(Some(&dir.join("config.toml")), &Default::default()).expect("config");
    cfg.tracking.association = Association::Jpda;
    let records = read_feeds(&[dir.join("feed.jsonl")], &cfg)
        .expect("feed")
        .records;
    let run = |pregate: bool| {
        let mut e = Engine::new(&cfg).expect("engine");
        e.set_jpda_pregate(pregate);
        let mut out = Vec::new();
        for r in &records {
            e.handle(r, &mut out);
        }
        e.finish(&mut out);
        out.iter().map(|r| r.to_json()).collect::<Vec<_>>()
    };
    let (on, off) = (run(true), run(false));
    assert!(on.len() > 10_000);
    assert_eq!(on.len(), off.len());
    for (i, (a, b)) in on.iter().zip(&off).enumerate() {
        assert_eq!(a, b, "record {i}");
    }
}
