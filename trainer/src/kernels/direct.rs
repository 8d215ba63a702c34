//! Direct convolutions for pooled blocks (f32), with bias, ReLU, 2 x 2 max
//! pooling and the arg-max applied to the accumulators before anything is
//! stored, so the un-pooled conv output never reaches memory.
//!
//! [`Plan::Rows`], for one input channel (the first layer: `K = k k` is too
//! short for a GEMM to pay), is vectorised along the pooled output columns.
//! Each input row is first split into its even and odd columns (a scratch
//! copy of the sample, a few vector shuffles per row), so the conv values of
//! the even and the odd columns of `L` pool blocks (`L` the SIMD width) are
//! each one plain load-and-FMA away and the pooling needs no shuffles. For
//! each pool row (two conv rows), each tile of `L` pooled columns and each
//! group of `C` output channels, the `2 x 2 x C` accumulator vectors (conv
//! row, column parity, channel) stay in registers; per kernel tap the four
//! input vectors they need are loaded once and each broadcast weight feeds
//! four fused multiply-adds.
//!
//! [`Plan::Channels`], for several input channels, puts `2 L` output
//! channels in two vectors and keeps the four pixels of `P` pool blocks in
//! registers: per tap, two weight vectors (weights transposed to
//! `(c_in, k, k, c_out)`) and one broadcast input value per pixel. The four
//! pixels of a block are separate registers, so pooling is lane-wise; each
//! pooled vector is stored channel by channel.
//!
//! Every output value is the sum of its `c_in k k` products, accumulated
//! with fused multiply-adds in (channel, kernel row, kernel column) order,
//! whichever tile computes it: a last tile that overlaps the one before it
//! rewrites identical values. Against the GEMM path (its own summation
//! order) results differ by float rounding (tested). Pooling picks the
//! first maximum in row-major block order and ReLU maps values below zero to
//! zero, exactly as the GEMM path's epilogue does.
//!
//! A kernel is taken when the CPU has AVX-512F (16 lanes) or AVX2 + FMA
//! (8 lanes), checked at run time, and the block fits it (see [`plan`]);
//! otherwise the caller uses the im2col + GEMM path.

use super::conv::Geometry;
use std::mem::MaybeUninit;

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

    /// Whether this CPU has the instruction set.
    pub(crate) fn available(self) -> bool {
        match self {
            #[cfg(target_arch = "x86_64")]
            Self::Avx512 => std::arch::is_x86_feature_detected!("avx512f"),
            #[cfg(target_arch = "x86_64")]
            Self::Avx2 => {
                std::arch::is_x86_feature_detected!("avx2")
                    && std::arch::is_x86_feature_detected!("fma")
            }
        }
    }

    /// Lanes per vector.
    pub(crate) fn lanes(self) -> usize {
        match self {
            #[cfg(target_arch = "x86_64")]
            Self::Avx512 => 16,
            #[cfg(target_arch = "x86_64")]
            Self::Avx2 => 8,
        }
    }
}

/// Which direct kernel runs a block, on which instruction set.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Plan {
    /// One input channel: conv columns in the vector lanes.
    Rows(Isa),
    /// Several input channels: output channels in the vector lanes
    /// (`c_out` a multiple of 32 on AVX-512, of 16 on AVX2).
    Channels(Isa),
}

/// Output channels per pass of the channel kernel.
fn channel_block(isa: Isa) -> usize {
    2 * isa.lanes()
}

/// The direct kernel for `g`, or `None` when the block is not one they
/// handle (no pooling; one input channel and a pooled row narrower than a
/// vector; several input channels and `c_out` not a multiple of the
/// channel block; or no supported instruction set).
pub(crate) fn plan(g: &Geometry) -> Option<Plan> {
    if !g.pool || g.c_out == 0 {
        return None;
    }
    let isa = Isa::detect()?;
    let (oh, ow) = g.out_hw();
    if oh == 0 || ow == 0 {
        return None;
    }
    if g.c_in == 1 {
        (ow >= isa.lanes()).then_some(Plan::Rows(isa))
    } else {
        (g.c_out.is_multiple_of(channel_block(isa))).then_some(Plan::Channels(isa))
    }
}

