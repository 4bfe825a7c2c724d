//! The report: every result folder under the given paths gathered (by schema), grouped by
//! model, and written as one self-contained `report.html`, a `summary.md` with PNG figures, and
//! `findings.json` (the plain-sentence answers with the JSON source of every number).

pub mod doc;
pub mod figures;
pub mod findings;
pub mod gather;
pub mod ground_truth;
pub mod labels;
pub mod sections;

use crate::output::OutputDir;
use crate::Result;
use doc::Block;
use findings::Finding;
use gather::{Folder, Gathered, Kind};
use labels::{stimulus_key, Labels, Named};
use rayon::prelude::*;
use sections::meta_of;
use std::path::PathBuf;

/// The caution every report carries.
pub const CAUTION: &str = "The circuits, filters and knock-out candidates in this report are properties of the \
    fitted model, derived by computation on it. They are hypotheses for experiments, not findings about the \
    tissue: every knock-out prediction must be tested in the preparation, and animal work follows local \
    ethics approval and licensed practice.";

/// What was written.
#[derive(Debug)]
pub struct Written {
    /// The plain-sentence findings.
    pub findings: Vec<Finding>,
    /// Warnings for the user (several models mixed, folders left out).
    pub warnings: Vec<String>,
    /// Anchor ids of every section, in order.
    pub sections: Vec<String>,
}

/// One cell and protocol's result folders.
#[derive(Default)]
struct CellResults<'a> {
    attribution: Vec<&'a Folder>,
    reduction: Vec<&'a Folder>,
    knockouts: Vec<&'a Folder>,
}

/// Slug for anchors: lower-case letters and digits, one hyphen for each run of anything else.
fn slug(s: &str) -> String {
    let mut out = String::new();
    for c in s.chars() {
        if c.is_ascii_alphanumeric() {
            out.push(c.to_ascii_lowercase());
        } else if !out.ends_with('-') {
            out.push('-');
        }
    }
    out.trim_end_matches('-').to_string()
}

/// Build the report's blocks and findings from gathered results.
pub fn compose(g: &Gathered) -> Result<(Vec<Block>, Vec<Finding>)> {
    let mut blocks = vec![Block::Caution(CAUTION.into())];
    let mut all_findings = Vec::new();
    let several = g.by_model.len() > 1;
    for (m, (sha, folders)) in g.by_model.iter().enumerate() {
        let p = format!("m{}", m + 1);
        let refs: Vec<&Folder> = folders.iter().collect();
        if several {
            blocks.push(Block::Heading {
                level: 1,
                id: p.clone(),
                text: format!("Model {} (SHA-256 {})", m + 1, &sha[..12.min(sha.len())]),
            });
        }
        // Cells and stimuli with analyses: one section per cell and stimulus, named by the
        // stimulus's label (its protocol, and what tells it from others of that protocol).
        let labels = Labels::new(folders.iter(), g);
        let mut cells: Vec<((usize, String), Named, CellResults)> = Vec::new();
        for f in folders.iter().filter(|f| matches!(f.kind, Kind::Attribution | Kind::Reduction | Kind::Knockouts)) {
            let Some(cell) = f.cell() else { continue };
            let key = (cell, stimulus_key(f, g));
            let i = match cells.iter().position(|(k, _, _)| *k == key) {
                Some(i) => i,
                None => {
                    let named = labels.named(&key.1, f, g);
                    cells.push((key, named, CellResults::default()));
                    cells.len() - 1
                }
            };
            let slot = &mut cells[i].2;
            match f.kind {
                Kind::Attribution => slot.attribution.push(f),
                Kind::Reduction => slot.reduction.push(f),
                _ => slot.knockouts.push(f),
            }
        }
        cells.sort_by(|a, b| (a.0 .0, &a.1.label).cmp(&(b.0 .0, &b.1.label)));

        blocks.push(Block::Heading {
            level: 2,
            id: format!("{p}-findings"),
            text: "What the model does, in sentences".into(),
        });
        for ((cell, _), named, r) in &cells {
            let knock = r.knockouts.first().copied();
            let f = findings::findings(
                *cell,
                &named.protocol,
                &named.label,
                r.reduction.first().copied(),
                knock,
                r.attribution.first().copied(),
            );
            blocks.extend(f.iter().map(|x| Block::Finding(x.text.clone())));
            all_findings.extend(f);
        }
        if cells.is_empty() {
            blocks
                .push(Block::Para("No attribution, reduction or knock-out results were found for this model.".into()));
        }

        blocks.push(Block::Heading { level: 2, id: format!("{p}-model"), text: "Model".into() });
        blocks.push(Block::Para(format!("Model file SHA-256: {sha}.")));
        match sections::model_summary(&refs) {
            Some(text) => blocks.push(Block::Pre(text)),
            None => blocks.push(Block::Para(
                "The model file named in run.json is not readable here, so its summary is left out.".into(),
            )),
        }

        let responses: Vec<&Folder> = folders.iter().filter(|f| f.kind == Kind::Responses).collect();
        if !responses.is_empty() {
            blocks.push(Block::Heading {
                level: 2,
                id: format!("{p}-protocols"),
                text: "Protocols and responses".into(),
            });
            let named: Vec<(String, &Folder)> = responses.iter().map(|r| (labels.of(r, g), *r)).collect();
            let ids = distinct(named.iter().map(|(label, _)| format!("{p}-protocol-{}", slug(label))));
            let parts: Vec<Vec<Block>> = named
                .par_iter()
                .zip(ids)
                .map(|((label, r), id)| sections::protocol_section(&id, label, r, g))
                .collect::<Result<_>>()?;
            blocks.extend(parts.into_iter().flatten());
        }

        if !cells.is_empty() {
            blocks.push(Block::Heading {
                level: 2,
                id: format!("{p}-cells"),
                text: "Cells: attribution, circuit, knock-outs".into(),
            });
            let ids = distinct(cells.iter().map(|((cell, _), n, _)| format!("{p}-cell-{cell}-{}", slug(&n.label))));
            let parts: Vec<Vec<Block>> = cells
                .par_iter()
                .zip(ids)
                .map(|(((cell, _), n, r), id)| cell_section(&id, *cell, &n.label, r, g))
                .collect::<Result<_>>()?;
            blocks.extend(parts.into_iter().flatten());
        }

        for (i, f) in folders.iter().filter(|f| f.kind == Kind::GroundTruth).enumerate() {
            blocks.extend(ground_truth::section(&numbered(&format!("{p}-recovered"), i), f)?);
        }

        blocks.push(Block::Heading { level: 2, id: format!("{p}-settings"), text: "Run settings".into() });
        blocks.extend(sections::settings_section(&refs));
    }
    Ok((blocks, all_findings))
}

