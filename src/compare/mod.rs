//! The numerical core of `posaudit compare`: how a position table moved between two
//! checkpoints of one run, and how alike two tables of different runs are.
//!
//! A training run leaves a trail of checkpoints; the questions a person asks of them are
//! per position ("which rows moved, and by how much?", "which rows were never touched?")
//! and per table ("is this the same geometry, whatever the basis of the embedding
//! space?"). This module answers them with pure functions over `ndarray` views and
//! serialisable result structs; reading the checkpoints is the caller's job.
//!
//! - [`change`]: L2 change, relative change and cosine per row; the rows that moved most.
//! - [`unchanged`]: maximal runs of rows that are bit-identical or identical up to one
//!   common scale factor (decoupled weight decay without gradient).
//! - [`similarity`]: rotation-invariant comparison: principal angles between the leading
//!   left singular subspaces, linear CKA, orthogonal Procrustes residual, with chance levels.
//! - [`timeline`]: a memory-bounded running summary over three or more checkpoints.
//!
//! [`compare_step`] ties the first three together into the `steps` entry of the compare
//! JSON contract (`from`, `to`, `change`, `unchanged`, `subspace_similarity`).

pub mod change;
pub mod similarity;
pub mod timeline;
pub mod unchanged;

#[cfg(test)]
use crate::testutil;

use ndarray::{ArrayView2, s};
use serde::Serialize;

pub use change::{MovedRow, RowChange, most_moved, row_change};
pub use similarity::{
    ChanceLevel, Similarity, SimilarityOptions, linear_cka, principal_angles, procrustes_residual,
    similarity,
};
pub use timeline::{
    DEFAULT_MEDIAN_FRACTION, NoiseLevel, NoiseMethod, Timeline, TimelineSummary, estimate_noise,
};
pub use unchanged::{
    DECAY_ROUNDING_STEPS, UnchangedBounds, UnchangedRange, decay_tolerance, decay_unit_roundoff,
    range_pairs, rounding_tolerance, subnormal_floor, unchanged_ranges,
};

use crate::linalg::LinalgError;

/// Why two tables could not be compared.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CompareError {
    /// A table has no rows or no columns.
    #[error("{which} table is empty ({rows}x{cols})")]
    Empty {
        /// `first` or `second`.
        which: &'static str,
        /// Row count.
        rows: usize,
        /// Column count.
        cols: usize,
    },
    /// The two tables must have the same shape for a per-row comparison.
    #[error("shapes differ: {a_rows}x{a_cols} vs {b_rows}x{b_cols}")]
    ShapeMismatch {
        /// Rows of the first table.
        a_rows: usize,
        /// Columns of the first table.
        a_cols: usize,
        /// Rows of the second table.
        b_rows: usize,
        /// Columns of the second table.
        b_cols: usize,
    },
    /// A table holds NaN or infinite values.
    #[error("{which} table holds {count} non-finite values")]
    NonFinite {
        /// `first` or `second`.
        which: &'static str,
        /// How many entries are NaN or infinite.
        count: usize,
    },
    /// The input is valid but too small or too degenerate for this measure.
    #[error("not enough data: {0}")]
    NotEnoughData(String),
    /// An option is outside its valid range.
    #[error("invalid option: {0}")]
    InvalidOption(String),
    /// A change vector handed to a [`Timeline`] has the wrong length.
    #[error("change vector has {got} positions, the timeline has {expected}")]
    LengthMismatch {
        /// Positions fixed by the first step.
        expected: usize,
        /// Positions in the rejected step.
        got: usize,
    },
    /// The decomposition backend failed.
    #[error(transparent)]
    Linalg(#[from] LinalgError),
}

/// Rejects empty and non-finite tables; `which` names the table in the error.
pub(crate) fn check_table(t: ArrayView2<f64>, which: &'static str) -> Result<(), CompareError> {
    if t.nrows() == 0 || t.ncols() == 0 {
        return Err(CompareError::Empty {
            which,
            rows: t.nrows(),
            cols: t.ncols(),
        });
    }
    let count = t.iter().filter(|v| !v.is_finite()).count();
    if count > 0 {
        return Err(CompareError::NonFinite { which, count });
    }
    Ok(())
}

