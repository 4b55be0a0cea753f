//! vqforge: vector quantisation with k-means codebooks.
//!
//! A codebook is a small set of prototype vectors (codewords). vqforge learns
//! one from many input vectors with k-means, replaces every input vector by
//! the index of its nearest codeword, rebuilds approximations from those
//! indices and measures what was lost.
//!
//! ```text
//!  image ─► load ─► RgbaImage ─► palette (unique colours, working space) ─► kmeans::train_constrained ─► Codebook
//!                                   └─► Palette::map_image (k-d tree, dithering) ─► indices ─► export (PNG, C, raw)
//!
//!  CSV ─► load ─► RecordTable ─► VectorSet (scaled, framed) ─► kmeans::train ─► Codebook
//!                                      │                                         │
//!                                      ▼                                         ▼
//!                              encode::Encoder (k-d tree / scan) ─► indices ─► format (stream file)
//!                                                                      │
//!             metrics ◄── export (CSV rows) ◄── records::decode_to_writer ◄──┘
//!
//!  records or images ─► curve (a codebook per size, grown by splitting) ─► points, knee, target ─► export (CSV table, SVG plot)
//! ```
//!
//! Algorithm modules ([`kmeans`], [`encode`], [`metrics`], [`curve`]) work on in-memory
//! data and never open files; only [`load`], [`format`](mod@format), [`atomic`] and
//! [`export`] touch I/O, through readers and writers the caller supplies
//! (or, for the file formats, paths).
//!
//! # Example
//!
//! ```
//! use vqforge::encode::Encoder;
//! use vqforge::kmeans::{train, TrainConfig};
//! use vqforge::vectors::VectorSet;
//!
//! // Eight 2-D readings in two obvious groups.
//! let v = VectorSet::new(2, vec![
//!     0.0, 0.1,  0.1, 0.0,  0.0, 0.0,  0.1, 0.1,
//!     5.0, 5.1,  5.1, 5.0,  5.0, 5.0,  5.1, 5.1,
//! ]).unwrap();
//! let trained = train(&v, &TrainConfig::new(2).seed(7).check().unwrap()).unwrap();
//! let encoder = Encoder::new(&trained.codewords, 2).unwrap();
//! let idx = encoder.encode(&v).unwrap();
//! assert_eq!(idx[0], idx[3]);
//! assert_ne!(idx[0], idx[4]);
//! // Each codeword is its group's mean: every component is 0.05 off.
//! assert!((trained.report.mse_per_component - 0.0025).abs() < 1e-6);
//! ```

pub mod atomic;
pub mod codebook;
pub mod colour;
pub mod curve;
pub mod encode;
pub mod error;
pub mod export;
pub mod format;
pub mod kmeans;
pub mod limits;
pub mod load;
pub mod metrics;
pub mod pack;
pub mod palette;
pub mod records;
pub mod rng;
pub mod vectors;

pub use error::{Error, ErrorKind, Position, Result};
