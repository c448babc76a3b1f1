//! A small, fully specified pseudo-random generator, so that a scenario is byte-for-byte the
//! same for a seed on every platform and every future build: xoshiro256** (Blackman and Vigna,
//! 2018) seeded through SplitMix64, with normals from the Marsaglia polar method. A registry
//! crate's stream may change between its versions; the published demo data must not.

/// SplitMix64 step (Steele, Lea and Flood, 2014): used to expand a seed into generator state.
fn splitmix64(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// xoshiro256** generator with a cached second normal.
#[derive(Debug, Clone)]
pub struct Rng {
    s: [u64; 4],
    spare_normal: Option<f64>,
}

impl Rng {
    /// A generator for `seed`.
    pub fn new(seed: u64) -> Rng {
        let mut sm = seed;
        let s = [splitmix64(&mut sm), splitmix64(&mut sm), splitmix64(&mut sm), splitmix64(&mut sm)];
        Rng { s, spare_normal: None }
    }

    /// An independent stream for one purpose (`label`) and one item (`index`) of a scenario,
    /// so that adding entities or a new kind of draw does not shift the other streams.
    pub fn stream(seed: u64, label: &str, index: u64) -> Rng {
        let mut h: u64 = 0xCBF2_9CE4_8422_2325;
        for b in label.bytes() {
            h ^= b as u64;
            h = h.wrapping_mul(0x0100_0000_01B3);
        }
        let mut sm = seed ^ h.rotate_left(17) ^ index.wrapping_mul(0xD6E8_FEB8_6659_FD93);
        Rng::new(splitmix64(&mut sm))
    }

    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        let result = self.s[1].wrapping_mul(5).rotate_left(7).wrapping_mul(9);
        let t = self.s[1] << 17;
        self.s[2] ^= self.s[0];
        self.s[3] ^= self.s[1];
        self.s[1] ^= self.s[2];
        self.s[0] ^= self.s[3];
        self.s[2] ^= t;
        self.s[3] = self.s[3].rotate_left(45);
        result
    }

    /// Uniform on [0, 1) with 53 random bits.
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Uniform on (0, 1]: safe to take the logarithm of.
    pub fn uniform_open0(&mut self) -> f64 {
        1.0 - self.uniform()
    }

    /// An integer in 0..n (n > 0), by rejection so that it is unbiased.
    pub fn below(&mut self, n: u64) -> u64 {
        if n <= 1 {
            return 0;
        }
        let zone = u64::MAX - (u64::MAX % n);
        loop {
            let x = self.next_u64();
            if x < zone {
                return x % n;
            }
        }
    }

    /// True with probability `p`.
    pub fn chance(&mut self, p: f64) -> bool {
        self.uniform() < p
    }

    /// A standard normal draw (Marsaglia polar method).
    pub fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare_normal.take() {
            return z;
        }
        loop {
            let u = 2.0 * self.uniform() - 1.0;
            let v = 2.0 * self.uniform() - 1.0;
            let s = u * u + v * v;
            if s > 0.0 && s < 1.0 {
                let f = (-2.0 * s.ln() / s).sqrt();
                self.spare_normal = Some(v * f);
                return u * f;
            }
        }
    }

    /// A unit-rate exponential draw.
    pub fn exponential(&mut self) -> f64 {
        -self.uniform_open0().ln()
    }

    /// Picks an index with the given (not necessarily normalised, non-negative) weights.
    pub fn weighted(&mut self, weights: &[f64]) -> usize {
        let total: f64 = weights.iter().sum();
        let mut x = self.uniform() * total;
        for (i, w) in weights.iter().enumerate() {
            if x < *w {
                return i;
            }
            x -= w;
        }
        weights.len().saturating_sub(1)
    }

    /// A Binomial(n, p) draw by summing Bernoulli trials for small n, and by the normal
    /// approximation with continuity correction, clipped to [0, n], beyond 10,000 trials.
    pub fn binomial(&mut self, n: u64, p: f64) -> u64 {
        if n <= 10_000 {
            (0..n).filter(|_| self.chance(p)).count() as u64
        } else {
            let mean = n as f64 * p;
            let sd = (mean * (1.0 - p)).sqrt();
            (mean + sd * self.normal()).round().clamp(0.0, n as f64) as u64
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn xoshiro_matches_the_reference_stream() {
        // State {1, 2, 3, 4} through the published xoshiro256** update (Blackman and Vigna,
        // 2018; rule recalled from memory of the authors' C code): the first outputs
        // 11520, 0, 1509978240, 1215971899390074240 were computed independently with a
        // direct Python transcription of that rule on 64-bit integers.
        let mut r = Rng { s: [1, 2, 3, 4], spare_normal: None };
        assert_eq!(r.next_u64(), 11520);
        assert_eq!(r.next_u64(), 0);
        assert_eq!(r.next_u64(), 1509978240);
        assert_eq!(r.next_u64(), 1215971899390074240);
    }

    #[test]
    fn moments_of_uniform_normal_exponential() {
        let mut r = Rng::new(7);
        let n = 200_000;
        let (mut su, mut sn, mut sn2, mut se) = (0.0, 0.0, 0.0, 0.0);
        for _ in 0..n {
            su += r.uniform();
            let z = r.normal();
            sn += z;
            sn2 += z * z;
            se += r.exponential();
        }
        let n = n as f64;
        assert!((su / n - 0.5).abs() < 0.005);
        assert!((sn / n).abs() < 0.01);
        assert!((sn2 / n - 1.0).abs() < 0.015);
        assert!((se / n - 1.0).abs() < 0.01);
    }

    #[test]
    fn streams_are_reproducible_and_distinct() {
        let a: Vec<u64> = (0..4).map(|_| Rng::stream(1, "grades", 3).next_u64()).collect();
        assert!(a.windows(2).all(|w| w[0] == w[1]));
        assert_ne!(Rng::stream(1, "grades", 3).next_u64(), Rng::stream(1, "grades", 4).next_u64());
        assert_ne!(Rng::stream(1, "grades", 3).next_u64(), Rng::stream(1, "rates", 3).next_u64());
    }
}
