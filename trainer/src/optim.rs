//! AdamW and the learning-rate schedule, written out so their state can be
//! checkpointed and restored exactly (Candle's optimiser keeps it private).
//!
//! AdamW (decoupled weight decay), per parameter `p` with gradient `g` at step `t`:
//!
//! ```text
//! m = b1 m + (1 - b1) g          v = b2 v + (1 - b2) g^2
//! p = p - lr wd p - lr (m / (1 - b1^t)) / (sqrt(v / (1 - b2^t)) + eps)
//! ```
//!
//! with `b1 = 0.9`, `b2 = 0.999`, `eps = 1e-8` (the defaults of PyTorch's
//! `torch.optim.AdamW`); weight decay is applied to weights, not biases
//! (common practice).
//!
//! Schedule: linear warm-up over the first epoch's steps (at most 100), then
//! cosine decay to a tenth of the peak at the last step.

use crate::error::{Result, TensorContext};
use candle_core::{Tensor, Var, backprop::GradStore};

/// First-moment decay.
pub const BETA1: f64 = 0.9;
/// Second-moment decay.
pub const BETA2: f64 = 0.999;
/// Denominator guard.
pub const EPS: f64 = 1e-8;

/// AdamW over a fixed list of variables.
#[derive(Debug)]
pub struct AdamW {
    /// Steps taken so far.
    pub step: u64,
    /// First moments, one per variable.
    pub m: Vec<Tensor>,
    /// Second moments, one per variable.
    pub v: Vec<Tensor>,
    /// Weight decay per variable (0 for biases).
    pub decay: Vec<f64>,
}

impl AdamW {
    /// Zero moments for `vars`; `decay[i]` is the weight decay of variable `i`.
    pub fn new(vars: &[Var], decay: Vec<f64>) -> Result<Self> {
        let zeros = |v: &Var| v.as_tensor().zeros_like();
        Ok(Self {
            step: 0,
            m: vars
                .iter()
                .map(zeros)
                .collect::<candle_core::Result<_>>()
                .during("creating the optimiser")?,
            v: vars
                .iter()
                .map(zeros)
                .collect::<candle_core::Result<_>>()
                .during("creating the optimiser")?,
            decay,
        })
    }

    /// One update of every variable with a gradient in `grads`, at learning rate `lr`.
    pub fn step(&mut self, vars: &[Var], grads: &GradStore, lr: f64) -> Result<()> {
        self.step += 1;
        let t = self.step as i32;
        let (c1, c2) = (1.0 - BETA1.powi(t), 1.0 - BETA2.powi(t));
        for (i, var) in vars.iter().enumerate() {
            let Some(g) = grads.get(var.as_tensor()) else {
                continue;
            };
            let mut update = || -> candle_core::Result<()> {
                let m = ((&self.m[i] * BETA1)? + (g * (1.0 - BETA1))?)?;
                let v = ((&self.v[i] * BETA2)? + (g.sqr()? * (1.0 - BETA2))?)?;
                let denom = ((&v / c2)?.sqrt()? + EPS)?;
                let step = ((&m / c1)? / denom)?;
                let p = var.as_tensor();
                let next = ((p * (1.0 - lr * self.decay[i]))? - (step * lr)?)?;
                var.set(&next)?;
                self.m[i] = m;
                self.v[i] = v;
                Ok(())
            };
            update().during("updating weights")?;
        }
        Ok(())
    }
}

/// Learning rate at 0-based `step` of `total` steps, peaking at `peak`.
pub fn learning_rate(peak: f64, step: u64, total: u64, steps_per_epoch: u64) -> f64 {
    let warmup = steps_per_epoch.clamp(1, 100).min(total.max(1));
    if step < warmup {
        return peak * (step + 1) as f64 / warmup as f64;
    }
    let span = total.saturating_sub(warmup + 1).max(1) as f64;
    let progress = ((step - warmup) as f64 / span).min(1.0);
    let floor = 0.1 * peak;
    floor + (peak - floor) * 0.5 * (1.0 + (std::f64::consts::PI * progress).cos())
}

#[cfg(test)]
mod tests {
    use super::*;
    use candle_core::{DType, Device};

    #[test]
    fn first_step_moves_each_weight_by_the_learning_rate() {
        // Hand calculation: at t = 1 the bias-corrected m / sqrt(v) is g / |g| = sign(g),
        // so with no decay each weight moves by lr against its gradient's sign.
        let var = Var::from_tensor(&Tensor::new(&[1f32, -2.0], &Device::Cpu).unwrap()).unwrap();
        let loss = (var.as_tensor() * Tensor::new(&[3f32, -0.5], &Device::Cpu).unwrap())
            .unwrap()
            .sum_all()
            .unwrap();
        let grads = loss.backward().unwrap();
        let mut opt = AdamW::new(std::slice::from_ref(&var), vec![0.0]).unwrap();
        opt.step(std::slice::from_ref(&var), &grads, 0.1).unwrap();
        let got = var.as_tensor().to_vec1::<f32>().unwrap();
        assert!(
            (got[0] - 0.9).abs() < 1e-6 && (got[1] + 1.9).abs() < 1e-6,
            "{got:?}"
        );
        assert_eq!(opt.m[0].dtype(), DType::F32);
    }

    #[test]
    fn schedule_warms_up_peaks_and_decays_to_a_tenth() {
        let (peak, total, per) = (1e-3, 1000, 50);
        assert!((learning_rate(peak, 0, total, per) - peak / 50.0).abs() < 1e-15);
        assert!((learning_rate(peak, 49, total, per) - peak).abs() < 1e-15);
        let last = learning_rate(peak, total - 1, total, per);
        assert!((last - 0.1 * peak).abs() < 1e-6 * peak, "{last}");
        let mut prev = f64::INFINITY;
        for s in 50..total {
            let lr = learning_rate(peak, s, total, per);
            assert!(lr <= prev + 1e-18);
            prev = lr;
        }
    }
}
