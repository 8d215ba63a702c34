//! The convolution block as a Candle custom op: unpadded stride-1
//! convolution plus bias, optionally followed by ReLU and 2 x 2 max pooling
//! (stride 2, an odd last row or column dropped), forward and backward.
//!
//! Layouts are Candle's: input `(batch, c_in, h, w)`, weight
//! `(c_out, c_in, k, k)` read as a `c_out x K` matrix with `K = c_in k k`,
//! output `(batch, c_out, h', w')`. With pooling only the conv rows and
//! columns that a pool block covers are computed.
//!
//! Forward, per sample and per band of output rows: im2col of the band into a
//! `K x n` column buffer, `Z = W cols` with the `gemm` crate, then bias, ReLU
//! and pooling in one pass over `Z`, keeping the index (0-3, row-major in the
//! block) of each block's first maximum.
//!
//! Backward: the output gradient goes to the kept maximum of each block (to
//! nothing where ReLU clipped it: the pooled value is not positive), giving
//! `dZ`; the bias gradient is the sum of `dZ`; per band, the weight gradient
//! accumulates `dZ cols^T` and, only when the input is tracked by autograd,
//! `dcols = W^T dZ` is added back into the input gradient (col2im). Samples
//! are processed in fixed groups of [`GROUP`], each group's partial weight
//! and bias gradients summed in group order, so the result does not depend on
//! the thread count. Pooled f32 blocks whose `c_in` fills whole vectors take
//! the same groups through `pooled_grad` instead, which works from the kept
//! maxima directly and needs neither `dZ` nor the GEMMs.
//!
//! Ties: where several positions of a pool block hold the same maximum the
//! gradient goes to the first (as in PyTorch's max pooling); where ReLU's
//! input is exactly zero its gradient is zero (also as in PyTorch). Candle's
//! reduction-based pooling instead gives every tied maximum the full
//! gradient, and its ReLU passes the gradient at zero, so the two paths'
//! gradients differ on inputs with exact ties (blank paper), and agree to
//! float rounding elsewhere (tested).

use super::Float;
use super::direct;
use super::matmul::{View, gemm};
use super::pooled_grad;
use candle_core::{CpuStorage, CustomOp3, Layout, Result, Shape, Storage, Tensor, bail};
use rayon::prelude::*;
use std::any::TypeId;
use std::sync::OnceLock;

/// Samples per group in the backward pass (fixed, so sums never depend on threads).
pub const GROUP: usize = 8;

/// Largest column buffer per band, in elements (256 KiB of f32: the band's
/// columns and its GEMM output stay in a core's L2 cache).
const BAND_ELEMENTS: usize = 1 << 16;

/// Shapes and options of one convolution block.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Geometry {
    /// Samples.
    pub batch: usize,
    /// Input channels.
    pub c_in: usize,
    /// Input height.
    pub h: usize,
    /// Input width.
    pub w: usize,
    /// Output channels.
    pub c_out: usize,
    /// Kernel side.
    pub k: usize,
    /// ReLU after the bias.
    pub relu: bool,
    /// 2 x 2 max pooling after ReLU.
    pub pool: bool,
}

impl Geometry {
    /// Rows and columns of the convolution output that are computed.
    pub fn used(&self) -> (usize, usize) {
        let (oh, ow) = (self.h + 1 - self.k, self.w + 1 - self.k);
        if self.pool {
            (oh / 2 * 2, ow / 2 * 2)
        } else {
            (oh, ow)
        }
    }

    /// Height and width of the block's output.
    pub fn out_hw(&self) -> (usize, usize) {
        let (uh, uw) = self.used();
        if self.pool {
            (uh / 2, uw / 2)
        } else {
            (uh, uw)
        }
    }

    /// Rows of the weight matrix's inner dimension, `c_in k k`.
    pub fn patch(&self) -> usize {
        self.c_in * self.k * self.k
    }

    /// Elements of one input sample.
    pub fn in_len(&self) -> usize {
        self.c_in * self.h * self.w
    }

    /// Elements of one output sample.
    pub fn out_len(&self) -> usize {
        let (oh, ow) = self.out_hw();
        self.c_out * oh * ow
    }

    /// Conv output rows per band: the column buffer stays within
    /// [`BAND_ELEMENTS`], and bands hold whole pool blocks.
    fn band_rows(&self) -> usize {
        let (uh, uw) = self.used();
        let per_row = (self.patch() * uw).max(1);
        let mut rows = (BAND_ELEMENTS / per_row).clamp(1, uh.max(1));
        if self.pool {
            rows = (rows / 2 * 2).max(2);
        }
        rows
    }

    /// Multiply-accumulates of the forward pass (the GEMMs).
    pub fn forward_macs(&self) -> u64 {
        let (uh, uw) = self.used();
        (self.batch * uh * uw * self.patch() * self.c_out) as u64
    }

