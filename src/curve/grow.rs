//! Codebooks of several sizes: one trained from scratch through
//! [`train_constrained`], and larger ones grown from a smaller one by
//! splitting codewords and refining (LBG). Works on weighted vectors in the
//! training space; never measures in the user's units, reads or prints.
//!
//! Why growing cannot lose: the grown codebook starts as the smaller one
//! with new codewords added, so every vector's nearest codeword is at least
//! as near as before; refinement is kept only when it is no worse than that
//! start. Distortion therefore never rises from one size to the next.

use std::collections::HashSet;

use crate::codebook::TrainingFacts;
use crate::encode::Encoder;
use crate::error::Result;
use rayon::prelude::*;

use crate::kmeans::{
    lloyd_constrained, moves_affordable, refine_by_moves, train_constrained, CheckedTrainConfig,
    Constraint, LloydOptions, Seeding, StopReason, MOVE_PASSES,
};
use crate::metrics::squared_error;
use crate::rng::{derive_seed, SeededRng};
use crate::vectors::VectorSet;

/// What a codebook is trained on: distinct weighted vectors in the training
/// space and the rules its codewords obey.
#[derive(Clone, Copy)]
pub(crate) struct Subject<'a> {
    /// Distinct vectors, weighted (see [`VectorSet::deduplicated`]).
    pub vectors: &'a VectorSet,
    /// Fixed codewords and the projection, if any.
    pub constraint: Constraint<'a>,
}

/// A trained codebook of one size.
#[derive(Debug, Clone)]
pub(crate) struct Stage {
    /// Codewords, flat, fixed ones first.
    pub codewords: Vec<f32>,
    /// Σ weight × ‖x − nearest codeword‖² over the subject's vectors, f64.
    pub distortion: f64,
    /// Facts for the codebook file.
    pub facts: TrainingFacts,
    /// Things the user should know.
    pub notices: Vec<String>,
}

impl Stage {
    /// Codewords in the codebook.
    pub fn size(&self, dimension: usize) -> usize {
        self.codewords.len() / dimension
    }
}

/// Size of a split step relative to each component's spread within the
/// cluster: large enough to survive the projection onto a display's colours
/// in most cases, small enough to start inside the cluster.
const SPLIT_STEP: f64 = 0.25;

/// Trains `size` codewords from scratch with the normal training path.
pub(crate) fn scratch(
    subject: Subject<'_>,
    size: usize,
    config: &CheckedTrainConfig,
) -> Result<Stage> {
    let mut cfg = config.get().clone();
    cfg.size = size;
    let t = train_constrained(subject.vectors, &cfg.check()?, subject.constraint, &|_| {})?;
    // Summed the same way as every grown stage, so sizes compare exactly.
    let distortion = assess(subject.vectors, &t.codewords)?.distortion;
    Ok(Stage {
        facts: TrainingFacts::from_report(&t.report),
        distortion,
        codewords: t.codewords,
        notices: t.report.notices,
    })
}

/// Grows `from` to `size` codewords: each of `config.restarts` tries splits
/// the codewords with the largest cluster distortion (doubling at most per
/// round, as LBG does) with its own seed, refines, and the lowest
/// distortion is kept. Never worse than `from`.
pub(crate) fn grow(
    subject: Subject<'_>,
    from: &Stage,
    size: usize,
    config: &CheckedTrainConfig,
) -> Result<Stage> {
    let cfg = config.get();
    let d = subject.vectors.dimension();
    let from_assessed = assess(subject.vectors, &from.codewords)?;
    // Restarts are independent (each has its own derived seed), so they run
    // side by side; the first of the lowest is kept.
    let tries: Vec<Stage> = (0..cfg.restarts)
        .into_par_iter()
        .with_max_len(1)
        .map(|r| -> Result<Stage> {
            let seed = derive_seed(derive_seed(cfg.seed, size as u64), r as u64);
            let mut rng = SeededRng::new(seed);
            let mut stage = from.clone();
            // The assessment of `stage`'s codewords, carried from round to round.
            let mut assessed: Option<Assessed> = None;
            while stage.size(d) < size {
                let current = assessed.as_ref().unwrap_or(&from_assessed);
                let opts = config.lloyd_options();
                match split_round(subject, &stage, current, size, opts, &mut rng)? {
                    Some((next, a)) => {
                        stage = next;
                        assessed = Some(a);
                    }
                    None => break,
                }
            }
            Ok(stage)
        })
        .collect::<Result<_>>()?;
    let mut stage = tries
        .into_iter()
        .reduce(|best, s| {
            if s.distortion < best.distortion {
                s
            } else {
                best
            }
        })
        .expect("at least one restart");
    let got = stage.size(d);
    stage.notices.clear();
    if got < size {
        stage.notices.push(format!(
            "only {got} distinct codewords could be placed; the codebook has {got} codewords instead of {size}"
        ));
    }
    stage.facts = TrainingFacts {
        seed: cfg.seed,
        restarts: cfg.restarts,
        seeding: Seeding::Split,
        vectors: subject.vectors.total_weight().round() as u64,
        distinct_vectors: subject.vectors.len() as u64,
        mse_scaled: stage.distortion / (subject.vectors.total_weight() * d as f64),
        ..stage.facts
    };
    Ok(stage)
}

