//! The singular-value spectrum of a mean-centred table and its leading components.
//!
//! Trained and fixed position tables are smooth in position and concentrate their
//! energy in few directions; tables still at random initial values spread it evenly
//! (effective rank ≈ 457 for an i.i.d. Gaussian 512×768 table against ≈ 109 for the
//! Vaswani sinusoid of the same shape, check-values §1.3 and §8.1). The leading
//! components, as functions of position, are what the wave analysis then looks at.

use ndarray::ArrayView2;
use serde::Serialize;

use crate::linalg::{self, LinalgError};

/// The `k` values at which [`Spectrum::energy_top_k`] is reported (clamped to the rank).
pub const ENERGY_KS: [usize; 6] = [1, 2, 4, 8, 16, 32];

/// Share of the total energy in the leading `k` singular values.
#[derive(Debug, Clone, Serialize)]
pub struct EnergyFraction {
    /// Number of leading singular values.
    pub k: usize,
    /// Σ_{i<k} σᵢ² / Σ σᵢ², in [0, 1].
    pub fraction: f64,
}

/// Spectrum of a mean-centred table.
#[derive(Debug, Clone, Serialize)]
pub struct Spectrum {
    /// Rows (positions) of the analysed table.
    pub rows: usize,
    /// Columns (embedding dimensions) of the analysed table.
    pub cols: usize,
    /// All min(rows, cols) singular values of the centred table, non-increasing, in the
    /// table's units.
    pub singular_values: Vec<f64>,
    /// Roy–Vetterli effective rank, between 1 and the rank (0 for an all-zero table),
    /// from the values above `resolution` (the others count as zero).
    pub effective_rank: f64,
    /// Energy fraction for k in [`ENERGY_KS`], clamped to the number of singular values,
    /// without repeats; empty when the centred table is all zero.
    pub energy_top_k: Vec<EnergyFraction>,
    /// Singular values below this are rounding noise of the method (Gram-matrix
    /// eigenvalues, see `linalg::gram_spectrum`): `sqrt(min(rows, cols)·ε)·σ₁`. Values
    /// above it carry a relative error of order `ε·(σ₁/σ)²`.
    pub resolution: f64,
    /// Leading principal components as functions of position: `components[c][i]` is
    /// `σ_c · u_c[i]`, the coordinate of centred row i along the c-th right singular
    /// vector, in the table's units. Sign fixed so the largest-magnitude entry is positive.
    pub components: Vec<Vec<f64>>,
}

/// Spectrum of `table` (positions × dim) after subtracting each column's mean.
///
/// ```text
/// X̃ = X − 1·x̄ᵀ            x̄_j = mean_i x[i, j]
/// X̃ = U Σ Vᵀ              σ₁ ≥ σ₂ ≥ … ≥ 0
/// energy(k) = Σ_{i≤k} σᵢ² / Σ σᵢ²
/// component_c(i) = σ_c·U[i, c] = (X̃ V)[i, c]      (principal component scores)
/// ```
///
/// `k` leading components are returned (clamped to min(rows, cols)). The decomposition
/// goes through [`crate::linalg::gram_spectrum`]: eigenvalues of the centred Gram
/// matrix, no centred copy of the table; small singular values carry the relative error
/// `ε·(σ₁/σ)²` documented there, far below what the effective rank, the energy fractions
/// or a plot can show. Errors: an empty table gives
/// [`LinalgError::Empty`], NaN or infinities give [`LinalgError::NonFinite`] (use
/// `hygiene::finite_rows` first). A single row centres to zero: one singular value 0,
/// effective rank 0, no energy fractions, a zero component.
pub fn spectrum(table: ArrayView2<f64>, k: usize) -> Result<Spectrum, LinalgError> {
    let (rows, cols) = table.dim();
    let centred = linalg::gram_spectrum(table, k, linalg::Centring::Columns)?;
    let resolution = centred.resolution;
    let dec = centred.decomposition;
    // Values below the resolution are rounding noise of the method: they count as zero
    // in the summaries (their true size is somewhere between 0 and the resolution).
    let resolved: Vec<f64> = dec
        .singular_values
        .iter()
        .map(|&s| if s > resolution { s } else { 0.0 })
        .collect();
    let total: f64 = resolved.iter().map(|s| s * s).sum();
    let mut energy_top_k: Vec<EnergyFraction> = Vec::new();
    if total > 0.0 {
        for kk in ENERGY_KS {
            let kk = kk.min(dec.singular_values.len());
            if energy_top_k.last().is_some_and(|e| e.k == kk) {
                continue;
            }
            let part: f64 = resolved[..kk].iter().map(|s| s * s).sum();
            energy_top_k.push(EnergyFraction {
                k: kk,
                fraction: (part / total).min(1.0),
            });
        }
    }
    let components = (0..dec.left.ncols())
        .map(|c| {
            let s = dec.singular_values[c];
            dec.left.column(c).iter().map(|u| u * s).collect()
        })
        .collect();
    Ok(Spectrum {
        rows,
        cols,
        effective_rank: effective_rank(&resolved),
        singular_values: dec.singular_values,
        resolution,
        energy_top_k,
        components,
    })
}

