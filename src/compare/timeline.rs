//! A running summary of how a table moved over three or more checkpoints.
//!
//! A long run can leave dozens of checkpoints of a table with hundreds of thousands of
//! rows; keeping every step's change vector would grow as steps × positions. The
//! [`Timeline`] is fed one step at a time and keeps only what the report shows:
//! per position the first step at which it moved beyond noise and its trailing run of
//! quiet steps (memory O(positions)), and a steps × bins heat map with at most
//! [`MAX_BINS`] position bins (memory O(steps · 256)).
//!
//! # Noise level
//! "Moved" means a change above the step's noise level, which [`estimate_noise`] sets:
//! - when the caller knows rows that did not change in this step (the `unchanged`
//!   ranges, bit-identical or decay-only), the noise level is the largest change among
//!   them: what rounding and weight decay alone do to a row. A row moving more than that
//!   received a gradient. When the known rows are bit-identical this is 0, and any change
//!   counts.
//! - otherwise a fixed fraction of the median row change (`median_fraction`, [`DEFAULT_MEDIAN_FRACTION`] = 0.05 by
//!   default: a row moving less than 5% of what the typical row moved this step is
//!   still). The median is robust to a minority of rows that moved a lot or not at all.
//!   This is our choice, not a published rule; it detects rows that stopped while the
//!   rest kept moving, not a whole table slowing down (the heat map shows that).

use crate::analyze::ranges::ranges_from_mask;
use serde::Serialize;

use super::CompareError;

/// Default `median_fraction` of [`estimate_noise`]: our choice, see the module docs.
pub const DEFAULT_MEDIAN_FRACTION: f64 = 0.05;

/// Most position bins the heat map keeps.
pub const MAX_BINS: usize = 256;

/// How a noise level was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum NoiseMethod {
    /// Largest change among rows known to be unchanged (bit-identical or decay-only).
    UnchangedRows,
    /// A fraction of the median row change.
    MedianFraction,
}

/// The change below which a row counts as not having moved in one step.
#[derive(Debug, Clone, Serialize)]
pub struct NoiseLevel {
    /// Threshold in the table's units of L2 row change.
    pub value: f64,
    /// How it was estimated.
    pub method: NoiseMethod,
    /// Rows the estimate rests on.
    pub rows_used: usize,
}

/// Noise level of one step's change vector (see the module docs for the rules).
///
/// ```text
/// unchanged rows known:  noise = max_{i ∈ unchanged} change_i
/// otherwise:             noise = median_fraction · median_i(change_i)
/// ```
///
/// `unchanged` holds half-open `[start, end)` ranges; parts beyond `change.len()` are
/// ignored. Errors: empty `change`, non-finite or negative entries, a
/// `median_fraction` outside [0, 1].
pub fn estimate_noise(
    change: &[f64],
    unchanged: &[[usize; 2]],
    median_fraction: f64,
) -> Result<NoiseLevel, CompareError> {
    check_change(change)?;
    if !(0.0..=1.0).contains(&median_fraction) {
        return Err(CompareError::InvalidOption(format!(
            "median fraction {median_fraction} is not in [0, 1]"
        )));
    }
    let known: Vec<f64> = unchanged
        .iter()
        .flat_map(|&[s, e]| s.min(change.len())..e.min(change.len()))
        .map(|i| change[i])
        .collect();
    if !known.is_empty() {
        return Ok(NoiseLevel {
            value: known.iter().copied().fold(0.0, f64::max),
            method: NoiseMethod::UnchangedRows,
            rows_used: known.len(),
        });
    }
    let mut sorted = change.to_vec();
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    let median = if n % 2 == 1 {
        sorted[n / 2]
    } else {
        0.5 * (sorted[n / 2 - 1] + sorted[n / 2])
    };
    Ok(NoiseLevel {
        value: median_fraction * median,
        method: NoiseMethod::MedianFraction,
        rows_used: n,
    })
}

fn check_change(change: &[f64]) -> Result<(), CompareError> {
    if change.is_empty() {
        return Err(CompareError::NotEnoughData("change vector is empty".into()));
    }
    let bad = change
        .iter()
        .filter(|v| !v.is_finite() || **v < 0.0)
        .count();
    if bad > 0 {
        return Err(CompareError::NonFinite {
            which: "change",
            count: bad,
        });
    }
    Ok(())
}

/// One step as the timeline recorded it.
#[derive(Debug, Clone, Serialize)]
pub struct TimelineStep {
    /// Earlier checkpoint index.
    pub from: usize,
    /// Later checkpoint index.
    pub to: usize,
    /// Noise level used for this step (table units of L2 row change).
    pub noise_level: f64,
    /// Positions whose change exceeded the noise level.
    pub moved: usize,
}

