//! Once warmed up, the solvers do not touch the heap: a counting global
//! allocator (per thread, so the test harness's own threads do not count)
//! sees no allocation during later solves of problems no larger than the
//! first.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use skerry::engine::assign::{LapSolver, SparseAssigner};
use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

struct Counting;

thread_local! {
    static ALLOCS: Cell<usize> = const { Cell::new(0) };
}

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        let _ = ALLOCS.try_with(|c| c.set(c.get() + 1));
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        let _ = ALLOCS.try_with(|c| c.set(c.get() + 1));
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

fn allocs() -> usize {
    ALLOCS.with(|c| c.get())
}

#[test]
fn dense_solver_does_not_allocate_after_warm_up() {
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let problems: Vec<(usize, usize, Vec<f64>)> = [(200, 250), (150, 250), (200, 200), (1, 3), (0, 4)]
        .into_iter()
        .map(|(r, c)| (r, c, (0..r * c).map(|_| if rng.random::<f64>() < 0.1 { f64::INFINITY } else { rng.random() }).collect()))
        .collect();
    let mut solver = LapSolver::new();
    let mut r2c = Vec::new();
    solver.solve(problems[0].0, problems[0].1, &problems[0].2, &mut r2c).expect("feasible");
    let before = allocs();
    for (rows, cols, cost) in &problems {
        solver.solve(*rows, *cols, cost, &mut r2c).expect("feasible");
    }
    assert_eq!(allocs() - before, 0);
}

#[test]
fn sparse_assigner_does_not_allocate_after_warm_up() {
    let mut rng = ChaCha8Rng::seed_from_u64(12);
    let (nr, nc) = (300, 250);
    let mut pairs = Vec::new();
    for r in 0..nr as u32 {
        for c in 0..nc as u32 {
            if rng.random::<f64>() < 0.006 {
                pairs.push((r, c, rng.random_range(0.0..9.0)));
            }
        }
    }
    let row_alone = vec![5.0; nr];
    let col_alone = vec![3.0; nc];
    let mut assigner = SparseAssigner::new();
    let mut r2c = Vec::new();
    let first = assigner.solve(&row_alone, &col_alone, &pairs, &mut r2c);
    assert!(r2c.iter().any(|c| c.is_some()));

    // Same gating, new costs and a new pair order: a later scan.
    let mut later = pairs.clone();
    for p in &mut later {
        p.2 = rng.random_range(0.0..9.0);
    }
    later.reverse();
    let before = allocs();
    let second = assigner.solve(&row_alone, &col_alone, &later, &mut r2c);
    let again = assigner.solve(&row_alone, &col_alone, &pairs, &mut r2c);
    assert_eq!(allocs() - before, 0);
    assert_eq!(first, again);
    assert!(second.is_finite());
}
