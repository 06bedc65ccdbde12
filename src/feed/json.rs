//! Contract-v1 JSON Lines codec for feed records (CONTRACT.md §1).
//!
//! Decoding takes one line (bytes, so invalid UTF-8 is a reject, not a
//! crash) and gives a [`Record`] or a [`Reject`] naming the field. A fast
//! path deserializes straight into borrowed fields; whenever it fails, a
//! slow path re-reads the line as a generic JSON value to say exactly which
//! field was missing, of the wrong type, non-finite or out of range. Both
//! paths end in the same field checks, so they cannot disagree.

use super::{Detection, Record, Reject, RejectReason, Report, ScanEnd, SensorId, SensorKind, SensorTable, VesselInfo};
use crate::time::Timestamp;
use serde::Deserialize;
use std::borrow::Cow;
use std::fmt::Write;
use std::sync::Arc;

/// The fields of any record type, as read from the line.
#[derive(Deserialize, Default, Debug)]
struct Fields<'a> {
    #[serde(rename = "type", borrow)]
    kind: Option<Cow<'a, str>>,
    #[serde(borrow)]
    sensor: Option<Cow<'a, str>>,
    #[serde(borrow)]
    time: Option<Cow<'a, str>>,
    scan: Option<u64>,
    range_m: Option<f64>,
    bearing_deg: Option<f64>,
    radial_speed_mps: Option<f64>,
    snr_db: Option<f64>,
    sector_deg: Option<[f64; 2]>,
    #[serde(borrow)]
    id: Option<Cow<'a, str>>,
    lat_deg: Option<f64>,
    lon_deg: Option<f64>,
    sog_kn: Option<f64>,
    cog_deg: Option<f64>,
    heading_deg: Option<f64>,
    #[serde(borrow)]
    name: Option<Cow<'a, str>>,
    ship_type: Option<u64>,
    length_m: Option<f64>,
    beam_m: Option<f64>,
}

fn reject(reason: RejectReason, sensor: Option<SensorId>) -> Reject {
    Reject { reason, sensor }
}

/// Decodes one feed line. Leading and trailing white space is ignored.
pub fn decode_line(line: &[u8], sensors: &SensorTable) -> Result<Record, Reject> {
    let text = std::str::from_utf8(line).map_err(|_| reject(RejectReason::BadUtf8, None))?;
    let text = text.trim();
    match serde_json::from_str::<Fields>(text) {
        Ok(f) => check(f, sensors),
        Err(_) => {
            let f = slow_fields(text, sensors)?;
            check(f, sensors)
        }
    }
}

/// A marker put in place of bare non-finite tokens (NaN, Infinity, numbers
/// that overflow f64) so that the slow path can name the field.
const NON_FINITE_MARK: &str = "\u{1}skerry-non-finite";

/// Replaces bare NaN/Infinity tokens and overflowing numbers outside
/// strings by a marker string. Returns None when there were none.
fn mark_non_finite(text: &str) -> Option<String> {
    let b = text.as_bytes();
    let mut out = String::with_capacity(text.len() + 16);
    let mut i = 0;
    let mut in_str = false;
    let mut changed = false;
    let mut last = 0;
    while i < b.len() {
        let c = b[i];
        if in_str {
            if c == b'\\' {
                i += 2;
                continue;
            }
            if c == b'"' {
                in_str = false;
            }
            i += 1;
            continue;
        }
        if c == b'"' {
            in_str = true;
            i += 1;
            continue;
        }
        if c == b'-' || c == b'+' || c.is_ascii_alphanumeric() || c == b'.' {
            let start = i;
            while i < b.len() && (b[i].is_ascii_alphanumeric() || matches!(b[i], b'-' | b'+' | b'.')) {
                i += 1;
            }
            let tok = &text[start..i];
            let t = tok.trim_start_matches(['-', '+']);
            let bad = t.eq_ignore_ascii_case("nan")
                || t.eq_ignore_ascii_case("infinity")
                || t.eq_ignore_ascii_case("inf")
                || (tok.as_bytes()[0] != b'+' && tok.parse::<f64>().is_ok_and(|v| !v.is_finite()) && t.as_bytes().first().is_some_and(u8::is_ascii_digit));
            if bad {
                out.push_str(&text[last..start]);
                // JSON forbids raw control characters in strings: escape it.
                out.push_str("\"\\u0001skerry-non-finite\"");
                last = i;
                changed = true;
            }
            continue;
        }
        i += 1;
    }
    if !changed {
        return None;
    }
    out.push_str(&text[last..]);
    Some(out)
}