/// Nearest-codeword labels and per-cluster figures of one codebook.
struct Assessed {
    labels: Vec<u32>,
    distortion: f64,
    /// Σ weight × ‖x − c‖² per cluster.
    cluster_error: Vec<f64>,
    /// Σ weight × (x_i − c_i)² per cluster and component.
    spread: Vec<f64>,
    /// Σ weight per cluster.
    weight: Vec<f64>,
    /// The member farthest from its codeword, per cluster.
    farthest: Vec<Option<usize>>,
}

/// Labels from the encoder (the choice encoding makes), errors from
/// explicit differences in f64, summed in vector order.
fn assess(vectors: &VectorSet, codewords: &[f32]) -> Result<Assessed> {
    let d = vectors.dimension();
    let k = codewords.len() / d;
    let labels = Encoder::new(codewords, d)?.encode(vectors)?;
    let mut a = Assessed {
        distortion: 0.0,
        cluster_error: vec![0.0; k],
        spread: vec![0.0; k * d],
        weight: vec![0.0; k],
        farthest: vec![None; k],
        labels: Vec::new(),
    };
    let mut far = vec![0.0f64; k];
    for (i, (x, &l)) in vectors.rows().zip(&labels).enumerate() {
        let j = l as usize;
        let c = &codewords[j * d..(j + 1) * d];
        let w = vectors.weight(i);
        let e = squared_error(x, c);
        a.distortion += w * e;
        a.cluster_error[j] += w * e;
        a.weight[j] += w;
        for (s, (&xv, &cv)) in a.spread[j * d..(j + 1) * d].iter_mut().zip(x.iter().zip(c)) {
            let diff = xv as f64 - cv as f64;
            *s += w * diff * diff;
        }
        if e > far[j] {
            far[j] = e;
            a.farthest[j] = Some(i);
        }
    }
    a.labels = labels;
    Ok(a)
}