    /// Checks and reads the shapes of `x`, `weight` and `bias`.
    pub fn from_dims(
        x: &[usize],
        weight: &[usize],
        bias: &[usize],
        relu: bool,
        pool: bool,
    ) -> Result<Self> {
        let (&[batch, c_in, h, w], &[c_out, wc, k, k2], &[bc]) = (x, weight, bias) else {
            bail!(
                "conv block: input {x:?}, weight {weight:?} and bias {bias:?} must be 4-D, 4-D and 1-D"
            );
        };
        if wc != c_in || k2 != k || bc != c_out || k == 0 || h < k || w < k {
            bail!("conv block: input {x:?}, weight {weight:?} and bias {bias:?} do not fit");
        }
        Ok(Self {
            batch,
            c_in,
            h,
            w,
            c_out,
            k,
            relu,
            pool,
        })
    }
}

/// Copies conv-output rows `r0..r0 + nr` of one sample's patches into `cols`
/// (`K` rows of `nr * used width` columns).
fn im2col<T: Float>(g: &Geometry, x: &[T], r0: usize, nr: usize, cols: &mut [T]) {
    let (_, uw) = g.used();
    let n = nr * uw;
    let k = g.k;
    for c in 0..g.c_in {
        for ky in 0..k {
            for kx in 0..k {
                let row = &mut cols[((c * k + ky) * k + kx) * n..][..n];
                for r in 0..nr {
                    let src = (c * g.h + r0 + r + ky) * g.w + kx;
                    row[r * uw..(r + 1) * uw].copy_from_slice(&x[src..src + uw]);
                }
            }
        }
    }
}

/// Adds a band's column gradient back into one sample's input gradient.
fn col2im<T: Float>(g: &Geometry, dcols: &[T], r0: usize, nr: usize, dx: &mut [T]) {
    let (_, uw) = g.used();
    let n = nr * uw;
    let k = g.k;
    for c in 0..g.c_in {
        for ky in 0..k {
            for kx in 0..k {
                let row = &dcols[((c * k + ky) * k + kx) * n..][..n];
                for r in 0..nr {
                    let dst = (c * g.h + r0 + r + ky) * g.w + kx;
                    for (d, s) in dx[dst..dst + uw].iter_mut().zip(&row[r * uw..(r + 1) * uw]) {
                        *d += *s;
                    }
                }
            }
        }
    }
}

/// Bands `(first row, rows)` of the computed conv output.
fn bands(g: &Geometry) -> impl Iterator<Item = (usize, usize)> {
    let (uh, _) = g.used();
    let step = g.band_rows();
    (0..uh).step_by(step).map(move |r0| (r0, step.min(uh - r0)))
}

fn grow<T: Float>(v: &mut Vec<T>, len: usize) -> &mut [T] {
    if v.len() < len {
        v.resize(len, T::ZERO);
    }
    &mut v[..len]
}

/// One sample's forward pass into `out` (and the pool indices into `idx`).
#[allow(clippy::too_many_arguments)]
fn forward_sample<T: Float>(
    g: &Geometry,
    x: &[T],
    w: &[T],
    bias: &[T],
    out: &mut [T],
    idx: &mut [u8],
    cols: &mut Vec<T>,
    z: &mut Vec<T>,
) {
    let (_, uw) = g.used();
    let (oh, ow) = g.out_hw();
    let (kk, m_out) = (g.patch(), g.c_out);
    for (r0, nr) in bands(g) {
        let n = nr * uw;
        let cols = grow(cols, kk * n);
        im2col(g, x, r0, nr, cols);
        let z = grow(z, m_out * n);
        gemm(
            z,
            n,
            View::rows(w, m_out, kk, kk),
            View::rows(cols, kk, n, n),
            false,
        );
        for m in 0..m_out {
            let b = bias[m];
            let zm = &z[m * n..(m + 1) * n];
            if !g.pool {
                let dst = &mut out[m * oh * ow + r0 * ow..][..n];
                for (d, s) in dst.iter_mut().zip(zm) {
                    let v = *s + b;
                    *d = if g.relu && v < T::ZERO { T::ZERO } else { v };
                }
                continue;
            }
            for pr in 0..nr / 2 {
                let o0 = m * oh * ow + (r0 / 2 + pr) * ow;
                let top = &zm[2 * pr * uw..][..2 * ow];
                let bottom = &zm[(2 * pr + 1) * uw..][..2 * ow];
                let rows = top.chunks_exact(2).zip(bottom.chunks_exact(2));
                let dst = out[o0..o0 + ow].iter_mut().zip(&mut idx[o0..o0 + ow]);
                for ((t, u), (o, i)) in rows.zip(dst) {
                    // First maximum in row-major block order: pairs keep their
                    // first on ties, and the bottom pair wins only when larger.
                    let (m01, i01) = if t[1] > t[0] { (t[1], 1) } else { (t[0], 0) };
                    let (m23, i23) = if u[1] > u[0] { (u[1], 3) } else { (u[0], 2) };
                    let (best, at) = if m23 > m01 { (m23, i23) } else { (m01, i01) };
                    let v = best + b;
                    *o = if g.relu && v < T::ZERO { T::ZERO } else { v };
                    *i = at;
                }
            }
        }
    }
}

