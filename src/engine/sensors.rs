//! Per-sensor geometry and measurement models, prepared once from the
//! configuration so that converting a plot costs a few dozen flops.
//!
//! A radar plot (slant range r, true bearing b) is placed in the antenna's
//! own east-north-up frame on the osculating sphere of the ellipsoid in
//! the plot's azimuth (Euler's radius): this gives the horizontal range d
//! and the drop u below the antenna. The antenna frame maps to the site
//! frame by a fixed rigid motion (R_site · R_antennaᵀ and the antenna's
//! site position), so the site east/north follow exactly. The tests check
//! this against the iterative placement on the ellipsoid in
//! [`crate::geo::Antenna::plot_to_site`].

use super::measure::{BearingNoise, polar_to_cartesian_with};
use crate::config::{Config, SensorConfig};
use crate::feed::SensorKind;
use crate::geo::{Antenna, Geodetic, LocalFrame, radii_of_curvature};
use nalgebra::{Matrix2, Matrix3, Vector2, Vector3};

/// Geometry of one radar.
#[derive(Clone, Debug)]
pub struct RadarGeometry {
    pub antenna: Antenna,
    /// Antenna frame → site frame rotation.
    rot: Matrix3<f64>,
    /// The antenna's position in the site frame (east, north, up).
    offset: Vector3<f64>,
    /// Radii of curvature at the antenna (meridian, prime vertical).
    radii: (f64, f64),
    height_m: f64,
}

impl RadarGeometry {
    pub fn new(position: Geodetic, site: &LocalFrame) -> Self {
        let antenna = Antenna::new(position, site);
        let rot = site.rotation() * antenna.local.rotation().transpose();
        let offset = site.geodetic_to_enu(position);
        RadarGeometry { antenna, rot, offset, radii: radii_of_curvature(position.lat_deg.to_radians()), height_m: position.h_m }
    }

    /// Horizontal range and drop (negative up) in the antenna frame of a
    /// surface point at slant range `range_m` and bearing with sine and
    /// cosine `sb`, `cb`.
    fn horizontal(&self, range_m: f64, sb: f64, cb: f64) -> (f64, f64) {
        // Euler's radius M N / (N cos² + M sin²) straight from the
        // bearing's sine and cosine (no round trip through atan2).
        let (m, n) = self.radii;
        let r_earth = m * n / (n * cb * cb + m * sb * sb);
        let ra = r_earth + self.height_m;
        let rt = r_earth;
        let cos_g = ((ra * ra + rt * rt - range_m * range_m) / (2.0 * ra * rt)).clamp(-1.0, 1.0);
        let sin_g = (1.0 - cos_g * cos_g).max(0.0).sqrt();
        (rt * sin_g, rt * cos_g - ra)
    }

    /// Site east/north of a surface point at slant range and bearing.
    pub fn to_site(&self, range_m: f64, bearing_rad: f64) -> Vector2<f64> {
        let (sb, cb) = bearing_rad.sin_cos();
        let (d, u) = self.horizontal(range_m, sb, cb);
        let p = self.rot * Vector3::new(d * sb, d * cb, u) + self.offset;
        Vector2::new(p.x, p.y)
    }

    /// Horizontal range of a surface point at this slant range.
    pub fn ground_range(&self, range_m: f64, bearing_rad: f64) -> f64 {
        let (sb, cb) = bearing_rad.sin_cos();
        self.horizontal(range_m, sb, cb).0
    }

    /// The converted measurement: site east/north mean and covariance of a
    /// plot, by the unbiased polar conversion in the antenna's horizontal
    /// plane, turned into the site plane.
    pub fn convert(&self, range_m: f64, bearing_rad: f64, sigma_r_m: f64, sigma_b_rad: f64) -> (Vector2<f64>, Matrix2<f64>) {
        self.convert_with(range_m, bearing_rad, sigma_r_m, &BearingNoise::new(sigma_b_rad))
    }