/// Effective rank of Roy & Vetterli (2007, *The effective rank: a measure of effective
/// dimensionality*, EUSIPCO, pp. 606–610); check-values §8.1.
///
/// ```text
/// p_i   = σ_i / Σ_j σ_j
/// erank = exp(−Σ_i p_i ln p_i)        (terms with p_i = 0 contribute 0)
/// 1 ≤ erank ≤ number of non-zero σ_i
/// ```
///
/// Non-finite and negative entries are ignored. Returns 0.0 when no positive value is
/// left (empty or all-zero input), where the measure is undefined.
pub fn effective_rank(singular_values: &[f64]) -> f64 {
    let pos: Vec<f64> = singular_values
        .iter()
        .copied()
        .filter(|s| s.is_finite() && *s > 0.0)
        .collect();
    let sum: f64 = pos.iter().sum();
    if pos.is_empty() || sum <= 0.0 || !sum.is_finite() {
        return 0.0;
    }
    let entropy: f64 = pos
        .iter()
        .map(|s| {
            let p = s / sum;
            if p > 0.0 { -p * p.ln() } else { 0.0 }
        })
        .sum();
    entropy.exp()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array2, array};

    #[test]
    fn effective_rank_of_equal_values_is_their_count() {
        // Roy & Vetterli 2007: erank equals r when the r non-zero values are equal.
        assert!((effective_rank(&[2.0; 5]) - 5.0).abs() < 1e-12);
        assert!((effective_rank(&[3.0, 0.0, 0.0]) - 1.0).abs() < 1e-12);
        assert_eq!(effective_rank(&[]), 0.0);
        assert_eq!(effective_rank(&[0.0, f64::NAN]), 0.0);
        // p = [0.75, 0.25]: exp(−(0.75 ln 0.75 + 0.25 ln 0.25)) = 1.7547654... (by hand)
        let e = effective_rank(&[3.0, 1.0]);
        let want = (-(0.75f64 * 0.75f64.ln() + 0.25 * 0.25f64.ln())).exp();
        assert!((e - want).abs() < 1e-14);
    }

    #[test]
    fn rank_one_table_has_all_energy_in_one_component() {
        // Invented: row i = (i − 1.5)·[1, 2, 2]: centred it is rank one, σ₁ = sqrt(5)·3.
        let t = Array2::from_shape_fn((4, 3), |(i, j)| (i as f64 - 1.5) * [1.0, 2.0, 2.0][j] + 7.0);
        let s = spectrum(t.view(), 2).unwrap();
        assert!((s.singular_values[0] - 5f64.sqrt() * 3.0).abs() < 1e-12);
        assert!(s.singular_values[1] < 1e-7);
        assert!((s.effective_rank - 1.0).abs() < 1e-6);
        assert_eq!(
            s.energy_top_k.iter().map(|e| e.k).collect::<Vec<_>>(),
            vec![1, 2, 3]
        );
        assert!((s.energy_top_k[0].fraction - 1.0).abs() < 1e-12);
        // component 0 = σ·u = coordinates along v = ±(i − 1.5)·3
        let c0 = &s.components[0];
        for (i, v) in c0.iter().enumerate() {
            assert!((v.abs() - (i as f64 - 1.5).abs() * 3.0).abs() < 1e-12);
        }
    }

    #[test]
    fn degenerate_tables() {
        assert!(matches!(
            spectrum(Array2::<f64>::zeros((0, 3)).view(), 2),
            Err(LinalgError::Empty(0, 3))
        ));
        assert!(matches!(
            spectrum(array![[f64::NAN, 1.0]].view(), 2),
            Err(LinalgError::NonFinite)
        ));
        let one = spectrum(array![[1.0, 2.0, 3.0]].view(), 8).unwrap();
        assert_eq!(one.singular_values, vec![0.0]);
        assert_eq!(one.effective_rank, 0.0);
        assert!(one.energy_top_k.is_empty());
        assert_eq!(one.components, vec![vec![0.0]]);
        let constant = spectrum(Array2::from_elem((5, 3), 2.5).view(), 2).unwrap();
        assert!(constant.singular_values.iter().all(|&s| s == 0.0));
    }
}
