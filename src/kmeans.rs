//! k-means training: seeding, Lloyd iterations, restarts, empty-cluster
//! repair and convergence. Pure: takes a [`VectorSet`], returns codewords and
//! a report. Never opens files or prints.
//!
//! Determinism: every restart's seed derives from one master seed; work is
//! split into fixed chunks of [`CHUNK_ROWS`] vectors whose partial sums (in
//! `f64`) are reduced in chunk order, so results are bit-identical for any
//! number of threads.

use std::borrow::Cow;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::encode::lists::{reach, rounding_margin, NeighbourLists, BOUND_FLOOR};
use crate::encode::{
    distance_sq, gather_rows, Encoder, Nearest, NearestTwo, SearchMethod, CHUNK_ROWS,
};
use crate::error::{Error, ErrorKind, Result};
// Squared distance in f64 from explicit differences: the reported figure.
use crate::metrics::squared_error as exact_sq;
use crate::rng::{derive_seed, SeededRng};
use crate::vectors::VectorSet;

/// How the initial codewords are chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Seeding {
    /// Greedy weighted k-means++: at each step draw 2 + ⌊ln k⌋ candidates
    /// with probability ∝ weight × squared distance, keep the one that lowers
    /// the total distortion most.
    KMeansPlusPlus,
    /// LBG splitting: start from the weighted mean, split the codewords of the
    /// largest distortion by a small perturbation, refine with Lloyd, repeat.
    Split,
    /// k distinct input vectors drawn at random (probability ∝ weight).
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

impl StopReason {
    /// Lowercase name used in reports.
    pub fn as_str(&self) -> &'static str {
        match self {
            StopReason::Converged => "converged",
            StopReason::Tolerance => "tolerance",
            StopReason::MaxIterations => "max-iterations",
        }
    }
}

impl Seeding {
    /// Lowercase name used in reports.
    pub fn as_str(&self) -> &'static str {
        match self {
            Seeding::KMeansPlusPlus => "kmeans++",
            Seeding::Split => "split",
            Seeding::Random => "random",
        }
    }
}

/// Training parameters, with documented defaults. Turn into a
/// [`CheckedTrainConfig`] with [`TrainConfig::check`] before training.
#[derive(Debug, Clone, PartialEq)]
pub struct TrainConfig {
    /// Codewords wanted, k ≥ 1. No default.
    pub size: usize,
    /// Default: greedy k-means++.
    pub seeding: Seeding,
    /// Independent runs, the lowest distortion kept. Default 3.
    pub restarts: u32,
    /// Lloyd iteration cap per run. Default 300.
    pub max_iterations: u32,
    /// Stop when (D_prev − D) / D_prev falls below this; 0 runs until no
    /// assignment changes or the cap. Scale-free. Default 1e-6.
    pub tolerance: f64,
    /// Master seed; restart r uses a seed derived from it. Default 1.
    pub seed: u64,
    /// Whether restarts may run on grid cell means first. Default auto.
    pub coarse_start: CoarseStart,
    /// Whether restarts may run on a sample of a large input. Default auto.
    pub sampling: Sampling,
    /// How far each run is taken. Default thorough.
    pub effort: Effort,
}

/// How far training takes each run on a large input.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Effort {
    /// Every restart ends at a local optimum of all distinct vectors (after
    /// a coarse start or a sample only when the input is large), finished
    /// with single-vector moves when they are affordable.
    Thorough,
    /// For interactive use: when there are more distinct vectors than
    /// [`quick_stand_in_size`] allows, the restarts (seeding and Lloyd, no
    /// single-vector moves) run on grid cell means (at most
    /// [`COARSE_MAX_DIMENSION`] components) or on a seeded sample (more
    /// components) of about that many vectors, whatever the input's size
    /// (unless [`CoarseStart::Never`] / [`Sampling::Never`]); the best is
    /// then refined on all distinct vectors by at most
    /// [`QUICK_REFINE_PASSES`] Lloyd passes under the constraint, without
    /// single-vector moves. Small inputs are trained as with `Thorough`.
    Quick,
}

impl Effort {
    /// The name used on the command line and in reports.
    pub fn as_str(&self) -> &'static str {
        match self {
            Effort::Thorough => "thorough",
            Effort::Quick => "quick",
        }
    }
}

/// Stand-in vectors per codeword under [`Effort::Quick`].
pub const QUICK_PER_CODEWORD: usize = 8;
/// The fewest stand-in vectors under [`Effort::Quick`], for small k.
pub const QUICK_MIN_STAND_IN: usize = 1024;
/// Lloyd passes over all distinct vectors after a quick start.
pub const QUICK_REFINE_PASSES: u32 = 4;

/// How many vectors the restarts run on under [`Effort::Quick`] for `k`
/// codewords: [`QUICK_PER_CODEWORD`] per codeword, at least
/// [`QUICK_MIN_STAND_IN`], at most [`COARSE_CELLS`].
pub fn quick_stand_in_size(k: usize) -> usize {
    QUICK_PER_CODEWORD
        .saturating_mul(k)
        .clamp(QUICK_MIN_STAND_IN, COARSE_CELLS)
}

/// Whether training may start on a coarse stand-in for the data.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CoarseStart {
    /// When the single-vector moves are beyond their budget on the distinct
    /// vectors (n·k·d above [`MOVE_REFINE_BUDGET`]), and these have at most
    /// [`COARSE_MAX_DIMENSION`] components, seeding, Lloyd and the
    /// single-vector moves of every restart run on at most [`COARSE_CELLS`]
    /// grid cell means ([`VectorSet::coarsened`]); the restart whose
    /// codebook has the lowest distortion on all distinct vectors is then
    /// refined on all of them with Lloyd (and the constraint). The result
    /// is a local optimum of the full data, reached for a fraction of the
    /// cost on photos with hundreds of thousands of colours.
    Auto,
    /// Every restart runs on all distinct vectors.
    Never,
}

/// Whether training may run its restarts on a sample of the input.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Sampling {
    /// When the input has more than [`SAMPLE_ABOVE_PER_CODEWORD`] × k
    /// distinct vectors (and no coarse start applies), seeding, Lloyd and
    /// the single-vector moves of every restart run on a seeded sample of
    /// [`SAMPLE_PER_CODEWORD`] × k draws (with replacement, ∝ weight); the
    /// restart whose codebook has the lowest distortion on all distinct
    /// vectors is then refined on all of them with full Lloyd passes under
    /// the usual stop rules. Reported in [`TrainReport::sample_draws`] and
    /// a notice.
    Auto,
    /// Every restart runs on all distinct vectors.
    Never,
}

/// Draws per codeword of a training sample ([`Sampling::Auto`]); the
/// general-purpose engines cap their training sets at a multiple of k too.
pub const SAMPLE_PER_CODEWORD: usize = 256;
/// Distinct vectors per codeword above which [`Sampling::Auto`] samples:
/// the sample is then at most a quarter of the input.
pub const SAMPLE_ABOVE_PER_CODEWORD: usize = 4 * SAMPLE_PER_CODEWORD;
/// Mixed into the master seed for the training sample's draws.
const SAMPLE_STREAM: u64 = 0x7361_6d70_6c65_2121;

/// The most components [`CoarseStart::Auto`] starts coarse with (colours
/// with or without alpha); cells hold few vectors in more.
pub const COARSE_MAX_DIMENSION: usize = 4;
/// The most cell means a coarse start uses.
pub const COARSE_CELLS: usize = 32_768;

/// Default master seed, written into every codebook it produces.
pub const DEFAULT_SEED: u64 = 1;

impl TrainConfig {
    /// Defaults for `size` codewords.
    pub fn new(size: usize) -> Self {
        TrainConfig {
            size,
            seeding: Seeding::KMeansPlusPlus,
            restarts: 3,
            max_iterations: 300,
            tolerance: 1e-6,
            seed: DEFAULT_SEED,
            coarse_start: CoarseStart::Auto,
            sampling: Sampling::Auto,
            effort: Effort::Thorough,
        }
    }

    /// Sets how far each run is taken.
    pub fn effort(mut self, e: Effort) -> Self {
        self.effort = e;
        self
    }

    /// Sets the seeding method.
    pub fn seeding(mut self, s: Seeding) -> Self {
        self.seeding = s;
        self
    }

    /// Sets the number of restarts.
    pub fn restarts(mut self, r: u32) -> Self {
        self.restarts = r;
        self
    }

    /// Sets the iteration cap.
    pub fn max_iterations(mut self, m: u32) -> Self {
        self.max_iterations = m;
        self
    }

    /// Sets the relative tolerance.
    pub fn tolerance(mut self, t: f64) -> Self {
        self.tolerance = t;
        self
    }

    /// Sets the master seed.
    pub fn seed(mut self, s: u64) -> Self {
        self.seed = s;
        self
    }

    /// Sets whether training may start coarse.
    pub fn coarse_start(mut self, c: CoarseStart) -> Self {
        self.coarse_start = c;
        self
    }

    /// Sets whether restarts may run on a sample of a large input.
    pub fn sampling(mut self, s: Sampling) -> Self {
        self.sampling = s;
        self
    }

    /// Validates the parameters.
    pub fn check(self) -> Result<CheckedTrainConfig> {
        let stage = "checking training parameters";
        if self.size == 0 {
            return Err(Error::new(stage, ErrorKind::ZeroSize));
        }
        if self.restarts == 0 {
            return Err(Error::new(
                stage,
                ErrorKind::InvalidParameter("restarts must be at least 1".into()),
            ));
        }
        if self.max_iterations == 0 {
            return Err(Error::new(
                stage,
                ErrorKind::InvalidParameter("the iteration cap must be at least 1".into()),
            ));
        }
        if !self.tolerance.is_finite() || self.tolerance < 0.0 {
            return Err(Error::new(
                stage,
                ErrorKind::InvalidParameter(format!(
                    "tolerance {} must be a finite number ≥ 0",
                    self.tolerance
                )),
            ));
        }
        Ok(CheckedTrainConfig(self))
    }
}

/// Parameters that passed [`TrainConfig::check`].
#[derive(Debug, Clone, PartialEq)]
pub struct CheckedTrainConfig(TrainConfig);

impl CheckedTrainConfig {
    /// The parameters.
    pub fn get(&self) -> &TrainConfig {
        &self.0
    }

    /// The Lloyd options of every run: the iteration cap and tolerance.
    pub fn lloyd_options(&self) -> LloydOptions {
        LloydOptions {
            max_iterations: self.0.max_iterations,
            tolerance: self.0.tolerance,
        }
    }
}

/// What happened during training.
#[derive(Debug, Clone, PartialEq)]
pub struct TrainReport {
    /// Codewords asked for.
    pub requested_size: usize,
    /// Codewords returned (fewer when the input has fewer distinct vectors).
    pub size: usize,
    /// Lloyd iterations of the kept run.
    pub iterations: u32,
    /// The rule that stopped the kept run.
    pub stopped_by: StopReason,
    /// Total weighted squared error of the result (sum over vectors of
    /// weight × ‖x − c‖², f64, from explicit differences).
    pub distortion: f64,
    /// `distortion` / (total weight × dimension): mean squared error per component.
    pub mse_per_component: f64,
    /// Total distortion of every restart, in order (after a coarse start or
    /// on a sample: of its codebook on all distinct vectors, before the
    /// final refinement of the kept one).
    pub restart_distortions: Vec<f64>,
    /// Index of the kept restart.
    pub best_restart: u32,
    /// The master seed.
    pub seed: u64,
    /// Seeding method.
    pub seeding: Seeding,
    /// Sum of weights of the input vectors.
    pub total_weight: f64,
    /// Distinct input vectors.
    pub distinct_vectors: usize,
    /// Cell means the restarts ran on, when training started coarse
    /// ([`CoarseStart`]).
    pub coarse_vectors: Option<usize>,
    /// Draws of the sample the restarts ran on, when training sampled a
    /// large input ([`Sampling`]).
    pub sample_draws: Option<usize>,
    /// How far the runs were taken.
    pub effort: Effort,
    /// Things the user should know (e.g. fewer distinct vectors than k).
    pub notices: Vec<String>,
}

