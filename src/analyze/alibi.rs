//! ALiBi: attention biases linear in distance, one slope per head, computed at run time
//! (no tensor is stored).

/// ALiBi head slopes (Press et al. 2022; check-values §6.9).
///
/// ```text
/// n a power of 2:  slope_h = 2^(−8h/n),  h = 1..n
/// otherwise:       c = 2^⌊log2 n⌋;  slopes(c) ++ every other slope of slopes(2c), first n−c
/// ```
///
/// Edge cases: 0 heads, or more than 65536 (a config error, not a model), gives an
/// empty vector.
pub fn alibi_slopes(n_heads: usize) -> Vec<f64> {
    fn power_of_two(n: usize) -> Vec<f64> {
        let start = 2f64.powf(-8.0 / n as f64);
        (1..=n).map(|h| start.powi(h as i32)).collect()
    }
    if n_heads == 0 || n_heads > 65_536 {
        return Vec::new();
    }
    if n_heads.is_power_of_two() {
        return power_of_two(n_heads);
    }
    let c = 1usize << n_heads.ilog2();
    let mut slopes = power_of_two(c);
    slopes.extend(alibi_slopes(2 * c).into_iter().step_by(2).take(n_heads - c));
    slopes
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn alibi_slopes_match_the_published_values() {
        // check-values §6.9.
        let s8 = alibi_slopes(8);
        let want8: Vec<f64> = (1..=8).map(|h| 2f64.powi(-h)).collect();
        assert_eq!(s8.len(), 8);
        for (a, b) in s8.iter().zip(&want8) {
            assert!((a - b).abs() < 1e-15);
        }
        let s16 = alibi_slopes(16);
        for (h, s) in s16.iter().enumerate() {
            assert!((s - 2f64.powf(-0.5 * (h + 1) as f64)).abs() < 1e-15);
        }
        let s12 = alibi_slopes(12);
        let mut want12 = want8.clone();
        want12.extend([-0.5, -1.5, -2.5, -3.5].map(|e| 2f64.powf(e)));
        assert_eq!(s12.len(), 12);
        for (a, b) in s12.iter().zip(&want12) {
            assert!((a - b).abs() < 1e-15, "{a} vs {b}");
        }
        assert!((alibi_slopes(32)[0] - 2f64.powf(-0.25)).abs() < 1e-15);
        assert!((alibi_slopes(64)[0] - 2f64.powf(-0.125)).abs() < 1e-15);
        assert!(alibi_slopes(0).is_empty());
        assert_eq!(alibi_slopes(1), vec![2f64.powi(-8)]);
    }
}
