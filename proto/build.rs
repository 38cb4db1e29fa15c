//! Compiles `arcwright/v1/*.proto` with protox (a pure-Rust protobuf compiler, so no system
//! `protoc` is needed) and generates the tonic server and client code. The encoded descriptor set
//! is kept for gRPC server reflection. The one place Rust code is generated from the API.

use std::path::PathBuf;

use prost::Message;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let root = PathBuf::from(std::env::var("CARGO_MANIFEST_DIR")?);
    let file = root.join("arcwright/v1/parser.proto");
    println!("cargo:rerun-if-changed={}", file.display());
    let descriptors = protox::compile([&file], [&root])?;
    let out = PathBuf::from(std::env::var("OUT_DIR")?);
    std::fs::write(
        out.join("arcwright_descriptor.bin"),
        descriptors.encode_to_vec(),
    )?;
    tonic_prost_build::configure()
        .build_server(true)
        .build_client(true)
        .compile_fds(descriptors)?;
    Ok(())
}
