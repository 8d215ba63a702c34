//! Backward pass of a pooled f32 convolution block with several input
//! channels, straight from the pool arg-max.
//!
//! After 2 x 2 max pooling at most one conv value in four has a gradient
//! (the kept maximum of its block, and only where ReLU passed it), so the
//! dense GEMMs of the generic path spend three quarters of their work on
//! zeros. Here each output channel's non-zero gradients are listed once per
//! sample (value and conv position), and with the input sample held
//! channel-last (`h, w, c_in`), one kernel row of a non-zero touches `k c_in`
//! contiguous values:
//!
//! - weight gradient: for each output channel and kernel row, the `k c_in`
//!   gradient entries stay in vector registers (four vectors at a time)
//!   while every listed non-zero adds `g x[y + ky, x .. x + k, :]`;
//! - input gradient (only when the input needs one): the matching `k c_in`
//!   weights stay in registers and every non-zero adds `g w[m, ky, .., ..]`
//!   into the channel-last input gradient, which is then copied back to
//!   `(c_in, h, w)`. Non-zeros of one pool row are visited in a stride that
//!   keeps consecutive updates on disjoint memory.
//!
//! The vectors run along the input channels, so this takes blocks whose
//! `c_in` is a multiple of the vector width (16 on AVX-512F, 8 on AVX2 +
//! FMA): conv2 and conv3 of the default network. With one input channel
//! (conv1, `k <= 8`) the `k` taps of a kernel row sit in the lanes of one
//! vector instead, the `k` rows' weight-gradient accumulators in registers
//! (and, when asked, the input gradient updated a kernel row per vector).
//! Results equal the GEMM path's to float rounding (tested in `conv.rs`,
//! with and without exact ties); the sums are taken in a fixed order, so
//! they do not depend on the thread count.

use super::conv::Geometry;
use super::direct::Isa;

/// Whether the path takes `g` on `isa` (the CPU check aside).
fn takes(isa: Isa, g: &Geometry) -> bool {
    let (oh, ow) = g.out_hw();
    if !g.pool || g.c_in == 0 || g.c_out == 0 || oh == 0 || ow == 0 {
        return false;
    }
    g.c_in.is_multiple_of(isa.lanes()) || (g.c_in == 1 && g.k <= MAX_TAPS_K)
}

/// Largest kernel side of the one-channel kernels.
const MAX_TAPS_K: usize = 8;

/// The instruction set this path runs `g` on (the best one of this CPU
/// that takes it), or `None` when it does not take the block: no pooling,
/// or `c_in` neither a multiple of the vector width nor 1 with `k <= 8`.
pub(crate) fn plan(g: &Geometry) -> Option<Isa> {
    let best = Isa::detect()?;
    let mut candidates = vec![best];
    #[cfg(target_arch = "x86_64")]
    candidates.push(Isa::Avx2);
    candidates
        .into_iter()
        .find(|isa| isa.available() && takes(*isa, g))
}

/// Whether `isa` is on this CPU and the path takes `g` on it.
pub(crate) fn fits(isa: Isa, g: &Geometry) -> bool {
    isa.available() && takes(isa, g)
}

/// A `len`-long slice of `buf` that starts on a 64-byte line, so vectors
/// at multiples of 16 values never straddle two lines.
fn aligned(buf: &mut Vec<f32>, len: usize) -> &mut [f32] {
    buf.resize(len + 15, 0.0);
    let skip = buf.as_ptr().align_offset(64).min(15);
    &mut buf[skip..skip + len]
}

