//! The plain-sentence answers at the top of the report. Every number in a sentence is recorded
//! with the JSON file and pointer it came from, so `findings.json` can be checked against the
//! results it summarises.

use super::gather::Folder;
use serde::Serialize;
use serde_json::Value;

/// One sentence and its numbers.
#[derive(Debug, Clone, Serialize)]
pub struct Finding {
    /// The cell.
    pub cell: usize,
    /// The protocol.
    pub protocol: String,
    /// The stimulus: the protocol's name, and where the report holds several runs of that
    /// protocol, the parameters that tell this one apart (see `report::labels`).
    pub stimulus: String,
    /// The sentence.
    pub text: String,
    /// Every number shown in `text`.
    pub numbers: Vec<Number>,
}

/// A number in a sentence: `shown` is `value x scale` rounded.
#[derive(Debug, Clone, Serialize)]
pub struct Number {
    /// As printed in the sentence.
    pub shown: String,
    /// The JSON file it came from.
    pub file: String,
    /// JSON pointer inside the file.
    pub pointer: String,
    /// The value in the file.
    pub value: f64,
    /// Factor applied before printing (100 for percentages).
    pub scale: f64,
}

/// How the protocol's response is named in a sentence.
fn response_phrase(protocol: &str) -> String {
    match protocol {
        "omitted-flash" => "response after the omitted flash".into(),
        "reversing-bar" => "response to the motion reversal".into(),
        "differential-motion" => "response to object motion (differential against global motion)".into(),
        p => format!("response to the {p} stimulus"),
    }
}

/// Build sentences while recording their numbers.
struct Sentence<'a> {
    text: String,
    numbers: Vec<Number>,
    folder: &'a Folder,
}

impl<'a> Sentence<'a> {
    fn new(folder: &'a Folder) -> Self {
        Sentence { text: String::new(), numbers: Vec::new(), folder }
    }

    fn text(&mut self, s: &str) -> &mut Self {
        self.text += s;
        self
    }

    /// Append the number at `pointer` of the folder's main JSON, scaled and shown with
    /// `decimals` decimals. Returns false when the value is missing.
    fn number(&mut self, pointer: &str, scale: f64, decimals: usize) -> bool {
        self.number_as(pointer, scale, |v| format!("{v:.decimals$}"))
    }

    /// As [`Sentence::number`], in scientific notation with two significant digits.
    fn small_number(&mut self, pointer: &str) -> bool {
        self.number_as(pointer, 1.0, |v| format!("{v:.1e}"))
    }

    fn number_as(&mut self, pointer: &str, scale: f64, show: impl Fn(f64) -> String) -> bool {
        let Some(value) = self.folder.doc.pointer(pointer).and_then(Value::as_f64) else { return false };
        let shown = show(value * scale);
        self.text += &shown;
        self.numbers.push(Number {
            shown,
            file: self.folder.file(self.folder.kind.file()).display().to_string(),
            pointer: pointer.into(),
            value,
            scale,
        });
        true
    }
}

/// The sentences for one cell and stimulus (of `protocol`, labelled `stimulus`) from its
/// reduction, knock-outs and attribution.
pub fn findings(
    cell: usize,
    protocol: &str,
    stimulus: &str,
    reduction: Option<&Folder>,
    knockouts: Option<&Folder>,
    attribution: Option<&Folder>,
) -> Vec<Finding> {
    let mut out = Vec::new();
    let mut push = |s: Sentence| {
        out.push(Finding {
            cell,
            protocol: protocol.into(),
            stimulus: stimulus.into(),
            text: s.text,
            numbers: s.numbers,
        });
    };
    if let Some(r) = reduction {
        let mut s = Sentence::new(r);
        let phrase = response_phrase(protocol);
        let phrase = if stimulus == protocol { phrase } else { format!("{phrase} in {stimulus}") };
        s.text(&format!("Cell {cell}'s {phrase} is carried by "));
        let ok = s.number("/size/kept", 1.0, 0) && s.text(" of ").number("/size/of", 1.0, 0);
        s.text(" units (fidelity ");
        let ok = ok && s.number("/fidelity/fve", 1.0, 2);
        s.text(" as fraction of variance explained).");
        if ok {
            push(s);
        }
    }
    if let Some(k) = knockouts {
        let top = &k.doc["knockouts"][0];
        let units: Vec<String> = top["units"]
            .as_array()
            .map(|u| u.iter().filter_map(|x| x.as_str().map(String::from)).collect())
            .unwrap_or_default();
        if !units.is_empty() {
            let mut s = Sentence::new(k);
            s.text(&format!("Silencing {} is predicted to change it by ", units.join(" and ")));
            if s.number("/knockouts/0/relative_rms_change", 100.0, 0) {
                s.text(" % (RMS change of the response relative to the full model's).");
                push(s);
            }
        }
    }
    if let Some(a) = attribution {
        let top = &a.doc["units"][0];
        if let (Some(layer), Some(ch)) = (top["layer"].as_str(), top["channel"].as_u64()) {
            let mut s = Sentence::new(a);
            s.text(&format!(
                "By layer conductance, {layer}:{ch} contributes most ({}); the completeness residual is ",
                top["effect"].as_str().unwrap_or("sign unknown")
            ));
            if s.small_number("/completeness_residual") {
                s.text(" (fraction of the output change).");
                push(s);
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::gather::Kind;

    fn folder(kind: Kind, doc: Value) -> Folder {
        Folder { dir: "r".into(), kind, doc, run: None }
    }

    #[test]
    fn sentences_carry_the_numbers_they_print() {
        let r =
            folder(Kind::Reduction, serde_json::json!({"size": {"kept": 2, "of": 16}, "fidelity": {"fve": 0.9412}}));
        let k = folder(
            Kind::Knockouts,
            serde_json::json!({"knockouts": [{"units": ["conv1:5"], "relative_rms_change": 0.812}]}),
        );
        let f = findings(3, "omitted-flash", "omitted-flash", Some(&r), Some(&k), None);
        assert_eq!(
            f[0].text,
            "Cell 3's response after the omitted flash is carried by 2 of 16 units (fidelity 0.94 as fraction of variance explained)."
        );
        assert_eq!(f[1].text, "Silencing conv1:5 is predicted to change it by 81 % (RMS change of the response relative to the full model's).");
        assert_eq!(f[1].numbers[0].pointer, "/knockouts/0/relative_rms_change");
        assert_eq!(f[1].numbers[0].value, 0.812);
    }

    #[test]
    fn a_missing_value_drops_the_sentence() {
        let r = folder(Kind::Reduction, serde_json::json!({"size": {"kept": 2}}));
        assert!(findings(0, "steps", "steps", Some(&r), None, None).is_empty());
    }

    #[test]
    fn a_stimulus_told_apart_by_its_parameters_is_named_in_the_sentence() {
        let r = folder(Kind::Reduction, serde_json::json!({"size": {"kept": 1, "of": 8}, "fidelity": {"fve": 0.5}}));
        let f = findings(1, "omitted-flash", "omitted-flash (period_ms 150 ms)", Some(&r), None, None);
        assert!(f[0]
            .text
            .starts_with("Cell 1's response after the omitted flash in omitted-flash (period_ms 150 ms) is"));
        assert_eq!(
            (f[0].protocol.as_str(), f[0].stimulus.as_str()),
            ("omitted-flash", "omitted-flash (period_ms 150 ms)")
        );
    }
}
