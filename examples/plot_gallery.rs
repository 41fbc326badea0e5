//! Writes one SVG of every plot kind into a folder, for looking at them.
//!
//! All data here is invented (simple formulas and a fixed pseudo-random
//! sequence); it only imitates the shapes the real analyses produce.
//!
//! ```text
//! cargo run --example plot_gallery -- /tmp/gallery
//! ```

use posaudit::report::plots::{
    ColorScale, Colormap, Heatmap, HeatmapGrid, HeatmapPanel, LineChart, Matrix, Panel, RefLine,
    Scale, Series, SmallMultiples, Spectrum, XRange, heatmap, heatmap_grid, line_chart,
    small_multiples, spectrum_plot,
};
use std::path::Path;

/// Deterministic pseudo-random numbers in [-1, 1) (xorshift64*), so the
/// gallery is the same on every run.
struct Noise(u64);

impl Noise {
    fn next(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        let x = self.0.wrapping_mul(0x2545_F491_4F6C_DD1D);
        (x >> 11) as f64 / (1u64 << 52) as f64 - 1.0
    }
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let dir = std::env::args()
        .nth(1)
        .ok_or("usage: plot_gallery OUTPUT_DIR")?;
    let dir = Path::new(&dir);
    std::fs::create_dir_all(dir)?;
    let mut noise = Noise(0x9E37_79B9_7F4A_7C15);
    let write = |name: &str, svg: String| -> std::io::Result<()> {
        let path = dir.join(name);
        std::fs::write(&path, &svg)?;
        println!("{:>9} bytes  {}", svg.len(), path.display());
        Ok(())
    };

    // 1. Row norms with an untrained tail (invented: trained rows smooth, the
    //    tail at the initializer's noise level 0.02·√384 ≈ 0.39).
    let n = 512;
    let trained = 300;
    let norms: Vec<f64> = (0..n)
        .map(|i| {
            if i < trained {
                1.1 + 0.25 * (-(i as f64) / 40.0).exp() + 0.03 * (i as f64 / 17.0).sin()
            } else {
                0.39 + 0.015 * noise.next()
            }
        })
        .collect();
    let smooth: Vec<f64> = (0..n)
        .map(|i| {
            if i < trained {
                1.12 + 0.2 * (-(i as f64) / 50.0).exp()
            } else {
                0.4
            }
        })
        .collect();
    let mut c = LineChart::new(
        "Row norms of wpe (invented data)",
        "position (row index)",
        "L2 norm of row (weight units)",
    );
    c.series.push(Series::from_values("row norm", 0.0, &norms));
    c.series.push(Series::from_values(
        "running median (31 rows)",
        0.0,
        &smooth,
    ));
    c.shaded.push(XRange {
        start: trained as f64,
        end: n as f64,
        label: "untrained 300–512".into(),
    });
    c.h_lines.push(RefLine::new(0.392, "init noise level σ√d"));
    write("line_norms.svg", line_chart(&c))?;

    // 1b. Neighbour cosine with two checkpoints, and a log-scale error plot.
    let mut c = LineChart::new(
        "Cosine between neighbouring rows (invented data)",
        "position (row index)",
        "cos(row i, row i+1)",
    );
    for (k, label) in ["step 10 000", "step 40 000", "step 80 000"]
        .iter()
        .enumerate()
    {
        let ys: Vec<f64> = (0..n - 1)
            .map(|i| {
                if i < trained {
                    0.97 - 0.1 * k as f64 * (i as f64 / 300.0) + 0.01 * noise.next()
                } else {
                    0.05 * noise.next()
                }
            })
            .collect();
        c.series.push(Series::from_values(*label, 0.0, &ys));
    }
    c.shaded.push(XRange {
        start: trained as f64,
        end: (n - 1) as f64,
        label: "untrained 300–511".into(),
    });
    write("line_neighbour_cosine.svg", line_chart(&c))?;

    let mut c = LineChart::new(
        "Error of fixed table against the sinusoid formula (invented data)",
        "position (row index)",
        "max |table − formula| (weight units)",
    );
    c.y_scale = Scale::Log10;
    c.series.push(Series::from_values(
        "bf16 table",
        0.0,
        &(0..2048)
            .map(|i| 3e-3 * (1.0 + 0.5 * noise.next()) * (1.0 + i as f64 / 2048.0))
            .collect::<Vec<_>>(),
    ));
    c.series.push(Series::from_values(
        "f32 table",
        0.0,
        &(0..2048)
            .map(|i| 4e-8 * (1.0 + 0.5 * noise.next()) * (1.0 + i as f64 / 256.0))
            .collect::<Vec<_>>(),
    ));
    c.h_lines.push(RefLine::new(1e-5, "tolerance 10⁻⁵"));
    write("line_log_error.svg", line_chart(&c))?;