/// The slow path: read the line as a JSON value and take each field with
/// its own type check.
fn slow_fields<'a>(text: &'a str, sensors: &SensorTable) -> Result<Fields<'a>, Reject> {
    let value: serde_json::Value = match serde_json::from_str(text) {
        Ok(v) => v,
        Err(_) => match mark_non_finite(text).and_then(|t| serde_json::from_str(&t).ok()) {
            Some(v) => v,
            None => return Err(reject(RejectReason::BadJson, None)),
        },
    };
    let obj = value.as_object().ok_or_else(|| reject(RejectReason::BadJson, None))?;
    // Count the reject under its sensor when the sensor can be read.
    let s = obj.get("sensor").and_then(|v| v.as_str()).and_then(|n| sensors.lookup(n));
    let kind = match obj.get("type") {
        None | Some(serde_json::Value::Null) => return Err(reject(RejectReason::MissingField("type"), s)),
        Some(serde_json::Value::String(s)) => s.as_str(),
        Some(_) => return Err(reject(RejectReason::WrongType("type"), s)),
    };
    let wanted: &[&'static str] = match kind {
        "detection" => &["sensor", "time", "scan", "range_m", "bearing_deg", "radial_speed_mps", "snr_db"],
        "scan_end" => &["sensor", "time", "scan", "sector_deg"],
        "report" => &["sensor", "time", "id", "lat_deg", "lon_deg", "sog_kn", "cog_deg", "heading_deg", "name", "ship_type", "length_m", "beam_m"],
        _ => return Err(reject(RejectReason::UnknownType, s)),
    };
    let mut f = Fields { kind: Some(Cow::Owned(kind.to_string())), ..Fields::default() };
    for &key in wanted {
        let v = match obj.get(key) {
            None | Some(serde_json::Value::Null) => continue,
            Some(v) => v,
        };
        let is_marker = v.as_str() == Some(NON_FINITE_MARK);
        let num = || -> Result<f64, Reject> {
            if is_marker {
                return Err(reject(RejectReason::NonFinite(key), s));
            }
            v.as_f64().ok_or_else(|| reject(RejectReason::WrongType(key), s))
        };
        let string = || -> Result<Cow<'static, str>, Reject> {
            match v {
                serde_json::Value::String(s) if !is_marker => Ok(Cow::Owned(s.clone())),
                _ if is_marker => Err(reject(RejectReason::NonFinite(key), s)),
                _ => Err(reject(RejectReason::WrongType(key), s)),
            }
        };
        match key {
            "sensor" => f.sensor = Some(string()?),
            "time" => f.time = Some(string()?),
            "id" => f.id = Some(string()?),
            "name" => f.name = Some(string()?),
            "ship_type" => {
                if is_marker {
                    return Err(reject(RejectReason::NonFinite(key), s));
                }
                f.ship_type = Some(match v {
                    serde_json::Value::Number(n) if n.is_u64() => n.as_u64().unwrap_or(0),
                    serde_json::Value::Number(n) if n.is_i64() => return Err(reject(RejectReason::OutOfRange(key), s)),
                    _ => return Err(reject(RejectReason::WrongType(key), s)),
                })
            }
            "length_m" => f.length_m = Some(num()?),
            "beam_m" => f.beam_m = Some(num()?),
            "scan" => {
                if is_marker {
                    return Err(reject(RejectReason::NonFinite(key), s));
                }
                f.scan = Some(match v {
                    serde_json::Value::Number(n) if n.is_u64() => n.as_u64().unwrap_or(0),
                    serde_json::Value::Number(n) if n.is_i64() => return Err(reject(RejectReason::OutOfRange(key), s)),
                    _ => return Err(reject(RejectReason::WrongType(key), s)),
                })
            }
            "sector_deg" => {
                let arr = match v {
                    serde_json::Value::Array(a) if a.len() == 2 => a,
                    _ => return Err(reject(RejectReason::WrongType(key), s)),
                };
                let mut sector = [0.0; 2];
                for (slot, x) in sector.iter_mut().zip(arr) {
                    if x.as_str() == Some(NON_FINITE_MARK) {
                        return Err(reject(RejectReason::NonFinite(key), s));
                    }
                    *slot = x.as_f64().ok_or_else(|| reject(RejectReason::WrongType(key), s))?;
                }
                f.sector_deg = Some(sector);
            }
            "range_m" => f.range_m = Some(num()?),
            "bearing_deg" => f.bearing_deg = Some(num()?),
            "radial_speed_mps" => f.radial_speed_mps = Some(num()?),
            "snr_db" => f.snr_db = Some(num()?),
            "lat_deg" => f.lat_deg = Some(num()?),
            "lon_deg" => f.lon_deg = Some(num()?),
            "sog_kn" => f.sog_kn = Some(num()?),
            "cog_deg" => f.cog_deg = Some(num()?),
            "heading_deg" => f.heading_deg = Some(num()?),
            _ => {}
        }
    }
    Ok(f)
}

