//! `sufficit report` on the results of a planted circuit: the page opens offline in headless
//! Chromium with every section, the figures are labelled with units, every number of the
//! plain-sentence findings equals the JSON value it came from, and bad input is explained.

mod browser;
mod cli_support;
mod planted;

use cli_support::{json, s, sufficit};
use planted::write_planted;
use serde_json::Value;
use std::path::{Path, PathBuf};

/// Planted model; flashes stimulus; respond; attribute (two baselines), reduce and knockout for
/// cell 0. Returns the results folder.
fn results(d: &Path) -> PathBuf {
    let (model, res) = (d.join("planted.onnx"), d.join("results"));
    write_planted(&model);
    let stim = res.join("stim");
    let run = |args: &[&str]| {
        let mut v = args.to_vec();
        v.push("--quiet");
        let (ok, text) = sufficit(&v);
        assert!(ok, "{args:?}: {text}");
    };
    run(&["stimulus", "flashes", "--model", s(&model), "--out", s(&stim)]);
    run(&["respond", s(&model), s(&stim), "--out", s(&res.join("respond"))]);
    let cell = ["--cell", "0"];
    let att = res.join("attribute");
    run(&[
        &["attribute", s(&model), s(&stim), "--layer", "all", "--compare-baselines", "blurred"][..],
        &cell,
        &["--out", s(&att)],
    ]
    .concat());
    run(&[&["reduce", s(&model), s(&stim), "--layer", "all"][..], &cell, &["--out", s(&res.join("reduce"))]].concat());
    run(&[&["knockout", s(&model), s(&stim)][..], &cell, &["--out", s(&res.join("knockout"))]].concat());
    res
}

/// The SVG of every `<figure class="chart">` in the page.
fn charts(html: &str) -> Vec<&str> {
    html.split("<figure class=\"chart\"").skip(1).map(|f| &f[..f.find("</figure>").unwrap()]).collect()
}

/// Texts of an SVG's `<text>` elements.
fn texts(svg: &str) -> Vec<String> {
    svg.split("<text")
        .skip(1)
        .map(|t| t[t.find('>').unwrap() + 1..t.find("</text>").unwrap()].trim().to_string())
        .collect()
}