/// A half-open range of positions sharing one value.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FirstMovedRange {
    /// First position.
    pub start: usize,
    /// One past the last position.
    pub end: usize,
    /// `to` index of the step where these positions first moved; null if never.
    pub first_moved: Option<usize>,
}

/// The steps × bins heat map of row change.
#[derive(Debug, Clone, Serialize)]
pub struct Heatmap {
    /// `[start, end)` positions of each bin (at most 256 bins, near-equal sizes).
    pub bins: Vec<[usize; 2]>,
    /// Mean L2 row change per step (outer) and bin (inner), table units.
    pub mean: Vec<Vec<f64>>,
    /// Largest L2 row change per step and bin, so a single moving row is not averaged away.
    pub max: Vec<Vec<f64>>,
}

/// What the timeline found, ready for the report.
#[derive(Debug, Clone, Serialize)]
pub struct TimelineSummary {
    /// Rows of the table.
    pub positions: usize,
    /// The steps in the order fed.
    pub steps: Vec<TimelineStep>,
    /// Per position, the `to` index of the first step in which it moved; null if never.
    pub first_moved: Vec<Option<usize>>,
    /// The same, as ranges of consecutive positions with equal value.
    pub first_moved_ranges: Vec<FirstMovedRange>,
    /// Positions that moved at some step and stayed below noise for the last
    /// `quiet_window` steps, as `[start, end)` ranges.
    pub converged: Vec<[usize; 2]>,
    /// Positions above noise in the last step, as ranges.
    pub still_moving: Vec<[usize; 2]>,
    /// Positions never above noise in any step, as ranges.
    pub never_moved: Vec<[usize; 2]>,
    /// Positions inside the step's unchanged ranges (bit-identical, or the earlier row
    /// times the common weight-decay factor) in every recorded step: no gradient reached
    /// them anywhere in the compared window. They are never "moved" nor "converged".
    /// Empty when a step was recorded without its unchanged ranges.
    pub unchanged_throughout: Vec<[usize; 2]>,
    /// Trailing quiet steps needed to call a position converged.
    pub quiet_window: usize,
    /// Downsampled change matrix.
    pub heatmap: Heatmap,
}

/// Running, memory-bounded summary of a table over a sequence of checkpoint steps.
#[derive(Debug, Clone)]
pub struct Timeline {
    quiet_window: usize,
    positions: usize,
    bins: Vec<[usize; 2]>,
    steps: Vec<TimelineStep>,
    first_moved: Vec<Option<usize>>,
    quiet_streak: Vec<u32>,
    moved_last: Vec<bool>,
    unchanged_all: Vec<bool>,
    unchanged_known: bool,
    heat_mean: Vec<Vec<f64>>,
    heat_max: Vec<Vec<f64>>,
}

/// The runs of `true` in `flags` as half-open ranges (the shared helper of every
/// report's row ranges, [`ranges_from_mask`]).
fn ranges_where(flags: impl Iterator<Item = bool>) -> Vec<[usize; 2]> {
    ranges_from_mask(&flags.collect::<Vec<bool>>())
}

impl Timeline {
    /// An empty timeline; a position is "converged" after `quiet_window` (at least 1)
    /// consecutive trailing steps below noise.
    pub fn new(quiet_window: usize) -> Self {
        Timeline {
            quiet_window: quiet_window.max(1),
            positions: 0,
            bins: Vec::new(),
            steps: Vec::new(),
            first_moved: Vec::new(),
            quiet_streak: Vec::new(),
            moved_last: Vec::new(),
            unchanged_all: Vec::new(),
            unchanged_known: true,
            heat_mean: Vec::new(),
            heat_max: Vec::new(),
        }
    }

    /// Records one step: the L2 change of each row between checkpoints `from_idx` and
    /// `to_idx`, and the step's noise level (see [`estimate_noise`]). A row moved when
    /// `change > noise_level`.
    ///
    /// The first step fixes the number of positions; later steps with another length
    /// are rejected with [`CompareError::LengthMismatch`] and leave the timeline as it
    /// was. Empty, negative or non-finite changes and a negative or non-finite noise
    /// level are rejected too.
    pub fn push_step(
        &mut self,
        from_idx: usize,
        to_idx: usize,
        change_per_row: &[f64],
        noise_level: f64,
    ) -> Result<(), CompareError> {
        self.record(from_idx, to_idx, change_per_row, noise_level, None)
    }

