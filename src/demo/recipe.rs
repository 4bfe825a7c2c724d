//! A fit with one recipe per cell: each cell of the synthetic sensor trains alone on its own
//! channels with its own settings (the three cells want different movies, losses and restarts:
//! docs/performance.md, sessions 15 to 17), the three fits run side by side, and the shipped
//! model joins them with separate cells. The recipe is JSON, and the `.json` written beside a
//! fitted model holds the recipe it was fitted with, so that file reproduces the fit.

use super::fit::{fit_student, Epoch, FitReport, FitSettings, Student};
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::Path;
use std::time::Instant;

/// The settings of each cell's fit, in cell order.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Recipe {
    /// One entry per cell; every entry trains its cell alone (`only_cell` is set from its place).
    pub cells: Vec<FitSettings>,
}

/// How a recipe's fit went.
#[derive(Debug, Clone, Serialize)]
pub struct RecipeReport {
    /// Each cell's own fit, in cell order.
    pub cells: Vec<FitReport>,
    /// Held-out correlation of each cell, from its own fit.
    pub heldout_correlation: Vec<f64>,
    /// Wall time of the whole fit (the cells train side by side), seconds.
    pub seconds: f64,
}

/// Read a recipe from `path`: a JSON object with a `recipe` key (such as the `.json` beside a
/// fitted model) or the recipe itself.
pub fn read(path: &Path) -> Result<Recipe> {
    let raw = std::fs::read_to_string(path)
        .map_err(|e| Error::Usage(format!("{}: cannot read the recipe: {e}", path.display())))?;
    let value: serde_json::Value = serde_json::from_str(&raw)
        .map_err(|e| Error::Usage(format!("{}: not JSON ({e}); expected a fit recipe", path.display())))?;
    let inner = value.get("recipe").cloned().unwrap_or(value);
    let recipe: Recipe = serde_json::from_value(inner).map_err(|e| {
        Error::Usage(format!(
            "{}: not a fit recipe ({e}); expected {{\"cells\": [settings of cell 0, 1, 2]}} with the \
             field names of the settings in a fitted model's .json",
            path.display()
        ))
    })?;
    check(&recipe).map_err(|e| Error::Usage(format!("{}: {e}", path.display())))?;
    Ok(recipe)
}

/// What a recipe must hold: one entry per cell, each a fit of its cell alone, all with the
/// same kernels and hidden nonlinearity.
fn check(recipe: &Recipe) -> std::result::Result<(), String> {
    let cells = super::fit::CELLS;
    if recipe.cells.len() != cells {
        return Err(format!("the recipe has {} cell entries; the sensor has {cells} cells", recipe.cells.len()));
    }
    let first = &recipe.cells[0];
    for (k, s) in recipe.cells.iter().enumerate() {
        if s.separate_cells {
            return Err(format!(
                "cell {k}: separate_cells does not apply in a recipe (each entry trains its cell alone)"
            ));
        }
        if s.batch == 0 || s.restarts == 0 || s.movies_every == 0 || s.epochs == 0 {
            return Err(format!("cell {k}: batch, restarts, movies_every and epochs must each be at least 1"));
        }
        if s.restarts > 1 && s.restart_epochs > s.epochs {
            return Err(format!(
                "cell {k}: restart_epochs ({}) is part of epochs ({}), so it cannot exceed it",
                s.restart_epochs, s.epochs
            ));
        }
        if s.only_cell.is_some_and(|c| c != k) {
            return Err(format!("cell {k}: only_cell is {:?}; an entry trains the cell at its place", s.only_cell));
        }
        if (s.kernels, s.hidden) != (first.kernels, first.hidden) {
            return Err(format!(
                "cell {k}: kernels {:?} and hidden {:?} must equal cell 0's ({:?}, {:?}), since the cells share \
                 one model's layers (channel counts may differ)",
                s.kernels, s.hidden, first.kernels, first.hidden
            ));
        }
    }
    Ok(())
}

