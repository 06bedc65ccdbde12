//! Close passes: two vessels crossing at 10–30°, within one gate of each
//! other for tens of scans, Pd 0.9, light clutter, made with skerry's
//! simulator. Judged at the instants where the vessels are well apart
//! with skerry's scoring (ID switches, breaks; src/score).

mod jpda_support;

use jpda_support::{Pass, campaign};
use std::time::Instant;

/// Crossings at 10–30° about 9.5 km from the radar (cross-range plot
/// error ≈ 33 m, so both plots fall in both gates for 20–60 scans), 40
/// clutter plots per scan: JPDA (the default, JPDA*) keeps both tracks
/// without a swap or a break in at least 90% of the runs; GNN and plain
/// JPDA are printed beside it. 50 seeds (the issue asks for at least
/// 20): at 20 one run more or less moves the rate by 5 points.
#[test]
fn close_pass_seeds() {
    let t0 = Instant::now();
    let n: u64 = std::env::var("JPDA_SEEDS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(50);
    let [gnn, jpda, star] = campaign(0..n, Pass::for_seed);
    eprintln!("{}", gnn.line("GNN  "));
    eprintln!("{}", jpda.line("JPDA "));
    eprintln!("{}", star.line("JPDA*"));
    eprintln!("{n} seeds in {:.1} s", t0.elapsed().as_secs_f64());
    assert!(star.kept_rate() >= 0.9, "{}", star.line("JPDA*"));
}

/// Two vessels in company 25–45 m abreast for over three minutes, then
/// one turns away: the set-up where JPDA tracks coalesce. Coalescence is
/// measured on the vessels' own tracks at the instants they are 20–150 m
/// apart (tests/jpda_support: separation deficit, merged instants).
#[test]
fn company_seeds() {
    let t0 = Instant::now();
    let n: u64 = std::env::var("JPDA_SEEDS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(20);
    let [gnn, jpda, star] = campaign(0..n, Pass::company_for_seed);
    eprintln!("{}", gnn.line("GNN  "));
    eprintln!("{}", jpda.line("JPDA "));
    eprintln!("{}", star.line("JPDA*"));
    eprintln!("{n} seeds in {:.1} s", t0.elapsed().as_secs_f64());
    // The coalescence guard (Blom & Bloem 2000): with JPDA* the two tracks
    // are drawn together (under half the true separation) at fewer
    // instants than with plain JPDA, and continuity does not suffer.
    assert!(
        star.merged_sum < jpda.merged_sum,
        "{}\n{}",
        jpda.line("JPDA "),
        star.line("JPDA*")
    );
    assert!(star.kept_rate() >= 0.9, "{}", star.line("JPDA*"));
}

/// One of the two crossing vessels sends transponder reports (Class A,
/// every 10 s at 10 kn): its track holds the identity and is pulled back
/// onto it by every report, so no run swaps, in either mode.
#[test]
fn close_pass_with_transponder_never_swaps() {
    let n: u64 = std::env::var("JPDA_SEEDS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(20);
    let [gnn, jpda, star] = campaign(0..n, |seed| Pass {
        transponder: true,
        ..Pass::for_seed(seed)
    });
    eprintln!("with transponder:");
    eprintln!("{}", gnn.line("GNN  "));
    eprintln!("{}", jpda.line("JPDA "));
    eprintln!("{}", star.line("JPDA*"));
    for t in [&gnn, &jpda, &star] {
        assert_eq!(t.swapped, 0);
    }
}
