//! Colours: a colour-blind-safe palette for line series and two colormaps
//! (sequential and diverging) computed at run time in the Oklab colour space,
//! so that equal steps in value give equal steps in perceived lightness.

/// Line colours, in the order series get them: the eight colours of the
/// Okabe–Ito palette (Okabe & Ito 2008, "Color Universal Design"), reordered so
/// that the first four are the most distinct on white and pale yellow comes last.
pub const PALETTE: [&str; 8] = [
    "#0072B2", // blue
    "#D55E00", // vermillion
    "#009E73", // bluish green
    "#CC79A7", // reddish purple
    "#E69F00", // orange
    "#56B4E9", // sky blue
    "#000000", // black
    "#F0E442", // yellow
];

/// Colour of NaN cells in heatmaps: a mid grey that neither colormap produces
/// (both are chromatic everywhere except the white middle of the diverging map).
pub const NAN_COLOR: [u8; 3] = [0x9e, 0x9e, 0x9e];

/// Colour of a series by its index; wraps around after eight.
pub(crate) fn series_color(i: usize) -> &'static str {
    PALETTE[i % PALETTE.len()]
}

/// Dash pattern of a series by its index: solid for the first eight, then
/// dashed, so a ninth series never looks identical to the first.
pub(crate) fn series_dash(i: usize) -> Option<&'static str> {
    match (i / PALETTE.len()) % 3 {
        0 => None,
        1 => Some("6 3"),
        _ => Some("2 3"),
    }
}

/// Which colour scale a heatmap uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Colormap {
    /// Dark blue-violet through teal and green to light yellow; lightness rises
    /// linearly with the value. For magnitudes (norms, change, rank).
    Sequential,
    /// Blue through near-white to red-orange, lightness symmetric about the
    /// middle. For signed values around a meaningful zero (cosine similarity).
    Diverging,
}

impl Colormap {
    /// Colour for a position `t` in [0, 1] along the map (clamped; NaN gives
    /// [`NAN_COLOR`]), as 8-bit sRGB.
    ///
    /// The map is defined in Oklch (lightness, chroma, hue of Oklab, Ottosson
    /// 2020): lightness is a linear function of `t`, so the map is perceptually
    /// ordered by construction; chroma is reduced where needed to stay inside
    /// the sRGB gamut.
    ///
    /// ```text
    /// sequential: L = 0.27 + 0.66 t,  C = 0.12 + 0.05 t,  h = 295° − 190° t
    /// diverging:  s = 2t − 1,  L = 0.96 − 0.54 |s|,  C = 0.16 |s|,
    ///             h = 255° for s < 0, 35° for s > 0
    /// ```
    pub fn rgb(self, t: f64) -> [u8; 3] {
        if t.is_nan() {
            return NAN_COLOR;
        }
        let t = t.clamp(0.0, 1.0);
        let (l, c, h) = match self {
            Colormap::Sequential => (0.27 + 0.66 * t, 0.12 + 0.05 * t, 295.0 - 190.0 * t),
            Colormap::Diverging => {
                let s = 2.0 * t - 1.0;
                let h = if s < 0.0 { 255.0 } else { 35.0 };
                (0.96 - 0.54 * s.abs(), 0.16 * s.abs(), h)
            }
        };
        oklch_to_srgb8(l, c, h)
    }

    /// The map sampled at `LEVELS` evenly spaced points, plus [`NAN_COLOR`] as
    /// the last entry (index `LEVELS`).
    pub(crate) fn table(self) -> Vec<[u8; 3]> {
        let mut t: Vec<[u8; 3]> = (0..LEVELS)
            .map(|i| self.rgb(i as f64 / (LEVELS - 1) as f64))
            .collect();
        t.push(NAN_COLOR);
        t
    }
}

/// Number of distinct colour levels in a heatmap (one palette entry is kept
/// for NaN, so the PNG palette has 256 entries).
pub(crate) const LEVELS: usize = 255;

