//! skerry: a streaming multi-target tracker for harbour and coastal
//! surveillance.

pub mod cli;
pub mod config;
pub mod engine;
pub mod feed;
pub mod geo;
pub mod offline;
pub mod stats;
pub mod time;
