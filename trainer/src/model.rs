//! The network's weights and its two forward passes.
//!
//! [`Network::forward`] classifies a batch of windows (flatten, then dense
//! layers as matrix products): the path used by training and by
//! [`crate::infer`]. [`Network::forward_dense_as_conv`] applies the same dense
//! layers as convolutions over a feature map of any size: the path of the
//! score map. The two share [`Network::features`], the convolution stack.
//!
//! Weights are initialised from [`SeededRng`] (Candle's own generator is not
//! portable): He-uniform, bound `sqrt(6 / fan_in)`, for layers followed by a
//! ReLU, `sqrt(1 / fan_in)` for the output layer, biases zero (common practice).

use crate::arch::Architecture;
use crate::error::{Result, TensorContext, TrainerError};
use crate::ops::{self, Kernels};
use candle_core::{DType, Device, Tensor, Var};
use std::collections::HashMap;
use symtrust_labels::SeededRng;

/// The weights of one classifier, in [`Architecture::parameter_shapes`] order.
#[derive(Debug, Clone)]
pub struct Network {
    /// The architecture that fixes the shapes.
    pub arch: Architecture,
    /// One trainable variable per weight tensor.
    pub params: Vec<Var>,
}

impl Network {
    /// Fresh weights for `arch` from `seed`, in `dtype` (F32 for use, F64 for gradient checks).
    pub fn init(arch: &Architecture, seed: u64, dtype: DType) -> Result<Self> {
        arch.validate()?;
        let mut rng = SeededRng::derive(seed, "weights");
        let shapes = arch.parameter_shapes();
        let last_weight = shapes.len() - 2;
        let mut params = Vec::with_capacity(shapes.len());
        for (i, (name, shape)) in shapes.iter().enumerate() {
            let n: usize = shape.iter().product();
            let values: Vec<f64> = if name.ends_with(".bias") {
                vec![0.0; n]
            } else {
                let fan_in: usize = shape[1..].iter().product();
                let gain = if i == last_weight { 1.0 } else { 6.0 };
                let bound = (gain / fan_in as f64).sqrt();
                (0..n).map(|_| rng.range_f64(-bound, bound)).collect()
            };
            let t = Tensor::from_vec(values, shape.as_slice(), &Device::Cpu)
                .and_then(|t| t.to_dtype(dtype))
                .during("initialising weights")?;
            params.push(Var::from_tensor(&t).during("initialising weights")?);
        }
        Ok(Self {
            arch: arch.clone(),
            params,
        })
    }

    /// Builds a network from named tensors, checking every name and shape.
    /// `source` names the file in error messages.
    pub fn from_tensors(
        arch: &Architecture,
        tensors: &HashMap<String, Tensor>,
        source: &std::path::Path,
    ) -> Result<Self> {
        arch.validate()?;
        let mut params = Vec::new();
        for (name, shape) in arch.parameter_shapes() {
            let t = tensors
                .get(&name)
                .ok_or_else(|| TrainerError::ModelFolder {
                    path: source.to_path_buf(),
                    message: format!("tensor {name:?} is missing"),
                })?;
            if t.dims() != shape.as_slice() {
                return Err(TrainerError::ModelFolder {
                    path: source.to_path_buf(),
                    message: format!(
                        "tensor {name:?} has shape {:?}, the architecture needs {shape:?}",
                        t.dims()
                    ),
                });
            }
            let t = t.to_dtype(DType::F32).during("loading weights")?;
            params.push(Var::from_tensor(&t).during("loading weights")?);
        }
        if tensors.len() != params.len() {
            return Err(TrainerError::ModelFolder {
                path: source.to_path_buf(),
                message: format!(
                    "{} tensors found, the architecture has {}",
                    tensors.len(),
                    params.len()
                ),
            });
        }
        Ok(Self {
            arch: arch.clone(),
            params,
        })
    }

    /// The weights as named tensors (copies: later training does not change them).
    pub fn named_tensors(&self) -> Result<Vec<(String, Tensor)>> {
        Ok(self
            .arch
            .parameter_shapes()
            .into_iter()
            .zip(self.snapshot()?)
            .map(|((name, _), t)| (name, t))
            .collect())
    }

