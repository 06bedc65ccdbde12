//! Reading and checking a scenario file (the format is described in the
//! module documentation of [`crate::sim`]).

use super::motion::{Leg, Motion};
use crate::geo::{Geodetic, LocalFrame};
use crate::time::Timestamp;
use serde::Deserialize;

/// Why a scenario was not accepted. `key` names the offending entry the
/// way it is written in the file, e.g. `vessels[3].legs[1].angle_deg`.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ScenarioError {
    #[error("not a valid scenario file: {0}")]
    Syntax(String),
    #[error("`{key}`: {message}")]
    Invalid { key: String, message: String },
    #[error("the generated configuration does not load: {0}")]
    Config(String),
}

fn invalid(key: impl Into<String>, message: impl Into<String>) -> ScenarioError {
    ScenarioError::Invalid { key: key.into(), message: message.into() }
}

// ---------------------------------------------------------------------------
// The file as written.

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FileSpec {
    scenario: HeaderSpec,
    site: SiteSpec,
    #[serde(default)]
    radars: Vec<RadarSpec>,
    transponder: Option<ReceiverSpec>,
    tracking: Option<toml::Table>,
    #[serde(default)]
    vessels: Vec<VesselSpec>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct HeaderSpec {
    name: String,
    #[serde(default)]
    description: String,
    /// A TOML date-time or an RFC 3339 string.
    start: toml::Value,
    duration_s: f64,
    #[serde(default = "one")]
    truth_interval_s: f64,
}

fn one() -> f64 {
    1.0
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct SiteSpec {
    #[serde(default)]
    name: String,
    lat_deg: f64,
    lon_deg: f64,
    #[serde(default)]
    height_m: f64,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RadarSpec {
    id: String,
    lat_deg: f64,
    lon_deg: f64,
    height_m: f64,
    range_sigma_m: f64,
    bearing_sigma_deg: f64,
    detection_probability: f64,
    clutter_per_scan: f64,
    max_range_m: f64,
    scan_period_s: f64,
    #[serde(default)]
    first_scan_s: f64,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ReceiverSpec {
    id: String,
    position_sigma_m: f64,
    #[serde(default = "one")]
    reception_probability: f64,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct VesselSpec {
    name: String,
    #[serde(default)]
    #[allow(dead_code)] // free text for the reader of the scenario
    kind: String,
    lat_deg: Option<f64>,
    lon_deg: Option<f64>,
    east_m: Option<f64>,
    north_m: Option<f64>,
    course_deg: f64,
    speed_kn: f64,
    #[serde(default)]
    enter_s: f64,
    exit_s: Option<f64>,
    detection_probability: Option<f64>,
    mmsi: Option<String>,
    class: Option<String>,
    report_interval_s: Option<f64>,
    #[serde(default)]
    at_anchor: bool,
    #[serde(default)]
    legs: Vec<LegSpec>,
}

#[derive(Deserialize, Clone, Copy, PartialEq, Eq, Debug)]
#[serde(rename_all = "lowercase")]
enum LegKind {
    Straight,
    Turn,
    Speed,
}

#[derive(Deserialize, Clone, Copy, PartialEq, Eq, Debug)]
#[serde(rename_all = "lowercase")]
enum TurnDirection {
    Port,
    Starboard,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct LegSpec {
    leg: LegKind,
    duration_s: Option<f64>,
    rate_deg_s: Option<f64>,
    direction: Option<TurnDirection>,
    angle_deg: Option<f64>,
    to_course_deg: Option<f64>,
    to_kn: Option<f64>,
    accel_mps2: Option<f64>,
}

// ---------------------------------------------------------------------------
// The checked scenario.

/// A rotating radar of the scenario.
#[derive(Clone, Debug, PartialEq)]
pub struct Radar {
    pub id: String,
    pub position: Geodetic,
    pub range_sigma_m: f64,
    pub bearing_sigma_deg: f64,
    pub detection_probability: f64,
    pub clutter_per_scan: f64,
    pub max_range_m: f64,
    pub scan_period_s: f64,
    /// Seconds after the scenario start at which the first scan begins
    /// (the beam points north then).
    pub first_scan_s: f64,
}

/// The shore receiver of transponder reports.
#[derive(Clone, Debug, PartialEq)]
pub struct Receiver {
    pub id: String,
    pub position_sigma_m: f64,
    pub reception_probability: f64,
}

/// A vessel's transponder class (ITU-R M.1371-5: Class A for ships under
/// the carriage requirement, Class B "CS" for other craft).
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum TransponderClass {
    A,
    B,
}

#[derive(Clone, Debug, PartialEq)]
pub struct Transponder {
    pub mmsi: String,
    pub class: TransponderClass,
    /// A fixed reporting interval; `None` follows the ITU-R M.1371 table.
    pub interval_s: Option<f64>,
    /// At anchor or moored (Class A reports every 3 min at ≤ 3 kn).
    pub at_anchor: bool,
}

#[derive(Clone, Debug, PartialEq)]
pub struct Vessel {
    pub name: String,
    /// Seconds after the scenario start when the vessel appears.
    pub enter_s: f64,
    /// Seconds after the scenario start when it leaves (∞: stays).
    pub exit_s: f64,
    /// Overrides every radar's detection probability for this vessel.
    pub detection_probability: Option<f64>,
    pub transponder: Option<Transponder>,
    pub motion: Motion,
}

impl Vessel {
    pub fn present(&self, t_s: f64) -> bool {
        t_s >= self.enter_s && t_s <= self.exit_s
    }
}

/// A checked scenario. Times inside are seconds after `start`.
#[derive(Clone, Debug, PartialEq)]
pub struct Scenario {
    pub name: String,
    pub description: String,
    pub start: Timestamp,
    pub duration_s: f64,
    pub truth_interval_s: f64,
    pub site_name: String,
    pub site: Geodetic,
    pub radars: Vec<Radar>,
    pub transponder: Option<Receiver>,
    /// Copied into the generated configuration's `[tracking]` table.
    pub tracking: toml::Table,
    pub vessels: Vec<Vessel>,
}

impl Scenario {
    /// Parses and checks a scenario file.
    pub fn from_toml_str(text: &str) -> Result<Scenario, ScenarioError> {
        let spec: FileSpec = toml::from_str(text).map_err(|e| ScenarioError::Syntax(e.to_string().trim().to_string()))?;
        build(spec)
    }

    pub fn frame(&self) -> LocalFrame {
        LocalFrame::new(self.site)
    }
}

fn finite(key: &str, v: f64) -> Result<f64, ScenarioError> {
    if v.is_finite() { Ok(v) } else { Err(invalid(key, "must be a finite number")) }
}

fn positive(key: &str, v: f64) -> Result<f64, ScenarioError> {
    if v.is_finite() && v > 0.0 { Ok(v) } else { Err(invalid(key, format!("must be a positive number (got {v})"))) }
}

fn probability(key: &str, v: f64) -> Result<f64, ScenarioError> {
    if (0.0..=1.0).contains(&v) { Ok(v) } else { Err(invalid(key, format!("must be in [0, 1] (got {v})"))) }
}

fn latlon(key: &str, lat: f64, lon: f64) -> Result<(), ScenarioError> {
    if !(lat.is_finite() && (-90.0..=90.0).contains(&lat)) {
        return Err(invalid(format!("{key}lat_deg"), "must be a latitude in [-90, 90]"));
    }
    if !(lon.is_finite() && (-180.0..=180.0).contains(&lon)) {
        return Err(invalid(format!("{key}lon_deg"), "must be a longitude in [-180, 180]"));
    }
    Ok(())
}

fn build(spec: FileSpec) -> Result<Scenario, ScenarioError> {
    let h = &spec.scenario;
    let start_text = match &h.start {
        toml::Value::String(s) => s.clone(),
        toml::Value::Datetime(d) => d.to_string(),
        _ => return Err(invalid("scenario.start", "must be an RFC 3339 UTC date-time")),
    };
    let start = Timestamp::parse_rfc3339(&start_text).map_err(|e| invalid("scenario.start", e.to_string()))?;
    let duration_s = positive("scenario.duration_s", h.duration_s)?;
    let truth_interval_s = positive("scenario.truth_interval_s", h.truth_interval_s)?;
    if h.name.is_empty() {
        return Err(invalid("scenario.name", "must not be empty"));
    }

    latlon("site.", spec.site.lat_deg, spec.site.lon_deg)?;
    let site = Geodetic::new(spec.site.lat_deg, spec.site.lon_deg, finite("site.height_m", spec.site.height_m)?);
    let frame = LocalFrame::new(site);

    let mut ids = std::collections::HashSet::new();
    let mut radars = Vec::with_capacity(spec.radars.len());
    for (i, r) in spec.radars.iter().enumerate() {
        let k = |f: &str| format!("radars[{i}].{f}");
        if r.id.is_empty() || !ids.insert(r.id.clone()) {
            return Err(invalid(k("id"), "must be non-empty and unique"));
        }
        latlon(&format!("radars[{i}]."), r.lat_deg, r.lon_deg)?;
        let first_scan_s = finite(&k("first_scan_s"), r.first_scan_s)?;
        if first_scan_s < 0.0 {
            return Err(invalid(k("first_scan_s"), "must be ≥ 0"));
        }
        let clutter = finite(&k("clutter_per_scan"), r.clutter_per_scan)?;
        if clutter < 0.0 {
            return Err(invalid(k("clutter_per_scan"), "must be ≥ 0"));
        }
        radars.push(Radar {
            id: r.id.clone(),
            position: Geodetic::new(r.lat_deg, r.lon_deg, finite(&k("height_m"), r.height_m)?),
            range_sigma_m: positive(&k("range_sigma_m"), r.range_sigma_m)?,
            bearing_sigma_deg: positive(&k("bearing_sigma_deg"), r.bearing_sigma_deg)?,
            // Open interval, as the tracker's configuration requires.
            detection_probability: if r.detection_probability > 0.0 && r.detection_probability < 1.0 {
                r.detection_probability
            } else {
                return Err(invalid(k("detection_probability"), "must be in (0, 1)"));
            },
            clutter_per_scan: clutter,
            max_range_m: positive(&k("max_range_m"), r.max_range_m)?,
            scan_period_s: positive(&k("scan_period_s"), r.scan_period_s)?,
            first_scan_s,
        });
    }

    let transponder = match &spec.transponder {
        None => None,
        Some(t) => {
            if t.id.is_empty() || !ids.insert(t.id.clone()) {
                return Err(invalid("transponder.id", "must be non-empty and differ from every radar id"));
            }
            Some(Receiver {
                id: t.id.clone(),
                position_sigma_m: positive("transponder.position_sigma_m", t.position_sigma_m)?,
                reception_probability: probability("transponder.reception_probability", t.reception_probability)?,
            })
        }
    };

    let mut tracking = spec.tracking.clone().unwrap_or_default();
    tracking.entry("association").or_insert_with(|| toml::Value::String("gnn".into()));

    let mut names = std::collections::HashSet::new();
    let mut vessels = Vec::with_capacity(spec.vessels.len());
    for (i, v) in spec.vessels.iter().enumerate() {
        vessels.push(build_vessel(i, v, &frame, &mut names)?);
    }

    Ok(Scenario {
        name: h.name.clone(),
        description: h.description.clone(),
        start,
        duration_s,
        truth_interval_s,
        site_name: spec.site.name.clone(),
        site,
        radars,
        transponder,
        tracking,
        vessels,
    })
}

fn build_vessel(i: usize, v: &VesselSpec, frame: &LocalFrame, names: &mut std::collections::HashSet<String>) -> Result<Vessel, ScenarioError> {
    let k = |f: &str| format!("vessels[{i}].{f}");
    if v.name.is_empty() || !names.insert(v.name.clone()) {
        return Err(invalid(k("name"), "must be non-empty and unique"));
    }
    let start_en = match (v.lat_deg, v.lon_deg, v.east_m, v.north_m) {
        (Some(lat), Some(lon), None, None) => {
            latlon(&format!("vessels[{i}]."), lat, lon)?;
            frame.geodetic_to_plane(Geodetic::new(lat, lon, 0.0))
        }
        (None, None, Some(e), Some(n)) => nalgebra::Vector2::new(finite(&k("east_m"), e)?, finite(&k("north_m"), n)?),
        _ => return Err(invalid(k("lat_deg"), "give either lat_deg and lon_deg, or east_m and north_m")),
    };
    let course = finite(&k("course_deg"), v.course_deg)?;
    if !(0.0..360.0).contains(&course) {
        return Err(invalid(k("course_deg"), "must be in [0, 360)"));
    }
    let speed_kn = finite(&k("speed_kn"), v.speed_kn)?;
    if speed_kn < 0.0 {
        return Err(invalid(k("speed_kn"), "must be ≥ 0"));
    }
    let enter_s = finite(&k("enter_s"), v.enter_s)?;
    let exit_s = match v.exit_s {
        Some(x) => finite(&k("exit_s"), x)?,
        None => f64::INFINITY,
    };
    if exit_s < enter_s {
        return Err(invalid(k("exit_s"), "must not be before enter_s"));
    }
    let detection_probability = match v.detection_probability {
        Some(p) => Some(probability(&k("detection_probability"), p)?),
        None => None,
    };
    let transponder = match &v.mmsi {
        None => {
            if v.class.is_some() || v.report_interval_s.is_some() {
                return Err(invalid(k("mmsi"), "a transponder class or interval needs an mmsi"));
            }
            None
        }
        Some(m) => {
            if m.len() != 9 || !m.bytes().all(|b| b.is_ascii_digit()) {
                return Err(invalid(k("mmsi"), "must be 9 digits"));
            }
            let class = match v.class.as_deref() {
                None | Some("A") | Some("a") => TransponderClass::A,
                Some("B") | Some("b") => TransponderClass::B,
                Some(other) => return Err(invalid(k("class"), format!("must be \"A\" or \"B\" (got {other:?})"))),
            };
            let interval_s = match v.report_interval_s {
                Some(x) => Some(positive(&k("report_interval_s"), x)?),
                None => None,
            };
            Some(Transponder { mmsi: m.clone(), class, interval_s, at_anchor: v.at_anchor })
        }
    };

    let mut legs = Vec::with_capacity(v.legs.len());
    let mut course_now = course;
    let mut speed_now = speed_kn;
    for (j, l) in v.legs.iter().enumerate() {
        let key = |f: &str| format!("vessels[{i}].legs[{j}].{f}");
        let leg = build_leg(l, &key, course_now, speed_now)?;
        match leg {
            Leg::Turn { rate_deg_s, duration_s } => course_now = (course_now + rate_deg_s * duration_s).rem_euclid(360.0),
            Leg::Speed { to_kn, .. } => speed_now = to_kn,
            Leg::Straight { .. } => {}
        }
        legs.push(leg);
    }
    let motion = Motion::new(enter_s, start_en, course, speed_kn, &legs);
    Ok(Vessel { name: v.name.clone(), enter_s, exit_s, detection_probability, transponder, motion })
}

fn build_leg(l: &LegSpec, key: &dyn Fn(&str) -> String, course_now: f64, speed_now_kn: f64) -> Result<Leg, ScenarioError> {
    let forbid = |name: &str, present: bool| -> Result<(), ScenarioError> {
        if present { Err(invalid(key(name), format!("does not apply to a {:?} leg", l.leg).to_lowercase())) } else { Ok(()) }
    };
    match l.leg {
        LegKind::Straight => {
            forbid("rate_deg_s", l.rate_deg_s.is_some())?;
            forbid("direction", l.direction.is_some())?;
            forbid("angle_deg", l.angle_deg.is_some())?;
            forbid("to_course_deg", l.to_course_deg.is_some())?;
            forbid("to_kn", l.to_kn.is_some())?;
            forbid("accel_mps2", l.accel_mps2.is_some())?;
            let d = l.duration_s.ok_or_else(|| invalid(key("duration_s"), "a straight leg needs a duration"))?;
            Ok(Leg::Straight { duration_s: positive(&key("duration_s"), d)? })
        }
        LegKind::Turn => {
            forbid("to_kn", l.to_kn.is_some())?;
            forbid("accel_mps2", l.accel_mps2.is_some())?;
            let r = l.rate_deg_s.ok_or_else(|| invalid(key("rate_deg_s"), "a turn needs a rate"))?;
            let r = finite(&key("rate_deg_s"), r)?;
            if r == 0.0 {
                return Err(invalid(key("rate_deg_s"), "must not be zero"));
            }
            // Positive rates turn clockwise (to starboard).
            let rate = match l.direction {
                None => r,
                Some(_) if r < 0.0 => return Err(invalid(key("rate_deg_s"), "must be positive when a direction is given")),
                Some(TurnDirection::Starboard) => r,
                Some(TurnDirection::Port) => -r,
            };
            let ends = [l.angle_deg.is_some(), l.duration_s.is_some(), l.to_course_deg.is_some()].iter().filter(|b| **b).count();
            if ends != 1 {
                return Err(invalid(key("angle_deg"), "a turn needs exactly one of angle_deg, duration_s, to_course_deg"));
            }
            let duration_s = if let Some(a) = l.angle_deg {
                positive(&key("angle_deg"), a)? / rate.abs()
            } else if let Some(d) = l.duration_s {
                positive(&key("duration_s"), d)?
            } else {
                let to = finite(&key("to_course_deg"), l.to_course_deg.unwrap_or_default())?;
                if !(0.0..360.0).contains(&to) {
                    return Err(invalid(key("to_course_deg"), "must be in [0, 360)"));
                }
                let angle = if rate > 0.0 { (to - course_now).rem_euclid(360.0) } else { (course_now - to).rem_euclid(360.0) };
                if angle == 0.0 {
                    return Err(invalid(key("to_course_deg"), "is the course already steered"));
                }
                angle / rate.abs()
            };
            Ok(Leg::Turn { rate_deg_s: rate, duration_s })
        }
        LegKind::Speed => {
            forbid("rate_deg_s", l.rate_deg_s.is_some())?;
            forbid("direction", l.direction.is_some())?;
            forbid("angle_deg", l.angle_deg.is_some())?;
            forbid("to_course_deg", l.to_course_deg.is_some())?;
            forbid("duration_s", l.duration_s.is_some())?;
            let to = l.to_kn.ok_or_else(|| invalid(key("to_kn"), "a speed change needs a target speed"))?;
            let to = finite(&key("to_kn"), to)?;
            if to < 0.0 {
                return Err(invalid(key("to_kn"), "must be ≥ 0"));
            }
            let a = l.accel_mps2.ok_or_else(|| invalid(key("accel_mps2"), "a speed change needs an acceleration"))?;
            let a = positive(&key("accel_mps2"), a)?;
            if to == speed_now_kn {
                return Err(invalid(key("to_kn"), "is the speed already made"));
            }
            Ok(Leg::Speed { to_kn: to, accel_mps2: a })
        }
    }
}
