//! Names for the stimuli a model's results were computed on. Two runs of one protocol with
//! different parameters are different experiments: the report keeps them apart and names each
//! by its protocol and the parameters that tell it from the others (e.g. `omitted-flash
//! (period_ms 150 ms)`); a protocol run once keeps its plain name.

use super::gather::{Folder, Gathered};
use super::sections::{meta_of, protocol_of, sig, stimulus_dir};
use crate::stimulus::Meta;
use serde_json::Value;
use std::collections::BTreeMap;

/// Which stimulus a result folder was computed on: its stimulus folder when run.json names one,
/// else (older results) its protocol.
pub fn stimulus_key(folder: &Folder, g: &Gathered) -> String {
    match stimulus_dir(folder, g) {
        Some(dir) => format!("stimulus {}", dir.canonicalize().unwrap_or(dir).display()),
        None => format!("protocol {}", protocol_of(folder, g)),
    }
}

/// A stimulus's protocol and its label in the report.
#[derive(Debug, Clone)]
pub struct Named {
    /// The protocol's name.
    pub protocol: String,
    /// The protocol's name, with what tells this stimulus from others of that protocol.
    pub label: String,
}

/// The label of every stimulus one model's results were computed on, by [`stimulus_key`].
#[derive(Debug, Default)]
pub struct Labels {
    by_key: BTreeMap<String, Named>,
}

impl Labels {
    /// Label the stimuli behind `folders`: the protocol's name, and where several stimuli share
    /// it, the parameters whose values differ between them (then the seed, then the folder).
    pub fn new<'a>(folders: impl IntoIterator<Item = &'a Folder>, g: &Gathered) -> Labels {
        let mut by_protocol: BTreeMap<String, BTreeMap<String, &Folder>> = BTreeMap::new();
        for f in folders {
            by_protocol.entry(protocol_of(f, g)).or_default().entry(stimulus_key(f, g)).or_insert(f);
        }
        let mut by_key = BTreeMap::new();
        for (protocol, stimuli) in by_protocol {
            if stimuli.len() == 1 {
                let named = Named { protocol: protocol.clone(), label: protocol.clone() };
                by_key.extend(stimuli.into_keys().map(|k| (k, named.clone())));
                continue;
            }
            let metas: Vec<(String, Option<Meta>)> = stimuli.into_iter().map(|(k, f)| (k, meta_of(f, g))).collect();
            let described: Vec<&Meta> = metas.iter().filter_map(|(_, m)| m.as_ref()).collect();
            let differing = differing_parameters(&described);
            let seeds_differ = described.iter().any(|m| m.seed != described[0].seed);
            for (key, meta) in metas {
                let tell = match &meta {
                    Some(m) if !differing.is_empty() => differing
                        .iter()
                        .map(|p| format!("{p} {}", shown(m.parameters.get(p))))
                        .collect::<Vec<_>>()
                        .join(", "),
                    Some(m) if seeds_differ => format!("seed {}", m.seed),
                    _ => key.clone(),
                };
                by_key.insert(key, Named { protocol: protocol.clone(), label: format!("{protocol} ({tell})") });
            }
        }
        Labels { by_key }
    }

    /// The label of the stimulus `folder` was computed on (its protocol when not labelled).
    pub fn of(&self, folder: &Folder, g: &Gathered) -> String {
        self.named(&stimulus_key(folder, g), folder, g).label
    }

    /// The protocol and label of the stimulus with [`stimulus_key`] `key`, which `folder` was
    /// computed on (its protocol for both when not labelled).
    pub fn named(&self, key: &str, folder: &Folder, g: &Gathered) -> Named {
        self.by_key.get(key).cloned().unwrap_or_else(|| {
            let protocol = protocol_of(folder, g);
            Named { label: protocol.clone(), protocol }
        })
    }
}

/// The parameters whose recorded values are not the same in every one of `metas`, by name.
fn differing_parameters(metas: &[&Meta]) -> Vec<String> {
    let mut names: Vec<&String> = metas.iter().flat_map(|m| m.parameters.keys()).collect();
    names.sort();
    names.dedup();
    names
        .into_iter()
        .filter(|name| {
            let first = metas[0].parameters.get(*name).map(|p| &p["value"]);
            metas.iter().any(|m| m.parameters.get(*name).map(|p| &p["value"]) != first)
        })
        .cloned()
        .collect()
}

/// A recorded parameter as `value unit` (`none` when a stimulus does not have it).
fn shown(recorded: Option<&Value>) -> String {
    let Some(p) = recorded else { return "none".into() };
    let value = match &p["value"] {
        Value::Array(items) => items.iter().map(number_or_text).collect::<Vec<_>>().join(","),
        v => number_or_text(v),
    };
    match p["unit"].as_str() {
        Some(unit) if !unit.is_empty() => format!("{value} {unit}"),
        _ => value,
    }
}

/// A number as its significant digits (`200`, not `200.0`), anything else as its text.
fn number_or_text(v: &Value) -> String {
    match v.as_f64() {
        Some(x) if x.fract() == 0.0 && x.abs() < 1e15 => format!("{}", x as i64),
        Some(x) => sig(x),
        None => v.as_str().map_or_else(|| v.to_string(), String::from),
    }
}