/// Checks both tables and that their shapes are equal.
pub(crate) fn check_pair(a: ArrayView2<f64>, b: ArrayView2<f64>) -> Result<(), CompareError> {
    check_table(a, "first")?;
    check_table(b, "second")?;
    if a.dim() != b.dim() {
        return Err(CompareError::ShapeMismatch {
            a_rows: a.nrows(),
            a_cols: a.ncols(),
            b_rows: b.nrows(),
            b_cols: b.ncols(),
        });
    }
    Ok(())
}

/// The common leading rows of two tables with the same width.
///
/// When a table was extended between checkpoints (more rows in the later one) only the
/// rows both hold can be compared position by position. Returns
/// [`CompareError::ShapeMismatch`] when the widths differ.
pub fn common_leading_rows<'a>(
    a: ArrayView2<'a, f64>,
    b: ArrayView2<'a, f64>,
) -> Result<(ArrayView2<'a, f64>, ArrayView2<'a, f64>), CompareError> {
    if a.ncols() != b.ncols() {
        return Err(CompareError::ShapeMismatch {
            a_rows: a.nrows(),
            a_cols: a.ncols(),
            b_rows: b.nrows(),
            b_cols: b.ncols(),
        });
    }
    let n = a.nrows().min(b.nrows());
    Ok((a.slice_move(s![..n, ..]), b.slice_move(s![..n, ..])))
}

/// Settings for [`compare_step`].
#[derive(Debug, Clone, Serialize)]
pub struct StepOptions {
    /// Bounds of the unchanged test ([`UnchangedBounds::storage`] of the storage dtype;
    /// see [`decay_tolerance`]).
    pub unchanged: UnchangedBounds,
    /// How many of the most-moved rows to list.
    pub most_moved: usize,
    /// Settings of the rotation-invariant similarity.
    pub similarity: SimilarityOptions,
}

impl Default for StepOptions {
    /// Tolerance for F32 storage, ten most-moved rows, default similarity settings.
    fn default() -> Self {
        StepOptions {
            unchanged: UnchangedBounds::storage(23),
            most_moved: 10,
            similarity: SimilarityOptions::default(),
        }
    }
}

/// One `steps` entry of the compare report: checkpoint `from` against checkpoint `to`.
///
/// The first five fields are the compare JSON contract; the rest are extras.
#[derive(Debug, Clone, Serialize)]
pub struct StepComparison {
    /// Index of the earlier checkpoint (order given on the command line).
    pub from: usize,
    /// Index of the later checkpoint.
    pub to: usize,
    /// L2 norm of the change of each row, ‖b_i − a_i‖, in the table's own units.
    pub change: Vec<f64>,
    /// Half-open row ranges `[start, end)` that are unchanged (bit-identical or one
    /// common scale factor in (0, 1]).
    pub unchanged: Vec<[usize; 2]>,
    /// Mean cos² of the principal angles between the leading left singular subspaces of
    /// the centred tables, in [0, 1]; null when it cannot be computed (see
    /// `similarity_unavailable`).
    pub subspace_similarity: Option<f64>,
    /// ‖b_i − a_i‖ / ‖a_i‖ per row; 0 for a zero row that stayed zero, null for a zero
    /// row that became non-zero.
    pub relative_change: Vec<Option<f64>>,
    /// Cosine between a_i and b_i per row; null when either row is zero.
    pub cosine: Vec<Option<f64>>,
    /// The rows with the largest L2 change, largest first.
    pub most_moved: Vec<MovedRow>,
    /// The unchanged ranges with their scale factor and residual.
    pub unchanged_detail: Vec<UnchangedRange>,
    /// The relative elementwise tolerance used for `unchanged`.
    pub unchanged_tolerance: f64,
    /// The absolute part of the elementwise bound used for `unchanged`.
    pub unchanged_absolute: f64,
    /// Full similarity record (angles, k and why, CKA, Procrustes, chance levels).
    pub similarity: Option<Similarity>,
    /// Why `similarity` is null, when it is.
    pub similarity_unavailable: Option<String>,
}

