//! The tracking engine: sans-IO and deterministic.
//!
//! Records go in, in time order; track events come out. The engine never
//! reads a clock, opens a socket or spawns a task: time comes from the
//! records, so the offline and live paths give the same tracks.

pub mod assign;
pub mod filter;
pub mod imm;
pub mod measure;
