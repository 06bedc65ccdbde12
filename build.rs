//! Compiles the protobuf definitions under proto/ without a system protoc:
//! protox parses them into a descriptor set, tonic-prost-build generates
//! the Rust code, and the encoded descriptor set is kept for gRPC server
//! reflection.

use std::path::PathBuf;

const PROTOS: [&str; 2] = ["proto/skerry/v1/records.proto", "proto/skerry/v1/service.proto"];

fn main() -> Result<(), Box<dyn std::error::Error>> {
    // compile_fds prints no rerun lines of its own.
    println!("cargo:rerun-if-changed=proto");
    for p in PROTOS {
        println!("cargo:rerun-if-changed={p}");
    }
    let fds = protox::compile(PROTOS, ["proto"])?;
    let out = PathBuf::from(std::env::var("OUT_DIR")?);
    std::fs::write(out.join("skerry_descriptor.bin"), protox::prost::Message::encode_to_vec(&fds))?;
    tonic_prost_build::configure().build_client(true).build_server(true).compile_fds(fds)?;
    Ok(())
}
