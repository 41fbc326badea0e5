//! A very small SVG writer: just the elements the plots use, with escaping and
//! compact number formatting in one place so every plot emits the same markup.

use std::fmt::Write as _;

/// Font stack written on the root element. Generic `sans-serif` comes last, so a
/// viewer always has something; the named families only refine the look.
pub(crate) const FONT_FAMILY: &str = "DejaVu Sans, Verdana, Arial, Helvetica, sans-serif";

/// Colour of text, axes and tick marks.
pub(crate) const INK: &str = "#222222";
/// Colour of grid lines.
pub(crate) const GRID: &str = "#e4e4e4";
/// Colour of secondary text (notes, reference-line labels).
pub(crate) const MUTED: &str = "#555555";

/// Horizontal placement of a text relative to its anchor point.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Anchor {
    Start,
    Middle,
    End,
}

impl Anchor {
    fn as_str(self) -> &'static str {
        match self {
            Anchor::Start => "start",
            Anchor::Middle => "middle",
            Anchor::End => "end",
        }
    }
}

/// How one text element looks.
#[derive(Debug, Clone, Copy)]
pub(crate) struct TextStyle<'a> {
    pub size: f64,
    pub anchor: Anchor,
    pub bold: bool,
    pub fill: &'a str,
    /// Rotation in degrees about the anchor point (−90 for a y-axis label).
    pub rotate: f64,
    /// CSS class, so tests can find axis labels, titles and tick labels.
    pub class: &'a str,
    /// White outline behind the glyphs, for labels drawn over data.
    pub halo: bool,
}

impl<'a> TextStyle<'a> {
    pub fn new(size: f64, anchor: Anchor, class: &'a str) -> Self {
        TextStyle {
            size,
            anchor,
            bold: false,
            fill: INK,
            rotate: 0.0,
            class,
            halo: false,
        }
    }
    pub fn halo(mut self) -> Self {
        self.halo = true;
        self
    }
    pub fn bold(mut self) -> Self {
        self.bold = true;
        self
    }
    pub fn fill(mut self, fill: &'a str) -> Self {
        self.fill = fill;
        self
    }
    pub fn rotate(mut self, degrees: f64) -> Self {
        self.rotate = degrees;
        self
    }
}

/// Formats a coordinate with at most two decimals and no trailing zeros; keeps
/// paths short (a 2048-point line stays around 25 kB).
pub(crate) fn num(v: f64) -> String {
    if !v.is_finite() {
        return "0".to_string();
    }
    let r = (v * 100.0).round() / 100.0;
    let mut s = format!("{r:.2}");
    while s.ends_with('0') {
        s.pop();
    }
    if s.ends_with('.') {
        s.pop();
    }
    if s == "-0" { "0".to_string() } else { s }
}

/// Escapes the five XML special characters.
pub(crate) fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            // Control characters are not allowed in XML 1.0 documents.
            c if (c as u32) < 0x20 && c != '\t' && c != '\n' && c != '\r' => out.push(' '),
            c => out.push(c),
        }
    }
    out
}

/// Estimated advance width of `text` at font size `size`, in pixels.
///
/// SVG text is laid out by the viewer, so we cannot know the exact width; this
/// estimate uses rough per-character-class widths of a humanist sans-serif
/// (common practice for SVG chart layout) and errs on the wide side so that boxes
/// sized from it contain the text in any of the fonts in [`FONT_FAMILY`].
pub(crate) fn text_width(text: &str, size: f64) -> f64 {
    let em: f64 = text
        .chars()
        .map(|c| match c {
            'i' | 'j' | 'l' | '.' | ',' | ':' | ';' | '\'' | '|' | '!' | 'I' => 0.32,
            ' ' | 'f' | 't' | 'r' | '(' | ')' | '[' | ']' | '-' => 0.42,
            'm' | 'w' | 'M' | 'W' | '%' | '—' => 0.95,
            '0'..='9' => 0.64,
            'A'..='Z' => 0.72,
            '⁰'..='⁹' | '¹' | '²' | '³' | '⁻' => 0.42,
            _ => 0.6,
        })
        .sum();
    em * size
}

/// An SVG document under construction.
pub(crate) struct Svg {
    buf: String,
}

impl Svg {
    /// Starts a document of `width` × `height` pixels with a white background.
    pub fn new(width: f64, height: f64) -> Self {
        let mut buf = String::with_capacity(16 * 1024);
        let _ = writeln!(
            buf,
            "<svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\" width=\"{w}\" height=\"{h}\" \
             viewBox=\"0 0 {w} {h}\" font-family=\"{FONT_FAMILY}\">",
            w = num(width),
            h = num(height)
        );
        let _ = writeln!(
            buf,
            "<rect class=\"background\" x=\"0\" y=\"0\" width=\"{}\" height=\"{}\" fill=\"#ffffff\"/>",
            num(width),
            num(height)
        );
        Svg { buf }
    }