/// Sum of a slice in eight interleaved partial sums (vectorisable, and the
/// same order every time).
fn sum<T: Float>(v: &[T]) -> T {
    let mut acc = [T::ZERO; 8];
    let chunks = v.chunks_exact(8);
    let tail = chunks.remainder();
    for c in chunks {
        for (a, x) in acc.iter_mut().zip(c) {
            *a += *x;
        }
    }
    let mut total = T::ZERO;
    for a in acc {
        total += a;
    }
    for x in tail {
        total += *x;
    }
    total
}

/// The forward pass on the direct kernels, when `T` is f32 and
/// [`direct::plan`] takes the block: output and pool indices, allocated
/// without being zeroed first (the kernels write every element, and a
/// single-threaded zeroing pass would cost a sixth of the first layer's time).
fn forward_direct<T: Float>(
    g: &Geometry,
    x: &[T],
    w: &[T],
    bias: &[T],
) -> Option<(Vec<T>, Vec<u8>)> {
    if TypeId::of::<T>() != TypeId::of::<f32>() {
        return None;
    }
    let plan = direct::plan(g)?;
    let (x, bias) = (as_f32(x), as_f32(bias));
    let w = direct::prepare_weights(plan, g, as_f32(w));
    let (per_in, per_out) = (g.in_len(), g.out_len());
    let n = g.batch * per_out;
    let mut out: Vec<f32> = Vec::with_capacity(n);
    let mut idx: Vec<u8> = Vec::with_capacity(n);
    out.spare_capacity_mut()[..n]
        .par_chunks_mut(per_out)
        .zip(idx.spare_capacity_mut()[..n].par_chunks_mut(per_out))
        .enumerate()
        .for_each_init(Vec::new, |scratch, (s, (o, i))| {
            let xs = &x[s * per_in..][..per_in];
            direct::forward_sample(plan, g, xs, &w, bias, o, i, scratch)
        });
    // SAFETY: `forward_sample` wrote every element of each sample's chunk,
    // and the chunks cover the first n elements (a panic would have left the
    // lengths at zero).
    unsafe {
        out.set_len(n);
        idx.set_len(n);
    }
    Some((from_f32(out), idx))
}

/// The forward pass over the batch: output and pool indices (empty without pooling).
///
/// Pooled blocks run, in f32 on CPUs with AVX2 + FMA or AVX-512F, on a
/// direct convolution that applies bias, ReLU, pooling and the arg-max in
/// registers: with one input channel (the first layer, whose 25-long inner
/// dimension is too short for a GEMM to pay) when a pooled row fills a
/// vector, with several when `c_out` is a multiple of 16 (AVX2) or 32
/// (AVX-512). All other blocks, and f64, run on im2col + GEMM.
pub fn forward<T: Float>(g: &Geometry, x: &[T], w: &[T], bias: &[T]) -> (Vec<T>, Vec<u8>) {
    let (per_in, per_out) = (g.in_len(), g.out_len());
    if per_out > 0
        && let Some(done) = forward_direct(g, x, w, bias)
    {
        return done;
    }
    let mut out = vec![T::ZERO; g.batch * per_out];
    let mut idx = vec![0u8; if g.pool { g.batch * per_out } else { 0 }];
    if per_out == 0 {
        return (out, idx);
    }
    let init = || (Vec::new(), Vec::new());
    if g.pool {
        out.par_chunks_mut(per_out)
            .zip(idx.par_chunks_mut(per_out))
            .enumerate()
            .for_each_init(init, |(cols, z), (s, (o, i))| {
                forward_sample(g, &x[s * per_in..][..per_in], w, bias, o, i, cols, z)
            });
    } else {
        out.par_chunks_mut(per_out)
            .enumerate()
            .for_each_init(init, |(cols, z), (s, o)| {
                forward_sample(g, &x[s * per_in..][..per_in], w, bias, o, &mut [], cols, z)
            });
    }
    (out, idx)
}

