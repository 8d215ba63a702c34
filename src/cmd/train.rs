//! `symtrust train`: train a classifier on a crop library and write `models/<id>/`.

use crate::context::{Ctx, usage};
use crate::exit;
use clap::Args;
use indicatif::ProgressBar;
use std::path::PathBuf;
use symtrust_labels::site::Site;
use symtrust_trainer::card::{ModelInputs, remove_stale_writes, write_model};
use symtrust_trainer::data::find_library;
use symtrust_trainer::train::{EpochRow, Flow, TrainObserver};
use symtrust_trainer::{Architecture, Dataset, ModelCard, TrainOptions, train};

/// Arguments of `symtrust train`.
#[derive(Debug, Args)]
pub struct TrainArgs {
    /// Crop library id under `crops/` (default: the newest).
    #[arg(long, value_name = "ID")]
    pub crops: Option<String>,
    /// Largest number of epochs (default: `[train] epochs` in site.toml).
    #[arg(long, value_name = "N")]
    pub epochs: Option<usize>,
    /// Seed of weights, shuffles, augmentation and dropout (default: the site's seed).
    #[arg(long, value_name = "S")]
    pub seed: Option<u64>,
    /// Continue the interrupted run with the same settings from its last finished epoch.
    #[arg(long)]
    pub resume: bool,
    /// Crops per optimiser step (default: `[train] batch_size`).
    #[arg(long, value_name = "N")]
    pub batch_size: Option<usize>,
    /// Peak AdamW learning rate (default: `[train] learning_rate`).
    #[arg(long, value_name = "X")]
    pub learning_rate: Option<f64>,
    /// Epochs without a better validation macro F1 before stopping; 0 never stops early.
    #[arg(long, value_name = "N")]
    pub patience: Option<usize>,
    /// Output channels per convolution layer, comma-separated (default: `[model] conv_channels`).
    #[arg(long, value_name = "C,C,...", value_delimiter = ',')]
    pub conv_channels: Option<Vec<usize>>,
    /// Kernel side per convolution layer, comma-separated (default: `[model] conv_kernels`).
    #[arg(long, value_name = "K,K,...", value_delimiter = ',')]
    pub conv_kernels: Option<Vec<usize>>,
    /// Units of the hidden layer (default: `[model] hidden`).
    #[arg(long, value_name = "N")]
    pub hidden: Option<usize>,
    /// Dropout on the hidden layer, in [0, 1) (default: `[model] dropout`).
    #[arg(long, value_name = "P")]
    pub dropout: Option<f64>,
    /// Train without augmentation.
    #[arg(long)]
    pub no_augment: bool,
}

/// Shows a bar per epoch and one line per finished epoch.
struct Progress<'a> {
    ctx: &'a Ctx,
    bar: Option<ProgressBar>,
    epochs: usize,
    last_val: String,
}

impl TrainObserver for Progress<'_> {
    fn epoch_started(&mut self, epoch: usize, batches: usize) {
        let bar = self
            .ctx
            .progress(batches as u64, &format!("epoch {epoch}/{}", self.epochs));
        bar.set_message(self.last_val.clone());
        self.bar = Some(bar);
    }

    fn batch_done(&mut self, _epoch: usize, _batch: usize, loss: f64) -> Flow {
        if let Some(bar) = &self.bar {
            bar.set_message(format!("loss {loss:.4}{}", self.last_val));
            bar.inc(1);
        }
        Flow::Continue
    }

    fn epoch_done(&mut self, row: &EpochRow) {
        if let Some(bar) = self.bar.take() {
            bar.finish_and_clear();
        }
        self.last_val = format!(" | val acc {:.3}", row.val_accuracy);
        self.ctx.say(format!(
            "epoch {:>3}/{}: train loss {:.4}, val loss {:.4}, val accuracy {:.4}, val macro F1 {:.4}, lr {:.2e}, {:.1} s",
            row.epoch,
            self.epochs,
            row.train_loss,
            row.val_loss,
            row.val_accuracy,
            row.val_macro_f1,
            row.learning_rate,
            row.seconds
        ));
    }
}