    /// Adds a `<title>` element (shown as tooltip, read by screen readers).
    pub fn doc_title(&mut self, title: &str) {
        let _ = writeln!(self.buf, "<title>{}</title>", escape(title));
    }

    pub fn rect(&mut self, x: f64, y: f64, w: f64, h: f64, fill: &str, attrs: &str) {
        let _ = writeln!(
            self.buf,
            "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"{}\"{}{}/>",
            num(x),
            num(y),
            num(w.max(0.0)),
            num(h.max(0.0)),
            fill,
            if attrs.is_empty() { "" } else { " " },
            attrs
        );
    }

    // Two end points, stroke and extra attributes: splitting this into a
    // struct would only add noise at the ~30 call sites.
    #[allow(clippy::too_many_arguments)]
    pub fn line(
        &mut self,
        x1: f64,
        y1: f64,
        x2: f64,
        y2: f64,
        stroke: &str,
        width: f64,
        attrs: &str,
    ) {
        let _ = writeln!(
            self.buf,
            "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"{}\" stroke-width=\"{}\"{}{}/>",
            num(x1),
            num(y1),
            num(x2),
            num(y2),
            stroke,
            num(width),
            if attrs.is_empty() { "" } else { " " },
            attrs
        );
    }

    /// A path with no fill; `d` is already formatted.
    pub fn path(&mut self, d: &str, stroke: &str, width: f64, attrs: &str) {
        let _ = writeln!(
            self.buf,
            "<path d=\"{d}\" fill=\"none\" stroke=\"{stroke}\" stroke-width=\"{}\" \
             stroke-linejoin=\"round\" stroke-linecap=\"round\"{}{}/>",
            num(width),
            if attrs.is_empty() { "" } else { " " },
            attrs
        );
    }

    pub fn circle(&mut self, cx: f64, cy: f64, r: f64, fill: &str) {
        let _ = writeln!(
            self.buf,
            "<circle cx=\"{}\" cy=\"{}\" r=\"{}\" fill=\"{fill}\"/>",
            num(cx),
            num(cy),
            num(r)
        );
    }

    pub fn text(&mut self, x: f64, y: f64, text: &str, style: TextStyle<'_>) {
        let mut attrs = format!(
            "x=\"{}\" y=\"{}\" font-size=\"{}\" text-anchor=\"{}\" fill=\"{}\"",
            num(x),
            num(y),
            num(style.size),
            style.anchor.as_str(),
            style.fill
        );
        if style.bold {
            attrs.push_str(" font-weight=\"bold\"");
        }
        if style.halo {
            attrs.push_str(
                " stroke=\"#ffffff\" stroke-width=\"3\" stroke-linejoin=\"round\" paint-order=\"stroke\"",
            );
        }
        if style.rotate != 0.0 {
            let _ = write!(
                attrs,
                " transform=\"rotate({} {} {})\"",
                num(style.rotate),
                num(x),
                num(y)
            );
        }
        if !style.class.is_empty() {
            let _ = write!(attrs, " class=\"{}\"", style.class);
        }
        let _ = writeln!(self.buf, "<text {attrs}>{}</text>", escape(text));
    }

    /// Embeds an image (a `data:` URI) stretched over the given box, drawn with
    /// hard pixel edges where the viewer supports it.
    pub fn image(&mut self, x: f64, y: f64, w: f64, h: f64, href: &str) {
        let _ = writeln!(
            self.buf,
            "<image x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" preserveAspectRatio=\"none\" \
             image-rendering=\"optimizeSpeed\" style=\"image-rendering:pixelated\" href=\"{href}\"/>",
            num(x),
            num(y),
            num(w),
            num(h)
        );
    }

    pub fn open_group(&mut self, attrs: &str) {
        let _ = writeln!(self.buf, "<g {attrs}>");
    }

    pub fn close_group(&mut self) {
        self.buf.push_str("</g>\n");
    }

    pub fn finish(mut self) -> String {
        self.buf.push_str("</svg>\n");
        self.buf
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_are_short_and_never_negative_zero() {
        assert_eq!(num(12.0), "12");
        assert_eq!(num(12.345), "12.35");
        assert_eq!(num(-0.001), "0");
        assert_eq!(num(f64::NAN), "0");
    }

    #[test]
    fn escapes_xml_specials() {
        assert_eq!(escape("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
    }
}
