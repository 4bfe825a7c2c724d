//! The report's sections, built from the result folders: one per protocol (stimulus strip,
//! responses, metrics), one per cell and protocol (attribution, circuit, units, fidelity,
//! knock-outs), the model summary and the run settings.

use super::doc::Block;
use super::figures::{strip_png, CircuitDiagram, Edge};
use super::gather::{canonical, Folder, Gathered};
use crate::attribution::{Heatmap, Ranking};
use crate::figure::{png, svg, Figure};
use crate::output::{read_json, read_npy};
use crate::reduction::plot::{add_curve_point, FidelityCurve, ReducedResponse, UnitFigure};
use crate::response::Responses;
use crate::stimulus::{read_meta, read_stimulus, Meta, Stimulus};
use crate::{Error, Result};
use ndarray::{Array1, Array2, Array3};
use serde_json::Value;
use std::path::{Path, PathBuf};

/// Widest heatmap drawn in the report (time bins); longer analyses are averaged into bins.
const HEATMAP_BINS: usize = 300;

/// A plot block (SVG and PNG of the same drawing).
pub fn figure(id: &str, caption: &str, chart: bool, f: &impl Figure) -> Result<Block> {
    Ok(Block::Figure { id: id.into(), caption: caption.into(), chart, svg: svg(f)?, png: png(f)? })
}

fn npy2(path: &Path) -> Result<Array2<f32>> {
    read_npy(path)?.into_dimensionality().map_err(|_| Error::input(path, "should be a 2-D array"))
}

/// Rows of a CSV file written by sufficit (header, then comma-separated fields, no quoting).
fn csv(path: &Path) -> Result<(Vec<String>, Vec<Vec<String>>)> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io("read", path, e))?;
    let mut lines = text.lines();
    let head = lines.next().unwrap_or("").split(',').map(String::from).collect();
    Ok((head, lines.map(|l| l.split(',').map(String::from).collect()).collect()))
}

/// Column `name` of a CSV as numbers (empty or unparsable fields become NaN).
fn column(head: &[String], rows: &[Vec<String>], name: &str, path: &Path) -> Result<Vec<f64>> {
    let i = head.iter().position(|h| h == name).ok_or_else(|| Error::input(path, format!("has no column '{name}'")))?;
    Ok(rows.iter().map(|r| r.get(i).and_then(|v| v.parse().ok()).unwrap_or(f64::NAN)).collect())
}

/// A number for a table: 4 significant digits, or "-" when missing.
pub fn num(v: &Value) -> String {
    match v {
        Value::Number(n) => n.as_i64().map(|i| i.to_string()).unwrap_or_else(|| sig(n.as_f64().unwrap_or(f64::NAN))),
        Value::Null => "-".into(),
        Value::String(s) => s.clone(),
        other => other.to_string(),
    }
}

/// 4 significant digits.
pub fn sig(v: f64) -> String {
    if !v.is_finite() {
        return "-".into();
    }
    if v == 0.0 {
        return "0".into();
    }
    if v.abs() < 1e-3 || v.abs() >= 1e5 {
        return format!("{v:.3e}");
    }
    let digits = (3 - v.abs().max(1e-300).log10().floor() as i32).clamp(0, 6) as usize;
    format!("{v:.digits$}")
}

/// The stimulus folder a result was computed on: the path in its run.json, or, when that folder
/// has moved (results merged or copied), the gathered stimulus folder whose last three path
/// components match it.
pub(super) fn stimulus_dir(folder: &Folder, g: &Gathered) -> Option<PathBuf> {
    let dir = folder.stimulus_dir()?;
    let tail = |p: &Path| p.components().rev().take(3).map(|c| c.as_os_str().to_owned()).collect::<Vec<_>>();
    let found = g.stimuli.get(&canonical(&dir)).map(|f| f.dir.clone()).filter(|d| d.exists());
    let moved = || (!dir.exists()).then(|| g.stimuli.values().find(|f| tail(&f.dir) == tail(&dir))).flatten();
    Some(found.or_else(|| moved().map(|f| f.dir.clone())).unwrap_or(dir))
}