    /// Copies of the current weights in parameter order. A plain `detach` would
    /// share storage with the variables, which `Var::set` overwrites in place.
    pub fn snapshot(&self) -> Result<Vec<Tensor>> {
        self.params
            .iter()
            .map(|v| v.as_tensor().copy().map(|t| t.detach()))
            .collect::<candle_core::Result<_>>()
            .during("copying weights")
    }

    /// Replaces every weight with the values of `tensors` (same order and shapes).
    pub fn set_values(&self, tensors: &[Tensor]) -> Result<()> {
        for (v, t) in self.params.iter().zip(tensors) {
            v.set(t).during("restoring weights")?;
        }
        Ok(())
    }

    fn conv(&self, i: usize) -> (&Tensor, &Tensor) {
        (
            self.params[2 * i].as_tensor(),
            self.params[2 * i + 1].as_tensor(),
        )
    }

    fn dense(&self) -> [&Tensor; 4] {
        let n = 2 * self.arch.layers();
        [
            self.params[n].as_tensor(),
            self.params[n + 1].as_tensor(),
            self.params[n + 2].as_tensor(),
            self.params[n + 3].as_tensor(),
        ]
    }

    /// The convolution stack: `(batch, 1, h, w)` to `(batch, C, h', w')`, fast kernels.
    pub fn features(&self, x: &Tensor) -> candle_core::Result<Tensor> {
        self.features_with(Kernels::Fast, x)
    }

    /// [`Network::features`] with the chosen kernels.
    pub fn features_with(&self, kernels: Kernels, x: &Tensor) -> candle_core::Result<Tensor> {
        let mut x = x.clone();
        for i in 0..self.arch.layers() {
            let (w, b) = self.conv(i);
            x = ops::conv_block(kernels, &x, w, b, true, true)?;
        }
        Ok(x)
    }

    /// Logits `(batch, classes)` for windows `(batch, 1, S, S)`; `dropout_mask`
    /// (`(batch, hidden)`, already scaled by `1 / keep`) is applied in training.
    pub fn forward(
        &self,
        x: &Tensor,
        dropout_mask: Option<&Tensor>,
    ) -> candle_core::Result<Tensor> {
        self.forward_with(Kernels::Fast, x, dropout_mask)
    }

    /// [`Network::forward`] with the chosen kernels.
    pub fn forward_with(
        &self,
        kernels: Kernels,
        x: &Tensor,
        dropout_mask: Option<&Tensor>,
    ) -> candle_core::Result<Tensor> {
        let [hw, hb, ow, ob] = self.dense();
        let f = self.features_with(kernels, x)?.flatten_from(1)?;
        let mut h = f.matmul(&hw.t()?)?.broadcast_add(hb)?.relu()?;
        if let Some(mask) = dropout_mask {
            h = (h * mask)?;
        }
        h.matmul(&ow.t()?)?.broadcast_add(ob)
    }

    /// Logits `(batch, classes, rows, cols)` at every window position of an
    /// input of any size at least one window: the dense layers as convolutions.
    pub fn forward_dense_as_conv(&self, x: &Tensor) -> candle_core::Result<Tensor> {
        self.forward_dense_as_conv_with(Kernels::Fast, x)
    }

    /// [`Network::forward_dense_as_conv`] with the chosen kernels.
    pub fn forward_dense_as_conv_with(
        &self,
        kernels: Kernels,
        x: &Tensor,
    ) -> candle_core::Result<Tensor> {
        let [hw, hb, ow, ob] = self.dense();
        let a = &self.arch;
        let f = a.feature_side();
        let c = a.conv_channels[a.layers() - 1];
        let hidden_kernel = hw.reshape((a.hidden, c, f, f))?;
        let out_kernel = ow.reshape((a.classes, a.hidden, 1, 1))?;
        let h = ops::conv_block(
            kernels,
            &self.features_with(kernels, x)?,
            &hidden_kernel,
            hb,
            true,
            false,
        )?;
        ops::conv_block(kernels, &h, &out_kernel, ob, false, false)
    }

