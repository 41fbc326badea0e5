//! Invented test data for the unit tests of the whole crate: a small seeded generator (SplitMix64,
//! Steele, Lea & Flood 2014, constants as published), Gaussian draws by the Box–Muller
//! transform (Box & Muller 1958) and random orthogonal matrices from the QR
//! factorisation of a Gaussian matrix (Mezzadri 2007, "How to generate random matrices
//! from the classical compact groups": Q of a Gaussian matrix, with the signs of R's
//! diagonal folded in, is Haar-distributed).

use ndarray::Array2;

/// SplitMix64 state; `Rng(seed)` or [`Rng::new`].
pub struct Rng(pub u64);

impl Rng {
    pub fn new(seed: u64) -> Self {
        Rng(seed)
    }

    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in (0, 1).
    pub fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    pub fn normal(&mut self) -> f64 {
        let (u1, u2) = (self.uniform(), self.uniform());
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}

pub fn gaussian_table(rng: &mut Rng, n: usize, d: usize, std: f64) -> Array2<f64> {
    Array2::from_shape_simple_fn((n, d), || std * rng.normal())
}

pub fn round_f32(x: f64) -> f64 {
    x as f32 as f64
}

/// Q of the QR factorisation of a d×d Gaussian matrix (modified Gram–Schmidt), with
/// column signs chosen so that R has a positive diagonal.
pub fn random_orthogonal(rng: &mut Rng, d: usize) -> Array2<f64> {
    let mut q = gaussian_table(rng, d, d, 1.0);
    for j in 0..d {
        for p in 0..j {
            let r = q.column(p).dot(&q.column(j));
            let qp = q.column(p).to_owned();
            q.column_mut(j).scaled_add(-r, &qp);
        }
        let norm = q.column(j).dot(&q.column(j)).sqrt();
        q.column_mut(j).mapv_inplace(|v| v / norm);
    }
    q
}