/// Fit every cell by its entry of `recipe`, side by side (one thread each; their batches share
/// the rayon pool), and join them in one model; `progress` gets each epoch with its cell.
pub fn fit_recipe(
    recipe: &Recipe,
    progress: &(dyn Fn(usize, &Epoch) + Sync),
) -> Result<(tract_onnx::pb::ModelProto, RecipeReport)> {
    check(recipe).map_err(|e| Error::Usage(format!("fit recipe: {e}")))?;
    let t0 = Instant::now();
    let fits: Vec<Result<(Student, FitReport)>> = std::thread::scope(|scope| {
        let handles: Vec<_> = recipe
            .cells
            .iter()
            .enumerate()
            .map(|(k, s)| {
                let alone = FitSettings { only_cell: Some(k), ..s.clone() };
                scope.spawn(move || fit_student(&alone, &|e| progress(k, e)))
            })
            .collect();
        handles
            .into_iter()
            .map(|h| h.join().unwrap_or_else(|_| Err(Error::Usage("fit recipe: a cell's fit panicked".into()))))
            .collect()
    });
    let (mut parts, mut reports) = (Vec::new(), Vec::new());
    for fit in fits {
        let (student, report) = fit?;
        parts.push(student);
        reports.push(report);
    }
    let whole = Student::assemble(&parts)?;
    let heldout_correlation = reports.iter().enumerate().map(|(k, r)| r.heldout_correlation[k]).collect();
    Ok((whole.proto(), RecipeReport { cells: reports, heldout_correlation, seconds: t0.elapsed().as_secs_f64() }))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tiny() -> FitSettings {
        FitSettings {
            train_frames: 60,
            heldout_frames: 60,
            epochs: 1,
            batch: 8,
            channels: (2, 1),
            ..Default::default()
        }
    }

    #[test]
    fn a_recipe_reads_from_a_fitted_models_json_and_refuses_what_does_not_fit() {
        let dir = std::env::temp_dir().join(format!("sufficit-recipe-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let good = Recipe { cells: vec![tiny(), FitSettings { seed: 7, ..tiny() }, tiny()] };
        let path = dir.join("fitted.json");
        std::fs::write(&path, serde_json::json!({"schema": "sufficit/1", "recipe": good}).to_string()).unwrap();
        let read_back = read(&path).unwrap();
        assert_eq!(read_back.cells.len(), 3);
        assert_eq!(read_back.cells[1].seed, 7);
        // Missing keys take their defaults; unknown keys are refused by name.
        std::fs::write(&path, r#"{"cells": [{"epochs": 2}, {}, {}]}"#).unwrap();
        assert_eq!(read(&path).unwrap().cells[0].epochs, 2);
        std::fs::write(&path, r#"{"cells": [{"epoch": 2}, {}, {}]}"#).unwrap();
        let e = read(&path).unwrap_err().to_string();
        assert!(e.contains("fitted.json") && e.contains("epoch"), "{e}");
        std::fs::write(&path, r#"{"cells": [{}, {}]}"#).unwrap();
        assert!(read(&path).unwrap_err().to_string().contains("2 cell entries"));
        std::fs::write(&path, r#"{"cells": [{}, {"channels": [4, 2]}, {}]}"#).unwrap();
        assert!(read(&path).is_ok(), "channel counts may differ between cells");
        std::fs::write(&path, r#"{"cells": [{}, {"hidden": "relu"}, {}]}"#).unwrap();
        assert!(read(&path).unwrap_err().to_string().contains("cell 1: kernels"));
        std::fs::write(&path, r#"{"cells": [{}, {"restarts": 3, "restart_epochs": 40}, {}]}"#).unwrap();
        assert!(read(&path).unwrap_err().to_string().contains("cell 1: restart_epochs (40)"));
        std::fs::write(&path, r#"{"cells": [{}, {}, {"separate_cells": true}]}"#).unwrap();
        assert!(read(&path).unwrap_err().to_string().contains("cell 2: separate_cells"));
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn the_shipped_models_json_reads_as_its_recipe() {
        // The .json beside the shipped fit is how the model card says it is reproduced
        // (`demo-models --fit --recipe models/synthetic-sensor-fitted.json`): it must stay
        // readable as settings change, and hold one alone-fit per cell.
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("models/synthetic-sensor-fitted.json");
        let recipe = read(&path).unwrap();
        assert_eq!(recipe.cells.len(), 3);
        assert!(recipe.cells.iter().all(|s| !s.separate_cells && s.epochs > 0));
        // Only the reversal cell's entry trains on reversing movies (docs/models.md).
        let reversing: Vec<usize> = recipe.cells.iter().map(|s| s.reversal_frames).collect();
        assert!(reversing[1] > 0 && reversing[0] == 0 && reversing[2] == 0, "{reversing:?}");
    }

    #[test]
    fn a_recipe_fit_trains_every_cell_and_joins_them() {
        // How the parts join is tested in fit.rs (assembling parts); here the fits run side by
        // side and each reports its epochs under its own cell.
        let recipe = Recipe { cells: vec![tiny(), FitSettings { seed: 3, ..tiny() }, tiny()] };
        let epochs = std::sync::Mutex::new(Vec::new());
        let (model, report) = fit_recipe(&recipe, &|k, e| epochs.lock().unwrap().push((k, e.number))).unwrap();
        let mut seen = epochs.into_inner().unwrap();
        seen.sort();
        assert_eq!(seen, vec![(0, 1), (1, 1), (2, 1)]);
        assert_eq!(report.cells.len(), 3);
        assert!(report.heldout_correlation.iter().all(|r| r.is_finite()), "{:?}", report.heldout_correlation);
        let joined = crate::model::Model::from_proto(model, Path::new("joined.onnx"), &Default::default()).unwrap();
        let conv1 = joined.graph.find("conv1.weight").unwrap();
        assert_eq!(joined.graph.values[conv1].shape[0], 6, "three cells of two first-layer channels each");
    }
}