/// The stimulus (movie and description) a result folder was computed on.
fn stimulus_of(folder: &Folder, g: &Gathered) -> Option<Stimulus> {
    read_stimulus(&stimulus_dir(folder, g)?).ok()
}

/// Only the description of that stimulus (frame rate, pixel size, protocol): no movie read.
pub fn meta_of(folder: &Folder, g: &Gathered) -> Option<Meta> {
    read_meta(&stimulus_dir(folder, g)?).ok()
}

/// The protocol of a result folder: its JSON's, or (older results) its stimulus's.
pub fn protocol_of(folder: &Folder, g: &Gathered) -> String {
    folder.doc["protocol"]
        .as_str()
        .map(String::from)
        .or_else(|| meta_of(folder, g).map(|m| m.protocol))
        .unwrap_or_else(|| "unknown protocol".into())
}

/// Up to 8 frames: the first frame of each kind of event, then evenly spaced frames after the
/// first event (or over the protocol when it has no events).
fn strip_frames(stim: &Stimulus) -> Vec<usize> {
    let m = &stim.meta;
    let mut kinds = std::collections::HashSet::new();
    let mut frames: Vec<usize> = m.events.iter().filter(|e| kinds.insert(e.name.as_str())).map(|e| e.frame).collect();
    let start = frames.iter().copied().min().unwrap_or(m.history_frames.min(m.frames.saturating_sub(1)));
    let free = 8usize.saturating_sub(frames.len()).max(1);
    let span = m.frames.saturating_sub(start).max(1);
    frames.extend((0..free).map(|k| start + (k * span) / free));
    frames.sort_unstable();
    frames.dedup();
    frames.truncate(8);
    frames
}

/// Section for one `respond` folder, headed by its stimulus's `label`: stimulus strip, responses with
/// events, metrics per cell.
pub fn protocol_section(id: &str, label: &str, r: &Folder, g: &Gathered) -> Result<Vec<Block>> {
    let stim = stimulus_of(r, g);
    let mut out = vec![Block::Heading { level: 3, id: id.into(), text: format!("Protocol: {label}") }];
    let rates = npy2(&r.file("responses.npy"))?;
    match &stim {
        Some(s) => {
            let m = &s.meta;
            let frames = strip_frames(s);
            let shown =
                Array3::from_shape_fn((frames.len(), m.height, m.width), |(k, y, x)| s.movie[[frames[k], y, x]]);
            let labels: Vec<String> = frames
                .iter()
                .map(|&f| {
                    let name = m.events.iter().find(|e| e.frame == f).map_or("frame", |e| e.name.as_str());
                    format!("{name} at {:.0} ms", f as f64 * 1000.0 / m.frame_rate_hz)
                })
                .collect();
            let mut bytes = Vec::new();
            strip_png(&shown, (96 / m.width.max(1)).max(1) as u32)
                .write_to(&mut std::io::Cursor::new(&mut bytes), image::ImageFormat::Png)
                .map_err(|e| Error::Usage(format!("cannot encode the stimulus strip: {e}")))?;
            out.push(Block::Image {
                id: format!("{id}-stimulus"),
                caption: format!(
                    "Stimulus snapshots, left to right: {}. Each frame {} x {} px at {} um/px ({:.0} x {:.0} um); \
                     black -1, gray 0, white +1 contrast; {} Hz.",
                    labels.join("; "),
                    m.width,
                    m.height,
                    m.pixel_size_um,
                    m.width as f64 * m.pixel_size_um,
                    m.height as f64 * m.pixel_size_um,
                    m.frame_rate_hz
                ),
                png: bytes,
            });
            out.push(figure(
                &format!("{id}-responses"),
                "Model rates of every cell over the whole stimulus; vertical lines mark events (red: the \
                 protocol's key event).",
                true,
                &Responses { rates: &rates, meta: m },
            )?);
        }
        None => out.push(Block::Para(format!(
            "The stimulus folder ({}) was not found, so the stimulus strip and the response plot are left out; \
             responses.npy holds the rates.",
            r.stimulus_dir().map_or("not recorded".into(), |p| p.display().to_string())
        ))),
    }
    out.push(metrics_table(&r.doc["metrics"]));
    Ok(out)
}

