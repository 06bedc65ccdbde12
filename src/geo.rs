//! WGS-84 geodesy: geodetic ↔ ECEF ↔ local east-north-up, and the
//! placement of a radar plot measured from an antenna.
//!
//! The tracking plane is the site's local tangent plane: east and north of
//! the site origin, the up component dropped. A point on the sea surface
//! (ellipsoidal height 0, or a configured height) maps to one (east, north)
//! pair and back, exactly up to the iteration tolerance (well below 1 mm
//! within 100 km of the origin).
//!
//! A radar measures slant range and true bearing at its own antenna, whose
//! local north differs from the site's by the meridian convergence (about
//! 0.14° between sites 10 km apart east-west at 57° N). [`Antenna`] turns a plot into
//! ECEF through the antenna's own frame, then into the site plane, so both
//! the antenna height and the convergence are handled without approximation.

use nalgebra::{Matrix2, Matrix3, Vector2, Vector3};

/// WGS-84 semi-major axis, metres (NIMA TR8350.2).
pub const WGS84_A: f64 = 6_378_137.0;
/// WGS-84 flattening (NIMA TR8350.2).
pub const WGS84_F: f64 = 1.0 / 298.257_223_563;
/// First eccentricity squared.
pub const WGS84_E2: f64 = WGS84_F * (2.0 - WGS84_F);
/// Semi-minor axis.
pub const WGS84_B: f64 = WGS84_A * (1.0 - WGS84_F);

/// A geodetic position on WGS-84: latitude and longitude in degrees,
/// ellipsoidal height in metres.
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Geodetic {
    pub lat_deg: f64,
    pub lon_deg: f64,
    pub h_m: f64,
}

impl Geodetic {
    pub fn new(lat_deg: f64, lon_deg: f64, h_m: f64) -> Self {
        Geodetic { lat_deg, lon_deg, h_m }
    }
}

/// Geodetic → Earth-centred, Earth-fixed coordinates (metres).
pub fn geodetic_to_ecef(g: Geodetic) -> Vector3<f64> {
    let (sl, cl) = g.lat_deg.to_radians().sin_cos();
    let (so, co) = g.lon_deg.to_radians().sin_cos();
    let n = WGS84_A / (1.0 - WGS84_E2 * sl * sl).sqrt();
    Vector3::new((n + g.h_m) * cl * co, (n + g.h_m) * cl * so, (n * (1.0 - WGS84_E2) + g.h_m) * sl)
}

/// ECEF → geodetic. Bowring's initial value refined by Newton-like
/// iteration on the latitude; converges to 1e-12 rad in a few steps for
/// any point outside the Earth's core.
pub fn ecef_to_geodetic(p: Vector3<f64>) -> Geodetic {
    let (x, y, z) = (p.x, p.y, p.z);
    let lon = y.atan2(x);
    let rho = x.hypot(y);
    if rho < 1e-9 {
        // On the polar axis.
        let lat = if z >= 0.0 { 90.0 } else { -90.0 };
        return Geodetic { lat_deg: lat, lon_deg: 0.0, h_m: z.abs() - WGS84_B };
    }
    let ep2 = WGS84_E2 / (1.0 - WGS84_E2);
    // Bowring (1976) starting point via the parametric latitude.
    let beta = (WGS84_A * z).atan2(WGS84_B * rho);
    let (sb, cb) = beta.sin_cos();
    let mut lat = (z + ep2 * WGS84_B * sb * sb * sb).atan2(rho - WGS84_E2 * WGS84_A * cb * cb * cb);
    for _ in 0..5 {
        let sl = lat.sin();
        let n = WGS84_A / (1.0 - WGS84_E2 * sl * sl).sqrt();
        let h = rho / lat.cos() - n;
        let next = (z / rho / (1.0 - WGS84_E2 * n / (n + h))).atan();
        let done = (next - lat).abs() < 1e-14;
        lat = next;
        if done {
            break;
        }
    }
    let (sl, cl) = lat.sin_cos();
    let n = WGS84_A / (1.0 - WGS84_E2 * sl * sl).sqrt();
    // Height formula that stays accurate at all latitudes.
    let h = rho * cl + z * sl - WGS84_A * WGS84_A / n;
    Geodetic { lat_deg: lat.to_degrees(), lon_deg: lon.to_degrees(), h_m: h }
}