/// Gradients of samples `first .. first + count`: the weight and bias
/// gradient partials (`(c_out, c_in, k, k)` and `c_out`), and the input
/// gradient written into `dx` (those samples, `(c_in, h, w)` each) when given.
///
/// # Panics
/// When `isa` does not [`fits`] `g` or the slices do not match `g`.
#[allow(clippy::too_many_arguments)]
pub(crate) fn backward_group(
    isa: Isa,
    g: &Geometry,
    (first, count): (usize, usize),
    x: &[f32],
    w: &[f32],
    out: &[f32],
    idx: &[u8],
    grad: &[f32],
    mut dx: Option<&mut [f32]>,
) -> (Vec<f32>, Vec<f32>) {
    assert!(
        fits(isa, g),
        "pooled gradient: {isa:?} does not run {g:?} on this CPU"
    );
    let (oh, ow) = g.out_hw();
    let (k, ci, c_out, width) = (g.k, g.c_in, g.c_out, g.w);
    let kc = k * ci;
    let (per_in, per_out) = (g.in_len(), g.out_len());
    assert!(first + count <= g.batch);
    assert_eq!(x.len(), g.batch * per_in, "input");
    assert_eq!(w.len(), c_out * g.patch(), "weights");
    assert!(out.len() == g.batch * per_out && idx.len() == out.len() && grad.len() == out.len());
    if let Some(d) = dx.as_deref() {
        assert_eq!(d.len(), count * per_in, "input gradient");
    }
    // Weights as (c_out, k, k, c_in): one kernel row of a channel is k c_in long.
    let mut wt = vec![0f32; w.len()];
    for m in 0..c_out {
        for c in 0..ci {
            for tap in 0..k * k {
                wt[(m * k * k + tap) * ci + c] = w[(m * ci + c) * k * k + tap];
            }
        }
    }
    let mut dwt = vec![0f32; w.len()];
    let mut db = vec![0f32; c_out];
    let mut xpad = vec![0f32; if ci == 1 { per_in + 16 } else { 0 }];
    let mut dxpad = vec![
        0f32;
        if ci == 1 && dx.is_some() {
            per_in + 16
        } else {
            0
        }
    ];
    let (mut xh_buf, mut dxh_buf) = (Vec::new(), Vec::new());
    let xh = aligned(&mut xh_buf, if ci > 1 { per_in } else { 0 });
    let dxh = aligned(&mut dxh_buf, if dx.is_some() { per_in } else { 0 });
    let mut nz: Vec<(f32, usize)> = Vec::with_capacity(oh * ow);
    // Pool columns visited `step` apart: conv columns at least k apart, so
    // the k-wide updates of consecutive non-zeros do not overlap.
    let step = k / 2 + 1;
    for s in first..first + count {
        if ci > 1 {
            let planes: Vec<&[f32]> = x[s * per_in..][..per_in]
                .chunks_exact(g.h * width)
                .collect();
            for (p, dst) in xh.chunks_exact_mut(ci).enumerate() {
                for (d, plane) in dst.iter_mut().zip(&planes) {
                    *d = plane[p];
                }
            }
        } else {
            xpad[..per_in].copy_from_slice(&x[s * per_in..][..per_in]);
        }
        dxh.fill(0.0);
        dxpad.fill(0.0);
        for (m, db_m) in db.iter_mut().enumerate() {
            nz.clear();
            for pr in 0..oh {
                for phase in 0..step.min(ow) {
                    for pc in (phase..ow).step_by(step) {
                        let i = s * per_out + (m * oh + pr) * ow + pc;
                        if !g.relu || out[i] > 0.0 {
                            let at = usize::from(idx[i]);
                            let (y0, x0) = (2 * pr + at / 2, 2 * pc + at % 2);
                            nz.push((grad[i], (y0 * width + x0) * ci));
                        }
                    }
                }
            }
            // Eight interleaved partial sums (one serial chain would cost
            // an add latency per non-zero).
            let mut part = [0f32; 8];
            let chunks = nz.chunks_exact(8);
            let rest: f32 = chunks.remainder().iter().map(|(v, _)| v).sum();
            for c in chunks {
                for (p, (v, _)) in part.iter_mut().zip(c) {
                    *p += v;
                }
            }
            *db_m += part.iter().sum::<f32>() + rest;
            if ci == 1 {
                // One channel: the k taps of a kernel row in the lanes of one
                // vector, all k rows' accumulators in registers. Full-width
                // vectors reach up to L - k values past a row's taps: the
                // copies of the sample and its gradient are padded with L
                // zeros, and the weight rows with zeros past k.
                let wm = &w[m * k * k..][..k * k];
                // SAFETY: `fits` checked the CPU and k <= 8 <= L; a listed
                // offset y0 w + x0 plus (k - 1) w + L is at most h w - k + L
                // <= per_in + L = xpad.len() = dxpad.len().
                unsafe {
                    let dst = &mut dwt[m * k * k..][..k * k];
                    x86::weight_taps(isa, &nz, xpad.as_ptr(), width, k, dst);
                    if dx.is_some() {
                        x86::input_taps(isa, &nz, dxpad.as_mut_ptr(), width, k, wm);
                    }
                }
                continue;
            }
            for ky in 0..k {
                let row = ky * width * ci;
                let at = (m * k + ky) * kc;
                // SAFETY: `plan` found the CPU feature; a listed offset plus
                // row plus k c_in is at most ((y0 + ky) w + x0 + k) c_in <=
                // h w c_in, as y0 + ky <= h - 1 and x0 + k <= w; the kernel
                // row slices hold k c_in values, a multiple of the lanes.
                unsafe {
                    let xrow = xh.as_ptr().add(row);
                    x86::weight_row(isa, &nz, xrow, &mut dwt[at..at + kc]);
                    if dx.is_some() {
                        let drow = dxh.as_mut_ptr().add(row);
                        x86::input_row(isa, &nz, drow, &wt[at..at + kc]);
                    }
                }
            }
        }
        if let Some(d) = dx.as_deref_mut() {
            let ds = &mut d[(s - first) * per_in..][..per_in];
            if ci == 1 {
                ds.copy_from_slice(&dxpad[..per_in]);
                continue;
            }
            for (c, plane) in ds.chunks_exact_mut(g.h * width).enumerate() {
                for (v, src) in plane.iter_mut().zip(dxh.chunks_exact(ci)) {
                    *v = src[c];
                }
            }
        }
    }
    let mut dw = vec![0f32; w.len()];
    for m in 0..c_out {
        for c in 0..ci {
            for tap in 0..k * k {
                dw[(m * ci + c) * k * k + tap] = dwt[(m * k * k + tap) * ci + c];
            }
        }
    }
    (dw, db)
}

