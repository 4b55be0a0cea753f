//! vqforge: vector quantisation with k-means codebooks.

pub mod codebook;
pub mod encode;
pub mod error;
pub mod kmeans;
pub mod rng;
pub mod vectors;

pub use error::{Error, ErrorKind, Position, Result};