#[test]
fn the_report_opens_offline_with_every_section_labelled_figures_and_traceable_numbers() {
    let d = tempfile::tempdir().unwrap();
    let res = results(d.path());
    let out = d.path().join("report");
    let (ok, text) = sufficit(&["report", s(&res), "--out", s(&out), "--quiet"]);
    assert!(ok, "{text}");
    assert!(text.contains("report.html"), "report must say where it wrote: {text}");
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();

    // Self-contained: no scripts, no external resources.
    assert!(!html.contains("<script"), "the page must not carry scripts");
    assert!(!html.contains("src=\"http") && !html.contains("href=\"http"), "no external resources");

    // Every section for the cell and the protocol.
    for id in [
        "m1-findings",
        "m1-model",
        "m1-protocol-flashes",
        "m1-cell-0-flashes",
        "m1-cell-0-flashes-attribution",
        "m1-cell-0-flashes-circuit",
        "m1-cell-0-flashes-knockouts",
        "m1-settings",
    ] {
        assert!(html.contains(&format!("id=\"{id}\"")), "section {id} missing");
    }
    assert!(html.contains("class=\"caution\"") && html.contains("ethics approval"), "caution box");

    // Structural: every chart carries at least two axis labels with a unit in brackets
    // (common practice: units on every axis).
    let charts = charts(&html);
    // Responses; heatmap and ranking; one per kept unit; full vs reduced; fidelity curve.
    let kept = json(&res.join("reduce/subcircuit.json"))["units"].as_array().unwrap().len();
    assert_eq!(charts.len(), 1 + 2 + kept + 2, "charts");
    for c in &charts {
        let with_units = texts(c).iter().filter(|t| t.contains(" (") && t.ends_with(')')).count();
        assert!(with_units >= 2, "a chart without unit-labelled axes: {:?}", texts(c));
    }

    // Every number of the findings equals its JSON source, to the printed precision.
    let findings = json(&out.join("findings.json"));
    let list = findings["findings"].as_array().unwrap();
    assert!(list.len() >= 3, "{findings}");
    for f in list {
        let sentence = f["text"].as_str().unwrap();
        assert!(html.contains(&sentence.replace('\'', "&#39;")) || html.contains(sentence), "{sentence}");
        for n in f["numbers"].as_array().unwrap() {
            let shown = n["shown"].as_str().unwrap();
            assert!(sentence.contains(shown), "{shown} not in {sentence}");
            let source: Value = json(Path::new(n["file"].as_str().unwrap()));
            let value = source.pointer(n["pointer"].as_str().unwrap()).and_then(Value::as_f64).unwrap();
            // Half a unit of the last printed digit (plain or scientific notation).
            let (mantissa, exponent) = shown.split_once('e').map_or((shown, 0), |(m, e)| (m, e.parse().unwrap()));
            let decimals = mantissa.split('.').nth(1).map_or(0, str::len) as i32 - exponent;
            let printed: f64 = shown.parse().unwrap();
            let scale = n["scale"].as_f64().unwrap();
            assert!(
                (printed - value * scale).abs() <= 0.5 * 10f64.powi(-decimals) + 1e-9,
                "{shown} in '{sentence}' but {} holds {value}",
                n["file"]
            );
        }
    }

    // The fidelity and the completeness residual of the JSON appear in the page text.
    let sub = json(&res.join("reduce/subcircuit.json"));
    let att = json(&res.join("attribute/attribution.json"));
    let four = |v: f64| sufficit::report::sections::sig(v);
    assert!(html.contains(&four(sub["fidelity"]["fve"].as_f64().unwrap())), "fidelity");
    assert!(html.contains(&four(att["completeness_residual"].as_f64().unwrap())), "completeness residual");
    assert!(html.contains("Kendall tau"), "baseline stability");

    // The Markdown summary links PNGs that exist.
    let md = std::fs::read_to_string(out.join("summary.md")).unwrap();
    let links: Vec<&str> = md.split("](figures/").skip(1).map(|l| &l[..l.find(')').unwrap()]).collect();
    assert!(links.len() >= charts.len());
    for l in links {
        assert!(out.join("figures").join(l).is_file(), "{l}");
    }

    // In the browser: no console messages, no network requests, every section, a non-blank page.
    let Some(chromium) = browser::chromium() else { return };
    let shot = Path::new(env!("CARGO_TARGET_TMPDIR")).join("report-screenshot.png");
    let page = browser::open(&chromium, &out.join("report.html"), &shot, (1200, 2400));
    assert!(page.console.is_empty(), "console: {:?}", page.console);
    assert!(page.requests.is_empty(), "network: {:?}", page.requests);
    assert!(page.dom.contains("id=\"m1-cell-0-flashes-circuit\""), "the loaded page lacks a section");
    let ink = browser::ink(&shot);
    assert!(ink > 0.01, "screenshot {} is nearly blank ({ink})", shot.display());
    eprintln!("report screenshot kept at {}", shot.display());
}

#[test]
fn the_browser_check_catches_console_errors_and_network_requests() {
    // The harness itself must be able to fail: a page with a script error and a remote image.
    let Some(chromium) = browser::chromium() else { return };
    let d = tempfile::tempdir().unwrap();
    let page = d.path().join("bad.html");
    std::fs::write(
        &page,
        "<html><body><p>x</p><script>console.error('deliberate'); missing();</script>\
        <img src=\"https://example.invalid/a.png\"></body></html>",
    )
    .unwrap();
    let seen = browser::open(&chromium, &page, &d.path().join("shot.png"), (400, 300));
    assert!(seen.console.iter().any(|l| l.contains("deliberate")), "{:?}", seen.console);
    assert!(seen.requests.iter().any(|u| u.contains("example.invalid")), "{:?}", seen.requests);
}

