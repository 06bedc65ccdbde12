//! skerry: a streaming multi-target tracker for harbour and coastal
//! surveillance.

pub mod config;
pub mod engine;
pub mod feed;
pub mod geo;
pub mod score;
pub mod sim;
pub mod stats;
pub mod time;
