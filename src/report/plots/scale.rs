//! Axis mapping (data value to pixel) and tick selection, linear and log10.
//! Kept separate so tests can compute the pixel a value must land on with the
//! same mapping the plots use.

/// Kind of axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum AxisKind {
    Linear,
    Log10,
}

/// A data interval mapped onto a pixel interval.
///
/// For a log axis `lo`/`hi` are stored as log10 of the data bounds.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Axis {
    pub kind: AxisKind,
    pub lo: f64,
    pub hi: f64,
    pub px_lo: f64,
    pub px_hi: f64,
}

impl Axis {
    /// Builds an axis over the data bounds `[lo, hi]` (data units, both finite,
    /// and positive for a log axis). A zero-width interval is widened so the
    /// mapping is never a division by zero.
    pub fn new(kind: AxisKind, lo: f64, hi: f64, px_lo: f64, px_hi: f64) -> Self {
        let (mut a, mut b) = match kind {
            AxisKind::Linear => (lo, hi),
            AxisKind::Log10 => (lo.log10(), hi.log10()),
        };
        if !(a.is_finite() && b.is_finite()) {
            a = 0.0;
            b = 1.0;
        }
        let (mut px_lo, mut px_hi) = (px_lo, px_hi);
        if b < a {
            // Keep the mapping: the first data bound stays at the first pixel.
            std::mem::swap(&mut a, &mut b);
            std::mem::swap(&mut px_lo, &mut px_hi);
        }
        if b - a <= f64::EPSILON * a.abs().max(b.abs()).max(1e-300) {
            let pad = match kind {
                AxisKind::Linear if a == 0.0 => 1.0,
                AxisKind::Linear => a.abs() * 0.1,
                AxisKind::Log10 => 0.5,
            };
            a -= pad;
            b += pad;
        }
        Axis {
            kind,
            lo: a,
            hi: b,
            px_lo,
            px_hi,
        }
    }

    /// Pads the data interval by `fraction` of its width on both sides (in log
    /// space for a log axis).
    pub fn padded(mut self, fraction: f64) -> Self {
        let w = self.hi - self.lo;
        self.lo -= w * fraction;
        self.hi += w * fraction;
        self
    }

    /// Pixel position of a data value, or `None` when the value cannot be shown
    /// (NaN, infinite, or not positive on a log axis).
    pub fn map(&self, v: f64) -> Option<f64> {
        let t = match self.kind {
            AxisKind::Linear => v,
            AxisKind::Log10 if v > 0.0 => v.log10(),
            AxisKind::Log10 => return None,
        };
        if !t.is_finite() {
            return None;
        }
        Some(self.px_lo + (t - self.lo) / (self.hi - self.lo) * (self.px_hi - self.px_lo))
    }

    /// Like [`Axis::map`] but clamps to the pixel interval, for shading that may
    /// extend past the data.
    pub fn map_clamped(&self, v: f64) -> Option<f64> {
        let p = self.map(v)?;
        let (a, b) = if self.px_lo <= self.px_hi {
            (self.px_lo, self.px_hi)
        } else {
            (self.px_hi, self.px_lo)
        };
        Some(p.clamp(a, b))
    }

    /// Tick values (data units) with their labels, about `target` of them.
    pub fn ticks(&self, target: usize) -> Vec<(f64, String)> {
        match self.kind {
            AxisKind::Linear => linear_ticks(self.lo, self.hi, target),
            AxisKind::Log10 => log_ticks(self.lo, self.hi, target),
        }
    }
}

/// A "nice" step (1, 2 or 5 times a power of ten) that splits `span` into about
/// `target` intervals (common practice for chart axes).
pub(crate) fn nice_step(span: f64, target: usize) -> f64 {
    let raw = span / target.max(1) as f64;
    if !(raw.is_finite() && raw > 0.0) {
        return 1.0;
    }
    let mag = 10f64.powf(raw.log10().floor());
    let f = raw / mag;
    let m = if f < 1.5 {
        1.0
    } else if f < 3.5 {
        2.0
    } else if f < 7.5 {
        5.0
    } else {
        10.0
    };
    m * mag
}

