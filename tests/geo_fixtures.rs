//! src/geo.rs against reference values made by pymap3d and geographiclib
//! (tests/fixtures/make_geo_fixtures.py, versions in the fixture's
//! "source" field), and the plot placement against its own definition.
//!
//! Tolerances: 1 mm for positions, 1e-9° for latitude and longitude (about
//! 0.1 mm on the ground), unless a check says otherwise.

use nalgebra::{Vector2, Vector3};
use serde::Deserialize;
use skerry::geo::{Antenna, Geodetic, LocalFrame, ecef_to_geodetic, geodetic_to_ecef};

const MM: f64 = 1e-3;
const DEG_TOL: f64 = 1e-9;

#[derive(Deserialize)]
struct Fixture {
    source: String,
    ellipsoid: Ellipsoid,
    geodetic_to_ecef: Vec<[f64; 6]>,
    ecef_to_geodetic: Vec<[f64; 6]>,
    enu: Vec<EnuSet>,
    aer: Vec<AerSet>,
    normal_section_vs_geodesic_max_rad: f64,
    convergence: Vec<Convergence>,
}

#[derive(Deserialize)]
struct Ellipsoid {
    a: f64,
    f: f64,
}

#[derive(Deserialize)]
struct EnuSet {
    origin: [f64; 3],
    /// lat, lon, h, east, north, up
    points: Vec<[f64; 6]>,
}

#[derive(Deserialize)]
struct AerSet {
    antenna: [f64; 3],
    /// lat, lon, h, slant range, azimuth (deg), elevation (deg), geodesic azimuth (deg)
    targets: Vec<[f64; 7]>,
}

#[derive(Deserialize)]
struct Convergence {
    site: [f64; 3],
    antenna: [f64; 3],
    convergence_rad: f64,
    first_order_rad: f64,
}

fn fixture() -> Fixture {
    let text = include_str!("fixtures/geo_reference.json");
    let f: Fixture = serde_json::from_str(text).expect("geo fixture parses");
    assert!(f.source.contains("pymap3d") && f.source.contains("geographiclib"));
    f
}

fn g(v: [f64; 3]) -> Geodetic {
    Geodetic::new(v[0], v[1], v[2])
}

/// Longitude difference folded into (−180°, 180°].
fn dlon(a: f64, b: f64) -> f64 {
    (a - b + 180.0).rem_euclid(360.0) - 180.0
}

/// Bearing difference folded into (−π, π].
fn dang(a: f64, b: f64) -> f64 {
    use std::f64::consts::{PI, TAU};
    (a - b + PI).rem_euclid(TAU) - PI
}

#[test]
fn ellipsoid_constants_match_geographiclib() {
    // Source: geographiclib Constants.WGS84_a / WGS84_f.
    let f = fixture();
    assert_eq!(skerry::geo::WGS84_A, f.ellipsoid.a);
    assert!((skerry::geo::WGS84_F - f.ellipsoid.f).abs() < 1e-18);
}

#[test]
fn geodetic_to_ecef_matches_pymap3d() {
    // Source: pymap3d.geodetic2ecef on the geographiclib WGS-84 ellipsoid.
    let f = fixture();
    assert!(f.geodetic_to_ecef.len() >= 40);
    for [lat, lon, h, x, y, z] in f.geodetic_to_ecef {
        let p = geodetic_to_ecef(Geodetic::new(lat, lon, h));
        let err = (p - Vector3::new(x, y, z)).norm();
        assert!(err < MM, "({lat}, {lon}, {h}): off by {err} m");
    }
}

#[test]
fn ecef_to_geodetic_matches_pymap3d() {
    // Source: pymap3d.ecef2geodetic (the script checks it inverts
    // geodetic2ecef to 1e-11°).
    let f = fixture();
    assert!(f.ecef_to_geodetic.len() >= 40);
    for [x, y, z, lat, lon, h] in f.ecef_to_geodetic {
        let got = ecef_to_geodetic(Vector3::new(x, y, z));
        assert!((got.lat_deg - lat).abs() < DEG_TOL, "lat {} vs {lat}", got.lat_deg);
        assert!(dlon(got.lon_deg, lon).abs() < DEG_TOL, "lon {} vs {lon}", got.lon_deg);
        assert!((got.h_m - h).abs() < MM, "h {} vs {h}", got.h_m);
    }
}

