//! Counter-based random streams: the numbers of realization `index` of seed
//! `seed` depend on (seed, purpose, index) alone, never on threads or order.
//!
//! Each stream is ChaCha8 keyed by a SplitMix64 expansion of (seed, purpose),
//! with the realization index as ChaCha's 64-bit stream number.

use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};

/// Purpose codes that keep independent uses of one seed apart: disorder terms
/// use their position `0, 1, ...`, drawn packets `PACKET_PURPOSE`, and the
/// classical particles of realization `index` `CLASSICAL_PURPOSE + index`.
pub const PACKET_PURPOSE: u64 = u64::MAX;
pub const CLASSICAL_PURPOSE: u64 = 1 << 62;

fn splitmix64(state: &mut u64) -> u64 {
    // SplitMix64 (Steele, Lea & Flood, OOPSLA 2014), a standard seed expander.
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// A stream of uniform and normal numbers.
pub struct Stream {
    rng: ChaCha8Rng,
    spare_normal: Option<f64>,
}

impl Stream {
    /// The stream of realization `index` for `purpose` (a disorder term's position, or `PACKET_PURPOSE`).
    pub fn new(seed: u64, purpose: u64, index: u64) -> Self {
        let mut state = seed ^ purpose.rotate_left(32) ^ 0x6D6F_7474_6C65_0001;
        let mut key = [0u8; 32];
        for chunk in key.chunks_exact_mut(8) {
            chunk.copy_from_slice(&splitmix64(&mut state).to_le_bytes());
        }
        let mut rng = ChaCha8Rng::from_seed(key);
        rng.set_stream(index);
        Stream {
            rng,
            spare_normal: None,
        }
    }

    /// Uniform on [0, 1) with 53 random bits.
    pub fn uniform(&mut self) -> f64 {
        (self.rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Standard normal by the Box-Muller transform (Box & Muller, Ann. Math. Stat. 29, 610 (1958)).
    pub fn normal(&mut self) -> f64 {
        if let Some(value) = self.spare_normal.take() {
            return value;
        }
        let radius = (-2.0 * (1.0 - self.uniform()).ln()).sqrt();
        let angle = 2.0 * std::f64::consts::PI * self.uniform();
        self.spare_normal = Some(radius * angle.sin());
        radius * angle.cos()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn streams_repeat_and_differ() {
        let a: Vec<f64> = (0..4).map(|_| Stream::new(7, 0, 3).uniform()).collect();
        assert!(a.windows(2).all(|w| w[0] == w[1]));
        let mut one = Stream::new(7, 0, 3);
        let mut other = Stream::new(7, 0, 4);
        let mut third = Stream::new(7, 1, 3);
        let x = one.uniform();
        assert_ne!(x, other.uniform());
        assert_ne!(x, third.uniform());
    }

    #[test]
    fn normals_have_unit_variance() {
        let mut stream = Stream::new(1, 2, 3);
        let n = 200_000;
        let values: Vec<f64> = (0..n).map(|_| stream.normal()).collect();
        let mean = values.iter().sum::<f64>() / n as f64;
        let variance = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n as f64;
        // Sampling error of the mean and variance: 1/sqrt(n) and sqrt(2/n).
        assert!(mean.abs() < 5.0 / (n as f64).sqrt());
        assert!((variance - 1.0).abs() < 5.0 * (2.0 / n as f64).sqrt());
    }
}
