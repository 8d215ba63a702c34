//! The fast convolution kernels against their naive twin, Candle's own ops
//! (conv2d, ReLU, reshape + max pooling), and against central finite
//! differences: forward values and both gradients on random shapes, the
//! whole network's forward pass, and training curves.
//!
//! Inputs are continuous random values so that no pool block holds two equal
//! maxima: at exact ties the two paths pick different (both valid)
//! subgradients, see `symtrust_trainer::kernels::conv`.

use candle_core::{DType, Device, Tensor, Var};
use proptest::prelude::*;
use symtrust_labels::SeededRng;
use symtrust_labels::site::ModelSettings;
use symtrust_trainer::Architecture;
use symtrust_trainer::model::Network;
use symtrust_trainer::ops::{Kernels, conv_block};

fn random(rng: &mut SeededRng, dims: &[usize], dtype: DType) -> Tensor {
    let n: usize = dims.iter().product();
    let v: Vec<f64> = (0..n).map(|_| rng.range_f64(-1.0, 1.0)).collect();
    Tensor::from_vec(v, dims, &Device::Cpu)
        .unwrap()
        .to_dtype(dtype)
        .unwrap()
}

fn values(t: &Tensor) -> Vec<f64> {
    t.to_dtype(DType::F64)
        .unwrap()
        .flatten_all()
        .unwrap()
        .to_vec1::<f64>()
        .unwrap()
}

/// Largest difference relative to the largest reference magnitude.
fn rel_err(ours: &[f64], reference: &[f64]) -> f64 {
    assert_eq!(ours.len(), reference.len());
    let scale = reference
        .iter()
        .fold(0f64, |m, v| m.max(v.abs()))
        .max(1e-12);
    let diff = ours
        .iter()
        .zip(reference)
        .fold(0f64, |m, (a, b)| m.max((a - b).abs()));
    diff / scale
}

struct Case {
    x: Var,
    w: Var,
    b: Var,
    probe: Tensor,
    relu: bool,
    pool: bool,
}

impl Case {
    #[allow(clippy::too_many_arguments)]
    fn new(
        seed: u64,
        dims: [usize; 4],
        c_out: usize,
        k: usize,
        relu: bool,
        pool: bool,
        dtype: DType,
    ) -> Self {
        let mut rng = SeededRng::new(seed);
        let x = Var::from_tensor(&random(&mut rng, &dims, dtype)).unwrap();
        let w = Var::from_tensor(&random(&mut rng, &[c_out, dims[1], k, k], dtype)).unwrap();
        let b = Var::from_tensor(&random(&mut rng, &[c_out], dtype)).unwrap();
        let (mut oh, mut ow) = (dims[2] - k + 1, dims[3] - k + 1);
        if pool {
            (oh, ow) = (oh / 2, ow / 2);
        }
        let probe = random(&mut rng, &[dims[0], c_out, oh, ow], dtype);
        Self {
            x,
            w,
            b,
            probe,
            relu,
            pool,
        }
    }

    /// Forward values and the gradients of `sum(y * probe)` for x, w, b.
    fn run(&self, kernels: Kernels) -> [Vec<f64>; 4] {
        let y = conv_block(
            kernels,
            self.x.as_tensor(),
            self.w.as_tensor(),
            self.b.as_tensor(),
            self.relu,
            self.pool,
        )
        .unwrap();
        let g = (&y * &self.probe)
            .unwrap()
            .sum_all()
            .unwrap()
            .backward()
            .unwrap();
        let grad = |v: &Var| values(g.get(v.as_tensor()).expect("gradient"));
        [values(&y), grad(&self.x), grad(&self.w), grad(&self.b)]
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 40, ..ProptestConfig::default() })]

    #[test]
    fn conv_block_matches_candles_ops_forward_and_gradients(
        seed in 0u64..10_000,
        batch in 1usize..11,
        c_in in 1usize..4,
        c_out in 1usize..6,
        k in 1usize..6,
        extra_h in 0usize..9,
        extra_w in 0usize..9,
        relu in any::<bool>(),
        pool in any::<bool>(),
    ) {
        let (h, w) = (k + 1 + extra_h, k + 1 + extra_w);
        for (dtype, tol) in [(DType::F32, 1e-4), (DType::F64, 1e-10)] {
            let case = Case::new(seed, [batch, c_in, h, w], c_out, k, relu, pool, dtype);
            let fast = case.run(Kernels::Fast);
            let stock = case.run(Kernels::Stock);
            for (what, (a, b)) in ["forward", "input gradient", "weight gradient", "bias gradient"]
                .iter()
                .zip(fast.iter().zip(&stock))
            {
                let e = rel_err(a, b);
                prop_assert!(e <= tol, "{dtype:?} {what}: relative error {e}");
            }
        }
    }
}