/// Gradients of one group of samples: `(dw, db)` partials, and the input
/// gradient written into `dx` when given.
#[allow(clippy::too_many_arguments)]
fn backward_group<T: Float>(
    g: &Geometry,
    first: usize,
    count: usize,
    x: &[T],
    w: &[T],
    out: &[T],
    idx: &[u8],
    grad: &[T],
    mut dx: Option<&mut [T]>,
) -> (Vec<T>, Vec<T>) {
    let (uh, uw) = g.used();
    let (oh, ow) = g.out_hw();
    let (kk, m_out, p) = (g.patch(), g.c_out, uh * uw);
    let (per_in, per_out) = (g.in_len(), g.out_len());
    let mut dw = vec![T::ZERO; m_out * kk];
    let mut db = vec![T::ZERO; m_out];
    let mut dz = vec![T::ZERO; m_out * p];
    let (mut cols, mut dcols) = (Vec::new(), Vec::new());
    for s in first..first + count {
        let o = &out[s * per_out..][..per_out];
        let gr = &grad[s * per_out..][..per_out];
        if g.pool {
            dz.fill(T::ZERO);
            let ix = &idx[s * per_out..][..per_out];
            for m in 0..m_out {
                for pr in 0..oh {
                    let i0 = (m * oh + pr) * ow;
                    let top = m * p + 2 * pr * uw;
                    let cells = o[i0..i0 + ow]
                        .iter()
                        .zip(&gr[i0..i0 + ow])
                        .zip(&ix[i0..i0 + ow]);
                    for (pc, ((ov, gv), at)) in cells.enumerate() {
                        if !g.relu || *ov > T::ZERO {
                            let at = usize::from(*at);
                            dz[top + (at / 2) * uw + 2 * pc + at % 2] = *gv;
                        }
                    }
                }
            }
        } else {
            for ((d, ov), gv) in dz.iter_mut().zip(o).zip(gr) {
                *d = if !g.relu || *ov > T::ZERO {
                    *gv
                } else {
                    T::ZERO
                };
            }
        }
        for m in 0..m_out {
            db[m] += sum(&dz[m * p..(m + 1) * p]);
        }
        let xs = &x[s * per_in..][..per_in];
        for (r0, nr) in bands(g) {
            let n = nr * uw;
            let cols = grow(&mut cols, kk * n);
            im2col(g, xs, r0, nr, cols);
            let dz_band = View {
                data: &dz[r0 * uw..],
                rows: m_out,
                cols: n,
                rs: p,
                cs: 1,
            };
            gemm(&mut dw, kk, dz_band, View::rows(cols, kk, n, n).t(), true);
            if let Some(dx) = dx.as_deref_mut() {
                let dcols = grow(&mut dcols, kk * n);
                gemm(dcols, n, View::rows(w, m_out, kk, kk).t(), dz_band, false);
                col2im(g, dcols, r0, nr, &mut dx[(s - first) * per_in..][..per_in]);
            }
        }
    }
    (dw, db)
}

/// `s` as f32 values.
///
/// # Panics
/// When `T` is not f32.
fn as_f32<T: Float>(s: &[T]) -> &[f32] {
    assert_eq!(TypeId::of::<T>(), TypeId::of::<f32>());
    // SAFETY: T is f32 (same TypeId), so the slice is reinterpreted as itself.
    unsafe { std::slice::from_raw_parts(s.as_ptr().cast::<f32>(), s.len()) }
}

/// `s` as mutable f32 values.
///
/// # Panics
/// When `T` is not f32.
fn as_f32_mut<T: Float>(s: &mut [T]) -> &mut [f32] {
    assert_eq!(TypeId::of::<T>(), TypeId::of::<f32>());
    // SAFETY: as in `as_f32`; the mutable borrow moves into the result.
    unsafe { std::slice::from_raw_parts_mut(s.as_mut_ptr().cast::<f32>(), s.len()) }
}

/// An f32 vector as a `Vec<T>`.
///
/// # Panics
/// When `T` is not f32.
fn from_f32<T: Float>(v: Vec<f32>) -> Vec<T> {
    assert_eq!(TypeId::of::<T>(), TypeId::of::<f32>());
    let mut v = std::mem::ManuallyDrop::new(v);
    // SAFETY: T is f32, so the allocation, length and capacity are those of a Vec<T>.
    unsafe { Vec::from_raw_parts(v.as_mut_ptr().cast::<T>(), v.len(), v.capacity()) }
}

