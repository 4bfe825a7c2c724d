//! `sufficit demo-models --out models/ [--fit]` (hidden, for maintainers): write the planted
//! demo model and, with `--fit`, train the fitted demo model on it; `--check FILE` judges a
//! candidate fit by the fitted model's checks (the top units' recovery: `demo --model FILE`).

use crate::demo::fit::{fit, Epoch, FitSettings, Hidden, ObjectMotion, ReversalImage};
use crate::demo::recipe;
use crate::output::OutputDir;
use crate::Result;
use clap::Args;
use serde_json::json;

/// File name of the fitted model in `models/`.
pub const FITTED_FILE: &str = "synthetic-sensor-fitted.onnx";

/// Arguments of `demo-models`.
#[derive(Debug, Args)]
pub struct DemoModelsArgs {
    /// Output folder.
    #[arg(long, default_value = "models")]
    pub out: std::path::PathBuf,
    /// Also fit the CNN to the planted model (minutes).
    #[arg(long)]
    pub fit: bool,
    /// Fit each cell alone by its own settings from this JSON file, side by side, and join them
    /// (a recipe: {"cells": [settings of cell 0, 1, 2]}, or the .json beside a fitted model,
    /// which holds the recipe it was fitted with). Excludes the single-fit options below.
    #[arg(long, value_name = "FILE", requires = "fit")]
    pub recipe: Option<std::path::PathBuf>,
    /// Judge this ONNX file (a candidate fit of the synthetic sensor) by the checks of the
    /// fitted demo model: held-out correlation per cell on fresh movies, and each cell's
    /// phenomenon beside the planted sensor's. Prints them and fits nothing.
    #[arg(long, value_name = "FILE", conflicts_with = "fit")]
    pub check: Option<std::path::PathBuf>,
    /// The settings of one fit of every cell at once (without --recipe).
    #[command(flatten)]
    pub one: OneFitArgs,
}

