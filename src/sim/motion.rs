//! Vessel motion in the site's east/north plane: a chain of legs, each
//! solved in closed form, so the state at any instant is exact (no
//! integration step).

use crate::feed::tracks::MPS_PER_KNOT;
use nalgebra::Vector2;

/// One leg of a vessel's voyage, as checked from the scenario.
#[derive(Copy, Clone, Debug, PartialEq)]
pub enum Leg {
    /// Course and speed held.
    Straight { duration_s: f64 },
    /// A turn at constant speed; positive rates turn clockwise (starboard).
    Turn { rate_deg_s: f64, duration_s: f64 },
    /// Course held, speed changed at a constant rate to `to_kn`.
    Speed { to_kn: f64, accel_mps2: f64 },
}

#[derive(Copy, Clone, Debug, PartialEq)]
enum Kind {
    Straight,
    /// Turn rate, rad/s, positive clockwise.
    Turn(f64),
    /// Signed acceleration along the course, m/s².
    Accel(f64),
}

/// A leg placed in time, with the state at its start.
#[derive(Copy, Clone, Debug, PartialEq)]
struct Segment {
    t0: f64,
    pos: Vector2<f64>,
    /// Course, radians clockwise from the site plane's north.
    course: f64,
    speed: f64,
    kind: Kind,
}

/// The state of a vessel at an instant.
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct State {
    /// East/north in the site plane, metres.
    pub pos: Vector2<f64>,
    /// Velocity in the site plane, m/s.
    pub vel: Vector2<f64>,
    /// Course in the site plane, degrees in [0, 360).
    pub course_deg: f64,
    pub speed_mps: f64,
    /// In a turn leg (for the transponder's "changing course" rates).
    pub turning: bool,
}

/// A voyage: segments in time order; after the last leg the vessel runs
/// straight for ever.
#[derive(Clone, Debug, PartialEq)]
pub struct Motion {
    segments: Vec<Segment>,
}

impl Motion {
    /// Starts at `t0_s` at `pos` with `course_deg` and `speed_kn`, then
    /// follows `legs`.
    pub fn new(t0_s: f64, pos: Vector2<f64>, course_deg: f64, speed_kn: f64, legs: &[Leg]) -> Motion {
        let mut segments = Vec::with_capacity(legs.len() + 1);
        let mut cur = Segment { t0: t0_s, pos, course: course_deg.to_radians(), speed: speed_kn * MPS_PER_KNOT, kind: Kind::Straight };
        for leg in legs {
            let (kind, dur) = match *leg {
                Leg::Straight { duration_s } => (Kind::Straight, duration_s),
                Leg::Turn { rate_deg_s, duration_s } => (Kind::Turn(rate_deg_s.to_radians()), duration_s),
                Leg::Speed { to_kn, accel_mps2 } => {
                    let dv = to_kn * MPS_PER_KNOT - cur.speed;
                    (Kind::Accel(accel_mps2.copysign(dv)), dv.abs() / accel_mps2)
                }
            };
            // Zero-length legs (and NaN, which checking rules out) add nothing.
            if dur.is_nan() || dur <= 0.0 {
                continue;
            }
            let seg = Segment { kind, ..cur };
            let end = seg.at(seg.t0 + dur);
            segments.push(seg);
            cur = Segment {
                t0: seg.t0 + dur,
                pos: end.pos,
                course: end.course_deg.to_radians(),
                // An exact target speed, free of rounding in the integration.
                speed: match *leg {
                    Leg::Speed { to_kn, .. } => to_kn * MPS_PER_KNOT,
                    _ => end.speed_mps,
                },
                kind: Kind::Straight,
            };
        }
        segments.push(cur);
        Motion { segments }
    }

    /// The state at `t_s` (seconds after the scenario start). Before the
    /// vessel's start time, the start state moved back along its course.
    pub fn state_at(&self, t_s: f64) -> State {
        let i = self.segments.partition_point(|s| s.t0 <= t_s).saturating_sub(1);
        self.segments[i].at(t_s)
    }

    /// End time of the last leg (after it, the vessel runs straight).
    pub fn legs_end_s(&self) -> f64 {
        self.segments.last().map(|s| s.t0).unwrap_or(0.0)
    }
}

impl Segment {
    fn at(&self, t: f64) -> State {
        let tau = t - self.t0;
        let (s0, c0) = self.course.sin_cos();
        let (pos, course, speed, turning) = match self.kind {
            Kind::Straight => (self.pos + Vector2::new(s0, c0) * (self.speed * tau), self.course, self.speed, false),
            Kind::Turn(w) => {
                // Position on the circle of radius v/ω; the direction
                // (sin C, cos C) integrates to (−cos C, sin C)/ω.
                let c1 = self.course + w * tau;
                let (s1, cc1) = c1.sin_cos();
                let d = Vector2::new(c0 - cc1, s1 - s0) * (self.speed / w);
                (self.pos + d, c1, self.speed, true)
            }
            Kind::Accel(a) => {
                // Before the leg starts (tau < 0) only for the first segment.
                let v = (self.speed + a * tau).max(0.0);
                let dist = self.speed * tau + 0.5 * a * tau * tau;
                (self.pos + Vector2::new(s0, c0) * dist, self.course, v, false)
            }
        };
        let (s, c) = course.sin_cos();
        let mut course_deg = course.to_degrees().rem_euclid(360.0);
        if course_deg >= 360.0 {
            course_deg = 0.0;
        }
        State { pos, vel: Vector2::new(s, c) * speed, course_deg, speed_mps: speed, turning }
    }
}