/// Compares two checkpoints' versions of one table, position by position and as a whole.
///
/// `a` is the table at checkpoint `from`, `b` at `to`; both must have the same shape
/// (use [`common_leading_rows`] when the row counts differ). Runs [`row_change`],
/// [`unchanged_ranges`], [`most_moved`] and [`similarity`]. A similarity that cannot be
/// computed (for example a table that is constant across positions) does not fail the
/// step: `subspace_similarity` is then null and `similarity_unavailable` says why.
///
/// Errors: [`CompareError::Empty`], [`CompareError::NonFinite`],
/// [`CompareError::ShapeMismatch`], [`CompareError::InvalidOption`].
pub fn compare_step(
    from: usize,
    to: usize,
    a: ArrayView2<f64>,
    b: ArrayView2<f64>,
    options: &StepOptions,
) -> Result<StepComparison, CompareError> {
    check_pair(a, b)?;
    let rows = row_change(a, b)?;
    let detail = unchanged_ranges(a, b, &options.unchanged)?;
    let moved = most_moved(&rows.change, &rows.relative_change, options.most_moved);
    let (sim, why) = match similarity(a, b, &options.similarity) {
        Ok(s) => (Some(s), None),
        Err(e @ CompareError::InvalidOption(_)) => return Err(e),
        Err(e) => (None, Some(e.to_string())),
    };
    Ok(StepComparison {
        from,
        to,
        change: rows.change,
        unchanged: range_pairs(&detail),
        subspace_similarity: sim.as_ref().map(|s| s.subspace_similarity),
        relative_change: rows.relative_change,
        cosine: rows.cosine,
        most_moved: moved,
        unchanged_detail: detail,
        unchanged_tolerance: options.unchanged.relative,
        unchanged_absolute: options.unchanged.absolute,
        similarity: sim,
        similarity_unavailable: why,
    })
}

#[cfg(test)]
mod tests {
    use super::testutil::{Rng, gaussian_table, round_f32};
    use super::*;

    #[test]
    fn a_step_serialises_with_the_contract_fields() {
        // Invented f32 table of 40 positions: rows 10..30 decayed by 0.999 (no gradient),
        // the rest trained. Contract: design.md "compare" JSON (from, to, change,
        // unchanged, subspace_similarity).
        let mut rng = Rng::new(21);
        let a = gaussian_table(&mut rng, 40, 32, 0.02).mapv(round_f32);
        let step = gaussian_table(&mut rng, 40, 32, 2e-3);
        let mut b = a.clone();
        for i in 0..40 {
            for j in 0..32 {
                b[[i, j]] = round_f32(if (10..30).contains(&i) {
                    0.999 * a[[i, j]]
                } else {
                    a[[i, j]] + step[[i, j]]
                });
            }
        }
        let s = compare_step(0, 1, a.view(), b.view(), &StepOptions::default()).unwrap();
        assert_eq!(s.unchanged, vec![[10, 30]]);
        assert_eq!(s.change.len(), 40);
        assert_eq!(s.most_moved.len(), 10);
        assert!(s.most_moved.iter().all(|m| !(10..30).contains(&m.position)));
        let json = serde_json::to_value(&s).unwrap();
        for key in ["from", "to", "change", "unchanged", "subspace_similarity"] {
            assert!(json.get(key).is_some(), "missing {key}");
        }
        assert_eq!(json["unchanged"], serde_json::json!([[10, 30]]));
        assert!(json["subspace_similarity"].as_f64().unwrap() > 0.9);

        // Constant tables: the step still works, similarity is null with a reason.
        let c = ndarray::Array2::from_elem((5, 3), 1.0);
        let s = compare_step(1, 2, c.view(), c.view(), &StepOptions::default()).unwrap();
        assert_eq!(s.unchanged, vec![[0, 5]]);
        assert!(s.subspace_similarity.is_none() && s.similarity_unavailable.is_some());
        let (x, y) = common_leading_rows(c.view(), a.slice(ndarray::s![.., ..3])).unwrap();
        assert_eq!((x.nrows(), y.nrows()), (5, 5));
    }

