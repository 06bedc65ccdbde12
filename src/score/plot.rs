//! `--plot`: truth and tracks drawn on the site plane, as SVG.

use crate::feed::tracks::VesselLabel;
use crate::feed::{TrackRecord, TruthRecord};
use crate::geo::{Geodetic, LocalFrame};
use plotters::prelude::*;
use std::collections::BTreeMap;
use std::path::Path;

/// Points of one line in time order: (time, (east km, north km)).
type Line = Vec<(crate::time::Timestamp, (f64, f64))>;

/// Draws each truth vessel as a wide grey line with its label, and each
/// track's firm (confirmed or coasting) records as a thin line of its own
/// colour, on equal east/north scales in kilometres.
pub fn plot_svg(path: &Path, truth: &[TruthRecord], tracks: &[TrackRecord], frame: &LocalFrame) -> anyhow::Result<()> {
    let mut vessels: BTreeMap<&VesselLabel, Line> = BTreeMap::new();
    for t in truth {
        let p = frame.geodetic_to_plane(Geodetic::new(t.lat_deg, t.lon_deg, 0.0));
        vessels.entry(&t.vessel).or_default().push((t.time, (p.x / 1000.0, p.y / 1000.0)));
    }
    let mut firm: BTreeMap<u64, Line> = BTreeMap::new();
    for r in tracks.iter().filter(|r| r.status.is_firm()) {
        firm.entry(r.track).or_default().push((r.time, (r.east_m / 1000.0, r.north_m / 1000.0)));
    }
    for v in vessels.values_mut().chain(firm.values_mut()) {
        v.sort_by_key(|p| p.0);
    }

    // A square window around everything, so both axes share one scale.
    let (mut x0, mut x1, mut y0, mut y1) = (f64::INFINITY, f64::NEG_INFINITY, f64::INFINITY, f64::NEG_INFINITY);
    for (_, (x, y)) in vessels.values().chain(firm.values()).flatten() {
        x0 = x0.min(*x);
        x1 = x1.max(*x);
        y0 = y0.min(*y);
        y1 = y1.max(*y);
    }
    if !x0.is_finite() {
        (x0, x1, y0, y1) = (-1.0, 1.0, -1.0, 1.0);
    }
    let half = 0.5 * (x1 - x0).max(y1 - y0).max(0.2) * 1.05;
    let (cx, cy) = (0.5 * (x0 + x1), 0.5 * (y0 + y1));

    let root = SVGBackend::new(path, (1000, 1000)).into_drawing_area();
    let err = |e: &dyn std::fmt::Display| anyhow::anyhow!("{e}");
    root.fill(&WHITE).map_err(|e| err(&e))?;
    let mut chart = ChartBuilder::on(&root)
        .caption("truth (grey) and firm tracks (colours)", ("sans-serif", 20))
        .margin(15)
        .x_label_area_size(45)
        .y_label_area_size(55)
        .build_cartesian_2d((cx - half)..(cx + half), (cy - half)..(cy + half))
        .map_err(|e| err(&e))?;
    chart.configure_mesh().x_desc("east (km)").y_desc("north (km)").draw().map_err(|e| err(&e))?;

    let grey = RGBColor(150, 150, 150).mix(0.6).stroke_width(5);
    for (label, pts) in &vessels {
        chart.draw_series(LineSeries::new(pts.iter().map(|p| p.1), grey)).map_err(|e| err(&e))?;
        if let Some((_, at)) = pts.first() {
            chart.draw_series(std::iter::once(Text::new(label.to_string(), *at, ("sans-serif", 11)))).map_err(|e| err(&e))?;
        }
    }
    for (i, (_, pts)) in firm.iter().enumerate() {
        let style = Palette99::pick(i).stroke_width(1);
        chart.draw_series(LineSeries::new(pts.iter().map(|p| p.1), style)).map_err(|e| err(&e))?;
    }
    root.present().map_err(|e| err(&e))?;
    Ok(())
}
