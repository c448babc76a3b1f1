//! The exponential the pricing loops call, one value at a time ([`exp`]) or a slice at a time
//! ([`exp_in_place`]).
//!
//! The bootstrap, the quote conversions and the repricing spend a large part of their time in
//! `exp`, one call per grid point and Newton step. The platform's `exp` is a library call
//! behind a wrapper; on x86-64 with a CPU with FMA and AVX2, glibc (from 2.28, recalled from
//! memory; read here from the disassembly of glibc 2.36's libm) runs its FMA variant of the
//! table-driven method of ARM's open-source optimized-routines (128-entry table, degree-5
//! polynomial). This module carries out the same operations in the same order, with the same
//! fused multiply-adds, the same constants and the same table (regenerated from its
//! definition by `scripts/gen-exp-table.py`), so on such a CPU it returns glibc's bits (120
//! million arguments compared once, two million in the tests) without the call through the
//! wrapper: a slice's loop runs the method inline, four values at a time on AVX2 lanes (the
//! table read one entry at a time: a version with the CPU's gather instructions measured
//! slower on the bootstrap's short slices), with the rest and any group holding an argument
//! out of the fast range one value at a time (about 2 to 3 ns a value on the development
//! machine for the one-value path, against 5 ns for the library call).
//!
//! Where the CPU lacks FMA or AVX2, or off x86-64, both functions call `f64::exp`: the numbers
//! are then the platform's, as before. Arguments outside the fast range (|x| below 2^-54 or at
//! least 512, infinities and NaN) always go to `f64::exp`.
//!
//! The tests compare with `f64::exp` bit for bit on millions of arguments when the platform's
//! `exp` is glibc's FMA variant, and within one unit in the last place everywhere.

/// The method's constants and table (the bits of the doubles).
#[cfg(target_arch = "x86_64")]
mod table {
    include!("exp_table.rs");

    /// N / ln 2, N = 128.
    pub(super) const INV_LN2_N: u64 = 0x4067_1547_652b_82fe;
    /// -ln 2 / N, high part (its low bits zero, so that `k ln2hi / N` is exact).
    pub(super) const NEG_LN2_HI_N: u64 = 0xbf76_2e42_fefa_0000;
    /// -ln 2 / N, low part.
    pub(super) const NEG_LN2_LO_N: u64 = 0xbd0c_f79a_bc9e_3b3a;
    /// The polynomial's coefficients of r^2 .. r^5.
    pub(super) const C2: u64 = 0x3fdf_ffff_ffff_fdbd;
    pub(super) const C3: u64 = 0x3fc5_5555_5555_543c;
    pub(super) const C4: u64 = 0x3fa5_5555_cf17_2b91;
    pub(super) const C5: u64 = 0x3f81_1111_67a4_d017;
    /// 1.5 * 2^52: adding it rounds to an integer, kept in the low bits.
    pub(super) const SHIFT: u64 = 0x4338_0000_0000_0000;
}
#[cfg(target_arch = "x86_64")]
use table::{C2, C3, C4, C5, INV_LN2_N, NEG_LN2_HI_N, NEG_LN2_LO_N, SHIFT};

/// Whether the fast path runs on this CPU: the same condition under which glibc picks its FMA
/// variant of `exp` (FMA and AVX2 usable).
#[cfg(target_arch = "x86_64")]
#[inline]
fn fast_path() -> bool {
    std::arch::is_x86_feature_detected!("fma") && std::arch::is_x86_feature_detected!("avx2")
}

/// True when `x` is in the range the table method covers without special cases:
/// 2^-54 <= |x| < 512.
#[cfg(target_arch = "x86_64")]
#[inline(always)]
fn in_range(bits: u64) -> bool {
    let abstop = ((bits >> 52) & 0x7ff) as u32;
    abstop.wrapping_sub(0x3c9) <= 0x3e
}

/// The table method for `x` in range; compiled only into functions with FMA enabled, where
/// `mul_add` is one instruction.
#[cfg(target_arch = "x86_64")]
#[inline(always)]
fn exp_core(x: f64) -> f64 {
    let f = f64::from_bits;
    // x = k ln2/N + r, |r| <= ln2/2N; exp(x) = 2^(k/N) exp(r).
    let kd0 = x.mul_add(f(INV_LN2_N), f(SHIFT));
    let ki = kd0.to_bits();
    let kd = kd0 - f(SHIFT);
    let r = kd.mul_add(f(NEG_LN2_HI_N), x);
    let r = kd.mul_add(f(NEG_LN2_LO_N), r);
    let idx = 2 * (ki & 0x7f) as usize;
    let tail = f(table::TABLE[idx]);
    let scale = f(table::TABLE[idx + 1].wrapping_add(ki << 45));
    // exp(x) ~ scale (1 + tail + exp(r) - 1).
    let p1 = r.mul_add(f(C3), f(C2));
    let t0 = r + tail;
    let r2 = r * r;
    let p2 = r.mul_add(f(C5), f(C4));
    let t = p1.mul_add(r2, t0);
    let r4 = r2 * r2;
    let tmp = r4.mul_add(p2, t);
    scale.mul_add(tmp, scale)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "fma,avx2")]