/// Index into [`Colormap::table`] for value `v` on the scale `[lo, hi]`.
pub(crate) fn level(v: f64, lo: f64, hi: f64) -> u8 {
    if v.is_nan() {
        return LEVELS as u8;
    }
    let t = if hi > lo { (v - lo) / (hi - lo) } else { 0.5 };
    (t.clamp(0.0, 1.0) * (LEVELS - 1) as f64).round() as u8
}

/// `#rrggbb` for an 8-bit colour.
pub(crate) fn hex(c: [u8; 3]) -> String {
    format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2])
}

/// Linear-light sRGB to Oklab (Ottosson 2020, matrices as published there).
/// Only the tests need this direction (to check the maps' lightness).
#[cfg(test)]
pub(crate) fn linear_srgb_to_oklab(r: f64, g: f64, b: f64) -> (f64, f64, f64) {
    let l = 0.412_221_470_8 * r + 0.536_332_536_3 * g + 0.051_445_992_9 * b;
    let m = 0.211_903_498_2 * r + 0.680_699_545_1 * g + 0.107_396_956_6 * b;
    let s = 0.088_302_461_9 * r + 0.281_718_837_6 * g + 0.629_978_700_5 * b;
    let (l, m, s) = (l.cbrt(), m.cbrt(), s.cbrt());
    (
        0.210_454_255_3 * l + 0.793_617_785_0 * m - 0.004_072_046_8 * s,
        1.977_998_495_1 * l - 2.428_592_205_0 * m + 0.450_593_709_9 * s,
        0.025_904_037_1 * l + 0.782_771_766_2 * m - 0.808_675_766_0 * s,
    )
}

/// Oklab to linear-light sRGB (inverse of [`linear_srgb_to_oklab`]).
pub(crate) fn oklab_to_linear_srgb(l: f64, a: f64, b: f64) -> (f64, f64, f64) {
    let l_ = l + 0.396_337_777_4 * a + 0.215_803_757_3 * b;
    let m_ = l - 0.105_561_345_8 * a - 0.063_854_172_8 * b;
    let s_ = l - 0.089_484_177_5 * a - 1.291_485_548_0 * b;
    let (l3, m3, s3) = (l_ * l_ * l_, m_ * m_ * m_, s_ * s_ * s_);
    (
        4.076_741_662_1 * l3 - 3.307_711_591_3 * m3 + 0.230_969_929_2 * s3,
        -1.268_438_004_6 * l3 + 2.609_757_401_1 * m3 - 0.341_319_396_5 * s3,
        -0.004_196_086_3 * l3 - 0.703_418_614_7 * m3 + 1.707_614_701_0 * s3,
    )
}

/// sRGB transfer function (IEC 61966-2-1), linear light to encoded value.
pub(crate) fn srgb_encode(c: f64) -> f64 {
    if c <= 0.003_130_8 {
        12.92 * c
    } else {
        1.055 * c.powf(1.0 / 2.4) - 0.055
    }
}

/// Inverse of [`srgb_encode`].
#[cfg(test)]
pub(crate) fn srgb_decode(c: f64) -> f64 {
    if c <= 0.040_45 {
        c / 12.92
    } else {
        ((c + 0.055) / 1.055).powf(2.4)
    }
}