#[test]
fn conv_block_gradients_match_finite_differences() {
    // Central differences in f64 (common practice: relative error well below 1e-6).
    for (relu, pool) in [(false, false), (true, false), (true, true)] {
        let case = Case::new(5, [2, 2, 7, 6], 3, 3, relu, pool, DType::F64);
        let [_, dx, dw, db] = case.run(Kernels::Fast);
        let loss = || -> f64 {
            let y = conv_block(
                Kernels::Fast,
                case.x.as_tensor(),
                case.w.as_tensor(),
                case.b.as_tensor(),
                relu,
                pool,
            )
            .unwrap();
            (&y * &case.probe)
                .unwrap()
                .sum_all()
                .unwrap()
                .to_scalar::<f64>()
                .unwrap()
        };
        let eps = 1e-6;
        for (var, analytic) in [(&case.x, &dx), (&case.w, &dw), (&case.b, &db)] {
            let v0 = values(var.as_tensor());
            let dims = var.as_tensor().dims().to_vec();
            let set = |v: Vec<f64>| {
                var.set(&Tensor::from_vec(v, dims.as_slice(), &Device::Cpu).unwrap())
                    .unwrap()
            };
            for i in 0..v0.len() {
                let mut p = v0.clone();
                p[i] += eps;
                set(p);
                let up = loss();
                let mut m = v0.clone();
                m[i] -= eps;
                set(m);
                let down = loss();
                set(v0.clone());
                let numeric = (up - down) / (2.0 * eps);
                assert!(
                    (analytic[i] - numeric).abs() <= 1e-7 + 1e-6 * numeric.abs(),
                    "relu {relu} pool {pool} entry {i}: {} vs {numeric}",
                    analytic[i]
                );
            }
        }
    }
}

#[test]
fn no_input_gradient_is_computed_for_data() {
    let case = Case::new(9, [3, 1, 12, 12], 4, 5, true, true, DType::F32);
    let data = case.x.as_tensor().detach();
    let y = conv_block(
        Kernels::Fast,
        &data,
        case.w.as_tensor(),
        case.b.as_tensor(),
        true,
        true,
    )
    .unwrap();
    let g = (&y * &case.probe)
        .unwrap()
        .sum_all()
        .unwrap()
        .backward()
        .unwrap();
    assert!(g.get(&data).is_none(), "plain data gets no gradient");
    let [_, _, dw, db] = case.run(Kernels::Fast);
    assert_eq!(values(g.get(case.w.as_tensor()).unwrap()), dw);
    assert_eq!(values(g.get(case.b.as_tensor()).unwrap()), db);
}

