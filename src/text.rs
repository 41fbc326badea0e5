//! Wording pieces written once, shared by the verdict messages and every renderer:
//! numbers, shapes, row ranges (always `a..b`), plurals, Markdown escaping and
//! shortened tensor names. A leaf module: it imports nothing of the crate.

use std::fmt::Write;

/// Human-readable byte count (binary units).
pub fn human_bytes(b: u64) -> String {
    const UNITS: [&str; 5] = ["B", "KiB", "MiB", "GiB", "TiB"];
    let mut v = b as f64;
    let mut u = 0;
    while v >= 1024.0 && u + 1 < UNITS.len() {
        v /= 1024.0;
        u += 1;
    }
    if u == 0 {
        format!("{b} B")
    } else {
        format!("{v:.1} {}", UNITS[u])
    }
}

/// Formats a shape as `512x768`.
pub fn shape_str(shape: &[usize]) -> String {
    if shape.is_empty() {
        return "scalar".to_string();
    }
    shape
        .iter()
        .map(usize::to_string)
        .collect::<Vec<_>>()
        .join("x")
}

/// `1 tensor`, `2 tensors`.
pub fn count(n: usize, noun: &str) -> String {
    if n == 1 {
        format!("{n} {noun}")
    } else {
        format!("{n} {noun}s")
    }
}

/// A half-open row range as `a..b` (the one notation of every report).
pub fn range(r: [usize; 2]) -> String {
    format!("{}..{}", r[0], r[1])
}

/// A half-open row range with its noun: `row 7` for one row, `rows 3..9` otherwise.
pub fn rows(r: [usize; 2]) -> String {
    if r[1] == r[0] + 1 {
        format!("row {}", r[0])
    } else {
        format!("rows {}", range(r))
    }
}

/// Up to `max` ranges as `a..b, c..d, and N more`; `none` when empty.
pub fn ranges(r: &[[usize; 2]], max: usize) -> String {
    if r.is_empty() {
        return "none".into();
    }
    let mut parts: Vec<String> = r.iter().take(max).map(|x| range(*x)).collect();
    if r.len() > max {
        parts.push(format!("and {} more", r.len() - max));
    }
    parts.join(", ")
}

/// Up to `max` row ranges as `rows 3..9, 12, 15..18 and N more` (a one-row range as
/// its row); `no rows` when empty.
pub fn row_list(r: &[[usize; 2]], max: usize) -> String {
    match r {
        [] => "no rows".into(),
        [one] => rows(*one),
        _ => {
            let mut parts: Vec<String> = r
                .iter()
                .take(max)
                .map(|x| {
                    if x[1] == x[0] + 1 {
                        x[0].to_string()
                    } else {
                        range(*x)
                    }
                })
                .collect();
            if r.len() > max {
                let last = parts.pop().unwrap_or_default();
                parts.push(format!("{last} and {} more ranges", r.len() - max));
            }
            format!("rows {}", parts.join(", "))
        }
    }
}

/// Half-open ranges `r` (sorted, disjoint) in at most `max` groups: when there are more,
/// the neighbouring groups with the smallest gap between them are merged first, and a
/// merged group is written as its span with the rows it covers, e.g.
/// `455..520 (13 of 65 rows, in 9 pieces)`. Scattered single rows thus read as one range
/// instead of a list cut off by "and N more".
pub fn grouped_ranges(r: &[[usize; 2]], max: usize) -> String {
    if r.len() <= max.max(1) {
        return ranges(r, max.max(1));
    }
    // (span, rows covered, pieces)
    let mut groups: Vec<([usize; 2], usize, usize)> =
        r.iter().map(|&[s, e]| ([s, e], e - s, 1)).collect();
    while groups.len() > max.max(1) {
        let at = (0..groups.len() - 1)
            .min_by_key(|&i| (groups[i + 1].0[0].saturating_sub(groups[i].0[1]), i))
            .unwrap_or(0);
        let next = groups.remove(at + 1);
        let g = &mut groups[at];
        g.0[1] = next.0[1];
        g.1 += next.1;
        g.2 += next.2;
    }
    groups
        .iter()
        .map(|&(span, rows, pieces)| {
            if pieces == 1 {
                range(span)
            } else {
                format!(
                    "{} ({rows} of {} rows, in {pieces} pieces)",
                    range(span),
                    span[1] - span[0]
                )
            }
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// A Markdown table cell or list item: pipes escaped, one line.
pub fn escape(s: &str) -> String {
    s.replace('|', "\\|").replace('\n', " ")
}

/// `x` with `prec` decimals, `–` when absent or not finite.
pub fn fixed(v: Option<f64>, prec: usize) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.prec$}"),
        _ => "–".into(),
    }
}