fn need<T>(v: Option<T>, key: &'static str, sensor: Option<SensorId>) -> Result<T, Reject> {
    v.ok_or_else(|| reject(RejectReason::MissingField(key), sensor))
}

fn finite(v: f64, key: &'static str, sensor: Option<SensorId>) -> Result<f64, Reject> {
    if v.is_finite() { Ok(v) } else { Err(reject(RejectReason::NonFinite(key), sensor)) }
}

fn in_range(v: f64, ok: bool, key: &'static str, sensor: Option<SensorId>) -> Result<f64, Reject> {
    let v = finite(v, key, sensor)?;
    if ok { Ok(v) } else { Err(reject(RejectReason::OutOfRange(key), sensor)) }
}

fn bearing(v: f64, key: &'static str, s: Option<SensorId>) -> Result<f64, Reject> {
    in_range(v, (0.0..360.0).contains(&v), key, s)
}

fn opt_bearing(v: Option<f64>, key: &'static str, s: Option<SensorId>) -> Result<Option<f64>, Reject> {
    v.map(|x| bearing(x, key, s)).transpose()
}

/// The field checks shared by both paths.
fn check(f: Fields<'_>, sensors: &SensorTable) -> Result<Record, Reject> {
    let named = f.sensor.as_deref().and_then(|n| sensors.lookup(n));
    let kind = match f.kind.as_deref() {
        Some(k @ ("detection" | "scan_end" | "report")) => k,
        Some(_) => return Err(reject(RejectReason::UnknownType, named)),
        None => return Err(reject(RejectReason::MissingField("type"), named)),
    };
    let name = need(f.sensor.as_deref(), "sensor", None)?;
    let sensor = sensors.lookup(name).ok_or_else(|| reject(RejectReason::UnknownSensor, None))?;
    let s = Some(sensor);
    let want_kind = if kind == "report" { SensorKind::Transponder } else { SensorKind::Radar };
    if sensors.kind(sensor) != Some(want_kind) {
        return Err(reject(RejectReason::WrongSensorKind, s));
    }
    let time_text = need(f.time.as_deref(), "time", s)?;
    let time = Timestamp::parse_rfc3339(time_text).map_err(|_| reject(RejectReason::BadTime, s))?;
    match kind {
        "detection" => {
            let range_m = need(f.range_m, "range_m", s)?;
            let range_m = in_range(range_m, range_m > 0.0, "range_m", s)?;
            let bearing_deg = bearing(need(f.bearing_deg, "bearing_deg", s)?, "bearing_deg", s)?;
            let radial_speed_mps = f.radial_speed_mps.map(|v| finite(v, "radial_speed_mps", s)).transpose()?;
            let snr_db = f.snr_db.map(|v| finite(v, "snr_db", s)).transpose()?;
            Ok(Record::Detection(Detection { sensor, time, scan: f.scan, range_m, bearing_deg, radial_speed_mps, snr_db }))
        }
        "scan_end" => {
            let scan = need(f.scan, "scan", s)?;
            let sector_deg = match f.sector_deg {
                Some([a, b]) => Some([bearing(a, "sector_deg", s)?, bearing(b, "sector_deg", s)?]),
                None => None,
            };
            Ok(Record::ScanEnd(ScanEnd { sensor, time, scan, sector_deg }))
        }
        _ => {
            let id = need(f.id.as_deref(), "id", s)?;
            if id.is_empty() {
                return Err(reject(RejectReason::OutOfRange("id"), s));
            }
            let lat = need(f.lat_deg, "lat_deg", s)?;
            let lat_deg = in_range(lat, (-90.0..=90.0).contains(&lat), "lat_deg", s)?;
            let lon = need(f.lon_deg, "lon_deg", s)?;
            let lon_deg = in_range(lon, (-180.0..=180.0).contains(&lon), "lon_deg", s)?;
            let sog_kn = f.sog_kn.map(|v| in_range(v, v >= 0.0, "sog_kn", s)).transpose()?;
            let cog_deg = opt_bearing(f.cog_deg, "cog_deg", s)?;
            let heading_deg = opt_bearing(f.heading_deg, "heading_deg", s)?;
            let name = match f.name.as_deref() {
                Some("") => return Err(reject(RejectReason::OutOfRange("name"), s)),
                n => n.map(Arc::from),
            };
            let ship_type = match f.ship_type {
                Some(t) => Some(u8::try_from(t).map_err(|_| reject(RejectReason::OutOfRange("ship_type"), s))?),
                None => None,
            };
            let length_m = f.length_m.map(|v| in_range(v, v > 0.0, "length_m", s)).transpose()?;
            let beam_m = f.beam_m.map(|v| in_range(v, v > 0.0, "beam_m", s)).transpose()?;
            let vessel = VesselInfo { name, ship_type, length_m, beam_m }.shared();
            Ok(Record::Report(Report { sensor, time, id: id.into(), lat_deg, lon_deg, sog_kn, cog_deg, heading_deg, vessel }))
        }
    }
}