/// Ticks at multiples of a nice step inside `[lo, hi]`.
pub(crate) fn linear_ticks(lo: f64, hi: f64, target: usize) -> Vec<(f64, String)> {
    let step = nice_step(hi - lo, target);
    let (first, last) = ((lo / step).ceil(), (hi / step).floor());
    // Checked in f64: bounds near ±f64::MAX would overflow as integers.
    if !(last >= first && last - first <= 1000.0) {
        return Vec::new();
    }
    let (first, last) = (first as i64, last as i64);
    let values: Vec<f64> = (first..=last).map(|k| k as f64 * step).collect();
    let labels = format_ticks(&values, step);
    values.into_iter().zip(labels).collect()
}

/// Formats a set of tick values sharing one step so they all show the same
/// number of decimals; uses scientific notation for very large or small values.
pub(crate) fn format_ticks(values: &[f64], step: f64) -> Vec<String> {
    let max_abs = values.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let scientific = max_abs >= 1e5 || (max_abs > 0.0 && max_abs < 1e-3);
    values
        .iter()
        .map(|&v| {
            if v.abs() < step * 1e-9 {
                "0".to_string()
            } else if scientific {
                format_scientific(v, step)
            } else {
                let decimals = (-(step.log10().floor())).max(0.0) as usize;
                minus(&format!("{v:.decimals$}"))
            }
        })
        .collect()
}

fn format_scientific(v: f64, step: f64) -> String {
    let exp = v.abs().log10().floor() as i32;
    let mant = v / 10f64.powi(exp);
    // Enough mantissa digits to tell neighbouring ticks apart.
    let digits = ((exp as f64) - step.log10().floor()).clamp(0.0, 4.0) as usize;
    let mut m = format!("{mant:.digits$}");
    if m.contains('.') {
        while m.ends_with('0') {
            m.pop();
        }
        if m.ends_with('.') {
            m.pop();
        }
    }
    minus(&format!("{m}×10{}", superscript(exp)))
}

/// Formats a single value compactly with about `sig` significant digits, for
/// labels that are not ticks (colour bar ends, annotations).
pub(crate) fn format_value(v: f64, sig: usize) -> String {
    if v.is_nan() {
        return "NaN".to_string();
    }
    if v.is_infinite() {
        return if v > 0.0 { "∞" } else { "−∞" }.to_string();
    }
    if v == 0.0 {
        return "0".to_string();
    }
    let exp = v.abs().log10().floor() as i32;
    if !(-3..5).contains(&exp) {
        let mant = v / 10f64.powi(exp);
        let d = sig.saturating_sub(1);
        let mut m = format!("{mant:.d$}");
        trim_zeros(&mut m);
        return minus(&format!("{m}×10{}", superscript(exp)));
    }
    let decimals = (sig as i32 - 1 - exp).max(0) as usize;
    let mut s = format!("{v:.decimals$}");
    trim_zeros(&mut s);
    minus(&s)
}

fn trim_zeros(s: &mut String) {
    if s.contains('.') {
        while s.ends_with('0') {
            s.pop();
        }
        if s.ends_with('.') {
            s.pop();
        }
    }
}

/// Uses the typographic minus sign (U+2212), which has the width of a digit.
fn minus(s: &str) -> String {
    if s == "-0" {
        return "0".to_string();
    }
    s.replace('-', "−")
}

/// Writes an integer with Unicode superscript digits ("10⁻³").
pub(crate) fn superscript(n: i32) -> String {
    const DIGITS: [char; 10] = ['⁰', '¹', '²', '³', '⁴', '⁵', '⁶', '⁷', '⁸', '⁹'];
    let mut s = String::new();
    if n < 0 {
        s.push('⁻');
    }
    for c in n.unsigned_abs().to_string().chars() {
        s.push(DIGITS[c.to_digit(10).unwrap_or(0) as usize]);
    }
    s
}