/// Everything about one cell and protocol.
fn cell_section(id: &str, cell: usize, protocol: &str, r: &CellResults, g: &Gathered) -> Result<Vec<Block>> {
    let mut out = vec![Block::Heading { level: 3, id: id.into(), text: format!("Cell {cell}: {protocol}") }];
    for (i, a) in r.attribution.iter().enumerate() {
        let frame_ms = a.doc["frame_rate_hz"]
            .as_f64()
            .or_else(|| meta_of(a, g).map(|m| m.frame_rate_hz))
            .map_or(f64::NAN, |hz| 1000.0 / hz);
        out.extend(sections::attribution_section(&numbered(&format!("{id}-attribution"), i), a, frame_ms)?);
    }
    for (i, d) in r.reduction.iter().enumerate() {
        let meta = meta_of(d, g);
        out.extend(sections::reduction_section(&numbered(&format!("{id}-circuit"), i), d, meta.as_ref())?);
    }
    let tables: Vec<(String, serde_json::Value)> = if r.knockouts.is_empty() {
        r.reduction
            .iter()
            .filter_map(|d| {
                sections::sibling_json(d, "knockouts.json").map(|j| (format!("kept units, {}", d.dir.display()), j))
            })
            .collect()
    } else {
        r.knockouts.iter().map(|k| (format!("every unit, {}", k.dir.display()), k.doc.clone())).collect()
    };
    for (i, (what, doc)) in tables.iter().enumerate() {
        out.push(Block::Heading {
            level: 4,
            id: numbered(&format!("{id}-knockouts"), i),
            text: "Knock-out candidates".into(),
        });
        out.push(Block::Para(format!(
            "Units silenced one set at a time ({what}; clamped to their {} value), ranked by how much the cell's \
             response changes.",
            doc["clamp"].as_str().unwrap_or("baseline")
        )));
        out.push(sections::knockout_table(doc));
    }
    Ok(out)
}

/// The anchor ids `bases`, each made distinct by [`numbered`] when an earlier one is the same.
fn distinct(bases: impl Iterator<Item = String>) -> Vec<String> {
    let mut seen: std::collections::BTreeMap<String, usize> = Default::default();
    bases
        .map(|base| {
            let n = seen.entry(base.clone()).or_default();
            *n += 1;
            numbered(&base, *n - 1)
        })
        .collect()
}

/// `base` for the first of a kind, `base-2`, `base-3`... after.
fn numbered(base: &str, i: usize) -> String {
    if i == 0 {
        base.into()
    } else {
        format!("{base}-{}", i + 1)
    }
}

/// Gather, compose and write the report into `out`.
pub fn write(inputs: &[PathBuf], out: &std::path::Path) -> Result<Written> {
    let g = gather::gather(inputs)?;
    let (blocks, findings) = compose(&g)?;
    let title = "sufficit report";
    let dir = OutputDir::create(out)?;
    for (name, bytes) in doc::pngs(&blocks) {
        dir.write_bytes(&format!("figures/{name}"), bytes)?;
    }
    dir.write_json("findings.json", &serde_json::json!({"schema": "sufficit/1", "findings": findings}))?;
    dir.write_bytes("summary.md", doc::markdown(title, &blocks).as_bytes())?;
    dir.write_bytes("report.html", doc::html(title, &blocks).as_bytes())?;
    let sections = section_ids(&blocks);
    Ok(Written { findings, warnings: g.warnings, sections })
}

fn section_ids(blocks: &[Block]) -> Vec<String> {
    blocks
        .iter()
        .flat_map(|b| match b {
            Block::Heading { id, .. } => vec![id.clone()],
            Block::Details { blocks, .. } => section_ids(blocks),
            _ => vec![],
        })
        .collect()
}