#[test]
fn local_enu_matches_pymap3d_both_ways() {
    // Source: pymap3d.geodetic2enu; points placed by geographiclib
    // Geodesic.Direct up to 50 km from eight origins, heights −50…3000 m.
    let f = fixture();
    let mut n = 0;
    for set in &f.enu {
        let frame = LocalFrame::new(g(set.origin));
        for &[lat, lon, h, e, nn, u] in &set.points {
            let p = Geodetic::new(lat, lon, h);
            let enu = frame.geodetic_to_enu(p);
            let err = (enu - Vector3::new(e, nn, u)).norm();
            assert!(err < MM, "origin {:?} point ({lat}, {lon}, {h}): ENU off by {err} m", set.origin);
            let back = frame.enu_to_geodetic(Vector3::new(e, nn, u));
            assert!((back.lat_deg - lat).abs() < DEG_TOL && dlon(back.lon_deg, lon).abs() < DEG_TOL);
            assert!((back.h_m - h).abs() < MM);
            n += 1;
        }
    }
    assert!(n >= 90);
}

#[test]
fn site_plane_matches_pymap3d_at_fixed_height() {
    // The site plane keeps east/north and recovers the point from its known
    // height: geodetic_to_plane must give pymap3d's (east, north), and
    // plane_to_geodetic(east, north, h) the original point.
    let f = fixture();
    for set in &f.enu {
        let frame = LocalFrame::new(g(set.origin));
        for &[lat, lon, h, e, nn, _] in &set.points {
            let en = frame.geodetic_to_plane(Geodetic::new(lat, lon, h));
            assert!((en - Vector2::new(e, nn)).norm() < MM);
            let back = frame.plane_to_geodetic(Vector2::new(e, nn), h);
            assert!((back.lat_deg - lat).abs() < DEG_TOL, "lat {} vs {lat}", back.lat_deg);
            assert!(dlon(back.lon_deg, lon).abs() < DEG_TOL, "lon {} vs {lon}", back.lon_deg);
            assert!((back.h_m - h).abs() < MM);
        }
    }
}

#[test]
fn antenna_range_bearing_matches_pymap3d_and_places_plots_back() {
    // Source: pymap3d.geodetic2aer (slant range, azimuth) from four
    // antennas to targets 0.3…40 km away at 0…20 m height. Then
    // plot_to_ecef(slant range, azimuth, target height) must land on the
    // target again.
    let f = fixture();
    for set in &f.aer {
        let site = LocalFrame::new(g(set.antenna));
        let ant = Antenna::new(g(set.antenna), &site);
        for &[lat, lon, h, srange, az_deg, _el, _geo_az] in &set.targets {
            let target = geodetic_to_ecef(Geodetic::new(lat, lon, h));
            let (r, b) = ant.range_bearing_to(target);
            assert!((r - srange).abs() < MM, "range {r} vs {srange}");
            // 1e-10 rad is 4 µm at 40 km.
            assert!(dang(b, az_deg.to_radians()).abs() < 1e-10, "bearing {b} vs {az_deg}°");
            let placed = ant.plot_to_ecef(srange, az_deg.to_radians(), h);
            let err = (placed - target).norm();
            assert!(err < MM, "plot at {srange} m, {az_deg}°: {err} m from the target");
        }
    }
}

#[test]
fn antenna_bearing_agrees_with_geodesic_azimuth() {
    // Source: geographiclib Geodesic.Inverse azimuth at the antenna. The
    // local-frame bearing is the normal-section azimuth, which differs from
    // the geodesic azimuth by a second-order amount; the script bounds that
    // difference (max over these targets) and we allow twice it.
    let f = fixture();
    let tol = 2.0 * f.normal_section_vs_geodesic_max_rad.max(1e-12);
    assert!(tol < 5e-8);
    for set in &f.aer {
        let site = LocalFrame::new(g(set.antenna));
        let ant = Antenna::new(g(set.antenna), &site);
        for &[lat, lon, h, _, _, _, geo_az] in &set.targets {
            let (_, b) = ant.range_bearing_to(geodetic_to_ecef(Geodetic::new(lat, lon, h)));
            assert!(dang(b, geo_az.to_radians()).abs() < tol, "bearing {b} vs geodesic {geo_az}°");
        }
    }
}

#[test]
fn convergence_matches_the_angle_between_local_norths() {
    // Source: the script turns the antenna's local north into ECEF
    // (pymap3d.enu2uvw) and then into the site ENU frame (pymap3d.uvw2enu);
    // the convergence is atan2(east, north) of that vector.
    let f = fixture();
    for c in &f.convergence {
        let site = LocalFrame::new(g(c.site));
        let ant = Antenna::new(g(c.antenna), &site);
        let got = ant.convergence_rad();
        assert!((got - c.convergence_rad).abs() < 1e-12, "site {:?} antenna {:?}: {got} vs {}", c.site, c.antenna, c.convergence_rad);
    }
}