/// A trained codebook's codewords and the report.
#[derive(Debug, Clone, PartialEq)]
pub struct Trained {
    /// `size × dimension` values, codeword after codeword.
    pub codewords: Vec<f32>,
    /// Components per codeword.
    pub dimension: usize,
    /// What happened.
    pub report: TrainReport,
}

/// Progress events, for a progress bar.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum TrainEvent {
    /// Restart `restart` (0-based) of `of` begins.
    RestartStarted { restart: u32, of: u32 },
    /// One Lloyd iteration finished with this total distortion.
    Iteration {
        restart: u32,
        iteration: u32,
        distortion: f64,
    },
}

/// Options of a single Lloyd refinement.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LloydOptions {
    /// Iteration cap (≥ 1).
    pub max_iterations: u32,
    /// Relative improvement below which to stop (0 = until converged).
    pub tolerance: f64,
}

/// Result of a Lloyd refinement: codewords, the nearest-codeword label of
/// every vector, and the distortion, all three consistent with each other.
#[derive(Debug, Clone, PartialEq)]
pub struct LloydResult {
    /// Final codewords (flat).
    pub codewords: Vec<f32>,
    /// Nearest codeword of each vector (lowest index on ties).
    pub labels: Vec<u32>,
    /// Σ weight × ‖x − c_label‖², f64 from explicit differences.
    pub distortion: f64,
    /// Distortion at each assignment step, first to last (never rises).
    pub history: Vec<f64>,
    /// Assignment steps run.
    pub iterations: u32,
    /// The rule that stopped it.
    pub stopped_by: StopReason,
}

/// Moves one codeword onto the nearest allowed point, in place.
pub type SnapFn<'a> = &'a (dyn Fn(&mut [f32]) + Sync);

/// Rules the codewords must obey during training (palettes for displays):
/// fixed codewords that stay where they are, and a projection that moves
/// every other codeword onto an allowed point after each update.
#[derive(Clone, Copy, Default)]
pub struct Constraint<'a> {
    /// Codewords that must be in the result unchanged (flat); they come
    /// first, in this order, and are never moved or repaired.
    pub fixed: &'a [f32],
    /// Moves one free codeword (a slice of `dimension` values) onto the
    /// nearest allowed point, in place. Must be deterministic.
    pub snap: Option<SnapFn<'a>>,
}

impl std::fmt::Debug for Constraint<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Constraint")
            .field("fixed", &self.fixed)
            .field("snap", &self.snap.is_some())
            .finish()
    }
}

impl Constraint<'_> {
    fn fixed_count(&self, d: usize) -> usize {
        self.fixed.len() / d
    }

    fn snap_one(&self, v: &mut [f32]) {
        if let Some(f) = self.snap {
            f(v);
        }
    }

    /// The same rules without the projection (for the unconstrained stages).
    fn without_snap(&self) -> Self {
        Constraint {
            fixed: self.fixed,
            snap: None,
        }
    }
}

/// Trains a codebook of `config.size` codewords on `vectors`.
///
/// ```
/// use vqforge::kmeans::{train, TrainConfig};
/// use vqforge::vectors::VectorSet;
///
/// // Two obvious groups on a line.
/// let v = VectorSet::new(1, vec![0.0, 0.2, 0.1, 10.0, 10.2, 10.1]).unwrap();
/// let t = train(&v, &TrainConfig::new(2).check().unwrap()).unwrap();
/// let mut c = t.codewords.clone();
/// c.sort_by(f32::total_cmp);
/// assert!((c[0] - 0.1).abs() < 1e-6 && (c[1] - 10.1).abs() < 1e-5);
///
/// // k = 0 is refused before any work.
/// assert!(TrainConfig::new(0).check().is_err());
/// ```
pub fn train(vectors: &VectorSet, config: &CheckedTrainConfig) -> Result<Trained> {
    train_observed(vectors, config, &|_| {})
}

/// [`train`] with a progress callback.
pub fn train_observed(
    vectors: &VectorSet,
    config: &CheckedTrainConfig,
    observe: &(dyn Fn(TrainEvent) + Sync),
) -> Result<Trained> {
    train_constrained(vectors, config, Constraint::default(), observe)
}

/// [`train_observed`] under a [`Constraint`]: the fixed codewords come first
/// and stay; the others are seeded around them, trained freely (Lloyd, then
/// single-vector moves), then refined with the projection applied after
/// every update and the vectors reassigned, so the result is a local optimum
/// among allowed codebooks rather than a free one rounded afterwards.
pub fn train_constrained(
    vectors: &VectorSet,
    config: &CheckedTrainConfig,
    constraint: Constraint<'_>,
    observe: &(dyn Fn(TrainEvent) + Sync),
) -> Result<Trained> {
    let cfg = config.get();
    if vectors.is_empty() {
        return Err(Error::new("training", ErrorKind::EmptyInput));
    }
    let dim = vectors.dimension();
    if constraint.fixed.len() % dim != 0 {
        return Err(Error::new(
            "training",
            ErrorKind::DimensionMismatch {
                expected: dim,
                found: constraint.fixed.len(),
            },
        ));
    }
    let fixed = constraint.fixed_count(dim);
    if fixed > cfg.size {
        return Err(Error::new(
            "training",
            ErrorKind::InvalidParameter(format!(
                "{fixed} fixed codewords do not fit in a codebook of {}",
                cfg.size
            )),
        ));
    }
    let unique = positive_weight(vectors.distinct())?;
    let distinct = unique.len();
    let total_weight = unique.total_weight();
    let mut notices = Vec::new();

    // The distinct allowed points the data can offer beyond the fixed ones.
    let mut offered: Vec<Vec<f32>> = Vec::new();
    if distinct <= cfg.size {
        for r in unique.rows() {
            let mut v = r.to_vec();
            constraint.snap_one(&mut v);
            let bits: Vec<u32> = v.iter().map(|x| x.to_bits()).collect();
            let known = constraint
                .fixed
                .chunks_exact(dim)
                .chain(offered.iter().map(|o| o.as_slice()))
                .any(|c| c.iter().map(|x| x.to_bits()).eq(bits.iter().copied()));
            if !known {
                offered.push(v);
            }
        }
    }
    if distinct <= cfg.size && fixed + offered.len() <= cfg.size {
        let size = fixed + offered.len();
        if size < cfg.size {
            notices.push(format!(
                "the input has only {distinct} distinct vectors; the codebook has {size} codewords instead of {}",
                cfg.size
            ));
        }
        let mut codewords = constraint.fixed.to_vec();
        for o in &offered {
            codewords.extend_from_slice(o);
        }
        let mut labels = vec![u32::MAX; unique.len()];
        let distortion = assign(&unique, &codewords, &mut labels)?.distortion;
        return Ok(Trained {
            codewords,
            dimension: dim,
            report: TrainReport {
                requested_size: cfg.size,
                size,
                iterations: 0,
                stopped_by: StopReason::Converged,
                distortion,
                mse_per_component: distortion / (total_weight * dim as f64),
                restart_distortions: vec![0.0],
                best_restart: 0,
                seed: cfg.seed,
                seeding: cfg.seeding,
                total_weight,
                distinct_vectors: distinct,
                coarse_vectors: None,
                sample_draws: None,
                effort: cfg.effort,
                notices,
            },
        });
    }

    let opts = config.lloyd_options();
    let quick = cfg.effort == Effort::Quick;
    // Many distinct low-dimensional vectors (photos): restarts run on grid
    // cell means, and only the best is refined on every distinct vector.
    let cells = if quick {
        quick_stand_in_size(cfg.size)
    } else {
        COARSE_CELLS
    };
    let coarse = (cfg.coarse_start == CoarseStart::Auto
        && dim <= COARSE_MAX_DIMENSION
        && unique.len() > cells
        && (quick || !moves_affordable(&unique, cfg.size)))
    .then(|| unique.coarsened(cells));
    // Many distinct vectors otherwise (long logs): restarts run on a seeded
    // sample, and only the best is refined on every distinct vector.
    let (draws, sample_above) = if quick {
        let n = quick_stand_in_size(cfg.size);
        (n, n)
    } else {
        (
            SAMPLE_PER_CODEWORD.saturating_mul(cfg.size),
            SAMPLE_ABOVE_PER_CODEWORD.saturating_mul(cfg.size),
        )
    };
    let sample =
        (coarse.is_none() && cfg.sampling == Sampling::Auto && unique.len() > sample_above)
            .then(|| {
                unique.sampled(
                    draws,
                    &mut SeededRng::new(derive_seed(cfg.seed, SAMPLE_STREAM)),
                )
            })
            .filter(|s| s.len() > cfg.size);
    if let Some(s) = &sample {
        let refined = if quick {
            format!("at most {QUICK_REFINE_PASSES} Lloyd passes")
        } else {
            "full passes".to_string()
        };
        notices.push(format!(
            "trained on a sample: the restarts ran on {draws} vectors drawn at random from the {distinct} distinct ones ({} distinct in the sample); the best was then refined with {refined} over all of them",
            s.len()
        ));
    }
    let stand_in = coarse.as_ref().or(sample.as_ref());
    let stage = stand_in.unwrap_or(&unique);
    let free = constraint.without_snap();
    // Restarts are independent (each has its own derived seed), so they run
    // side by side; the single-vector moves inside each are sequential.
    let runs: Vec<(LloydResult, f64)> = (0..cfg.restarts)
        .into_par_iter()
        .with_max_len(1)
        .map(|r| -> Result<(LloydResult, f64)> {
            observe(TrainEvent::RestartStarted {
                restart: r,
                of: cfg.restarts,
            });
            let mut rng = SeededRng::new(derive_seed(cfg.seed, r as u64));
            let on_iter = |iteration: u32, distortion: f64| {
                observe(TrainEvent::Iteration {
                    restart: r,
                    iteration,
                    distortion,
                })
            };
            let result = match cfg.seeding {
                Seeding::Split => {
                    split_and_refine(stage, cfg.size, &opts, &mut rng, free, &on_iter)?
                }
                Seeding::KMeansPlusPlus | Seeding::Random => {
                    let init = if cfg.seeding == Seeding::Random {
                        let mut init = constraint.fixed.to_vec();
                        init.extend(seed_random(stage, cfg.size - fixed, &mut rng));
                        init
                    } else {
                        seed_kmeans_plus_plus_around(stage, cfg.size, &mut rng, constraint.fixed)
                    };
                    lloyd_core(stage, &init, &opts, free, &on_iter)?
                }
            };
            if stand_in.is_some() {
                // A quick start leaves the stand-in's optimum as Lloyd
                // found it: moves there cost about a third of the start and
                // gain little after the passes over all vectors.
                let polished = if quick {
                    result
                } else {
                    polish(stage, result, &opts, free, &on_iter)?
                };
                let mut labels = vec![u32::MAX; unique.len()];
                let on_all = assign(&unique, &polished.codewords, &mut labels)?.distortion;
                Ok((polished, on_all))
            } else {
                let polished = polish(&unique, result, &opts, constraint, &on_iter)?;
                let d = polished.distortion;
                Ok((polished, d))
            }
        })
        .collect::<Result<_>>()?;
    let restart_distortions: Vec<f64> = runs.iter().map(|(_, d)| *d).collect();
    let mut best_restart = 0;
    for (r, &d) in restart_distortions.iter().enumerate() {
        if d < restart_distortions[best_restart] {
            best_restart = r;
        }
    }
    let (result, _) = runs
        .into_iter()
        .nth(best_restart)
        .expect("at least one restart ran");
    let best_restart = best_restart as u32;
    let result = if stand_in.is_some() {
        let on_iter = |iteration: u32, distortion: f64| {
            observe(TrainEvent::Iteration {
                restart: best_restart,
                iteration,
                distortion,
            })
        };
        if quick {
            let capped = LloydOptions {
                max_iterations: opts.max_iterations.min(QUICK_REFINE_PASSES),
                ..opts
            };
            let mut refined =
                lloyd_core(&unique, &result.codewords, &capped, constraint, &on_iter)?;
            refined.iterations += result.iterations;
            refined
        } else {
            let mut refined = lloyd_core(&unique, &result.codewords, &opts, free, &on_iter)?;
            refined.iterations += result.iterations;
            polish(&unique, refined, &opts, constraint, &on_iter)?
        }
    } else {
        result
    };
    // A codebook never holds one codeword twice. Under a projection the
    // allowed points near the data can run out (a grey display with fewer
    // levels than k); a repeated codeword is never nearest (ties go to the
    // lower index), so dropping it leaves the distortion as it is.
    let codewords = distinct_codewords(&result.codewords, dim);
    let size = codewords.len() / dim;
    if size < cfg.size {
        notices.push(format!(
            "only {size} distinct codewords could be placed under the constraint; the codebook has {size} codewords instead of {}",
            cfg.size
        ));
    }
    Ok(Trained {
        dimension: dim,
        report: TrainReport {
            requested_size: cfg.size,
            size,
            iterations: result.iterations,
            stopped_by: result.stopped_by,
            distortion: result.distortion,
            mse_per_component: result.distortion / (total_weight * dim as f64),
            restart_distortions,
            best_restart,
            seed: cfg.seed,
            seeding: cfg.seeding,
            total_weight,
            distinct_vectors: distinct,
            coarse_vectors: coarse.as_ref().map(VectorSet::len),
            sample_draws: sample.as_ref().map(|_| draws),
            effort: cfg.effort,
            notices,
        },
        codewords,
    })
}