#[cfg(target_arch = "x86_64")]
mod x86 {
    use super::Isa;
    use crate::kernels::direct::x86::{Lanes, V256, V512};

    /// `dst += sum over nz of g x[off .. off + NV L]`, `NV` vectors in
    /// registers twice over (non-zeros alternate between the two sets, so
    /// `2 NV` independent FMA chains hide the FMA latency).
    #[inline(always)]
    unsafe fn weight_chunk<V: Lanes, const NV: usize>(
        nz: &[(f32, usize)],
        x: *const f32,
        dst: *mut f32,
    ) {
        // SAFETY: the caller keeps every x + off .. + NV L and dst .. + NV L in bounds.
        unsafe {
            let mut acc = [[V::zero(); NV]; 2];
            let pairs = nz.chunks_exact(2);
            let last = pairs.remainder();
            for pair in pairs {
                for (set, &(gv, off)) in acc.iter_mut().zip(pair) {
                    let gb = V::splat(gv);
                    let p = x.add(off);
                    for (j, a) in set.iter_mut().enumerate() {
                        *a = V::fma(gb, V::load(p.add(j * V::L)), *a);
                    }
                }
            }
            for &(gv, off) in last {
                let gb = V::splat(gv);
                let p = x.add(off);
                for (j, a) in acc[0].iter_mut().enumerate() {
                    *a = V::fma(gb, V::load(p.add(j * V::L)), *a);
                }
            }
            let one = V::splat(1.0);
            for (j, (a0, a1)) in acc[0].iter().zip(&acc[1]).enumerate() {
                let d = dst.add(j * V::L);
                let both = V::fma(one, *a0, *a1);
                V::store(d, V::fma(one, both, V::load(d)));
            }
        }
    }

    /// `dx[off .. off + NV L] += g w` for every listed non-zero, the `NV`
    /// weight vectors in registers.
    #[inline(always)]
    unsafe fn input_chunk<V: Lanes, const NV: usize>(
        nz: &[(f32, usize)],
        dx: *mut f32,
        w: *const f32,
    ) {
        // SAFETY: the caller keeps every dx + off .. + NV L and w .. + NV L in bounds.
        unsafe {
            let wv: [V; NV] = std::array::from_fn(|j| V::load(w.add(j * V::L)));
            for &(gv, off) in nz {
                let gb = V::splat(gv);
                let p = dx.add(off);
                for (j, wj) in wv.iter().enumerate() {
                    let d = p.add(j * V::L);
                    V::store(d, V::fma(gb, *wj, V::load(d)));
                }
            }
        }
    }

    /// `dst[ky k + kx] += sum over nz of g x[off + ky w + kx]`: kernel row
    /// `ky` in the first `K` lanes of accumulator `ky` (`K` independent FMA
    /// chains; the non-zeros are summed in list order).
    #[inline(always)]
    unsafe fn taps<V: Lanes, const K: usize>(
        nz: &[(f32, usize)],
        x: *const f32,
        w: usize,
        dst: &mut [f32],
    ) {
        // SAFETY: the caller keeps every x + off + (K - 1) w + L in bounds.
        unsafe {
            let mut acc = [V::zero(); K];
            for &(gv, off) in nz {
                let gb = V::splat(gv);
                let p = x.add(off);
                for (ky, a) in acc.iter_mut().enumerate() {
                    *a = V::fma(gb, V::load(p.add(ky * w)), *a);
                }
            }
            let mut lanes = [0f32; 16];
            for (ky, a) in acc.iter().enumerate() {
                V::store(lanes.as_mut_ptr(), *a);
                for (d, v) in dst[ky * K..(ky + 1) * K].iter_mut().zip(lanes) {
                    *d += v;
                }
            }
        }
    }