    /// [`RadarGeometry::convert`] with the sensor's bearing factors worked
    /// out beforehand: the same numbers.
    pub fn convert_with(&self, range_m: f64, bearing_rad: f64, sigma_r_m: f64, noise: &BearingNoise) -> (Vector2<f64>, Matrix2<f64>) {
        let (sb, cb) = bearing_rad.sin_cos();
        let (d, u) = self.horizontal(range_m, sb, cb);
        // Horizontal range error: dd/dr = r / d for the slant geometry.
        let sigma_d = sigma_r_m * if d > 1.0 { range_m / d } else { 1.0 };
        let (mean_h, cov_h) = polar_to_cartesian_with(d, (sb, cb), sigma_d, noise);
        let p = self.rot * Vector3::new(mean_h.x, mean_h.y, u) + self.offset;
        let j = self.rot.fixed_view::<2, 2>(0, 0).into_owned();
        (Vector2::new(p.x, p.y), j * cov_h * j.transpose())
    }

    /// The slant range of [`RadarGeometry::range_bearing_of`] alone, the
    /// same number.
    pub fn range_of(&self, en: &Vector2<f64>) -> f64 {
        let de = en.x - self.offset.x;
        let dn = en.y - self.offset.y;
        let v = self.rot.transpose() * Vector3::new(de, dn, 0.0);
        v.x.hypot(v.y).hypot(self.height_m)
    }

    /// Slant range and bearing (rad) from the antenna to a site-plane
    /// surface point: the approximate inverse used for coverage tests.
    pub fn range_bearing_of(&self, en: &Vector2<f64>) -> (f64, f64) {
        // Coverage tests need metres, not millimetres: flat geometry.
        let de = en.x - self.offset.x;
        let dn = en.y - self.offset.y;
        let v = self.rot.transpose() * Vector3::new(de, dn, 0.0);
        let b = v.x.atan2(v.y).rem_euclid(std::f64::consts::TAU);
        (v.x.hypot(v.y).hypot(self.height_m), b)
    }
}

/// Everything the engine knows about one configured sensor.
#[derive(Clone, Debug)]
pub struct SensorModel {
    pub kind: SensorKind,
    pub radar: Option<RadarGeometry>,
    pub sigma_r_m: f64,
    pub sigma_b_rad: f64,
    /// The conversion's factors of `sigma_b_rad`, worked out once.
    pub bearing_noise: BearingNoise,
    pub pd: f64,
    /// Clutter plots per m² per scan: clutter_per_scan over the coverage
    /// disc.
    pub clutter_density: f64,
    pub max_range_m: f64,
    pub scan_period_s: f64,
    pub position_sigma_m: f64,
}

/// The box `(x0, y0, x1, y1)` in the site plane holding every radar's
/// maximum range and `margin` metres more; empty (x0 > x1) with no radar.
pub(crate) fn coverage_box(models: &[SensorModel], margin: f64) -> (f64, f64, f64, f64) {
    let (mut x0, mut y0, mut x1, mut y1) = (f64::INFINITY, f64::INFINITY, f64::NEG_INFINITY, f64::NEG_INFINITY);
    for m in models {
        if let Some(r) = &m.radar {
            let (c, d) = (r.antenna.site_en, m.max_range_m + margin);
            x0 = x0.min(c.x - d);
            y0 = y0.min(c.y - d);
            x1 = x1.max(c.x + d);
            y1 = y1.max(c.y + d);
        }
    }
    (x0, y0, x1, y1)
}

impl SensorModel {
    pub fn new(s: &SensorConfig, site: &LocalFrame) -> Self {
        let radar = match (s.kind, s.lat_deg, s.lon_deg) {
            (SensorKind::Radar, Some(lat), Some(lon)) => Some(RadarGeometry::new(Geodetic::new(lat, lon, s.height_m), site)),
            _ => None,
        };
        let max_range_m = s.max_range_m.unwrap_or(0.0);
        let area = std::f64::consts::PI * max_range_m * max_range_m;
        SensorModel {
            kind: s.kind,
            radar,
            sigma_r_m: s.range_sigma_m.unwrap_or(0.0),
            sigma_b_rad: s.bearing_sigma_deg.unwrap_or(0.0).to_radians(),
            bearing_noise: BearingNoise::new(s.bearing_sigma_deg.unwrap_or(0.0).to_radians()),
            pd: s.detection_probability,
            clutter_density: if area > 0.0 { s.clutter_per_scan / area } else { 0.0 },
            max_range_m,
            scan_period_s: s.scan_period_s.unwrap_or(0.0),
            position_sigma_m: s.position_sigma_m.unwrap_or(0.0),
        }
    }