/// Oklch to 8-bit sRGB, lowering chroma by bisection until the colour is inside
/// the sRGB gamut (lightness and hue are kept).
fn oklch_to_srgb8(l: f64, c: f64, h_deg: f64) -> [u8; 3] {
    let (sin, cos) = h_deg.to_radians().sin_cos();
    let rgb_at = |chroma: f64| oklab_to_linear_srgb(l, chroma * cos, chroma * sin);
    let inside = |(r, g, b): (f64, f64, f64)| {
        let ok = |x: f64| (-1e-9..=1.0 + 1e-9).contains(&x);
        ok(r) && ok(g) && ok(b)
    };
    let mut rgb = rgb_at(c);
    if !inside(rgb) {
        let (mut lo, mut hi) = (0.0, c);
        for _ in 0..40 {
            let mid = 0.5 * (lo + hi);
            if inside(rgb_at(mid)) {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        rgb = rgb_at(lo);
    }
    let to8 = |x: f64| (srgb_encode(x.clamp(0.0, 1.0)) * 255.0).round() as u8;
    [to8(rgb.0), to8(rgb.1), to8(rgb.2)]
}

#[cfg(test)]
mod tests {
    use super::*;

    fn oklab_of(c: [u8; 3]) -> (f64, f64, f64) {
        let d = |x: u8| srgb_decode(x as f64 / 255.0);
        linear_srgb_to_oklab(d(c[0]), d(c[1]), d(c[2]))
    }

    #[test]
    fn oklab_of_white_is_lightness_one_and_neutral() {
        // Oklab is defined so that D65 white has L = 1, a = b = 0 (Ottosson 2020).
        let (l, a, b) = linear_srgb_to_oklab(1.0, 1.0, 1.0);
        assert!((l - 1.0).abs() < 1e-4, "{l}");
        assert!(a.abs() < 1e-4 && b.abs() < 1e-4, "{a} {b}");
    }

    #[test]
    fn oklab_round_trips() {
        for &(r, g, b) in &[(0.2, 0.5, 0.9), (1.0, 0.0, 0.0), (0.01, 0.3, 0.02)] {
            let (l, a, bb) = linear_srgb_to_oklab(r, g, b);
            let (r2, g2, b2) = oklab_to_linear_srgb(l, a, bb);
            assert!((r - r2).abs() < 1e-6 && (g - g2).abs() < 1e-6 && (b - b2).abs() < 1e-6);
        }
    }

    #[test]
    fn srgb_transfer_matches_the_standard_at_known_points() {
        // IEC 61966-2-1: encoded 0.5 is linear 0.2140 (four decimals, from the formula).
        assert!((srgb_decode(0.5) - 0.214_041).abs() < 1e-6);
        assert!((srgb_encode(srgb_decode(0.73)) - 0.73).abs() < 1e-12);
    }

    #[test]
    fn sequential_map_lightness_rises_evenly() {
        let table = Colormap::Sequential.table();
        let ls: Vec<f64> = table[..LEVELS].iter().map(|&c| oklab_of(c).0).collect();
        for w in ls.windows(2) {
            assert!(w[1] > w[0] - 0.004, "lightness must not fall: {w:?}");
        }
        // Lightness follows the designed line within 8-bit rounding.
        for (i, l) in ls.iter().enumerate() {
            let t = i as f64 / (LEVELS - 1) as f64;
            assert!((l - (0.27 + 0.66 * t)).abs() < 0.01, "level {i}: {l}");
        }
    }

    #[test]
    fn diverging_map_is_symmetric_in_lightness_with_light_middle() {
        let ls: Vec<f64> = (0..=20)
            .map(|i| oklab_of(Colormap::Diverging.rgb(i as f64 / 20.0)).0)
            .collect();
        for i in 0..=10 {
            assert!((ls[i] - ls[20 - i]).abs() < 0.01, "{i}: {ls:?}");
        }
        assert!(ls[10] > 0.95);
        let lo = oklab_of(Colormap::Diverging.rgb(0.0));
        let hi = oklab_of(Colormap::Diverging.rgb(1.0));
        assert!(lo.2 < 0.0 && hi.1 > 0.0, "blue end, red end: {lo:?} {hi:?}");
    }

    #[test]
    fn nan_and_out_of_range_values_pick_valid_levels() {
        assert_eq!(level(f64::NAN, 0.0, 1.0), LEVELS as u8);
        assert_eq!(level(-5.0, 0.0, 1.0), 0);
        assert_eq!(level(5.0, 0.0, 1.0), (LEVELS - 1) as u8);
        assert_eq!(level(f64::INFINITY, 0.0, 1.0), (LEVELS - 1) as u8);
        assert_eq!(Colormap::Sequential.rgb(f64::NAN), NAN_COLOR);
    }
}
