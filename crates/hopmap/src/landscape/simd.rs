//! Vectors of f32 lanes for the grid kernel, one type per instruction set: AVX-512 (16 lanes),
//! AVX2 with FMA (8 lanes), and a portable array of 8 lanes that the compiler vectorises for
//! whatever the target has. The kernel is written once against [`Lanes`] and compiled once per
//! type; [`Isa::detect`] picks the widest the processor reports, at run time.
//!
//! The types are arrays of lanes; the instructions come from compiling the kernel's entry points
//! with `#[target_feature]` for each instruction set (no intrinsics, no `unsafe` here), which
//! `compute` calls only after `is_x86_feature_detected!` said yes (see `kernel.rs`).

/// Instruction sets the kernel is compiled for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Isa {
    /// 8 lanes in plain arrays (SSE2 on x86-64, NEON on aarch64, scalar elsewhere).
    Portable,
    #[cfg(target_arch = "x86_64")]
    Avx2Fma,
    #[cfg(target_arch = "x86_64")]
    Avx512,
}

impl Isa {
    /// The widest instruction set this processor has (the `HOPMAP_ISA` environment variable,
    /// `portable`, `avx2` or `avx512`, can ask for a narrower one, for benchmarks).
    pub fn detect() -> Isa {
        let asked = std::env::var("HOPMAP_ISA").ok();
        let asked = asked.as_deref();
        if asked == Some("portable") {
            return Isa::Portable;
        }
        #[cfg(target_arch = "x86_64")]
        {
            let avx2 =
                std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma");
            let avx512 = avx2
                && std::is_x86_feature_detected!("avx512f")
                && std::is_x86_feature_detected!("avx512dq");
            if avx512 && asked != Some("avx2") {
                return Isa::Avx512;
            }
            if avx2 {
                return Isa::Avx2Fma;
            }
        }
        Isa::Portable
    }

    /// Every instruction set this processor can run (for tests that compare them).
    pub fn available() -> Vec<Isa> {
        let mut v = vec![Isa::Portable];
        #[cfg(target_arch = "x86_64")]
        {
            if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
                v.push(Isa::Avx2Fma);
                if std::is_x86_feature_detected!("avx512f")
                    && std::is_x86_feature_detected!("avx512dq")
                {
                    v.push(Isa::Avx512);
                }
            }
        }
        v
    }

    pub fn name(self) -> &'static str {
        match self {
            Isa::Portable => "portable",
            #[cfg(target_arch = "x86_64")]
            Isa::Avx2Fma => "avx2+fma",
            #[cfg(target_arch = "x86_64")]
            Isa::Avx512 => "avx512",
        }
    }

    /// Lanes per vector.
    pub fn lanes(self) -> usize {
        match self {
            Isa::Portable => 8,
            #[cfg(target_arch = "x86_64")]
            Isa::Avx2Fma => 8,
            #[cfg(target_arch = "x86_64")]
            Isa::Avx512 => 16,
        }
    }
}

/// A vector of f32 lanes and the few operations the kernel needs. `Mask` is a lane mask.
pub trait Lanes: Copy {
    const N: usize;
    type Mask: Copy;
    fn splat(x: f32) -> Self;
    /// Loads `N` values from the start of `p` (which must hold at least `N`).
    fn load(p: &[f32]) -> Self;
    fn store(self, p: &mut [f32]);
    fn add(self, o: Self) -> Self;
    fn sub(self, o: Self) -> Self;
    fn mul(self, o: Self) -> Self;
    fn div(self, o: Self) -> Self;
    /// `self * b + c`, fused where the instruction set has it.
    fn fma(self, b: Self, c: Self) -> Self;
    fn max(self, o: Self) -> Self;
    fn min(self, o: Self) -> Self;
    fn sqrt(self) -> Self;
    fn lt(self, o: Self) -> Self::Mask;
    /// Lanes of `a` where the mask is set, else lanes of `b`.
    fn select(m: Self::Mask, a: Self, b: Self) -> Self;
    fn any(m: Self::Mask) -> bool;
    /// `self * 2^n` for `s = n + 1.5 * 2^23` with n a whole number (the shifter trick of
    /// [`exp`]): the low bits of `s`, shifted into the exponent field, are added to the bits
    /// of `self`. One integer addition instead of building 2^n and multiplying; exact when
    /// `self` and the result are normal f32 numbers, as in [`exp_in_range`].
    fn scale_shifted(self, s: Self) -> Self;
}