    pub fn all(cfg: &Config, site: &LocalFrame) -> Vec<SensorModel> {
        cfg.sensors.iter().map(|s| SensorModel::new(s, site)).collect()
    }

    /// Whether a site-plane point is within this radar's range and, if a
    /// sector `[from, to]` (degrees, clockwise) is given, inside it.
    pub fn covers(&self, en: &Vector2<f64>, sector_deg: Option<[f64; 2]>) -> bool {
        let Some(radar) = &self.radar else { return false };
        // The range alone first: the bearing (an atan2) only matters for
        // a sector.
        if radar.range_of(en) > self.max_range_m {
            return false;
        }
        match sector_deg {
            None => true,
            Some([from, to]) => {
                let b = radar.range_bearing_of(en).1.to_degrees();
                let span = (to - from).rem_euclid(360.0);
                let off = (b - from).rem_euclid(360.0);
                // A zero span is read as the full circle (a north marker).
                span == 0.0 || off <= span
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fast_placement_matches_the_ellipsoid() {
        // Reference: the iterative placement on the WGS-84 ellipsoid
        // (geo::Antenna::plot_to_site), itself checked against geographiclib.
        let site = LocalFrame::new(Geodetic::new(56.45, 7.35, 0.0));
        for &(lat, lon, h) in &[(56.462, 7.343, 32.0), (56.431, 7.392, 24.0), (56.50, 7.20, 80.0)] {
            let g = RadarGeometry::new(Geodetic::new(lat, lon, h), &site);
            for i in 0..36 {
                for &r in &[200.0, 3000.0, 9000.0, 18_000.0, 30_000.0] {
                    let b = (i as f64 * 10.0 + 3.0).to_radians();
                    let exact = g.antenna.plot_to_site(&site, r, b, 0.0);
                    let fast = g.to_site(r, b);
                    assert!((exact - fast).norm() < 0.005, "r={r} b={b} err={}", (exact - fast).norm());
                }
            }
        }
    }

    #[test]
    fn fast_lat_lon_matches_exact() {
        let site = LocalFrame::new(Geodetic::new(56.45, 7.35, 0.0));
        let radii = radii_of_curvature(56.45f64.to_radians());
        for i in 0..40 {
            let a = i as f64 * 0.7;
            let en = Vector2::new(a.cos() * 1250.0 * i as f64, a.sin() * 1250.0 * i as f64);
            let exact = site.plane_to_geodetic(en, 0.0);
            let (lat, lon) = site.plane_to_lat_lon_fast(en, radii);
            // 1e-8 degrees is about 1 mm.
            assert!((lat - exact.lat_deg).abs() < 1e-8 && (lon - exact.lon_deg).abs() < 1e-8, "{en:?}");
        }
    }

    #[test]
    fn sectors() {
        let site = LocalFrame::new(Geodetic::new(56.45, 7.35, 0.0));
        let cfg = SensorConfig {
            id: "r".into(),
            kind: SensorKind::Radar,
            lat_deg: Some(56.45),
            lon_deg: Some(7.35),
            height_m: 10.0,
            range_sigma_m: Some(10.0),
            bearing_sigma_deg: Some(0.2),
            detection_probability: 0.9,
            clutter_per_scan: 10.0,
            max_range_m: Some(10_000.0),
            scan_period_s: Some(2.5),
            position_sigma_m: None,
            asterix_sac: None,
            asterix_sic: None,
            nmea_udp: None,
            allow_from: vec![],
        };
        let m = SensorModel::new(&cfg, &site);
        let north = Vector2::new(0.0, 5000.0);
        let east = Vector2::new(5000.0, 0.0);
        assert!(m.covers(&north, None) && !m.covers(&Vector2::new(0.0, 11_000.0), None));
        assert!(m.covers(&north, Some([350.0, 10.0])) && !m.covers(&east, Some([350.0, 10.0])));
        assert!(m.covers(&east, Some([80.0, 100.0])));
    }
}