    #[test]
    fn a_four_checkpoint_run_gives_first_moves_and_convergence() {
        // Invented run of a 64x8 f32 table over 4 checkpoints, in the spirit of a
        // two-phase schedule (check-values.md §4.1: rows beyond the short length get
        // gradient only in the later phase):
        //   0->1: rows 0..32 trained, rows 32..64 only decayed by 0.999
        //   1->2: every row trained
        //   2->3: rows 0..16 trained, rows 16..64 only decayed by 0.999
        let mut rng = Rng::new(99);
        let mut tables = vec![gaussian_table(&mut rng, 64, 8, 0.02).mapv(round_f32)];
        let trained: [std::ops::Range<usize>; 3] = [0..32, 0..64, 0..16];
        for rows in &trained {
            let prev = tables.last().unwrap().clone();
            let step = gaussian_table(&mut rng, 64, 8, 1e-3);
            let next = ndarray::Array2::from_shape_fn((64, 8), |(i, j)| {
                round_f32(if rows.contains(&i) {
                    prev[[i, j]] + step[[i, j]]
                } else {
                    0.999 * prev[[i, j]]
                })
            });
            tables.push(next);
        }
        let mut t = Timeline::new(1);
        for s in 0..3 {
            let step = compare_step(
                s,
                s + 1,
                tables[s].view(),
                tables[s + 1].view(),
                &StepOptions::default(),
            )
            .unwrap();
            let expected_unchanged: Vec<[usize; 2]> = match s {
                0 => vec![[32, 64]],
                1 => vec![],
                _ => vec![[16, 64]],
            };
            assert_eq!(step.unchanged, expected_unchanged, "step {s}");
            let noise =
                estimate_noise(&step.change, &step.unchanged, DEFAULT_MEDIAN_FRACTION).unwrap();
            t.push_step(step.from, step.to, &step.change, noise.value)
                .unwrap();
        }
        let s = t.summary();
        assert_eq!(
            s.first_moved_ranges
                .iter()
                .map(|r| (r.start, r.end, r.first_moved))
                .collect::<Vec<_>>(),
            vec![(0, 32, Some(1)), (32, 64, Some(2))]
        );
        assert_eq!(s.still_moving, vec![[0, 16]]);
        assert_eq!(s.converged, vec![[16, 64]]);
        assert!(s.never_moved.is_empty());
    }

    fn value() -> impl proptest::strategy::Strategy<Value = f64> {
        use proptest::prelude::*;
        // Non-finite values are rare so that most tables reach the numerical code.
        prop_oneof![
            2 => Just(0.0),
            1 => Just(-0.0),
            1 => Just(f64::NAN),
            1 => Just(f64::INFINITY),
            2 => Just(1e300),
            2 => Just(-1e-310),
            2 => Just(0.5),
            40 => -1.0..1.0f64,
        ]
    }

    fn table() -> impl proptest::strategy::Strategy<Value = ndarray::Array2<f64>> {
        use proptest::prelude::*;
        (0usize..6, 0usize..5).prop_flat_map(|(n, d)| {
            proptest::collection::vec(value(), n * d)
                .prop_map(move |v| ndarray::Array2::from_shape_vec((n, d), v).unwrap())
        })
    }

    proptest::proptest! {
        /// Whatever the input (empty, one row, NaN, ±inf, huge, subnormal, mismatched
        /// shapes), the public functions return a value or an error and never panic;
        /// the values they return keep their documented ranges.
        #[test]
        fn never_panics_and_keeps_documented_ranges(a in table(), b in table(), scale in 0.0..1.0f64) {
            let b2 = a.mapv(|v| v * scale);
            for other in [&b, &b2] {
                if let Ok(s) = compare_step(0, 1, a.view(), other.view(), &StepOptions::default()) {
                    proptest::prop_assert_eq!(s.change.len(), a.nrows());
                    let mut last = 0;
                    for &[st, en] in &s.unchanged {
                        proptest::prop_assert!(st >= last && st < en && en <= a.nrows());
                        last = en;
                    }
                    if let Some(v) = s.subspace_similarity {
                        proptest::prop_assert!((0.0..=1.0).contains(&v));
                    }
                    if let Some(sim) = &s.similarity {
                        proptest::prop_assert!((0.0..=1.0).contains(&sim.cka));
                        proptest::prop_assert!(sim.principal_angles.iter().all(|t| (0.0..=std::f64::consts::FRAC_PI_2).contains(t)));
                    }
                    let _ = serde_json::to_string(&s).unwrap();
                    let mut t = Timeline::new(2);
                    if let Ok(noise) = estimate_noise(&s.change, &s.unchanged, DEFAULT_MEDIAN_FRACTION) {
                        let _ = t.push_step(0, 1, &s.change, noise.value);
                        let _ = t.push_step(1, 2, &s.change, noise.value);
                    }
                    let _ = t.summary();
                }
                let _ = similarity(a.view(), other.view(), &SimilarityOptions::default());
                let _ = linear_cka(a.view(), other.view());
                let _ = procrustes_residual(a.view(), other.view());
            }
        }
    }
}
