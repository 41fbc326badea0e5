//! Sums of lagged products along positions, by FFT: the shared kernel of the locality
//! profile (row-normalised table) and the autocorrelation (column-centred table).
//!
//! A direct sum costs `n·d·K` for K lags; through the Wiener–Khinchin relation it costs
//! `d/2` FFTs of length `L ≥ n + K` and one inverse FFT, whatever K is.

use rustfft::{FftPlanner, num_complex::Complex};

/// Columns gathered per pass (a cache line of f64 values: the table is read row by row).
const GATHER: usize = 8;

/// `S(k) = Σ_j Σ_{i=0}^{n−1−k} y(i, j)·y(i+k, j)` for k = 0..=`max_lag` (clamped to
/// n − 1), where `y(i, j)` is given by the caller for an n×d array.
///
/// ```text
/// Y_j = FFT_L(y(·, j) zero-padded to L)          L = next power of two ≥ n + K
/// P(f) = Σ_j |Y_j(f)|²                            (power spectra summed over columns)
/// S(k) = IFFT_L(P)(k) / L                         (no wrap-around since L ≥ n + K)
/// ```
///
/// Two real columns share one complex transform, `z = a + i·b`, with
/// `|A(f)|² + |B(f)|² = (|Z(f)|² + |Z(L−f)|²)/2`. The result agrees with the direct
/// sum to rounding of order `ε·log₂L·Σ y²` (absolute). `n == 0` or `d == 0` gives zeros.
pub(crate) fn lagged_sums(
    n: usize,
    d: usize,
    y: impl Fn(usize, usize) -> f64,
    max_lag: usize,
) -> Vec<f64> {
    let kmax = max_lag.min(n.saturating_sub(1));
    if n == 0 || d == 0 {
        return vec![0.0; kmax + 1];
    }
    let len = (n + kmax).next_power_of_two();
    let mut planner = FftPlanner::<f64>::new();
    let forward = planner.plan_fft_forward(len);
    let mut power = vec![0.0f64; len];
    let mut gathered = vec![0.0f64; n * GATHER];
    let mut buf = vec![Complex::new(0.0, 0.0); len];
    let mut scratch = vec![Complex::new(0.0, 0.0); forward.get_inplace_scratch_len()];
    for start in (0..d).step_by(GATHER) {
        let w = GATHER.min(d - start);
        for i in 0..n {
            for c in 0..w {
                gathered[i * GATHER + c] = y(i, start + c);
            }
        }
        for pair in (0..w).step_by(2) {
            let second = pair + 1 < w;
            for (i, z) in buf.iter_mut().enumerate() {
                *z = if i < n {
                    let b = if second {
                        gathered[i * GATHER + pair + 1]
                    } else {
                        0.0
                    };
                    Complex::new(gathered[i * GATHER + pair], b)
                } else {
                    Complex::new(0.0, 0.0)
                };
            }
            forward.process_with_scratch(&mut buf, &mut scratch);
            for (f, p) in power.iter_mut().enumerate() {
                let mirror = buf[(len - f) % len];
                *p += 0.5 * (buf[f].norm_sqr() + mirror.norm_sqr());
            }
        }
    }
    let inverse = planner.plan_fft_inverse(len);
    let mut spectrum: Vec<Complex<f64>> = power.iter().map(|&p| Complex::new(p, 0.0)).collect();
    inverse.process(&mut spectrum);
    spectrum[..=kmax]
        .iter()
        .map(|z| z.re / len as f64)
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_the_direct_sum_for_odd_and_even_widths() {
        // Invented values; the reference is the definition summed directly.
        for (n, d) in [(1usize, 1usize), (2, 3), (37, 5), (100, 8), (64, 17)] {
            let y = |i: usize, j: usize| ((i * 31 + j * 17) % 13) as f64 - 6.0 + 0.1 * j as f64;
            let k = 40;
            let got = lagged_sums(n, d, y, k);
            assert_eq!(got.len(), k.min(n - 1) + 1);
            for (lag, g) in got.iter().enumerate() {
                let want: f64 = (0..d)
                    .map(|j| (0..n - lag).map(|i| y(i, j) * y(i + lag, j)).sum::<f64>())
                    .sum();
                assert!(
                    (g - want).abs() <= 1e-9 * want.abs().max(1.0),
                    "{n}x{d} lag {lag}"
                );
            }
        }
    }

    #[test]
    fn empty_input_gives_zeros() {
        assert_eq!(lagged_sums(0, 4, |_, _| 1.0, 3), vec![0.0]);
        assert_eq!(lagged_sums(5, 0, |_, _| 1.0, 3), vec![0.0; 4]);
    }
}
