//! The generated protobuf and gRPC code (proto/skerry/v1/) and the
//! conversions between its messages and skerry's records.
//!
//! A protobuf feed record is checked exactly as its JSON line would be
//! (CONTRACT.md §1): the same required fields, ranges and reject reasons.
//! The test `proto_and_json_agree` holds the two paths together.

#![allow(clippy::all, missing_docs)]

/// The messages and services of package `skerry.v1`.
pub mod v1 {
    tonic::include_proto!("skerry.v1");
}

/// The encoded descriptor set of the .proto files, for server reflection.
pub const FILE_DESCRIPTOR_SET: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/skerry_descriptor.bin"));

use crate::feed::{Detection, Record, Reject, RejectReason, Report, ScanEnd, SensorId, SensorKind, SensorTable, TrackRecord, TrackStatus, VesselInfo};
use crate::time::Timestamp;
use std::sync::Arc;
use v1::feed_record::Record as Pb;

fn reject(reason: RejectReason, sensor: Option<SensorId>) -> Reject {
    Reject { reason, sensor }
}

fn need<T>(v: Option<T>, key: &'static str, s: Option<SensorId>) -> Result<T, Reject> {
    v.ok_or_else(|| reject(RejectReason::MissingField(key), s))
}

fn finite(v: f64, key: &'static str, s: Option<SensorId>) -> Result<f64, Reject> {
    if v.is_finite() { Ok(v) } else { Err(reject(RejectReason::NonFinite(key), s)) }
}

fn in_range(v: f64, ok: bool, key: &'static str, s: Option<SensorId>) -> Result<f64, Reject> {
    let v = finite(v, key, s)?;
    if ok { Ok(v) } else { Err(reject(RejectReason::OutOfRange(key), s)) }
}

fn bearing(v: f64, key: &'static str, s: Option<SensorId>) -> Result<f64, Reject> {
    in_range(v, (0.0..360.0).contains(&v), key, s)
}

/// The sensor, its kind checked, and the time of a record.
fn head(sensor: Option<&str>, time: Option<&str>, want: SensorKind, table: &SensorTable) -> Result<(SensorId, Timestamp), Reject> {
    let name = need(sensor, "sensor", None)?;
    let id = table.lookup(name).ok_or_else(|| reject(RejectReason::UnknownSensor, None))?;
    if table.kind(id) != Some(want) {
        return Err(reject(RejectReason::WrongSensorKind, Some(id)));
    }
    let t = need(time, "time", Some(id))?;
    let time = Timestamp::parse_rfc3339(t).map_err(|_| reject(RejectReason::BadTime, Some(id)))?;
    Ok((id, time))
}