/// Trains and writes the model folder.
pub fn run(ctx: &Ctx, args: &TrainArgs) -> anyhow::Result<u8> {
    let site = ctx.open_site()?;
    let (card, dir) = train_model(ctx, &site, args)?;
    if ctx.json {
        ctx.print_json(&card)?;
    } else {
        ctx.say(format!(
            "model {} written to {} (best epoch {} of {}, validation accuracy {:.4}, macro F1 {:.4}, {:.0} s)",
            card.id,
            dir.display(),
            card.training.best_epoch,
            card.training.epochs_run,
            card.validation.accuracy,
            card.validation.macro_f1,
            card.training.seconds
        ));
        if ctx.quiet {
            println!("{}", dir.display());
        }
    }
    Ok(exit::OK)
}

/// Training arguments with every default, as if `symtrust train` had been
/// given only `extra`.
pub fn args_from(extra: &[&str]) -> anyhow::Result<TrainArgs> {
    #[derive(clap::Parser)]
    struct Wrapper {
        #[command(flatten)]
        args: TrainArgs,
    }
    let argv = std::iter::once("train").chain(extra.iter().copied());
    Ok(<Wrapper as clap::Parser>::try_parse_from(argv)
        .map_err(|e| crate::context::UsageError(e.to_string()))?
        .args)
}

/// Trains as `args` ask and writes the model folder; returns its card and path.
pub fn train_model(
    ctx: &Ctx,
    site: &Site,
    args: &TrainArgs,
) -> anyhow::Result<(ModelCard, PathBuf)> {
    let cfg = &site.config;
    let mut model = cfg.model.clone();
    if let Some(c) = &args.conv_channels {
        model.conv_channels = c.clone();
    }
    if let Some(k) = &args.conv_kernels {
        model.conv_kernels = k.clone();
    }
    if let Some(h) = args.hidden {
        model.hidden = h;
    }
    if let Some(d) = args.dropout {
        model.dropout = d;
    }
    let mut schedule = cfg.train.clone();
    if let Some(e) = args.epochs {
        schedule.epochs = e;
    }
    if let Some(b) = args.batch_size {
        schedule.batch_size = b;
    }
    if let Some(l) = args.learning_rate {
        schedule.learning_rate = l;
    }
    if let Some(p) = args.patience {
        schedule.patience = p;
    }
    if schedule.epochs == 0 || schedule.batch_size == 0 {
        return usage("--epochs and --batch-size must be positive");
    }
    let mut opts = TrainOptions::from_settings(&schedule, args.seed.unwrap_or(cfg.seed));
    opts.augment = !args.no_augment;
    opts.validate()?;

    let library = find_library(&site.crops_dir(), args.crops.as_deref())?;
    ctx.say(format!("loading crop library {}", library.display()));
    let data = Dataset::load(&library, &cfg.classes, cfg.window)?;
    let arch = Architecture::from_settings(&model, cfg.window as usize, data.classes.len())?;
    let models = site.models_dir();
    std::fs::create_dir_all(&models)?;
    remove_stale_writes(&models)?;
    ctx.say(format!(
        "training on {} crops, validating on {} (classes: {}), {} threads",
        data.train.len(),
        data.validation.len(),
        data.classes.join(", "),
        symtrust_trainer::threads()
    ));
    let mut progress = Progress {
        ctx,
        bar: None,
        epochs: opts.epochs,
        last_val: String::new(),
    };
    let outcome = train(
        &data,
        &arch,
        &opts,
        Some(&models),
        args.resume,
        &mut progress,
    )?;
    let inputs = ModelInputs {
        classes: &data.classes,
        source: &data.source,
        options: &opts,
        train_counts: data.class_counts(&data.train),
        validation_counts: data.class_counts(&data.validation),
    };
    let (card, dir) = write_model(&models, &outcome, &inputs)?;
    let checkpoint = symtrust_trainer::checkpoint::path_for(&models, &outcome.run_key);
    std::fs::remove_file(&checkpoint).map_err(|e| {
        anyhow::anyhow!(
            "{}: cannot remove the finished checkpoint: {e}",
            checkpoint.display()
        )
    })?;
    Ok((card, dir))
}
