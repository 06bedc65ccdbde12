//! Trade input throughput: ASTERIX category 048 plots and AIS sentences
//! per second on one core.
//!
//! Run: `cargo bench --bench trade`. The figures for the record are in
//! BENCHMARKS.md.
//!
//! Each benchmark runs twice: timed by the wall clock (criterion's
//! default) and by the thread's own CPU time (`cpu/` groups), which is
//! the one-core figure even when other processes share the machine.

use criterion::measurement::Measurement;
use criterion::{BenchmarkId, Criterion, Throughput, criterion_group, criterion_main};
use skerry::feed::asterix::{AsterixDecoder, AsterixItem, SourceTable};
use skerry::feed::nmea::{AisDecoder, AisOutcome};
use skerry::time::Timestamp;
use std::hint::black_box;

/// One datagram: a category 048 block of `n` plot records as a harbour
/// radar sends them: I048/010, /140, /020, /040, /130 (PRL, PAM) and
/// /120 (CAL), 19 octets each.
fn cat048_datagram(n: usize) -> Vec<u8> {
    let mut body = Vec::new();
    for i in 0..n {
        let tod: u32 = (6 * 3600 * 128 + i) as u32;
        let rho = 500 + (i as u16 * 37) % 9000;
        let theta = (i as u16).wrapping_mul(1091);
        body.extend_from_slice(&[0xF3, 0x01, 0x04]); // FRN 1-4, 7; FRN 20
        body.extend_from_slice(&[25, 201]);
        body.extend_from_slice(&tod.to_be_bytes()[1..]);
        body.push(0x20); // TYP = 1, single PSR plot
        body.extend_from_slice(&rho.to_be_bytes());
        body.extend_from_slice(&theta.to_be_bytes());
        body.extend_from_slice(&[0x18, 20, (-40i8) as u8]); // PRL, PAM
        body.extend_from_slice(&[0x80, 0x00, (i % 20) as u8]); // CAL
    }
    let mut d = vec![48];
    d.extend_from_slice(&((body.len() + 3) as u16).to_be_bytes());
    d.extend_from_slice(&body);
    d
}

fn asterix<M: Measurement>(c: &mut Criterion<M>, prefix: &str) {
    let mut g = c.benchmark_group(format!("{prefix}asterix_cat048"));
    let now = Timestamp::parse_rfc3339("2026-05-14T06:00:30Z").unwrap();
    for n in [1usize, 60] {
        let dg = cat048_datagram(n);
        let mut dec = AsterixDecoder::new(SourceTable::new([(25, 201, 0), (25, 202, 1)]).unwrap());
        g.throughput(Throughput::Elements(n as u64));
        g.bench_with_input(BenchmarkId::new("plots_per_datagram", n), &dg, |b, dg| {
            b.iter(|| {
                let mut sum = 0.0;
                dec.decode(black_box(dg), now, &mut |x| {
                    if let Ok(AsterixItem::Plot(p)) = x {
                        sum += p.detection.range_m;
                    }
                });
                black_box(sum)
            })
        });
    }
    g.finish();
}

/// Position reports of invented vessels, encoded by pyais 3.3.1 (the
/// fixture session's position lines, tag blocks included and stripped).
fn ais_lines(tagged: bool) -> Vec<Vec<u8>> {
    let doc: serde_json::Value = serde_json::from_str(include_str!("../tests/fixtures/ais_session.json")).unwrap();
    doc["lines"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|l| l["expect"]["kind"] == "position")
        .map(|l| {
            let s = l["line"].as_str().unwrap();
            let s = if tagged || !s.starts_with('\\') { s } else { &s[s[1..].find('\\').unwrap() + 2..] };
            s.as_bytes().to_vec()
        })
        .collect()
}

fn nmea<M: Measurement>(c: &mut Criterion<M>, prefix: &str) {
    let mut g = c.benchmark_group(format!("{prefix}nmea_ais"));
    let now = Timestamp::parse_rfc3339("2026-05-14T06:00:30Z").unwrap();
    for (name, tagged) in [("plain", false), ("tag_block", true)] {
        let lines = ais_lines(tagged);
        let mut dec = AisDecoder::new(0);
        g.throughput(Throughput::Elements(lines.len() as u64));
        g.bench_function(BenchmarkId::new("position_sentences", name), |b| {
            b.iter(|| {
                let mut sum = 0.0;
                for l in &lines {
                    if let AisOutcome::Position(p) = dec.decode_line(black_box(l), Some(now)) {
                        sum += p.report.lat_deg;
                    }
                }
                black_box(sum)
            })
        });
    }
    g.finish();
}

#[path = "support/cpu.rs"]
mod cpu;

fn wall(c: &mut Criterion) {
    asterix(c, "");
    nmea(c, "");
}

fn on_cpu(c: &mut Criterion<cpu::ThreadCpu>) {
    asterix(c, "cpu/");
    nmea(c, "cpu/");
}

criterion_group!(wall_clock, wall);
criterion_group! {
    name = cpu_time;
    config = Criterion::default().with_measurement(cpu::ThreadCpu);
    targets = on_cpu
}
criterion_main!(wall_clock, cpu_time);