    /// `dx[off + ky w + kx] += g w[ky k + kx]` for every listed non-zero:
    /// kernel row `ky` in the first `K` lanes of register `ky`, zeros past
    /// them (so the lanes past the taps add zero).
    #[inline(always)]
    unsafe fn input_taps_k<V: Lanes, const K: usize>(
        nz: &[(f32, usize)],
        dx: *mut f32,
        w: usize,
        wm: &[f32],
    ) {
        // SAFETY: the caller keeps every dx + off + (K - 1) w + L in bounds.
        unsafe {
            let rows: [V; K] = std::array::from_fn(|ky| {
                let mut lanes = [0f32; 16];
                lanes[..K].copy_from_slice(&wm[ky * K..(ky + 1) * K]);
                V::load(lanes.as_ptr())
            });
            for &(gv, off) in nz {
                let gb = V::splat(gv);
                let p = dx.add(off);
                for (ky, r) in rows.iter().enumerate() {
                    let d = p.add(ky * w);
                    V::store(d, V::fma(gb, *r, V::load(d)));
                }
            }
        }
    }

    /// [`taps`] for kernel sides 1 to 8 (a macro: one instance per side).
    macro_rules! taps_for {
        ($f:ident, $v:ty, $k:expr, $nz:expr, $x:expr, $w:expr, $dst:expr) => {
            match $k {
                1 => $f::<$v, 1>($nz, $x, $w, $dst),
                2 => $f::<$v, 2>($nz, $x, $w, $dst),
                3 => $f::<$v, 3>($nz, $x, $w, $dst),
                4 => $f::<$v, 4>($nz, $x, $w, $dst),
                5 => $f::<$v, 5>($nz, $x, $w, $dst),
                6 => $f::<$v, 6>($nz, $x, $w, $dst),
                7 => $f::<$v, 7>($nz, $x, $w, $dst),
                8 => $f::<$v, 8>($nz, $x, $w, $dst),
                k => panic!("kernel side {k} above 8"),
            }
        };
    }

    #[target_feature(enable = "avx512f")]
    unsafe fn taps_avx512(nz: &[(f32, usize)], x: *const f32, w: usize, k: usize, dst: &mut [f32]) {
        // SAFETY: forwarded from `weight_taps`.
        unsafe { taps_for!(taps, V512, k, nz, x, w, dst) }
    }

    #[target_feature(enable = "avx2,fma")]
    unsafe fn taps_avx2(nz: &[(f32, usize)], x: *const f32, w: usize, k: usize, dst: &mut [f32]) {
        // SAFETY: forwarded from `weight_taps`.
        unsafe { taps_for!(taps, V256, k, nz, x, w, dst) }
    }

    /// One output channel's weight gradient for a one-channel input: `dst`
    /// (`k k` values) `+= sum g x[off + ky w + kx]` over the listed non-zeros.
    ///
    /// # Safety
    /// The CPU has `isa`; `k` is at most 8 and `dst.len() == k k`; every
    /// `x + off .. x + off + (k - 1) w + L` is readable (`L` the lanes).
    pub(super) unsafe fn weight_taps(
        isa: Isa,
        nz: &[(f32, usize)],
        x: *const f32,
        w: usize,
        k: usize,
        dst: &mut [f32],
    ) {
        assert_eq!(dst.len(), k * k);
        // SAFETY: forwarded from the caller.
        unsafe {
            match isa {
                Isa::Avx512 => taps_avx512(nz, x, w, k, dst),
                Isa::Avx2 => taps_avx2(nz, x, w, k, dst),
            }
        }
    }

    #[target_feature(enable = "avx512f")]
    unsafe fn input_taps_avx512(nz: &[(f32, usize)], dx: *mut f32, w: usize, k: usize, wm: &[f32]) {
        // SAFETY: forwarded from `input_taps`.
        unsafe { taps_for!(input_taps_k, V512, k, nz, dx, w, wm) }
    }

    #[target_feature(enable = "avx2,fma")]
    unsafe fn input_taps_avx2(nz: &[(f32, usize)], dx: *mut f32, w: usize, k: usize, wm: &[f32]) {
        // SAFETY: forwarded from `input_taps`.
        unsafe { taps_for!(input_taps_k, V256, k, nz, dx, w, wm) }
    }

