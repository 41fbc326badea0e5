//! Was the stored vector rounded to bf16/f16 (check-values §7.3), and how far does the
//! rounding move the rotation angle at long positions?

use super::*;
use crate::analyze::precision::{round_bf16, round_f16};

pub(super) fn phase_errors(stored: &[f64], exact: &[f64], hints: &RotaryHints) -> Vec<PhaseError> {
    let max_err = stored
        .iter()
        .zip(exact)
        .map(|(s, e)| (s - e).abs())
        .fold(0.0, f64::max);
    let mut positions: Vec<usize> = PHASE_POSITIONS.to_vec();
    positions.extend(hints.declared_context);
    positions.extend(hints.original_context);
    positions.sort_unstable();
    positions.dedup();
    positions
        .into_iter()
        .map(|p| PhaseError {
            position: p,
            radians: p as f64 * max_err,
        })
        .collect()
}

/// Checks whether `stored` is the bf16 or f16 rounding of `exact` (check-values §7.3).
pub(super) fn precision_evidence(
    stored: &[f64],
    exact: &[f64],
    hints: &RotaryHints,
) -> Option<PrecisionEvidence> {
    // A generic f32 value is bf16-representable with probability 2⁻¹⁶, so requiring every
    // one of at least four values to be representable is a strong signal.
    if stored.len() < 4 || stored.len() != exact.len() {
        return None;
    }
    let as_bf16 = super::precision::round_bf16;
    let as_f16 = super::precision::round_f16;
    let is_f32_exact = stored
        .iter()
        .zip(exact)
        .all(|(s, e)| *s == (*e as f32) as f64);
    if is_f32_exact {
        return None;
    }
    let candidates: [(&str, &dyn Fn(f64) -> f64); 2] = [("bf16", &as_bf16), ("f16", &as_f16)];
    for (name, round) in candidates {
        if stored.iter().all(|s| round(*s) == *s) {
            let matching = stored
                .iter()
                .zip(exact)
                .filter(|(s, e)| round(**e) == **s)
                .count();
            // The stored values must also be close to the exact ones (within a few ULP),
            // otherwise they are representable for some other reason.
            let max_rel_error = stored
                .iter()
                .zip(exact)
                .map(|(s, e)| ((s - e) / e).abs())
                .fold(0.0, f64::max);
            if matching * 10 >= stored.len() * 9 && max_rel_error < 0.02 {
                return Some(PrecisionEvidence {
                    dtype: name.into(),
                    entries_matching_rounded_exact: matching,
                    entries: stored.len(),
                    max_rel_error,
                    phase_error: phase_errors(stored, exact, hints),
                });
            }
        }
    }
    None
}
