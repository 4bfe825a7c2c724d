//! `sufficit demo-models --out models/` (hidden): write the planted demo model.

use crate::Result;
use clap::Args;

/// Arguments of `demo-models`.
#[derive(Debug, Args)]
pub struct DemoModelsArgs {
    /// Output folder.
    #[arg(long, default_value = "models")]
    pub out: std::path::PathBuf,
}

/// Write the models.
pub fn run(a: &DemoModelsArgs) -> Result<()> {
    crate::demo::write_planted(&a.out)?;
    println!("wrote {}", a.out.join(crate::demo::PLANTED_FILE).display());
    Ok(())
}
