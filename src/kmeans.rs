//! k-means training: seeding, Lloyd iterations, restarts, empty-cluster
//! repair and convergence. Pure: takes a [`VectorSet`], returns codewords and
//! a report. Never opens files or prints.

use serde::{Deserialize, Serialize};

/// How the initial codewords are chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Seeding {
    /// Greedy weighted k-means++ (several candidates per step, keep the best).
    KMeansPlusPlus,
    /// LBG splitting: start from the mean, double by perturbing, refine.
    Split,
    /// k distinct input vectors picked uniformly at random.
    Random,
}

/// Which rule ended the Lloyd iterations.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum StopReason {
    /// No vector changed its codeword.
    Converged,
    /// The relative improvement in distortion fell below the tolerance.
    Tolerance,
    /// The iteration cap was reached.
    MaxIterations,
}
