//! Checks of integer `position-ids` buffers.
//!
//! Some checkpoints carry the index buffer a model feeds to its position table (for
//! example `…embeddings.position_ids`, shape (1, n), saved while the buffer was
//! persistent). It is not a table: the useful question is only whether it still holds
//! the plain ramp `offset, offset+1, …, offset+n−1`. A buffer that does not would make
//! the model look up rows other than the ones its config suggests.

use serde::Serialize;

/// Result of checking an index buffer against a contiguous ramp.
#[derive(Debug, Clone, Serialize)]
pub struct PositionIdsCheck {
    /// True when every entry equals `offset + i` (an empty buffer is not contiguous).
    pub contiguous: bool,
    /// The first entry, taken as the ramp's offset (0 for an empty buffer).
    pub offset: i64,
    /// Number of entries.
    pub length: usize,
    /// Index of the first entry that breaks the ramp, `None` when there is none.
    pub first_mismatch: Option<usize>,
    /// Smallest and largest value held, `None` for an empty buffer.
    pub value_range: Option<(i64, i64)>,
}

/// Checks that `values` (the buffer flattened in storage order) is `offset + i`.
///
/// ```text
/// offset = values[0]
/// contiguous ⇔ values[i] = offset + i  for every i
/// ```
///
/// The ramp is what `arange(n).expand((1, -1))` writes (common practice in model code
/// that registers a `position_ids` buffer). Edge cases: an empty buffer is reported as
/// not contiguous with length 0 and no mismatch; a single entry is contiguous with that
/// entry as offset. Arithmetic is checked, so extreme values never overflow.
pub fn check_position_ids(values: &[i64]) -> PositionIdsCheck {
    let length = values.len();
    let Some(&offset) = values.first() else {
        return PositionIdsCheck {
            contiguous: false,
            offset: 0,
            length: 0,
            first_mismatch: None,
            value_range: None,
        };
    };
    let first_mismatch = values.iter().enumerate().position(|(i, &v)| {
        let expected = i64::try_from(i).ok().and_then(|i| offset.checked_add(i));
        expected != Some(v)
    });
    let min = values.iter().copied().min().unwrap_or(offset);
    let max = values.iter().copied().max().unwrap_or(offset);
    PositionIdsCheck {
        contiguous: first_mismatch.is_none(),
        offset,
        length,
        first_mismatch,
        value_range: Some((min, max)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_plain_arange_is_contiguous_from_zero() {
        // The buffer `arange(512).expand((1, -1))` of check-values §3.2 (BERT position_ids).
        let ids: Vec<i64> = (0..512).collect();
        let c = check_position_ids(&ids);
        assert!(c.contiguous);
        assert_eq!((c.offset, c.length, c.first_mismatch), (0, 512, None));
        assert_eq!(c.value_range, Some((0, 511)));
    }

    #[test]
    fn a_shifted_ramp_is_contiguous_with_its_offset() {
        // Invented: a ramp starting at 2, as tables with two leading special rows use.
        let ids: Vec<i64> = (2..10).collect();
        let c = check_position_ids(&ids);
        assert!(c.contiguous);
        assert_eq!(c.offset, 2);
    }

    #[test]
    fn a_broken_ramp_reports_its_first_mismatch() {
        let ids = [0, 1, 2, 2, 4];
        let c = check_position_ids(&ids);
        assert!(!c.contiguous);
        assert_eq!(c.first_mismatch, Some(3));
    }

    #[test]
    fn empty_single_and_extreme_buffers_do_not_panic() {
        let c = check_position_ids(&[]);
        assert!(!c.contiguous);
        assert_eq!(c.length, 0);
        let c = check_position_ids(&[7]);
        assert!(c.contiguous);
        assert_eq!(c.offset, 7);
        // i64::MAX + 1 would overflow: reported as a mismatch at index 1.
        let c = check_position_ids(&[i64::MAX, i64::MIN]);
        assert!(!c.contiguous);
        assert_eq!(c.first_mismatch, Some(1));
    }
}
