//! `sufficit inspect MODEL [--json]`.

use super::ModelArgs;
use crate::model::summary::Summary;
use crate::model::Model;
use crate::Result;
use clap::Args;
use std::path::PathBuf;

/// Arguments of `inspect`.
#[derive(Debug, Args)]
pub struct InspectArgs {
    /// The ONNX model file.
    pub model: PathBuf,
    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
    #[command(flatten)]
    pub model_args: ModelArgs,
}

/// Load the model and print its summary.
pub fn run(a: &InspectArgs) -> Result<()> {
    let model = Model::load(&a.model, &a.model_args.load_options()?)?;
    let summary = Summary::of(&model);
    if a.json {
        let text = serde_json::to_string_pretty(&summary)
            .map_err(|e| crate::Error::Usage(format!("cannot serialise the summary: {e}")))?;
        println!("{text}");
    } else {
        print!("{}", summary.to_text());
    }
    Ok(())
}
