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
//! the thread count.
//!
//! Ties: where several positions of a pool block hold the same maximum the
//! gradient goes to the first (as in PyTorch's max pooling); where ReLU's
//! input is exactly zero its gradient is zero (also as in PyTorch). Candle's
//! reduction-based pooling instead gives every tied maximum the full
//! gradient, and its ReLU passes the gradient at zero, so the two paths'
//! gradients differ on inputs with exact ties (blank paper), and agree to
//! float rounding elsewhere (tested).

use super::Float;
use super::matmul::{View, gemm};
use candle_core::{CpuStorage, CustomOp3, Layout, Result, Shape, Storage, Tensor, bail};
use rayon::prelude::*;
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

/// The forward pass over the batch: output and pool indices (empty without pooling).
pub fn forward<T: Float>(g: &Geometry, x: &[T], w: &[T], bias: &[T]) -> (Vec<T>, Vec<u8>) {
    let (per_in, per_out) = (g.in_len(), g.out_len());
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

/// The backward pass over the batch: `(dx if wanted, dw, db)`.
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
    let partials: Vec<(Vec<T>, Vec<T>)> = match dx.as_deref_mut() {
        Some(dx) if per_in > 0 => dx
            .par_chunks_mut(GROUP * per_in)
            .enumerate()
            .map(|(gi, d)| backward_group(g, gi * GROUP, count(gi), x, w, out, idx, grad, Some(d)))
            .collect(),
        _ => (0..groups)
            .into_par_iter()
            .map(|gi| backward_group(g, gi * GROUP, count(gi), x, w, out, idx, grad, None))
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