/// Checks a protobuf feed record and gives the record or the reason.
pub fn to_record(m: &v1::FeedRecord, table: &SensorTable) -> Result<Record, Reject> {
    match &m.record {
        None => Err(reject(RejectReason::MissingField("type"), None)),
        Some(Pb::Detection(d)) => {
            let (sensor, time) = head(d.sensor.as_deref(), d.time.as_deref(), SensorKind::Radar, table)?;
            let s = Some(sensor);
            let range_m = need(d.range_m, "range_m", s)?;
            let range_m = in_range(range_m, range_m > 0.0, "range_m", s)?;
            let bearing_deg = bearing(need(d.bearing_deg, "bearing_deg", s)?, "bearing_deg", s)?;
            let radial_speed_mps = d.radial_speed_mps.map(|v| finite(v, "radial_speed_mps", s)).transpose()?;
            let snr_db = d.snr_db.map(|v| finite(v, "snr_db", s)).transpose()?;
            Ok(Record::Detection(Detection { sensor, time, scan: d.scan, range_m, bearing_deg, radial_speed_mps, snr_db }))
        }
        Some(Pb::ScanEnd(e)) => {
            let (sensor, time) = head(e.sensor.as_deref(), e.time.as_deref(), SensorKind::Radar, table)?;
            let s = Some(sensor);
            let scan = need(e.scan, "scan", s)?;
            let sector_deg = match e.sector_deg.as_slice() {
                [] => None,
                [a, b] => Some([bearing(*a, "sector_deg", s)?, bearing(*b, "sector_deg", s)?]),
                _ => return Err(reject(RejectReason::WrongType("sector_deg"), s)),
            };
            Ok(Record::ScanEnd(ScanEnd { sensor, time, scan, sector_deg }))
        }
        Some(Pb::Report(r)) => {
            let (sensor, time) = head(r.sensor.as_deref(), r.time.as_deref(), SensorKind::Transponder, table)?;
            let s = Some(sensor);
            let id = need(r.id.as_deref(), "id", s)?;
            if id.is_empty() {
                return Err(reject(RejectReason::OutOfRange("id"), s));
            }
            let lat = need(r.lat_deg, "lat_deg", s)?;
            let lat_deg = in_range(lat, (-90.0..=90.0).contains(&lat), "lat_deg", s)?;
            let lon = need(r.lon_deg, "lon_deg", s)?;
            let lon_deg = in_range(lon, (-180.0..=180.0).contains(&lon), "lon_deg", s)?;
            let sog_kn = r.sog_kn.map(|v| in_range(v, v >= 0.0, "sog_kn", s)).transpose()?;
            let cog_deg = r.cog_deg.map(|v| bearing(v, "cog_deg", s)).transpose()?;
            let heading_deg = r.heading_deg.map(|v| bearing(v, "heading_deg", s)).transpose()?;
            let name = match r.name.as_deref() {
                Some("") => return Err(reject(RejectReason::OutOfRange("name"), s)),
                n => n.map(Arc::from),
            };
            let ship_type = match r.ship_type {
                Some(t) => Some(u8::try_from(t).map_err(|_| reject(RejectReason::OutOfRange("ship_type"), s))?),
                None => None,
            };
            let length_m = r.length_m.map(|v| in_range(v, v > 0.0, "length_m", s)).transpose()?;
            let beam_m = r.beam_m.map(|v| in_range(v, v > 0.0, "beam_m", s)).transpose()?;
            let vessel = VesselInfo { name, ship_type, length_m, beam_m }.shared();
            Ok(Record::Report(Report { sensor, time, id: Arc::from(id), lat_deg, lon_deg, sog_kn, cog_deg, heading_deg, vessel }))
        }
    }
}

/// The protobuf form of a record.
pub fn from_record(rec: &Record, table: &SensorTable) -> v1::FeedRecord {
    let sensor = Some(table.name(rec.sensor()).to_string());
    let time = Some(rec.time().to_rfc3339());
    let record = match rec {
        Record::Detection(d) => Pb::Detection(v1::Detection {
            sensor,
            time,
            scan: d.scan,
            range_m: Some(d.range_m),
            bearing_deg: Some(d.bearing_deg),
            radial_speed_mps: d.radial_speed_mps,
            snr_db: d.snr_db,
        }),
        Record::ScanEnd(e) => Pb::ScanEnd(v1::ScanEnd { sensor, time, scan: Some(e.scan), sector_deg: e.sector_deg.map(|s| s.to_vec()).unwrap_or_default() }),
        Record::Report(r) => Pb::Report(v1::Report {
            sensor,
            time,
            id: Some(r.id.to_string()),
            lat_deg: Some(r.lat_deg),
            lon_deg: Some(r.lon_deg),
            sog_kn: r.sog_kn,
            cog_deg: r.cog_deg,
            heading_deg: r.heading_deg,
            name: r.vessel.as_ref().and_then(|v| v.name.as_ref()).map(|n| n.to_string()),
            ship_type: r.vessel.as_ref().and_then(|v| v.ship_type).map(u32::from),
            length_m: r.vessel.as_ref().and_then(|v| v.length_m),
            beam_m: r.vessel.as_ref().and_then(|v| v.beam_m),
        }),
    };
    v1::FeedRecord { record: Some(record) }
}

