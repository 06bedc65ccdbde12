//! skerry: a streaming multi-target tracker for harbour and coastal
//! surveillance.

pub mod config;
pub mod daemon;
pub mod reorder;
pub mod engine;
pub mod feed;
pub mod geo;
pub mod stats;
pub mod time;