/// `x` in scientific notation with three decimals, `–` when absent or not finite.
pub fn sci(v: Option<f64>) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.3e}"),
        _ => "–".into(),
    }
}

/// Longest tensor name shown whole in a terminal table.
pub const NAME_WIDTH: usize = 48;

/// A tensor name of at most `max` characters for a terminal column: the first two
/// dotted parts, `...`, and as many trailing parts as fit
/// (`godwit.encoder...relative_attention_bias.weight`). Names that fit are unchanged.
pub fn short_name(name: &str, max: usize) -> String {
    if name.chars().count() <= max {
        return name.to_string();
    }
    let parts: Vec<&str> = name.split('.').collect();
    if parts.len() > 3 {
        let head = parts[..2].join(".");
        let mut tail = parts[parts.len() - 1].to_string();
        for p in parts[2..parts.len() - 1].iter().rev() {
            let longer = format!("{p}.{tail}");
            if head.len() + 3 + longer.len() > max {
                break;
            }
            tail = longer;
        }
        let short = format!("{head}...{tail}");
        if short.chars().count() <= max {
            return short;
        }
    }
    let keep = max.saturating_sub(3);
    let tail: String = name
        .chars()
        .rev()
        .take(keep)
        .collect::<Vec<_>>()
        .into_iter()
        .rev()
        .collect();
    format!("...{tail}")
}

/// Renders rows as left-aligned columns separated by two spaces; the last column is not
/// padded (it holds free text).
pub fn aligned(header: &[&str], rows: &[Vec<String>]) -> String {
    let n = header.len();
    let mut width = vec![0usize; n];
    for (i, h) in header.iter().enumerate() {
        width[i] = h.chars().count();
    }
    for r in rows {
        for (i, c) in r.iter().enumerate().take(n) {
            width[i] = width[i].max(c.chars().count());
        }
    }
    let mut out = String::new();
    let line = |cells: Vec<&str>, out: &mut String| {
        let mut s = String::new();
        for (i, c) in cells.iter().enumerate() {
            if i + 1 == n {
                s.push_str(c);
            } else {
                let _ = write!(s, "{c:<w$}  ", w = width[i]);
            }
        }
        out.push_str(s.trim_end());
        out.push('\n');
    };
    line(header.to_vec(), &mut out);
    for r in rows {
        line(r.iter().map(String::as_str).collect(), &mut out);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn columns_align_and_the_last_is_free_text() {
        let s = aligned(
            &["a", "bb", "why"],
            &[vec!["xxx".into(), "y".into(), "long text".into()]],
        );
        assert_eq!(s, "a    bb  why\nxxx  y   long text\n");
        assert_eq!(human_bytes(1536), "1.5 KiB");
        assert_eq!(shape_str(&[512, 768]), "512x768");
    }

    #[test]
    fn grouped_ranges_merge_fragments() {
        let r = [[455, 456], [457, 458], [487, 488], [489, 490], [900, 910]];
        assert_eq!(
            grouped_ranges(&r, 2),
            "455..490 (4 of 35 rows, in 4 pieces), 900..910"
        );
        assert_eq!(grouped_ranges(&r[..2], 6), "455..456, 457..458");
        assert_eq!(grouped_ranges(&[], 6), "none");
    }

    #[test]
    fn ranges_plurals_and_short_names() {
        assert_eq!(rows([200, 202]), "rows 200..202");
        assert_eq!(rows([7, 8]), "row 7");
        assert_eq!(
            ranges(&[[0, 2], [5, 9], [11, 12]], 2),
            "0..2, 5..9, and 1 more"
        );
        assert_eq!(
            row_list(&[[0, 2], [5, 6], [11, 14]], 2),
            "rows 0..2, 5 and 1 more ranges"
        );
        assert_eq!(row_list(&[[5, 6]], 2), "row 5");
        assert_eq!(row_list(&[], 2), "no rows");
        assert_eq!(count(1, "tensor"), "1 tensor");
        assert_eq!(count(3, "tensor"), "3 tensors");
        // The shortened name the README shows.
        let long = "godwit.encoder.block.0.layer.0.SelfAttention.relative_attention_bias.weight";
        assert_eq!(
            short_name(long, NAME_WIDTH),
            "godwit.encoder...relative_attention_bias.weight"
        );
        assert_eq!(
            short_name("tern.embeddings.position_ids", NAME_WIDTH),
            "tern.embeddings.position_ids"
        );
        let one_part = "x".repeat(60);
        assert_eq!(short_name(&one_part, 10).chars().count(), 10);
    }
}