/// Metrics as rows (metric) x columns (cell); nested records are flattened as `periods[0].peak`;
/// long number arrays (filters) are pointed to, not printed.
fn metrics_table(metrics: &Value) -> Block {
    let cells = metrics["cells"].as_array().cloned().unwrap_or_default();
    let mut names: Vec<String> = Vec::new();
    let flat: Vec<Vec<(String, String)>> = cells
        .iter()
        .map(|c| {
            let mut rows = Vec::new();
            flatten("", c, &mut rows);
            rows.retain(|(k, _)| k != "cell");
            for (k, _) in &rows {
                if !names.contains(k) {
                    names.push(k.clone());
                }
            }
            rows
        })
        .collect();
    let head = std::iter::once("metric".to_string())
        .chain(cells.iter().enumerate().map(|(i, c)| format!("cell {}", c["cell"].as_u64().unwrap_or(i as u64))))
        .collect();
    let rows = names
        .iter()
        .map(|n| {
            std::iter::once(n.clone())
                .chain(flat.iter().map(|r| r.iter().find(|(k, _)| k == n).map_or("-".into(), |(_, v)| v.clone())))
                .collect()
        })
        .collect();
    Block::Table { head, rows }
}

fn flatten(prefix: &str, v: &Value, out: &mut Vec<(String, String)>) {
    match v {
        Value::Object(m) => {
            for (k, x) in m {
                let key = if prefix.is_empty() { k.clone() } else { format!("{prefix}.{k}") };
                flatten(&key, x, out);
            }
        }
        Value::Array(a) if a.iter().all(|x| x.is_number()) && a.len() > 4 => {
            out.push((prefix.into(), format!("({} values in metrics.json)", a.len())))
        }
        Value::Array(a) if a.iter().all(|x| !x.is_object()) => {
            out.push((prefix.into(), a.iter().map(num).collect::<Vec<_>>().join(", ")))
        }
        Value::Array(a) => {
            for (i, x) in a.iter().enumerate() {
                flatten(&format!("{prefix}[{i}]"), x, out);
            }
        }
        other => out.push((prefix.into(), num(other))),
    }
}