fn json_str(out: &mut String, s: &str) {
    // serde_json's string escaping, written in place.
    let _ = serde_json::to_writer(string_writer(out), s);
}

/// A `std::io::Write` over a `String` that only ever receives UTF-8 from
/// serde_json.
fn string_writer(out: &mut String) -> impl std::io::Write + '_ {
    struct W<'a>(&'a mut String);
    impl std::io::Write for W<'_> {
        fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
            match std::str::from_utf8(buf) {
                Ok(s) => {
                    self.0.push_str(s);
                    Ok(buf.len())
                }
                Err(_) => Err(std::io::Error::new(std::io::ErrorKind::InvalidData, "not UTF-8")),
            }
        }
        fn flush(&mut self) -> std::io::Result<()> {
            Ok(())
        }
    }
    W(out)
}

/// Writes a number the way serde_json does (shortest round-trip form).
pub(crate) fn json_num(out: &mut String, v: f64) {
    if v.is_finite() {
        let mut b = ryu_like(v);
        if !b.contains(['.', 'e', 'E']) {
            b.push_str(".0");
        }
        out.push_str(&b);
    } else {
        out.push_str("null");
    }
}

fn ryu_like(v: f64) -> String {
    // serde_json::Number formats f64 with the shortest exact representation.
    serde_json::Number::from_f64(v).map(|n| n.to_string()).unwrap_or_else(|| "null".into())
}