    // Rotary wavelengths against dimension index, context length as reference.
    let mut c = LineChart::new(
        "Rotary wavelength per dimension pair (invented data)",
        "dimension pair index",
        "wavelength 2π/θ (positions)",
    );
    c.y_scale = Scale::Log10;
    let half = 64;
    c.series.push(Series::from_values(
        "stored",
        0.0,
        &(0..half)
            .map(|i| {
                let base = 2.0 * std::f64::consts::PI * 10000f64.powf(2.0 * i as f64 / 128.0);
                if base > 4096.0 { base * 8.0 } else { base }
            })
            .collect::<Vec<_>>(),
    ));
    c.series.push(Series::from_values(
        "base 10 000, unscaled",
        0.0,
        &(0..half)
            .map(|i| 2.0 * std::f64::consts::PI * 10000f64.powf(2.0 * i as f64 / 128.0))
            .collect::<Vec<_>>(),
    ));
    c.h_lines.push(RefLine::new(4096.0, "context length 4096"));
    write("line_rotary_wavelength.svg", line_chart(&c))?;

    // Relative bias per head against distance (12 heads: palette wraps to dashes).
    let mut c = LineChart::new(
        "Relative position bias per head (invented data)",
        "relative distance (tokens)",
        "bias added to attention logit",
    );
    for h in 0..12 {
        let slope = 0.5 + h as f64 * 0.25;
        c.series.push(Series::new(
            format!("head {h}"),
            (-16..=16)
                .map(|d| {
                    (
                        d as f64,
                        -slope * (1.0 + (d as f64).abs()).ln() + 0.1 * noise.next(),
                    )
                })
                .collect(),
        ));
    }
    write("line_relative_bias.svg", line_chart(&c))?;

    // 2. Spectrum.
    let sv: Vec<f64> = (0..384)
        .map(|i| 40.0 * (-(i as f64) / 12.0).exp() + 0.35 + 0.02 * noise.next())
        .collect();
    write(
        "spectrum.svg",
        spectrum_plot(&Spectrum {
            title: "Singular values of wpe (invented data)".into(),
            singular_values: sv,
            effective_rank: Some(41.2),
            width: 800,
            height: 400,
        }),
    )?;

    // 3. Small multiples of leading components.
    let panels: Vec<Panel> = (0..6)
        .map(|k| Panel {
            title: format!(
                "component {} ({}% of energy)",
                k + 1,
                [38, 21, 12, 7, 5, 3][k]
            ),
            points: (0..n)
                .map(|i| {
                    let v = if i < trained {
                        (std::f64::consts::PI * (k + 1) as f64 * i as f64 / trained as f64).cos()
                            * 0.08
                    } else {
                        0.01 * noise.next()
                    };
                    (i as f64, v)
                })
                .collect(),
        })
        .collect();
    write(
        "small_multiples.svg",
        small_multiples(&SmallMultiples {
            title: "Leading components against position (invented data)".into(),
            x_label: "position (row index)".into(),
            y_label: "projection on component (weight units)".into(),
            panels,
            width: 800,
        }),
    )?;

    // 4. Heatmaps: position × position cosine (512 × 512 summarising 2048
    //    positions) and steps × positions change.
    let m = 512;
    let mut v = Vec::with_capacity(m * m);
    for i in 0..m {
        for j in 0..m {
            let d = (i as f64 - j as f64).abs();
            let trained_pair = i < 400 && j < 400;
            v.push(if trained_pair {
                (-d / 60.0).exp() * (d / 25.0).cos()
            } else if i == j {
                1.0
            } else {
                0.05 * noise.next()
            });
        }
    }
    v[100 * m + 200] = f64::NAN;
    write(
        "heatmap_cosine.svg",
        heatmap(&Heatmap {
            title: "Cosine similarity between positions (invented data)".into(),
            x_label: "position".into(),
            y_label: "position".into(),
            matrix: Matrix::new(m, m, v)?,
            x_range: (0.0, 2048.0),
            y_range: (0.0, 2048.0),
            color: ColorScale {
                colormap: Colormap::Diverging,
                range: Some((-1.0, 1.0)),
                label: "cosine similarity".into(),
            },
            width: 800,
            height: 600,
            row_labels: Vec::new(),
        }),
    )?;
    let steps = 12;
    let cols = 512;
    let change: Vec<f64> = (0..steps * cols)
        .map(|k| {
            let (s, p) = (k / cols, k % cols);
            let base = 0.2 * (-(s as f64) / 4.0).exp();
            if p >= 400 {
                0.0
            } else {
                base * (1.0 + 0.3 * noise.next()).abs()
            }
        })
        .collect();
    write(
        "heatmap_change.svg",
        heatmap(&Heatmap {
            title: "Per-position change between checkpoints (invented data)".into(),
            x_label: "position (row index)".into(),
            y_label: "checkpoint pair index".into(),
            matrix: Matrix::new(steps, cols, change)?,
            x_range: (0.0, 512.0),
            // Rows are items: centre the integer labels on them.
            y_range: (-0.5, steps as f64 - 0.5),
            color: ColorScale {
                colormap: Colormap::Sequential,
                range: None,
                label: "relative change of row".into(),
            },
            width: 800,
            height: 400,
            row_labels: Vec::new(),
        }),
    )?;