/// Settings of a single fit (every cell in one student).
#[derive(Debug, Args)]
pub struct OneFitArgs {
    /// Training frames per epoch of each of binary noise, flicker and naturalistic movie.
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().train_frames)]
    pub train_frames: usize,
    /// Frames of naturalistic movie with a moving object per epoch.
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().object_frames)]
    pub object_frames: usize,
    /// How the object movie moves: scene and object drifting smoothly, the scene jittering with
    /// objects that jitter with it or on their own, or half of each.
    #[arg(long, conflicts_with = "recipe", value_enum, default_value_t = ObjectMotion::Drift)]
    pub object_motion: ObjectMotion,
    /// Frames of reversing movie (see --reversal-image) per epoch.
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().reversal_frames)]
    pub reversal_frames: usize,
    /// Fraction of the epochs (0 to 1) after which the reversing movie joins the training
    /// movies.
    #[arg(long, conflicts_with = "recipe", value_parser = fraction, default_value_t = FitSettings::default().reversal_from)]
    pub reversal_from: f64,
    /// What the reversing movie moves: a pink texture, thin lines, parallel bars, lone bars,
    /// both kinds of bars by turns (with short or long steady segments, or both), a checkerboard,
    /// lone bars swept over the centre, or those sweeps and parallel bars by turns.
    #[arg(long, conflicts_with = "recipe", value_enum, default_value_t = ReversalImage::Pink)]
    pub reversal_image: ReversalImage,
    /// Share (0 to 1) of the bars swept over the centre drawn at full contrast, the rest at 0.6
    /// to 1.
    #[arg(long, conflicts_with = "recipe", value_parser = share, default_value_t = FitSettings::default().full_contrast_sweeps)]
    pub full_contrast_sweeps: f64,
    /// Passes over the training windows.
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().epochs)]
    pub epochs: usize,
    /// Seed of movies, initial weights and batch order.
    #[arg(long, conflicts_with = "recipe", default_value_t = 1)]
    pub seed: u64,
    /// Adam step size.
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().lr)]
    pub lr: f32,
    /// The objective.
    #[arg(long, conflicts_with = "recipe", value_enum, default_value_t = FitSettings::default().loss)]
    pub loss: crate::demo::train::Loss,
    /// Windows per Adam step.
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().batch)]
    pub batch: usize,
    /// Channels of the two convolutions, e.g. 16,8.
    #[arg(long, conflicts_with = "recipe", value_name = "C1,C2", value_parser = channels, default_value = "16,8")]
    pub channels: (usize, usize),
    /// Give each cell its own share of the channels (both counts multiples of the 3 cells), so
    /// one cell's fit cannot disturb another's.
    #[arg(long, conflicts_with = "recipe")]
    pub separate_cells: bool,
    /// Train this many students from consecutive seeds for --restart-epochs, keep for each
    /// cell the one predicting it best on the held-out movies, and train on (1: no restarts).
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().restarts)]
    pub restarts: usize,
    /// Epochs of each restart before the choice (part of --epochs).
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().restart_epochs)]
    pub restart_epochs: usize,
    /// Train only this cell (0, 1 or 2), all channels on it: to study one cell's fit quickly.
    #[arg(long, conflicts_with = "recipe", value_name = "CELL")]
    pub cell: Option<usize>,
    /// The hidden layers' nonlinearity.
    #[arg(long, conflicts_with = "recipe", value_enum, default_value_t = Hidden::Softplus)]
    pub hidden: Hidden,
    /// Clip each batch's gradient at this many running means of recent gradient norms (0: no
    /// clipping).
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().clip)]
    pub clip: f64,
    /// Train this many epochs on each draw of movies (1: fresh movies every epoch).
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().movies_every)]
    pub movies_every: usize,
    /// Give every batch an equal share of the strongest responses (stratified batches).
    #[arg(long, conflicts_with = "recipe")]
    pub stratify: bool,
    /// Keep the readout's weights non-negative, so every sign sits in the convolutions.
    #[arg(long, conflicts_with = "recipe")]
    pub positive_readout: bool,
    /// After each epoch, give dead hidden channels fresh incoming weights (and no outgoing
    /// weight) so they can learn again.
    #[arg(long, conflicts_with = "recipe")]
    pub revive: bool,
    /// Ship the mean of the weights over the steps after the step size drops (--decay-after)
    /// instead of the last step's.
    #[arg(long, conflicts_with = "recipe")]
    pub average: bool,
    /// Fraction of the epochs (0 to 1) after which the step size drops to a fifth.
    #[arg(long, conflicts_with = "recipe", value_parser = fraction, default_value_t = FitSettings::default().decay_after)]
    pub decay_after: f64,
    /// Start each hidden channel this many s.d. of its input below its threshold (0: at it),
    /// so it starts active on fewer windows.
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().sparse_start)]
    pub sparse_start: f64,
    /// A probe: with --cell 1, hold the first four first-layer channels at the planted
    /// direction-selective pathways and train the rest.
    #[arg(long, conflicts_with = "recipe")]
    pub planted_first_layer: bool,
    /// Weight of a group-sparsity penalty that pushes each second-layer unit to read few
    /// first-layer channels (0: none).
    #[arg(long, conflicts_with = "recipe", value_parser = non_negative, default_value_t = FitSettings::default().group_sparsity)]
    pub group_sparsity: f32,
    /// Weight of an L1 penalty on each cell's readout weights, so it reads its units at few
    /// positions (0: none).
    #[arg(long, conflicts_with = "recipe", value_parser = non_negative, default_value_t = FitSettings::default().readout_sparsity)]
    pub readout_sparsity: f32,
    /// Weight of a smoothness penalty on the first layer's spatial and temporal filters
    /// (squared Laplacians and second differences; 0: none).
    #[arg(long, conflicts_with = "recipe", value_parser = non_negative, default_value_t = FitSettings::default().smoothness)]
    pub smoothness: f32,
    /// Raised cosines on log-stretched time that carry the first layer's temporal filters
    /// (0: one free weight per lag).
    #[arg(long, conflicts_with = "recipe", default_value_t = FitSettings::default().temporal_basis)]
    pub temporal_basis: usize,
}

