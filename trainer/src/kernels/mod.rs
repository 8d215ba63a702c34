//! Hand-written CPU kernels for the convolution stack, plugged into Candle as
//! custom ops so autograd, the optimiser and safetensors see ordinary tensors.
//!
//! - [`conv::ConvBlock`]: unpadded stride-1 convolution plus bias, optionally
//!   fused with ReLU and 2 x 2 max pooling. Forward is im2col + GEMM (the `gemm`
//!   crate Candle itself uses) over bands of output rows, so the column buffer
//!   stays a few MiB whatever the image size; pooling keeps the position of
//!   each block's maximum. Backward scatters the output gradient to those
//!   positions, then runs one GEMM per band for the weight gradient
//!   (accumulated over the batch in fixed groups of [`conv::GROUP`] samples)
//!   and, only when the input needs a gradient, a GEMM + col2im for it.
//!   In f32 the forward of a pooled block runs instead as a direct
//!   convolution in AVX-512 or AVX2 + FMA (detected at run time) with bias,
//!   ReLU, pooling and arg-max applied in registers, so the un-pooled output
//!   is never stored: conv columns in the vector lanes for one input channel
//!   (the first layer), output channels in the lanes for several. The
//!   backward of a pooled f32 block whose input channels fill whole vectors
//!   (conv2, conv3) skips the GEMMs: `pooled_grad` adds each kept maximum's
//!   gradient straight into the weight and input gradients (at most one conv
//!   value in four has one), vectorised along the input channels.
//! - [`head`]: the dense layers as convolutions over a feature map, evaluated
//!   only at chosen cells (the score map's blank-paper skipping).
//!
//! Work is split over samples (training) or over tiles (score map) with rayon;
//! each GEMM runs on one thread. Sums are never split across threads in a way
//! that depends on scheduling, so results are identical run to run.

pub mod conv;
mod direct;
pub mod head;
mod matmul;
mod pooled_grad;

/// The floating-point types the kernels run in (f32 for use, f64 for gradient checks).
pub trait Float:
    Copy
    + Send
    + Sync
    + PartialOrd
    + std::fmt::Debug
    + std::ops::Add<Output = Self>
    + std::ops::Mul<Output = Self>
    + std::ops::AddAssign
    + candle_core::WithDType
    + 'static
{
    /// Zero.
    const ZERO: Self;
}

impl Float for f32 {
    const ZERO: Self = 0.0;
}

impl Float for f64 {
    const ZERO: Self = 0.0;
}