/// `exp(y)` on every lane, the argument clamped to [-87, 87] (the range of normal f32
/// results); see [`exp_in_range`].
#[inline(always)]
pub fn exp<V: Lanes>(y: V) -> V {
    exp_in_range(y.max(V::splat(-87.0)).min(V::splat(87.0)))
}

/// `exp(y)` on every lane for `y` in [-87, 87] (outside it the result is wrong: callers whose
/// argument is bounded by the physics skip the clamp of [`exp`]). Cody-Waite reduction
/// `y = n ln2 + t`, |t| <= ln2/2, then a degree-5 polynomial in `t` (least-squares fit of
/// `exp(t)` in relative error on [-ln2/2, ln2/2], largest relative error 7.5e-8 in exact
/// arithmetic, about 2 f32 rounding steps when evaluated in f32), scaled by 2^n through the
/// exponent bits ([`Lanes::scale_shifted`]; every result in [-87, 87] is a normal f32, so the
/// scaling is exact). Relative error within a few f32 rounding steps of the rounded argument (tested against
/// `f64::exp`).
#[inline(always)]
pub fn exp_in_range<V: Lanes>(y: V) -> V {
    let (t, s) = exp_reduce(y);
    exp_finish(t, s)
}

/// The first half of [`exp_in_range`]: the reduced argument `t` and the shifted `n`.
#[inline(always)]
#[allow(clippy::excessive_precision)] // the split of ln 2 is written out in full
pub fn exp_reduce<V: Lanes>(y: V) -> (V, V) {
    const LOG2E: f32 = std::f32::consts::LOG2_E;
    // ln 2 split so that n * LN2_HI is exact for |n| < 2^9
    const LN2_HI: f32 = 0.693_145_751_953_125;
    const LN2_LO: f32 = 1.428_606_765_330_187e-6;
    let s = y.fma(V::splat(LOG2E), V::splat(SHIFTER));
    let n = s.sub(V::splat(SHIFTER));
    let t = n.fma(V::splat(-LN2_HI), y);
    (n.fma(V::splat(-LN2_LO), t), s)
}

/// The second half of [`exp_in_range`]: the polynomial in `t`, scaled by `2^n`.
#[inline(always)]
pub fn exp_finish<V: Lanes>(t: V, s: V) -> V {
    let mut p = V::splat(EXP_POLY[5]);
    for c in EXP_POLY[..5].iter().rev() {
        p = p.fma(t, V::splat(*c));
    }
    p.scale_shifted(s)
}

const SHIFTER: f32 = 12_582_912.0; // 1.5 * 2^23

/// Coefficients of t^0 .. t^5 of the polynomial of [`exp_in_range`], rounded to f32.
#[allow(clippy::excessive_precision)]
const EXP_POLY: [f32; 6] = [
    1.000_000_119_209_289_6,
    0.999_999_701_976_776_1,
    0.499_988_943_338_394_17,
    0.166_675_746_440_887_45,
    0.041_915_383_189_916_61,
    0.008_297_654_800_117_016,
];

/// `erfc(z) / (1 + z/2)` without the factor `exp(-z^2)`: the Chebyshev fit of Press, Teukolsky,
/// Vetterling and Flannery (Numerical Recipes, 2nd ed., section 6.2, `erfcc`),
/// `erfc(z) = t exp(-z^2 + P(t))`, `t = 1 / (1 + z/2)`, fractional error below 1.2e-7 for
/// z >= 0. Returns `P(t)`.
#[inline(always)]
#[allow(clippy::excessive_precision)] // the coefficients as published
pub fn erfc_poly<V: Lanes>(t: V) -> V {
    let mut p = V::splat(0.170_872_77);
    for c in [
        -0.822_152_23,
        1.488_515_87,
        -1.135_203_98,
        0.278_868_07,
        -0.186_288_06,
        0.096_784_18,
        0.374_091_96,
        1.000_023_68,
        -1.265_512_23,
    ] {
        p = p.fma(t, V::splat(c));
    }
    p
}

/// `N` lanes in an array. Every method is a short loop over the lanes that the compiler turns
/// into vector instructions for the features of the function it is inlined into: the kernel's
/// entry points are compiled once per instruction set with `#[target_feature]` (see
/// `kernel.rs`), so `Wide<8, true>` becomes AVX2 registers and FMA instructions there,
/// `Wide<16, true>` AVX-512 registers, and `Wide<8, false>` SSE2 (or NEON) in the portable
/// build. `FUSED` says whether `fma` is one fused instruction (`f32::mul_add`, only where the
/// processor has FMA; elsewhere it would be a library call) or a multiplication and an addition.
#[derive(Clone, Copy)]
pub struct Wide<const N: usize, const FUSED: bool>([f32; N]);