#[inline]
unsafe fn exp_fma(x: f64) -> f64 {
    if in_range(x.to_bits()) {
        exp_core(x)
    } else {
        x.exp()
    }
}

/// The slice four values at a time where all four are in range (the same operations on AVX2
/// lanes, fused multiply-adds included, with the table read one entry at a time), one value
/// at a time otherwise.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "fma,avx2")]
unsafe fn exp_slice_fma(xs: &mut [f64]) {
    use std::arch::x86_64::*;
    let f = |b: u64| _mm256_set1_pd(f64::from_bits(b));
    let mut chunks = xs.chunks_exact_mut(4);
    for c in &mut chunks {
        let x = _mm256_loadu_pd(c.as_ptr());
        // In range: 0x3c9 <= the biased exponent <= 0x407 (see `in_range`).
        let abstop = _mm256_and_si256(_mm256_srli_epi64::<52>(_mm256_castpd_si256(x)), _mm256_set1_epi64x(0x7ff));
        let ok = _mm256_and_si256(
            _mm256_cmpgt_epi64(abstop, _mm256_set1_epi64x(0x3c8)),
            _mm256_cmpgt_epi64(_mm256_set1_epi64x(0x408), abstop),
        );
        if _mm256_movemask_pd(_mm256_castsi256_pd(ok)) != 0xf {
            for v in c.iter_mut() {
                *v = exp_fma(*v);
            }
            continue;
        }
        // The operations of `exp_core`, lane by lane.
        let kd0 = _mm256_fmadd_pd(x, f(INV_LN2_N), f(SHIFT));
        let ki = _mm256_castpd_si256(kd0);
        let kd = _mm256_sub_pd(kd0, f(SHIFT));
        let r = _mm256_fmadd_pd(kd, f(NEG_LN2_HI_N), x);
        let r = _mm256_fmadd_pd(kd, f(NEG_LN2_LO_N), r);
        let mut k = [0u64; 4];
        _mm256_storeu_si256(k.as_mut_ptr().cast(), ki);
        let idx = k.map(|k| 2 * (k & 0x7f) as usize);
        let tail = |j: usize| f64::from_bits(table::TABLE[idx[j]]);
        let top = |j: usize| table::TABLE[idx[j] + 1] as i64;
        let tail = _mm256_set_pd(tail(3), tail(2), tail(1), tail(0));
        let scale = _mm256_castsi256_pd(_mm256_add_epi64(
            _mm256_set_epi64x(top(3), top(2), top(1), top(0)),
            _mm256_slli_epi64::<45>(ki),
        ));
        let p1 = _mm256_fmadd_pd(r, f(C3), f(C2));
        let t0 = _mm256_add_pd(r, tail);
        let r2 = _mm256_mul_pd(r, r);
        let p2 = _mm256_fmadd_pd(r, f(C5), f(C4));
        let t = _mm256_fmadd_pd(p1, r2, t0);
        let r4 = _mm256_mul_pd(r2, r2);
        let tmp = _mm256_fmadd_pd(r4, p2, t);
        _mm256_storeu_pd(c.as_mut_ptr(), _mm256_fmadd_pd(scale, tmp, scale));
    }
    for v in chunks.into_remainder() {
        *v = exp_fma(*v);
    }
}

/// e^x: the same bits as glibc's `exp` on x86-64 CPUs with FMA and AVX2, computed inline;
/// `f64::exp` elsewhere (see the module's doc).
#[inline]
pub fn exp(x: f64) -> f64 {
    #[cfg(target_arch = "x86_64")]
    if fast_path() {
        // SAFETY: the CPU has the features the function is compiled for.
        return unsafe { exp_fma(x) };
    }
    x.exp()
}

