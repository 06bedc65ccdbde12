//! Category 048 (ed. 1.31) target reports → plots.

use super::uap::{self, UAP_048};
use super::{Amplitude, AsterixDecoder, AsterixItem, AsterixRejectReason as R, Doppler, Plot, Reference, Sink, Walked, u16_at, u24, walk};
use crate::feed::SensorId;
use crate::feed::Detection;

/// The items skerry reads from a category 048 record.
#[derive(Default)]
struct Fields<'a> {
    src: Option<[u8; 2]>,
    tod: Option<u32>,
    descriptor: Option<&'a [u8]>,
    polar: Option<(u16, u16)>,
    characteristics: Option<&'a [u8]>,
    doppler: Option<&'a [u8]>,
}

pub(super) fn record(dec: &mut AsterixDecoder, rec: &[u8], reference: Reference, sink: &mut Sink<'_>) -> Walked {
    let mut f = Fields::default();
    let walked = walk(UAP_048, rec, |i, b| match i {
        0 => f.src = Some([b[0], b[1]]),
        1 => f.tod = Some(u24(b)),
        2 => f.descriptor = Some(b),
        3 => f.polar = Some((u16_at(b, 0), u16_at(b, 2))),
        6 => f.characteristics = Some(b),
        19 => f.doppler = Some(b),
        _ => {}
    });
    let looked = dec.lookup(f.src);
    let sensor = looked.ok();
    let len = walked.map_err(|r| (r, sensor))?;
    let outcome = looked.and_then(|id| plot(dec, id, &f, reference));
    dec.emit(sink, 48, sensor, outcome);
    Ok(len)
}

fn plot(dec: &mut AsterixDecoder, sensor: SensorId, f: &Fields<'_>, reference: Reference) -> super::RecordOutcome {
    // I048/020: TYP bits 8-6 and SIM bit 5 of the first octet; TST is bit
    // 8 of the first extension.
    let (report_type, simulated) = match f.descriptor {
        Some(d) => {
            if d.len() > 1 && d[1] & 0x80 != 0 {
                return Err(R::TestTarget);
            }
            (Some(d[0] >> 5), d[0] & 0x10 != 0)
        }
        None => (None, false),
    };
    if report_type == Some(0) {
        return Err(R::NoDetection);
    }
    let (rho, theta) = f.polar.ok_or(R::NoPosition)?;
    let tod = f.tod.ok_or(R::NoTime)?;
    let time = dec.time_of_day(tod, reference)?;
    if rho == 0 {
        return Err(R::ZeroRange);
    }
    let mut amplitude = None;
    let mut run_length_deg = None;
    if let Some(c) = f.characteristics {
        // Sub-fields SRL, SRR, SAM, PRL, PAM, RPD, APD (one octet each).
        uap::compound_fields(uap::I048_130_SUBS, c, |i, b| match i {
            3 => run_length_deg = Some(b[0] as f64 * (360.0 / 8192.0)),
            4 => amplitude = Some(Amplitude::Dbm(b[0] as i8 as f64)),
            _ => {}
        })?;
    }
    let mut doppler = None;
    if let Some(d) = f.doppler {
        // CAL: D (bit 16), 5 spare bits, 10-bit two's complement speed in m/s.
        uap::compound_fields(uap::I048_120_SUBS, d, |i, b| {
            if i == 0 {
                let raw = ((b[0] as u16 & 0x03) << 8 | b[1] as u16) as i16;
                let speed = ((raw << 6) >> 6) as f64;
                doppler = Some(Doppler { speed_mps: speed, doubtful: b[0] & 0x80 != 0 });
            }
        })?;
    }
    let scan = dec.current_scan(sensor);
    Ok(AsterixItem::Plot(Plot {
        detection: Detection {
            sensor,
            time,
            scan: Some(scan),
            range_m: rho as f64 * (super::METRES_PER_NM / 256.0),
            bearing_deg: theta as f64 * (360.0 / 65536.0),
            radial_speed_mps: doppler.filter(|d| !d.doubtful).map(|d| d.speed_mps),
            snr_db: None,
        },
        category: 48,
        report_type,
        simulated,
        amplitude,
        run_length_deg,
        doppler,
        from_cartesian: false,
    }))
}
