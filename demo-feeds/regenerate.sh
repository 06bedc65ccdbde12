#!/bin/sh
# Regenerates every demo feed from its scenario with skerry's simulator:
# demo-feeds/NAME/{feed.jsonl,truth.jsonl,config.toml} from
# demo-feeds/NAME/scenario.toml. The same seed gives the same bytes, and
# tests/sim_determinism.rs checks that the committed files are current.
set -eu
cd "$(dirname "$0")/.."
SEED=20260514
cargo build --release --quiet
for name in quiet-morning busy-afternoon close-pass; do
    ./target/release/skerry simulate "demo-feeds/$name/scenario.toml" --out "demo-feeds/$name" --seed "$SEED"
done
