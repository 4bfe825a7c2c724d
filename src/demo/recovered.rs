//! Recovered vs planted: for each demo cell, what sufficit's reduction found in a model next to
//! the pathways planted in the synthetic sensor. The top-ranked first-layer unit of the cell's
//! subcircuit (largest |conductance|) is matched to the planted pathway whose filter it
//! resembles most: the correlation of the two temporal filters (each the rank-one part of its
//! spatiotemporal kernel, signed so the spatial map's peak is positive, so an OFF filter is the
//! negative of an ON one) and whether the unit's sign on the cell is the planted sign.
//!
//! A fitted model may spread one pathway over several units, so each planted pathway is also
//! compared with the best least-squares combination of all the kept first-layer units' temporal
//! filters (`span_correlation`), next to the value a random filter would reach (`span_chance`).

use super::planted::{kernel, PATHWAYS};
use crate::reduction::filters::separate;
use crate::response::measure::correlation;
use crate::{Error, Result};
use nalgebra::{DMatrix, DVector};
use serde::Serialize;
use serde_json::Value;
use std::path::Path;

/// The planted pathways of each cell (by output index): first-layer channel and its sign on
/// the cell (true = excitatory), summed over space as a unit's sign is (its path gradient
/// summed over positions). See `planted.rs` for how each is built.
pub const PLANTED: [&[(usize, bool)]; 3] = [
    // Resonant excitation, fast ON inhibition.
    &[(2, true), (3, false)],
    // Each direction's pool excites, its delayed copy inhibits.
    &[(4, true), (5, false), (6, true), (7, false)],
    // ON and OFF subunits: excitatory in the centre, inhibitory in the surround, which weighs
    // 1.25 x the centre, so inhibitory summed over space.
    &[(0, false), (1, false)],
];

/// A filter correlation at or above this counts as recovered (issue criterion).
pub const RECOVERED_R: f64 = 0.8;

/// One planted pathway as the comparison shows it.
#[derive(Debug, Clone, Serialize)]
pub struct PlantedPathway {
    /// First-layer channel in the planted model.
    pub channel: usize,
    /// Its name.
    pub name: &'static str,
    /// "excitatory" or "inhibitory" on the cell.
    pub sign: &'static str,
    /// Correlation of its temporal filter with the recovered unit's.
    pub filter_correlation: f64,
    /// Correlation of its temporal filter with the best least-squares combination (plus a
    /// constant) of the temporal filters of all the subcircuit's first-layer units: how well the
    /// kept units together carry it when no single one does.
    pub span_correlation: f64,
}

/// One cell's comparison.
#[derive(Debug, Clone, Serialize)]
pub struct Recovery {
    /// Cell (output index).
    pub cell: usize,
    /// The cell's planted pathways, each with its filter's correlation to the recovered unit's.
    pub planted: Vec<PlantedPathway>,
    /// The recovered unit: layer and channel of the model.
    pub unit_layer: String,
    /// Channel of the recovered unit.
    pub unit_channel: u64,
    /// Its conductance on the cell's response.
    pub unit_conductance: f64,
    /// Its sign on the cell.
    pub unit_sign: String,
    /// Its temporal filter (oldest lag first).
    pub unit_temporal: Vec<f32>,
    /// The best-matching planted pathway's channel.
    pub matched_channel: usize,
    /// The best-matching planted pathway's temporal filter (oldest lag first).
    pub matched_temporal: Vec<f32>,
    /// The correlation of the two filters.
    pub filter_correlation: f64,
    /// Whether the unit's sign on the cell is the matched pathway's.
    pub sign_matches: bool,
    /// `filter_correlation >= RECOVERED_R` and the sign matches.
    pub recovered: bool,
    /// First-layer units kept in the subcircuit (the combination's size).
    pub kept_first_layer_units: usize,
    /// The span correlation a filter unrelated to the units would reach by chance:
    /// sqrt(k / (lags - 1)) for k units (a random direction's squared cosine with a fixed
    /// k-dimensional subspace of R^n averages k / n; centring removes one dimension).
    pub span_chance: f64,
}

/// The rank-one temporal filter of planted pathway `p` (same normalisation as the reduction's).
pub fn planted_temporal(p: usize) -> Vec<f32> {
    separate(kernel(p)).temporal
}

