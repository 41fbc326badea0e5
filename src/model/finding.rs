//! Findings: what a report tells a reader to look at, with the numbers behind it and
//! what those numbers cannot tell.

use serde::Serialize;

/// How serious a finding is. Ordered: `info < warning < error`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    /// Worth knowing; nothing to act on by itself.
    Info,
    /// Probably needs attention before relying on the table.
    Warning,
    /// The table is not what it claims, or cannot be trusted as stored.
    Error,
}

impl Severity {
    /// The lowercase name.
    pub fn as_str(self) -> &'static str {
        match self {
            Severity::Info => "info",
            Severity::Warning => "warning",
            Severity::Error => "error",
        }
    }
}

macro_rules! finding_codes {
    ($($(#[$doc:meta])* $variant:ident => $text:literal,)*) => {
        /// The stable code of a finding (contract strings: design.md "Finding codes";
        /// README "How to read the findings" explains each).
        #[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
        pub enum FindingCode {
            $($(#[$doc])* #[serde(rename = $text)] $variant,)*
        }

        impl FindingCode {
            /// Every code, in declaration order.
            pub const ALL: &'static [FindingCode] = &[$(FindingCode::$variant,)*];

            /// The contract string, e.g. `untrained-tail`.
            pub fn as_str(self) -> &'static str {
                match self {
                    $(FindingCode::$variant => $text,)*
                }
            }
        }
    };
}

finding_codes! {
    /// The trailing rows of a learned table look untrained.
    UntrainedTail => "untrained-tail",
    /// Untrained rows that are not a tail (a row never indexed, a grid patch).
    UntrainedRows => "untrained-rows",
    /// A fixed sinusoidal table differs from the formula it resembles.
    SinusoidMismatch => "sinusoid-mismatch",
    /// Values computed or stored in a lower precision than the table's dtype.
    LowPrecision => "low-precision",
    /// Rows unchanged between two checkpoints (compare).
    UnchangedRows => "unchanged-rows",
    /// Rows whose optimizer second moment is exactly zero: no gradient ever (audit of a
    /// training checkpoint that holds the optimizer state).
    NoGradientRows => "no-gradient-rows",
    /// NaN or infinite values.
    NonFinite => "non-finite",
    /// Rows that move gradually from trained structure towards noise.
    PartiallyTrained => "partially-trained",
    /// The table's statistics change at one row.
    PhaseBoundary => "phase-boundary",
    /// All-zero rows.
    ZeroRows => "zero-rows",
    /// Bit-identical rows.
    DuplicateRows => "duplicate-rows",
    /// Rows whose norm is far from the others.
    NormOutlier => "norm-outlier",
    /// Config and table disagree on the number of positions.
    LengthMismatch => "length-mismatch",
    /// Rows repeating with a period (a table extended by copying).
    RepeatedBlock => "repeated-block",
    /// A grid that is the fixed 2-D sin-cos formula.
    FixedGrid => "fixed-grid",
    /// No grid layout fits the table.
    GridLayoutUnknown => "grid-layout-unknown",
    /// An analysis could not run fully.
    AnalysisProblem => "analysis-problem",
    /// A relative-bias bucket no distance maps to, still at its initial values.
    UnreachableBucket => "unreachable-bucket",
    /// A relative-bias bucket no distance maps to, yet altered.
    UnreachableBucketAltered => "unreachable-bucket-altered",
    /// Relative-bias heads that look like initial noise.
    UntrainedHeads => "untrained-heads",
    /// Rotary frequencies rescaled for a longer context.
    RotaryScaled => "rotary-scaled",
    /// Stored per-layer rotary vectors differ.
    RotaryLayersDiffer => "rotary-layers-differ",
    /// A position-id buffer that is not the consecutive index.
    PositionIdsMismatch => "position-ids-mismatch",
    /// A table changed shape between checkpoints (compare).
    ShapeChanged => "shape-changed",
    /// A table missing from some checkpoints (compare).
    TableMissing => "table-missing",
}

impl std::fmt::Display for FindingCode {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// One finding about one table (contract: `code`, `severity`, `positions`, `message`).
///
/// Build one with [`Finding::info`], [`Finding::warning`] or [`Finding::error`] and the
/// chained setters, which keep `positions` equal to the first of `ranges`:
///
/// ```
/// use posaudit::model::{Finding, FindingCode};
/// let f = Finding::warning(FindingCode::UntrainedTail, "Positions 300..512 look untrained.")
///     .rows([300, 512])
///     .evidence("median neighbour cosine 0.01")
///     .limits("Evidence from the weights alone.");
/// assert_eq!(f.positions, Some([300, 512]));
/// assert_eq!(f.ranges, vec![[300, 512]]);
/// ```
#[derive(Debug, Clone, Serialize)]
pub struct Finding {
    /// Stable code, e.g. `untrained-tail`.
    pub code: FindingCode,
    /// How serious it is.
    pub severity: Severity,
    /// The first half-open row range [start, end) the finding is about; null only when
    /// it is about no rows.
    pub positions: Option<[usize; 2]>,
    /// Every half-open row range the finding covers, in order (empty when it is about
    /// no rows).
    pub ranges: Vec<[usize; 2]>,
    /// One or two sentences: what was found.
    pub message: String,
    /// The numbers behind it.
    pub evidence: String,
    /// What the evidence cannot tell, and what to check before acting on it.
    pub limits: String,
}

impl Finding {
    /// A finding about no rows yet (add them with [`Finding::rows`] or [`Finding::ranges`]).
    pub fn new(severity: Severity, code: FindingCode, message: impl Into<String>) -> Self {
        Finding {
            code,
            severity,
            positions: None,
            ranges: Vec::new(),
            message: message.into(),
            evidence: String::new(),
            limits: String::new(),
        }
    }

    /// An `info` finding.
    pub fn info(code: FindingCode, message: impl Into<String>) -> Self {
        Self::new(Severity::Info, code, message)
    }

    /// A `warning` finding.
    pub fn warning(code: FindingCode, message: impl Into<String>) -> Self {
        Self::new(Severity::Warning, code, message)
    }

    /// An `error` finding.
    pub fn error(code: FindingCode, message: impl Into<String>) -> Self {
        Self::new(Severity::Error, code, message)
    }

    /// The finding covers the one half-open row range `r`.
    pub fn rows(self, r: [usize; 2]) -> Self {
        self.ranges([r])
    }

    /// The finding covers these half-open row ranges (empty ranges are dropped).
    pub fn ranges(mut self, ranges: impl IntoIterator<Item = [usize; 2]>) -> Self {
        self.ranges = ranges.into_iter().filter(|r| r[0] < r[1]).collect();
        self.positions = self.ranges.first().copied();
        self
    }

    /// The numbers behind the finding.
    pub fn evidence(mut self, evidence: impl Into<String>) -> Self {
        self.evidence = evidence.into();
        self
    }

    /// What the evidence cannot tell.
    pub fn limits(mut self, limits: impl Into<String>) -> Self {
        self.limits = limits.into();
        self
    }

    /// Rows covered by all ranges.
    pub fn row_count(&self) -> usize {
        self.ranges.iter().map(|r| r[1] - r[0]).sum()
    }
}

/// Number of findings at each severity.
#[derive(Debug, Clone, Copy, Default, Serialize, PartialEq, Eq)]
pub struct FindingCounts {
    /// `error` findings.
    pub error: usize,
    /// `warning` findings.
    pub warning: usize,
    /// `info` findings.
    pub info: usize,
}

impl FindingCounts {
    /// Counts these findings.
    pub fn of<'a>(findings: impl IntoIterator<Item = &'a Finding>) -> Self {
        let mut c = FindingCounts::default();
        for f in findings {
            match f.severity {
                Severity::Error => c.error += 1,
                Severity::Warning => c.warning += 1,
                Severity::Info => c.info += 1,
            }
        }
        c
    }

    /// True when a finding at or above `level` exists.
    pub fn reaches(&self, level: Severity) -> bool {
        match level {
            Severity::Info => self.error + self.warning + self.info > 0,
            Severity::Warning => self.error + self.warning > 0,
            Severity::Error => self.error > 0,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_serialise_as_their_contract_strings() {
        for code in FindingCode::ALL {
            let json = serde_json::to_value(code).unwrap();
            assert_eq!(json, code.as_str());
            assert!(
                code.as_str()
                    .chars()
                    .all(|c| c.is_ascii_lowercase() || c == '-')
            );
        }
        // 24 codes of the contract plus `no-gradient-rows` (optimizer-state evidence).
        assert_eq!(FindingCode::ALL.len(), 25);
    }

    #[test]
    fn positions_is_the_first_range_and_null_without_rows() {
        let f = Finding::info(FindingCode::ZeroRows, "m").ranges([[4, 5], [2, 2], [9, 12]]);
        assert_eq!(f.positions, Some([4, 5]));
        assert_eq!(f.ranges, vec![[4, 5], [9, 12]]);
        assert_eq!(f.row_count(), 4);
        let g = Finding::warning(FindingCode::LengthMismatch, "m");
        assert_eq!(g.positions, None);
        assert!(g.ranges.is_empty());
        let counts = FindingCounts::of([&f, &g]);
        assert!(counts.reaches(Severity::Warning) && !counts.reaches(Severity::Error));
    }
}