/// Whether single-vector moves over `vectors` with `k` codewords fit in
/// [`MOVE_REFINE_BUDGET`] (n·k·d) and their neighbour table in
/// [`MOVE_MAX_CODEWORDS`].
pub(crate) fn moves_affordable(vectors: &VectorSet, k: usize) -> bool {
    k <= MOVE_MAX_CODEWORDS
        && vectors
            .len()
            .saturating_mul(k)
            .saturating_mul(vectors.dimension())
            <= MOVE_REFINE_BUDGET
}

/// The end of every run: single-vector moves when the work is affordable
/// (they end with a Lloyd pass under the constraint), otherwise Lloyd under
/// the constraint's projection, if it has one.
fn polish(
    vectors: &VectorSet,
    result: LloydResult,
    opts: &LloydOptions,
    constraint: Constraint<'_>,
    on_iter: &(dyn Fn(u32, f64) + Sync),
) -> Result<LloydResult> {
    if moves_affordable(vectors, result.codewords.len() / vectors.dimension()) {
        refine_by_moves_core(vectors, &result, opts, MOVE_PASSES, constraint)
    } else if constraint.snap.is_some() {
        let mut snapped = lloyd_core(vectors, &result.codewords, opts, constraint, on_iter)?;
        snapped.iterations += result.iterations;
        Ok(snapped)
    } else {
        Ok(result)
    }
}

/// The codewords without later repeats of an earlier one (bit-equal
/// components), in their order; fixed codewords come first, so they stay.
fn distinct_codewords(codewords: &[f32], dim: usize) -> Vec<f32> {
    let mut seen: std::collections::HashSet<Vec<u32>> = std::collections::HashSet::new();
    let mut out = Vec::with_capacity(codewords.len());
    for c in codewords.chunks_exact(dim) {
        if seen.insert(c.iter().map(|x| x.to_bits()).collect()) {
            out.extend_from_slice(c);
        }
    }
    out
}

/// Drops rows of weight 0 (they cannot pull a codeword) and refuses a set
/// whose weights are all 0.
fn positive_weight(v: Cow<'_, VectorSet>) -> Result<Cow<'_, VectorSet>> {
    let Some(w) = v.weights() else {
        return Ok(v);
    };
    if w.iter().all(|&x| x > 0.0) {
        return Ok(v);
    }
    let mut data = Vec::new();
    let mut weights = Vec::new();
    for (i, r) in v.rows().enumerate() {
        if w[i] > 0.0 {
            data.extend_from_slice(r);
            weights.push(w[i]);
        }
    }
    if weights.is_empty() {
        return Err(Error::new("training", ErrorKind::EmptyInput));
    }
    Ok(Cow::Owned(
        VectorSet::new(v.dimension(), data)?.with_weights(weights)?,
    ))
}

/// k distinct vectors drawn without replacement with probability ∝ weight
/// (Efraimidis–Spirakis keys u^(1/w), the k largest win; ties to the lower index).
pub fn seed_random(vectors: &VectorSet, k: usize, rng: &mut SeededRng) -> Vec<f32> {
    let mut keys: Vec<(f64, usize)> = (0..vectors.len())
        .map(|i| {
            let u = rng.unit_f64().max(f64::MIN_POSITIVE);
            (u.ln() / vectors.weight(i), i)
        })
        .collect();
    keys.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
    let mut chosen: Vec<usize> = keys.iter().take(k).map(|&(_, i)| i).collect();
    chosen.sort_unstable();
    chosen
        .iter()
        .flat_map(|&i| vectors.row(i).iter().copied())
        .collect()
}

/// Greedy weighted k-means++ seeding. Needs more distinct vectors than `k`.
pub fn seed_kmeans_plus_plus(vectors: &VectorSet, k: usize, rng: &mut SeededRng) -> Vec<f32> {
    seed_kmeans_plus_plus_around(vectors, k, rng, &[])
}

/// Greedy weighted k-means++ that starts from the given centres (flat,
/// possibly none) and adds the rest; the result begins with `fixed`.
///
/// Each round draws `2 + ⌊ln k⌋` candidates with probability ∝ weight ×
/// squared distance to the closest centre and keeps the one that lowers
/// the potential most (Arthur & Vassilvitskii 2007, greedy variant). A
/// candidate can only take vectors from centres nearer to it than twice
/// their farthest member (triangle inequality), so the other groups are
/// never measured; the choice equals measuring every vector, up to the
/// order of the sums.
pub fn seed_kmeans_plus_plus_around(
    vectors: &VectorSet,
    k: usize,
    rng: &mut SeededRng,
    fixed: &[f32],
) -> Vec<f32> {
    let d = vectors.dimension();
    let candidates = 2 + (k as f64).ln().floor() as usize;
    let mut centres: Vec<f32> = Vec::with_capacity(k * d);
    if fixed.is_empty() {
        let wprefix = vectors.cumulative_weights();
        centres.extend_from_slice(vectors.row(rng.draw(&wprefix)));
    } else {
        centres.extend_from_slice(fixed);
    }
    let mut groups = SeedGroups::new(vectors, &centres);
    while centres.len() < k * d {
        let prefix: Vec<f64> = groups
            .closest
            .iter()
            .enumerate()
            .scan(0.0, |s, (i, &c)| {
                *s += vectors.weight(i) * c;
                Some(*s)
            })
            .collect();
        if *prefix.last().unwrap_or(&0.0) <= 0.0 {
            break; // every vector already sits on a centre
        }
        let picks: Vec<usize> = (0..candidates).map(|_| rng.draw(&prefix)).collect();
        // How much each candidate would lower the potential.
        let gains: Vec<f64> = picks
            .par_iter()
            .map(|&p| groups.gain(vectors, &centres, vectors.row(p)))
            .collect();
        let mut best = 0;
        for (c, &gain) in gains.iter().enumerate() {
            if gain > gains[best] {
                best = c;
            }
        }
        let chosen = vectors.row(picks[best]);
        groups.add(vectors, &centres, chosen);
        centres.extend_from_slice(chosen);
    }
    centres
}

/// Which centre each vector is closest to during seeding, grouped by centre,
/// each group ordered from its farthest member to its nearest.
struct SeedGroups {
    /// Squared distance of each vector to its closest centre.
    closest: Vec<f64>,
    /// The vectors closest to each centre, farthest first (ties by index).
    members: Vec<Vec<u32>>,
}

/// Relative slack on the triangle-inequality test: far above the rounding
/// of f64 distances between f32 points, so no vector that could gain is
/// skipped.
const SEED_SLACK: f64 = 1e-9;

impl SeedGroups {
    fn new(vectors: &VectorSet, start: &[f32]) -> SeedGroups {
        let d = vectors.dimension();
        let nearest: Vec<(f64, u32)> = (0..vectors.len())
            .into_par_iter()
            .with_min_len(CHUNK_ROWS)
            .map(|i| {
                let mut best = (f64::INFINITY, 0u32);
                for (c, centre) in start.chunks_exact(d).enumerate() {
                    let e = exact_sq(vectors.row(i), centre);
                    if e < best.0 {
                        best = (e, c as u32);
                    }
                }
                best
            })
            .collect();
        let mut groups = SeedGroups {
            closest: nearest.iter().map(|&(e, _)| e).collect(),
            members: vec![Vec::new(); start.len() / d],
        };
        for (i, &(_, c)) in nearest.iter().enumerate() {
            groups.members[c as usize].push(i as u32);
        }
        for m in 0..groups.members.len() {
            groups.order(m);
        }
        groups
    }

    /// Puts group `m` in order, farthest member first.
    fn order(&mut self, m: usize) {
        let closest = &self.closest;
        self.members[m].sort_unstable_by(|&a, &b| {
            closest[b as usize]
                .total_cmp(&closest[a as usize])
                .then(a.cmp(&b))
        });
    }

    /// For each group, its members that a new centre at `at` could come
    /// closer to: a vector x of the group of centre c can only if
    /// |at − c| < 2|x − c|, so the scan of a group stops at its first
    /// member nearer to c than half that.
    fn within_reach<'a>(
        &'a self,
        centres: &'a [f32],
        at: &'a [f32],
    ) -> impl Iterator<Item = (usize, usize)> + 'a {
        centres
            .chunks_exact(at.len())
            .enumerate()
            .map(move |(c, centre)| {
                let quarter = exact_sq(at, centre) / 4.0;
                let members = &self.members[c];
                let count = members
                    .partition_point(|&i| self.closest[i as usize] * (1.0 + SEED_SLACK) > quarter);
                (c, count)
            })
            .filter(|&(_, count)| count > 0)
    }

    /// Weighted drop of the potential if a centre were added at `at`.
    fn gain(&self, vectors: &VectorSet, centres: &[f32], at: &[f32]) -> f64 {
        let mut gain = 0.0;
        for (c, count) in self.within_reach(centres, at) {
            for &i in &self.members[c][..count] {
                let i = i as usize;
                let e = exact_sq(vectors.row(i), at);
                if e < self.closest[i] {
                    gain += vectors.weight(i) * (self.closest[i] - e);
                }
            }
        }
        gain
    }

    /// Adds a centre at `at` (the next after `centres`): vectors closer to
    /// it than to their own centre join its group.
    fn add(&mut self, vectors: &VectorSet, centres: &[f32], at: &[f32]) {
        let reached: Vec<(usize, usize)> = self.within_reach(centres, at).collect();
        let mut joined: Vec<u32> = Vec::new();
        for (c, count) in reached {
            let closest = &mut self.closest;
            let mut kept = 0;
            let group = &mut self.members[c];
            for j in 0..count {
                let i = group[j];
                let e = exact_sq(vectors.row(i as usize), at);
                if e < closest[i as usize] {
                    closest[i as usize] = e;
                    joined.push(i);
                } else {
                    group[kept] = i;
                    kept += 1;
                }
            }
            // Those left keep their order, farthest first.
            group.drain(kept..count);
        }
        self.members.push(joined);
        self.order(self.members.len() - 1);
    }
}

/// Per-chunk results of one assignment pass.
struct Partial {
    sums: Vec<f64>,
    weights: Vec<f64>,
    distortion: f64,
    changed: u64,
}

