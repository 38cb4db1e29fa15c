//! The arcwright gRPC API (`arcwright.v1`) as Rust types, servers and clients, generated at build
//! time from `proto/arcwright/v1/parser.proto` — the single source for every client. The service
//! and the load generator both use this crate.

#![allow(missing_debug_implementations)] // generated clients and servers

tonic::include_proto!("arcwright.v1");

/// The encoded file descriptor set, for gRPC server reflection.
pub const DESCRIPTOR: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/arcwright_descriptor.bin"));
