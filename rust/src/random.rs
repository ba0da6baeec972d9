//! Counter-based random streams: the numbers of realization `index` of seed
//! `seed` depend on (seed, purpose, index) alone, never on threads or order.
//!
//! Each stream is the ChaCha8 keystream (Bernstein, "ChaCha, a variant of
//! Salsa20", 2008; 8 rounds) under a key from a SplitMix64 expansion of
//! (seed, purpose), with the realization index as ChaCha's 64-bit stream
//! number and its 64-bit block counter starting at zero. The keystream is
//! produced eight blocks (512 bytes) at a time: with AVX2 (chosen at run time)
//! by the vectorized rounds below, elsewhere by `rand_chacha`, which yields the
//! same words (a test checks it).
//!
//! Normals come from the ziggurat method, single uniforms from the 52 upper
//! bits of a word, box disorder from 32 bits a value; each is exact up to the
//! resolution of its bits.

use std::sync::OnceLock;

/// Purpose codes that keep independent uses of one seed apart: disorder terms
/// use their position `0, 1, ...`, drawn packets `PACKET_PURPOSE`, and the
/// classical particles of realization `index` `CLASSICAL_PURPOSE + index`, drawn
/// phases and quasimomenta of the time-dependent terms `DRIVE_PURPOSE`.
pub const PACKET_PURPOSE: u64 = u64::MAX;
pub const DRIVE_PURPOSE: u64 = u64::MAX - 1;
pub const CLASSICAL_PURPOSE: u64 = 1 << 62;

/// 64-bit words per batch: eight ChaCha blocks of eight words.
const BATCH: usize = 64;