/// Assigns every vector to its nearest codeword (writing `labels`) and
/// returns per-cluster weighted sums, weights, the distortion and how many
/// labels changed, reduced in chunk order.
fn assign(vectors: &VectorSet, codewords: &[f32], labels: &mut [u32]) -> Result<Partial> {
    let d = vectors.dimension();
    let k = codewords.len() / d;
    let encoder = Encoder::new(codewords, d)?;
    let flat = vectors.as_flat();
    let weights = vectors.weights();
    let partials: Vec<Partial> = labels
        .par_chunks_mut(CHUNK_ROWS)
        .zip(flat.par_chunks(CHUNK_ROWS * d))
        .enumerate()
        .map(|(c, (lab, rows))| {
            let mut p = Partial::empty(k, d);
            let mut found = vec![Nearest::NONE; lab.len()];
            encoder.nearest_batch(rows, &mut found);
            for (j, (l, r)) in lab.iter_mut().zip(rows.chunks_exact(d)).enumerate() {
                let w = weights.map_or(1.0, |w| w[c * CHUNK_ROWS + j]);
                let idx = found[j].index;
                if *l != idx {
                    p.changed += 1;
                    *l = idx;
                }
                p.add(r, w, idx as usize, codewords);
            }
            p
        })
        .collect();
    Ok(reduce(partials, k, d))
}

impl Partial {
    fn empty(k: usize, d: usize) -> Self {
        Partial {
            sums: vec![0.0; k * d],
            weights: vec![0.0; k],
            distortion: 0.0,
            changed: 0,
        }
    }

    /// Adds vector `r` of weight `w`, labelled `i`.
    #[inline]
    fn add(&mut self, r: &[f32], w: f64, i: usize, codewords: &[f32]) {
        let d = r.len();
        self.add_measured(r, w, i, exact_sq(r, &codewords[i * d..(i + 1) * d]));
    }

    /// [`Partial::add`] with the vector's exact squared distance to
    /// codeword `i` already measured (`e`).
    #[inline]
    fn add_measured(&mut self, r: &[f32], w: f64, i: usize, e: f64) {
        let d = r.len();
        self.distortion += w * e;
        self.weights[i] += w;
        for (s, &x) in self.sums[i * d..(i + 1) * d].iter_mut().zip(r) {
            *s += w * x as f64;
        }
    }
}

/// Sums per-chunk results in chunk order; the sums of different codewords
/// on different threads.
fn reduce(partials: Vec<Partial>, k: usize, d: usize) -> Partial {
    let mut total = Partial::empty(k, d);
    total
        .sums
        .par_chunks_mut(REDUCE_SPAN)
        .enumerate()
        .for_each(|(c, out)| {
            for p in &partials {
                let part = &p.sums[c * REDUCE_SPAN..c * REDUCE_SPAN + out.len()];
                for (a, b) in out.iter_mut().zip(part) {
                    *a += b;
                }
            }
        });
    for p in &partials {
        for (a, b) in total.weights.iter_mut().zip(&p.weights) {
            *a += b;
        }
        total.distortion += p.distortion;
        total.changed += p.changed;
    }
    total
}

/// Sums that [`reduce`] hands to one thread at a time (8 KiB of `f64`).
const REDUCE_SPAN: usize = 1024;

/// Moves each codeword to the weighted mean of its vectors, then repairs
/// empty clusters: each empty codeword (lowest index first) moves onto the
/// vector with the largest weighted squared error against the updated
/// codewords, taken only from clusters that keep at least one other member,
/// ties to the lowest vector index; a vector whose allowed point is already
/// a codeword is passed over for the next.
fn update(
    vectors: &VectorSet,
    codewords: &mut [f32],
    labels: &[u32],
    p: &Partial,
    constraint: Constraint<'_>,
) {
    let d = vectors.dimension();
    let k = codewords.len() / d;
    let fixed = constraint.fixed_count(d);
    let mean = |i: usize, c: &mut [f32]| {
        if p.weights[i] > 0.0 {
            for (j, x) in c.iter_mut().enumerate() {
                *x = (p.sums[i * d + j] / p.weights[i]) as f32;
            }
            constraint.snap_one(c);
        }
    };
    let free = &mut codewords[fixed * d..];
    if constraint.snap.is_some() {
        // Snapping onto a fine grid of display colours costs far more than
        // the mean; each codeword's depends only on its own sums.
        free.par_chunks_mut(d)
            .enumerate()
            .for_each(|(j, c)| mean(fixed + j, c));
    } else {
        free.chunks_exact_mut(d)
            .enumerate()
            .for_each(|(j, c)| mean(fixed + j, c));
    }
    let mut empty = Vec::new();
    for i in fixed..k {
        if p.weights[i] > 0.0 {
            // Two codewords snapped onto one point: the later one is repaired.
            let here = &codewords[i * d..(i + 1) * d];
            if (0..i).any(|j| &codewords[j * d..(j + 1) * d] == here) {
                empty.push(i);
            }
        } else {
            empty.push(i);
        }
    }
    if empty.is_empty() {
        return;
    }
    let mut members = vec![0usize; k];
    for &l in labels {
        members[l as usize] += 1;
    }
    let err: Vec<f64> = (0..vectors.len())
        .into_par_iter()
        .map(|i| {
            let l = labels[i] as usize;
            vectors.weight(i) * exact_sq(vectors.row(i), &codewords[l * d..(l + 1) * d])
        })
        .collect();
    // Candidates by falling error, ties to the lower index. A vector passed
    // over stays passed over: members only fall and taken points stay taken
    // during the repair. Regression: a codeword whose first candidate's
    // allowed point was taken used to stay a duplicate, so palettes for
    // coarse displays came out with repeated entries.
    let order: Vec<usize> = (0..vectors.len()).filter(|&i| err[i] > 0.0).collect();
    let mut candidates = InOrder::new(order, |&a: &usize, &b: &usize| {
        err[b].total_cmp(&err[a]).then(a.cmp(&b))
    });
    for e in empty {
        let placed = candidates.by_ref().find_map(|i| {
            if members[labels[i] as usize] <= 1 {
                return None;
            }
            let mut target = vectors.row(i).to_vec();
            constraint.snap_one(&mut target);
            let taken = (0..k).any(|j| j != e && codewords[j * d..(j + 1) * d] == target[..]);
            (!taken).then_some((i, target))
        });
        let Some((i, target)) = placed else { break };
        codewords[e * d..(e + 1) * d].copy_from_slice(&target);
        members[labels[i] as usize] -= 1;
    }
}

/// The items of a list in the order of a total order `cmp`, sorted only as
/// far as they are taken: each batch is picked out of the rest (linear
/// time) and sorted, and batches double. Taking a few items of a long list
/// costs about one pass over it instead of a whole sort; taking them all
/// costs about what sorting does. The sequence is that of a full sort,
/// since `cmp` leaves no two items equal.
struct InOrder<T, F> {
    items: Vec<T>,
    /// Items before `next` have been yielded; those before `sorted` are in
    /// order.
    next: usize,
    sorted: usize,
    batch: usize,
    cmp: F,
}

impl<T, F: FnMut(&T, &T) -> std::cmp::Ordering> InOrder<T, F> {
    fn new(items: Vec<T>, cmp: F) -> Self {
        InOrder {
            items,
            next: 0,
            sorted: 0,
            batch: 64,
            cmp,
        }
    }
}

impl<T: Copy, F: FnMut(&T, &T) -> std::cmp::Ordering> Iterator for InOrder<T, F> {
    type Item = T;

    fn next(&mut self) -> Option<T> {
        if self.next == self.sorted {
            let rest = &mut self.items[self.sorted..];
            if rest.is_empty() {
                return None;
            }
            let take = self.batch.min(rest.len());
            if take < rest.len() {
                rest.select_nth_unstable_by(take - 1, &mut self.cmp);
            }
            rest[..take].sort_unstable_by(&mut self.cmp);
            self.sorted += take;
            self.batch = self.batch.saturating_mul(2);
        }
        self.next += 1;
        Some(self.items[self.next - 1])
    }
}

/// Assignment passes that remember, for every vector, an upper bound on the
/// distance to its codeword and a lower bound on the distance to every
/// other one (Hamerly 2010). After the codewords move, the bounds move by
/// at most as much; a vector whose upper bound stays below both its lower
/// bound and half the distance from its codeword to the next codeword keeps
/// its label without a search. Late Lloyd iterations move few vectors, so
/// most of them are skipped.
///
/// The result is exactly that of [`assign`]: a vector is skipped only when
/// the bounds leave a relative margin far above the rounding of the `f32`
/// distances the search compares, so the search would return the same
/// index; sums and distortion are recomputed from all vectors every pass.
struct BoundedAssign {
    /// Per vector: ≥ the distance to its codeword.
    upper: Vec<f64>,
    /// Per vector: ≤ the distance to every other codeword.
    lower: Vec<f64>,
    /// The codewords of the previous pass (empty before the first).
    last: Vec<f32>,
    /// Neighbour lists of the previous pass's codewords, kept so that the
    /// next pass re-sorts nearly sorted rows.
    near: Option<Neighbours>,
}

/// The most codewords for which passes keep [`Neighbours`] (k² entries).
const NEIGHBOUR_LISTS_UP_TO: usize = 1024;

/// Takes a search's answer for vector `r`: its label, the exact distance to
/// that codeword as the upper bound, and as the lower bound the runner-up's
/// distance or `beyond` (a bound on the codewords not examined), whichever
/// is less. Returns whether the label changed and the exact squared
/// distance to the new codeword.
fn settle(
    r: &[f32],
    codewords: &[f32],
    two: NearestTwo,
    beyond: f64,
    label: &mut u32,
    upper: &mut f64,
    lower: &mut f64,
) -> (bool, f64) {
    let d = r.len();
    let i = two.nearest.index as usize;
    let e = exact_sq(r, &codewords[i * d..(i + 1) * d]);
    *upper = e.sqrt();
    *lower = (two.second_distance_sq as f64).sqrt().min(beyond);
    let changed = *label != two.nearest.index;
    *label = two.nearest.index;
    (changed, e)
}

/// The exact distance between codewords `a` and `j`.
fn gap(codewords: &[f32], d: usize, a: usize, j: usize) -> f64 {
    exact_sq(
        &codewords[a * d..(a + 1) * d],
        &codewords[j * d..(j + 1) * d],
    )
    .sqrt()
}

/// For every codeword, the others by increasing distance from it
/// ([`NeighbourLists`]): a vector at distance u from codeword a can only be
/// nearer to codewords within 2u of a (triangle inequality), usually a
/// handful. The searches and look-ups Lloyd passes make of them.
struct Neighbours {
    lists: NeighbourLists,
}

impl Neighbours {
    fn new(codewords: &[f32], d: usize) -> Self {
        Self::by(codewords.len() / d, |a, j| gap(codewords, d, a, j))
    }

    /// The table for `k` points whose pairwise distances `gap` gives.
    fn by(k: usize, gap: impl Fn(usize, usize) -> f64 + Sync) -> Self {
        Neighbours {
            lists: NeighbourLists::every(k, gap),
        }
    }

    /// How many codewords the table is for.
    fn size(&self) -> usize {
        self.lists.len()
    }

    /// The same lists for moved codewords (equal to [`Neighbours::new`]),
    /// re-sorted from their last order.
    fn refresh(&mut self, codewords: &[f32], d: usize) {
        self.lists.refresh(|a, j| gap(codewords, d, a, j));
    }

    fn row(&self, a: usize) -> &[(f64, u32)] {
        self.lists.row(a)
    }

    /// Whether [`Neighbours::nearest_two`] would measure more than `count`
    /// codewords for a vector at distance `u` from codeword `a`: codeword
    /// `a` and every other one within reach, so whether the `count`-th
    /// nearest other one is within reach (one look-up, no search).
    fn measures_more_than(&self, a: usize, u: f64, rel: f64, count: usize) -> bool {
        count == 0 || self.lists.more_within(a, reach(u, rel), count - 1)
    }

