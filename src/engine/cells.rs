//! The track grid: grid cell → indices into the track table.
//!
//! Cells over the radars' coverage (and a margin around it) are held in
//! a dense table, found by arithmetic; a cell outside it (a track that
//! coasted far out, or one made from transponder reports beyond every
//! radar) goes in a hash map. Every list holds its tracks in the order
//! they were filed, whichever part holds it, and a cell with no track
//! reads as absent in both, so what the engine sees, and what a snapshot
//! saves, is exactly what a map of every cell would give.
//!
//! Why: gating reads the nine cells around each plot, and the map's
//! lookups (hash, probe, compare) were a fifth of the batch's own time on
//! the busy demo.

use super::SensorModel;
use std::collections::HashMap;

/// A cell's column and row.
pub(crate) type Cell = (i32, i32);

/// Most cells the dense table has on a side; coverage wider than that
/// keeps the table over its middle and the rest in the map.
const MAX_DENSE_SIDE: i64 = 256;

/// How far past a radar's maximum range the dense table reaches (m): a
/// track leaving coverage coasts on in it for a while (common practice
/// to give room; the value only moves work between the two parts).
const DENSE_MARGIN_M: f64 = 5_000.0;

/// Cell → indices into the track table.
#[derive(Clone, Debug, Default)]
pub(crate) struct TrackCells {
    cx0: i32,
    cy0: i32,
    nx: i32,
    ny: i32,
    /// Cell (cx, cy) at `(cx − cx0) · ny + (cy − cy0)`: the three cells
    /// of a column of a plot's neighbourhood lie side by side.
    dense: Vec<Vec<u32>>,
    sparse: HashMap<Cell, Vec<u32>, std::hash::BuildHasherDefault<super::CellHasher>>,
}

impl TrackCells {
    /// A grid of `cell_m`-metre cells whose dense part covers every
    /// radar's range with a margin.
    pub(crate) fn over(models: &[SensorModel], cell_m: f64) -> TrackCells {
        let (x0, y0, x1, y1) = super::sensors::coverage_box(models, DENSE_MARGIN_M);
        if !(x1 > x0 && y1 > y0 && cell_m > 0.0) {
            return TrackCells::default();
        }
        let side = |lo: f64, hi: f64| -> (i32, i32) {
            let (a, b) = ((lo / cell_m).floor(), (hi / cell_m).floor());
            // Coordinates beyond any real coverage: leave it all to the map.
            if !(a > -1e9 && b < 1e9) {
                return (0, 0);
            }
            let (a, b) = (a as i64, b as i64);
            let n = (b - a + 1).min(MAX_DENSE_SIDE);
            let mid = (a + b) / 2;
            let start = if b - a + 1 > MAX_DENSE_SIDE { mid - n / 2 } else { a };
            (start as i32, n as i32)
        };
        let (cx0, nx) = side(x0, x1);
        let (cy0, ny) = side(y0, y1);
        TrackCells { cx0, cy0, nx, ny, dense: vec![Vec::new(); (nx as usize) * (ny as usize)], sparse: Default::default() }
    }

    /// The dense slot of `c`, if it has one.
    #[inline]
    fn slot(&self, c: Cell) -> Option<usize> {
        let (i, j) = (c.0.wrapping_sub(self.cx0), c.1.wrapping_sub(self.cy0));
        // One unsigned compare per axis catches both sides.
        if (i as u32) < (self.nx as u32) && (j as u32) < (self.ny as u32) { Some(i as usize * self.ny as usize + j as usize) } else { None }
    }

    /// The tracks filed in `c`; `None` for a cell with none.
    #[inline]
    pub(crate) fn get(&self, c: &Cell) -> Option<&Vec<u32>> {
        match self.slot(*c) {
            Some(k) => {
                let v = &self.dense[k];
                if v.is_empty() { None } else { Some(v) }
            }
            None => self.sparse.get(c),
        }
    }

    /// Appends the tracks of the 3 × 3 cells around `(cx, cy)` to `out`,
    /// column by column (`cx − 1` first), each column from `cy − 1` up:
    /// the order of reading [`TrackCells::get`] cell by cell in that order.
    #[inline]
    pub(crate) fn gather_around(&self, cx: i32, cy: i32, out: &mut Vec<u32>) {
        if let (Some(first), Some(_)) = (self.slot((cx - 1, cy - 1)), self.slot((cx + 1, cy + 1))) {
            let step = self.ny as usize;
            for col in 0..3 {
                let k = first + col * step;
                for v in &self.dense[k..k + 3] {
                    out.extend_from_slice(v);
                }
            }
            return;
        }
        for dx in -1..=1 {
            for dy in -1..=1 {
                if let Some(v) = self.get(&(cx + dx, cy + dy)) {
                    out.extend_from_slice(v);
                }
            }
        }
    }

    /// Files track `idx` in cell `c`, after the tracks already there.
    pub(crate) fn push(&mut self, c: Cell, idx: u32) {
        match self.slot(c) {
            Some(k) => self.dense[k].push(idx),
            None => self.sparse.entry(c).or_default().push(idx),
        }
    }

    /// Takes track `idx` out of cell `c` (the last of the cell's list
    /// takes its place); nothing if it is not there.
    pub(crate) fn take_out(&mut self, c: Cell, idx: u32) {
        match self.slot(c) {
            Some(k) => {
                let v = &mut self.dense[k];
                if let Some(p) = v.iter().position(|&i| i == idx) {
                    v.swap_remove(p);
                }
            }
            None => {
                if let Some(v) = self.sparse.get_mut(&c) {
                    if let Some(p) = v.iter().position(|&i| i == idx) {
                        v.swap_remove(p);
                    }
                    if v.is_empty() {
                        self.sparse.remove(&c);
                    }
                }
            }
        }
    }

