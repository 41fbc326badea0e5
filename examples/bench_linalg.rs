//! Times the linalg seam on random tables for `bench/svd_bench.sh`.
//!
//! Usage: `bench_linalg DIR ROWSxCOLS...` — for each size, builds an invented Gaussian
//! table (splitmix64 + Box–Muller, seed fixed), writes it to `DIR/table_ROWSxCOLS.npy` so
//! numpy times the very same table, then times `singular_values` followed by
//! `leading_components(.., 8)` and prints `size seconds` lines on stdout.

use std::io::Write;
use std::time::Instant;

use ndarray::Array2;
use posaudit::linalg;

fn gaussian(n: usize, d: usize, seed: u64) -> Array2<f64> {
    let mut state = seed;
    let mut uniform = || {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        ((z >> 11) as f64 + 0.5) / 2f64.powi(53)
    };
    Array2::from_shape_fn((n, d), |_| {
        let u1 = uniform();
        let u2 = uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    })
}

/// NumPy format 1.0: magic, version, little-endian header length, dict, padding to 64.
fn write_npy(path: &std::path::Path, t: &Array2<f64>) -> std::io::Result<()> {
    let dict = format!(
        "{{'descr': '<f8', 'fortran_order': False, 'shape': ({}, {}), }}",
        t.nrows(),
        t.ncols()
    );
    let mut header = dict.into_bytes();
    let total = 10 + header.len() + 1;
    header.extend(std::iter::repeat_n(b' ', (64 - total % 64) % 64));
    header.push(b'\n');
    let mut f = std::io::BufWriter::new(std::fs::File::create(path)?);
    f.write_all(b"\x93NUMPY\x01\x00")?;
    f.write_all(
        &u16::try_from(header.len())
            .unwrap_or(u16::MAX)
            .to_le_bytes(),
    )?;
    f.write_all(&header)?;
    for v in t.iter() {
        f.write_all(&v.to_le_bytes())?;
    }
    f.flush()
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let dir = std::path::PathBuf::from(args.next().ok_or("usage: bench_linalg DIR RxC...")?);
    if let Ok(n) = std::env::var("POSAUDIT_THREADS") {
        linalg::set_threads(n.parse()?);
    }
    for size in args {
        let (r, c) = size.split_once('x').ok_or("size must be ROWSxCOLS")?;
        let (r, c): (usize, usize) = (r.parse()?, c.parse()?);
        let t = gaussian(r, c, 20261202);
        write_npy(&dir.join(format!("table_{size}.npy")), &t)?;
        let start = Instant::now();
        let values = linalg::singular_values(t.view())?;
        let dec = linalg::leading_components(t.view(), 8)?;
        let secs = start.elapsed().as_secs_f64();
        eprintln!(
            "{size}: backend {} sigma1 {:.6} sigma_min {:.6} (leading {:.6})",
            linalg::BACKEND,
            values[0],
            values[values.len() - 1],
            dec.singular_values[0]
        );
        println!("{size} {secs:.4}");
    }
    Ok(())
}
