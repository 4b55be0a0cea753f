//! vqforge: vector quantisation with k-means codebooks.

pub mod atomic;
pub mod codebook;
pub mod encode;
pub mod error;
pub mod format;
pub mod kmeans;
pub mod metrics;
pub mod pack;
pub mod rng;
pub mod vectors;

pub use error::{Error, ErrorKind, Position, Result};