/// One round: adds up to one new codeword per cluster (the clusters of
/// largest error first, never a fixed one), refines, and returns the result
/// with its assessment, or `None` when no codeword can be added (every
/// cluster is exact, or the projection leaves no free point). `a` is the
/// assessment of `stage`'s codewords.
fn split_round(
    subject: Subject<'_>,
    stage: &Stage,
    a: &Assessed,
    size: usize,
    opts: LloydOptions,
    rng: &mut SeededRng,
) -> Result<Option<(Stage, Assessed)>> {
    let v = subject.vectors;
    let d = v.dimension();
    let k = stage.size(d);
    let fixed = subject.constraint.fixed.len() / d;
    let mut order: Vec<usize> = (fixed..k).filter(|&j| a.cluster_error[j] > 0.0).collect();
    order.sort_by(|&x, &y| {
        a.cluster_error[y]
            .total_cmp(&a.cluster_error[x])
            .then(x.cmp(&y))
    });
    let key = |c: &[f32]| c.iter().map(|x| (x + 0.0).to_bits()).collect::<Vec<u32>>();
    let mut taken: HashSet<Vec<u32>> = stage.codewords.chunks_exact(d).map(key).collect();
    let mut init = stage.codewords.clone();
    let wanted = size - k;
    for &j in &order {
        if init.len() / d - k == wanted {
            break;
        }
        let c = &stage.codewords[j * d..(j + 1) * d];
        let step: Vec<f64> = (0..d)
            .map(|i| SPLIT_STEP * (a.spread[j * d + i] / a.weight[j]).sqrt() * rng.normal())
            .collect();
        let mut candidates: Vec<Vec<f32>> = [1.0, 2.0]
            .iter()
            .map(|m| {
                c.iter()
                    .zip(&step)
                    .map(|(&cv, s)| (cv as f64 + m * s) as f32)
                    .collect()
            })
            .collect();
        if let Some(f) = a.farthest[j] {
            candidates.push(v.row(f).to_vec());
        }
        for mut cand in candidates {
            if let Some(snap) = subject.constraint.snap {
                snap(&mut cand);
            }
            if taken.insert(key(&cand)) {
                init.extend_from_slice(&cand);
                break;
            }
        }
    }
    if init.len() == stage.codewords.len() {
        return Ok(None);
    }
    let start = assess(v, &init)?;
    let refined = lloyd_constrained(v, &init, &opts, subject.constraint)?;
    let refined = if subject.constraint.snap.is_none()
        && subject.constraint.fixed.is_empty()
        && moves_affordable(v, init.len() / d)
    {
        refine_by_moves(v, &refined, &opts, MOVE_PASSES)?
    } else {
        refined
    };
    let distinct = refined
        .codewords
        .chunks_exact(d)
        .map(key)
        .collect::<HashSet<_>>()
        .len()
        == refined.codewords.len() / d;
    let after = assess(v, &refined.codewords)?;
    let (codewords, kept, iterations, stopped_by) =
        if distinct && after.distortion <= start.distortion {
            (
                refined.codewords,
                after,
                refined.iterations,
                refined.stopped_by,
            )
        } else {
            (init, start, 0, StopReason::Converged)
        };
    let next = Stage {
        codewords,
        distortion: kept.distortion,
        facts: TrainingFacts {
            iterations,
            stopped_by,
            ..stage.facts.clone()
        },
        notices: Vec::new(),
    };
    Ok(Some((next, kept)))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kmeans::TrainConfig;

    fn blobs(seed: u64, n: usize) -> VectorSet {
        let mut rng = SeededRng::new(seed);
        let centres = [[0.0, 0.0], [4.0, 0.0], [0.0, 4.0], [4.0, 4.0], [2.0, 2.0]];
        let mut data = Vec::new();
        for i in 0..n {
            let c = centres[i % centres.len()];
            data.push((c[0] + 0.5 * rng.normal()) as f32);
            data.push((c[1] + 0.5 * rng.normal()) as f32);
        }
        VectorSet::new(2, data).unwrap().deduplicated()
    }

    #[test]
    fn growing_never_loses_and_reports_true_distortion() {
        let v = blobs(3, 3000);
        let subject = Subject {
            vectors: &v,
            constraint: Constraint::default(),
        };
        let cfg = TrainConfig::new(2).check().unwrap();
        let mut stage = scratch(subject, 2, &cfg).unwrap();
        for size in [3, 4, 7, 8, 16, 40] {
            let next = grow(subject, &stage, size, &cfg).unwrap();
            assert_eq!(next.size(2), size);
            assert!(next.distortion <= stage.distortion, "{size}");
            // The reported distortion is that of encoding with the codewords.
            let again = assess(&v, &next.codewords).unwrap().distortion;
            assert_eq!(again, next.distortion);
            stage = next;
        }
    }

    #[test]
    fn grown_is_close_to_trained_from_scratch() {
        let v = blobs(5, 4000);
        let subject = Subject {
            vectors: &v,
            constraint: Constraint::default(),
        };
        let cfg = TrainConfig::new(2).check().unwrap();
        let first = scratch(subject, 2, &cfg).unwrap();
        let grown = grow(subject, &first, 12, &cfg).unwrap();
        let fresh = scratch(subject, 12, &cfg).unwrap();
        assert!(
            grown.distortion <= fresh.distortion * 1.03,
            "grown {} vs fresh {}",
            grown.distortion,
            fresh.distortion
        );
    }

    #[test]
    fn stops_at_the_distinct_vectors_and_keeps_fixed_codewords() {
        let v = VectorSet::new(1, vec![0.0, 1.0, 2.0, 3.0, 3.0])
            .unwrap()
            .deduplicated();
        let fixed = [10.0f32];
        let subject = Subject {
            vectors: &v,
            constraint: Constraint {
                fixed: &fixed,
                snap: None,
            },
        };
        let cfg = TrainConfig::new(2).check().unwrap();
        let first = scratch(subject, 2, &cfg).unwrap();
        assert_eq!(first.codewords[0], 10.0);
        let grown = grow(subject, &first, 9, &cfg).unwrap();
        assert_eq!(grown.codewords[0], 10.0);
        assert_eq!(grown.size(1), 5);
        assert_eq!(grown.distortion, 0.0);
        assert_eq!(grown.notices.len(), 1);
    }
}