    /// Half the distance from codeword a to the nearest other one.
    fn half_gap(&self, a: usize) -> f64 {
        self.row(a).first().map_or(f64::INFINITY, |&(g, _)| 0.5 * g)
    }

    /// The nearest codeword to `x`, whose distance to codeword `a` is `u`
    /// (f64, exact), searched among the codewords within 2u of a, widened
    /// by the relative margin `rel`: the others are farther from x than a
    /// by more than `f32` rounding, so the answer equals a full search.
    /// Also returns a lower bound on the distance to the codewords not
    /// examined.
    fn nearest_two(
        &self,
        x: &[f32],
        a: usize,
        u: f64,
        codewords: &[f32],
        rel: f64,
    ) -> (NearestTwo, f64) {
        let d = x.len();
        let mut two = NearestTwo::of(a as u32, distance_sq(x, &codewords[a * d..(a + 1) * d]));
        let reach = reach(u, rel);
        let mut beyond = f64::INFINITY;
        for &(gap, j) in self.row(a) {
            if gap > reach {
                beyond = gap - u;
                break;
            }
            let j = j as usize;
            two.offer(j as u32, distance_sq(x, &codewords[j * d..(j + 1) * d]));
        }
        (two, beyond)
    }
}

/// How many codewords the batch kernel measures in the time one search of
/// a neighbour list measures one (a low estimate from benches/nearest.rs:
/// the kernel answers a whole-codebook query 3–6× faster than the plain
/// scan, and a neighbour search costs more per codeword than the scan).
/// Searches of longer lists go to the batch; the answers are the same.
const BATCH_GAIN: usize = 4;

impl BoundedAssign {
    fn new(n: usize) -> Self {
        BoundedAssign {
            upper: vec![f64::INFINITY; n],
            lower: vec![0.0; n],
            last: Vec::new(),
            near: None,
        }
    }

    fn pass(
        &mut self,
        vectors: &VectorSet,
        codewords: &[f32],
        labels: &mut [u32],
    ) -> Result<Partial> {
        let d = vectors.dimension();
        let k = codewords.len() / d;
        let rel = rounding_margin(d);
        let first = self.last.len() != codewords.len();
        let (moved, near, half_gap) = if first {
            (vec![0.0; k], None, Vec::new())
        } else {
            let moved: Vec<f64> = (0..k)
                .map(|j| {
                    exact_sq(
                        &self.last[j * d..(j + 1) * d],
                        &codewords[j * d..(j + 1) * d],
                    )
                    .sqrt()
                        * (1.0 + rel)
                })
                .collect();
            match &mut self.near {
                _ if k > NEIGHBOUR_LISTS_UP_TO => self.near = None,
                Some(n) if n.size() == k => n.refresh(codewords, d),
                _ => self.near = Some(Neighbours::new(codewords, d)),
            }
            let near = self.near.as_ref();
            let half_gap: Vec<f64> = match &near {
                Some(n) => (0..k).map(|a| n.half_gap(a)).collect(),
                None => (0..k)
                    .into_par_iter()
                    .map(|a| {
                        let ca = &codewords[a * d..(a + 1) * d];
                        let gap = (0..k)
                            .filter(|&j| j != a)
                            .map(|j| exact_sq(ca, &codewords[j * d..(j + 1) * d]))
                            .fold(f64::INFINITY, f64::min);
                        0.5 * gap.sqrt()
                    })
                    .collect(),
            };
            (moved, near, half_gap)
        };
        let encoder = Encoder::new(codewords, d)?;
        // Only the blocked kernel beats long neighbour lists; a tree batch
        // (low dimensions) is a search per vector like theirs.
        let blocked = encoder.batch_method() == SearchMethod::Scan;
        // The largest move and the largest move of any other codeword.
        let (mut top, mut top_at, mut runner) = (0.0f64, usize::MAX, 0.0f64);
        for (j, &m) in moved.iter().enumerate() {
            if m > top {
                runner = top;
                top = m;
                top_at = j;
            } else if m > runner {
                runner = m;
            }
        }
        let flat = vectors.as_flat();
        let weights = vectors.weights();
        let partials: Vec<Partial> = labels
            .par_chunks_mut(CHUNK_ROWS)
            .zip(self.upper.par_chunks_mut(CHUNK_ROWS))
            .zip(self.lower.par_chunks_mut(CHUNK_ROWS))
            .zip(flat.par_chunks(CHUNK_ROWS * d))
            .enumerate()
            .map(|(c, (((lab, up), low), rows))| {
                let mut p = Partial::empty(k, d);
                // Each vector's exact squared distance to its codeword when
                // this pass measured it (NaN otherwise), for the sums.
                let mut measured = vec![f64::NAN; lab.len()];
                // Vectors left to one batch search of the chunk: all on the
                // first pass; later, those whose neighbour list within reach
                // is too long for a single search to beat the batch kernel.
                let mut pending: Vec<usize> = Vec::new();
                if first {
                    pending.extend(0..lab.len());
                } else {
                    for (j, r) in rows.chunks_exact(d).enumerate() {
                        let a = lab[j] as usize;
                        up[j] += moved[a];
                        low[j] -= if a == top_at { runner } else { top };
                        let bound = low[j].max(half_gap[a]) * (1.0 - rel);
                        if up[j] * (1.0 + rel) + BOUND_FLOOR < bound {
                            continue;
                        }
                        measured[j] = exact_sq(r, &codewords[a * d..(a + 1) * d]);
                        up[j] = measured[j].sqrt();
                        if up[j] * (1.0 + rel) + BOUND_FLOOR < bound {
                            continue;
                        }
                        match &near {
                            Some(near)
                                if !blocked
                                    || !near.measures_more_than(a, up[j], rel, k / BATCH_GAIN) =>
                            {
                                let (two, beyond) = near.nearest_two(r, a, up[j], codewords, rel);
                                let (l, u, lo) = (&mut lab[j], &mut up[j], &mut low[j]);
                                let (changed, e) = settle(r, codewords, two, beyond, l, u, lo);
                                p.changed += u64::from(changed);
                                measured[j] = e;
                            }
                            _ => pending.push(j),
                        }
                    }
                }
                if !pending.is_empty() {
                    let gathered: Vec<f32>;
                    let queries = if pending.len() == lab.len() {
                        rows
                    } else {
                        gathered = gather_rows(rows, d, &pending);
                        &gathered
                    };
                    let mut two = vec![NearestTwo::NONE; pending.len()];
                    encoder.nearest_two_batch(queries, &mut two);
                    for (&j, t) in pending.iter().zip(two) {
                        let r = &rows[j * d..(j + 1) * d];
                        let (l, u, lo) = (&mut lab[j], &mut up[j], &mut low[j]);
                        let (changed, e) = settle(r, codewords, t, f64::INFINITY, l, u, lo);
                        p.changed += u64::from(changed);
                        measured[j] = e;
                    }
                }
                // Sums in row order, whatever was searched how; a distance
                // measured above is the one `add` would measure.
                for (j, r) in rows.chunks_exact(d).enumerate() {
                    let w = weights.map_or(1.0, |w| w[c * CHUNK_ROWS + j]);
                    if measured[j].is_nan() {
                        p.add(r, w, lab[j] as usize, codewords);
                    } else {
                        p.add_measured(r, w, lab[j] as usize, measured[j]);
                    }
                }
                p
            })
            .collect();
        self.last.clear();
        self.last.extend_from_slice(codewords);
        Ok(reduce(partials, k, d))
    }
}

/// Lloyd iterations from the given initial codewords.
///
/// Each step (1) assigns every vector to its nearest codeword, ties to the
/// lowest index, (2) moves each codeword to the weighted mean of its vectors.
/// Stops when no assignment changes, when the relative improvement falls
/// below `tolerance`, or at the cap; unless it converged, one more update and
/// a final assignment pass make codewords, labels and distortion agree.
pub fn lloyd(vectors: &VectorSet, initial: &[f32], opts: &LloydOptions) -> Result<LloydResult> {
    lloyd_core(vectors, initial, opts, Constraint::default(), &|_, _| {})
}

/// [`lloyd`] under a [`Constraint`] (the fixed codewords are the first ones
/// of `initial`), with a callback after every assignment pass.
pub fn lloyd_constrained(
    vectors: &VectorSet,
    initial: &[f32],
    opts: &LloydOptions,
    constraint: Constraint<'_>,
) -> Result<LloydResult> {
    lloyd_core(vectors, initial, opts, constraint, &|_, _| {})
}

fn lloyd_core(
    vectors: &VectorSet,
    initial: &[f32],
    opts: &LloydOptions,
    constraint: Constraint<'_>,
    on_iter: &(dyn Fn(u32, f64) + Sync),
) -> Result<LloydResult> {
    lloyd_with(vectors, initial, opts, constraint, on_iter, Passes::Bounded)
}

/// How assignment passes find labels.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Passes {
    /// Skip vectors whose bounds prove the label stays ([`BoundedAssign`]),
    /// and moves that cannot pay.
    Bounded,
    /// Search every vector every pass, weigh every move: the oracle the
    /// bounded passes must equal.
    #[cfg(test)]
    SearchAll,
}

fn lloyd_with(
    vectors: &VectorSet,
    initial: &[f32],
    opts: &LloydOptions,
    constraint: Constraint<'_>,
    on_iter: &(dyn Fn(u32, f64) + Sync),
    passes: Passes,
) -> Result<LloydResult> {
    let d = vectors.dimension();
    if initial.is_empty() || initial.len() % d != 0 {
        return Err(Error::new(
            "training",
            ErrorKind::DimensionMismatch {
                expected: d,
                found: initial.len(),
            },
        ));
    }
    if vectors.is_empty() {
        return Err(Error::new("training", ErrorKind::EmptyInput));
    }
    if opts.max_iterations == 0 {
        return Err(Error::new(
            "training",
            ErrorKind::InvalidParameter("the iteration cap must be at least 1".into()),
        ));
    }
    let mut codewords = initial.to_vec();
    let fixed = constraint.fixed_count(d);
    if fixed > 0 {
        codewords[..fixed * d].copy_from_slice(constraint.fixed);
    }
    if constraint.snap.is_some() {
        codewords[fixed * d..]
            .par_chunks_mut(d)
            .for_each(|c| constraint.snap_one(c));
    }
    let mut labels = vec![u32::MAX; vectors.len()];
    let mut history = Vec::new();
    let mut iterations = 0;
    let stopped_by;
    let mut prev: Option<f64> = None;
    let mut assigner = BoundedAssign::new(vectors.len());
    let mut pass = |codewords: &[f32], labels: &mut [u32]| {
        if passes != Passes::Bounded {
            // Without the previous codewords, every vector is searched.
            assigner.last.clear();
        }
        assigner.pass(vectors, codewords, labels)
    };
    loop {
        let p = pass(&codewords, &mut labels)?;
        iterations += 1;
        history.push(p.distortion);
        on_iter(iterations, p.distortion);
        if p.changed == 0 {
            stopped_by = StopReason::Converged;
            break;
        }
        let small_gain = prev
            .is_some_and(|prev: f64| prev <= 0.0 || (prev - p.distortion) / prev < opts.tolerance);
        update(vectors, &mut codewords, &labels, &p, constraint);
        if small_gain {
            stopped_by = StopReason::Tolerance;
            break;
        }
        if iterations >= opts.max_iterations {
            stopped_by = StopReason::MaxIterations;
            break;
        }
        prev = Some(p.distortion);
    }
    let distortion = if stopped_by == StopReason::Converged {
        *history.last().expect("one pass ran")
    } else {
        // Codewords moved after the last assignment: assign once more.
        pass(&codewords, &mut labels)?.distortion
    };
    Ok(LloydResult {
        codewords,
        labels,
        distortion,
        history,
        iterations,
        stopped_by,
    })
}

