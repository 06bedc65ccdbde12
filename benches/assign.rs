//! Assignment benchmarks.
//!
//! - `dense_1000x1000`: one dense 1000 × 1000 problem with costs uniform on
//!   [0, 1), drawn by splitmix64 from a fixed seed so that
//!   `benches/scipy_lsa_timing.py` times scipy on the identical matrix.
//! - `sparse_scene`: a gated scan of 5000 tracks and 6000 plots (5000
//!   noisy returns of the tracks plus 1000 clutter plots) over a 20 km
//!   square; pairs come from a grid neighbourhood search, built untimed.

use criterion::{Criterion, criterion_group, criterion_main};
use skerry::engine::assign::{LapSolver, SparseAssigner};
use std::hint::black_box;

/// Seed shared with benches/scipy_lsa_timing.py.
const DENSE_SEED: u64 = 20260501;
const N: usize = 1000;

/// splitmix64 (Steele, Lea & Flood 2014, "Fast splittable pseudorandom
/// number generators"); the i-th output (from 0) uses state
/// seed + (i + 1)·γ, so a vectorised copy in numpy gives the same stream.
fn splitmix64(seed: u64, i: u64) -> u64 {
    let mut z = seed.wrapping_add((i + 1).wrapping_mul(0x9E37_79B9_7F4A_7C15));
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Uniform on [0, 1) with 53 random bits.
fn uniform(seed: u64, i: u64) -> f64 {
    (splitmix64(seed, i) >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

fn dense(c: &mut Criterion) {
    let cost: Vec<f64> = (0..(N * N) as u64).map(|i| uniform(DENSE_SEED, i)).collect();
    let mut solver = LapSolver::new();
    let mut r2c = Vec::new();
    let total = solver.solve(N, N, &cost, &mut r2c).expect("dense problem is feasible");
    // Printed so the figure can be compared with scipy's on the same matrix.
    eprintln!("dense_1000x1000: optimal total {total:.12}");

    let mut g = c.benchmark_group("assign");
    g.sample_size(30);
    g.bench_function("dense_1000x1000", |b| b.iter(|| solver.solve(N, N, black_box(&cost), &mut r2c)));
    // A fresh solver per call, so the buffers are allocated each time (as
    // scipy does): the fairer figure to set beside scipy's.
    g.bench_function("dense_1000x1000_fresh_solver", |b| {
        b.iter(|| {
            let mut r2c = Vec::new();
            LapSolver::new().solve(N, N, black_box(&cost), &mut r2c)
        })
    });
    g.finish();
}

struct Scene {
    row_alone: Vec<f64>,
    col_alone: Vec<f64>,
    pairs: Vec<(u32, u32, f64)>,
}

/// Tracks uniform over a square; each track gives one plot with 30 m
/// Gaussian-ish noise (sum of uniforms), and clutter plots fall uniformly.
/// A plot gates with every track within 120 m; pair cost is the squared
/// distance over (40 m)², so at most 9. The leave-alone costs (6 for a
/// plot, 4 for a track) are invented round numbers of the same order.
fn scene() -> Scene {
    const TRACKS: usize = 5000;
    const CLUTTER: usize = 1000;
    const SIDE: f64 = 20_000.0;
    const GATE: f64 = 120.0;
    const SCALE: f64 = 40.0;
    let mut i = 0u64;
    let mut next = || {
        i += 1;
        uniform(7, i)
    };
    let tracks: Vec<(f64, f64)> = (0..TRACKS).map(|_| (next() * SIDE, next() * SIDE)).collect();
    let mut plots = Vec::with_capacity(TRACKS + CLUTTER);
    for &(x, y) in &tracks {
        // Sum of 12 uniforms minus 6: unit variance, close to normal.
        let mut gauss = || (0..12).map(|_| next()).sum::<f64>() - 6.0;
        plots.push((x + 30.0 * gauss(), y + 30.0 * gauss()));
    }
    for _ in 0..CLUTTER {
        plots.push((next() * SIDE, next() * SIDE));
    }
    // Fisher–Yates so plot index carries no track identity.
    for k in (1..plots.len()).rev() {
        let j = (next() * (k + 1) as f64) as usize;
        plots.swap(k, j);
    }

    let cells = (SIDE / GATE).ceil() as usize + 1;
    let cell = |v: f64| ((v / GATE).floor().max(0.0) as usize).min(cells - 1);
    let mut grid: Vec<Vec<u32>> = vec![Vec::new(); cells * cells];
    for (t, &(x, y)) in tracks.iter().enumerate() {
        grid[cell(x) * cells + cell(y)].push(t as u32);
    }
    let mut pairs = Vec::new();
    for (p, &(x, y)) in plots.iter().enumerate() {
        let (cx, cy) = (cell(x), cell(y));
        for gx in cx.saturating_sub(1)..=(cx + 1).min(cells - 1) {
            for gy in cy.saturating_sub(1)..=(cy + 1).min(cells - 1) {
                for &t in &grid[gx * cells + gy] {
                    let (tx, ty) = tracks[t as usize];
                    let d2 = (x - tx).powi(2) + (y - ty).powi(2);
                    if d2 < GATE * GATE {
                        pairs.push((p as u32, t, d2 / (SCALE * SCALE)));
                    }
                }
            }
        }
    }
    Scene { row_alone: vec![6.0; plots.len()], col_alone: vec![4.0; TRACKS], pairs }
}

/// Largest cluster (rows + columns) of the scene, for the report.
fn largest_cluster(s: &Scene) -> (usize, usize) {
    let (nr, nc) = (s.row_alone.len(), s.col_alone.len());
    let mut parent: Vec<usize> = (0..nr + nc).collect();
    fn find(p: &mut [usize], mut x: usize) -> usize {
        while p[x] != x {
            p[x] = p[p[x]];
            x = p[x];
        }
        x
    }
    for &(r, c, _) in &s.pairs {
        let (a, b) = (find(&mut parent, r as usize), find(&mut parent, nr + c as usize));
        parent[a] = b;
    }
    let mut rows = vec![0usize; nr + nc];
    let mut cols = vec![0usize; nr + nc];
    for x in 0..nr + nc {
        let root = find(&mut parent, x);
        if x < nr { rows[root] += 1 } else { cols[root] += 1 }
    }
    (0..nr + nc).map(|x| (rows[x], cols[x])).max_by_key(|&(r, c)| r + c).unwrap_or((0, 0))
}

fn sparse(c: &mut Criterion) {
    let s = scene();
    let mut per_plot = vec![0usize; s.row_alone.len()];
    for p in &s.pairs {
        per_plot[p.0 as usize] += 1;
    }
    let max_per_plot = per_plot.iter().max().copied().unwrap_or(0);
    let mut histogram = [0usize; 5];
    for &k in &per_plot {
        histogram[k.min(4)] += 1;
    }
    let (lr, lc) = largest_cluster(&s);
    let mut assigner = SparseAssigner::new();
    let mut r2c = Vec::new();
    let total = assigner.solve(&s.row_alone, &s.col_alone, &s.pairs, &mut r2c);
    let taken = r2c.iter().filter(|c| c.is_some()).count();
    eprintln!(
        "sparse_scene: {} plots, {} tracks, {} pairs ({:.2} tracks per plot, max {}; plots gating 0/1/2/3/4+ tracks: {:?}), largest cluster {} plots × {} tracks, {} assigned, total {:.6}",
        s.row_alone.len(),
        s.col_alone.len(),
        s.pairs.len(),
        s.pairs.len() as f64 / s.row_alone.len() as f64,
        max_per_plot,
        histogram,
        lr,
        lc,
        taken,
        total
    );
    let mut g = c.benchmark_group("assign");
    g.bench_function("sparse_scene_5000_tracks_6000_plots", |b| {
        b.iter(|| assigner.solve(black_box(&s.row_alone), &s.col_alone, black_box(&s.pairs), &mut r2c))
    });
    g.finish();
}

criterion_group!(benches, dense, sparse);
criterion_main!(benches);