/// A feed line read as JSON, mapped field by field onto the protobuf form
/// without any check (the daemon checks). For the replay tool, which has
/// no configuration. `None`: not a JSON object of a known `type`.
pub fn json_line_to_proto(line: &str) -> Option<v1::FeedRecord> {
    let v: serde_json::Value = serde_json::from_str(line).ok()?;
    let o = v.as_object()?;
    // A field present but not of the protobuf type (a negative scan, a
    // number as a string) cannot be carried: the line is not sendable.
    let bad = std::cell::Cell::new(false);
    let get = |k: &str| o.get(k).filter(|x| !x.is_null());
    let s = |k: &str| {
        let v = get(k).map(|x| x.as_str().map(str::to_string));
        if v == Some(None) {
            bad.set(true);
        }
        v.flatten()
    };
    let f = |k: &str| {
        let v = get(k).map(|x| x.as_f64());
        if v == Some(None) {
            bad.set(true);
        }
        v.flatten()
    };
    let u = |k: &str| {
        let v = get(k).map(|x| x.as_u64());
        if v == Some(None) {
            bad.set(true);
        }
        v.flatten()
    };
    let record = match o.get("type")?.as_str()? {
        "detection" => Pb::Detection(v1::Detection {
            sensor: s("sensor"),
            time: s("time"),
            scan: u("scan"),
            range_m: f("range_m"),
            bearing_deg: f("bearing_deg"),
            radial_speed_mps: f("radial_speed_mps"),
            snr_db: f("snr_db"),
        }),
        "scan_end" => Pb::ScanEnd(v1::ScanEnd {
            sensor: s("sensor"),
            time: s("time"),
            scan: u("scan"),
            sector_deg: match get("sector_deg") {
                None => Vec::new(),
                Some(x) => match x.as_array().map(|a| a.iter().map(|x| x.as_f64()).collect::<Option<Vec<f64>>>()) {
                    Some(Some(v)) if v.len() == 2 => v,
                    _ => {
                        bad.set(true);
                        Vec::new()
                    }
                },
            },
        }),
        "report" => Pb::Report(v1::Report {
            sensor: s("sensor"),
            time: s("time"),
            id: s("id"),
            lat_deg: f("lat_deg"),
            lon_deg: f("lon_deg"),
            sog_kn: f("sog_kn"),
            cog_deg: f("cog_deg"),
            heading_deg: f("heading_deg"),
            name: s("name"),
            // Too large for the field: sent as the largest value, which the
            // daemon rejects as out of range, as it would the JSON line.
            ship_type: u("ship_type").map(|t| u32::try_from(t).unwrap_or(u32::MAX)),
            length_m: f("length_m"),
            beam_m: f("beam_m"),
        }),
        _ => return None,
    };
    if bad.get() {
        return None;
    }
    Some(v1::FeedRecord { record: Some(record) })
}

pub fn status_to_proto(s: TrackStatus) -> v1::TrackStatus {
    match s {
        TrackStatus::Tentative => v1::TrackStatus::Tentative,
        TrackStatus::Confirmed => v1::TrackStatus::Confirmed,
        TrackStatus::Coasting => v1::TrackStatus::Coasting,
        TrackStatus::Ended => v1::TrackStatus::Ended,
    }
}

pub fn status_from_proto(s: v1::TrackStatus) -> Option<TrackStatus> {
    match s {
        v1::TrackStatus::Unspecified => None,
        v1::TrackStatus::Tentative => Some(TrackStatus::Tentative),
        v1::TrackStatus::Confirmed => Some(TrackStatus::Confirmed),
        v1::TrackStatus::Coasting => Some(TrackStatus::Coasting),
        v1::TrackStatus::Ended => Some(TrackStatus::Ended),
    }
}

pub fn track_to_proto(t: &TrackRecord) -> v1::TrackRecord {
    let c = t.pos_cov_m2;
    v1::TrackRecord {
        time: t.time.to_rfc3339(),
        track: t.track,
        status: status_to_proto(t.status) as i32,
        lat_deg: t.lat_deg,
        lon_deg: t.lon_deg,
        east_m: t.east_m,
        north_m: t.north_m,
        vel_east_mps: t.vel_east_mps,
        vel_north_mps: t.vel_north_mps,
        speed_kn: t.speed_kn,
        course_deg: t.course_deg,
        pos_cov_m2: vec![c[0][0], c[0][1], c[1][0], c[1][1]],
        sensors: t.sensors.iter().map(|s| s.to_string()).collect(),
        identity: t.identity.as_ref().map(|s| s.to_string()),
        name: t.name.as_ref().map(|s| s.to_string()),
        ship_type: t.ship_type.map(u32::from),
        length_m: t.length_m,
        beam_m: t.beam_m,
        // As in the JSON record: present only when set.
        identity_conflict: t.identity_conflict.then_some(true),
    }
}