    /// [`Timeline::push_step`] with the step's unchanged ranges (half-open, as
    /// [`super::unchanged_ranges`] finds them): rows inside them did not receive a
    /// gradient in this step, so they count as quiet whatever their change (weight decay
    /// alone moves a row by (1 − c)·‖a_i‖), and rows inside them in every step are
    /// reported as `unchanged_throughout`. Parts beyond the table are ignored.
    pub fn push_step_with_unchanged(
        &mut self,
        from_idx: usize,
        to_idx: usize,
        change_per_row: &[f64],
        noise_level: f64,
        unchanged: &[[usize; 2]],
    ) -> Result<(), CompareError> {
        self.record(
            from_idx,
            to_idx,
            change_per_row,
            noise_level,
            Some(unchanged),
        )
    }

    fn record(
        &mut self,
        from_idx: usize,
        to_idx: usize,
        change_per_row: &[f64],
        noise_level: f64,
        unchanged: Option<&[[usize; 2]]>,
    ) -> Result<(), CompareError> {
        check_change(change_per_row)?;
        if !(noise_level.is_finite() && noise_level >= 0.0) {
            return Err(CompareError::InvalidOption(format!(
                "noise level {noise_level} is not a finite non-negative number"
            )));
        }
        let n = change_per_row.len();
        if self.steps.is_empty() {
            self.positions = n;
            let nb = n.min(MAX_BINS);
            self.bins = (0..nb).map(|b| [b * n / nb, (b + 1) * n / nb]).collect();
            self.first_moved = vec![None; n];
            self.quiet_streak = vec![0; n];
            self.moved_last = vec![false; n];
            self.unchanged_all = vec![true; n];
        } else if n != self.positions {
            return Err(CompareError::LengthMismatch {
                expected: self.positions,
                got: n,
            });
        }
        let mut quiet = vec![false; n];
        match unchanged {
            Some(ranges) => {
                for &[s, e] in ranges {
                    for q in &mut quiet[s.min(n)..e.min(n)] {
                        *q = true;
                    }
                }
            }
            None => self.unchanged_known = false,
        }
        let mut moved_count = 0;
        for (i, &c) in change_per_row.iter().enumerate() {
            self.unchanged_all[i] &= quiet[i];
            let moved = c > noise_level && !quiet[i];
            self.moved_last[i] = moved;
            if moved {
                moved_count += 1;
                self.quiet_streak[i] = 0;
                if self.first_moved[i].is_none() {
                    self.first_moved[i] = Some(to_idx);
                }
            } else {
                self.quiet_streak[i] = self.quiet_streak[i].saturating_add(1);
            }
        }
        let (mean, max): (Vec<f64>, Vec<f64>) = self
            .bins
            .iter()
            .map(|&[s, e]| {
                let part = &change_per_row[s..e];
                let mean = part.iter().sum::<f64>() / part.len() as f64;
                (mean, part.iter().copied().fold(0.0, f64::max))
            })
            .unzip();
        self.heat_mean.push(mean);
        self.heat_max.push(max);
        self.steps.push(TimelineStep {
            from: from_idx,
            to: to_idx,
            noise_level,
            moved: moved_count,
        });
        Ok(())
    }

    /// Number of steps recorded.
    pub fn len(&self) -> usize {
        self.steps.len()
    }

    /// No step recorded yet.
    pub fn is_empty(&self) -> bool {
        self.steps.is_empty()
    }

