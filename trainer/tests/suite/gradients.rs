//! The loss gradients from Candle's backward pass against central finite
//! differences, in f64, on a tiny two-layer network (common practice for
//! checking back-propagation: relative error well below 1e-4).

use candle_core::{DType, Device, Tensor};
use symtrust_labels::SeededRng;
use symtrust_trainer::Architecture;
use symtrust_trainer::model::Network;
use symtrust_trainer::train::weighted_loss;

#[test]
fn backward_matches_finite_differences() {
    let arch = Architecture {
        window: 14,
        conv_channels: vec![2, 3],
        conv_kernels: vec![3, 3],
        hidden: 4,
        dropout: 0.0,
        classes: 3,
    };
    let net = Network::init(&arch, 21, DType::F64).unwrap();
    let mut rng = SeededRng::new(22);
    let n = 3;
    let px: Vec<f64> = (0..n * 196).map(|_| rng.uniform()).collect();
    let x = Tensor::from_vec(px, (n, 1, 14, 14), &Device::Cpu).unwrap();
    let labels = [0usize, 2, 1];
    let weights = [1.0, 0.5, 2.0];
    let loss = |net: &Network| -> f64 {
        let logits = net.forward(&x, None).unwrap();
        weighted_loss(&logits, &labels, &weights)
            .unwrap()
            .to_scalar::<f64>()
            .unwrap()
    };
    let grads = weighted_loss(&net.forward(&x, None).unwrap(), &labels, &weights)
        .unwrap()
        .backward()
        .unwrap();
    let eps = 1e-6;
    let mut checked = 0;
    let mut failures = Vec::new();
    for (p, var) in net.params.iter().enumerate() {
        let analytic = grads
            .get(var.as_tensor())
            .unwrap()
            .flatten_all()
            .unwrap()
            .to_vec1::<f64>()
            .unwrap();
        let values = var
            .as_tensor()
            .flatten_all()
            .unwrap()
            .to_vec1::<f64>()
            .unwrap();
        let shape = var.as_tensor().dims().to_vec();
        for i in 0..values.len() {
            let mut plus = values.clone();
            plus[i] += eps;
            var.set(&Tensor::from_vec(plus, shape.as_slice(), &Device::Cpu).unwrap())
                .unwrap();
            let up = loss(&net);
            let mut minus = values.clone();
            minus[i] -= eps;
            var.set(&Tensor::from_vec(minus, shape.as_slice(), &Device::Cpu).unwrap())
                .unwrap();
            let down = loss(&net);
            var.set(&Tensor::from_vec(values.clone(), shape.as_slice(), &Device::Cpu).unwrap())
                .unwrap();
            let numeric = (up - down) / (2.0 * eps);
            let err = (analytic[i] - numeric).abs();
            if err > 1e-7 + 1e-5 * numeric.abs() {
                failures.push(format!(
                    "parameter {p} entry {i}: backward {} vs finite difference {numeric}",
                    analytic[i]
                ));
            }
            checked += 1;
        }
    }
    assert!(
        failures.is_empty(),
        "{} mismatches:\n{}",
        failures.len(),
        failures.join("\n")
    );
    assert_eq!(
        checked,
        arch.parameter_shapes()
            .iter()
            .map(|(_, s)| s.iter().product::<usize>())
            .sum::<usize>()
    );
}