/// Parse a number that must be zero or more.
fn non_negative(s: &str) -> Result<f32, String> {
    match s.parse::<f32>() {
        Ok(v) if v >= 0.0 && v.is_finite() => Ok(v),
        _ => Err(format!("expected a number of zero or more, got '{s}'")),
    }
}

/// Parse `C1,C2`.
fn channels(s: &str) -> Result<(usize, usize), String> {
    match s.split_once(',').map(|(a, b)| (a.trim().parse::<usize>(), b.trim().parse::<usize>())) {
        Some((Ok(a), Ok(b))) if a > 0 && b > 0 => Ok((a, b)),
        _ => Err(format!("'{s}': expected two positive channel counts such as 16,8")),
    }
}

/// Parse a fraction from 0 to 1.
fn fraction(s: &str) -> Result<f64, String> {
    zero_to_one(s, "a fraction of the epochs")
}

/// Parse a share from 0 to 1.
fn share(s: &str) -> Result<f64, String> {
    zero_to_one(s, "a share")
}

/// Parse a number from 0 to 1; the message calls it `what`.
fn zero_to_one(s: &str, what: &str) -> Result<f64, String> {
    match s.trim().parse::<f64>() {
        Ok(f) if (0.0..=1.0).contains(&f) => Ok(f),
        _ => Err(format!("'{s}': expected {what} from 0 to 1, such as 0.5")),
    }
}

/// Write the models (or, with `--check`, judge a candidate).
pub fn run(a: &DemoModelsArgs) -> Result<()> {
    if let Some(path) = &a.check {
        return check(path);
    }
    crate::demo::write_planted(&a.out)?;
    println!("wrote {}", a.out.join(crate::demo::PLANTED_FILE).display());
    if !a.fit {
        return Ok(());
    }
    let out = OutputDir::create(&a.out)?;
    let started = std::time::Instant::now();
    let (model, mut record, summary) = match &a.recipe {
        Some(path) => {
            let recipe = recipe::read(path)?;
            let (model, report) =
                recipe::fit_recipe(&recipe, &|k, e| eprintln!("cell {k}, {}", epoch_line(e, started.elapsed())))?;
            let summary = format!(
                "held-out correlation per cell {:?} (each cell fitted alone), {:.0} s",
                report.heldout_correlation, report.seconds
            );
            (model, json!({"schema": "sufficit/1", "recipe": recipe, "report": report}), summary)
        }
        None => {
            let settings = one_fit(&a.one);
            let (model, report) = fit(&settings, &|e| {
                eprintln!("{}", epoch_line(e, started.elapsed()));
                // The latest epoch's model, so a fit stopped early leaves one to examine.
                if let Err(err) = out.write_bytes(FITTED_FILE, &crate::model::builder::to_bytes(&e.model)) {
                    eprintln!("epoch {}: could not write the model: {err}", e.number);
                }
            })?;
            let summary = format!(
                "held-out correlation per cell {:?} (restart kept per cell {:?}), {:.0} s",
                report.heldout_correlation, report.chosen_restart, report.seconds
            );
            (model, json!({"schema": "sufficit/1", "settings": settings, "report": report}), summary)
        }
    };
    record["version"] = json!(env!("CARGO_PKG_VERSION"));
    out.write_bytes(FITTED_FILE, &crate::model::builder::to_bytes(&model))?;
    out.write_json("synthetic-sensor-fitted.json", &record)?;
    println!("wrote {}: {summary}", a.out.join(FITTED_FILE).display());
    Ok(())
}