fn splitmix64(state: &mut u64) -> u64 {
    // SplitMix64 (Steele, Lea & Flood, OOPSLA 2014), a standard seed expander.
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// `2^-52`.
const EPSILON: f64 = f64::EPSILON;

/// Uniform on `[0, 1)` from the upper 52 bits: `1.m - 1`, exact.
#[inline(always)]
fn unit(bits: u64) -> f64 {
    f64::from_bits(0x3FF0_0000_0000_0000 | (bits >> 12)) - 1.0
}

/// Uniform on the open `(0, 1)`: `(k + 1/2) 2^-52` for the upper 52 bits `k`.
#[inline(always)]
fn open_unit(bits: u64) -> f64 {
    ((bits >> 12) as i64 as f64 + 0.5) * EPSILON
}

/// A stream of uniform and normal numbers.
pub struct Stream {
    key: [u32; 8],
    stream: u64,
    /// Block counter of the next batch.
    counter: u64,
    words: [u64; BATCH],
    /// Next unread word of `words` (`BATCH`: none left).
    position: usize,
}

impl Stream {
    /// The stream of realization `index` for `purpose` (a disorder term's position, or `PACKET_PURPOSE`).
    pub fn new(seed: u64, purpose: u64, index: u64) -> Self {
        let mut state = seed ^ purpose.rotate_left(32) ^ 0x6D6F_7474_6C65_0001;
        let mut key = [0u32; 8];
        for pair in key.chunks_exact_mut(2) {
            let word = splitmix64(&mut state);
            pair[0] = word as u32;
            pair[1] = (word >> 32) as u32;
        }
        Stream {
            key,
            stream: index,
            counter: 0,
            words: [0; BATCH],
            position: BATCH,
        }
    }

    #[inline(never)]
    fn refill(&mut self) {
        chacha8_batch(&self.key, self.stream, self.counter, &mut self.words);
        self.counter = self.counter.wrapping_add((BATCH / 8) as u64);
        self.position = 0;
    }

    /// The next 64 bits of the keystream (two little-endian words).
    #[inline(always)]
    pub fn next_u64(&mut self) -> u64 {
        if self.position == BATCH {
            self.refill();
        }
        let word = self.words[self.position];
        self.position += 1;
        word
    }

    /// Uniform on [0, 1) with 52 random bits.
    pub fn uniform(&mut self) -> f64 {
        unit(self.next_u64())
    }

    /// Standard normal (see `normals`).
    pub fn normal(&mut self) -> f64 {
        let table = ziggurat();
        loop {
            let bits = self.next_u64();
            if let Some(value) = table.fast(bits).or_else(|| self.edge(table, bits)) {
                return value;
            }
        }
    }

    /// `out[j] = scale * u_j + offset` with `u_j` uniform on [0, 1), one word each.
    pub fn uniforms(&mut self, out: &mut [f64], scale: f64, offset: f64) {
        let mut done = 0;
        while done < out.len() {
            if self.position == BATCH {
                self.refill();
            }
            let take = (BATCH - self.position).min(out.len() - done);
            let words = &self.words[self.position..self.position + take];
            for (v, &bits) in out[done..done + take].iter_mut().zip(words) {
                *v = scale * unit(bits) + offset;
            }
            self.position += take;
            done += take;
        }
    }

    /// `out[j] += width (u_j - 1/2)` with `u_j = (k_j + 1/2) 2^-32` uniform over
    /// the 2^32 values of a 32-bit `k_j`: two values per word (low half first),
    /// symmetric about zero and strictly inside `(-width/2, width/2)`.
    pub fn add_centered_uniforms(&mut self, out: &mut [f64], width: f64) {
        let scale = width * (1.0 / 4_294_967_296.0);
        // (k - 2^31) + 1/2, exact: flipping the top bit of k is subtracting 2^31.
        let centered = |half: u64| ((half as u32 ^ 0x8000_0000) as i32) as f64 + 0.5;
        let mut pairs = out.chunks_exact_mut(2);
        let mut done = 0;
        let total = pairs.len();
        while done < total {
            if self.position == BATCH {
                self.refill();
            }
            let take = (BATCH - self.position).min(total - done);
            let words = &self.words[self.position..self.position + take];
            for (pair, &bits) in pairs.by_ref().take(take).zip(words) {
                pair[0] += scale * centered(bits);
                pair[1] += scale * centered(bits >> 32);
            }
            self.position += take;
            done += take;
        }
        if let [last] = pairs.into_remainder() {
            *last += scale * centered(self.next_u64());
        }
    }

    /// Standard normals into `out`, by the ziggurat method of Marsaglia & Tsang
    /// (J. Stat. Softw. 5(8), 2000) with 256 layers: one word per value in all
    /// but about 1.5 % of draws, which take the exact wedge or tail test.
    pub fn normals(&mut self, out: &mut [f64]) {
        let table = ziggurat();
        let mut done = 0;
        while done < out.len() {
            if self.position == BATCH {
                self.refill();
            }
            // The common case in a tight loop over the batch; the rest by `edge`.
            let mut position = self.position;
            while position < BATCH && done < out.len() {
                let bits = self.words[position];
                position += 1;
                match table.fast(bits) {
                    Some(value) => {
                        out[done] = value;
                        done += 1;
                    }
                    None => {
                        self.position = position;
                        if let Some(value) = self.edge(table, bits) {
                            out[done] = value;
                            done += 1;
                        }
                        position = self.position;
                    }
                }
            }
            self.position = position;
        }
    }

    /// The wedge and tail tests of a draw `bits` that missed the core of its layer.
    #[cold]
    #[inline(never)]
    fn edge(&mut self, table: &Ziggurat, bits: u64) -> Option<f64> {
        let (layer, u) = Ziggurat::split(bits);
        if layer == 0 {
            // The tail beyond r (Marsaglia, Technometrics 6, 101 (1964)).
            let r = table.x[1];
            loop {
                let a = -open_unit(self.next_u64()).ln() / r;
                let b = -open_unit(self.next_u64()).ln();
                if 2.0 * b > a * a {
                    return Some((r + a).copysign(u));
                }
            }
        }
        let x = u * table.x[layer];
        let y = table.f[layer] + unit(self.next_u64()) * (table.f[layer + 1] - table.f[layer]);
        (y < (-0.5 * x * x).exp()).then_some(x)
    }
}

/// The layers of the ziggurat under `f(x) = exp(-x^2/2)`: layer `i` is the
/// rectangle `[0, x[i]] x [f(x[i]), f(x[i+1])]` (layer 0: the base of height
/// `f(r)` and width `v / f(r)`, standing for the tail too), each of area `v`.
pub(crate) struct Ziggurat {
    x: [f64; 257],
    f: [f64; 257],
    /// `x[i+1] / x[i]`: a draw `u x[i]` with `|u|` below it lies under the curve.
    core: [f64; 256],
}

impl Ziggurat {
    /// The layer (low 8 bits) and a symmetric uniform `u` on the open `(-1, 1)`
    /// (upper 52 bits `k`: `((2k + 1) - 2^52) 2^-52`, exact).
    #[inline(always)]
    fn split(bits: u64) -> (usize, f64) {
        let odd = ((bits >> 12) << 1 | 1) as i64 - (1i64 << 52);
        ((bits & 0xff) as usize, odd as f64 * EPSILON)
    }

    #[inline(always)]
    fn fast(&self, bits: u64) -> Option<f64> {
        let (layer, u) = Self::split(bits);
        (u.abs() < self.core[layer]).then(|| u * self.x[layer])
    }

    /// The table for the `r` that closes it: the top layer's area is `v` too.
    fn new() -> Self {
        let f = |x: f64| (-0.5 * x * x).exp();
        // Layers from r: the area v(r) and the top layer's excess area (negative when
        // the layers run out before the top, which happens when r is too small).
        let build = |r: f64| {
            let v = r * f(r) + normal_tail_area(r);
            let mut x = [0.0; 257];
            x[0] = v / f(r);
            x[1] = r;
            for i in 1..255 {
                let level = f(x[i]) + v / x[i];
                if level >= 1.0 {
                    return (x, v, -1.0);
                }
                x[i + 1] = (-2.0 * level.ln()).sqrt();
            }
            let excess = x[255] * (1.0 - f(x[255])) - v;
            (x, v, excess)
        };
        // Bisection on r: too large an r gives layers too thin to reach the top in
        // 256 (excess > 0), too small an r runs out of room before (excess < 0).
        let (mut low, mut high) = (3.0, 4.5);
        for _ in 0..200 {
            let middle = 0.5 * (low + high);
            if middle <= low || middle >= high {
                break;
            }
            if build(middle).2 > 0.0 {
                high = middle;
            } else {
                low = middle;
            }
        }
        let (mut x, _, _) = build(high);
        x[256] = 0.0;
        let mut values = [0.0; 257];
        for (value, &x) in values.iter_mut().zip(&x) {
            *value = f(x);
        }
        let mut core = [0.0; 256];
        for (i, ratio) in core.iter_mut().enumerate() {
            *ratio = x[i + 1] / x[i];
        }
        Ziggurat { x, f: values, core }
    }
}

pub(crate) fn ziggurat() -> &'static Ziggurat {
    static TABLE: OnceLock<Ziggurat> = OnceLock::new();
    TABLE.get_or_init(Ziggurat::new)
}

