//! The command line: argument definitions (clap) and one small function per command. Each
//! command turns its arguments into library calls and prints where it wrote its results.

mod attribute;
mod demo;
mod demo_models;
mod inspect;
mod knockout;
mod reduce;
mod report;
mod respond;
mod stimulus;
mod study;

use crate::model::{InputLayout, LoadOptions, Model};
use crate::response::check_size;
use crate::stimulus::{read_stimulus, Stimulus};
use crate::{Error, Result};
use clap::{Args, Parser, Subcommand};

/// sufficit: physiology protocols, attribution and circuit reduction for ONNX encoding models.
#[derive(Debug, Parser)]
#[command(name = "sufficit", version, about, long_about = None)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Show a model's input layout, layers, shapes, parameters and attributable hidden layers.
    Inspect(inspect::InspectArgs),
    /// Draw a physiology protocol's stimulus (movie, events, analysis windows) for a model.
    Stimulus(stimulus::StimulusArgs),
    /// Run a model on a stimulus: rates per cell and the protocol's metrics.
    Respond(respond::RespondArgs),
    /// Attribute a response to hidden units (layer conductance) and input pixels (integrated gradients).
    Attribute(attribute::AttributeArgs),
    /// Silence hidden units one at a time and rank their effect on a cell's response and metrics.
    Knockout(knockout::KnockoutArgs),
    /// Cut the network down to the smallest set of hidden units that keeps a cell's response,
    /// read their filters and nonlinearities, and export the pruned model.
    Reduce(reduce::ReduceArgs),
    /// Gather result folders into one self-contained HTML report and a Markdown summary.
    Report(report::ReportArgs),
    /// Run a whole battery from a study file (models x cells x protocols), resumably, optionally
    /// one shard of it.
    Study(study::StudyArgs),
    /// Join the results of sharded study runs into one folder and report.
    Merge(study::MergeArgs),
    /// Run the whole pipeline on the shipped demo model (synthetic sensor) and say where the
    /// results are.
    Demo(demo::DemoArgs),
    /// Write the demo models into a folder (maintainers: regenerates `models/`).
    #[command(hide = true)]
    DemoModels(demo_models::DemoModelsArgs),
}

/// Options every working command takes.
#[derive(Debug, Args)]
pub struct Common {
    /// No progress bars or summary lines.
    #[arg(long)]
    pub quiet: bool,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Random seed (noise stimuli, probes); recorded in run.json.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Memory bound, e.g. 8G (default: half of this machine's memory). Work that would exceed
    /// it is refused before it starts; when given, it also sets the batch sizes.
    #[arg(long, value_name = "SIZE")]
    pub max_memory: Option<String>,
}

/// Size the global rayon pool that every command's parallel work shares (`--threads N`; left
/// at one thread per core when not given).
fn set_threads(threads: Option<usize>) -> Result<()> {
    if let Some(n) = threads {
        rayon::ThreadPoolBuilder::new()
            .num_threads(n.max(1))
            .build_global()
            .map_err(|e| Error::Usage(format!("--threads {n}: {e}")))?;
    }
    Ok(())
}

impl Common {
    fn apply(&self) -> Result<()> {
        set_threads(self.threads)?;
        if let Some(m) = &self.max_memory {
            crate::memory::set_limit(crate::memory::parse_size(m)?, rayon::current_num_threads());
        }
        Ok(())
    }
}

/// Options shared by every command that reads a model.
#[derive(Debug, Args)]
pub struct ModelArgs {
    /// Input layout: lags-first [N,L,H,W], lags-last [N,H,W,L], volume [N,1,L,H,W] or line
    /// [N,L,P]. Detected from the input shape when not given.
    #[arg(long, value_name = "LAYOUT")]
    pub input_layout: Option<String>,
    /// Size of a symbolic input dimension other than the batch, as NAME=VALUE (repeatable).
    #[arg(long = "dim", value_name = "NAME=VALUE")]
    pub dims: Vec<String>,
}

impl ModelArgs {
    /// Turn the options into load options, checking their syntax.
    pub fn load_options(&self) -> Result<LoadOptions> {
        let layout = self.input_layout.as_deref().map(InputLayout::parse).transpose()?;
        let dims =
            self.dims
                .iter()
                .map(|d| {
                    let (name, value) = d.split_once('=').ok_or_else(|| {
                        Error::Usage(format!("--dim '{d}' must look like NAME=VALUE, e.g. --dim T=40"))
                    })?;
                    let v: usize =
                        value.trim().parse().ok().filter(|&v| v > 0).ok_or_else(|| {
                            Error::Usage(format!("--dim '{d}': the value must be a positive integer"))
                        })?;
                    Ok((name.trim().to_string(), v))
                })
                .collect::<Result<_>>()?;
        Ok(LoadOptions { layout, dims })
    }
}

/// The arguments of every command that runs a model on a stimulus folder.
#[derive(Debug, Args)]
pub struct Job {
    /// The ONNX model.
    pub model: std::path::PathBuf,
    /// A stimulus folder made by `sufficit stimulus`.
    pub stimulus: std::path::PathBuf,
    /// Output folder.
    #[arg(long)]
    pub out: std::path::PathBuf,
    #[command(flatten)]
    pub model_args: ModelArgs,
    #[command(flatten)]
    pub common: Common,
}

impl Job {
    /// Load the model and the stimulus folder and check that they fit each other.
    fn load(&self) -> Result<(Model, Stimulus)> {
        let model = Model::load(&self.model, &self.model_args.load_options()?)?;
        let stim = read_stimulus(&self.stimulus)?;
        check_size(&model, &stim.movie)?;
        Ok((model, stim))
    }
}

/// A progress bar showing `msg`, hidden with `--quiet` (and by indicatif when not on a terminal).
fn progress_bar(quiet: bool, len: u64, msg: &'static str) -> indicatif::ProgressBar {
    let bar = if quiet { indicatif::ProgressBar::hidden() } else { indicatif::ProgressBar::new(len) };
    bar.set_style(
        indicatif::ProgressStyle::with_template("{msg} {bar:40} {pos}/{len}")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    bar.set_message(msg);
    bar
}

/// Run one sufficit command in this process from its arguments (without the program name):
/// `demo` and `study` run the same code paths a user's commands do.
pub(crate) fn run_args(args: Vec<String>) -> Result<()> {
    let cli = Cli::try_parse_from(std::iter::once("sufficit".to_string()).chain(args))
        .map_err(|e| Error::Usage(format!("internal command: {e}")))?;
    run(cli)
}

/// Run the parsed command.
pub fn run(cli: Cli) -> Result<()> {
    match cli.command {
        Command::Inspect(a) => inspect::run(&a),
        Command::Stimulus(a) => {
            a.common.apply()?;
            stimulus::run(&a)
        }
        Command::Respond(a) => {
            a.job.common.apply()?;
            respond::run(&a)
        }
        Command::Attribute(a) => {
            a.job.common.apply()?;
            attribute::run(&a)
        }
        Command::Knockout(a) => {
            a.job.common.apply()?;
            knockout::run(&a)
        }
        Command::Report(a) => report::run(&a),
        Command::Study(a) => study::run_study(&a),
        Command::Merge(a) => study::run_merge(&a),
        Command::DemoModels(a) => demo_models::run(&a),
        Command::Demo(a) => {
            a.common.apply()?;
            demo::run(&a)
        }
        Command::Reduce(a) => {
            a.job.common.apply()?;
            reduce::run(&a)
        }
    }
}
