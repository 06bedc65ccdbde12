//! Category 010 (ed. 1.1) monosensor surface movement data → plots
//! (target reports) and scan ends (start of update cycle).

use super::uap::UAP_010;
use super::{Amplitude, AsterixDecoder, AsterixItem, AsterixRejectReason as R, Plot, Reference, Sink, Service, ServiceMessage, Walked, u16_at, u24, walk};
use crate::feed::SensorId;
use crate::feed::{Detection, ScanEnd};

#[derive(Default)]
struct Fields<'a> {
    src: Option<[u8; 2]>,
    message_type: Option<u8>,
    descriptor: Option<&'a [u8]>,
    tod: Option<u32>,
    polar: Option<(u16, u16)>,
    cartesian: Option<(i16, i16)>,
    amplitude: Option<u8>,
}

pub(super) fn record(dec: &mut AsterixDecoder, rec: &[u8], reference: Reference, sink: &mut Sink<'_>) -> Walked {
    let mut f = Fields::default();
    let walked = walk(UAP_010, rec, |i, b| match i {
        0 => f.src = Some([b[0], b[1]]),
        1 => f.message_type = Some(b[0]),
        2 => f.descriptor = Some(b),
        3 => f.tod = Some(u24(b)),
        5 => f.polar = Some((u16_at(b, 0), u16_at(b, 2))),
        6 => f.cartesian = Some((u16_at(b, 0) as i16, u16_at(b, 2) as i16)),
        23 => f.amplitude = Some(b[0]),
        _ => {}
    });
    let looked = dec.lookup(f.src);
    let sensor = looked.ok();
    let len = walked.map_err(|r| (r, sensor))?;
    let outcome = looked.and_then(|id| outcome(dec, id, &f, reference));
    dec.emit(sink, 10, sensor, outcome);
    Ok(len)
}

fn outcome(dec: &mut AsterixDecoder, sensor: SensorId, f: &Fields<'_>, reference: Reference) -> super::RecordOutcome {
    match f.message_type.ok_or(R::MissingMessageType)? {
        1 => plot(dec, sensor, f, reference),
        2 => {
            let time = dec.time_of_day(f.tod.ok_or(R::NoTime)?, reference)?;
            let scan = dec.update_cycle(sensor);
            Ok(AsterixItem::Service(Service {
                sensor,
                category: 10,
                message: ServiceMessage::StartOfUpdateCycle,
                time: Some(time),
                rotation_period_s: None,
                scan_end: Some(ScanEnd { sensor, time, scan, sector_deg: None }),
            }))
        }
        t => {
            let time = match f.tod {
                Some(tod) => Some(dec.time_of_day(tod, reference)?),
                None => None,
            };
            Ok(AsterixItem::Service(Service {
                sensor,
                category: 10,
                message: ServiceMessage::Other { message_type: t },
                time,
                rotation_period_s: None,
                scan_end: None,
            }))
        }
    }
}

fn plot(dec: &mut AsterixDecoder, sensor: SensorId, f: &Fields<'_>, reference: Reference) -> super::RecordOutcome {
    // I010/020: TYP bits 8-6 of the first octet; SIM (bit 8) and TST
    // (bit 7) of the first extension.
    let (report_type, simulated) = match f.descriptor {
        Some(d) => {
            let ext = d.get(1).copied().unwrap_or(0);
            if ext & 0x40 != 0 {
                return Err(R::TestTarget);
            }
            (Some(d[0] >> 5), ext & 0x80 != 0)
        }
        None => (None, false),
    };
    // The measured polar position if present, else the Cartesian one
    // (x east, y north of the sensor, metres).
    let (range_m, bearing_deg, from_cartesian) = match (f.polar, f.cartesian) {
        (Some((rho, theta)), _) => (rho as f64, theta as f64 * (360.0 / 65536.0), false),
        (None, Some((x, y))) => {
            let (x, y) = (x as f64, y as f64);
            let b = x.atan2(y).to_degrees();
            // atan2 of a tiny negative x can round to exactly 360 after the shift.
            let b = if b < 0.0 { b + 360.0 } else { b };
            (x.hypot(y), if b >= 360.0 { 0.0 } else { b }, true)
        }
        (None, None) => return Err(R::NoPosition),
    };
    let time = dec.time_of_day(f.tod.ok_or(R::NoTime)?, reference)?;
    if range_m <= 0.0 {
        return Err(R::ZeroRange);
    }
    let scan = dec.current_scan(sensor);
    Ok(AsterixItem::Plot(Plot {
        detection: Detection { sensor, time, scan: Some(scan), range_m, bearing_deg, radial_speed_mps: None, snr_db: None },
        category: 10,
        report_type,
        simulated,
        amplitude: f.amplitude.map(Amplitude::Raw),
        run_length_deg: None,
        doppler: None,
        from_cartesian,
    }))
}