    /// The summary for the report. With no step recorded every list is empty.
    pub fn summary(&self) -> TimelineSummary {
        let window = self.quiet_window as u32;
        let mut first_moved_ranges: Vec<FirstMovedRange> = Vec::new();
        for (i, &f) in self.first_moved.iter().enumerate() {
            match first_moved_ranges.last_mut() {
                Some(r) if r.first_moved == f => r.end = i + 1,
                _ => first_moved_ranges.push(FirstMovedRange {
                    start: i,
                    end: i + 1,
                    first_moved: f,
                }),
            }
        }
        TimelineSummary {
            positions: self.positions,
            steps: self.steps.clone(),
            first_moved: self.first_moved.clone(),
            first_moved_ranges,
            converged: ranges_where(
                self.first_moved
                    .iter()
                    .zip(&self.quiet_streak)
                    .map(|(f, &q)| f.is_some() && q >= window),
            ),
            still_moving: ranges_where(self.moved_last.iter().copied()),
            never_moved: ranges_where(self.first_moved.iter().map(Option::is_none)),
            unchanged_throughout: if self.unchanged_known {
                ranges_where(self.unchanged_all.iter().copied())
            } else {
                Vec::new()
            },
            quiet_window: self.quiet_window,
            heatmap: Heatmap {
                bins: self.bins.clone(),
                mean: self.heat_mean.clone(),
                max: self.heat_max.clone(),
            },
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_noise_and_unchanged_rows_noise_follow_their_rules() {
        // Invented change vector; median of [0, 1, 2, 3, 10] is 2.
        let c = [0.0, 1.0, 2.0, 3.0, 10.0];
        let n = estimate_noise(&c, &[], 0.05).unwrap();
        assert_eq!(n.method, NoiseMethod::MedianFraction);
        assert!((n.value - 0.1).abs() < 1e-15);
        let n = estimate_noise(&c, &[[0, 2]], 0.05).unwrap();
        assert_eq!(n.method, NoiseMethod::UnchangedRows);
        assert_eq!((n.value, n.rows_used), (1.0, 2));
        assert!(estimate_noise(&[], &[], 0.05).is_err());
        assert!(estimate_noise(&[f64::NAN], &[], 0.05).is_err());
    }

    #[test]
    fn rows_unchanged_in_every_step_are_quiet_whatever_their_change() {
        // Invented 6-position run, 3 steps: rows 4..6 are decay-only every step, and
        // their change (0.5, from a large norm) exceeds the noise level 0.1; rows 2..4
        // are decay-only in the first two steps and trained in the last.
        let mut t = Timeline::new(1);
        let c = [1.0, 1.0, 0.05, 0.05, 0.5, 0.5];
        t.push_step_with_unchanged(0, 1, &c, 0.1, &[[2, 6]])
            .unwrap();
        t.push_step_with_unchanged(1, 2, &c, 0.1, &[[2, 6]])
            .unwrap();
        let c = [1.0, 1.0, 1.0, 1.0, 0.5, 0.5];
        t.push_step_with_unchanged(2, 3, &c, 0.1, &[[4, 6], [9, 12]])
            .unwrap();
        let s = t.summary();
        assert_eq!(s.unchanged_throughout, vec![[4, 6]]);
        assert_eq!(s.never_moved, vec![[4, 6]]);
        assert!(s.converged.is_empty(), "{:?}", s.converged);
        assert_eq!(s.still_moving, vec![[0, 4]]);
        // A step without unchanged information: nothing is known to be unchanged throughout.
        t.push_step(3, 4, &c, 0.1).unwrap();
        assert!(t.summary().unchanged_throughout.is_empty());
    }

    #[test]
    fn timeline_tracks_first_move_convergence_and_bins() {
        // Invented 1000-position run over 4 checkpoints (3 steps):
        // rows 0..100 move in every step; rows 100..500 move in step 0->1 only;
        // rows 500..900 start moving at step 1->2 and keep moving; rows 900..1000 never.
        let n = 1000;
        let mut t = Timeline::new(2);
        for step in 0..3 {
            let c: Vec<f64> = (0..n)
                .map(|i| match i {
                    0..100 => 1.0,
                    100..500 if step == 0 => 0.5,
                    500..900 if step >= 1 => 0.25,
                    _ => 0.0,
                })
                .collect();
            t.push_step(step, step + 1, &c, 1e-3).unwrap();
        }
        let s = t.summary();
        assert_eq!(s.first_moved[0], Some(1));
        assert_eq!(s.first_moved[100], Some(1));
        assert_eq!(s.first_moved[500], Some(2));
        assert_eq!(s.first_moved[950], None);
        assert_eq!(
            s.first_moved_ranges
                .iter()
                .map(|r| (r.start, r.end, r.first_moved))
                .collect::<Vec<_>>(),
            vec![(0, 500, Some(1)), (500, 900, Some(2)), (900, 1000, None)]
        );
        assert_eq!(s.converged, vec![[100, 500]]);
        assert_eq!(s.still_moving, vec![[0, 100], [500, 900]]);
        assert_eq!(s.never_moved, vec![[900, 1000]]);
        assert_eq!(s.heatmap.bins.len(), 256);
        assert_eq!(s.heatmap.mean.len(), 3);
        // bins cover 0..1000 without gaps
        assert_eq!(s.heatmap.bins[0][0], 0);
        assert_eq!(s.heatmap.bins[255][1], 1000);
        assert!(s.heatmap.bins.windows(2).all(|w| w[0][1] == w[1][0]));
        // bin 0 (rows 0..3) moved by 1.0 in every step
        assert!(s.heatmap.mean.iter().all(|row| row[0] == 1.0));
        assert_eq!(
            t.push_step(3, 4, &[1.0; 10], 0.0),
            Err(CompareError::LengthMismatch {
                expected: 1000,
                got: 10
            })
        );
        assert_eq!(t.len(), 3);
    }
}
