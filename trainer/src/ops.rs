//! The three tensor kernels the network is made of, in one place.
//!
//! Every convolution, activation and pooling of the model goes through these
//! functions, so a later change can replace Candle's stock CPU kernels (known
//! to be several times slower than PyTorch's on two cores) without touching
//! the model, the training loop or the score map.

use candle_core::{Result, Tensor};

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
pub fn max_pool2(x: &Tensor) -> Result<Tensor> {
    x.max_pool2d(crate::arch::POOL)
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
        let x = Tensor::arange(0f32, 9., &dev).unwrap().reshape((1, 1, 3, 3)).unwrap();
        let w = Tensor::ones((1, 1, 2, 2), candle_core::DType::F32, &dev).unwrap();
        let b = Tensor::new(&[1f32], &dev).unwrap();
        let y = conv2d(&x, &w, &b).unwrap();
        assert_eq!(y.flatten_all().unwrap().to_vec1::<f32>().unwrap(), vec![9., 13., 21., 25.]);
        let p = max_pool2(&x).unwrap();
        assert_eq!(p.dims(), &[1, 1, 1, 1]);
        assert_eq!(p.flatten_all().unwrap().to_vec1::<f32>().unwrap(), vec![4.]);
    }
}
