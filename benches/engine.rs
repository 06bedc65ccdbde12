//! Engine throughput over a busy feed, and the cost of `track` against
//! `check` on the same file.
//!
//! Input: the busy demo scenario (demo-feeds/busy-afternoon/feed.jsonl).
//! Figures go in BENCHMARKS.md.
//!
//! Each case runs twice: timed by the wall clock (criterion's default) and
//! by the thread's own CPU time (`cpu/…`, `CLOCK_THREAD_CPUTIME_ID`). The
//! machine is shared, so the CPU time is the steadier figure of what one
//! core does.

use criterion::measurement::Measurement;
use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use skerry::config::Config;
use skerry::engine::Engine;
use skerry::feed::Record;
use skerry::feed::tracks::TrackLineWriter;
use skerry::offline::read_feeds;
use std::hint::black_box;
use std::path::PathBuf;

fn scenario() -> (Config, PathBuf) {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-feeds/busy-afternoon");
    let cfg = Config::load(Some(&dir.join("config.toml")), &Default::default()).expect("demo config");
    (cfg, dir.join("feed.jsonl"))
}

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

fn engine_throughput<M: Measurement>(c: &mut Criterion<M>, prefix: &str) {
    let (cfg, feed) = scenario();
    let records = read_feeds(std::slice::from_ref(&feed), &cfg).expect("feed").records;
    let plots = records.iter().filter(|r| matches!(r, Record::Detection(_))).count() as u64;
    let mut g = c.benchmark_group(format!("{prefix}engine"));
    g.sample_size(10);
    g.throughput(Throughput::Elements(plots));
    g.bench_function("busy_afternoon_plots", |b| b.iter(|| black_box(run_engine(&cfg, &records))));
    g.finish();

    // check = read + decode + screen + order; track = that + engine + JSON out.
    let mut g = c.benchmark_group(format!("{prefix}offline"));
    g.sample_size(10);
    g.throughput(Throughput::Elements(plots));
    g.bench_function("check", |b| b.iter(|| black_box(read_feeds(std::slice::from_ref(&feed), &cfg).expect("feed").records.len())));
    g.bench_function("track", |b| {
        b.iter(|| {
            let f = read_feeds(std::slice::from_ref(&feed), &cfg).expect("feed");
            let mut engine = Engine::new(&cfg).expect("engine");
            let mut out = Vec::new();
            // As `skerry track` writes: lines as bytes into one buffer,
            // emptied every 64 KiB.
            let mut line: Vec<u8> = Vec::with_capacity(1 << 17);
            let mut lines = TrackLineWriter::new();
            let mut bytes = 0usize;
            for r in &f.records {
                engine.handle(r, &mut out);
                for t in out.drain(..) {
                    lines.write(&t, &mut line);
                    line.push(b'\n');
                }
                if line.len() >= 1 << 16 {
                    bytes += line.len();
                    line.clear();
                }
            }
            engine.finish(&mut out);
            for t in out.drain(..) {
                lines.write(&t, &mut line);
                line.push(b'\n');
            }
            black_box(bytes + line.len())
        })
    });
    g.finish();
}

/// The two commands as a user runs them: `skerry check` on the file, and
/// `skerry track` writing its tracks to a file, each a whole process
/// (start-up, configuration, reading, and for track the engine and the
/// file written). Timed by the wall clock only: the work is in a child
/// process, which the thread CPU clock does not see.
fn commands(c: &mut Criterion) {
    let (_, feed) = scenario();
    let dir = feed.parent().expect("scenario dir").to_path_buf();
    let config = dir.join("config.toml");
    let bin = env!("CARGO_BIN_EXE_skerry");
    let out = std::env::temp_dir().join(format!("skerry-bench-tracks-{}.jsonl", std::process::id()));
    let run = |args: &[&std::ffi::OsStr]| {
        let st = std::process::Command::new(bin).args(args).stdout(std::process::Stdio::null()).stderr(std::process::Stdio::null()).status().expect("run skerry");
        assert!(st.success(), "skerry {args:?} failed");
    };
    let mut g = c.benchmark_group("command");
    g.sample_size(40);
    g.bench_function("check", |b| b.iter(|| run(&["check".as_ref(), "--config".as_ref(), config.as_os_str(), feed.as_os_str()])));
    g.bench_function("track", |b| b.iter(|| run(&["track".as_ref(), "--config".as_ref(), config.as_os_str(), "--out".as_ref(), out.as_os_str(), feed.as_os_str()])));
    g.finish();
    let _ = std::fs::remove_file(&out);
}

#[path = "support/cpu.rs"]
mod cpu;

fn wall(c: &mut Criterion) {
    engine_throughput(c, "");
}

fn on_cpu(c: &mut Criterion<cpu::ThreadCpu>) {
    engine_throughput(c, "cpu/");
}

criterion_group!(wall_clock, wall, commands);
criterion_group! {
    name = cpu_time;
    config = Criterion::default().with_measurement(cpu::ThreadCpu);
    targets = on_cpu
}
criterion_main!(wall_clock, cpu_time);