/// ECEF → latitude and longitude (degrees) by Bowring's (1976) formula
/// with a single step: for points within a few km of the ellipsoid the
/// latitude error is far below 1e-9° (checked against
/// [`ecef_to_geodetic`] in the tests). The height is not computed.
pub fn ecef_to_lat_lon_fast(p: Vector3<f64>) -> (f64, f64) {
    // Earth-sized coordinates: x² + y² cannot overflow.
    let rho = (p.x * p.x + p.y * p.y).sqrt();
    let ep2 = WGS84_E2 / (1.0 - WGS84_E2);
    // sin and cos of the parametric latitude β = atan2(a z, b ρ), as the
    // sides of its triangle over the hypotenuse (no trigonometry).
    let (u, v) = (WGS84_A * p.z, WGS84_B * rho);
    let hyp = (u * u + v * v).sqrt();
    let (sb, cb) = if hyp > 0.0 { (u / hyp, v / hyp) } else { (0.0, 1.0) };
    let lat = (p.z + ep2 * WGS84_B * sb * sb * sb).atan2(rho - WGS84_E2 * WGS84_A * cb * cb * cb);
    (lat.to_degrees(), p.y.atan2(p.x).to_degrees())
}

/// Radii of curvature at latitude `lat_rad`: (meridian M, prime vertical N).
pub fn radii_of_curvature(lat_rad: f64) -> (f64, f64) {
    let s = lat_rad.sin();
    let w2 = 1.0 - WGS84_E2 * s * s;
    let n = WGS84_A / w2.sqrt();
    (n * (1.0 - WGS84_E2) / w2, n)
}

/// Euler's radius of curvature of the normal section at azimuth
/// `azimuth_rad` (clockwise from north), from M and N.
pub fn euler_radius(m: f64, n: f64, azimuth_rad: f64) -> f64 {
    let (sa, ca) = azimuth_rad.sin_cos();
    m * n / (n * ca * ca + m * sa * sa)
}

/// A local east-north-up frame at an origin on the ellipsoid.
#[derive(Clone, Debug)]
pub struct LocalFrame {
    pub origin: Geodetic,
    origin_ecef: Vector3<f64>,
    /// Rows are the east, north and up unit vectors in ECEF.
    rot: Matrix3<f64>,
}

impl LocalFrame {
    pub fn new(origin: Geodetic) -> Self {
        let (sl, cl) = origin.lat_deg.to_radians().sin_cos();
        let (so, co) = origin.lon_deg.to_radians().sin_cos();
        #[rustfmt::skip]
        let rot = Matrix3::new(
            -so,       co,      0.0,
            -sl * co, -sl * so, cl,
             cl * co,  cl * so, sl,
        );
        LocalFrame { origin, origin_ecef: geodetic_to_ecef(origin), rot }
    }

    /// ECEF → (east, north, up) of this frame.
    pub fn ecef_to_enu(&self, p: Vector3<f64>) -> Vector3<f64> {
        self.rot * (p - self.origin_ecef)
    }

    /// (east, north, up) of this frame → ECEF.
    pub fn enu_to_ecef(&self, enu: Vector3<f64>) -> Vector3<f64> {
        self.rot.transpose() * enu + self.origin_ecef
    }

    pub fn geodetic_to_enu(&self, g: Geodetic) -> Vector3<f64> {
        self.ecef_to_enu(geodetic_to_ecef(g))
    }