/// Attribution: heatmap, ranking, completeness residuals, baseline stability.
pub fn attribution_section(id: &str, a: &Folder, frame_ms: f64) -> Result<Vec<Block>> {
    let d = &a.doc;
    let mut out = vec![Block::Heading { level: 4, id: id.into(), text: "Which units carry the response".into() }];
    out.push(Block::Para(format!(
        "Layer conductance by integrated gradients from the {} baseline ({} quadrature, {} steps). \
         Model output summed over the analysis frames: {} at the stimulus, {} at the baseline. \
         Completeness residual (|sum of conductances - output change| / |output change|): {}.",
        d["baseline"].as_str().unwrap_or("?"),
        d["quadrature"].as_str().unwrap_or("?"),
        num(&d["steps"]),
        num(&d["f_input"]),
        num(&d["f_baseline"]),
        num(&d["completeness_residual"]),
    )));
    let layers = d["layers"].as_array().cloned().unwrap_or_default();
    let labels: Vec<String> = layers
        .iter()
        .flat_map(|l| {
            let name = l["name"].as_str().unwrap_or("?").to_string();
            (0..l["channels"].as_u64().unwrap_or(0)).map(move |c| format!("{name}:{c}"))
        })
        .collect();
    let time = npy2(&a.file("conductance_time.npy"))?;
    if time.nrows() != labels.len() {
        return Err(Error::input(
            a.file("conductance_time.npy"),
            format!("has {} rows but attribution.json lists {} units", time.nrows(), labels.len()),
        ));
    }
    let first = d.pointer("/target/frames/0").and_then(Value::as_u64).unwrap_or(0) as usize;
    let last = (d.pointer("/target/frames/1").and_then(Value::as_u64).unwrap_or(time.ncols() as u64) as usize)
        .min(time.ncols())
        .max(first + 1);
    let bin = (last - first).div_ceil(HEATMAP_BINS).max(1);
    let bins = (last - first).div_ceil(bin);
    let rows: Vec<(String, Vec<f32>)> = labels
        .iter()
        .zip(time.outer_iter())
        .map(|(l, r)| {
            let v = (0..bins)
                .map(|b| {
                    let (s, e) = (first + b * bin, (first + (b + 1) * bin).min(last));
                    r.slice(ndarray::s![s..e]).mean().unwrap_or(0.0)
                })
                .collect();
            (l.clone(), v)
        })
        .collect();
    out.push(figure(
        &format!("{id}-heatmap"),
        &format!(
            "Conductance of every unit over the analysis frames ({} ms per column{}); vermilion drives the \
             cell up, blue down; white is zero.",
            sig(bin as f64 * frame_ms),
            if bin > 1 { ", averaged" } else { "" }
        ),
        true,
        &Heatmap { rows: &rows, first: 0, last: bins, frame_ms: bin as f64 * frame_ms },
    )?);
    let ranked: Vec<(String, f64)> = d["units"]
        .as_array()
        .map(|u| {
            u.iter()
                .take(24)
                .map(|x| {
                    (
                        format!("{}:{}", x["layer"].as_str().unwrap_or("?"), x["channel"]),
                        x["conductance"].as_f64().unwrap_or(0.0),
                    )
                })
                .collect()
        })
        .unwrap_or_default();
    out.push(figure(
        &format!("{id}-ranking"),
        "Units ranked by |conductance| (signed).",
        true,
        &Ranking { units: &ranked },
    )?);
    out.push(Block::Table {
        head: vec!["layer".into(), "units".into(), "completeness residual".into()],
        rows: layers
            .iter()
            .map(|l| {
                vec![l["name"].as_str().unwrap_or("?").into(), num(&l["channels"]), num(&l["completeness_residual"])]
            })
            .collect(),
    });
    let agreement = d["baseline_agreement"].as_array().cloned().unwrap_or_default();
    if agreement.is_empty() {
        out.push(Block::Para(
            "Baseline stability: only one baseline was run, so the ranking's stability was not measured \
             (attribute --compare-baselines measures it)."
                .into(),
        ));
    } else {
        out.push(Block::Para(format!(
            "Baseline stability: Kendall tau between the unit ranking from the {} baseline and from each other baseline \
             (1 = same order).",
            d["baseline"].as_str().unwrap_or("?")
        )));
        out.push(Block::Table {
            head: vec!["baseline".into(), "Kendall tau".into(), "completeness residual".into()],
            rows: agreement
                .iter()
                .map(|x| vec![num(&x["baseline"]), num(&x["kendall_tau"]), num(&x["completeness_residual"])])
                .collect(),
        });
    }
    Ok(out)
}