/// `integral_r^inf exp(-x^2/2) dx` for `r >= 3`, by Laplace's continued fraction
/// `exp(-r^2/2) / (r + 1/(r + 2/(r + 3/(r + ...))))` (common practice; 200
/// terms are far more than double precision needs at `r >= 3`).
fn normal_tail_area(r: f64) -> f64 {
    let mut denominator = r;
    for n in (1..200).rev() {
        denominator = r + n as f64 / denominator;
    }
    (-0.5 * r * r).exp() / denominator
}

/// Blocks `counter .. counter + 8` of the ChaCha8 keystream, as 64-bit words in order.
fn chacha8_batch(key: &[u32; 8], stream: u64, counter: u64, out: &mut [u64; BATCH]) {
    #[cfg(target_arch = "x86_64")]
    if has_avx2() {
        // SAFETY: AVX2 is present (checked at run time).
        unsafe { avx2::chacha8_batch(key, stream, counter, out) };
        return;
    }
    portable_batch(key, stream, counter, out);
}

/// The same blocks from `rand_chacha` (its own vector code, for any CPU).
fn portable_batch(key: &[u32; 8], stream: u64, counter: u64, out: &mut [u64; BATCH]) {
    use rand_chacha::ChaCha8Rng;
    use rand_core::{Rng, SeedableRng};
    let mut seed = [0u8; 32];
    for (bytes, word) in seed.chunks_exact_mut(4).zip(key) {
        bytes.copy_from_slice(&word.to_le_bytes());
    }
    let mut rng = ChaCha8Rng::from_seed(seed);
    rng.set_stream(stream);
    rng.set_word_pos(counter as u128 * 16);
    for word in out.iter_mut() {
        *word = rng.next_u64();
    }
}

