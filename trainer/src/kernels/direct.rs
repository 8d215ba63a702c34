//! Direct convolution for blocks with one input channel and 2 x 2 pooling
//! (the first layer: `K = k k` is too short for a GEMM to pay), f32 only.
//!
//! Vectorised along the conv output columns: for each pool row (two conv
//! rows), each tile of `2 L` conv columns (`L` pooled outputs, `L` the SIMD
//! width) and each group of `C` output channels, the `2 x 2 x C` accumulator
//! vectors stay in registers while the `k + 1` input rows the pool row needs
//! are streamed from L1 (one sample's input is a few tens of KiB); each
//! unaligned input vector feeds `2 C` or `4 C` fused multiply-adds with
//! broadcast weights. Bias, ReLU, 2 x 2 max pooling and the arg-max are
//! applied to the accumulators before anything is stored, so the un-pooled
//! conv output never reaches memory.
//!
//! Every output value is the sum of its `k k` products, accumulated with
//! fused multiply-adds in row-major kernel order, whichever tile and
//! instruction set computes it: a last tile that overlaps the one before it
//! rewrites identical values, and AVX-512 and AVX2 give identical results.
//! Against the GEMM path (another summation order) they differ by float
//! rounding. Pooling picks the first maximum in row-major block order and
//! ReLU maps values below zero to zero, exactly as the GEMM path's epilogue
//! does.
//!
//! The path is taken when the CPU has AVX-512F (16 lanes) or AVX2 + FMA
//! (8 lanes), checked at run time, and the pooled width is at least one
//! vector; otherwise the caller uses the im2col + GEMM path.

use super::conv::Geometry;

/// An instruction set the direct kernel runs on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Isa {
    /// AVX-512F, 16 lanes, 4 output channels per pass.
    #[cfg(target_arch = "x86_64")]
    Avx512,
    /// AVX2 + FMA, 8 lanes, 2 output channels per pass.
    #[cfg(target_arch = "x86_64")]
    Avx2,
}

impl Isa {
    /// The best instruction set of this CPU, if it has one the kernel supports.
    pub(crate) fn detect() -> Option<Self> {
        #[cfg(target_arch = "x86_64")]
        {
            if std::arch::is_x86_feature_detected!("avx512f") {
                return Some(Self::Avx512);
            }
            if std::arch::is_x86_feature_detected!("avx2")
                && std::arch::is_x86_feature_detected!("fma")
            {
                return Some(Self::Avx2);
            }
        }
        None
    }

    /// Lanes per vector.
    fn lanes(self) -> usize {
        match self {
            #[cfg(target_arch = "x86_64")]
            Self::Avx512 => 16,
            #[cfg(target_arch = "x86_64")]
            Self::Avx2 => 8,
        }
    }
}

/// The instruction set to run `g` on with the direct kernel, or `None` when
/// the block is not one it handles (more than one input channel, no pooling,
/// a pooled row narrower than a vector, or no supported instruction set).
pub(crate) fn plan(g: &Geometry) -> Option<Isa> {
    if g.c_in != 1 || !g.pool || g.c_out == 0 {
        return None;
    }
    let isa = Isa::detect()?;
    let (oh, ow) = g.out_hw();
    (oh > 0 && ow >= isa.lanes()).then_some(isa)
}

/// One sample's forward pass: `out` is `c_out x oh x ow`, `idx` the pool
/// arg-max of each output (0-3, row-major in the block).
///
/// # Panics
/// When the slices' lengths do not match `g`, or `isa` does not fit `g`
/// (see [`plan`]).
pub(crate) fn forward_sample(
    isa: Isa,
    g: &Geometry,
    x: &[f32],
    w: &[f32],
    bias: &[f32],
    out: &mut [f32],
    idx: &mut [u8],
) {
    let (oh, ow) = g.out_hw();
    assert!(g.c_in == 1 && g.pool && oh > 0 && ow >= isa.lanes());
    assert_eq!(x.len(), g.in_len(), "input sample");
    assert_eq!(w.len(), g.c_out * g.patch(), "weights");
    assert_eq!(bias.len(), g.c_out, "bias");
    assert_eq!(out.len(), g.out_len(), "output sample");
    assert_eq!(idx.len(), g.out_len(), "pool indices");
    match isa {
        // SAFETY: `plan`/`detect` found the CPU feature; the shapes were checked above.
        #[cfg(target_arch = "x86_64")]
        Isa::Avx512 => unsafe { x86::sample_avx512(g, x, w, bias, out, idx) },
        // SAFETY: as above.
        #[cfg(target_arch = "x86_64")]
        Isa::Avx2 => unsafe { x86::sample_avx2(g, x, w, bias, out, idx) },
    }
}