    /// One output channel's input gradient for a one-channel input:
    /// `dx[off + ky w + kx] += g wm[ky k + kx]` for the listed non-zeros.
    ///
    /// # Safety
    /// The CPU has `isa`; `k` is at most 8 and `wm.len() == k k`; every
    /// `dx + off .. dx + off + (k - 1) w + L` is writable (`L` the lanes).
    pub(super) unsafe fn input_taps(
        isa: Isa,
        nz: &[(f32, usize)],
        dx: *mut f32,
        w: usize,
        k: usize,
        wm: &[f32],
    ) {
        assert_eq!(wm.len(), k * k);
        // SAFETY: forwarded from the caller.
        unsafe {
            match isa {
                Isa::Avx512 => input_taps_avx512(nz, dx, w, k, wm),
                Isa::Avx2 => input_taps_avx2(nz, dx, w, k, wm),
            }
        }
    }

    /// Runs `chunk` over `len / L` vectors, at most 6 (AVX-512: 12 of the
    /// 32 registers as accumulators) or 4 (AVX2: 8 of 16) at a time.
    macro_rules! chunks {
        ($f:ident, $v:ty, $len:expr, $nz:expr, $a:expr, $b:expr) => {{
            let most = if <$v>::L == 16 { 6 } else { 4 };
            let nv = $len / <$v>::L;
            let mut j = 0;
            while j < nv {
                let n = (nv - j).min(most);
                let (a, b) = ($a.add(j * <$v>::L), $b.add(j * <$v>::L));
                match n {
                    6 => $f::<$v, 6>($nz, a, b),
                    5 => $f::<$v, 5>($nz, a, b),
                    4 => $f::<$v, 4>($nz, a, b),
                    3 => $f::<$v, 3>($nz, a, b),
                    2 => $f::<$v, 2>($nz, a, b),
                    _ => $f::<$v, 1>($nz, a, b),
                }
                j += n;
            }
        }};
    }

    #[target_feature(enable = "avx512f")]
    unsafe fn weight_avx512(nz: &[(f32, usize)], x: *const f32, dst: &mut [f32]) {
        // SAFETY: forwarded from `weight_row`.
        unsafe { chunks!(weight_chunk, V512, dst.len(), nz, x, dst.as_mut_ptr()) }
    }

    #[target_feature(enable = "avx2,fma")]
    unsafe fn weight_avx2(nz: &[(f32, usize)], x: *const f32, dst: &mut [f32]) {
        // SAFETY: forwarded from `weight_row`.
        unsafe { chunks!(weight_chunk, V256, dst.len(), nz, x, dst.as_mut_ptr()) }
    }

    #[target_feature(enable = "avx512f")]
    unsafe fn input_avx512(nz: &[(f32, usize)], dx: *mut f32, w: &[f32]) {
        // SAFETY: forwarded from `input_row`.
        unsafe { chunks!(input_chunk, V512, w.len(), nz, dx, w.as_ptr()) }
    }

    #[target_feature(enable = "avx2,fma")]
    unsafe fn input_avx2(nz: &[(f32, usize)], dx: *mut f32, w: &[f32]) {
        // SAFETY: forwarded from `input_row`.
        unsafe { chunks!(input_chunk, V256, w.len(), nz, dx, w.as_ptr()) }
    }

    /// One kernel row of one output channel's weight gradient: `dst` (`k
    /// c_in` values) `+= sum g x[off ..]` over the listed non-zeros.
    ///
    /// # Safety
    /// The CPU has `isa`; `dst.len()` is a multiple of its lanes; every
    /// `x + off .. x + off + dst.len()` is readable.
    pub(super) unsafe fn weight_row(isa: Isa, nz: &[(f32, usize)], x: *const f32, dst: &mut [f32]) {
        // SAFETY: forwarded from the caller.
        unsafe {
            match isa {
                Isa::Avx512 => weight_avx512(nz, x, dst),
                Isa::Avx2 => weight_avx2(nz, x, dst),
            }
        }
    }

    /// One kernel row of one output channel's input gradient:
    /// `dx[off .. off + w.len()] += g w` for each listed non-zero.
    ///
    /// # Safety
    /// The CPU has `isa`; `w.len()` is a multiple of its lanes; every
    /// `dx + off .. dx + off + w.len()` is writable and disjoint from `w`.
    pub(super) unsafe fn input_row(isa: Isa, nz: &[(f32, usize)], dx: *mut f32, w: &[f32]) {
        // SAFETY: forwarded from the caller.
        unsafe {
            match isa {
                Isa::Avx512 => input_avx512(nz, dx, w),
                Isa::Avx2 => input_avx2(nz, dx, w),
            }
        }
    }
}