/// The weights as `plan` reads them: `(c_out, c_in, k, k)` as given for
/// [`Plan::Rows`], transposed to `(c_in, k, k, c_out)` for [`Plan::Channels`].
pub(crate) fn prepare_weights(plan: Plan, g: &Geometry, w: &[f32]) -> Vec<f32> {
    match plan {
        Plan::Rows(_) => w.to_vec(),
        Plan::Channels(_) => {
            let kk = g.patch();
            let mut t = vec![0f32; w.len()];
            for (m, row) in w.chunks_exact(kk).enumerate() {
                for (tap, v) in row.iter().enumerate() {
                    t[tap * g.c_out + m] = *v;
                }
            }
            t
        }
    }
}

/// One sample's forward pass: `out` is `c_out x oh x ow`, `idx` the pool
/// arg-max of each output (0-3, row-major in the block); `w` as
/// [`prepare_weights`] returns it. Every element of `out` and `idx` is
/// written (they may start uninitialised); `scratch` is working memory that
/// callers keep between samples.
///
/// # Panics
/// When the slices' lengths do not match `g`, or `plan` does not fit `g`.
#[allow(clippy::too_many_arguments)]
pub(crate) fn forward_sample(
    plan: Plan,
    g: &Geometry,
    x: &[f32],
    w: &[f32],
    bias: &[f32],
    out: &mut [MaybeUninit<f32>],
    idx: &mut [MaybeUninit<u8>],
    scratch: &mut Vec<f32>,
) {
    let (oh, ow) = g.out_hw();
    assert!(g.pool && oh > 0 && ow > 0);
    assert_eq!(x.len(), g.in_len(), "input sample");
    assert_eq!(w.len(), g.c_out * g.patch(), "weights");
    assert_eq!(bias.len(), g.c_out, "bias");
    assert_eq!(out.len(), g.out_len(), "output sample");
    assert_eq!(idx.len(), g.out_len(), "pool indices");
    match plan {
        Plan::Rows(isa) => assert!(g.c_in == 1 && ow >= isa.lanes()),
        Plan::Channels(isa) => assert!(g.c_out.is_multiple_of(channel_block(isa))),
    }
    let (out, idx) = (
        out.as_mut_ptr().cast::<f32>(),
        idx.as_mut_ptr().cast::<u8>(),
    );
    // SAFETY: `plan`/`detect` found the CPU feature; the shapes were checked
    // above; the kernels only write through `out` and `idx`.
    match plan {
        #[cfg(target_arch = "x86_64")]
        Plan::Rows(isa) => {
            let s = x86::split_stride(g.w);
            let need = g.h * 2 * s + x86::ALIGN;
            if scratch.len() < need {
                scratch.resize(need, 0.0);
            }
            let ptr = scratch.as_mut_ptr();
            // Rows start on 64-byte boundaries (aligned vector loads where the
            // tile starts); at most ALIGN - 1 elements are skipped.
            let base = unsafe { ptr.add(ptr.align_offset(64).min(x86::ALIGN - 1)) };
            match isa {
                Isa::Avx512 => unsafe { x86::sample_avx512(g, x, w, bias, out, idx, base) },
                Isa::Avx2 => unsafe { x86::sample_avx2(g, x, w, bias, out, idx, base) },
            }
        }
        #[cfg(target_arch = "x86_64")]
        Plan::Channels(Isa::Avx512) => unsafe { x86::channels_avx512(g, x, w, bias, out, idx) },
        #[cfg(target_arch = "x86_64")]
        Plan::Channels(Isa::Avx2) => unsafe { x86::channels_avx2(g, x, w, bias, out, idx) },
    }
}

#[cfg(target_arch = "x86_64")]
pub(super) mod x86 {
    use super::Geometry;
    use std::arch::x86_64::*;

    /// The vector operations the kernel is written in.
    pub(in crate::kernels) trait Lanes: Copy {
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
        /// Stores all lanes at `p` (unaligned).
        unsafe fn store(p: *mut f32, v: Self);
        /// The even and the odd elements of the `2 L` values `a` then `b`.
        unsafe fn split(a: Self, b: Self) -> (Self, Self);
        /// Pools lane by lane the four positions of 2 x 2 blocks, given in
        /// row-major block order: first maximum of each block plus `bias`,
        /// ReLU when asked; stores `L` values at `out` and the block
        /// positions (0-3) at `idx`.
        unsafe fn pool4(block: [Self; 4], bias: Self, relu: bool, out: *mut f32, idx: *mut u8);
    }

