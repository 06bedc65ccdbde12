//! The overload limits of a batch count everything they drop:
//! `tracking.max_new_tracks_per_batch` (tentative-track starts) and
//! `tracking.max_plots_per_batch` (plots), in the engine's counters and in
//! the daemon's `/metrics`.
//!
//! The scene is one batch of plots spread so far apart that none can be
//! another's track (every plot starts a track when nothing is capped), so
//! the expected counts follow from the definition of the caps alone.

mod daemon_support;

use daemon_support::*;
use skerry::config::Config;
use skerry::daemon::replay::{self, Pace, Target};
use skerry::engine::{Dropped, Engine};
use skerry::feed::{Detection, Record, TrackStatus};
use std::time::{Duration, Instant};

/// `n` plots of kestrel-point within 0.1 s (one batch: the span is
/// 2.5 s / 16), 1 km apart in range and 7° apart in bearing.
fn burst(n: usize) -> Vec<Record> {
    (0..n)
        .map(|i| {
            Record::Detection(Detection {
                sensor: 0,
                time: t0().plus_secs(i as f64 * 0.1 / n as f64),
                scan: Some(0),
                range_m: 1000.0 + 400.0 * i as f64,
                bearing_deg: (i as f64 * 7.0) % 360.0,
                radial_speed_mps: None,
                snr_db: None,
            })
        })
        .collect()
}

fn run(cfg: &Config, recs: &[Record]) -> (usize, Dropped) {
    let mut e = Engine::new(cfg).expect("engine");
    let mut out = Vec::new();
    for r in recs {
        e.handle(r, &mut out);
    }
    e.advance(t0().plus_secs(1.0), &mut out);
    let started = out.iter().filter(|r| r.status == TrackStatus::Tentative).count();
    assert_eq!(e.stats().tracks_started as usize, started);
    (started, e.dropped()[0])
}

#[test]
fn start_cap_counts_every_dropped_start() {
    let recs = burst(40);
    // Uncapped: every plot starts a track (the scene's premise).
    let one = ("SKERRY__TRACKING__PLOTS_TO_START", "1");
    let (started, d) = run(&config(&[one]), &recs);
    assert_eq!((started, d), (40, Dropped::default()));
    for (gnn_or_jpda, cap) in [("gnn", 5), ("jpda", 5), ("gnn", 39), ("jpda", 1)] {
        let cfg = config(&[one, ("SKERRY__TRACKING__ASSOCIATION", gnn_or_jpda), ("SKERRY__TRACKING__MAX_NEW_TRACKS_PER_BATCH", &cap.to_string())]);
        let (started, d) = run(&cfg, &recs);
        assert_eq!(started, cap, "{gnn_or_jpda}");
        assert_eq!(d, Dropped { plots: 0, starts: 40 - cap as u64 }, "{gnn_or_jpda}");
    }
    // Two-plot starts (the default): a lone plot is held as a candidate,
    // which the cap counts as a start; none of these plots has a second
    // one, so no track starts, and the cap drops the same plots.
    for (gnn_or_jpda, cap) in [("gnn", 5), ("jpda", 7)] {
        let cfg = config(&[("SKERRY__TRACKING__ASSOCIATION", gnn_or_jpda), ("SKERRY__TRACKING__MAX_NEW_TRACKS_PER_BATCH", &cap.to_string())]);
        let (started, d) = run(&cfg, &recs);
        assert_eq!(started, 0, "{gnn_or_jpda}");
        assert_eq!(d, Dropped { plots: 0, starts: 40 - cap as u64 }, "{gnn_or_jpda}");
    }
}

#[test]
fn plot_cap_counts_every_dropped_plot() {
    let mut recs = burst(40);
    // A second batch (after the span) is not held by the first's cap.
    recs.extend(burst(3).into_iter().map(|r| match r {
        Record::Detection(mut d) => {
            d.time = d.time.plus_secs(0.5);
            d.bearing_deg = (d.bearing_deg + 3.0) % 360.0;
            Record::Detection(d)
        }
        other => other,
    }));
    for assoc in ["gnn", "jpda"] {
        let cfg = config(&[("SKERRY__TRACKING__PLOTS_TO_START", "1"), ("SKERRY__TRACKING__ASSOCIATION", assoc), ("SKERRY__TRACKING__MAX_PLOTS_PER_BATCH", "16")]);
        let (started, d) = run(&cfg, &recs);
        assert_eq!(started, 16 + 3, "{assoc}");
        assert_eq!(d, Dropped { plots: 40 - 16, starts: 0 }, "{assoc}");
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn metrics_carry_the_dropped_counts() {
    let cfg = config(&[("SKERRY__TRACKING__MAX_NEW_TRACKS_PER_BATCH", "10"), ("SKERRY__TRACKING__MAX_PLOTS_PER_BATCH", "30")]);
    let table = cfg.sensor_table();
    let mut recs = burst(40);
    // The scan's end closes the batch (nothing later would: the feed
    // time never passes the batch's span).
    recs.push(Record::ScanEnd(skerry::feed::ScanEnd { sensor: 0, time: t0().plus_secs(2.5), scan: 0, sector_deg: None }));
    let lines = lines(&recs, &table);
    let d = start(cfg.clone(), Engine::new(&cfg).expect("engine")).await;
    let pace = Pace { speed: 0.0, max_rate: 50_000.0, ..Pace::default() };
    replay::replay(&lines, &Target::Udp(d.addrs.udp.to_string()), &pace, &indicatif::ProgressBar::hidden()).await.expect("replay");
    // Released about a reorder window later; the gauges follow within
    // 100 ms.
    let deadline = Instant::now() + Duration::from_secs(15);
    let (plots, starts) = loop {
        let m = metrics(d.addrs.http).await;
        let p = sample(&m, "skerry_plots_dropped_total{sensor=\"kestrel-point\"}");
        let s = sample(&m, "skerry_track_starts_dropped_total{sensor=\"kestrel-point\"}");
        if p == Some(10.0) || Instant::now() > deadline {
            break (p, s);
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    };
    d.stop().await;
    // 40 plots: 30 taken, 10 dropped; of the 30, 10 start tracks, 20 are
    // dropped starts.
    assert_eq!((plots, starts), (Some(10.0), Some(20.0)));
}
