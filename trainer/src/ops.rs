//! The tensor kernels the network is made of, in one place.
//!
//! Every convolution, activation and pooling of the model goes through
//! [`conv_block`], which runs either the fast custom op of
//! [`crate::kernels::conv`] ([`Kernels::Fast`], the default) or a composition
//! of Candle's stock ops ([`Kernels::Stock`]: [`conv2d`], [`relu`],
//! [`max_pool2`]), kept as the reference the fast path is tested against.
//! Both compute the same forward values up to float rounding; their gradients
//! differ only at exact ties (see [`crate::kernels::conv`]).

use crate::kernels::conv::ConvBlock;
use candle_core::{DType, Result, Tensor};

/// Which implementation of the convolution stack to run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Kernels {
    /// The custom im2col + GEMM ops of [`crate::kernels`] (CPU, f32 or f64).
    #[default]
    Fast,
    /// Candle's stock ops (the reference twin).
    Stock,
}

/// Convolution (unpadded, stride 1) plus bias, then ReLU if `relu` and 2 x 2
/// max pooling if `pool`, with the chosen kernels.
///
/// Shapes as in [`conv2d`]; pooling drops an odd last row or column. The fast
/// path falls back to the stock ops for devices or dtypes it does not handle.
pub fn conv_block(
    kernels: Kernels,
    x: &Tensor,
    weight: &Tensor,
    bias: &Tensor,
    relu: bool,
    pool: bool,
) -> Result<Tensor> {
    let fast_ok = kernels == Kernels::Fast
        && x.device().is_cpu()
        && matches!(x.dtype(), DType::F32 | DType::F64)
        && weight.dtype() == x.dtype()
        && bias.dtype() == x.dtype();
    if fast_ok {
        return x.contiguous()?.apply_op3(
            &weight.contiguous()?,
            &bias.contiguous()?,
            ConvBlock::new(relu, pool),
        );
    }
    let mut y = conv2d(x, weight, bias)?;
    if relu {
        y = self::relu(&y)?;
    }
    if pool {
        y = max_pool2(&y)?;
    }
    Ok(y)
}

/// Unpadded, stride-1 2-D convolution plus a per-channel bias.
///
/// `x` is `(batch, c_in, h, w)`, `weight` `(c_out, c_in, k, k)`, `bias` `(c_out)`;
/// the result is `(batch, c_out, h - k + 1, w - k + 1)`.
pub fn conv2d(x: &Tensor, weight: &Tensor, bias: &Tensor) -> Result<Tensor> {
    let out = x.conv2d(weight, 0, 1, 1, 1)?;
    let c_out = bias.dims1()?;
    out.broadcast_add(&bias.reshape((1, c_out, 1, 1))?)
}

/// Rectified linear unit, `max(x, 0)`.
pub fn relu(x: &Tensor) -> Result<Tensor> {
    x.relu()
}

/// 2 x 2 max pooling with stride 2; an odd last row or column is dropped.
///
/// Written as a reshape and two max reductions rather than Candle's
/// `max_pool2d`, whose backward pass in candle-core 0.11.1 multiplies the
/// gradient by the fraction of maxima in each 2 x 2 block instead of dividing
/// by their count (a quarter of the true gradient for a unique maximum, and
/// misaligned for odd sizes); the finite-difference test in
/// `tests/suite/gradients.rs` caught it. The max reduction's backward routes
/// the gradient to the maximum, as it should.
pub fn max_pool2(x: &Tensor) -> Result<Tensor> {
    let (b, c, h, w) = x.dims4()?;
    let (h2, w2) = (h / 2, w / 2);
    let x = if h % 2 != 0 || w % 2 != 0 {
        x.narrow(2, 0, 2 * h2)?.narrow(3, 0, 2 * w2)?
    } else {
        x.clone()
    };
    x.contiguous()?
        .reshape((b, c, h2, 2, w2, 2))?
        .max(5)?
        .max(3)
}

#[cfg(test)]
mod tests {
    use super::*;
    use candle_core::Device;

    #[test]
    fn conv_matches_a_hand_sum_and_pool_drops_the_odd_edge() {
        let dev = Device::Cpu;
        // 1 x 1 x 3 x 3 input 0..9, 2 x 2 kernel of ones, bias 1:
        // top-left output = 0 + 1 + 3 + 4 + 1 = 9 (hand calculation).
        let x = Tensor::arange(0f32, 9., &dev)
            .unwrap()
            .reshape((1, 1, 3, 3))
            .unwrap();
        let w = Tensor::ones((1, 1, 2, 2), candle_core::DType::F32, &dev).unwrap();
        let b = Tensor::new(&[1f32], &dev).unwrap();
        let y = conv2d(&x, &w, &b).unwrap();
        assert_eq!(
            y.flatten_all().unwrap().to_vec1::<f32>().unwrap(),
            vec![9., 13., 21., 25.]
        );
        let p = max_pool2(&x).unwrap();
        assert_eq!(p.dims(), &[1, 1, 1, 1]);
        assert_eq!(p.flatten_all().unwrap().to_vec1::<f32>().unwrap(), vec![4.]);
    }

    #[test]
    fn pooling_matches_candles_stock_forward_on_odd_sizes() {
        // Naive twin: candle-core's own max_pool2d (its forward is right; only
        // its backward is off).
        let dev = Device::Cpu;
        let mut rng = symtrust_labels::SeededRng::new(3);
        let v: Vec<f32> = (0..2 * 3 * 7 * 9).map(|_| rng.uniform() as f32).collect();
        let x = Tensor::from_vec(v, (2, 3, 7, 9), &dev).unwrap();
        let ours = max_pool2(&x).unwrap();
        let stock = x.max_pool2d(2).unwrap();
        assert_eq!(ours.dims(), stock.dims());
        assert_eq!(
            ours.flatten_all().unwrap().to_vec1::<f32>().unwrap(),
            stock.flatten_all().unwrap().to_vec1::<f32>().unwrap()
        );
    }

    #[test]
    fn pooling_gradient_goes_whole_to_the_maximum() {
        // d/dx of sum(maxpool(x)) is 1 at each block's maximum, 0 elsewhere.
        let dev = Device::Cpu;
        let x =
            candle_core::Var::from_tensor(&Tensor::new(&[[[[1f32, 5.], [2., 3.]]]], &dev).unwrap())
                .unwrap();
        let g = max_pool2(x.as_tensor())
            .unwrap()
            .sum_all()
            .unwrap()
            .backward()
            .unwrap();
        let g = g
            .get(x.as_tensor())
            .unwrap()
            .flatten_all()
            .unwrap()
            .to_vec1::<f32>()
            .unwrap();
        assert_eq!(g, vec![0., 1., 0., 0.]);
    }
}
