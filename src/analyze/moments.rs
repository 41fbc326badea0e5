//! Optimizer state as direct evidence of which rows received a gradient.
//!
//! Adam and AdamW keep, per parameter entry, an exponential average of the squared
//! gradient, `v_t = β₂·v_{t−1} + (1 − β₂)·g_t²`, starting from `v_0 = 0` (Kingma & Ba
//! 2015, Algorithm 1; torch.optim.Adam/AdamW store it as `exp_avg_sq`). A row whose
//! gradient was zero at every step keeps `v = 0` exactly; any nonzero gradient makes
//! it positive (until it underflows, after thousands of steps without gradient at
//! β₂ = 0.999). So rows whose second moment is exactly zero in every entry never
//! received a gradient since the optimizer state was created.

use ndarray::ArrayView2;
use serde::Serialize;

/// What the optimizer state says about a table's rows, against the statistical verdict.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MomentEvidence {
    /// The second-moment tensor read (e.g. `optimizer.state.1.exp_avg_sq`).
    pub tensor: String,
    /// Rows whose second moment is exactly zero in every entry: never a gradient.
    pub no_gradient_rows: Vec<[usize; 2]>,
    /// Of those, rows the statistical verdict did not call untrained.
    pub missed_by_statistics: Vec<[usize; 2]>,
    /// Rows the statistical verdict called untrained that did receive gradients.
    pub contradicted_by_moments: Vec<[usize; 2]>,
}

/// Compares the zero-moment rows with the statistical untrained ranges of a table of
/// `rows` rows.
pub fn evidence(
    tensor: &str,
    second_moment: ArrayView2<f64>,
    untrained: &[[usize; 2]],
) -> MomentEvidence {
    let n = second_moment.nrows();
    let zero = zero_rows(second_moment);
    let inside = |ranges: &[[usize; 2]], r: usize| ranges.iter().any(|x| x[0] <= r && r < x[1]);
    let missed = crate::analyze::ranges::ranges_from_rows(
        (0..n).filter(|&r| inside(&zero, r) && !inside(untrained, r)),
    );
    let contradicted = crate::analyze::ranges::ranges_from_rows(
        (0..n).filter(|&r| inside(untrained, r) && !inside(&zero, r)),
    );
    MomentEvidence {
        tensor: tensor.to_string(),
        no_gradient_rows: zero,
        missed_by_statistics: missed,
        contradicted_by_moments: contradicted,
    }
}

/// Half-open ranges of the rows whose every entry is exactly 0.0.
pub fn zero_rows(second_moment: ArrayView2<f64>) -> Vec<[usize; 2]> {
    let zero: Vec<bool> = second_moment
        .rows()
        .into_iter()
        .map(|r| r.iter().all(|&v| v == 0.0))
        .collect();
    crate::analyze::ranges::ranges_from_mask(&zero)
}

/// The second-moment tensor of a parameter among the optimizer-state tensor names:
/// the one name ending in `exp_avg_sq` whose shape equals `shape`. None when there is
/// none or when several parameters of that shape make the match ambiguous (the state
/// is keyed by parameter index, not by name).
pub fn second_moment_for<'a>(
    shape: &[usize],
    candidates: impl Iterator<Item = (&'a str, &'a [usize])>,
) -> Option<&'a str> {
    let mut found = candidates.filter(|(n, s)| n.ends_with("exp_avg_sq") && *s == shape);
    let first = found.next()?;
    found.next().is_none().then_some(first.0)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn zero_rows_are_exactly_zero_rows() {
        let v = array![[0.0, 0.0], [1e-30, 0.0], [0.0, 0.0], [0.0, 0.0], [2.0, 3.0]];
        assert_eq!(zero_rows(v.view()), vec![[0, 1], [2, 4]]);
    }

    #[test]
    fn an_ambiguous_shape_gives_no_match() {
        let s1 = [4usize, 2];
        let s2 = [3usize, 2];
        let one = [
            ("optimizer.state.1.exp_avg_sq", &s1[..]),
            ("optimizer.state.2.exp_avg_sq", &s2[..]),
        ];
        assert_eq!(
            second_moment_for(&[4, 2], one.into_iter()),
            Some("optimizer.state.1.exp_avg_sq")
        );
        let two = [
            ("optimizer.state.1.exp_avg_sq", &s1[..]),
            ("optimizer.state.3.exp_avg_sq", &s1[..]),
        ];
        assert_eq!(second_moment_for(&[4, 2], two.into_iter()), None);
        let first_moment = [("optimizer.state.1.exp_avg", &s1[..])];
        assert_eq!(second_moment_for(&[4, 2], first_moment.into_iter()), None);
    }
}
