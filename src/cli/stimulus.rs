//! `sufficit stimulus PROTOCOL [NAME=VALUE ...] --out DIR`, `--list`, `--describe PROTOCOL`.

use super::{Common, ModelArgs};
use crate::model::Model;
use crate::output::{OutputDir, RunRecord};
use crate::stimulus::{protocols, write_stimulus, Canvas, Params, Stimulus};
use crate::{Error, Result};
use clap::Args;
use serde_json::json;
use std::path::PathBuf;
use std::time::Instant;

/// Arguments of `stimulus`.
#[derive(Debug, Args)]
pub struct StimulusArgs {
    /// Protocol name (see --list).
    pub protocol: Option<String>,
    /// Protocol parameters as NAME=VALUE (lists: NAME=1,2,3); see --describe.
    pub params: Vec<String>,
    /// List the protocols.
    #[arg(long)]
    pub list: bool,
    /// Show a protocol's parameters with units, defaults, ranges and sources.
    #[arg(long, value_name = "PROTOCOL")]
    pub describe: Option<String>,
    /// Draw at this model's input size and lag count.
    #[arg(long)]
    pub model: Option<PathBuf>,
    /// Frame size HxW in pixels (instead of --model).
    #[arg(long, value_name = "HxW")]
    pub size: Option<String>,
    /// Lags per model window (with --size).
    #[arg(long)]
    pub lags: Option<usize>,
    /// Display frame rate in Hz (common practice for fitted retina models: 100 Hz, 10 ms bins).
    #[arg(long, default_value_t = 100.0)]
    pub frame_rate: f64,
    /// Size of one pixel on the sensor surface in micrometres (common practice: 50 um).
    #[arg(long, default_value_t = 50.0)]
    pub pixel_um: f64,
    /// Output folder.
    #[arg(long)]
    pub out: Option<PathBuf>,
    #[command(flatten)]
    pub model_args: ModelArgs,
    #[command(flatten)]
    pub common: Common,
}

fn canvas(a: &StimulusArgs) -> Result<Canvas> {
    let (height, width, lags) = match (&a.model, &a.size) {
        (Some(m), None) => {
            let model = Model::load(m, &a.model_args.load_options()?)?;
            let b = model.binding;
            (b.height, b.width, a.lags.unwrap_or(b.lags))
        }
        (None, Some(s)) => {
            let (h, w) = s
                .split_once(['x', 'X'])
                .and_then(|(h, w)| Some((h.trim().parse().ok()?, w.trim().parse().ok()?)))
                .ok_or_else(|| Error::Usage(format!("--size '{s}' must look like HEIGHTxWIDTH, e.g. 50x50")))?;
            let lags = a
                .lags
                .ok_or_else(|| Error::Usage("--size needs --lags (the model's window length in frames)".into()))?;
            (h, w, lags)
        }
        (Some(_), Some(_)) => return Err(Error::Usage("give either --model or --size, not both".into())),
        (None, None) => {
            return Err(Error::Usage(
                "give --model MODEL.onnx (or --size HxW --lags L) so the stimulus fits the model".into(),
            ))
        }
    };
    let c = Canvas { height, width, lags, frame_rate_hz: a.frame_rate, pixel_um: a.pixel_um };
    c.validate()?;
    Ok(c)
}

/// List, describe, or draw and write a stimulus.
pub fn run(a: &StimulusArgs) -> Result<()> {
    if a.list {
        for p in protocols::all() {
            println!("{:<22} {}", p.name(), p.summary());
        }
        return Ok(());
    }
    if let Some(name) = &a.describe {
        print!("{}", protocols::describe(protocols::find(name)?));
        return Ok(());
    }
    let name = a
        .protocol
        .as_deref()
        .ok_or_else(|| Error::Usage("name a protocol (sufficit stimulus --list shows them)".into()))?;
    let protocol = protocols::find(name)?;
    let out = a.out.as_ref().ok_or_else(|| Error::Usage("give --out DIR for the stimulus folder".into()))?;
    let started = Instant::now();
    let params = Params::parse(name, protocol.specs(), &a.params)?;
    let c = canvas(a)?;
    let drawn = protocol.draw(&params, &c, a.common.seed)?;
    let stim = Stimulus::assemble(protocol.name(), &params, &c, a.common.seed, drawn);
    write_stimulus(&stim, out)?;
    let mut record = RunRecord::new(
        "stimulus",
        a.model.as_deref(),
        json!({"protocol": name, "parameters": stim.meta.parameters, "canvas": c, "arguments": a.params}),
        a.common.seed,
    )?;
    record.timings.push(("draw_and_write".into(), started.elapsed().as_secs_f64()));
    OutputDir::create(out)?.write_json("run.json", &record)?;
    if !a.common.quiet {
        println!("{} frames ({}x{} px) written to {}", stim.meta.frames, c.height, c.width, out.display());
    }
    Ok(())
}