/// Reduction: circuit diagram, fidelity, kept units with their filters and nonlinearities,
/// full vs reduced response, fidelity curve.
pub fn reduction_section(id: &str, r: &Folder, meta: Option<&Meta>) -> Result<Vec<Block>> {
    let d = &r.doc;
    let mut out =
        vec![Block::Heading { level: 4, id: id.into(), text: "The smallest circuit that keeps the response".into() }];
    out.push(Block::Para(format!(
        "Kept {} of {} units (target: {} {} with the other units clamped to their {} value). Fidelity of the \
         reduced circuit: fraction of variance explained {}, peak amplitude error {}, peak timing error {} ms. \
         Exported as reduced.onnx (largest relative difference from the full model's reduced run: engine {}, tract {}).",
        num(&d["size"]["kept"]),
        num(&d["size"]["of"]),
        d["target"]["metric"].as_str().unwrap_or("?"),
        num(&d["target"]["fidelity"]),
        d["target"]["clamp"].as_str().unwrap_or("?"),
        num(&d["fidelity"]["fve"]),
        num(&d["fidelity"]["peak_amplitude_error"]),
        num(&d["fidelity"]["peak_timing_error_ms"]),
        num(&d["export"]["max_relative_difference_engine"]),
        num(&d["export"]["max_relative_difference_tract"]),
    )));
    let edges: Vec<Edge> = d["edges"]
        .as_array()
        .map(|e| e.iter().map(|x| (num(&x["from"]), num(&x["to"]), x["weight"].as_f64().unwrap_or(0.0))).collect())
        .unwrap_or_default();
    if !edges.is_empty() {
        out.push(figure(
            &format!("{id}-circuit"),
            "The reduced circuit: edges carry the conductance from one kept unit to the next (line width), \
             sign by line style and colour.",
            false,
            &CircuitDiagram { edges: &edges },
        )?);
    }
    let units = d["units"].as_array().cloned().unwrap_or_default();
    out.push(Block::Table {
        head: [
            "unit",
            "sign",
            "conductance",
            "knock-out rank",
            "relative RMS change when silenced",
            "threshold",
            "gain",
            "rank-1 share",
        ]
        .map(String::from)
        .to_vec(),
        rows: units
            .iter()
            .map(|u| {
                let filt = if u["kernel"].is_object() { &u["kernel"] } else { &u["effective_filter"] };
                vec![
                    format!("{}:{}", num(&u["layer"]), num(&u["channel"])),
                    num(&u["sign"]),
                    num(&u["conductance"]),
                    num(&u["knockout"]["rank"]),
                    num(&u["knockout"]["relative_rms_change"]),
                    num(&u["nonlinearity"]["threshold"]),
                    num(&u["nonlinearity"]["gain"]),
                    num(&filt["rank_one_share"]),
                ]
            })
            .collect(),
    });
    let (pixel_um, frame_ms) = meta.map_or((1.0, 1.0), |m| (m.pixel_size_um, 1000.0 / m.frame_rate_hz));
    for u in &units {
        let label = format!("{}:{}", num(&u["layer"]), num(&u["channel"]));
        let file = |k: &str| u["files"][k].as_str().map(|f| r.file(f));
        let (Some(sp), Some(tm)) = (file("spatial"), file("temporal")) else { continue };
        let spatial = npy2(&sp)?;
        let temporal: Array1<f32> =
            read_npy(&tm)?.into_dimensionality().map_err(|_| Error::input(&tm, "should be a 1-D array"))?;
        let curve = match file("nonlinearity").filter(|p| p.exists()) {
            Some(p) => {
                let (h, rows) = csv(&p)?;
                Some((column(&h, &rows, "generator", &p)?, column(&h, &rows, "activation", &p)?))
            }
            None => None,
        };
        let what = if u["kernel"].is_object() { "kernel" } else { "effective filter" };
        out.push(figure(
            &format!("{id}-unit-{}", label.replace(':', "-")),
            &format!(
                "{label} ({}): spatial map and temporal filter of its {what} (rank-1 parts), and its nonlinearity{}.",
                num(&u["sign"]),
                if u["nonlinearity"]["kind"].as_str() == Some("exact") {
                    " (exact, through the model's own activation)"
                } else {
                    " (fitted scaled softplus)"
                }
            ),
            true,
            &UnitFigure {
                title: format!("{label} ({}; {what})", num(&u["sign"])),
                spatial: &spatial,
                temporal: temporal.as_slice().unwrap_or(&[]),
                curve: curve.as_ref().map(|(g, y)| (g.as_slice(), y.as_slice())),
                pixel_um,
                frame_ms,
            },
        )?);
    }
    let p = r.file("reduced_response.csv");
    if p.exists() {
        let (h, rows) = csv(&p)?;
        let (times, full, reduced) =
            (column(&h, &rows, "time_ms", &p)?, column(&h, &rows, "full", &p)?, column(&h, &rows, "reduced", &p)?);
        let cell = d["target"]["cell"].as_u64().unwrap_or(0) as usize;
        out.push(figure(
            &format!("{id}-reduced"),
            &format!("Full model and reduced circuit, cell {cell}, over the analysis frames (fidelity above)."),
            true,
            &ReducedResponse { times_ms: &times, full: &full, reduced: &reduced, cell },
        )?);
    }
    let p = r.file("fidelity_curve.csv");
    if p.exists() {
        let (h, rows) = csv(&p)?;
        let (size, fve) = (column(&h, &rows, "size", &p)?, column(&h, &rows, "fve", &p)?);
        let at = |name: &str| h.iter().position(|x| x == name);
        let (li, vi, pi) = (at("layer"), at("level"), at("phase"));
        let mut series = Vec::new();
        for (k, row) in rows.iter().enumerate() {
            let field = |i: Option<usize>| i.and_then(|i| row.get(i)).cloned().unwrap_or_default();
            add_curve_point(
                &mut series,
                format!("{} {} ({})", field(li), field(vi), field(pi)),
                size[k] as usize,
                fve[k],
            );
        }
        out.push(figure(
            &format!("{id}-fidelity"),
            "Fidelity against the number of kept units, every size the search evaluated; the dashed line is the target.",
            true,
            &FidelityCurve { series: &series, target: d["target"]["fidelity"].as_f64().unwrap_or(0.9) },
        )?);
    }
    Ok(out)
}