#[cfg(target_arch = "x86_64")]
mod x86 {
    use super::Geometry;
    use std::arch::x86_64::*;

    /// The vector operations the kernel is written in.
    pub(super) trait Lanes: Copy {
        /// Lanes per vector.
        const L: usize;
        /// All zeros.
        unsafe fn zero() -> Self;
        /// `v` in every lane.
        unsafe fn splat(v: f32) -> Self;
        /// `L` values from `p` (unaligned).
        unsafe fn load(p: *const f32) -> Self;
        /// `a b + c`.
        unsafe fn fma(a: Self, b: Self, c: Self) -> Self;
        /// Pools the conv values `top` (two vectors: `2 L` columns of the
        /// upper row) and `bottom` into `L` outputs: first maximum of each
        /// 2 x 2 block plus `bias`, ReLU when asked; stores the values at
        /// `out` and the block positions at `idx`.
        unsafe fn pool_store(
            top: [Self; 2],
            bottom: [Self; 2],
            bias: f32,
            relu: bool,
            out: *mut f32,
            idx: *mut u8,
        );
    }

    #[derive(Clone, Copy)]
    pub(super) struct V512(__m512);

    impl Lanes for V512 {
        const L: usize = 16;
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn zero() -> Self {
            Self(_mm512_setzero_ps())
        }
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn splat(v: f32) -> Self {
            Self(_mm512_set1_ps(v))
        }
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn load(p: *const f32) -> Self {
            // SAFETY: the caller keeps p..p + 16 inside the input slice.
            Self(unsafe { _mm512_loadu_ps(p) })
        }
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn fma(a: Self, b: Self, c: Self) -> Self {
            Self(_mm512_fmadd_ps(a.0, b.0, c.0))
        }
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn pool_store(
            top: [Self; 2],
            bottom: [Self; 2],
            bias: f32,
            relu: bool,
            out: *mut f32,
            idx: *mut u8,
        ) {
            let even = _mm512_setr_epi32(0, 2, 4, 6, 8, 10, 12, 14, 16, 18, 20, 22, 24, 26, 28, 30);
            let odd = _mm512_setr_epi32(1, 3, 5, 7, 9, 11, 13, 15, 17, 19, 21, 23, 25, 27, 29, 31);
            let split = |v: [Self; 2]| {
                (
                    _mm512_permutex2var_ps(v[0].0, even, v[1].0),
                    _mm512_permutex2var_ps(v[0].0, odd, v[1].0),
                )
            };
            let (t0, t1) = split(top);
            let (b0, b1) = split(bottom);
            let i = _mm512_set1_epi32;
            let mt = _mm512_cmp_ps_mask::<_CMP_GT_OQ>(t1, t0);
            let top_max = _mm512_mask_blend_ps(mt, t0, t1);
            let top_at = _mm512_mask_blend_epi32(mt, i(0), i(1));
            let mb = _mm512_cmp_ps_mask::<_CMP_GT_OQ>(b1, b0);
            let bottom_max = _mm512_mask_blend_ps(mb, b0, b1);
            let bottom_at = _mm512_mask_blend_epi32(mb, i(2), i(3));
            let m = _mm512_cmp_ps_mask::<_CMP_GT_OQ>(bottom_max, top_max);
            let best = _mm512_mask_blend_ps(m, top_max, bottom_max);
            let at = _mm512_mask_blend_epi32(m, top_at, bottom_at);
            let mut v = _mm512_add_ps(best, _mm512_set1_ps(bias));
            if relu {
                let zero = _mm512_setzero_ps();
                v = _mm512_mask_blend_ps(_mm512_cmp_ps_mask::<_CMP_LT_OQ>(v, zero), v, zero);
            }
            // SAFETY: the caller keeps out..out + 16 and idx..idx + 16 inside their slices.
            unsafe {
                _mm512_storeu_ps(out, v);
                _mm_storeu_si128(idx.cast(), _mm512_cvtepi32_epi8(at));
            }
        }
    }

    #[derive(Clone, Copy)]
    pub(super) struct V256(__m256);