#[cfg(target_arch = "x86_64")]
fn has_avx2() -> bool {
    static DETECTED: OnceLock<bool> = OnceLock::new();
    *DETECTED.get_or_init(|| is_x86_feature_detected!("avx2"))
}

#[cfg(target_arch = "x86_64")]
mod avx2 {
    //! Eight ChaCha blocks side by side: one 256-bit register per state word,
    //! one lane per block, then an 8 x 8 transpose back to block order.

    use std::arch::x86_64::*;

    #[inline(always)]
    unsafe fn rotate16(x: __m256i) -> __m256i {
        let order = _mm256_set_epi8(
            13, 12, 15, 14, 9, 8, 11, 10, 5, 4, 7, 6, 1, 0, 3, 2, 13, 12, 15, 14, 9, 8, 11, 10, 5,
            4, 7, 6, 1, 0, 3, 2,
        );
        _mm256_shuffle_epi8(x, order)
    }

    #[inline(always)]
    unsafe fn rotate8(x: __m256i) -> __m256i {
        let order = _mm256_set_epi8(
            14, 13, 12, 15, 10, 9, 8, 11, 6, 5, 4, 7, 2, 1, 0, 3, 14, 13, 12, 15, 10, 9, 8, 11, 6,
            5, 4, 7, 2, 1, 0, 3,
        );
        _mm256_shuffle_epi8(x, order)
    }

    #[inline(always)]
    unsafe fn rotate<const LEFT: i32, const RIGHT: i32>(x: __m256i) -> __m256i {
        _mm256_or_si256(_mm256_slli_epi32::<LEFT>(x), _mm256_srli_epi32::<RIGHT>(x))
    }

    #[inline(always)]
    unsafe fn quarter(x: &mut [__m256i; 16], a: usize, b: usize, c: usize, d: usize) {
        x[a] = _mm256_add_epi32(x[a], x[b]);
        x[d] = rotate16(_mm256_xor_si256(x[d], x[a]));
        x[c] = _mm256_add_epi32(x[c], x[d]);
        x[b] = rotate::<12, 20>(_mm256_xor_si256(x[b], x[c]));
        x[a] = _mm256_add_epi32(x[a], x[b]);
        x[d] = rotate8(_mm256_xor_si256(x[d], x[a]));
        x[c] = _mm256_add_epi32(x[c], x[d]);
        x[b] = rotate::<7, 25>(_mm256_xor_si256(x[b], x[c]));
    }

    /// Rows `r[0..8]` (a word of eight blocks each) to columns (eight words of one block each).
    #[inline(always)]
    unsafe fn transpose(r: [__m256i; 8]) -> [__m256i; 8] {
        let t0 = _mm256_unpacklo_epi32(r[0], r[1]);
        let t1 = _mm256_unpackhi_epi32(r[0], r[1]);
        let t2 = _mm256_unpacklo_epi32(r[2], r[3]);
        let t3 = _mm256_unpackhi_epi32(r[2], r[3]);
        let t4 = _mm256_unpacklo_epi32(r[4], r[5]);
        let t5 = _mm256_unpackhi_epi32(r[4], r[5]);
        let t6 = _mm256_unpacklo_epi32(r[6], r[7]);
        let t7 = _mm256_unpackhi_epi32(r[6], r[7]);
        let u0 = _mm256_unpacklo_epi64(t0, t2);
        let u1 = _mm256_unpackhi_epi64(t0, t2);
        let u2 = _mm256_unpacklo_epi64(t1, t3);
        let u3 = _mm256_unpackhi_epi64(t1, t3);
        let u4 = _mm256_unpacklo_epi64(t4, t6);
        let u5 = _mm256_unpackhi_epi64(t4, t6);
        let u6 = _mm256_unpacklo_epi64(t5, t7);
        let u7 = _mm256_unpackhi_epi64(t5, t7);
        [
            _mm256_permute2x128_si256::<0x20>(u0, u4),
            _mm256_permute2x128_si256::<0x20>(u1, u5),
            _mm256_permute2x128_si256::<0x20>(u2, u6),
            _mm256_permute2x128_si256::<0x20>(u3, u7),
            _mm256_permute2x128_si256::<0x31>(u0, u4),
            _mm256_permute2x128_si256::<0x31>(u1, u5),
            _mm256_permute2x128_si256::<0x31>(u2, u6),
            _mm256_permute2x128_si256::<0x31>(u3, u7),
        ]
    }

