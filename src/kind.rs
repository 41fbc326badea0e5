//! The kinds of position table: a closed set of contract strings, below every layer
//! (the checkpoint index holds caller-given kinds; the detector decides the others).

use serde::Serialize;

/// The kinds of position table (contract strings).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Kind {
    /// One trained vector per position.
    #[serde(rename = "learned-absolute")]
    LearnedAbsolute,
    /// The sine/cosine formula, stored as a tensor.
    #[serde(rename = "fixed-sinusoidal")]
    FixedSinusoidal,
    /// A vision patch-position table laid out on a grid.
    #[serde(rename = "learned-grid-2d")]
    LearnedGrid2d,
    /// Learned bias per relative-distance bucket and head.
    #[serde(rename = "relative-bias")]
    RelativeBias,
    /// Stored rotary inverse frequencies or per-dimension factors.
    #[serde(rename = "rotary-frequencies")]
    RotaryFrequencies,
    /// An integer index buffer.
    #[serde(rename = "position-ids")]
    PositionIds,
}

impl Kind {
    /// Every kind, in the order the documentation lists them.
    pub const ALL: [Kind; 6] = [
        Kind::LearnedAbsolute,
        Kind::FixedSinusoidal,
        Kind::LearnedGrid2d,
        Kind::RelativeBias,
        Kind::RotaryFrequencies,
        Kind::PositionIds,
    ];

    /// The contract string of the kind.
    pub fn as_str(self) -> &'static str {
        match self {
            Kind::LearnedAbsolute => "learned-absolute",
            Kind::FixedSinusoidal => "fixed-sinusoidal",
            Kind::LearnedGrid2d => "learned-grid-2d",
            Kind::RelativeBias => "relative-bias",
            Kind::RotaryFrequencies => "rotary-frequencies",
            Kind::PositionIds => "position-ids",
        }
    }
}
