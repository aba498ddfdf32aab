//! A small seeded random generator whose stream is fixed by this crate, not by a dependency.
//!
//! Renders, synthetic trials and golden files must give the same bytes for the same seed in every
//! release, so the generator is SplitMix64 (G. Steele, D. Lea, C. Flood, "Fast splittable
//! pseudorandom number generators", OOPSLA 2014) and the normal deviates come from the
//! Box-Muller transform, both written here.

/// SplitMix64 with uniform and normal deviates.
#[derive(Clone, Debug)]
pub struct SeededRng {
    state: u64,
    spare_normal: Option<f64>,
}

impl SeededRng {
    /// A generator for a seed.
    pub fn new(seed: u64) -> Self {
        SeededRng { state: seed, spare_normal: None }
    }

    /// An independent generator derived from this seed and a stream index (for example one per
    /// image, so that images can render in any order and still give the same bytes).
    pub fn stream(seed: u64, index: u64) -> Self {
        let mut mix = SeededRng::new(seed ^ index.wrapping_mul(0xA076_1D64_78BD_642F));
        let s = mix.next_u64() ^ index;
        SeededRng::new(s)
    }

    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in `[0, 1)` with 53 random bits.
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Uniform in `[lo, hi)`.
    pub fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.uniform()
    }

    /// Uniform integer in `0..n` (`n > 0`).
    pub fn below(&mut self, n: u64) -> u64 {
        // Multiply-shift: bias below 2^-64 * n, irrelevant here.
        ((self.next_u64() as u128 * n as u128) >> 64) as u64
    }

    /// Standard normal deviate (Box-Muller).
    pub fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare_normal.take() {
            return z;
        }
        let u1 = 1.0 - self.uniform(); // (0, 1]
        let u2 = self.uniform();
        let r = (-2.0 * u1.ln()).sqrt();
        let (s, c) = (std::f64::consts::TAU * u2).sin_cos();
        self.spare_normal = Some(r * s);
        r * c
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The first outputs for seed 1234567: the SplitMix64 algorithm of Steele, Lea and Flood
    /// (OOPSLA 2014) evaluated independently with Python's arbitrary-precision integers.
    #[test]
    fn splitmix_stream_is_fixed() {
        let mut r = SeededRng::new(1234567);
        let got: Vec<u64> = (0..3).map(|_| r.next_u64()).collect();
        assert_eq!(got, vec![6457827717110365317, 3203168211198807973, 9817491932198370423]);
    }

    #[test]
    fn normal_deviates_have_unit_variance() {
        let mut r = SeededRng::new(7);
        let n = 200_000;
        let v: Vec<f64> = (0..n).map(|_| r.normal()).collect();
        let mean = v.iter().sum::<f64>() / n as f64;
        let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n as f64;
        // Standard errors: 1/sqrt(n) = 0.0022 for the mean, sqrt(2/n) = 0.0032 for the variance.
        assert!(mean.abs() < 0.01, "mean {mean}");
        assert!((var - 1.0).abs() < 0.015, "variance {var}");
    }
}