/// Replaces every value of `xs` by its exponential: the same bits as [`exp`] on each.
pub fn exp_in_place(xs: &mut [f64]) {
    #[cfg(target_arch = "x86_64")]
    if fast_path() {
        // SAFETY: the CPU has the features the function is compiled for.
        unsafe { exp_slice_fma(xs) };
        return;
    }
    for v in xs {
        *v = v.exp();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Arguments over the ranges the pricing uses (log discount factors plus log survival
    /// probabilities, -60..0) and the whole fast range, with the edges of the special cases.
    fn arguments(n: usize) -> Vec<f64> {
        // xorshift64*: reproducible without a dependency.
        let mut s = 0x9e37_79b9_7f4a_7c15u64;
        let mut next = move || {
            s ^= s >> 12;
            s ^= s << 25;
            s ^= s >> 27;
            s.wrapping_mul(0x2545_f491_4f6c_dd1d)
        };
        let mut v: Vec<f64> = (0..n)
            .map(|i| {
                let u = (next() >> 11) as f64 / (1u64 << 53) as f64;
                match i % 4 {
                    0 => -60.0 * u,
                    1 => -1.0 + 2.0 * u,
                    2 => -745.0 + 1455.0 * u,
                    // Random bits: every exponent, NaN and infinities included.
                    _ => f64::from_bits(next()),
                }
            })
            .collect();
        v.extend([
            0.0,
            -0.0,
            1e-300,
            f64::from_bits(0x3c90_0000_0000_0000),
            f64::from_bits(0x3c8f_ffff_ffff_ffff),
            511.9999999,
            512.0,
            -512.0,
            709.78,
            709.79,
            -708.4,
            -745.2,
            -746.0,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::NAN,
            f64::MIN_POSITIVE,
        ]);
        v
    }

    /// Whether the platform's `exp` is glibc's FMA variant, the one this module reproduces.
    fn platform_is_the_reference() -> bool {
        cfg!(all(target_arch = "x86_64", target_os = "linux", target_env = "gnu")) && {
            #[cfg(target_arch = "x86_64")]
            {
                fast_path()
            }
            #[cfg(not(target_arch = "x86_64"))]
            {
                false
            }
        }
    }

    fn ulps(a: f64, b: f64) -> u64 {
        if a.is_nan() && b.is_nan() {
            return 0;
        }
        (a.to_bits() as i64).wrapping_sub(b.to_bits() as i64).unsigned_abs()
    }

    /// Against the platform's exp (glibc 2.36 on the development machine): bit for bit where
    /// the platform runs the same method, within one unit in the last place elsewhere. The
    /// slice path is checked against the one-value path, remainders included.
    #[test]
    fn matches_the_platform_exp() {
        let xs = arguments(2_000_000);
        let exact = platform_is_the_reference();
        for &x in &xs {
            let (ours, theirs) = (exp(x), x.exp());
            if exact {
                assert_eq!(ours.to_bits(), theirs.to_bits(), "exp({x:e}) = {ours:e}, platform {theirs:e}");
            } else {
                assert!(ulps(ours, theirs) <= 1, "exp({x:e}) = {ours:e}, platform {theirs:e}");
            }
        }
        for len in [0, 1, 3, 4, 5, 7, 8, 1001] {
            let mut v: Vec<f64> = xs[..len].to_vec();
            exp_in_place(&mut v);
            for (x, y) in xs[..len].iter().zip(&v) {
                assert_eq!(y.to_bits(), exp(*x).to_bits(), "slice of {len} at {x:e}");
            }
        }
        let mut v = xs.clone();
        exp_in_place(&mut v);
        for (x, y) in xs.iter().zip(&v) {
            assert!(y.to_bits() == exp(*x).to_bits() || (y.is_nan() && x.is_nan()), "slice at {x:e}");
        }
    }

    /// Closed forms: e^0 = 1, e^1 = e and e^(ln 2) = 2 within one unit in the last place (the
    /// constants are the doubles nearest e and ln 2), e^(a+b) = e^a e^b within rounding, and
    /// the special values.
    #[test]
    fn closed_forms() {
        assert_eq!(exp(0.0), 1.0);
        assert!(ulps(exp(1.0), std::f64::consts::E) <= 1);
        assert!(ulps(exp(std::f64::consts::LN_2), 2.0) <= 1);
        assert_eq!(exp(f64::NEG_INFINITY), 0.0);
        assert_eq!(exp(f64::INFINITY), f64::INFINITY);
        assert!(exp(f64::NAN).is_nan());
        for (a, b) in [(-3.25, -0.125), (-20.0, 0.5), (1.5, 2.25)] {
            let (ab, prod) = (exp(a + b), exp(a) * exp(b));
            assert!(((ab - prod) / ab).abs() < 4.0 * f64::EPSILON, "{a} {b}");
        }
    }
}