    pub fn enu_to_geodetic(&self, enu: Vector3<f64>) -> Geodetic {
        ecef_to_geodetic(self.enu_to_ecef(enu))
    }

    /// The rotation taking ECEF directions into this frame (rows E, N, U).
    pub fn rotation(&self) -> &Matrix3<f64> {
        &self.rot
    }

    /// The point at ellipsoidal height `h_m` whose east/north in this frame
    /// are `en`: the inverse of dropping the up component.
    pub fn plane_to_geodetic(&self, en: Vector2<f64>, h_m: f64) -> Geodetic {
        // Newton on the up component: the height changes with up at a rate
        // of cos(angle between the two verticals), close to 1 near the origin.
        let r2 = en.norm_squared();
        let mut up = h_m - self.origin.h_m - r2 / (2.0 * WGS84_A);
        let mut g = self.enu_to_geodetic(Vector3::new(en.x, en.y, up));
        for _ in 0..6 {
            let err = g.h_m - h_m;
            if err.abs() < 1e-6 {
                break;
            }
            up -= err;
            g = self.enu_to_geodetic(Vector3::new(en.x, en.y, up));
        }
        g
    }

    /// Latitude and longitude (degrees) of the surface point whose
    /// east/north in this frame are `en`: a fast form of
    /// [`LocalFrame::plane_to_geodetic`] at height 0 for the hot path. The
    /// up component comes from the osculating sphere in the point's
    /// azimuth, then Bowring's one-step latitude; agrees with the exact
    /// form to well under a millimetre within 50 km (tests).
    pub fn plane_to_lat_lon_fast(&self, en: Vector2<f64>, radii: (f64, f64)) -> (f64, f64) {
        let rho2 = en.norm_squared();
        // Euler's radius in the azimuth of `en`, M N / (N cos² + M sin²),
        // with cos² = n²/ρ² and sin² = e²/ρ² (no trigonometry); at the
        // origin the azimuth is read as north, as atan2(0, 0) = 0 gives.
        let (m, n) = radii;
        let r_surface = if rho2 > 0.0 { m * n * rho2 / (n * en.y * en.y + m * en.x * en.x) } else { m };
        let r = r_surface + self.origin.h_m;
        // Point on the sphere of radius r_surface about the centre of
        // curvature, which lies r below the origin.
        let up = (r_surface * r_surface - rho2).max(0.0).sqrt() - r;
        ecef_to_lat_lon_fast(self.enu_to_ecef(Vector3::new(en.x, en.y, up)))
    }

    /// East/north in this frame of a geodetic point.
    pub fn geodetic_to_plane(&self, g: Geodetic) -> Vector2<f64> {
        let v = self.geodetic_to_enu(g);
        Vector2::new(v.x, v.y)
    }
}

/// A sensor's antenna, placed in the site frame.
#[derive(Clone, Debug)]
pub struct Antenna {
    /// The antenna's own ENU frame (its own north and vertical).
    pub local: LocalFrame,
    /// The antenna position in the site plane.
    pub site_en: Vector2<f64>,
    /// Maps small east/north offsets at the antenna into the site plane:
    /// the upper-left block of R_site · R_antennaᵀ, a rotation by the
    /// meridian convergence to within second-order terms.
    pub to_site: Matrix2<f64>,
}

impl Antenna {
    pub fn new(position: Geodetic, site: &LocalFrame) -> Self {
        let local = LocalFrame::new(position);
        let m = site.rotation() * local.rotation().transpose();
        let to_site = Matrix2::new(m[(0, 0)], m[(0, 1)], m[(1, 0)], m[(1, 1)]);
        let site_en = site.geodetic_to_plane(position);
        Antenna { local, site_en, to_site }
    }

    /// Angle in radians by which the antenna's north is turned clockwise
    /// from the site's north, as seen in the site plane.
    pub fn convergence_rad(&self) -> f64 {
        // The antenna's north unit vector expressed in the site plane.
        let n = self.to_site * Vector2::new(0.0, 1.0);
        n.x.atan2(n.y)
    }

