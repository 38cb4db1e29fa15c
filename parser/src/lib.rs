//! The arcwright parsing core: treebank I/O (CoNLL-U), features, training, tagging, exact
//! decoders, tree marginals and evaluation.
//!
//! This crate does no networking and knows nothing about gRPC, HTTP, the model store or async
//! runtimes; the service and the command line are built on top of it.

pub mod calibration;
pub mod conllu;
pub mod decode;
pub mod demo;
pub mod eval;
pub mod features;
pub mod hashing;
pub mod marginals;
pub mod model;
pub mod neural;
pub mod perceptron;
pub mod pipeline;
pub mod scorer;
pub mod tagger;
pub mod text;
pub mod tokenize;
pub mod train;
