//! vqforge: vector quantisation with k-means codebooks.

pub mod atomic;
pub mod codebook;
pub mod encode;
pub mod error;
pub mod export;
pub mod format;
pub mod kmeans;
pub mod load;
pub mod metrics;
pub mod pack;
pub mod records;
pub mod rng;
pub mod vectors;

pub use error::{Error, ErrorKind, Position, Result};
