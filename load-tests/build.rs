//! Generates the gRPC client from `proto/` (protox: no system protoc needed).

use std::path::PathBuf;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let root = PathBuf::from(std::env::var("CARGO_MANIFEST_DIR")?)
        .join("..")
        .join("proto");
    let file = root.join("arcwright/v1/parser.proto");
    println!("cargo:rerun-if-changed={}", file.display());
    let descriptors = protox::compile([&file], [&root])?;
    tonic_prost_build::configure()
        .build_server(false)
        .build_client(true)
        .compile_fds(descriptors)?;
    Ok(())
}