    /// The dense layers' weights as plain vectors (f32), for the score map's head.
    pub fn dense_values(&self) -> candle_core::Result<[Vec<f32>; 4]> {
        let [hw, hb, ow, ob] = self.dense();
        let v = |t: &Tensor| t.to_dtype(DType::F32)?.flatten_all()?.to_vec1::<f32>();
        Ok([v(hw)?, v(hb)?, v(ow)?, v(ob)?])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tiny() -> Architecture {
        Architecture {
            window: 14,
            conv_channels: vec![3, 4],
            conv_kernels: vec![3, 3],
            hidden: 5,
            dropout: 0.0,
            classes: 3,
        }
    }

    #[test]
    fn same_seed_same_weights_other_seed_other_weights() {
        let a = Network::init(&tiny(), 9, DType::F32).unwrap();
        let b = Network::init(&tiny(), 9, DType::F32).unwrap();
        let c = Network::init(&tiny(), 10, DType::F32).unwrap();
        let vals = |n: &Network| n.params[0].flatten_all().unwrap().to_vec1::<f32>().unwrap();
        assert_eq!(vals(&a), vals(&b));
        assert_ne!(vals(&a), vals(&c));
    }

    #[test]
    fn both_forward_paths_agree_on_a_single_window() {
        let net = Network::init(&tiny(), 3, DType::F32).unwrap();
        let mut rng = SeededRng::new(4);
        let px: Vec<f32> = (0..196).map(|_| rng.uniform() as f32).collect();
        let x = Tensor::from_vec(px, (1, 1, 14, 14), &Device::Cpu).unwrap();
        let a = net
            .forward(&x, None)
            .unwrap()
            .flatten_all()
            .unwrap()
            .to_vec1::<f32>()
            .unwrap();
        let b = net
            .forward_dense_as_conv(&x)
            .unwrap()
            .flatten_all()
            .unwrap()
            .to_vec1::<f32>()
            .unwrap();
        assert_eq!(a.len(), 3);
        for (p, q) in a.iter().zip(&b) {
            assert!((p - q).abs() < 1e-5, "{a:?} vs {b:?}");
        }
    }

    #[test]
    fn initial_loss_on_random_data_is_close_to_ln_classes() {
        // He initialisation keeps the activations' scale through the ReLU
        // layers and the output layer's sqrt(1 / fan_in) bound keeps the
        // logits small, so the untrained cross-entropy is near ln K, the loss
        // of uniform probabilities (common practice as a first sanity check).
        let arch =
            Architecture::from_settings(&symtrust_labels::site::ModelSettings::default(), 100, 4)
                .unwrap();
        let mut rng = SeededRng::new(40);
        let px: Vec<f32> = (0..64 * 100 * 100)
            .map(|_| if rng.chance(0.1) { 1.0 } else { 0.0 })
            .collect();
        let x = Tensor::from_vec(px, (64, 1, 100, 100), &Device::Cpu).unwrap();
        let labels: Vec<usize> = (0..64).map(|i| i % 4).collect();
        for seed in [1, 2, 3] {
            let net = Network::init(&arch, seed, DType::F32).unwrap();
            let logits = net.forward(&x, None).unwrap();
            let loss = crate::train::weighted_loss(&logits, &labels, &[1.0; 4])
                .unwrap()
                .to_scalar::<f32>()
                .unwrap() as f64;
            let ln_k = 4f64.ln();
            assert!(
                (loss - ln_k).abs() < 0.1 * ln_k,
                "seed {seed}: initial loss {loss}, ln 4 = {ln_k}"
            );
        }
    }

    #[test]
    fn loading_refuses_a_wrong_shape() {
        let net = Network::init(&tiny(), 1, DType::F32).unwrap();
        let mut map: HashMap<String, Tensor> = net.named_tensors().unwrap().into_iter().collect();
        map.insert(
            "hidden.bias".into(),
            Tensor::zeros(7, DType::F32, &Device::Cpu).unwrap(),
        );
        let err = Network::from_tensors(&tiny(), &map, std::path::Path::new("w.safetensors"))
            .unwrap_err();
        assert!(err.to_string().contains("hidden.bias"), "{err}");
    }
}