    /// Empties cell `c`, keeping its buffer for refilling (a map cell's
    /// until [`TrackCells::drop_empty`]).
    pub(crate) fn empty(&mut self, c: Cell) {
        match self.slot(c) {
            Some(k) => self.dense[k].clear(),
            None => {
                if let Some(v) = self.sparse.get_mut(&c) {
                    v.clear();
                }
            }
        }
    }

    /// Forgets the map's cells left empty.
    pub(crate) fn drop_empty(&mut self) {
        self.sparse.retain(|_, v| !v.is_empty());
    }

    /// Every cell holding a track, with its list (in no set order).
    pub(crate) fn iter(&self) -> impl Iterator<Item = (Cell, &Vec<u32>)> + '_ {
        let ny = self.ny.max(1) as usize;
        let dense = self.dense.iter().enumerate().filter(|(_, v)| !v.is_empty()).map(move |(k, v)| ((self.cx0 + (k / ny) as i32, self.cy0 + (k % ny) as i32), v));
        dense.chain(self.sparse.iter().filter(|(_, v)| !v.is_empty()).map(|(c, v)| (*c, v)))
    }

    /// Replaces the contents with `cells` (each list as it is given).
    pub(crate) fn fill(&mut self, cells: impl IntoIterator<Item = (Cell, Vec<u32>)>) {
        for v in &mut self.dense {
            v.clear();
        }
        self.sparse.clear();
        for (c, v) in cells {
            if v.is_empty() {
                continue;
            }
            match self.slot(c) {
                Some(k) => self.dense[k] = v,
                None => {
                    self.sparse.insert(c, v);
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;
    use std::collections::BTreeMap;

    fn small() -> TrackCells {
        TrackCells { cx0: -3, cy0: -2, nx: 6, ny: 5, dense: vec![Vec::new(); 30], sparse: Default::default() }
    }

    /// Random filing, moving and refilling against a plain ordered map of
    /// every cell (the definition): the same lists in the same order, the
    /// same neighbourhoods, on cells inside, across and outside the dense
    /// part.
    #[test]
    fn the_grid_is_a_map_of_cells() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let mut g = small();
        let mut want: BTreeMap<Cell, Vec<u32>> = BTreeMap::new();
        let mut at: Vec<Option<Cell>> = vec![None; 60];
        for step in 0..20_000 {
            let idx = rng.random_range(0..60u32);
            let c = (rng.random_range(-6..6), rng.random_range(-5..6));
            if let Some(old) = at[idx as usize] {
                g.take_out(old, idx);
                let v = want.get_mut(&old).unwrap();
                let p = v.iter().position(|&i| i == idx).unwrap();
                v.swap_remove(p);
                if v.is_empty() {
                    want.remove(&old);
                }
            }
            g.push(c, idx);
            want.entry(c).or_default().push(idx);
            at[idx as usize] = Some(c);
            if step % 997 == 0 {
                // Refill as compaction does.
                for c in at.iter().flatten() {
                    g.empty(*c);
                }
                want.clear();
                for (i, c) in at.iter().enumerate() {
                    if let Some(c) = c {
                        g.push(*c, i as u32);
                        want.entry(*c).or_default().push(i as u32);
                    }
                }
                g.drop_empty();
            }
            if step % 101 == 0 {
                let mut got: Vec<(Cell, Vec<u32>)> = g.iter().map(|(c, v)| (c, v.clone())).collect();
                got.sort();
                let w: Vec<(Cell, Vec<u32>)> = want.iter().map(|(c, v)| (*c, v.clone())).collect();
                assert_eq!(got, w, "step {step}");
                for cx in -7..7 {
                    for cy in -6..7 {
                        assert_eq!(g.get(&(cx, cy)), want.get(&(cx, cy)));
                        let mut a = Vec::new();
                        g.gather_around(cx, cy, &mut a);
                        let mut b = Vec::new();
                        for dx in -1..=1 {
                            for dy in -1..=1 {
                                if let Some(v) = want.get(&(cx + dx, cy + dy)) {
                                    b.extend_from_slice(v);
                                }
                            }
                        }
                        assert_eq!(a, b, "around ({cx}, {cy}) at step {step}");
                    }
                }
            }
        }
        let saved: Vec<(Cell, Vec<u32>)> = want.iter().map(|(c, v)| (*c, v.clone())).collect();
        let mut h = small();
        h.fill(saved.clone());
        let mut got: Vec<(Cell, Vec<u32>)> = h.iter().map(|(c, v)| (c, v.clone())).collect();
        got.sort();
        assert_eq!(got, saved);
    }

    /// With no dense part (no radar), everything lives in the map.
    #[test]
    fn no_radar_means_all_in_the_map() {
        let mut g = TrackCells::default();
        g.push((5, 5), 1);
        g.push((5, 5), 2);
        g.push((-9, 0), 3);
        let mut a = Vec::new();
        g.gather_around(4, 4, &mut a);
        assert_eq!(a, vec![1, 2]);
        g.take_out((5, 5), 1);
        assert_eq!(g.get(&(5, 5)), Some(&vec![2]));
        g.take_out((5, 5), 2);
        assert_eq!(g.get(&(5, 5)), None);
        assert_eq!(g.iter().count(), 1);
    }
}