    impl Lanes for V256 {
        const L: usize = 8;
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn zero() -> Self {
            Self(_mm256_setzero_ps())
        }
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn splat(v: f32) -> Self {
            Self(_mm256_set1_ps(v))
        }
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn load(p: *const f32) -> Self {
            // SAFETY: the caller keeps p..p + 8 inside the input slice.
            Self(unsafe { _mm256_loadu_ps(p) })
        }
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn fma(a: Self, b: Self, c: Self) -> Self {
            Self(_mm256_fmadd_ps(a.0, b.0, c.0))
        }
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn pool_store(
            top: [Self; 2],
            bottom: [Self; 2],
            bias: f32,
            relu: bool,
            out: *mut f32,
            idx: *mut u8,
        ) {
            // Within each 128-bit half, shuffle picks a0 a2 b0 b2 (even) or
            // a1 a3 b1 b3 (odd); the 64-bit permute puts the halves in order.
            let split = |v: [Self; 2]| {
                let e = _mm256_shuffle_ps::<0b10_00_10_00>(v[0].0, v[1].0);
                let o = _mm256_shuffle_ps::<0b11_01_11_01>(v[0].0, v[1].0);
                let fix = |x: __m256| {
                    _mm256_castpd_ps(_mm256_permute4x64_pd::<0b11_01_10_00>(_mm256_castps_pd(x)))
                };
                (fix(e), fix(o))
            };
            let (t0, t1) = split(top);
            let (b0, b1) = split(bottom);
            let f = _mm256_set1_ps;
            let mt = _mm256_cmp_ps::<_CMP_GT_OQ>(t1, t0);
            let top_max = _mm256_blendv_ps(t0, t1, mt);
            let top_at = _mm256_blendv_ps(f(0.0), f(1.0), mt);
            let mb = _mm256_cmp_ps::<_CMP_GT_OQ>(b1, b0);
            let bottom_max = _mm256_blendv_ps(b0, b1, mb);
            let bottom_at = _mm256_blendv_ps(f(2.0), f(3.0), mb);
            let m = _mm256_cmp_ps::<_CMP_GT_OQ>(bottom_max, top_max);
            let best = _mm256_blendv_ps(top_max, bottom_max, m);
            let at = _mm256_cvttps_epi32(_mm256_blendv_ps(top_at, bottom_at, m));
            let mut v = _mm256_add_ps(best, f(bias));
            if relu {
                let zero = _mm256_setzero_ps();
                v = _mm256_blendv_ps(v, zero, _mm256_cmp_ps::<_CMP_LT_OQ>(v, zero));
            }
            let mut at32 = [0i32; 8];
            // SAFETY: the caller keeps out..out + 8 and idx..idx + 8 inside
            // their slices; at32 holds 8 lanes.
            unsafe {
                _mm256_storeu_ps(out, v);
                _mm256_storeu_si256(at32.as_mut_ptr().cast(), at);
                for (j, a) in at32.iter().enumerate() {
                    *idx.add(j) = *a as u8;
                }
            }
        }
    }

    /// Adds one input row's products to the accumulators of the pool row's
    /// upper conv row (`UPPER`, kernel row at `w_upper`) and lower conv row
    /// (`LOWER`, kernel row at `w_lower`); channel `c`'s weights are `c kk` further.
    ///
    /// # Safety
    /// `row .. row + k - 1 + 2 L` and the `C` kernel rows lie in their slices.
    #[inline(always)]
    unsafe fn taps<V: Lanes, const C: usize, const UPPER: bool, const LOWER: bool>(
        acc: &mut [[[V; 2]; 2]; C],
        row: *const f32,
        k: usize,
        kk: usize,
        w_upper: *const f32,
        w_lower: *const f32,
    ) {
        // SAFETY: forwarded from the caller.
        unsafe {
            for kx in 0..k {
                let x0 = V::load(row.add(kx));
                let x1 = V::load(row.add(kx + V::L));
                for (c, a) in acc.iter_mut().enumerate() {
                    if UPPER {
                        let wv = V::splat(*w_upper.add(c * kk + kx));
                        a[0][0] = V::fma(wv, x0, a[0][0]);
                        a[0][1] = V::fma(wv, x1, a[0][1]);
                    }
                    if LOWER {
                        let wv = V::splat(*w_lower.add(c * kk + kx));
                        a[1][0] = V::fma(wv, x0, a[1][0]);
                        a[1][1] = V::fma(wv, x1, a[1][1]);
                    }
                }
            }
        }
    }