/// A knock-out table (top 12 rows) from a knockouts.json document.
pub fn knockout_table(doc: &Value) -> Block {
    let rows = doc["knockouts"]
        .as_array()
        .map(|k| {
            k.iter()
                .take(12)
                .map(|x| {
                    vec![
                        num(&x["rank"]),
                        x["units"]
                            .as_array()
                            .map(|u| u.iter().map(num).collect::<Vec<_>>().join(", "))
                            .unwrap_or_default(),
                        num(&x["relative_rms_change"]),
                        num(&x["fraction_variance_explained"]),
                        num(&x["mean_full"]),
                        num(&x["mean_silenced"]),
                    ]
                })
                .collect()
        })
        .unwrap_or_default();
    Block::Table {
        head: [
            "rank",
            "silenced units",
            "relative RMS change",
            "FVE of silenced vs full",
            "mean rate, full",
            "mean rate, silenced",
        ]
        .map(String::from)
        .to_vec(),
        rows,
    }
}

/// Run settings of every folder, one collapsible table each.
pub fn settings_section(folders: &[&Folder]) -> Vec<Block> {
    folders
        .iter()
        .filter_map(|f| {
            let run = f.run.as_ref()?;
            let mut rows = vec![
                vec!["tool".to_string(), num(&run["tool"])],
                vec!["command".into(), num(&run["command"])],
                vec!["seed".into(), num(&run["seed"])],
            ];
            if let Some(m) = run["settings"].as_object() {
                rows.extend(m.iter().map(|(k, v)| vec![k.clone(), if v.is_string() { num(v) } else { v.to_string() }]));
            }
            if let Some(t) = run["timings"].as_array() {
                rows.extend(t.iter().map(|x| vec![format!("time: {}", num(&x[0])), format!("{} s", num(&x[1]))]));
            }
            Some(Block::Details {
                summary: format!("{} ({})", f.dir.display(), num(&run["command"])),
                blocks: vec![Block::Table { head: vec!["setting".into(), "value".into()], rows }],
            })
        })
        .collect()
}

/// The model summary (as `inspect` prints it), if the model file named in run.json is readable.
pub fn model_summary(folders: &[&Folder]) -> Option<String> {
    let path = folders.iter().filter_map(|f| f.model_path()).find(|p| p.exists())?;
    let model = crate::model::Model::load(&path, &crate::model::LoadOptions::default()).ok()?;
    Some(crate::model::summary::Summary::of(&model).to_text())
}

/// A JSON file next to a result (used for the knock-out tables of reduction folders).
pub fn sibling_json(folder: &Folder, name: &str) -> Option<Value> {
    let p = folder.file(name);
    p.exists().then(|| read_json(&p).ok()).flatten()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_keep_four_significant_digits() {
        assert_eq!(sig(0.94123), "0.9412");
        assert_eq!(sig(123.456), "123.5");
        assert_eq!(sig(1.5e-5), "1.500e-5");
        assert_eq!(num(&serde_json::json!(12)), "12");
    }

    #[test]
    fn nested_metrics_flatten_into_rows() {
        let m =
            serde_json::json!({"cells": [{"cell": 0, "a": 1.5, "periods": [{"peak": 2.0}], "filter": [1,2,3,4,5,6]}]});
        let Block::Table { head, rows } = metrics_table(&m) else { panic!() };
        assert_eq!(head, vec!["metric", "cell 0"]);
        let names: Vec<&str> = rows.iter().map(|r| r[0].as_str()).collect();
        assert_eq!(names, vec!["a", "filter", "periods[0].peak"]);
        assert_eq!(rows[1][1], "(6 values in metrics.json)");
    }
}
