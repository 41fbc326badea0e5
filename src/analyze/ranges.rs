//! Half-open row ranges from a per-row boolean mask.
//!
//! Findings name table rows as half-open ranges `[start, end)` (design contract); every
//! analysis that flags rows turns its per-row verdicts into ranges through this one helper
//! so the convention cannot drift between modules.

/// The maximal runs of `true` in `mask` as half-open ranges `[start, end)`, in order.
///
/// ```text
/// mask  = [F, T, T, F, T]
/// runs  = [[1, 3], [4, 5]]
/// ```
///
/// An empty mask or a mask without `true` gives an empty list.
///
/// ```
/// use posaudit::analyze::ranges::ranges_from_mask;
/// assert_eq!(ranges_from_mask(&[false, true, true, false, true]), vec![[1, 3], [4, 5]]);
/// ```
pub fn ranges_from_mask(mask: &[bool]) -> Vec<[usize; 2]> {
    let mut out = Vec::new();
    let mut start: Option<usize> = None;
    for (i, &m) in mask.iter().enumerate() {
        match (m, start) {
            (true, None) => start = Some(i),
            (false, Some(s)) => {
                out.push([s, i]);
                start = None;
            }
            _ => {}
        }
    }
    if let Some(s) = start {
        out.push([s, mask.len()]);
    }
    out
}

/// The row indices `rows` (any order, repeats allowed) as merged half-open ranges.
///
/// ```
/// use posaudit::analyze::ranges::ranges_from_rows;
/// assert_eq!(ranges_from_rows([7, 2, 3, 3, 9]), vec![[2, 4], [7, 8], [9, 10]]);
/// ```
pub fn ranges_from_rows(rows: impl IntoIterator<Item = usize>) -> Vec<[usize; 2]> {
    let mut sorted: Vec<usize> = rows.into_iter().collect();
    sorted.sort_unstable();
    sorted.dedup();
    let mut out: Vec<[usize; 2]> = Vec::new();
    for r in sorted {
        match out.last_mut() {
            Some(last) if last[1] == r => last[1] = r + 1,
            _ => out.push([r, r + 1]),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn runs_touching_both_ends_are_closed_at_the_mask_length() {
        assert_eq!(ranges_from_mask(&[true, false, true]), vec![[0, 1], [2, 3]]);
        assert_eq!(ranges_from_mask(&[true, true]), vec![[0, 2]]);
    }

    #[test]
    fn rows_merge_into_the_same_ranges_as_their_mask() {
        let rows = [5, 1, 2, 9, 8, 2];
        let mut mask = vec![false; 10];
        for r in rows {
            mask[r] = true;
        }
        assert_eq!(ranges_from_rows(rows), ranges_from_mask(&mask));
        assert!(ranges_from_rows([]).is_empty());
    }

    #[test]
    fn empty_and_all_false_masks_give_no_ranges() {
        assert!(ranges_from_mask(&[]).is_empty());
        assert!(ranges_from_mask(&[false; 4]).is_empty());
    }
}
