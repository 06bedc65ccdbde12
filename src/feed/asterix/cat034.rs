//! Category 034 (ed. 1.29) service messages → north markers and sector
//! crossings, which close sectors (`scan_end`).

use super::uap::UAP_034;
use super::{AsterixDecoder, AsterixItem, AsterixRejectReason as R, Reference, Sink, Service, ServiceMessage, Walked, u16_at, u24, walk};
use crate::feed::SensorId;
use crate::feed::ScanEnd;

#[derive(Default)]
struct Fields {
    src: Option<[u8; 2]>,
    message_type: Option<u8>,
    tod: Option<u32>,
    sector: Option<u8>,
    period: Option<u16>,
}

pub(super) fn record(dec: &mut AsterixDecoder, rec: &[u8], reference: Reference, sink: &mut Sink<'_>) -> Walked {
    let mut f = Fields::default();
    let walked = walk(UAP_034, rec, |i, b| match i {
        0 => f.src = Some([b[0], b[1]]),
        1 => f.message_type = Some(b[0]),
        2 => f.tod = Some(u24(b)),
        3 => f.sector = Some(b[0]),
        4 => f.period = Some(u16_at(b, 0)),
        _ => {}
    });
    let looked = dec.lookup(f.src);
    let sensor = looked.ok();
    let len = walked.map_err(|r| (r, sensor))?;
    let outcome = looked.and_then(|id| service(dec, id, &f, reference));
    dec.emit(sink, 34, sensor, outcome);
    Ok(len)
}

fn service(dec: &mut AsterixDecoder, sensor: SensorId, f: &Fields, reference: Reference) -> super::RecordOutcome {
    let message_type = f.message_type.ok_or(R::MissingMessageType)?;
    let rotation_period_s = f.period.map(|p| p as f64 / 128.0);
    let (message, edge) = match message_type {
        1 => (ServiceMessage::NorthMarker, 0u8),
        2 => {
            let s = f.sector.ok_or(R::MissingSector)?;
            (ServiceMessage::SectorCrossing { sector_deg: s as f64 * (360.0 / 256.0) }, s)
        }
        t => {
            let time = match f.tod {
                Some(tod) => Some(dec.time_of_day(tod, reference)?),
                None => None,
            };
            return Ok(AsterixItem::Service(Service {
                sensor,
                category: 34,
                message: ServiceMessage::Other { message_type: t },
                time,
                rotation_period_s,
                scan_end: None,
            }));
        }
    };
    let time = dec.time_of_day(f.tod.ok_or(R::NoTime)?, reference)?;
    let north = matches!(message, ServiceMessage::NorthMarker);
    let (covered, scan) = dec.sector_edge(sensor, edge, north);
    Ok(AsterixItem::Service(Service {
        sensor,
        category: 34,
        message,
        time: Some(time),
        rotation_period_s,
        scan_end: covered.map(|sector_deg| ScanEnd { sensor, time, scan, sector_deg }),
    }))
}