/// Largest n·k·d for which [`train`] polishes each run with single-vector
/// moves ([`refine_by_moves`]); above it Lloyd alone is used, since one pass
/// costs about as much as a Lloyd iteration and cannot run in parallel.
pub const MOVE_REFINE_BUDGET: usize = 1 << 27;

/// Most codewords for which [`train`] polishes with single-vector moves:
/// they keep a table of every codeword's neighbours, k·(k−1) entries of
/// 16 bytes (67 MB at this size; 2 GB at the 11 000 codewords the budget
/// alone would allow on one-component data).
pub const MOVE_MAX_CODEWORDS: usize = 2048;

/// Passes over the data [`train`] allows the single-vector moves. Most of
/// the gain comes in the first few passes; later ones move a handful of
/// vectors each at the full cost of a pass.
pub const MOVE_PASSES: u32 = 10;

/// Polishes a Lloyd result by moving single vectors between clusters while
/// that lowers the total distortion (the exact weighted criterion of
/// Hartigan & Wong 1979: moving x of weight w from A to B changes the error
/// by W_B·w/(W_B+w)·‖x−c_B‖² − W_A·w/(W_A−w)·‖x−c_A‖², with the centroids
/// updated after every move). Lloyd stops at partitions where no vector is
/// nearer another codeword; this also escapes those where moving one vector
/// still pays, which finds noticeably lower distortion on small and
/// clustered data. Sequential and deterministic; ends with a Lloyd pass so
/// codewords, labels and distortion agree.
pub fn refine_by_moves(
    vectors: &VectorSet,
    start: &LloydResult,
    opts: &LloydOptions,
    max_passes: u32,
) -> Result<LloydResult> {
    refine_by_moves_core(vectors, start, opts, max_passes, Constraint::default())
}

/// [`refine_by_moves`] keeping the constraint's fixed codewords where they
/// are (a vector joining or leaving their cluster costs w·‖x − c‖² exactly),
/// and ending with a Lloyd pass under the full constraint.
fn refine_by_moves_core(
    vectors: &VectorSet,
    start: &LloydResult,
    opts: &LloydOptions,
    max_passes: u32,
    constraint: Constraint<'_>,
) -> Result<LloydResult> {
    refine_by_moves_with(
        vectors,
        start,
        opts,
        max_passes,
        constraint,
        Passes::Bounded,
    )
}

fn refine_by_moves_with(
    vectors: &VectorSet,
    start: &LloydResult,
    opts: &LloydOptions,
    max_passes: u32,
    constraint: Constraint<'_>,
    passes: Passes,
) -> Result<LloydResult> {
    let d = vectors.dimension();
    let fixed = constraint.fixed_count(d);
    let k = start.codewords.len() / d;
    let mut labels = start.labels.clone();
    let mut weight = vec![0.0f64; k];
    let mut sums = vec![0.0f64; k * d];
    for (i, r) in vectors.rows().enumerate() {
        let l = labels[i] as usize;
        let w = vectors.weight(i);
        weight[l] += w;
        for (s, &x) in sums[l * d..(l + 1) * d].iter_mut().zip(r) {
            *s += w * x as f64;
        }
    }
    let mut centre = vec![0.0f64; k * d];
    let set_centre = |centre: &mut [f64], sums: &[f64], weight: &[f64], j: usize| {
        for c in 0..d {
            centre[j * d + c] = if weight[j] > 0.0 {
                sums[j * d + c] / weight[j]
            } else {
                0.0
            };
        }
    };
    for j in 0..k {
        if j < fixed {
            for c in 0..d {
                centre[j * d + c] = start.codewords[j * d + c] as f64;
            }
        } else {
            set_centre(&mut centre, &sums, &weight, j);
        }
    }
    let dist = |x: &[f32], c: &[f64]| -> f64 {
        x.iter()
            .zip(c)
            .map(|(&a, &b)| {
                let e = a as f64 - b;
                e * e
            })
            .sum()
    };
    // Euclidean distance between two centres (or a centre and its old place).
    let gap = |u: &[f64], v: &[f64]| -> f64 {
        u.iter()
            .zip(v)
            .map(|(a, b)| {
                let e = a - b;
                e * e
            })
            .sum::<f64>()
            .sqrt()
    };
    let mut old = vec![0.0f64; d];
    for _ in 0..max_passes {
        let mut moved = 0u64;
        // Candidates come nearest first from a table of the centres as
        // they were when the pass began; `drift` bounds how far each has
        // moved since. A cluster of weight W takes x (weight w) for
        // W·w/(W+w)·‖x−c‖², at least `least_factor`·‖x−c‖², so once even
        // the nearest remaining centre cannot beat the best move, none can.
        let near = Neighbours::by(k, |a, b| {
            gap(&centre[a * d..(a + 1) * d], &centre[b * d..(b + 1) * d])
        });
        let mut drift = vec![0.0f64; k];
        let mut max_drift = 0.0f64;
        let mut least_weight = (fixed..k)
            .map(|j| weight[j])
            .filter(|&w| w > 0.0)
            .fold(f64::INFINITY, f64::min);
        for (i, x) in vectors.rows().enumerate() {
            let a = labels[i] as usize;
            let w = vectors.weight(i);
            if a >= fixed && weight[a] - w <= weight[a] * 1e-12 {
                continue; // never empty a free cluster
            }
            let da = dist(x, &centre[a * d..(a + 1) * d]);
            let remove = if a < fixed {
                w * da
            } else {
                weight[a] * w / (weight[a] - w) * da
            };
            let least_factor = if least_weight.is_finite() {
                w * least_weight / (least_weight + w)
            } else {
                w
            };
            let r = da.sqrt();
            let mut best = (remove, a);
            for &(gap, b) in near.row(a) {
                let b = b as usize;
                let reach = gap - drift[a] - max_drift - r;
                if passes == Passes::Bounded
                    && reach > 0.0
                    && least_factor * reach * reach * (1.0 - 1e-9) > best.0
                {
                    break;
                }
                if b >= fixed && weight[b] <= 0.0 {
                    continue;
                }
                let db = dist(x, &centre[b * d..(b + 1) * d]);
                let add = if b < fixed {
                    w * db
                } else {
                    weight[b] * w / (weight[b] + w) * db
                };
                // As a scan in index order would choose: the lowest index
                // among equal best moves.
                if add < best.0 || (add == best.0 && best.1 != a && b < best.1) {
                    best = (add, b);
                }
            }
            let b = best.1;
            // Move only for a real gain, not a rounding-level one.
            if b != a && best.0 < remove * (1.0 - 1e-12) {
                weight[a] -= w;
                weight[b] += w;
                for c in 0..d {
                    let v = w * x[c] as f64;
                    sums[a * d + c] -= v;
                    sums[b * d + c] += v;
                }
                for j in [a, b] {
                    if j >= fixed {
                        old.copy_from_slice(&centre[j * d..(j + 1) * d]);
                        set_centre(&mut centre, &sums, &weight, j);
                        drift[j] += gap(&centre[j * d..(j + 1) * d], &old) * (1.0 + 1e-9);
                        max_drift = max_drift.max(drift[j]);
                    }
                }
                if a >= fixed && weight[a] > 0.0 {
                    least_weight = least_weight.min(weight[a]);
                }
                labels[i] = b as u32;
                moved += 1;
            }
        }
        if moved == 0 {
            break;
        }
    }
    let mut codewords: Vec<f32> = centre.iter().map(|&v| v as f32).collect();
    codewords[..fixed * d].copy_from_slice(&start.codewords[..fixed * d]);
    let mut polished = lloyd_core(vectors, &codewords, opts, constraint, &|_, _| {})?;
    if constraint.snap.is_none() && polished.distortion > start.distortion {
        // Rounding could in principle undo a rounding-level gain: keep the
        // start as it was (its iterations and history counted once).
        return Ok(start.clone());
    }
    polished.iterations += start.iterations;
    let mut history = start.history.clone();
    history.extend_from_slice(&polished.history);
    polished.history = history;
    Ok(polished)
}