/// Print the checks of the fitted demo model (issue 6) for the model at `path`: held-out r >= 0.8
/// per cell, each phenomenon within 25 % of the planted sensor's.
fn check(path: &std::path::Path) -> Result<()> {
    use crate::demo::checks::{relative_error, PHENOMENA};
    let planted = crate::demo::planted_model()?;
    let fitted = crate::model::Model::load(path, &Default::default())?;
    let verdict = |ok: bool| if ok { "pass" } else { "SHORT" };
    for (cell, c) in crate::demo::heldout::fresh_correlations(&planted, &fitted)?.iter().enumerate() {
        println!("cell {cell}: held-out r {:.3} {} ({})", c.pooled, verdict(c.pooled >= 0.8), c.by_movie_line());
    }
    for p in &PHENOMENA {
        let (want, got) = (p.measure(&planted)?, p.measure(&fitted)?);
        let off = relative_error(want, got);
        println!(
            "cell {}: {}: planted {want:.3}, fitted {got:.3} ({:+.0} %) {}",
            p.cell,
            p.name,
            100.0 * (got - want) / want.abs(),
            verdict(off <= 0.25)
        );
    }
    Ok(())
}

/// One line of progress for epoch `e`, `elapsed` into the fit.
fn epoch_line(e: &Epoch, elapsed: std::time::Duration) -> String {
    format!(
        "{}epoch {} ({:.0} s): training loss {:.4}, per cell {:.3?}, held-out r {:.3?} (noise, flicker, scenes, object, reversing: {:.2?}){}",
        e.restart.map_or(String::new(), |k| format!("restart {k}, ")),
        e.number,
        elapsed.as_secs_f64(),
        e.loss,
        e.cell_loss,
        e.heldout_correlation,
        e.heldout_by_kind,
        match e.revived {
            (0, 0) => String::new(),
            (a, b) => format!("; revived {a} + {b} dead channels"),
        }
    )
}

/// The settings of a single fit from its options.
fn one_fit(a: &OneFitArgs) -> FitSettings {
    FitSettings {
        seed: a.seed,
        train_frames: a.train_frames,
        object_frames: a.object_frames,
        object_motion: a.object_motion,
        reversal_frames: a.reversal_frames,
        reversal_from: a.reversal_from,
        reversal_image: a.reversal_image,
        full_contrast_sweeps: a.full_contrast_sweeps,
        epochs: a.epochs,
        lr: a.lr,
        loss: a.loss,
        channels: a.channels,
        batch: a.batch.max(1),
        separate_cells: a.separate_cells,
        restarts: a.restarts.max(1),
        restart_epochs: a.restart_epochs.min(a.epochs),
        only_cell: a.cell,
        hidden: a.hidden,
        clip: a.clip,
        movies_every: a.movies_every.max(1),
        stratify: a.stratify,
        positive_readout: a.positive_readout,
        revive: a.revive,
        average: a.average,
        decay_after: a.decay_after,
        sparse_start: a.sparse_start,
        planted_first_layer: a.planted_first_layer,
        group_sparsity: a.group_sparsity,
        readout_sparsity: a.readout_sparsity,
        smoothness: a.smoothness,
        temporal_basis: a.temporal_basis,
        ..Default::default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fit_options_are_checked_with_a_message_that_says_what_was_expected() {
        assert_eq!(fraction("0.5"), Ok(0.5));
        assert_eq!(fraction("1"), Ok(1.0));
        for bad in ["1.5", "-0.1", "half"] {
            assert!(fraction(bad).unwrap_err().contains("fraction of the epochs from 0 to 1"), "{bad}");
        }
        assert_eq!(channels("16, 8"), Ok((16, 8)));
        assert_eq!(share("0.25"), Ok(0.25));
        assert!(share("2").unwrap_err().contains("share from 0 to 1"));
        assert!(channels("16").unwrap_err().contains("two positive channel counts"));
        assert!(channels("0,8").is_err());
    }
}
