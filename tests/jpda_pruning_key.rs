//! `tracking.jpda_pruning` chooses JPDA* or plain JPDA as
//! `Engine::set_jpda_pruning` does: on two vessels in company (where the
//! two differ, tests/jpda_close_pass.rs), the key set to false gives the
//! records of the setter set to false, and the default gives JPDA*'s.

mod jpda_support;

use jpda_support::{Pass, make};
use skerry::config::{Association, Config};
use skerry::engine::Engine;
use skerry::feed::TrackRecord;

fn run(cfg: &Config, g: &skerry::sim::Generated, setter: Option<bool>) -> Vec<String> {
    let mut e = Engine::new(cfg).expect("engine");
    if let Some(p) = setter {
        e.set_jpda_pruning(p);
    }
    let mut out: Vec<TrackRecord> = Vec::new();
    for r in &g.feed {
        e.handle(r, &mut out);
    }
    e.finish(&mut out);
    out.iter().map(TrackRecord::to_json).collect()
}

#[test]
fn pruning_key_matches_the_setter() {
    let g = make(&Pass::company_for_seed(3), 3);
    let mut cfg = Config::from_toml_str(&g.config_toml, "generated", &Default::default()).expect("config");
    cfg.tracking.association = Association::Jpda;
    assert!(cfg.tracking.jpda_pruning, "JPDA* is the default");
    let star = run(&cfg, &g, None);
    assert_eq!(star, run(&cfg, &g, Some(true)));
    let plain = run(&cfg, &g, Some(false));
    assert_ne!(star, plain, "the scene tells the two apart");
    cfg.tracking.jpda_pruning = false;
    assert_eq!(run(&cfg, &g, None), plain);
}