/// Ticks for a log10 axis whose bounds are `lo`, `hi` in log10 units: every
/// power of ten inside the range (thinned to about `target`), labelled 10ⁿ;
/// when fewer than three powers of ten are visible, 1, 2 and 5 times each power
/// instead, labelled as plain numbers.
pub(crate) fn log_ticks(lo: f64, hi: f64, target: usize) -> Vec<(f64, String)> {
    let first = lo.ceil() as i64;
    let last = hi.floor() as i64;
    let decades = last - first + 1;
    if decades >= 3 {
        let every = ((decades as f64) / target.max(1) as f64).ceil().max(1.0) as i64;
        return (first..=last)
            .filter(|e| e.rem_euclid(every) == 0)
            .map(|e| (10f64.powi(e as i32), format!("10{}", superscript(e as i32))))
            .collect();
    }
    // A narrow range: label 1, 2 and 5 times each power of ten that falls inside.
    let mut out = Vec::new();
    for e in (lo.floor() as i64)..=(hi.ceil() as i64) {
        for m in [1.0, 2.0, 5.0] {
            let v = m * 10f64.powi(e as i32);
            let l = v.log10();
            if l >= lo - 1e-12 && l <= hi + 1e-12 {
                out.push((v, format_value(v, 2)));
            }
        }
    }
    if out.len() < 2 {
        // Less than a factor of two: fall back to linear ticks in data units.
        return linear_ticks(10f64.powf(lo), 10f64.powf(hi), target);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn maps_ends_of_interval_to_ends_of_pixel_range() {
        let a = Axis::new(AxisKind::Linear, 0.0, 2048.0, 60.0, 780.0);
        assert_eq!(a.map(0.0), Some(60.0));
        assert_eq!(a.map(2048.0), Some(780.0));
        assert_eq!(a.map(1024.0), Some(420.0));
        assert_eq!(a.map(f64::NAN), None);
    }

    #[test]
    fn log_axis_rejects_non_positive_values() {
        let a = Axis::new(AxisKind::Log10, 1e-3, 1e2, 300.0, 40.0);
        assert_eq!(a.map(0.0), None);
        assert_eq!(a.map(-1.0), None);
        let mid = a.map(10f64.powf(-0.5)).unwrap();
        assert!((mid - 170.0).abs() < 1e-9);
    }

    #[test]
    fn constant_data_gets_a_nonzero_interval() {
        let a = Axis::new(AxisKind::Linear, 3.0, 3.0, 0.0, 100.0);
        assert!(a.hi > a.lo);
        assert!(a.map(3.0).unwrap().is_finite());
    }

    #[test]
    fn linear_ticks_are_nice_multiples() {
        // 2048 / 4 = 512 per interval rounds to the nice step 500;
        // 2048 / 8 = 256 rounds to 200.
        let t = linear_ticks(0.0, 2048.0, 4);
        let v: Vec<f64> = t.iter().map(|x| x.0).collect();
        assert_eq!(v, vec![0.0, 500.0, 1000.0, 1500.0, 2000.0]);
        assert_eq!(t[1].1, "500");
        assert_eq!(linear_ticks(0.0, 2048.0, 8).len(), 11);
        let t = linear_ticks(-0.31, 0.92, 5);
        let labels: Vec<&str> = t.iter().map(|x| x.1.as_str()).collect();
        assert_eq!(labels, vec!["−0.2", "0", "0.2", "0.4", "0.6", "0.8"]);
    }

    #[test]
    fn log_ticks_sit_on_powers_of_ten() {
        let t = log_ticks(-3.2, 1.4, 8);
        let v: Vec<f64> = t.iter().map(|x| x.0).collect();
        assert_eq!(v, vec![1e-3, 1e-2, 1e-1, 1.0, 10.0]);
        assert_eq!(t[0].1, "10⁻³");
    }

    #[test]
    fn narrow_log_ranges_use_one_two_five_ticks() {
        // 10^-0.5 ≈ 0.316 .. 10^1.6 ≈ 39.8 holds 0.5, 1, 2, 5, 10, 20.
        let t = log_ticks(-0.5, 1.6, 8);
        let labels: Vec<&str> = t.iter().map(|x| x.1.as_str()).collect();
        assert_eq!(labels, vec!["0.5", "1", "2", "5", "10", "20"]);
    }

    #[test]
    fn values_format_compactly() {
        assert_eq!(format_value(0.98765, 3), "0.988");
        assert_eq!(format_value(-1.0, 3), "−1");
        assert_eq!(format_value(123456.0, 3), "1.23×10⁵");
        assert_eq!(format_value(2.5e-5, 2), "2.5×10⁻⁵");
    }
}
