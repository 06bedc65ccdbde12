//! The calling thread's CPU time (Linux `CLOCK_THREAD_CPUTIME_ID`) as a
//! criterion measurement, shared by the benches that report CPU time
//! beside wall time.

use criterion::measurement::{Measurement, ValueFormatter, WallTime};

#[repr(C)]
struct Timespec {
    tv_sec: i64,
    tv_nsec: i64,
}
unsafe extern "C" {
    fn clock_gettime(clock: i32, ts: *mut Timespec) -> i32;
}
const CLOCK_THREAD_CPUTIME_ID: i32 = 3;

fn now_ns() -> u64 {
    let mut ts = Timespec { tv_sec: 0, tv_nsec: 0 };
    // SAFETY: a valid, writable timespec and a clock id Linux defines.
    let rc = unsafe { clock_gettime(CLOCK_THREAD_CPUTIME_ID, &mut ts) };
    assert_eq!(rc, 0, "clock_gettime(CLOCK_THREAD_CPUTIME_ID) failed");
    ts.tv_sec as u64 * 1_000_000_000 + ts.tv_nsec as u64
}

static WALL: WallTime = WallTime;

pub struct ThreadCpu;

impl Measurement for ThreadCpu {
    type Intermediate = u64;
    type Value = u64;
    fn start(&self) -> u64 {
        now_ns()
    }
    fn end(&self, i: u64) -> u64 {
        now_ns() - i
    }
    fn add(&self, a: &u64, b: &u64) -> u64 {
        a + b
    }
    fn zero(&self) -> u64 {
        0
    }
    fn to_f64(&self, v: &u64) -> f64 {
        *v as f64
    }
    fn formatter(&self) -> &dyn ValueFormatter {
        // Values are nanoseconds, as for the wall clock.
        WALL.formatter()
    }
}