    // 5. Grid: similarity maps of five patches on a 14 × 14 grid.
    let picks = [(0, 0), (3, 10), (7, 7), (10, 2), (13, 13)];
    let panels: Vec<HeatmapPanel> = picks
        .iter()
        .map(|&(pr, pc)| HeatmapPanel {
            title: format!("patch (row {pr}, col {pc})"),
            matrix: Matrix::new(
                14,
                14,
                (0..196)
                    .map(|k| {
                        let (r, c) = ((k / 14) as f64, (k % 14) as f64);
                        let d2 = (r - pr as f64).powi(2) + (c - pc as f64).powi(2);
                        (-d2 / 18.0).exp() * 1.1 - 0.1
                    })
                    .collect(),
            )
            .expect("14 × 14"),
        })
        .collect();
    write(
        "heatmap_grid_patches.svg",
        heatmap_grid(&HeatmapGrid {
            title: "Similarity of one patch's position vector to all others (invented data)".into(),
            x_label: "patch column".into(),
            y_label: "patch row".into(),
            panels,
            x_range: (0.0, 14.0),
            y_range: (0.0, 14.0),
            color: ColorScale {
                colormap: Colormap::Diverging,
                range: None,
                label: "cosine similarity".into(),
            },
            columns: None,
            width: 800,
        }),
    )?;

    // Per-head relative-bias maps: 12 heads on a (2·7−1) × (2·7−1) grid.
    let panels: Vec<HeatmapPanel> = (0..12)
        .map(|h| HeatmapPanel {
            title: format!("head {h}"),
            matrix: Matrix::new(
                13,
                13,
                (0..169)
                    .map(|k| {
                        let (dr, dc) = ((k / 13) as f64 - 6.0, (k % 13) as f64 - 6.0);
                        -(0.2 + 0.15 * h as f64) * (dr * dr + dc * dc).sqrt() + 0.2 * noise.next()
                    })
                    .collect(),
            )
            .expect("13 × 13"),
        })
        .collect();
    write(
        "heatmap_grid_heads.svg",
        heatmap_grid(&HeatmapGrid {
            title: "Relative position bias per head (invented data)".into(),
            x_label: "column offset (patches)".into(),
            y_label: "row offset (patches)".into(),
            panels,
            x_range: (-6.5, 6.5),
            y_range: (-6.5, 6.5),
            color: ColorScale {
                colormap: Colormap::Sequential,
                range: None,
                label: "bias (logit units)".into(),
            },
            columns: Some(6),
            width: 800,
        }),
    )?;

    // Awkward input: a constant series, a lone point, NaN gaps, neighbouring
    // labelled bands and a vertical line inside a band.
    let mut c = LineChart::new(
        "Awkward input: constant line, lone point, gaps, crowded labels (invented data)",
        "position (row index)",
        "value (arbitrary units)",
    );
    c.series
        .push(Series::from_values("constant", 0.0, &[0.5; 100]));
    c.series.push(Series::new("lone point", vec![(42.0, 0.7)]));
    c.series.push(Series::from_values(
        "with gaps",
        0.0,
        &(0..100)
            .map(|i| {
                if i % 25 < 3 {
                    f64::NAN
                } else {
                    0.3 + 0.002 * i as f64
                }
            })
            .collect::<Vec<_>>(),
    ));
    for (a, b) in [(10.0, 14.0), (15.0, 19.0), (20.0, 24.0), (70.0, 100.0)] {
        c.shaded.push(XRange {
            start: a,
            end: b,
            label: format!("untrained {a}–{b}"),
        });
    }
    c.v_lines.push(RefLine::new(80.0, "declared maximum 80"));
    write("line_awkward.svg", line_chart(&c))?;

    // Empty input.
    write(
        "empty.svg",
        line_chart(&LineChart::new("Nothing to show", "x", "y")),
    )?;
    Ok(())
}