    #[derive(Clone, Copy)]
    pub(in crate::kernels) struct V512(__m512);

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
        unsafe fn store(p: *mut f32, v: Self) {
            // SAFETY: the caller keeps p..p + 16 inside its slice.
            unsafe { _mm512_storeu_ps(p, v.0) }
        }
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn split(a: Self, b: Self) -> (Self, Self) {
            let even = _mm512_setr_epi32(0, 2, 4, 6, 8, 10, 12, 14, 16, 18, 20, 22, 24, 26, 28, 30);
            let odd = _mm512_setr_epi32(1, 3, 5, 7, 9, 11, 13, 15, 17, 19, 21, 23, 25, 27, 29, 31);
            (
                Self(_mm512_permutex2var_ps(a.0, even, b.0)),
                Self(_mm512_permutex2var_ps(a.0, odd, b.0)),
            )
        }
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn pool4(block: [Self; 4], bias: Self, relu: bool, out: *mut f32, idx: *mut u8) {
            let [t0, t1, b0, b1] = block.map(|v| v.0);
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
            let mut v = _mm512_add_ps(best, bias.0);
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
    pub(in crate::kernels) struct V256(__m256);

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
        unsafe fn store(p: *mut f32, v: Self) {
            // SAFETY: the caller keeps p..p + 8 inside its slice.
            unsafe { _mm256_storeu_ps(p, v.0) }
        }
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn split(a: Self, b: Self) -> (Self, Self) {
            // Within each 128-bit half, shuffle picks a0 a2 b0 b2 (even) or
            // a1 a3 b1 b3 (odd); the 64-bit permute puts the halves in order.
            let e = _mm256_shuffle_ps::<0b10_00_10_00>(a.0, b.0);
            let o = _mm256_shuffle_ps::<0b11_01_11_01>(a.0, b.0);
            let fix = |x: __m256| {
                _mm256_castpd_ps(_mm256_permute4x64_pd::<0b11_01_10_00>(_mm256_castps_pd(x)))
            };
            (Self(fix(e)), Self(fix(o)))
        }
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn pool4(block: [Self; 4], bias: Self, relu: bool, out: *mut f32, idx: *mut u8) {
            let [t0, t1, b0, b1] = block.map(|v| v.0);
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
            let mut v = _mm256_add_ps(best, bias.0);
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

    /// Elements per row half in the split copy of a sample: the even (or
    /// odd) columns of a row of `w`, rounded up to whole 64-byte lines.
    pub(super) fn split_stride(w: usize) -> usize {
        w.div_ceil(2).next_multiple_of(ALIGN)
    }

    /// f32 elements per 64-byte line.
    pub(super) const ALIGN: usize = 16;

    /// Copies the `h x w` sample `x` to `dst`, each row split into its even
    /// columns (at `2 r s`) and its odd columns (at `2 r s + s`), `s` =
    /// [`split_stride`]`(w)`.
    ///
    /// # Safety
    /// The CPU has `V`'s instruction set; `x` holds `h w` values; `dst`
    /// points to `2 h s` writable values.
    #[inline(always)]
    unsafe fn split_rows<V: Lanes>(x: &[f32], h: usize, w: usize, dst: *mut f32) {
        let s = split_stride(w);
        let l = V::L;
        assert!(x.len() >= h * w);
        // SAFETY: reads stay below r w + w, writes below 2 r s + s + ceil(w / 2) <= 2 (r + 1) s.
        unsafe {
            for r in 0..h {
                let src = x.as_ptr().add(r * w);
                let even = dst.add(2 * r * s);
                let odd = even.add(s);
                let mut j = 0;
                while 2 * j + 2 * l <= w {
                    let (e, o) = V::split(V::load(src.add(2 * j)), V::load(src.add(2 * j + l)));
                    V::store(even.add(j), e);
                    V::store(odd.add(j), o);
                    j += l;
                }
                while 2 * j < w {
                    *even.add(j) = *src.add(2 * j);
                    if 2 * j + 1 < w {
                        *odd.add(j) = *src.add(2 * j + 1);
                    }
                    j += 1;
                }
            }
        }
    }

    /// One sample, `C` output channels per pass (the last pass overlaps the
    /// one before when `C` does not divide `c_out`), on the split copy of
    /// the sample at `split` (see [`split_rows`]); `K` is the kernel side,
    /// or 0 to read it from `g`.
    ///
    /// Conv column `2 p + d` (`d` the parity) with kernel column `kx` reads
    /// input column `2 p + d + kx`: the even half at `p + (d + kx) / 2` when
    /// `d + kx` is even, the odd half at `p + (d + kx - 1) / 2` when odd.
    ///
    /// # Safety
    /// The CPU has `V`'s instruction set, the slices match `g`, `g.c_in == 1`,
    /// `g.pool`, `c_out >= C`, `K` is 0 or `g.k`, the pooled width is at least `V::L`, `out`
    /// and `idx` point to `c_out oh ow` writable values and `split` to
    /// `2 h split_stride(w)` writable values.
    #[inline(always)]
    #[allow(clippy::too_many_arguments)]
    unsafe fn sample<V: Lanes, const C: usize, const K: usize>(
        g: &Geometry,
        x: &[f32],
        w: &[f32],
        bias: &[f32],
        op: *mut f32,
        ip: *mut u8,
        split: *mut f32,
    ) {
        let (oh, ow) = g.out_hw();
        // A kernel side known at compile time unrolls the tap loop (no parity
        // tests, input vectors shared by neighbouring taps).
        let k = if K > 0 { K } else { g.k };
        let l = V::L;
        let kk = k * k;
        let s = split_stride(g.w);
        let wp = w.as_ptr();
        let groups = g.c_out.div_ceil(C);
        let tiles = ow.div_ceil(l);
        // SAFETY: forwarded from the caller.
        unsafe { split_rows::<V>(x, g.h, g.w, split) };
        for pr in 0..oh {
            for tile in 0..tiles {
                // The last tile ends at the row's end (ow >= L), overlapping.
                let pc = (tile * l).min(ow - l);
                for group in 0..groups {
                    let c0 = (group * C).min(g.c_out - C);
                    // SAFETY (all pointer arithmetic below): input rows read are
                    // 2 pr + 1 + ky <= 2 oh + k - 2 <= h - 1; an even-half
                    // read at pc + L - 1 + (kx + 1) / 2 is input column at most
                    // 2 (ow - 1) + 1 + kx <= w - 1, so within ceil(w / 2) <= s,
                    // likewise for the odd half; weights (c0 + c) k k + ky k +
                    // kx < c_out k k; outputs (c0 + c) oh ow + pr ow + pc + L
                    // <= c_out oh ow.
                    unsafe {
                        let mut acc = [[[V::zero(); 2]; 2]; C];
                        let wg = wp.add(c0 * kk);
                        for ky in 0..k {
                            let top = split.add((2 * pr + ky) * 2 * s + pc);
                            let bottom = top.add(2 * s);
                            let wrow = wg.add(ky * k);
                            for kx in 0..k {
                                // Offsets of the even and the odd conv column's input.
                                let (at_even, at_odd) = if kx % 2 == 0 {
                                    (kx / 2, s + kx / 2)
                                } else {
                                    (s + kx / 2, kx / 2 + 1)
                                };
                                let xin = [
                                    V::load(top.add(at_even)),
                                    V::load(top.add(at_odd)),
                                    V::load(bottom.add(at_even)),
                                    V::load(bottom.add(at_odd)),
                                ];
                                for (c, a) in acc.iter_mut().enumerate() {
                                    let wv = V::splat(*wrow.add(c * kk + kx));
                                    a[0][0] = V::fma(wv, xin[0], a[0][0]);
                                    a[0][1] = V::fma(wv, xin[1], a[0][1]);
                                    a[1][0] = V::fma(wv, xin[2], a[1][0]);
                                    a[1][1] = V::fma(wv, xin[3], a[1][1]);
                                }
                            }
                        }
                        for (c, a) in acc.iter().enumerate() {
                            let m = c0 + c;
                            let at = (m * oh + pr) * ow + pc;
                            let block = [a[0][0], a[0][1], a[1][0], a[1][1]];
                            V::pool4(block, V::splat(bias[m]), g.relu, op.add(at), ip.add(at));
                        }
                    }
                }
            }
        }
    }

    /// One `2 x 2 P`-pixel strip (pool blocks `pc .. pc + P` of pool row
    /// `pr`) of output channels `m0 .. m0 + CV L`: accumulators per pixel
    /// and channel vector, weights `wt` as `(c_in, k, k, c_out)`.
    ///
    /// # Safety
    /// As [`sample_channels`]; `pc + P <= ow` and `m0 + CV L <= c_out`.
    #[inline(always)]
    #[allow(clippy::too_many_arguments)]
    unsafe fn strip<V: Lanes, const CV: usize, const P: usize>(
        g: &Geometry,
        x: *const f32,
        wt: *const f32,
        bias: &[V; CV],
        out: *mut f32,
        idx: *mut u8,
        (pr, pc, m0): (usize, usize, usize),
    ) {
        let (oh, ow) = g.out_hw();
        let (k, width, c_out) = (g.k, g.w, g.c_out);
        // SAFETY (pointer arithmetic): rows read are 2 pr + 1 + ky <= h - 1,
        // columns 2 (pc + p) + 1 + kx <= 2 ow + k - 2 <= w - 1; weights
        // ((ci k + ky) k + kx) c_out + m0 + CV L <= c_in k k c_out; outputs
        // m oh ow + pr ow + pc + p < c_out oh ow.
        unsafe {
            let mut acc = [[[V::zero(); CV]; 4]; P];
            for ci in 0..g.c_in {
                for ky in 0..k {
                    let upper = x.add((ci * g.h + 2 * pr + ky) * width + 2 * pc);
                    let lower = upper.add(width);
                    let wrow = wt.add((ci * k + ky) * k * c_out + m0);
                    for kx in 0..k {
                        let wv: [V; CV] =
                            std::array::from_fn(|v| V::load(wrow.add(kx * c_out + v * V::L)));
                        for (p, a) in acc.iter_mut().enumerate() {
                            for (d, ad) in a.iter_mut().enumerate() {
                                let src = if d < 2 { upper } else { lower };
                                let xb = V::splat(*src.add(2 * p + (d & 1) + kx));
                                for (av, wvv) in ad.iter_mut().zip(&wv) {
                                    *av = V::fma(*wvv, xb, *av);
                                }
                            }
                        }
                    }
                }
            }
            let (mut vals, mut ats) = ([0f32; 16], [0u8; 16]);
            for (p, a) in acc.iter().enumerate() {
                for (v, b) in bias.iter().enumerate() {
                    let block = [a[0][v], a[1][v], a[2][v], a[3][v]];
                    V::pool4(block, *b, g.relu, vals.as_mut_ptr(), ats.as_mut_ptr());
                    for lane in 0..V::L {
                        let at = ((m0 + v * V::L + lane) * oh + pr) * ow + pc + p;
                        *out.add(at) = vals[lane];
                        *idx.add(at) = ats[lane];
                    }
                }
            }
        }
    }

    /// One sample with the output channels in the vector lanes: `CV L`
    /// channels per pass, `P` pool blocks per strip (the row's remainder one
    /// at a time); `wt` is the weight tensor as `(c_in, k, k, c_out)`.
    ///
    /// # Safety
    /// The CPU has `V`'s instruction set, the slices match `g`, `g.pool`,
    /// `CV L` divides `c_out` and `V::L <= 16`.
    #[inline(always)]
    unsafe fn sample_channels<V: Lanes, const CV: usize, const P: usize>(
        g: &Geometry,
        x: &[f32],
        wt: &[f32],
        bias: &[f32],
        op: *mut f32,
        ip: *mut u8,
    ) {
        let (oh, ow) = g.out_hw();
        let (xp, wp) = (x.as_ptr(), wt.as_ptr());
        for m0 in (0..g.c_out).step_by(CV * V::L) {
            // SAFETY: m0 + CV L <= c_out = bias.len(); the rest as documented.
            unsafe {
                let b: [V; CV] = std::array::from_fn(|v| V::load(bias.as_ptr().add(m0 + v * V::L)));
                for pr in 0..oh {
                    let mut pc = 0;
                    while pc + P <= ow {
                        strip::<V, CV, P>(g, xp, wp, &b, op, ip, (pr, pc, m0));
                        pc += P;
                    }
                    while pc < ow {
                        strip::<V, CV, 1>(g, xp, wp, &b, op, ip, (pr, pc, m0));
                        pc += 1;
                    }
                }
            }
        }
    }

    /// [`sample_channels`] on AVX-512F: 32 channels per pass, 2 pool blocks per strip.
    ///
    /// # Safety
    /// The CPU has AVX-512F; the conditions of [`sample_channels`] with `CV L = 32`.
    #[target_feature(enable = "avx512f")]
    pub(super) unsafe fn channels_avx512(
        g: &Geometry,
        x: &[f32],
        wt: &[f32],
        bias: &[f32],
        out: *mut f32,
        idx: *mut u8,
    ) {
        // SAFETY: forwarded from the caller.
        unsafe { sample_channels::<V512, 2, 2>(g, x, wt, bias, out, idx) }
    }

    /// [`sample_channels`] on AVX2 + FMA: 16 channels per pass, 1 pool block per strip.
    ///
    /// # Safety
    /// The CPU has AVX2 and FMA; the conditions of [`sample_channels`] with `CV L = 16`.
    #[target_feature(enable = "avx2,fma")]
    pub(super) unsafe fn channels_avx2(
        g: &Geometry,
        x: &[f32],
        wt: &[f32],
        bias: &[f32],
        out: *mut f32,
        idx: *mut u8,
    ) {
        // SAFETY: forwarded from the caller.
        unsafe { sample_channels::<V256, 2, 1>(g, x, wt, bias, out, idx) }
    }

    /// [`sample`] on AVX-512F, 4 channels per pass (1 when fewer), unrolled
    /// for kernel sides 5 and 3.
    ///
    /// # Safety
    /// The CPU has AVX-512F; the conditions of [`sample`] with `V::L = 16`.
    #[target_feature(enable = "avx512f")]
    #[allow(clippy::too_many_arguments)]
    pub(super) unsafe fn sample_avx512(
        g: &Geometry,
        x: &[f32],
        w: &[f32],
        bias: &[f32],
        out: *mut f32,
        idx: *mut u8,
        split: *mut f32,
    ) {
        // SAFETY: forwarded from the caller.
        unsafe {
            match (g.c_out >= 4, g.k) {
                (true, 5) => sample::<V512, 4, 5>(g, x, w, bias, out, idx, split),
                (true, 3) => sample::<V512, 4, 3>(g, x, w, bias, out, idx, split),
                (true, _) => sample::<V512, 4, 0>(g, x, w, bias, out, idx, split),
                (false, _) => sample::<V512, 1, 0>(g, x, w, bias, out, idx, split),
            }
        }
    }

    /// [`sample`] on AVX2 + FMA, 2 channels per pass (1 when fewer), unrolled
    /// for kernel sides 5 and 3.
    ///
    /// # Safety
    /// The CPU has AVX2 and FMA; the conditions of [`sample`] with `V::L = 8`.
    #[target_feature(enable = "avx2,fma")]
    #[allow(clippy::too_many_arguments)]
    pub(super) unsafe fn sample_avx2(
        g: &Geometry,
        x: &[f32],
        w: &[f32],
        bias: &[f32],
        out: *mut f32,
        idx: *mut u8,
        split: *mut f32,
    ) {
        // SAFETY: forwarded from the caller.
        unsafe {
            match (g.c_out >= 2, g.k) {
                (true, 5) => sample::<V256, 2, 5>(g, x, w, bias, out, idx, split),
                (true, 3) => sample::<V256, 2, 3>(g, x, w, bias, out, idx, split),
                (true, _) => sample::<V256, 2, 0>(g, x, w, bias, out, idx, split),
                (false, _) => sample::<V256, 1, 0>(g, x, w, bias, out, idx, split),
            }
        }
    }
}