    /// ECEF point at slant range `range_m` and true bearing `bearing_rad`
    /// from the antenna, on the surface at ellipsoidal height `target_h_m`.
    /// If the range is too short to reach that surface (no longer than the
    /// height difference), the point at zero elevation is returned.
    pub fn plot_to_ecef(&self, range_m: f64, bearing_rad: f64, target_h_m: f64) -> Vector3<f64> {
        use std::f64::consts::FRAC_PI_2;
        let (sb, cb) = bearing_rad.sin_cos();
        let at = |elev: f64| {
            let (se, ce) = elev.sin_cos();
            self.local.enu_to_ecef(Vector3::new(range_m * ce * sb, range_m * ce * cb, range_m * se))
        };
        let dh = target_h_m - self.local.origin.h_m;
        // Geodetic height is measured along the normal, so the nearest point
        // of the target surface is |dh| away, straight down (or up).
        if range_m <= dh.abs() {
            return at(0.0);
        }
        // The height of at(elev) rises monotonically with elev on [−π/2, π/2]
        // (for ranges far below the Earth's radius), so keep a bracket and
        // fall back to bisection whenever Newton would leave it: near the
        // nadir the derivative r·cos(elev) vanishes.
        let mut lo = -FRAC_PI_2;
        let mut hi = FRAC_PI_2;
        // Spherical first guess, then Newton with d(height)/d(elev) ≈ r·cos(elev).
        let guess = (dh - range_m * range_m / (2.0 * 6_371_000.0)) / range_m;
        let mut elev = guess.clamp(-1.0, 1.0).asin();
        let mut p = at(elev);
        for _ in 0..60 {
            let err = ecef_to_geodetic(p).h_m - target_h_m;
            if err.abs() < 1e-7 {
                break;
            }
            if err > 0.0 {
                hi = elev;
            } else {
                lo = elev;
            }
            let newton = elev - err / (range_m * elev.cos());
            elev = if newton.is_finite() && newton > lo && newton < hi { newton } else { 0.5 * (lo + hi) };
            p = at(elev);
        }
        p
    }

    /// The site-plane position of a plot.
    pub fn plot_to_site(&self, site: &LocalFrame, range_m: f64, bearing_rad: f64, target_h_m: f64) -> Vector2<f64> {
        let v = site.ecef_to_enu(self.plot_to_ecef(range_m, bearing_rad, target_h_m));
        Vector2::new(v.x, v.y)
    }

    /// Slant range (m) and true bearing (rad, in [0, 2π)) from the antenna
    /// to an ECEF point: the inverse of [`Antenna::plot_to_ecef`].
    pub fn range_bearing_to(&self, p: Vector3<f64>) -> (f64, f64) {
        let v = self.local.ecef_to_enu(p);
        let b = v.x.atan2(v.y).rem_euclid(std::f64::consts::TAU);
        (v.norm(), b)
    }