/// Correlation of `target` with its least-squares fit by `filters` plus a constant: the norm of
/// the centred target's projection on the span of the centred filters over the centred
/// target's norm. NaN when the target is constant.
pub fn span_correlation(filters: &[Vec<f32>], target: &[f32]) -> f64 {
    let centred = |v: &[f32]| {
        let mean = v.iter().map(|&x| x as f64).sum::<f64>() / v.len().max(1) as f64;
        v.iter().map(|&x| x as f64 - mean).collect::<Vec<f64>>()
    };
    let n = target.len();
    let t = DVector::from_vec(centred(target));
    let columns: Vec<DVector<f64>> =
        filters.iter().filter(|f| f.len() == n).map(|f| DVector::from_vec(centred(f))).collect();
    if columns.is_empty() {
        return 0.0;
    }
    let a = DMatrix::from_columns(&columns);
    let fit = match a.clone().svd(true, true).solve(&t, 1e-9) {
        Ok(x) => a * x,
        Err(_) => return f64::NAN,
    };
    fit.norm() / t.norm()
}

fn sign_word(excitatory: bool) -> &'static str {
    if excitatory {
        "excitatory"
    } else {
        "inhibitory"
    }
}

/// Compare a reduction (`subcircuit.json` of `cell`, read from `path` for messages) with the
/// planted pathways of that cell.
pub fn compare(cell: usize, subcircuit: &Value, path: &Path) -> Result<Recovery> {
    let planted = PLANTED.get(cell).ok_or_else(|| Error::input(path, format!("cell {cell} is not a demo cell")))?;
    let units = subcircuit["units"].as_array().ok_or_else(|| Error::input(path, "has no 'units' list"))?;
    // First-layer units carry their convolution kernel; each one's temporal filter is read once.
    let first: Vec<&Value> = units.iter().filter(|u| u["kernel"].is_object()).collect();
    let kept: Vec<Vec<f32>> = first
        .iter()
        .map(|u| {
            Ok(u["kernel"]["temporal"]
                .as_array()
                .ok_or_else(|| Error::input(path, "a unit's kernel has no temporal filter"))?
                .iter()
                .map(|v| v.as_f64().unwrap_or(f64::NAN) as f32)
                .collect())
        })
        .collect::<Result<_>>()?;
    let conductance = |u: &Value| u["conductance"].as_f64().unwrap_or(0.0).abs();
    let top_index = (0..first.len())
        .max_by(|&a, &b| conductance(first[a]).total_cmp(&conductance(first[b])))
        .ok_or_else(|| Error::input(path, "keeps no first-layer unit: nothing to compare with the planted pathways"))?;
    let (top, temporal) = (first[top_index], kept[top_index].clone());
    let as64 = |v: &[f32]| v.iter().map(|&x| x as f64).collect::<Vec<_>>();
    let mut filters: Vec<Vec<f32>> = planted.iter().map(|&(p, _)| planted_temporal(p)).collect();
    let pathways: Vec<PlantedPathway> = planted
        .iter()
        .zip(&filters)
        .map(|(&(p, excitatory), filter)| PlantedPathway {
            channel: p,
            name: PATHWAYS[p],
            sign: sign_word(excitatory),
            filter_correlation: correlation(&as64(filter), &as64(&temporal)),
            span_correlation: span_correlation(&kept, filter),
        })
        .collect();
    let best = (0..pathways.len())
        .max_by(|&a, &b| pathways[a].filter_correlation.total_cmp(&pathways[b].filter_correlation))
        .ok_or_else(|| Error::input(path, "no planted pathway"))?;
    let (matched_channel, matched_sign, filter_correlation) =
        (pathways[best].channel, pathways[best].sign, pathways[best].filter_correlation);
    let span_chance = (kept.len() as f64 / (temporal.len().max(2) - 1) as f64).sqrt().min(1.0);
    let unit_sign = top["sign"].as_str().unwrap_or("").to_string();
    let sign_matches = unit_sign == matched_sign;
    Ok(Recovery {
        cell,
        unit_layer: top["layer"].as_str().unwrap_or("").to_string(),
        unit_channel: top["channel"].as_u64().unwrap_or(0),
        unit_conductance: top["conductance"].as_f64().unwrap_or(f64::NAN),
        unit_sign,
        unit_temporal: temporal,
        matched_channel,
        matched_temporal: filters.swap_remove(best),
        filter_correlation,
        sign_matches,
        recovered: filter_correlation >= RECOVERED_R && sign_matches,
        planted: pathways,
        kept_first_layer_units: kept.len(),
        span_chance,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    fn unit(channel: usize, conductance: f64, sign: &str, temporal: Vec<f32>) -> Value {
        json!({"layer": "layer1", "channel": channel, "conductance": conductance, "sign": sign,
               "kernel": {"temporal": temporal, "rank_one_share": 1.0}})
    }

    #[test]
    fn the_top_unit_is_matched_by_filter_and_judged_by_sign() {
        // Cell 0's top unit carries the resonant filter but the wrong sign; a weaker unit and a
        // second-layer unit (no kernel) are ignored.
        let resonant = planted_temporal(2);
        let sub = json!({"units": [
            unit(5, -0.2, "excitatory", planted_temporal(3)),
            unit(7, 0.9, "inhibitory", resonant.clone()),
            {"layer": "layer2", "channel": 0, "conductance": 5.0, "sign": "excitatory", "kernel": null},
        ]});
        let r = compare(0, &sub, Path::new("subcircuit.json")).unwrap();
        assert_eq!((r.unit_channel, r.matched_channel), (7, 2));
        assert!((r.filter_correlation - 1.0).abs() < 1e-9);
        assert!(!r.sign_matches && !r.recovered);
        // The OFF subunit's filter is the ON one negated: an ON-like unit matches pathway 0, and
        // like the planted subunits (surround outweighing centre) it must inhibit summed over space.
        let on =
            compare(2, &json!({"units": [unit(1, 0.5, "inhibitory", planted_temporal(0))]}), Path::new("s")).unwrap();
        assert_eq!(on.matched_channel, 0);
        assert!(on.recovered);
        let excitatory =
            compare(2, &json!({"units": [unit(1, 0.5, "excitatory", planted_temporal(0))]}), Path::new("s")).unwrap();
        assert!(!excitatory.sign_matches && !excitatory.recovered);
        assert!((on.planted[1].filter_correlation + 1.0).abs() < 1e-6);
    }

    #[test]
    fn a_pathway_spread_over_two_units_is_carried_by_their_span() {
        // The rightward filter split into two halves that are each poorly correlated with it:
        // the top unit misses it, the two together carry it exactly.
        let full = planted_temporal(4);
        let peak = full.iter().enumerate().max_by(|a, b| a.1.total_cmp(b.1)).map(|(i, _)| i).unwrap();
        let early: Vec<f32> = full.iter().enumerate().map(|(i, &v)| if i < peak { v } else { 0.0 }).collect();
        let late: Vec<f32> = full.iter().enumerate().map(|(i, &v)| if i >= peak { v } else { 0.0 }).collect();
        let sub = json!({"units": [unit(1, 0.9, "excitatory", early), unit(2, 0.5, "excitatory", late)]});
        let r = compare(1, &sub, Path::new("s")).unwrap();
        assert!(r.filter_correlation < 0.95, "{}", r.filter_correlation);
        assert!((r.planted[0].span_correlation - 1.0).abs() < 1e-6, "{}", r.planted[0].span_correlation);
        assert_eq!(r.kept_first_layer_units, 2);
        assert!((r.span_chance - (2.0f64 / 39.0).sqrt()).abs() < 1e-12);
    }

    #[test]
    fn the_span_of_one_filter_is_its_absolute_correlation() {
        // With one filter the least-squares fit is the filter scaled, so the span correlation is
        // |r| (the fit may flip the sign).
        let a: Vec<f32> = (0..40).map(|i| ((i as f32) * 0.3).sin()).collect();
        let b: Vec<f32> = (0..40).map(|i| ((i as f32) * 0.3).sin() + 0.5 * ((i as f32) * 1.7).cos()).collect();
        let r = correlation(
            &a.iter().map(|&x| x as f64).collect::<Vec<_>>(),
            &b.iter().map(|&x| x as f64).collect::<Vec<_>>(),
        );
        let neg: Vec<f32> = a.iter().map(|x| -x).collect();
        assert!((span_correlation(&[neg], &b) - r.abs()).abs() < 1e-9);
        assert!(span_correlation(&[a], &[1.0; 40]).is_nan(), "a constant target has no shape");
    }

    #[test]
    fn a_subcircuit_without_first_layer_units_is_an_error_naming_the_file() {
        let e = compare(1, &json!({"units": []}), Path::new("cell-1/subcircuit.json")).unwrap_err();
        assert!(e.to_string().contains("cell-1/subcircuit.json") && e.to_string().contains("first-layer"), "{e}");
    }
}