    /// # Safety
    /// The CPU must support AVX2.
    #[target_feature(enable = "avx2")]
    pub(super) unsafe fn chacha8_batch(
        key: &[u32; 8],
        stream: u64,
        counter: u64,
        out: &mut [u64; super::BATCH],
    ) {
        let constants = [0x6170_7865u32, 0x3320_646e, 0x7962_2d32, 0x6b20_6574];
        let mut low = [0u32; 8];
        let mut high = [0u32; 8];
        for lane in 0..8 {
            let block = counter.wrapping_add(lane as u64);
            low[lane] = block as u32;
            high[lane] = (block >> 32) as u32;
        }
        let mut start = [_mm256_setzero_si256(); 16];
        for (word, &value) in constants.iter().enumerate() {
            start[word] = _mm256_set1_epi32(value as i32);
        }
        for (word, &value) in key.iter().enumerate() {
            start[4 + word] = _mm256_set1_epi32(value as i32);
        }
        start[12] = _mm256_loadu_si256(low.as_ptr() as *const __m256i);
        start[13] = _mm256_loadu_si256(high.as_ptr() as *const __m256i);
        start[14] = _mm256_set1_epi32(stream as u32 as i32);
        start[15] = _mm256_set1_epi32((stream >> 32) as u32 as i32);
        let mut x = start;
        for _ in 0..4 {
            quarter(&mut x, 0, 4, 8, 12);
            quarter(&mut x, 1, 5, 9, 13);
            quarter(&mut x, 2, 6, 10, 14);
            quarter(&mut x, 3, 7, 11, 15);
            quarter(&mut x, 0, 5, 10, 15);
            quarter(&mut x, 1, 6, 11, 12);
            quarter(&mut x, 2, 7, 8, 13);
            quarter(&mut x, 3, 4, 9, 14);
        }
        for (word, &initial) in x.iter_mut().zip(&start) {
            *word = _mm256_add_epi32(*word, initial);
        }
        let first: [__m256i; 8] = x[..8].try_into().unwrap();
        let second: [__m256i; 8] = x[8..].try_into().unwrap();
        let (first, second) = (transpose(first), transpose(second));
        let base = out.as_mut_ptr() as *mut __m256i;
        for block in 0..8 {
            // Block `block`'s words 0..8 then 8..16: four 64-bit values each.
            _mm256_storeu_si256(base.add(2 * block), first[block]);
            _mm256_storeu_si256(base.add(2 * block + 1), second[block]);
        }
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
    fn the_keystream_is_chacha8() {
        // Both paths give rand_chacha's ChaCha8 stream, across the 32-bit counter carry too.
        use rand_chacha::ChaCha8Rng;
        use rand_core::{Rng, SeedableRng};
        let key = [1, 2, 3, 0xdead_beef, 5, 6, 7, u32::MAX];
        let mut seed = [0u8; 32];
        for (bytes, word) in seed.chunks_exact_mut(4).zip(&key) {
            bytes.copy_from_slice(&word.to_le_bytes());
        }
        for (stream, counter) in [(0u64, 0u64), (77, 16), (u64::MAX - 3, (1 << 32) - 4)] {
            let mut reference = ChaCha8Rng::from_seed(seed);
            reference.set_stream(stream);
            reference.set_word_pos(counter as u128 * 16);
            let expected: Vec<u64> = (0..BATCH).map(|_| reference.next_u64()).collect();
            let mut fast = [0u64; BATCH];
            chacha8_batch(&key, stream, counter, &mut fast);
            assert_eq!(&fast[..], &expected[..]);
            let mut portable = [0u64; BATCH];
            portable_batch(&key, stream, counter, &mut portable);
            assert_eq!(&portable[..], &expected[..]);
        }
        // Known answer: ChaCha8 with an all-zero key and nonce starts with
        // 3e00ef2f895f40d6 (the ChaCha8 test vector of Bernstein's reference code, from memory).
        let mut zero = [0u64; BATCH];
        chacha8_batch(&[0; 8], 0, 0, &mut zero);
        assert_eq!(
            zero[0].to_le_bytes(),
            [0x3e, 0x00, 0xef, 0x2f, 0x89, 0x5f, 0x40, 0xd6]
        );
    }

    #[test]
    fn bulk_and_single_draws_agree() {
        let mut single = Stream::new(5, 1, 9);
        let mut bulk = Stream::new(5, 1, 9);
        let mut values = vec![0.0; 1000];
        bulk.normals(&mut values[..3]);
        bulk.normals(&mut values[3..]);
        for &v in &values {
            assert_eq!(v, single.normal());
        }
        bulk.uniforms(&mut values[..70], 2.0, -1.0);
        for &v in &values[..70] {
            assert_eq!(v, 2.0 * single.uniform() - 1.0);
        }
        // Two centred values a word, low half first; an odd count takes the low half of one more.
        let mut centred = vec![0.0; 5];
        bulk.add_centered_uniforms(&mut centred, 2.0);
        for pair in centred.chunks(2) {
            let bits = single.next_u64();
            let value = |half: u64| ((half & 0xffff_ffff) as f64 + 0.5) / 2f64.powi(31) - 1.0;
            assert_eq!(pair[0], value(bits));
            if pair.len() == 2 {
                assert_eq!(pair[1], value(bits >> 32));
            }
        }
        assert!(centred.iter().all(|v| v.abs() < 1.0));
    }

    #[test]
    fn the_ziggurat_closes() {
        let table = ziggurat();
        // r for 256 layers, 3.6541528853610088 (Marsaglia & Tsang 2000; from memory).
        assert!(
            (table.x[1] - 3.654_152_885_361_009).abs() < 1e-12,
            "{}",
            table.x[1]
        );
        let v = table.x[1] * table.f[1] + normal_tail_area(table.x[1]);
        assert!((table.x[0] * table.f[1] - v).abs() < 1e-15);
        for i in 1..256 {
            let area = table.x[i] * (table.f[i + 1] - table.f[i]);
            assert!((area - v).abs() < 1e-12 * v, "layer {i}: {area} vs {v}");
        }
        // The tail area against sqrt(pi/2) erfc(3/sqrt 2) (Python's math.erfc).
        assert!((normal_tail_area(3.0) - 0.003_383_692_573_952_73).abs() < 1e-16);
    }

    #[test]
    fn normals_have_unit_variance() {
        let mut stream = Stream::new(1, 2, 3);
        let n = 400_000;
        let mut values = vec![0.0; n];
        stream.normals(&mut values);
        let mean = values.iter().sum::<f64>() / n as f64;
        let variance = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n as f64;
        // Sampling error of the mean and variance: 1/sqrt(n) and sqrt(2/n).
        assert!(mean.abs() < 5.0 / (n as f64).sqrt());
        assert!((variance - 1.0).abs() < 5.0 * (2.0 / n as f64).sqrt());
        // Probabilities of bins of |z| within five binomial standard errors: the
        // core, the wedges, the last wedge below r and the tail beyond it (values of
        // the normal law from erfc(x / sqrt 2) / 2, computed with Python's math.erfc).
        let r = ziggurat().x[1];
        let bins = [
            (0.0, 0.5, 0.191_462_461_274_013_1),
            (1.0, 1.5, 0.091_848_052_662_599),
            (2.0, 3.0, 0.021_400_233_916_549_12),
            (3.0, r, 0.001_220_881_787_803_145),
            (r, f64::INFINITY, 0.000_129_016_243_826_950_65),
        ];
        for (low, high, p) in bins {
            let count = values
                .iter()
                .filter(|v| (low..high).contains(&v.abs()))
                .count() as f64;
            let q = 2.0 * p;
            let error = (q * (1.0 - q) / n as f64).sqrt();
            assert!(
                (count / n as f64 - q).abs() < 5.0 * error,
                "|z| in [{low}, {high}): {} vs {q}",
                count / n as f64
            );
        }
    }
}