#[test]
fn convergence_between_antennas_10_km_apart_at_57n() {
    // Sanity: the first-order meridian convergence between two points on
    // one parallel is Δλ·sin φ (common practice; it is the leading term of
    // the transverse Mercator grid convergence, e.g. Snyder 1987, USGS
    // Professional Paper 1395; citation from memory). For 10 km at 57° N,
    // Δλ = 0.1645° and the convergence is about 0.138°. An antenna east of
    // the site has its north turned anticlockwise (negative here).
    let f = fixture();
    let c = &f.convergence[0];
    assert_eq!(c.site[0], 57.0);
    assert_eq!(c.antenna[0], 57.0);
    let site = LocalFrame::new(g(c.site));
    let ant = Antenna::new(g(c.antenna), &site);
    let gamma = ant.convergence_rad();
    let dl = (c.antenna[1] - c.site[1]).to_radians();
    let first_order = dl * 57.0_f64.to_radians().sin();
    assert!((first_order - c.first_order_rad).abs() < 1e-15);
    assert!((-gamma - first_order).abs() < 1e-3 * first_order, "{gamma} vs −{first_order}");
    assert!((gamma.to_degrees() + 0.138).abs() < 0.001, "{}°", gamma.to_degrees());
    // And the antenna is where it should be in the site plane: 10 km east
    // along the parallel, which curves towards the pole, so the plane shows
    // it slightly north of east by ρ·sin φ·(1 − cos Δλ), ρ = N·cos φ the
    // parallel's radius (geometry of the ECEF chord dotted with the site's
    // north; about 12 m here).
    let phi = 57.0_f64.to_radians();
    let n_rad = skerry::geo::WGS84_A / (1.0 - skerry::geo::WGS84_E2 * phi.sin().powi(2)).sqrt();
    let rho = n_rad * phi.cos();
    let north = rho * phi.sin() * (1.0 - dl.cos());
    assert!((ant.site_en.norm() - 10_000.0).abs() < 0.1, "{}", ant.site_en);
    assert!((ant.site_en.y - north).abs() < 0.1, "{} vs {north}", ant.site_en.y);
}

#[test]
fn plot_placement_round_trips_and_reaches_the_surface() {
    // Definition checks: plot_to_ecef puts the point at the asked slant
    // range and bearing, on the asked height surface, for ranges from just
    // above the antenna height to 60 km and every quadrant. (The 3000 m
    // antenna at 3000.5 m range is the case where the spherical first guess
    // falls outside [−90°, 90°] and the elevation must still be found.)
    let site = LocalFrame::new(Geodetic::new(56.45, 7.35, 0.0));
    for &ant_h in &[3.0, 32.0, 250.0, 3000.0] {
        let ant = Antenna::new(Geodetic::new(56.462, 7.343, ant_h), &site);
        for &r in &[ant_h + 0.5, ant_h + 5.0, 400.0, 2_500.0, 18_000.0, 60_000.0] {
            for &b in &[0.0, 0.8, 2.0, 3.3, 4.9, 6.2] {
                for &h_t in &[0.0, 2.0] {
                    if r <= (ant_h - h_t).abs() {
                        continue;
                    }
                    let p = ant.plot_to_ecef(r, b, h_t);
                    let got = ecef_to_geodetic(p);
                    assert!((got.h_m - h_t).abs() < 1e-6, "ant {ant_h} r {r} b {b}: height {}", got.h_m);
                    let (r2, b2) = ant.range_bearing_to(p);
                    assert!((r2 - r).abs() < 1e-6, "ant {ant_h} r {r} b {b}: range {r2}");
                    // ECEF coordinates carry ~1e-9 m rounding: 1e-9 rad is 1 mm at 1 km
                    // and still far below that on the shortest horizontal legs here.
                    assert!(dang(b2, b).abs() < 1e-9, "ant {ant_h} r {r} b {b}: bearing {b2}");
                }
            }
        }
    }
}

#[test]
fn plot_too_short_to_reach_the_surface_is_placed_at_zero_elevation() {
    // geo.rs documents that a plot whose range cannot reach the target
    // surface is placed at zero elevation: horizontal, at the antenna's
    // height, at the given range and bearing.
    let site = LocalFrame::new(Geodetic::new(56.45, 7.35, 0.0));
    let ant = Antenna::new(Geodetic::new(56.462, 7.343, 32.0), &site);
    let p = ant.plot_to_ecef(10.0, 1.0, 0.0);
    let v = ant.local.ecef_to_enu(p);
    assert!(v.z.abs() < 1e-8, "up {}", v.z);
    assert!((v.norm() - 10.0).abs() < 1e-8);
    assert!(dang(v.x.atan2(v.y), 1.0).abs() < 1e-9);
}