#[test]
fn whole_network_forward_matches_the_stock_model() {
    let arch = Architecture::from_settings(&ModelSettings::default(), 100, 4).unwrap();
    let net = Network::init(&arch, 17, DType::F32).unwrap();
    let mut rng = SeededRng::new(18);
    let px: Vec<f32> = (0..10 * 100 * 100).map(|_| rng.uniform() as f32).collect();
    let x = Tensor::from_vec(px, (10, 1, 100, 100), &Device::Cpu).unwrap();
    let fast = values(&net.forward_with(Kernels::Fast, &x, None).unwrap());
    let stock = values(&net.forward_with(Kernels::Stock, &x, None).unwrap());
    let e = rel_err(&fast, &stock);
    assert!(e <= 1e-4, "window logits: relative error {e}");
    let sheet = x.narrow(0, 0, 1).unwrap().repeat((1, 1, 2, 2)).unwrap();
    let fast = values(
        &net.forward_dense_as_conv_with(Kernels::Fast, &sheet)
            .unwrap(),
    );
    let stock = values(
        &net.forward_dense_as_conv_with(Kernels::Stock, &sheet)
            .unwrap(),
    );
    assert_eq!(fast.len(), 4 * 13 * 13);
    let e = rel_err(&fast, &stock);
    assert!(e <= 1e-4, "dense-as-conv logits: relative error {e}");
}

#[test]
fn training_curves_with_fast_and_stock_kernels_agree() {
    use symtrust_trainer::data::{DataSource, Sample};
    use symtrust_trainer::train::{Silent, train_with};
    use symtrust_trainer::{Dataset, TrainOptions};
    // Grey noise (never pure paper, so no exact ties) with a dark bar whose
    // direction is the class; the third class has no bar.
    let side = 22;
    let mut rng = SeededRng::new(31);
    let mut crops = |n: usize| -> Vec<Sample> {
        (0..n)
            .map(|i| {
                let class = i % 3;
                let at = 4 + rng.below(14) as usize;
                let pixels = (0..side * side)
                    .map(|p| {
                        let (y, x) = (p / side, p % side);
                        let bar =
                            (class == 0 && y / 2 == at / 2) || (class == 1 && x / 2 == at / 2);
                        if bar {
                            10 + rng.below(40) as u8
                        } else {
                            190 + rng.below(60) as u8
                        }
                    })
                    .collect();
                Sample { pixels, class }
            })
            .collect()
    };
    let data = Dataset {
        classes: vec!["h".into(), "v".into(), "background".into()],
        rotatable: vec![false; 3],
        window: side,
        train: crops(96),
        validation: crops(30),
        source: DataSource {
            crop_library: "noise".into(),
            manifest_sha256: String::new(),
            index_sha256: String::new(),
            dpi: 200.0,
        },
    };
    let arch = Architecture {
        window: side,
        conv_channels: vec![4, 6],
        conv_kernels: vec![3, 3],
        hidden: 8,
        dropout: 0.25,
        classes: 3,
    };
    let opts = TrainOptions {
        epochs: 6,
        batch_size: 16,
        learning_rate: 1e-2,
        weight_decay: 1e-4,
        patience: 0,
        seed: 2,
        augment: false,
    };
    let run = |k: Kernels| train_with(k, &data, &arch, &opts, None, false, &mut Silent).unwrap();
    let (fast, stock) = (run(Kernels::Fast), run(Kernels::Stock));
    assert!(
        fast.log[5].train_loss < 0.8 * fast.log[0].train_loss && fast.validation.accuracy >= 0.8,
        "the run learns: {:?}",
        fast.log
    );
    for (a, b) in fast.log.iter().zip(&stock.log) {
        for (what, x, y) in [
            ("train loss", a.train_loss, b.train_loss),
            ("validation loss", a.val_loss, b.val_loss),
        ] {
            assert!(
                (x - y).abs() <= 1e-4 * y.abs(),
                "epoch {} {what}: fast {x} vs stock {y}",
                a.epoch
            );
        }
    }
    let wf: Vec<Vec<f64>> = fast
        .network
        .params
        .iter()
        .map(|v| values(v.as_tensor()))
        .collect();
    let ws: Vec<Vec<f64>> = stock
        .network
        .params
        .iter()
        .map(|v| values(v.as_tensor()))
        .collect();
    for (i, (a, b)) in wf.iter().zip(&ws).enumerate() {
        let e = rel_err(a, b);
        assert!(
            e <= 1e-3,
            "parameter {i}: relative difference {e} after training"
        );
    }
}