/// Appends the contract JSON line for `rec` (without the newline).
/// `received`, when given, is written as the recording's `received` field.
pub fn encode_record(rec: &Record, sensors: &SensorTable, received: Option<Timestamp>, out: &mut String) {
    out.push_str("{\"type\":\"");
    out.push_str(rec.type_name());
    out.push_str("\",\"sensor\":");
    json_str(out, sensors.name(rec.sensor()));
    out.push_str(",\"time\":\"");
    rec.time().write_rfc3339(out);
    out.push('"');
    let field = |out: &mut String, k: &str, v: f64| {
        let _ = write!(out, ",\"{k}\":");
        json_num(out, v);
    };
    match rec {
        Record::Detection(d) => {
            if let Some(scan) = d.scan {
                let _ = write!(out, ",\"scan\":{scan}");
            }
            field(out, "range_m", d.range_m);
            field(out, "bearing_deg", d.bearing_deg);
            if let Some(v) = d.radial_speed_mps {
                field(out, "radial_speed_mps", v);
            }
            if let Some(v) = d.snr_db {
                field(out, "snr_db", v);
            }
        }
        Record::ScanEnd(s) => {
            let _ = write!(out, ",\"scan\":{}", s.scan);
            if let Some([a, b]) = s.sector_deg {
                out.push_str(",\"sector_deg\":[");
                json_num(out, a);
                out.push(',');
                json_num(out, b);
                out.push(']');
            }
        }
        Record::Report(r) => {
            out.push_str(",\"id\":");
            json_str(out, &r.id);
            field(out, "lat_deg", r.lat_deg);
            field(out, "lon_deg", r.lon_deg);
            for (k, v) in [("sog_kn", r.sog_kn), ("cog_deg", r.cog_deg), ("heading_deg", r.heading_deg)] {
                if let Some(v) = v {
                    field(out, k, v);
                }
            }
            if let Some(v) = &r.vessel {
                if let Some(n) = &v.name {
                    out.push_str(",\"name\":");
                    json_str(out, n);
                }
                if let Some(t) = v.ship_type {
                    let _ = write!(out, ",\"ship_type\":{t}");
                }
                for (k, x) in [("length_m", v.length_m), ("beam_m", v.beam_m)] {
                    if let Some(x) = x {
                        field(out, k, x);
                    }
                }
            }
        }
    }
    if let Some(t) = received {
        out.push_str(",\"received\":\"");
        t.write_rfc3339(out);
        out.push('"');
    }
    out.push('}');
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table() -> SensorTable {
        SensorTable::new([("north-mast", SensorKind::Radar), ("ais", SensorKind::Transponder)])
    }

    fn reason(line: &str) -> RejectReason {
        decode_line(line.as_bytes(), &table()).unwrap_err().reason
    }

    const DET: &str = r#"{"type":"detection","sensor":"north-mast","time":"2026-05-14T06:00:02.125Z","scan":7,"range_m":5000.5,"bearing_deg":45.25,"snr_db":14.0}"#;

    #[test]
    fn decodes_each_type_and_round_trips() {
        let t = table();
        let lines = [
            DET,
            r#"{"type":"scan_end","sensor":"north-mast","time":"2026-05-14T06:00:04Z","scan":7,"sector_deg":[350.0,10.0]}"#,
            r#"{"type":"report","sensor":"ais","time":"2026-05-14T06:00:04Z","id":"235000001","lat_deg":56.45,"lon_deg":7.35,"sog_kn":11.5,"cog_deg":270.0,"extra":[1,2]}"#,
        ];
        for l in lines {
            let r = decode_line(l.as_bytes(), &t).unwrap();
            let mut s = String::new();
            encode_record(&r, &t, None, &mut s);
            assert_eq!(decode_line(s.as_bytes(), &t).unwrap(), r, "{s}");
        }
        match decode_line(DET.as_bytes(), &t).unwrap() {
            Record::Detection(d) => {
                assert_eq!(d.range_m, 5000.5);
                assert_eq!(d.scan, Some(7));
                assert_eq!(d.time.to_rfc3339(), "2026-05-14T06:00:02.125Z");
            }
            _ => panic!(),
        }
    }

    #[test]
    fn report_static_fields() {
        let t = table();
        let base = r#"{"type":"report","sensor":"ais","time":"2026-05-14T06:00:04Z","id":"235000001","lat_deg":56.45,"lon_deg":7.35"#;
        let line = format!(r#"{base},"name":"SKERRY \"ONE\"","ship_type":52,"length_m":31.0,"beam_m":9.5}}"#);
        let r = decode_line(line.as_bytes(), &t).unwrap();
        let Record::Report(rep) = &r else { panic!() };
        let v = rep.vessel.as_deref().unwrap();
        assert_eq!((v.name.as_deref(), v.ship_type, v.length_m, v.beam_m), (Some("SKERRY \"ONE\""), Some(52), Some(31.0), Some(9.5)));
        let mut s = String::new();
        encode_record(&r, &t, None, &mut s);
        assert_eq!(s, line);
        // Absent fields: no vessel data at all; some present: only those.
        let Record::Report(plain) = decode_line(format!("{base}}}").as_bytes(), &t).unwrap() else { panic!() };
        assert!(plain.vessel.is_none());
        let Record::Report(part) = decode_line(format!(r#"{base},"ship_type":0}}"#).as_bytes(), &t).unwrap() else { panic!() };
        assert_eq!(part.vessel.as_deref(), Some(&VesselInfo { ship_type: Some(0), ..VesselInfo::default() }));
        for (extra, want) in [
            (r#""name":"""#, RejectReason::OutOfRange("name")),
            (r#""name":7"#, RejectReason::WrongType("name")),
            (r#""ship_type":256"#, RejectReason::OutOfRange("ship_type")),
            (r#""ship_type":-1"#, RejectReason::OutOfRange("ship_type")),
            (r#""ship_type":5.5"#, RejectReason::WrongType("ship_type")),
            (r#""length_m":0"#, RejectReason::OutOfRange("length_m")),
            (r#""beam_m":-2.0"#, RejectReason::OutOfRange("beam_m")),
            (r#""beam_m":"wide""#, RejectReason::WrongType("beam_m")),
            (r#""length_m":NaN"#, RejectReason::NonFinite("length_m")),
        ] {
            assert_eq!(reason(&format!("{base},{extra}}}")), want, "{extra}");
        }
        // On a detection these keys mean nothing and are ignored.
        assert!(decode_line(DET.replace("\"scan\":7", "\"scan\":7,\"name\":3").as_bytes(), &t).is_ok());
    }

    #[test]
    fn every_reject_reason_from_a_line() {
        assert_eq!(decode_line(b"{\"type\":\"detection\xff\"}", &table()).unwrap_err().reason, RejectReason::BadUtf8);
        assert_eq!(reason("{\"type\":\"detection\""), RejectReason::BadJson);
        assert_eq!(reason("[1,2]"), RejectReason::BadJson);
        assert_eq!(reason(r#"{"type":"plot"}"#), RejectReason::UnknownType);
        assert_eq!(reason(r#"{"sensor":"north-mast"}"#), RejectReason::MissingField("type"));
        assert_eq!(reason(&DET.replace(r#""range_m":5000.5,"#, "")), RejectReason::MissingField("range_m"));
        assert_eq!(reason(&DET.replace("5000.5", "\"5000.5\"")), RejectReason::WrongType("range_m"));
        assert_eq!(reason(&DET.replace("5000.5", "NaN")), RejectReason::NonFinite("range_m"));
        assert_eq!(reason(&DET.replace("45.25", "-Infinity")), RejectReason::NonFinite("bearing_deg"));
        assert_eq!(reason(&DET.replace("5000.5", "1e999")), RejectReason::NonFinite("range_m"));
        assert_eq!(reason(&DET.replace("5000.5", "-3")), RejectReason::OutOfRange("range_m"));
        assert_eq!(reason(&DET.replace("45.25", "360")), RejectReason::OutOfRange("bearing_deg"));
        assert_eq!(reason(&DET.replace("\"scan\":7", "\"scan\":-1")), RejectReason::OutOfRange("scan"));
        assert_eq!(reason(&DET.replace("\"scan\":7", "\"scan\":1.5")), RejectReason::WrongType("scan"));
        assert_eq!(reason(&DET.replace("north-mast", "south-mast")), RejectReason::UnknownSensor);
        assert_eq!(reason(&DET.replace("north-mast", "ais")), RejectReason::WrongSensorKind);
        assert_eq!(reason(&DET.replace("2026-05-14T06:00:02.125Z", "yesterday")), RejectReason::BadTime);
        // A NaN inside a string is just text, not a non-finite number.
        assert_eq!(reason(&DET.replace("north-mast", "NaN")), RejectReason::UnknownSensor);
    }

    #[test]
    fn reject_names_the_sensor_once_known() {
        let r = decode_line(DET.replace("5000.5", "-3").as_bytes(), &table()).unwrap_err();
        assert_eq!(r.sensor, Some(0));
    }
}