/// The backward pass over the batch: `(dx if wanted, dw, db)`.
///
/// Pooled f32 blocks whose `c_in` is a multiple of the vector width run on
/// the arg-max-driven kernels of `pooled_grad` (AVX-512F or AVX2 + FMA);
/// the others on the pool scatter + GEMM path.
pub fn backward<T: Float>(
    g: &Geometry,
    x: &[T],
    w: &[T],
    out: &[T],
    idx: &[u8],
    grad: &[T],
    want_dx: bool,
) -> (Option<Vec<T>>, Vec<T>, Vec<T>) {
    let groups = g.batch.div_ceil(GROUP);
    let per_in = g.in_len();
    let count = |gi: usize| GROUP.min(g.batch - gi * GROUP);
    let mut dx = want_dx.then(|| vec![T::ZERO; g.batch * per_in]);
    let sparse = if TypeId::of::<T>() == TypeId::of::<f32>() {
        pooled_grad::plan(g)
    } else {
        None
    };
    let group = |gi: usize, d: Option<&mut [T]>| match sparse {
        Some(isa) => {
            let (dw, db) = pooled_grad::backward_group(
                isa,
                g,
                (gi * GROUP, count(gi)),
                as_f32(x),
                as_f32(w),
                as_f32(out),
                idx,
                as_f32(grad),
                d.map(as_f32_mut),
            );
            (from_f32(dw), from_f32(db))
        }
        None => backward_group(g, gi * GROUP, count(gi), x, w, out, idx, grad, d),
    };
    let partials: Vec<(Vec<T>, Vec<T>)> = match dx.as_deref_mut() {
        Some(dx) if per_in > 0 => dx
            .par_chunks_mut(GROUP * per_in)
            .enumerate()
            .map(|(gi, d)| group(gi, Some(d)))
            .collect(),
        _ => (0..groups)
            .into_par_iter()
            .map(|gi| group(gi, None))
            .collect(),
    };
    let mut dw = vec![T::ZERO; g.c_out * g.patch()];
    let mut db = vec![T::ZERO; g.c_out];
    for (pw, pb) in partials {
        dw.iter_mut().zip(pw).for_each(|(a, b)| *a += b);
        db.iter_mut().zip(pb).for_each(|(a, b)| *a += b);
    }
    (dx, dw, db)
}

/// The custom op: `conv(x, weight) + bias`, then ReLU and pooling as asked.
#[derive(Debug)]
pub struct ConvBlock {
    relu: bool,
    pool: bool,
    argmax: OnceLock<Vec<u8>>,
}

impl ConvBlock {
    /// A block with or without ReLU and 2 x 2 max pooling.
    pub fn new(relu: bool, pool: bool) -> Self {
        Self {
            relu,
            pool,
            argmax: OnceLock::new(),
        }
    }
}

fn slice<'a, T: Float>(storage: &'a CpuStorage, layout: &Layout) -> Result<&'a [T]> {
    let Some((a, b)) = layout.contiguous_offsets() else {
        bail!("conv block: operands must be contiguous");
    };
    Ok(&storage.as_slice::<T>()?[a..b])
}

fn tensor_slice<'a, T: Float>(storage: &'a Storage, layout: &Layout) -> Result<&'a [T]> {
    match storage {
        Storage::Cpu(s) => slice(s, layout),
        _ => bail!("conv block: CPU tensors only"),
    }
}

impl ConvBlock {
    fn fwd_typed<T: Float>(&self, g: &Geometry, x: &[T], w: &[T], b: &[T]) -> Vec<T> {
        let (out, idx) = forward(g, x, w, b);
        // A fresh op per call: the cell is empty, so this never fails.
        let _ = self.argmax.set(idx);
        out
    }

    fn bwd_typed<T: Float>(
        &self,
        g: &Geometry,
        x: &Tensor,
        w: &Tensor,
        res: &Tensor,
        grad: &Tensor,
    ) -> Result<(Option<Tensor>, Option<Tensor>, Option<Tensor>)> {
        let want_dx = x.track_op();
        let grad = grad.contiguous()?;
        let (sx, lx) = x.storage_and_layout();
        let (sw, lw) = w.storage_and_layout();
        let (so, lo) = res.storage_and_layout();
        let (sg, lg) = grad.storage_and_layout();
        let idx: &[u8] = if g.pool {
            match self.argmax.get() {
                Some(v) => v,
                None => bail!("conv block: backward before forward"),
            }
        } else {
            &[]
        };
        let (dx, dw, db) = backward(
            g,
            tensor_slice::<T>(&sx, lx)?,
            tensor_slice::<T>(&sw, lw)?,
            tensor_slice::<T>(&so, lo)?,
            idx,
            tensor_slice::<T>(&sg, lg)?,
            want_dx,
        );
        let dev = x.device();
        let dx = match dx {
            Some(v) => Some(Tensor::from_vec(v, x.dims(), dev)?),
            None => None,
        };
        Ok((
            dx,
            Some(Tensor::from_vec(dw, w.dims(), dev)?),
            Some(Tensor::from_vec(db, g.c_out, dev)?),
        ))
    }
}