    /// Ground range in the antenna's horizontal plane for a plot at slant
    /// range `range_m` on the surface at `target_h_m`: the length of the
    /// east/north part of the antenna-frame vector.
    pub fn horizontal_range(&self, range_m: f64, bearing_rad: f64, target_h_m: f64) -> f64 {
        let v = self.local.ecef_to_enu(self.plot_to_ecef(range_m, bearing_rad, target_h_m));
        v.x.hypot(v.y)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The fast plane → latitude/longitude against the exact conversion
    /// (`plane_to_geodetic`, itself checked against geographiclib
    /// fixtures) and against the same formulas with the trigonometric
    /// azimuth and parametric latitude it replaced: rounding apart, the
    /// same numbers.
    #[test]
    fn fast_plane_to_lat_lon_without_trigonometry() {
        let site = LocalFrame::new(Geodetic::new(56.45, 7.35, 12.0));
        let radii = radii_of_curvature(56.45f64.to_radians());
        let trig = |en: Vector2<f64>| {
            let rho2 = en.norm_squared();
            let r = euler_radius(radii.0, radii.1, en.x.atan2(en.y)) + site.origin.h_m;
            let r_surface = r - site.origin.h_m;
            let up = (r_surface * r_surface - rho2).max(0.0).sqrt() - r;
            let p = site.enu_to_ecef(Vector3::new(en.x, en.y, up));
            let rho = p.x.hypot(p.y);
            let ep2 = WGS84_E2 / (1.0 - WGS84_E2);
            let (sb, cb) = (WGS84_A * p.z).atan2(WGS84_B * rho).sin_cos();
            let lat = (p.z + ep2 * WGS84_B * sb * sb * sb).atan2(rho - WGS84_E2 * WGS84_A * cb * cb * cb);
            (lat.to_degrees(), p.y.atan2(p.x).to_degrees())
        };
        for i in 0..400 {
            let a = i as f64 * 0.37;
            let d = (i % 40) as f64 * 1250.0;
            let en = Vector2::new(a.sin() * d, a.cos() * d);
            let (lat, lon) = site.plane_to_lat_lon_fast(en, radii);
            let (lat_t, lon_t) = trig(en);
            assert!((lat - lat_t).abs() < 1e-12 && (lon - lon_t).abs() < 1e-12, "{en:?}");
            let exact = site.plane_to_geodetic(en, 0.0);
            // 1e-8° is about 1 mm.
            assert!((lat - exact.lat_deg).abs() < 1e-8 && (lon - exact.lon_deg).abs() < 1e-8, "{en:?}");
        }
    }

    #[test]
    fn ecef_round_trip_and_known_point() {
        // On the equator at the prime meridian, ECEF x is the semi-major axis
        // (definition of the ellipsoid).
        let p = geodetic_to_ecef(Geodetic::new(0.0, 0.0, 0.0));
        assert!((p.x - WGS84_A).abs() < 1e-9 && p.y.abs() < 1e-9 && p.z.abs() < 1e-9);
        // At the pole, z is the semi-minor axis, 6356752.314245 m (NIMA TR8350.2 table 3.1).
        let q = geodetic_to_ecef(Geodetic::new(90.0, 0.0, 0.0));
        assert!((q.z - 6_356_752.314_245).abs() < 1e-6);
        for &(lat, lon, h) in &[(56.45, 7.35, 0.0), (-33.9, 151.2, 120.0), (89.999, -45.0, 10.0), (0.001, 179.999, -20.0)] {
            let g = ecef_to_geodetic(geodetic_to_ecef(Geodetic::new(lat, lon, h)));
            assert!((g.lat_deg - lat).abs() < 1e-11, "{lat}");
            assert!((g.lon_deg - lon).abs() < 1e-11);
            assert!((g.h_m - h).abs() < 1e-6);
        }
    }

    #[test]
    fn plot_placement_inverts() {
        let site = LocalFrame::new(Geodetic::new(56.45, 7.35, 0.0));
        let ant = Antenna::new(Geodetic::new(56.462, 7.343, 32.0), &site);
        for &(r, b) in &[(500.0, 0.3), (9000.0, 2.0), (17_500.0, 5.5)] {
            let p = ant.plot_to_ecef(r, b, 0.0);
            assert!(ecef_to_geodetic(p).h_m.abs() < 1e-5);
            let (r2, b2) = ant.range_bearing_to(p);
            assert!((r2 - r).abs() < 1e-6 && (b2 - b).abs() < 1e-12);
        }
        let en = Vector2::new(4000.0, -7000.0);
        let g = site.plane_to_geodetic(en, 0.0);
        assert!((site.geodetic_to_plane(g) - en).norm() < 1e-6 && g.h_m.abs() < 1e-5);
    }
}
