//! Agreement of the rotary vectors stored for several layers.

use ndarray::ArrayView1;
use serde::Serialize;

/// Agreement between the rotary vectors stored for several layers.
#[derive(Debug, Clone, Serialize)]
pub struct LayerAgreement {
    /// Number of vectors compared.
    pub count: usize,
    /// True when every vector is bit-identical to the first.
    pub identical: bool,
    /// Name of the vector the others are compared with (the first).
    pub reference: Option<String>,
    /// Vectors that differ from the reference.
    pub differing: Vec<LayerDifference>,
}

/// One vector that differs from the reference.
#[derive(Debug, Clone, Serialize)]
pub struct LayerDifference {
    /// Tensor name.
    pub name: String,
    /// Its length when it differs from the reference's.
    pub length_mismatch: Option<usize>,
    /// Largest absolute difference (NaN-aware: NaN vs number counts as infinite).
    pub max_abs_diff: f64,
    /// Largest relative difference against the reference value.
    pub max_rel_diff: f64,
}

/// Compares per-layer rotary vectors with the first one.
///
/// ```text
/// identical ⇔ bitwise equal (NaN equals NaN only with the same bits)
/// max_abs_diff = max_i |x_i − ref_i|,  max_rel_diff = max_i |x_i − ref_i| / |ref_i|
/// ```
///
/// Edge cases: an empty list is trivially identical; vectors of another length are
/// reported with `length_mismatch` and infinite differences.
pub fn compare_layers(vectors: &[(String, ArrayView1<f64>)]) -> LayerAgreement {
    let Some((ref_name, reference)) = vectors.first() else {
        return LayerAgreement {
            count: 0,
            identical: true,
            reference: None,
            differing: Vec::new(),
        };
    };
    let mut differing = Vec::new();
    for (name, v) in &vectors[1..] {
        if v.len() != reference.len() {
            differing.push(LayerDifference {
                name: name.clone(),
                length_mismatch: Some(v.len()),
                max_abs_diff: f64::INFINITY,
                max_rel_diff: f64::INFINITY,
            });
            continue;
        }
        if v.iter()
            .zip(reference.iter())
            .all(|(a, b)| a.to_bits() == b.to_bits())
        {
            continue;
        }
        let mut max_abs: f64 = 0.0;
        let mut max_rel: f64 = 0.0;
        for (a, b) in v.iter().zip(reference.iter()) {
            let diff = if a.is_nan() != b.is_nan() {
                f64::INFINITY
            } else if a.is_nan() {
                0.0
            } else {
                (a - b).abs()
            };
            max_abs = max_abs.max(diff);
            let rel = if *b != 0.0 {
                diff / b.abs()
            } else if diff > 0.0 {
                f64::INFINITY
            } else {
                0.0
            };
            max_rel = max_rel.max(rel);
        }
        differing.push(LayerDifference {
            name: name.clone(),
            length_mismatch: None,
            max_abs_diff: max_abs,
            max_rel_diff: max_rel,
        });
    }
    LayerAgreement {
        count: vectors.len(),
        identical: differing.is_empty(),
        reference: Some(ref_name.clone()),
        differing,
    }
}