/// The portable build: 8 lanes, no fused multiply-add.
pub type Portable = Wide<8, false>;
/// AVX2 with FMA: 8 lanes.
pub type Avx2 = Wide<8, true>;
/// AVX-512: 16 lanes.
pub type Avx512 = Wide<16, true>;

impl<const N: usize, const FUSED: bool> Wide<N, FUSED> {
    #[inline(always)]
    fn map2(self, o: Self, f: impl Fn(f32, f32) -> f32) -> Self {
        let mut r = [0.0; N];
        for i in 0..N {
            r[i] = f(self.0[i], o.0[i]);
        }
        Wide(r)
    }
}

impl<const N: usize, const FUSED: bool> Lanes for Wide<N, FUSED> {
    const N: usize = N;
    type Mask = [bool; N];
    #[inline(always)]
    fn splat(x: f32) -> Self {
        Wide([x; N])
    }
    #[inline(always)]
    fn load(p: &[f32]) -> Self {
        let mut r = [0.0; N];
        r.copy_from_slice(&p[..N]);
        Wide(r)
    }
    #[inline(always)]
    fn store(self, p: &mut [f32]) {
        p[..N].copy_from_slice(&self.0);
    }
    #[inline(always)]
    fn add(self, o: Self) -> Self {
        self.map2(o, |a, b| a + b)
    }
    #[inline(always)]
    fn sub(self, o: Self) -> Self {
        self.map2(o, |a, b| a - b)
    }
    #[inline(always)]
    fn mul(self, o: Self) -> Self {
        self.map2(o, |a, b| a * b)
    }
    #[inline(always)]
    fn div(self, o: Self) -> Self {
        self.map2(o, |a, b| a / b)
    }
    #[inline(always)]
    fn fma(self, b: Self, c: Self) -> Self {
        let mut r = [0.0; N];
        for i in 0..N {
            r[i] = if FUSED {
                self.0[i].mul_add(b.0[i], c.0[i])
            } else {
                self.0[i] * b.0[i] + c.0[i]
            };
        }
        Wide(r)
    }
    #[inline(always)]
    fn max(self, o: Self) -> Self {
        self.map2(o, |a, b| if a > b { a } else { b })
    }
    #[inline(always)]
    fn min(self, o: Self) -> Self {
        self.map2(o, |a, b| if a < b { a } else { b })
    }
    #[inline(always)]
    fn sqrt(self) -> Self {
        let mut r = self.0;
        for x in r.iter_mut() {
            *x = x.sqrt();
        }
        Wide(r)
    }
    #[inline(always)]
    fn lt(self, o: Self) -> [bool; N] {
        let mut m = [false; N];
        for i in 0..N {
            m[i] = self.0[i] < o.0[i];
        }
        m
    }
    #[inline(always)]
    fn select(m: [bool; N], a: Self, b: Self) -> Self {
        let mut r = [0.0; N];
        for i in 0..N {
            r[i] = if m[i] { a.0[i] } else { b.0[i] };
        }
        Wide(r)
    }
    #[inline(always)]
    fn any(m: [bool; N]) -> bool {
        m.iter().fold(false, |a, &b| a | b)
    }
    #[inline(always)]
    fn scale_shifted(self, s: Self) -> Self {
        let mut r = [0.0; N];
        for i in 0..N {
            r[i] = f32::from_bits(self.0[i].to_bits().wrapping_add(s.0[i].to_bits() << 23));
        }
        Wide(r)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn vector_exp_follows_the_library_exp() {
        // Reference: Rust's f64 `exp` (the platform libm). The argument is rounded to f32 first,
        // so the comparison measures the kernel's exponential, not the rounding of its input.
        let mut worst: f64 = 0.0;
        for n in -87_000..=87_000 {
            let y = (n as f32) * 1e-3 + 3.7e-4;
            let got = exp_in_range(Portable::splat(y)).0[0] as f64;
            let want = (y as f64).exp();
            worst = worst.max((got - want).abs() / want);
        }
        // a few f32 rounding steps (2^-24 = 6e-8 each)
        assert!(worst < 4e-7, "worst relative error {worst:e}");
        // the clamped version saturates instead of overflowing
        let big = exp(Portable::splat(200.0)).0[0];
        assert!(big.is_finite() && big > 1e37);
        let small = exp(Portable::splat(-200.0)).0[0];
        assert!((0.0..1e-37).contains(&small));
    }
}
