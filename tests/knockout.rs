//! Knock-outs: silencing semantics and ranking on models whose answer is known by construction.

mod common;

use common::*;
use ndarray::Array3;
use sufficit::model::{LoadOptions, Model};
use sufficit::reduction::knockout::knockouts;
use sufficit::reduction::{all_units, parse_units, silence, Clamp};
use sufficit::response::rates_with;
use sufficit::stimulus::{protocols, Canvas, Params, Stimulus};

fn model_with_dead_channel(dir: &std::path::Path) -> Model {
    // Readout weights k [18, 2]: rows 9..18 read channel 1 of r [N, 2, 3, 3]; zero them, so
    // channel 1 cannot affect any cell.
    let (nodes, mut inits) = tiny_parts();
    for row in 9..18 {
        inits[2].float_data[row * 2] = 0.0;
        inits[2].float_data[row * 2 + 1] = 0.0;
    }
    let p = dir.join("dead.onnx");
    save(&model(nodes, inits, vec![tiny_input()]), &p);
    Model::load(&p, &LoadOptions::default()).unwrap()
}

fn flashes(model: &Model) -> Stimulus {
    let b = &model.binding;
    let c = Canvas { height: b.height, width: b.width, lags: b.lags, frame_rate_hz: 100.0, pixel_um: 50.0 };
    let p = protocols::find("flashes").unwrap();
    let params = Params::parse("flashes", p.specs(), &["contrasts=0.5,1".into()]).unwrap();
    Stimulus::assemble("flashes", &params, &c, 1, p.draw(&params, &c, 1).unwrap())
}

#[test]
fn silencing_every_unit_at_its_baseline_gives_the_gray_response() {
    // With every unit of the only hidden layer clamped to its activation under gray, the cells
    // see what they see under gray, whatever the stimulus.
    let d = tempfile::tempdir().unwrap();
    let m = model_with_dead_channel(d.path());
    let s = flashes(&m);
    let overrides = silence(&m, &s.movie, &all_units(&m), Clamp::Baseline).unwrap();
    let silenced = rates_with(&m, &s.movie, &overrides, &|_| {}).unwrap();
    let gray = rates_with(&m, &Array3::zeros(s.movie.dim()), &[], &|_| {}).unwrap();
    let err = silenced.iter().zip(&gray).fold(0f32, |e, (a, b)| e.max((a - b).abs()));
    assert!(err < 1e-6, "silenced vs gray response differ by {err}");
}

#[test]
fn a_unit_the_cell_cannot_see_has_no_effect_and_the_one_it_reads_ranks_first() {
    let d = tempfile::tempdir().unwrap();
    let m = model_with_dead_channel(d.path());
    let s = flashes(&m);
    let sets: Vec<_> = all_units(&m).into_iter().map(|u| vec![u]).collect();
    let effects = knockouts(
        &m,
        &s,
        0,
        &protocols::target_frames(&s.meta).unwrap(),
        &sets,
        Clamp::Baseline,
        &[(2.5, 2.5), (2.5, 2.5)],
        &|| {},
    )
    .unwrap();
    assert_eq!(effects[0].units, vec!["r:0"]);
    assert!(effects[0].relative_rms_change > 0.0);
    let dead = effects.iter().find(|e| e.units == vec!["r:1"]).unwrap();
    assert_eq!(dead.relative_rms_change, 0.0);
    assert_eq!(dead.fraction_variance_explained, 1.0);
    assert!(dead.metrics.iter().all(|(_, _, _, change)| *change == 0.0 || change.is_nan()));
    assert!(!dead.metrics.is_empty(), "the protocol's metrics are compared");
}

#[test]
fn bad_units_are_refused_with_what_exists() {
    let d = tempfile::tempdir().unwrap();
    let m = model_with_dead_channel(d.path());
    let e = parse_units(&m, "r:5").err().unwrap().to_string();
    assert!(e.contains("does not exist") && e.contains("2 channels"), "{e}");
    let e = parse_units(&m, "conv:0").err().unwrap().to_string();
    assert!(e.contains("unknown layer 'conv'") && e.contains("r"), "{e}");
    assert!(parse_units(&m, "r").is_err());
    assert!(Clamp::parse("loud").is_err());
}

#[test]
fn rates_from_the_cached_prefix_equal_full_forward_passes() {
    let d = tempfile::tempdir().unwrap();
    let m = model_with_dead_channel(d.path());
    let s = flashes(&m);
    let prefix = sufficit::response::PrefixRates::new(&m, &s.movie).unwrap();
    let units = parse_units(&m, "r:0").unwrap();
    for overrides in [vec![], silence(&m, &s.movie, &units, Clamp::Zero).unwrap()] {
        let cached = prefix.rates_with(&overrides).unwrap();
        let full = rates_with(&m, &s.movie, &overrides, &|_| {}).unwrap();
        let err = cached.iter().zip(&full).fold(0f32, |e, (a, b)| e.max((a - b).abs()));
        assert!(err < 1e-6, "cached prefix differs by {err}");
    }
}
