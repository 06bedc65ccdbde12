//! skerry: a streaming multi-target tracker for harbour and coastal
//! surveillance.

pub mod cli;
pub mod config;
pub mod daemon;
pub mod demo;
pub mod engine;
pub mod feed;
pub mod geo;
pub mod offline;
pub mod recording;
pub mod reorder;
pub mod score;
pub mod sim;
pub mod snapshot;
pub mod stats;
pub mod time;
