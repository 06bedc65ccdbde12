//! Engine throughput over a busy feed, and the cost of `track` against
//! `check` on the same file.
//!
//! Input: the busy demo scenario (demo-feeds/busy-afternoon/feed.jsonl).
//! Figures go in BENCHMARKS.md.
//!
//! Each case runs twice: timed by the wall clock (criterion's default) and
//! by the process's CPU time, every thread together (`cpu/…`,
//! `CLOCK_PROCESS_CPUTIME_ID`). The machine is shared, so the CPU time is
//! the steadier figure of the work done; `skerry track` writes its output
//! on a second thread, so its wall time and its CPU time differ.
//! `offline/track_one_thread` is the same work with the output written
//! inline, for comparison.

use criterion::measurement::Measurement;
use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use skerry::config::Config;
use skerry::engine::Engine;
use skerry::feed::Record;
use skerry::offline::read_feeds;
use skerry::offline::writer::{Sink, TrackWriter};
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
            // As `skerry track` does: the records handed to the writer
            // thread a few hundred at a time (offline/writer.rs).
            let f = read_feeds(std::slice::from_ref(&feed), &cfg).expect("feed");
            let mut engine = Engine::new(&cfg).expect("engine");
            let mut writer = TrackWriter::spawn(Sink::Other(Box::new(std::io::sink()))).expect("writer");
            let mut out = Vec::with_capacity(512);
            for r in &f.records {
                engine.handle(r, &mut out);
                if out.len() > 256 {
                    writer.send(&mut out).expect("send");
                }
            }
            engine.finish(&mut out);
            writer.send(&mut out).expect("send");
            black_box(writer.finish().expect("written"))
        })
    });
    g.bench_function("track_one_thread", |b| {
        b.iter(|| {
            let f = read_feeds(std::slice::from_ref(&feed), &cfg).expect("feed");
            let mut engine = Engine::new(&cfg).expect("engine");
            let mut out = Vec::new();
            // Lines as bytes into one buffer, emptied every 64 KiB.
            let mut line: Vec<u8> = Vec::with_capacity(1 << 17);
            let mut bytes = 0usize;
            for r in &f.records {
                engine.handle(r, &mut out);
                for t in out.drain(..) {
                    t.write_json_bytes(&mut line);
                    line.push(b'\n');
                }
                if line.len() >= 1 << 16 {
                    bytes += line.len();
                    line.clear();
                }
            }
            engine.finish(&mut out);
            for t in out.drain(..) {
                t.write_json_bytes(&mut line);
                line.push(b'\n');
            }
            black_box(bytes + line.len())
        })
    });
    g.finish();
}

#[path = "support/cpu.rs"]
mod cpu;

fn wall(c: &mut Criterion) {
    engine_throughput(c, "");
}

fn on_cpu(c: &mut Criterion<cpu::ProcessCpu>) {
    engine_throughput(c, "cpu/");
}

criterion_group!(wall_clock, wall);
criterion_group! {
    name = cpu_time;
    config = Criterion::default().with_measurement(cpu::ProcessCpu);
    targets = on_cpu
}
criterion_main!(wall_clock, cpu_time);