    /// One sample, `C` output channels per pass (the last pass overlaps the
    /// one before when `C` does not divide `c_out`).
    ///
    /// # Safety
    /// The CPU has `V`'s instruction set, the slices match `g`, `g.c_in == 1`,
    /// `g.pool`, `c_out >= C` and the pooled width is at least `V::L`.
    #[inline(always)]
    unsafe fn sample<V: Lanes, const C: usize>(
        g: &Geometry,
        x: &[f32],
        w: &[f32],
        bias: &[f32],
        out: &mut [f32],
        idx: &mut [u8],
    ) {
        let (oh, ow) = g.out_hw();
        let (k, l, width) = (g.k, V::L, g.w);
        let kk = k * k;
        let (xp, wp) = (x.as_ptr(), w.as_ptr());
        let (op, ip) = (out.as_mut_ptr(), idx.as_mut_ptr());
        let groups = g.c_out.div_ceil(C);
        let tiles = ow.div_ceil(l);
        for pr in 0..oh {
            for tile in 0..tiles {
                // The last tile ends at the row's end (ow >= L), overlapping.
                let pc = (tile * l).min(ow - l);
                let col = 2 * pc;
                for group in 0..groups {
                    let c0 = (group * C).min(g.c_out - C);
                    // SAFETY (all pointer arithmetic below): rows read are
                    // 2 pr + iy <= 2 oh + k - 1 <= h - 1, columns
                    // col + kx + 2 L - 1 <= 2 ow + k - 2 <= w - 1; weights
                    // (c0 + c) k k + ky k + kx < c_out k k; outputs
                    // (c0 + c) oh ow + pr ow + pc + L <= c_out oh ow.
                    unsafe {
                        let mut acc = [[[V::zero(); 2]; 2]; C];
                        let wg = wp.add(c0 * kk);
                        let row = |iy: usize| xp.add((2 * pr + iy) * width + col);
                        // Input row iy feeds conv row 0 with kernel row iy and
                        // conv row 1 with kernel row iy - 1.
                        taps::<V, C, true, false>(&mut acc, row(0), k, kk, wg, wg);
                        for iy in 1..k {
                            let (w0, w1) = (wg.add(iy * k), wg.add((iy - 1) * k));
                            taps::<V, C, true, true>(&mut acc, row(iy), k, kk, w0, w1);
                        }
                        let last = wg.add((k - 1) * k);
                        taps::<V, C, false, true>(&mut acc, row(k), k, kk, last, last);
                        for (c, a) in acc.iter().enumerate() {
                            let m = c0 + c;
                            let at = (m * oh + pr) * ow + pc;
                            V::pool_store(a[0], a[1], bias[m], g.relu, op.add(at), ip.add(at));
                        }
                    }
                }
            }
        }
    }

    /// [`sample`] on AVX-512F, 4 channels per pass (1 when fewer).
    ///
    /// # Safety
    /// The CPU has AVX-512F; the conditions of [`sample`] with `V::L = 16`.
    #[target_feature(enable = "avx512f")]
    pub(super) unsafe fn sample_avx512(
        g: &Geometry,
        x: &[f32],
        w: &[f32],
        bias: &[f32],
        out: &mut [f32],
        idx: &mut [u8],
    ) {
        // SAFETY: forwarded from the caller.
        unsafe {
            if g.c_out >= 4 {
                sample::<V512, 4>(g, x, w, bias, out, idx)
            } else {
                sample::<V512, 1>(g, x, w, bias, out, idx)
            }
        }
    }

    /// [`sample`] on AVX2 + FMA, 2 channels per pass (1 when fewer).
    ///
    /// # Safety
    /// The CPU has AVX2 and FMA; the conditions of [`sample`] with `V::L = 8`.
    #[target_feature(enable = "avx2,fma")]
    pub(super) unsafe fn sample_avx2(
        g: &Geometry,
        x: &[f32],
        w: &[f32],
        bias: &[f32],
        out: &mut [f32],
        idx: &mut [u8],
    ) {
        // SAFETY: forwarded from the caller.
        unsafe {
            if g.c_out >= 2 {
                sample::<V256, 2>(g, x, w, bias, out, idx)
            } else {
                sample::<V256, 1>(g, x, w, bias, out, idx)
            }
        }
    }
}
