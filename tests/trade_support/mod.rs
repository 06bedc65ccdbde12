//! Shared by the trade-input tests: a configuration with two radars
//! (SAC/SIC 25/201 and 25/202) and an AIS receiver, and the committed
//! ASTERIX and AIS fixtures as raw inputs.

#![allow(dead_code)]

use skerry::config::Config;

pub const ASTERIX: &str = include_str!("../fixtures/asterix_cases.json");
pub const AIS: &str = include_str!("../fixtures/ais_session.json");

pub const CONFIG: &str = r#"
[site]
name = "Brannoch Sound (invented)"
lat_deg = 56.45
lon_deg = 7.35

[[sensors]]
id = "north-mast"
kind = "radar"
lat_deg = 56.462
lon_deg = 7.343
range_sigma_m = 12.0
bearing_sigma_deg = 0.3
max_range_m = 30000.0
scan_period_s = 2.5
asterix_sac = 25
asterix_sic = 201

[[sensors]]
id = "south-quay"
kind = "radar"
lat_deg = 56.431
lon_deg = 7.392
range_sigma_m = 15.0
bearing_sigma_deg = 0.3
max_range_m = 30000.0
scan_period_s = 3.0
asterix_sac = 25
asterix_sic = 202

[[sensors]]
id = "harbour-ais"
kind = "transponder"
position_sigma_m = 10.0

[tracking]
association = "gnn"
"#;

pub fn config() -> Config {
    Config::from_toml_str(CONFIG, "test.toml", &Default::default()).unwrap()
}

/// The ASTERIX fixture's data blocks, as bytes.
pub fn asterix_seeds() -> Vec<Vec<u8>> {
    let doc: serde_json::Value = serde_json::from_str(ASTERIX).unwrap();
    doc["cases"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            let h = c["hex"].as_str().unwrap();
            (0..h.len()).step_by(2).map(|i| u8::from_str_radix(&h[i..i + 2], 16).unwrap()).collect()
        })
        .collect()
}

/// The AIS fixture's sentences, as bytes.
pub fn ais_lines() -> Vec<Vec<u8>> {
    let doc: serde_json::Value = serde_json::from_str(AIS).unwrap();
    doc["lines"].as_array().unwrap().iter().map(|l| l["line"].as_str().unwrap().as_bytes().to_vec()).collect()
}

/// A seed with some bytes replaced, flipped, dropped and inserted.
pub fn mutate(seed: &[u8], edits: &[(usize, u8, u8)]) -> Vec<u8> {
    let mut v = seed.to_vec();
    for &(pos, op, b) in edits {
        if v.is_empty() {
            v.push(b);
            continue;
        }
        let i = pos % v.len();
        match op % 4 {
            0 => v[i] = b,
            1 => v[i] ^= 1 << (b % 8),
            2 => {
                v.remove(i);
            }
            _ => v.insert(i, b),
        }
    }
    v
}
