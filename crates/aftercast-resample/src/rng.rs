//! Reproducible random streams: replicate `i` of seed `s` always draws from the same stream,
//! whatever the number of threads, so a seed reproduces a run bit for bit.
//!
//! The generator is Xoshiro256++ (Blackman & Vigna 2018, "Scrambled linear pseudorandom number
//! generators"); each stream's 256-bit state is filled by SplitMix64 (Steele, Lea & Flood 2014)
//! from a 64-bit key mixed from the seed and the replicate index, so neighbouring indices give
//! unrelated streams. We implement it here rather than take a crate so that the stream of a
//! given (seed, index) can never change under a dependency upgrade.

use rand::rand_core::TryRng;
use rayon::prelude::*;
use std::convert::Infallible;

/// SplitMix64 step: advances `state` and returns the next output.
#[inline]
pub fn splitmix64(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// One random stream (Xoshiro256++).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Stream {
    s: [u64; 4],
}

impl Stream {
    /// The stream for replicate `index` of `seed`.
    ///
    /// ```
    /// use aftercast_resample::rng::Stream;
    /// use rand::RngExt;
    /// let mut a = Stream::new(7, 3);
    /// let mut b = Stream::new(7, 3);
    /// let x: f64 = a.random();
    /// assert_eq!(x, b.random::<f64>());
    /// ```
    pub fn new(seed: u64, index: u64) -> Self {
        let mut key = seed;
        let k1 = splitmix64(&mut key);
        let mut st = k1 ^ index.wrapping_mul(0xD1B5_4A32_D192_ED03).rotate_left(17) ^ index;
        let mut s = [0u64; 4];
        for v in &mut s {
            *v = splitmix64(&mut st);
        }
        if s == [0; 4] {
            s[0] = 1;
        }
        Stream { s }
    }

    /// Next 64 random bits.
    #[inline]
    pub fn next_u64(&mut self) -> u64 {
        let s = &mut self.s;
        let result = s[0].wrapping_add(s[3]).rotate_left(23).wrapping_add(s[0]);
        let t = s[1] << 17;
        s[2] ^= s[0];
        s[3] ^= s[1];
        s[1] ^= s[2];
        s[0] ^= s[3];
        s[2] ^= t;
        s[3] = s[3].rotate_left(45);
        result
    }

    /// A uniform draw in [0, 1) with 53 random bits.
    #[inline]
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// A standard exponential draw, -ln(1 - U).
    #[inline]
    pub fn exp1(&mut self) -> f64 {
        -(1.0 - self.uniform()).ln()
    }

    /// A standard normal draw (Box-Muller from two uniforms; the cosine branch).
    #[inline]
    pub fn normal(&mut self) -> f64 {
        let (u, v) = (1.0 - self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }
}

impl TryRng for Stream {
    type Error = Infallible;

    #[inline]
    fn try_next_u32(&mut self) -> Result<u32, Infallible> {
        Ok((self.next_u64() >> 32) as u32)
    }

    #[inline]
    fn try_next_u64(&mut self) -> Result<u64, Infallible> {
        Ok(self.next_u64())
    }

    fn try_fill_bytes(&mut self, dst: &mut [u8]) -> Result<(), Infallible> {
        for chunk in dst.chunks_mut(8) {
            let v = self.next_u64().to_le_bytes();
            chunk.copy_from_slice(&v[..chunk.len()]);
        }
        Ok(())
    }
}

/// Run `f(i, stream_i)` for replicates `i = 0..n` in parallel and return the results in index
/// order. Replicate `i` always gets `Stream::new(seed, i)`, so the output does not depend on the
/// number of threads.
pub fn par_draws<T, F>(seed: u64, n: usize, f: F) -> Vec<T>
where
    T: Send,
    F: Fn(usize, &mut Stream) -> T + Sync + Send,
{
    let stage = aftercast_core::progress::stage(format!("making {n} draws"), Some(n as u64));
    (0..n)
        .into_par_iter()
        .map(|i| {
            aftercast_core::stop::check();
            let mut s = Stream::new(seed, i as u64);
            let out = f(i, &mut s);
            stage.advance(1);
            out
        })
        .collect()
}

/// Sequential twin of [`par_draws`] (same results), for callers already inside a parallel loop.
pub fn seq_draws<T, F>(seed: u64, n: usize, f: F) -> Vec<T>
where
    F: Fn(usize, &mut Stream) -> T,
{
    (0..n)
        .map(|i| {
            aftercast_core::stop::check();
            let mut s = Stream::new(seed, i as u64);
            f(i, &mut s)
        })
        .collect()
}

/// Derive a child seed for a named sub-task (e.g. the placebo fits of one analysis), so that
/// separate parts of one run use unrelated streams.
pub fn child_seed(seed: u64, tag: &str) -> u64 {
    let mut h = seed ^ 0xA076_1D64_78BD_642F;
    for b in tag.bytes() {
        h ^= u64::from(b);
        h = splitmix64(&mut h);
    }
    h
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Xoshiro256++ from state s = {1, 2, 3, 4}. The first output is analytic:
    /// rotl(s0 + s3, 23) + s0 = 5 * 2^23 + 1 = 41943041. The next two were computed by an
    /// independent Python transcription of the published algorithm (Blackman & Vigna 2018),
    /// tests/reference/xoshiro_reference.py.
    #[test]
    fn xoshiro_matches_reference_c_outputs() {
        let mut s = Stream { s: [1, 2, 3, 4] };
        assert_eq!(s.next_u64(), 41_943_041);
        assert_eq!(s.next_u64(), 58_720_359);
        assert_eq!(s.next_u64(), 3_588_806_011_781_223);
    }

    /// SplitMix64 from state 1234567: first output 6457827717110365317 (the same Python
    /// transcription, tests/reference/xoshiro_reference.py).
    #[test]
    fn splitmix_matches_reference() {
        let mut st = 1_234_567u64;
        assert_eq!(splitmix64(&mut st), 6_457_827_717_110_365_317);
    }

    #[test]
    fn streams_are_reproducible_and_distinct() {
        let a: Vec<u64> = (0..4).map(|_| Stream::new(1, 0).next_u64()).collect();
        assert!(a.windows(2).all(|w| w[0] == w[1]));
        assert_ne!(Stream::new(1, 0).next_u64(), Stream::new(1, 1).next_u64());
        assert_ne!(Stream::new(1, 0).next_u64(), Stream::new(2, 0).next_u64());
    }

    #[test]
    fn par_draws_independent_of_threads() {
        let run = |threads| {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().expect("pool");
            pool.install(|| par_draws(9, 100, |_, s| s.uniform()))
        };
        assert_eq!(run(1), run(2));
    }
}