#[derive(Debug, thiserror::Error, PartialEq)]
pub enum TrackConvertError {
    #[error("track {0}: bad time")]
    Time(u64),
    #[error("track {0}: unknown status")]
    Status(u64),
    #[error("track {0}: pos_cov_m2 must have 4 numbers")]
    Covariance(u64),
}

pub fn track_from_proto(t: &v1::TrackRecord) -> Result<TrackRecord, TrackConvertError> {
    let time = Timestamp::parse_rfc3339(&t.time).map_err(|_| TrackConvertError::Time(t.track))?;
    let status = v1::TrackStatus::try_from(t.status).ok().and_then(status_from_proto).ok_or(TrackConvertError::Status(t.track))?;
    let c = match t.pos_cov_m2.as_slice() {
        [a, b, c, d] => [[*a, *b], [*c, *d]],
        _ => return Err(TrackConvertError::Covariance(t.track)),
    };
    Ok(TrackRecord {
        time,
        track: t.track,
        status,
        lat_deg: t.lat_deg,
        lon_deg: t.lon_deg,
        east_m: t.east_m,
        north_m: t.north_m,
        vel_east_mps: t.vel_east_mps,
        vel_north_mps: t.vel_north_mps,
        speed_kn: t.speed_kn,
        course_deg: t.course_deg,
        pos_cov_m2: c,
        sensors: t.sensors.iter().map(|s| Arc::from(s.as_str())).collect(),
        identity: t.identity.as_deref().map(Arc::from),
        name: t.name.as_deref().map(Arc::from),
        // A ship type beyond 255 cannot come from skerry: dropped.
        ship_type: t.ship_type.and_then(|v| u8::try_from(v).ok()),
        length_m: t.length_m,
        beam_m: t.beam_m,
        identity_conflict: t.identity_conflict.unwrap_or(false),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::feed::decode_line;

    fn table() -> SensorTable {
        SensorTable::new([("north-mast", SensorKind::Radar), ("ais", SensorKind::Transponder)])
    }

    const DET: &str = r#"{"type":"detection","sensor":"north-mast","time":"2026-05-14T06:00:02.125Z","scan":7,"range_m":5000.5,"bearing_deg":45.25,"snr_db":14.0}"#;
    const END: &str = r#"{"type":"scan_end","sensor":"north-mast","time":"2026-05-14T06:00:04Z","scan":7,"sector_deg":[350.0,10.0]}"#;
    const REP: &str = r#"{"type":"report","sensor":"ais","time":"2026-05-14T06:00:04Z","id":"235000001","lat_deg":56.45,"lon_deg":7.35,"sog_kn":11.5,"cog_deg":270.0}"#;

    /// The JSON codec (src/feed/json.rs) is the reference: a line mapped to
    /// protobuf must give the same record or the same reject.
    #[test]
    fn proto_and_json_agree() {
        let t = table();
        let lines: Vec<String> = vec![
            DET.into(),
            END.into(),
            REP.into(),
            END.replace(r#","sector_deg":[350.0,10.0]"#, ""),
            DET.replace(r#""range_m":5000.5,"#, ""),
            DET.replace("5000.5", "-3"),
            DET.replace("45.25", "360"),
            DET.replace("north-mast", "south-mast"),
            DET.replace("north-mast", "ais"),
            DET.replace("2026-05-14T06:00:02.125Z", "yesterday"),
            DET.replace(r#""time":"2026-05-14T06:00:02.125Z","#, ""),
            END.replace(r#""scan":7,"#, ""),
            END.replace("350.0", "361.0"),
            REP.replace("56.45", "91.0"),
            REP.replace("7.35", "-181.0"),
            REP.replace("11.5", "-1.0"),
            REP.replace("270.0", "360.0"),
            REP.replace("\"235000001\"", "\"\""),
            REP.replace(r#""id":"235000001","#, ""),
            REP.replace("ais", "north-mast"),
            REP.replace("}", r#","name":"SKERRY ONE","ship_type":52,"length_m":31.0,"beam_m":9.5}"#),
            REP.replace("}", r#","name":""}"#),
            REP.replace("}", r#","ship_type":256}"#),
            REP.replace("}", r#","length_m":0}"#),
            REP.replace("}", r#","beam_m":-1.5}"#),
        ];
        for l in &lines {
            let want = decode_line(l.as_bytes(), &t);
            let pb = json_line_to_proto(l).unwrap();
            assert_eq!(to_record(&pb, &t), want, "{l}");
        }
        // Non-finite numbers cannot be written in JSON for the mapping;
        // the JSON codec's reason for a NaN is NonFinite(field).
        let mut pb = json_line_to_proto(DET).unwrap();
        if let Some(Pb::Detection(d)) = &mut pb.record {
            d.range_m = Some(f64::NAN);
        }
        assert_eq!(to_record(&pb, &t), decode_line(DET.replace("5000.5", "NaN").as_bytes(), &t));
        if let Some(Pb::Detection(d)) = &mut pb.record {
            d.range_m = Some(5.0);
            d.snr_db = Some(f64::INFINITY);
        }
        assert_eq!(to_record(&pb, &t), decode_line(DET.replace("14.0", "Infinity").as_bytes(), &t));
        assert_eq!(to_record(&v1::FeedRecord { record: None }, &t).unwrap_err().reason, RejectReason::MissingField("type"));
    }

    #[test]
    fn records_round_trip() {
        let t = table();
        let rep_static = REP.replace("}", r#","name":"SKERRY ONE","ship_type":52,"length_m":31.0,"beam_m":9.5}"#);
        for l in [DET, END, REP, &rep_static] {
            let r = decode_line(l.as_bytes(), &t).unwrap();
            assert_eq!(to_record(&from_record(&r, &t), &t).unwrap(), r);
        }
    }

    #[test]
    fn tracks_round_trip() {
        let line = r#"{"type":"track","time":"2026-05-14T06:00:02.125Z","track":12,"status":"coasting","lat_deg":56.4512346,"lon_deg":7.3500000,"east_m":0.00,"north_m":1234.57,"vel_east_mps":3.000,"vel_north_mps":-4.000,"speed_kn":9.72,"course_deg":143.13,"pos_cov_m2":[[100.00,2.50],[2.50,80.00]],"sensors":["north-mast"],"identity":"235000001"}"#;
        let r = TrackRecord::from_json(line).unwrap().unwrap();
        let back = track_from_proto(&track_to_proto(&r)).unwrap();
        assert_eq!(back, r);
        assert_eq!(back.to_json(), line);
    }

    /// `identity_conflict` survives JSON → protobuf → JSON, and travels as
    /// field 19: by the protobuf encoding rules (protobuf.dev, "Encoding":
    /// a field's tag is `(field_number << 3) | wire_type` as a varint, a
    /// bool is a varint, wire type 0) the tag 152 = varint `0x98 0x01`,
    /// then `0x01`; absent when false, as the JSON field is.
    #[test]
    fn identity_conflict_round_trips() {
        let plain = r#"{"type":"track","time":"2026-05-14T06:00:02.125Z","track":12,"status":"confirmed","lat_deg":56.4512346,"lon_deg":7.3500000,"east_m":0.00,"north_m":1234.57,"vel_east_mps":3.000,"vel_north_mps":-4.000,"speed_kn":9.72,"course_deg":143.13,"pos_cov_m2":[[100.00,2.50],[2.50,80.00]],"sensors":["ais"],"identity":"235000001"}"#;
        let flagged = format!("{},\"identity_conflict\":true}}", &plain[..plain.len() - 1]);
        for (line, set) in [(plain.to_string(), false), (flagged, true)] {
            let r = TrackRecord::from_json(&line).unwrap().unwrap();
            assert_eq!(r.identity_conflict, set);
            let pb = track_to_proto(&r);
            assert_eq!(pb.identity_conflict, set.then_some(true));
            let bytes = prost::Message::encode_to_vec(&pb);
            let back = track_from_proto(&<v1::TrackRecord as prost::Message>::decode(bytes.as_slice()).unwrap()).unwrap();
            assert_eq!(back, r);
            assert_eq!(back.to_json(), line);
            // Field 19 comes last in field order: the final three bytes.
            assert_eq!(bytes.ends_with(&[0x98, 0x01, 0x01]), set, "{bytes:02x?}");
        }
    }
}
