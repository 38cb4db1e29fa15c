//! The arcwright parsing core: treebank I/O (CoNLL-U), exact decoders and tree marginals.
//!
//! This crate does no networking and knows nothing about gRPC, HTTP, the model store or async
//! runtimes; the service and the command line are built on top of it.

pub mod conllu;
pub mod decode;
pub mod marginals;