/// LBG: from the weighted mean, repeatedly split the codewords with the
/// largest cluster distortion (c → c ± δ, δ a small random direction scaled
/// to the data's spread) and refine with Lloyd, until there are `k`.
fn split_and_refine(
    vectors: &VectorSet,
    k: usize,
    opts: &LloydOptions,
    rng: &mut SeededRng,
    constraint: Constraint<'_>,
    on_iter: &(dyn Fn(u32, f64) + Sync),
) -> Result<LloydResult> {
    let d = vectors.dimension();
    let fixed = constraint.fixed_count(d);
    let total = vectors.total_weight();
    let mut mean = vec![0.0f64; d];
    for (i, r) in vectors.rows().enumerate() {
        for (m, &x) in mean.iter_mut().zip(r) {
            *m += vectors.weight(i) * x as f64;
        }
    }
    let mean: Vec<f64> = mean.iter().map(|m| m / total).collect();
    let mut spread = vec![0.0f64; d];
    for (i, r) in vectors.rows().enumerate() {
        for c in 0..d {
            let e = r[c] as f64 - mean[c];
            spread[c] += vectors.weight(i) * e * e;
        }
    }
    let spread: Vec<f64> = spread
        .iter()
        .map(|s| (s / total).sqrt().max(f64::MIN_POSITIVE))
        .collect();
    let mut codewords: Vec<f32> = constraint.fixed.to_vec();
    codewords.extend(mean.iter().map(|&m| m as f32));
    let mut result = lloyd_core(vectors, &codewords, opts, constraint, on_iter)?;
    while result.codewords.len() / d < k {
        let cur = result.codewords.len() / d;
        // Only free codewords split; fixed ones stay single.
        let grow = (cur - fixed).min(k - cur);
        // Split the clusters with the most distortion first.
        let mut cluster_err = vec![0.0f64; cur];
        for (i, r) in vectors.rows().enumerate() {
            let l = result.labels[i] as usize;
            cluster_err[l] +=
                vectors.weight(i) * exact_sq(r, &result.codewords[l * d..(l + 1) * d]);
        }
        let mut order: Vec<usize> = (fixed..cur).collect();
        order.sort_by(|&a, &b| cluster_err[b].total_cmp(&cluster_err[a]).then(a.cmp(&b)));
        codewords = result.codewords.clone();
        for &c in order.iter().take(grow) {
            let delta: Vec<f64> = (0..d).map(|j| 1e-3 * spread[j] * rng.normal()).collect();
            let base: Vec<f64> = codewords[c * d..(c + 1) * d]
                .iter()
                .map(|&v| v as f64)
                .collect();
            for j in 0..d {
                codewords[c * d + j] = (base[j] + delta[j]) as f32;
            }
            codewords.extend(base.iter().zip(&delta).map(|(b, dl)| (b - dl) as f32));
        }
        result = lloyd_core(vectors, &codewords, opts, constraint, on_iter)?;
    }
    Ok(result)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn gaussian_mixture(seed: u64, n: usize, centres: &[[f32; 2]]) -> VectorSet {
        let mut rng = SeededRng::new(seed);
        let mut data = Vec::new();
        for i in 0..n {
            let c = centres[i % centres.len()];
            data.push(c[0] + 0.3 * rng.normal() as f32);
            data.push(c[1] + 0.3 * rng.normal() as f32);
        }
        VectorSet::new(2, data).unwrap()
    }

    /// Naive Lloyd step, written for clarity: the oracle for `assign` + `update`.
    fn naive_step(v: &VectorSet, cw: &[f32]) -> (Vec<f32>, f64) {
        let d = v.dimension();
        let k = cw.len() / d;
        let mut sums = vec![0.0f64; k * d];
        let mut w = vec![0.0f64; k];
        let mut dist = 0.0;
        for (i, r) in v.rows().enumerate() {
            let mut best = (f64::INFINITY, 0);
            for j in 0..k {
                // the encoder's f32 distance decides, ties to the lower index
                let e32 = crate::encode::distance_sq(r, &cw[j * d..(j + 1) * d]) as f64;
                if e32 < best.0 {
                    best = (e32, j);
                }
            }
            let j = best.1;
            dist += v.weight(i) * exact_sq(r, &cw[j * d..(j + 1) * d]);
            w[j] += v.weight(i);
            for c in 0..d {
                sums[j * d + c] += v.weight(i) * r[c] as f64;
            }
        }
        let mut out = cw.to_vec();
        for j in 0..k {
            if w[j] > 0.0 {
                for c in 0..d {
                    out[j * d + c] = (sums[j * d + c] / w[j]) as f32;
                }
            }
        }
        (out, dist)
    }

    /// Greedy k-means++ measuring every vector for every candidate, written
    /// for clarity: the oracle for the grouped seeding.
    fn naive_greedy_seeding(
        v: &VectorSet,
        k: usize,
        rng: &mut SeededRng,
        fixed: &[f32],
    ) -> Vec<f32> {
        let (n, d) = (v.len(), v.dimension());
        let candidates = 2 + (k as f64).ln().floor() as usize;
        let mut centres = fixed.to_vec();
        if centres.is_empty() {
            let w: Vec<f64> = (0..n)
                .scan(0.0, |s, i| {
                    *s += v.weight(i);
                    Some(*s)
                })
                .collect();
            centres.extend_from_slice(v.row(rng.draw(&w)));
        }
        let nearest = |x: &[f32], cs: &[f32]| {
            cs.chunks_exact(d)
                .map(|c| exact_sq(x, c))
                .fold(f64::INFINITY, f64::min)
        };
        while centres.len() < k * d {
            let closest: Vec<f64> = v.rows().map(|x| nearest(x, &centres)).collect();
            let prefix: Vec<f64> = (0..n)
                .scan(0.0, |s, i| {
                    *s += v.weight(i) * closest[i];
                    Some(*s)
                })
                .collect();
            if prefix[n - 1] <= 0.0 {
                break;
            }
            let picks: Vec<usize> = (0..candidates).map(|_| rng.draw(&prefix)).collect();
            let potential = |p: usize| -> f64 {
                (0..n)
                    .map(|i| v.weight(i) * closest[i].min(exact_sq(v.row(i), v.row(p))))
                    .sum()
            };
            let best = picks
                .iter()
                .map(|&p| (potential(p), p))
                .fold((f64::INFINITY, 0), |a, b| if b.0 < a.0 { b } else { a });
            centres.extend_from_slice(v.row(best.1));
        }
        centres
    }

    /// 10 000 distinct 2-D points around 8 separated spots on a 4 × 2
    /// grid, 9 apart.
    fn eight_spots() -> VectorSet {
        let spots: Vec<[f32; 2]> = (0..8)
            .map(|i| [(i % 4) as f32 * 9.0, (i / 4) as f32 * 9.0])
            .collect();
        gaussian_mixture(17, 10_000, &spots)
    }

    #[test]
    fn large_inputs_train_on_a_sample_and_say_so() {
        // 10 000 distinct points around 8 separated spots, k = 8: above
        // 1 024 per codeword, so the restarts see 2 048 draws.
        let v = eight_spots();
        let auto = train(&v, &TrainConfig::new(8).check().unwrap()).unwrap();
        assert_eq!(auto.report.sample_draws, Some(8 * SAMPLE_PER_CODEWORD));
        assert!(auto.report.notices.iter().any(|n| n.contains("sample")));
        // The same seed gives the same codebook.
        assert_eq!(
            auto,
            train(&v, &TrainConfig::new(8).check().unwrap()).unwrap()
        );
        let full = train(
            &v,
            &TrainConfig::new(4)
                .sampling(Sampling::Never)
                .check()
                .unwrap(),
        )
        .unwrap();
        assert_eq!(full.report.sample_draws, None);
        assert!(full.report.notices.is_empty());
        // Refined on every vector, the result is as good as training on all
        // of them (to 1 %; measured: equal here).
        assert!(
            auto.report.distortion <= full.report.distortion * 1.01,
            "{} vs {}",
            auto.report.distortion,
            full.report.distortion
        );
        // Below the threshold nothing is sampled.
        let small = train(&v, &TrainConfig::new(10).check().unwrap()).unwrap();
        assert_eq!(small.report.sample_draws, None);
    }

    #[test]
    fn quick_effort_starts_on_a_stand_in_and_caps_the_final_passes() {
        // 10 000 distinct 2-D points around 8 spots, k = 8: more than the
        // 1 024 stand-in vectors of a quick start, so the restarts run on
        // cell means, then at most QUICK_REFINE_PASSES passes over all.
        let v = eight_spots();
        let quick = |k: usize| {
            train(
                &v,
                &TrainConfig::new(k)
                    .effort(Effort::Quick)
                    .restarts(1)
                    .check()
                    .unwrap(),
            )
            .unwrap()
        };
        let q = quick(8);
        assert_eq!(quick_stand_in_size(8), QUICK_MIN_STAND_IN);
        let cells = q.report.coarse_vectors.expect("a coarse start");
        assert!(cells <= QUICK_MIN_STAND_IN, "{cells} cell means");
        assert_eq!(q, quick(8), "the same seed gives the same codebook");
        // Restart 0 of the thorough run on all vectors, for comparison:
        // the quick result stays within 2 % of it on these clear spots.
        let full = train(&v, &TrainConfig::new(8).restarts(1).check().unwrap()).unwrap();
        assert_eq!(full.report.coarse_vectors, None);
        assert!(
            q.report.distortion <= full.report.distortion * 1.02,
            "{} vs {}",
            q.report.distortion,
            full.report.distortion
        );
        // A stand-in of every vector is no stand-in: small inputs are
        // trained as with the thorough effort.
        let few = VectorSet::new(2, v.as_flat()[..2 * 600].to_vec()).unwrap();
        let both: Vec<Trained> = [Effort::Quick, Effort::Thorough]
            .iter()
            .map(|&e| train(&few, &TrainConfig::new(8).effort(e).check().unwrap()).unwrap())
            .collect();
        assert_eq!(both[0].codewords, both[1].codewords);
        assert_eq!(both[0].report.distortion, both[1].report.distortion);
        // More than 4 components: a sample of the stand-in's size instead.
        let wide = VectorSet::new(
            5,
            (0..5 * 3000)
                .map(|i| ((i * 7919) % 100_003) as f32)
                .collect(),
        )
        .unwrap();
        let s = train(
            &wide,
            &TrainConfig::new(4).effort(Effort::Quick).check().unwrap(),
        )
        .unwrap();
        assert_eq!(s.report.sample_draws, Some(QUICK_MIN_STAND_IN));
        assert!(s.report.notices.iter().any(|n| n.contains("at most")));
    }

    #[test]
    fn refreshed_neighbour_lists_equal_new_ones() {
        // Codewords that move a little (nearly sorted rows), a lot, and onto
        // each other (equal gaps, ordered by index).
        let mut rng = SeededRng::new(33);
        for &(d, k, step) in &[(3, 40, 0.01f32), (3, 40, 5.0), (16, 25, 0.1), (2, 30, 0.0)] {
            let mut cw: Vec<f32> = (0..k * d).map(|_| rng.normal() as f32).collect();
            let mut lists = Neighbours::new(&cw, d);
            for round in 0..3 {
                for (i, c) in cw.iter_mut().enumerate() {
                    *c = if step == 0.0 && i % 3 == round {
                        0.5
                    } else {
                        *c + step * rng.normal() as f32
                    };
                }
                lists.refresh(&cw, d);
                assert_eq!(
                    lists.lists,
                    Neighbours::new(&cw, d).lists,
                    "d={d} k={k} step={step}"
                );
            }
        }
    }

    #[test]
    fn moves_stay_within_the_codeword_cap() {
        // 3 000 values: n·k·d is far inside the budget for either size, but
        // above the cap the neighbour table would be too large.
        let v = VectorSet::new(1, (0..3000).map(|i| i as f32).collect()).unwrap();
        assert!(moves_affordable(&v, MOVE_MAX_CODEWORDS));
        assert!(!moves_affordable(&v, MOVE_MAX_CODEWORDS + 1));
    }

    #[test]
    fn grouped_seeding_equals_measuring_every_vector() {
        // Clustered data (where the groups prune most), duplicates and
        // weights, a few dimensions, with and without fixed centres.
        let mut rng = SeededRng::new(5);
        for &(d, n, k, fixed) in &[
            (1, 400, 12, 0),
            (2, 900, 40, 0),
            (3, 1500, 64, 2),
            (5, 700, 30, 1),
            (16, 500, 20, 0),
        ] {
            let spots: Vec<f32> = (0..10 * d).map(|_| 20.0 * rng.normal() as f32).collect();
            let mut data = Vec::with_capacity(n * d);
            for i in 0..n {
                let s = i % 10;
                for c in 0..d {
                    let x = spots[s * d + c] + rng.normal() as f32;
                    data.push(if i % 7 == 0 { x.round() } else { x });
                }
            }
            let weights: Vec<f64> = (0..n).map(|i| 1.0 + (i % 4) as f64).collect();
            let v = VectorSet::new(d, data)
                .unwrap()
                .with_weights(weights)
                .unwrap();
            let pinned: Vec<f32> = v.as_flat()[..fixed * d].to_vec();
            for seed in 0..3 {
                let ours = seed_kmeans_plus_plus_around(&v, k, &mut SeededRng::new(seed), &pinned);
                let naive = naive_greedy_seeding(&v, k, &mut SeededRng::new(seed), &pinned);
                assert_eq!(ours, naive, "d={d} n={n} k={k} seed={seed}");
            }
        }
    }

    #[test]
    fn bounded_passes_equal_searching_every_vector() {
        let mut rng = SeededRng::new(21);
        for &(d, n, k, grid) in &[
            (1, 3000, 9, false),
            (2, 4000, 40, true),
            (3, 6000, 256, false),
            (3, 6000, 64, true),
            (4, 3000, 20, false),
            (5, 2000, 33, false),
            (16, 1500, 70, false),
        ] {
            // Coarse grids make exact ties, which must still go to the lowest index.
            let data: Vec<f32> = (0..n * d)
                .map(|_| {
                    let x = rng.normal() as f32 * 3.0;
                    if grid {
                        x.round()
                    } else {
                        x
                    }
                })
                .collect();
            let v = VectorSet::new(d, data).unwrap();
            let init = seed_random(&v.deduplicated(), k, &mut rng);
            let opts = LloydOptions {
                max_iterations: 60,
                tolerance: 0.0,
            };
            for snap in [None, Some(&half_grid as SnapFn<'_>)] {
                let c = Constraint { fixed: &[], snap };
                let run = |p| lloyd_with(&v, &init, &opts, c, &|_, _| {}, p).unwrap();
                let (bounded, oracle) = (run(Passes::Bounded), run(Passes::SearchAll));
                assert_eq!(
                    bounded,
                    oracle,
                    "d={d} k={k} grid={grid} snap={}",
                    snap.is_some()
                );
            }
        }
    }

    #[test]
    fn pruned_moves_equal_weighing_every_move() {
        let v = gaussian_mixture(8, 3000, &[[0.0, 0.0], [2.0, 0.5], [0.5, 2.0], [2.5, 2.5]]);
        let mut rng = SeededRng::new(3);
        // Integer weights, some large, so heavy vectors and tiny clusters meet.
        let weights: Vec<f64> = (0..v.len())
            .map(|_| (1.0 + 40.0 * rng.unit_f64().powi(6)).floor())
            .collect();
        let v = v.with_weights(weights).unwrap();
        let opts = LloydOptions {
            max_iterations: 200,
            tolerance: 0.0,
        };
        let fixed = [1.0f32, 1.0];
        for (k, fixed) in [(12, &[][..]), (40, &fixed[..])] {
            let init = seed_kmeans_plus_plus_around(&v, k, &mut rng, fixed);
            let c = Constraint { fixed, snap: None };
            let start = lloyd_constrained(&v, &init, &opts, c).unwrap();
            let run = |p| refine_by_moves_with(&v, &start, &opts, 10, c, p).unwrap();
            let (pruned, oracle) = (run(Passes::Bounded), run(Passes::SearchAll));
            assert!(
                oracle.distortion < start.distortion,
                "k={k}: the moves must do something"
            );
            assert_eq!(pruned, oracle, "k={k}");
        }
    }

    #[test]
    fn one_iteration_matches_naive_step() {
        let v = gaussian_mixture(3, 5000, &[[0.0, 0.0], [3.0, 0.0], [0.0, 3.0]]);
        let init = vec![0.5, 0.5, 2.0, 1.0, 1.0, 2.0, -1.0, -1.0];
        let opts = LloydOptions {
            max_iterations: 1,
            tolerance: 0.0,
        };
        let r = lloyd(&v, &init, &opts).unwrap();
        let (want, d0) = naive_step(&v, &init);
        assert_eq!(r.codewords, want);
        // chunked summation order differs from the naive loop only by rounding
        assert!((r.history[0] - d0).abs() <= 1e-12 * d0);
    }

    #[test]
    fn distortion_never_rises_and_labels_agree() {
        let v = gaussian_mixture(5, 4000, &[[0.0, 0.0], [3.0, 0.0], [0.0, 3.0], [3.0, 3.0]]);
        for seeding in [Seeding::KMeansPlusPlus, Seeding::Random, Seeding::Split] {
            let cfg = TrainConfig::new(7).seeding(seeding).tolerance(0.0);
            let mut rng = SeededRng::new(1);
            let init = seed_random(&v, 7, &mut rng);
            let r = lloyd(
                &v,
                &init,
                &LloydOptions {
                    max_iterations: 100,
                    tolerance: 0.0,
                },
            )
            .unwrap();
            for w in r.history.windows(2) {
                assert!(w[1] <= w[0], "{:?}", r.history);
            }
            let e = Encoder::new(&r.codewords, 2).unwrap();
            assert_eq!(e.encode(&v).unwrap(), r.labels);
            let t = train(&v, &cfg.check().unwrap()).unwrap();
            assert_eq!(t.report.size, 7);
            assert!(t.report.mse_per_component > 0.0);
        }
    }

    #[test]
    fn single_vector_moves_never_lose_and_stay_consistent() {
        let v = gaussian_mixture(12, 3000, &[[0.0, 0.0], [2.0, 0.0], [0.0, 2.0], [2.0, 2.0]]);
        let opts = LloydOptions {
            max_iterations: 300,
            tolerance: 0.0,
        };
        let mut gained = 0;
        for seed in 0..6 {
            let init = seed_random(&v, 9, &mut SeededRng::new(seed));
            let l = lloyd(&v, &init, &opts).unwrap();
            let m = refine_by_moves(&v, &l, &opts, 100).unwrap();
            assert!(m.distortion <= l.distortion);
            if m.distortion < l.distortion * (1.0 - 1e-9) {
                gained += 1;
            }
            assert_eq!(
                Encoder::new(&m.codewords, 2).unwrap().encode(&v).unwrap(),
                m.labels
            );
        }
        // Lloyd alone stops at partitions a single move can still improve.
        assert!(gained > 0);
    }

    /// Rounds every component to a multiple of 0.5: a stand-in display grid.
    fn half_grid(v: &mut [f32]) {
        for x in v.iter_mut() {
            *x = (*x * 2.0).round() / 2.0;
        }
    }

    #[test]
    fn fixed_codewords_stay_and_snapped_ones_sit_on_the_grid() {
        let v = gaussian_mixture(21, 6000, &[[0.0, 0.0], [3.0, 0.0], [0.0, 3.0], [3.0, 3.0]]);
        let fixed = [10.0f32, 10.0, -4.0, 0.25];
        let snap: &(dyn Fn(&mut [f32]) + Sync) = &half_grid;
        let c = Constraint {
            fixed: &fixed,
            snap: Some(snap),
        };
        for seeding in [Seeding::KMeansPlusPlus, Seeding::Random, Seeding::Split] {
            let cfg = TrainConfig::new(9).seeding(seeding).check().unwrap();
            let t = train_constrained(&v, &cfg, c, &|_| {}).unwrap();
            assert_eq!(&t.codewords[..4], &fixed, "{seeding:?}");
            let mut seen = Vec::new();
            for cw in t.codewords[4..].chunks_exact(2) {
                let mut g = cw.to_vec();
                half_grid(&mut g);
                assert_eq!(g, cw, "{seeding:?}: off the grid");
                assert!(!seen.contains(&g), "{seeding:?}: duplicate codeword");
                seen.push(g);
            }
            assert_eq!(t.report.size, 9);
            // The reported distortion is that of the returned codewords.
            let e = Encoder::new(&t.codewords, 2).unwrap();
            let idx = e.encode(&v).unwrap();
            let d: f64 = v
                .rows()
                .zip(&idx)
                .map(|(r, &i)| exact_sq(r, &t.codewords[i as usize * 2..i as usize * 2 + 2]))
                .sum();
            assert!((d - t.report.distortion).abs() <= 1e-9 * d);
        }
        assert!(TrainConfig::new(1)
            .check()
            .map(|cfg| train_constrained(&v, &cfg, c, &|_| {}).is_err())
            .unwrap());
    }

    #[test]
    fn training_on_the_grid_beats_rounding_a_free_codebook() {
        let v = gaussian_mixture(22, 8000, &[[0.1, 0.2], [1.3, 0.4], [0.2, 1.6], [1.1, 1.2]]);
        let cfg = TrainConfig::new(12).check().unwrap();
        let free = train(&v, &cfg).unwrap();
        let mut rounded = free.codewords.clone();
        for c in rounded.chunks_exact_mut(2) {
            half_grid(c);
        }
        let mut labels = vec![u32::MAX; v.len()];
        let after_rounding = assign(&v, &rounded, &mut labels).unwrap().distortion;
        let snap: &(dyn Fn(&mut [f32]) + Sync) = &half_grid;
        let c = Constraint {
            fixed: &[],
            snap: Some(snap),
        };
        let on_grid = train_constrained(&v, &cfg, c, &|_| {}).unwrap();
        assert!(
            on_grid.report.distortion < after_rounding,
            "{} vs {after_rounding}",
            on_grid.report.distortion
        );
    }

    #[test]
    fn fewer_distinct_vectors_than_k() {
        let v = VectorSet::new(1, vec![1.0, 2.0, 1.0, 2.0, 3.0]).unwrap();
        let t = train(&v, &TrainConfig::new(8).check().unwrap()).unwrap();
        assert_eq!(t.report.size, 3);
        assert_eq!(t.codewords, vec![1.0, 2.0, 3.0]);
        assert_eq!(t.report.distortion, 0.0);
        assert_eq!(t.report.notices.len(), 1);
    }

    #[test]
    fn in_order_yields_a_full_sort_however_far_it_is_taken() {
        // Oracle: the standard library's sort of the whole list. Keys repeat
        // (ties broken by index) and the lengths cross several batches.
        let mut rng = SeededRng::new(41);
        for n in [0usize, 1, 63, 64, 65, 200, 1000, 5000] {
            let keys: Vec<f64> = (0..n).map(|_| rng.below(50) as f64).collect();
            let cmp = |&a: &usize, &b: &usize| keys[b].total_cmp(&keys[a]).then(a.cmp(&b));
            let mut want: Vec<usize> = (0..n).collect();
            want.sort_by(cmp);
            for take in [0, 1, 10, 64, 65, 300, n] {
                let got: Vec<usize> = InOrder::new((0..n).collect(), cmp).take(take).collect();
                assert_eq!(got, want[..take.min(n)], "n {n}, take {take}");
            }
        }
    }

    #[test]
    fn many_empty_clusters_take_vectors_by_falling_error() {
        // 300 codewords far from all data are empty after the first pass,
        // more than one sorted batch of candidates. Oracle: the repair
        // written with a full sort of the candidates.
        let mut rng = SeededRng::new(7);
        let data: Vec<f32> = (0..4000).map(|_| (rng.below(700) as f32) * 0.5).collect();
        let v = VectorSet::new(1, data).unwrap();
        let mut init: Vec<f32> = vec![10.0, 100.0, 200.0, 300.0];
        init.extend((0..300).map(|i| 10_000.0 + i as f32));
        let k = init.len();
        let mut labels = vec![u32::MAX; v.len()];
        let p = assign(&v, &init, &mut labels).unwrap();
        let mut got = init.clone();
        update(&v, &mut got, &labels, &p, Constraint::default());

        let mut want = init.clone();
        for (i, c) in want.iter_mut().enumerate() {
            if p.weights[i] > 0.0 {
                *c = (p.sums[i] / p.weights[i]) as f32;
            }
        }
        let err: Vec<f64> = (0..v.len())
            .map(|i| exact_sq(v.row(i), &want[labels[i] as usize..labels[i] as usize + 1]))
            .collect();
        let mut order: Vec<usize> = (0..v.len()).filter(|&i| err[i] > 0.0).collect();
        order.sort_by(|&a, &b| err[b].total_cmp(&err[a]).then(a.cmp(&b)));
        let mut members = vec![0usize; k];
        for &l in &labels {
            members[l as usize] += 1;
        }
        let mut order = order.into_iter();
        for e in (0..k).filter(|&i| p.weights[i] == 0.0) {
            let Some(i) = order
                .by_ref()
                .find(|&i| members[labels[i] as usize] > 1 && !want.contains(&v.row(i)[0]))
            else {
                break;
            };
            want[e] = v.row(i)[0];
            members[labels[i] as usize] -= 1;
        }
        assert!(want[4..].iter().all(|&c| c < 10_000.0), "all repaired");
        assert_eq!(got, want);
    }

    #[test]
    fn empty_cluster_is_repaired_without_duplicates() {
        // A codeword far from every vector gets no members on the first pass.
        let v = VectorSet::new(1, vec![0.0, 1.0, 2.0, 10.0, 11.0, 12.0]).unwrap();
        let init = vec![1.0, 11.0, 1000.0];
        let r = lloyd(
            &v,
            &init,
            &LloydOptions {
                max_iterations: 50,
                tolerance: 0.0,
            },
        )
        .unwrap();
        let mut c = r.codewords.clone();
        c.sort_by(f32::total_cmp);
        c.dedup();
        assert_eq!(c.len(), 3);
        assert!(c.iter().all(|&x| x <= 12.0));
        assert_eq!(r.stopped_by, StopReason::Converged);
    }

    #[test]
    fn same_seed_same_result_for_any_thread_count() {
        let v = gaussian_mixture(8, 30_000, &[[0.0, 0.0], [3.0, 0.0], [0.0, 3.0]]);
        let cfg = TrainConfig::new(16).check().unwrap();
        let run = |threads| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| train(&v, &cfg).unwrap())
        };
        let a = run(1);
        let b = run(2);
        let c = run(3);
        assert_eq!(a, b);
        assert_eq!(a, c);
        let other = train(&v, &TrainConfig::new(16).seed(2).check().unwrap()).unwrap();
        assert_ne!(a.codewords, other.codewords);
    }

    #[test]
    fn bad_parameters_are_refused() {
        assert!(matches!(
            TrainConfig::new(0).check().unwrap_err().kind(),
            ErrorKind::ZeroSize
        ));
        assert!(TrainConfig::new(2).restarts(0).check().is_err());
        assert!(TrainConfig::new(2).max_iterations(0).check().is_err());
        assert!(TrainConfig::new(2).tolerance(f64::NAN).check().is_err());
        let w = VectorSet::new(1, vec![1.0, 2.0])
            .unwrap()
            .with_weights(vec![0.0, 0.0])
            .unwrap();
        assert!(train(&w, &TrainConfig::new(1).check().unwrap()).is_err());
    }
}