impl CustomOp3 for ConvBlock {
    fn name(&self) -> &'static str {
        "symtrust-conv-block"
    }

    fn cpu_fwd(
        &self,
        s1: &CpuStorage,
        l1: &Layout,
        s2: &CpuStorage,
        l2: &Layout,
        s3: &CpuStorage,
        l3: &Layout,
    ) -> Result<(CpuStorage, Shape)> {
        let g = Geometry::from_dims(l1.dims(), l2.dims(), l3.dims(), self.relu, self.pool)?;
        let (oh, ow) = g.out_hw();
        let shape = Shape::from((g.batch, g.c_out, oh, ow));
        let out = match (s1, s2, s3) {
            (CpuStorage::F32(_), CpuStorage::F32(_), CpuStorage::F32(_)) => CpuStorage::F32(
                self.fwd_typed::<f32>(&g, slice(s1, l1)?, slice(s2, l2)?, slice(s3, l3)?),
            ),
            (CpuStorage::F64(_), CpuStorage::F64(_), CpuStorage::F64(_)) => CpuStorage::F64(
                self.fwd_typed::<f64>(&g, slice(s1, l1)?, slice(s2, l2)?, slice(s3, l3)?),
            ),
            _ => bail!("conv block: input, weight and bias must all be f32 or all f64"),
        };
        Ok((out, shape))
    }

    fn bwd(
        &self,
        x: &Tensor,
        w: &Tensor,
        b: &Tensor,
        res: &Tensor,
        grad: &Tensor,
    ) -> Result<(Option<Tensor>, Option<Tensor>, Option<Tensor>)> {
        let g = Geometry::from_dims(x.dims(), w.dims(), b.dims(), self.relu, self.pool)?;
        match x.dtype() {
            candle_core::DType::F32 => self.bwd_typed::<f32>(&g, x, w, res, grad),
            candle_core::DType::F64 => self.bwd_typed::<f64>(&g, x, w, res, grad),
            d => bail!("conv block: no backward for {d:?}"),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use candle_core::Device;
    use proptest::prelude::*;
    use symtrust_labels::SeededRng;

    /// The im2col + GEMM path for every sample (the direct kernel's twin).
    fn forward_gemm(g: &Geometry, x: &[f32], w: &[f32], b: &[f32]) -> (Vec<f32>, Vec<u8>) {
        let (per_in, per_out) = (g.in_len(), g.out_len());
        let mut out = vec![0f32; g.batch * per_out];
        let mut idx = vec![0u8; g.batch * per_out];
        let (mut cols, mut z) = (Vec::new(), Vec::new());
        for s in 0..g.batch {
            forward_sample(
                g,
                &x[s * per_in..][..per_in],
                w,
                b,
                &mut out[s * per_out..][..per_out],
                &mut idx[s * per_out..][..per_out],
                &mut cols,
                &mut z,
            );
        }
        (out, idx)
    }

    /// The direct kernel `plan` for every sample, into buffers filled with
    /// NaN and 255 beforehand, so an element the kernel failed to write shows.
    fn forward_direct(
        plan: direct::Plan,
        g: &Geometry,
        x: &[f32],
        w: &[f32],
        b: &[f32],
    ) -> (Vec<f32>, Vec<u8>) {
        use std::mem::MaybeUninit;
        let (per_in, per_out) = (g.in_len(), g.out_len());
        let w = &direct::prepare_weights(plan, g, w);
        let mut out = vec![MaybeUninit::new(f32::NAN); g.batch * per_out];
        let mut idx = vec![MaybeUninit::new(255u8); g.batch * per_out];
        let mut scratch = Vec::new();
        for s in 0..g.batch {
            direct::forward_sample(
                plan,
                g,
                &x[s * per_in..][..per_in],
                w,
                b,
                &mut out[s * per_out..][..per_out],
                &mut idx[s * per_out..][..per_out],
                &mut scratch,
            );
        }
        // SAFETY: every element was initialised by the fill above.
        unsafe {
            (
                out.iter().map(|v| v.assume_init()).collect(),
                idx.iter().map(|v| v.assume_init()).collect(),
            )
        }
    }

    /// Candle's stock conv2d + bias, ReLU and max_pool2d (the reference library).
    fn forward_candle(g: &Geometry, x: &[f32], w: &[f32], b: &[f32]) -> Vec<f32> {
        let dev = Device::Cpu;
        let xt = Tensor::from_slice(x, (g.batch, g.c_in, g.h, g.w), &dev).unwrap();
        let wt = Tensor::from_slice(w, (g.c_out, g.c_in, g.k, g.k), &dev).unwrap();
        let bt = Tensor::from_slice(b, (1, g.c_out, 1, 1), &dev).unwrap();
        let mut y = xt
            .conv2d(&wt, 0, 1, 1, 1)
            .unwrap()
            .broadcast_add(&bt)
            .unwrap();
        if g.relu {
            y = y.relu().unwrap();
        }
        y.max_pool2d(2)
            .unwrap()
            .flatten_all()
            .unwrap()
            .to_vec1()
            .unwrap()
    }

    fn max_rel(a: &[f32], b: &[f32]) -> f32 {
        assert_eq!(a.len(), b.len());
        let scale = b.iter().fold(1e-12f32, |m, v| m.max(v.abs()));
        // A NaN (an element a kernel never wrote) counts as an infinite error.
        a.iter()
            .zip(b)
            .map(|(p, q)| (p - q).abs())
            .fold(
                0f32,
                |m, d| if d.is_nan() { f32::INFINITY } else { m.max(d) },
            )
            / scale
    }

    /// Every instruction set the direct kernel has on this CPU, best first.
    fn isas() -> Vec<direct::Isa> {
        let mut v: Vec<direct::Isa> = direct::Isa::detect().into_iter().collect();
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2")
            && std::arch::is_x86_feature_detected!("fma")
            && !v.contains(&direct::Isa::Avx2)
        {
            v.push(direct::Isa::Avx2);
        }
        v
    }

    proptest! {
        #![proptest_config(ProptestConfig { cases: 48, ..ProptestConfig::default() })]

        #[test]
        fn direct_first_layer_kernel_matches_gemm_path_and_candle(
            seed in 0u64..10_000,
            batch in 1usize..4,
            c_out in 1usize..10,
            k in 1usize..8,
            extra_h in 0usize..9,
            extra_w in 16usize..60,
            relu in any::<bool>(),
        ) {
            // Pooled widths from 8 to 37 (odd conv widths included): below,
            // at and above one or two vectors of either instruction set.
            let (h, w) = (k + 1 + extra_h, k - 1 + extra_w);
            let g = Geometry { batch, c_in: 1, h, w, c_out, k, relu, pool: true };
            let mut rng = SeededRng::new(seed);
            let mut rand = |n: usize| -> Vec<f32> {
                (0..n).map(|_| rng.range_f64(-1.0, 1.0) as f32).collect()
            };
            let (x, wt, b) = (rand(batch * h * w), rand(c_out * k * k), rand(c_out));
            let (gemm_out, gemm_idx) = forward_gemm(&g, &x, &wt, &b);
            let candle = forward_candle(&g, &x, &wt, &b);
            prop_assert!(max_rel(&gemm_out, &candle) <= 1e-5);
            let mut first: Option<(Vec<f32>, Vec<u8>)> = None;
            for isa in isas() {
                if direct::plan(&g).is_none() && isa == direct::Isa::detect().unwrap() {
                    continue;
                }
                let (_, ow) = g.out_hw();
                if ow < isa_lanes(isa) {
                    continue;
                }
                let (out, idx) = forward_direct(direct::Plan::Rows(isa), &g, &x, &wt, &b);
                let e = max_rel(&out, &gemm_out);
                prop_assert!(e <= 1e-5, "{isa:?}: against the GEMM path, relative error {e}");
                let e = max_rel(&out, &candle);
                prop_assert!(e <= 1e-5, "{isa:?}: against Candle, relative error {e}");
                prop_assert_eq!(&idx, &gemm_idx, "{:?}: pool positions", isa);
                match &first {
                    // Same products in the same order with FMA: bit-identical.
                    Some((o, i)) => prop_assert!(o == &out && i == &idx, "{:?} differs", isa),
                    None => first = Some((out, idx)),
                }
            }
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig { cases: 32, ..ProptestConfig::default() })]

        #[test]
        fn direct_channel_kernel_matches_gemm_path_and_candle(
            seed in 0u64..10_000,
            batch in 1usize..3,
            c_in in 2usize..5,
            blocks in 1usize..5,
            k in 1usize..6,
            extra_h in 0usize..12,
            extra_w in 0usize..12,
            relu in any::<bool>(),
        ) {
            // c_out 16 to 64 (whole AVX2 blocks; AVX-512 takes the multiples
            // of 32); odd sizes, pooled rows of 1 to 7 blocks.
            let (c_out, h, w) = (16 * blocks, k + 1 + extra_h, k + 1 + extra_w);
            let g = Geometry { batch, c_in, h, w, c_out, k, relu, pool: true };
            let mut rng = SeededRng::new(seed);
            let mut rand = |n: usize| -> Vec<f32> {
                (0..n).map(|_| rng.range_f64(-1.0, 1.0) as f32).collect()
            };
            let (x, wt, b) = (rand(batch * g.in_len()), rand(c_out * g.patch()), rand(c_out));
            let (gemm_out, gemm_idx) = forward_gemm(&g, &x, &wt, &b);
            let candle = forward_candle(&g, &x, &wt, &b);
            prop_assert!(max_rel(&gemm_out, &candle) <= 1e-5);
            for isa in isas() {
                if c_out % (2 * isa_lanes(isa)) != 0 {
                    continue;
                }
                let (out, idx) = forward_direct(direct::Plan::Channels(isa), &g, &x, &wt, &b);
                let e = max_rel(&out, &gemm_out);
                prop_assert!(e <= 1e-5, "{isa:?}: against the GEMM path, relative error {e}");
                let e = max_rel(&out, &candle);
                prop_assert!(e <= 1e-5, "{isa:?}: against Candle, relative error {e}");
                prop_assert_eq!(&idx, &gemm_idx, "{:?}: pool positions", isa);
            }
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig { cases: 32, ..ProptestConfig::default() })]

        #[test]
        fn pooled_gradient_kernels_match_the_gemm_path(
            seed in 0u64..10_000,
            batch in 1usize..4,
            c_in in prop::sample::select(vec![1usize, 8, 16, 32]),
            c_out in 1usize..6,
            k in 1usize..8,
            extra_h in 0usize..9,
            extra_w in 0usize..9,
            relu in any::<bool>(),
            want_dx in any::<bool>(),
            blank in any::<bool>(),
        ) {
            // c_in 8, 16 and 32: whole AVX2 vectors, and whole AVX-512
            // vectors for 16 and 32; c_in 1 (kernel taps in the lanes);
            // odd sizes, k up to 7 (the default network's conv1, conv2 and
            // conv3 have 1, 16 and 32 input channels).
            let (h, w) = (k + 1 + extra_h, k + 1 + extra_w);
            let g = Geometry { batch, c_in, h, w, c_out, k, relu, pool: true };
            let mut rng = SeededRng::new(seed);
            let mut rand = |n: usize| -> Vec<f32> {
                (0..n).map(|_| rng.range_f64(-1.0, 1.0) as f32).collect()
            };
            let (mut x, wt, b) = (rand(batch * g.in_len()), rand(c_out * g.patch()), rand(c_out));
            if blank {
                // Mostly exact zeros (paper): tied maxima and ReLU zeros,
                // where both paths follow the same stored arg-max.
                x.iter_mut().for_each(|v| *v = if *v > 0.4 { 1.0 } else { 0.0 });
            }
            let (out, idx) = forward_gemm(&g, &x, &wt, &b);
            let grad = rand(out.len());
            let mut dx_ref = want_dx.then(|| vec![0f32; x.len()]);
            let (dw_ref, db_ref) =
                backward_group(&g, 0, batch, &x, &wt, &out, &idx, &grad, dx_ref.as_deref_mut());
            let mut tried = 0;
            for isa in isas() {
                if !pooled_grad::fits(isa, &g) {
                    continue;
                }
                tried += 1;
                let mut dx = want_dx.then(|| vec![f32::NAN; x.len()]);
                let (dw, db) = pooled_grad::backward_group(
                    isa, &g, (0, batch), &x, &wt, &out, &idx, &grad, dx.as_deref_mut(),
                );
                let e = max_rel(&dw, &dw_ref);
                prop_assert!(e <= 1e-5, "{isa:?}: weight gradient, relative error {e}");
                let e = max_rel(&db, &db_ref);
                prop_assert!(e <= 1e-5, "{isa:?}: bias gradient, relative error {e}");
                if let (Some(d), Some(r)) = (&dx, &dx_ref) {
                    let e = max_rel(d, r);
                    prop_assert!(e <= 1e-5, "{isa:?}: input gradient, relative error {e}");
                }
            }
            // The public entry point dispatches to the pooled kernels here.
            let (dx, dw, db) = backward(&g, &x, &wt, &out, &idx, &grad, want_dx);
            prop_assert_eq!(pooled_grad::plan(&g).is_some(), tried > 0);
            prop_assert!(max_rel(&dw, &dw_ref) <= 1e-5 && max_rel(&db, &db_ref) <= 1e-5);
            prop_assert_eq!(dx.is_some(), want_dx);
            if let (Some(d), Some(r)) = (&dx, &dx_ref) {
                prop_assert!(max_rel(d, r) <= 1e-5);
            }
        }
    }

    fn isa_lanes(isa: direct::Isa) -> usize {
        match isa {
            #[cfg(target_arch = "x86_64")]
            direct::Isa::Avx512 => 16,
            #[cfg(target_arch = "x86_64")]
            direct::Isa::Avx2 => 8,
        }
    }

    #[test]
    fn batch_forward_takes_the_direct_path_for_the_first_layer() {
        // The public entry point on the default first layer (1 x 100 x 100,
        // k 5, 16 channels) against the GEMM path, on a few samples.
        let g = Geometry {
            batch: 3,
            c_in: 1,
            h: 100,
            w: 100,
            c_out: 16,
            k: 5,
            relu: true,
            pool: true,
        };
        let mut rng = SeededRng::new(4);
        let mut rand =
            |n: usize| -> Vec<f32> { (0..n).map(|_| rng.uniform() as f32 - 0.5).collect() };
        let (x, w, b) = (rand(g.batch * g.in_len()), rand(16 * 25), rand(16));
        let (out, idx) = forward(&g, &x, &w, &b);
        let (gemm_out, gemm_idx) = forward_gemm(&g, &x, &w, &b);
        assert!(max_rel(&out, &gemm_out) <= 1e-5);
        assert_eq!(idx, gemm_idx);
        assert_eq!(
            direct::plan(&g),
            direct::Isa::detect().map(direct::Plan::Rows),
            "the default first layer is one the direct kernel takes wherever it can run"
        );
    }
}
