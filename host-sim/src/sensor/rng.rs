//! Seeded random numbers for the sensor model.
//!
//! Own generator (xoshiro256** seeded through SplitMix64) and samplers, with every transcendental
//! function taken from the pure-Rust `libm` crate: the same seed gives the same trace on any host,
//! whatever the platform's C maths library does.

/// A seeded stream of random numbers.
#[derive(Clone, Debug)]
pub struct Rng {
    s: [u64; 4],
}

/// One SplitMix64 step: spreads a seed into well-mixed state words.
fn splitmix64(x: &mut u64) -> u64 {
    *x = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *x;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

impl Rng {
    /// A stream for `seed`; `stream` separates independent uses of one seed (noise, hot pixels, ...)
    /// so that changing one option does not reshuffle the others.
    pub fn new(seed: u64, stream: u64) -> Self {
        let mut x = seed ^ stream.wrapping_mul(0xD1B5_4A32_D192_ED03);
        let s = [
            splitmix64(&mut x),
            splitmix64(&mut x),
            splitmix64(&mut x),
            splitmix64(&mut x),
        ];
        Rng { s }
    }

    /// Next 64 random bits (xoshiro256**).
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

    /// Uniform in [0, 1) with 53 random bits.
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / 9_007_199_254_740_992.0)
    }

    /// Uniform in (0, 1]: safe to take the logarithm of.
    fn uniform_open0(&mut self) -> f64 {
        1.0 - self.uniform()
    }

    /// Uniform integer in [0, n) by rejection (no modulo bias); `n` must be > 0.
    pub fn below(&mut self, n: u64) -> u64 {
        let zone = u64::MAX - (u64::MAX % n);
        loop {
            let x = self.next_u64();
            if x < zone {
                return x % n;
            }
        }
    }

    /// Standard normal deviate (Box–Muller, one value per call).
    pub fn normal(&mut self) -> f64 {
        let u1 = self.uniform_open0();
        let u2 = self.uniform();
        libm::sqrt(-2.0 * libm::log(u1)) * libm::cos(2.0 * core::f64::consts::PI * u2)
    }

    /// Poisson deviate with mean `lambda` (≤ 0 gives 0). Exact: multiplication method below 10,
    /// Hörmann's transformed rejection (PTRS, 1993) above.
    pub fn poisson(&mut self, lambda: f64) -> u64 {
        if lambda.is_nan() || lambda <= 0.0 {
            return 0;
        }
        if lambda < 10.0 {
            let limit = libm::exp(-lambda);
            let mut k = 0u64;
            let mut p = self.uniform_open0();
            while p > limit {
                k += 1;
                p *= self.uniform_open0();
            }
            return k;
        }
        let slam = libm::sqrt(lambda);
        let loglam = libm::log(lambda);
        let b = 0.931 + 2.53 * slam;
        let a = -0.059 + 0.02483 * b;
        let invalpha = 1.1239 + 1.1328 / (b - 3.4);
        let vr = 0.9277 - 3.6224 / (b - 2.0);
        loop {
            let u = self.uniform() - 0.5;
            let v = self.uniform_open0();
            let us = 0.5 - libm::fabs(u);
            let k = libm::floor((2.0 * a / us + b) * u + lambda + 0.43);
            if us >= 0.07 && v <= vr {
                return k as u64;
            }
            if k < 0.0 || (us < 0.013 && v > us) {
                continue;
            }
            let lhs = libm::log(v) + libm::log(invalpha) - libm::log(a / (us * us) + b);
            let rhs = -lambda + k * loglam - libm::lgamma(k + 1.0);
            if lhs <= rhs {
                return k as u64;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn same_seed_same_stream() {
        let mut a = Rng::new(7, 1);
        let mut b = Rng::new(7, 1);
        let mut c = Rng::new(7, 2);
        let xa: Vec<u64> = (0..8).map(|_| a.next_u64()).collect();
        let xb: Vec<u64> = (0..8).map(|_| b.next_u64()).collect();
        let xc: Vec<u64> = (0..8).map(|_| c.next_u64()).collect();
        assert_eq!(xa, xb);
        assert_ne!(xa, xc);
    }

    /// Mean and variance of a Poisson deviate both equal λ; check both samplers to ~4 standard errors.
    #[test]
    fn poisson_moments() {
        let mut r = Rng::new(42, 0);
        for &lam in &[0.5, 3.0, 9.9, 10.0, 47.0, 2500.0] {
            let n = 40_000;
            let xs: Vec<f64> = (0..n).map(|_| r.poisson(lam) as f64).collect();
            let mean = xs.iter().sum::<f64>() / n as f64;
            let var = xs.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (n - 1) as f64;
            let se_mean = (lam / n as f64).sqrt();
            assert!((mean - lam).abs() < 4.0 * se_mean, "lam {lam}: mean {mean}");
            // Var of the sample variance ≈ (μ4 − σ⁴)/n = (λ + 2λ²)/n for a Poisson law.
            let se_var = ((lam + 2.0 * lam * lam) / n as f64).sqrt();
            assert!((var - lam).abs() < 4.0 * se_var, "lam {lam}: var {var}");
        }
    }

    #[test]
    fn normal_moments() {
        let mut r = Rng::new(3, 0);
        let n = 100_000;
        let xs: Vec<f64> = (0..n).map(|_| r.normal()).collect();
        let mean = xs.iter().sum::<f64>() / n as f64;
        let var = xs.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (n - 1) as f64;
        assert!(mean.abs() < 4.0 / (n as f64).sqrt());
        assert!((var - 1.0).abs() < 4.0 * (2.0 / n as f64).sqrt());
    }

    #[test]
    fn below_stays_in_range() {
        let mut r = Rng::new(1, 0);
        let mut seen = [false; 5];
        for _ in 0..200 {
            let k = r.below(5) as usize;
            seen[k] = true;
        }
        assert!(seen.iter().all(|&s| s));
    }
}