#[test]
fn bad_report_input_is_explained_and_nothing_is_written() {
    let d = tempfile::tempdir().unwrap();
    let out = d.path().join("report");
    // An empty folder.
    let empty = d.path().join("empty");
    std::fs::create_dir(&empty).unwrap();
    let (ok, text) = sufficit(&["report", s(&empty), "--out", s(&out)]);
    assert!(!ok && text.contains("no sufficit results") && text.contains("empty"), "{text}");
    assert!(!out.exists());
    // Not a folder.
    let (ok, text) = sufficit(&["report", s(&d.path().join("nowhere")), "--out", s(&out)]);
    assert!(!ok && text.contains("nowhere") && text.contains("not a folder"), "{text}");

    // A newer schema version.
    let (model, res) = (d.path().join("planted.onnx"), d.path().join("res"));
    write_planted(&model);
    let stim = res.join("stim");
    assert!(sufficit(&["stimulus", "steps", "--model", s(&model), "--out", s(&stim), "--quiet"]).0);
    assert!(sufficit(&["respond", s(&model), s(&stim), "--out", s(&res.join("a")), "--quiet"]).0);
    let metrics = res.join("a/metrics.json");
    let original = std::fs::read_to_string(&metrics).unwrap();
    std::fs::write(&metrics, original.replace("\"sufficit/1\"", "\"sufficit/2\"")).unwrap();
    let (ok, text) = sufficit(&["report", s(&res), "--out", s(&out)]);
    assert!(!ok && text.contains("newer sufficit") && text.contains("metrics.json"), "{text}");
    assert!(!out.exists());
    std::fs::write(&metrics, original).unwrap();

    // Results of two models mixed: a warning, and one part per model.
    let other = d.path().join("other.onnx");
    let (ok, text) = sufficit(&["demo-models", "--out", s(d.path())]);
    assert!(ok, "{text}");
    std::fs::rename(d.path().join("synthetic-sensor-planted.onnx"), &other).unwrap();
    let stim2 = res.join("stim2");
    assert!(sufficit(&["stimulus", "steps", "--model", s(&other), "--out", s(&stim2), "--quiet"]).0);
    assert!(sufficit(&["respond", s(&other), s(&stim2), "--out", s(&res.join("b")), "--quiet"]).0);
    let (ok, text) = sufficit(&["report", s(&res), "--out", s(&out)]);
    assert!(ok, "{text}");
    assert!(text.contains("2 different models"), "{text}");
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("id=\"m1\"") && html.contains("id=\"m2\""), "one part per model");
}

#[test]
fn two_runs_of_one_protocol_are_kept_apart_and_named_by_what_differs() {
    // A scientist may run one protocol at two settings (here flashes of 50 and 200 ms): they are
    // different experiments, so the report gives each its own sections, named by the parameter
    // that tells them apart, with distinct anchors, and says which in each finding.
    let d = tempfile::tempdir().unwrap();
    let (model, res) = (d.path().join("planted.onnx"), d.path().join("results"));
    write_planted(&model);
    for ms in ["50", "200"] {
        let stim = res.join(format!("stim-{ms}"));
        let param = format!("flash_ms={ms}");
        for args in [
            vec!["stimulus", "flashes", &param, "contrasts=1", "--model", s(&model), "--out", s(&stim)],
            vec!["respond", s(&model), s(&stim), "--out", s(&res.join(format!("respond-{ms}")))],
        ] {
            let (ok, text) = sufficit(&[&args[..], &["--quiet"]].concat());
            assert!(ok, "{args:?}: {text}");
        }
        let out = res.join(format!("reduce-{ms}"));
        let args = ["reduce", s(&model), s(&stim), "--layer", "all", "--cell", "0", "--out", s(&out), "--quiet"];
        let (ok, text) = sufficit(&args);
        assert!(ok, "{text}");
    }
    let out = d.path().join("report");
    let (ok, text) = sufficit(&["report", s(&res), "--out", s(&out), "--quiet"]);
    assert!(ok, "{text}");
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    for ms in ["50", "200"] {
        let label = format!("flashes (flash_ms {ms} ms)");
        assert_eq!(html.matches(&format!("Protocol: {label}")).count(), 1, "one response section for {label}");
        assert_eq!(html.matches(&format!("Cell 0: {label}")).count(), 1, "one cell section for {label}");
    }
    let ids: Vec<&str> = html.split(" id=\"").skip(1).map(|t| &t[..t.find('"').unwrap()]).collect();
    let mut unique = ids.clone();
    unique.sort_unstable();
    unique.dedup();
    assert_eq!(unique.len(), ids.len(), "anchor ids repeat: {ids:?}");
    let findings = json(&out.join("findings.json"));
    let stimuli: Vec<&str> =
        findings["findings"].as_array().unwrap().iter().map(|f| f["stimulus"].as_str().unwrap()).collect();
    assert!(
        stimuli.contains(&"flashes (flash_ms 50 ms)") && stimuli.contains(&"flashes (flash_ms 200 ms)"),
        "{stimuli:?}"
    );
}
