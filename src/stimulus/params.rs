//! Protocol parameters: their specification (unit, default, valid range, source of the
//! default), parsing of `name=value` arguments, and the values a protocol receives.

use crate::{Error, Result};
use serde::Serialize;
use std::collections::BTreeMap;

/// A parameter's value: a number, a list of numbers, or text.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(untagged)]
pub enum Value {
    /// A single number.
    Num(f64),
    /// Several numbers (a sweep).
    List(Vec<f64>),
    /// Text (a choice or a path).
    Text(String),
}

/// What a protocol accepts for one parameter.
#[derive(Debug, Clone)]
pub struct Spec {
    /// Name used on the command line (`name=value`).
    pub name: &'static str,
    /// Physical unit ("ms", "um", "Hz", "Michelson", "" for counts).
    pub unit: &'static str,
    /// Default value.
    pub default: Value,
    /// Smallest allowed number (each list entry too).
    pub min: f64,
    /// Largest allowed number.
    pub max: f64,
    /// Allowed texts, for choices.
    pub choices: &'static [&'static str],
    /// Where the default comes from (a paper, "common practice" or "from memory").
    pub source: &'static str,
    /// What it means.
    pub doc: &'static str,
}

impl Spec {
    /// A numeric parameter.
    pub fn num(
        name: &'static str,
        unit: &'static str,
        default: f64,
        min: f64,
        max: f64,
        source: &'static str,
        doc: &'static str,
    ) -> Self {
        Spec { name, unit, default: Value::Num(default), min, max, choices: &[], source, doc }
    }

    /// A list parameter with a default list.
    pub fn list(
        name: &'static str,
        unit: &'static str,
        default: &[f64],
        min: f64,
        max: f64,
        source: &'static str,
        doc: &'static str,
    ) -> Self {
        Spec { name, unit, default: Value::List(default.to_vec()), min, max, choices: &[], source, doc }
    }

    /// A choice among fixed texts (or free text when `choices` is empty).
    pub fn text(
        name: &'static str,
        default: &str,
        choices: &'static [&'static str],
        source: &'static str,
        doc: &'static str,
    ) -> Self {
        Spec { name, unit: "", default: Value::Text(default.into()), min: 0.0, max: 0.0, choices, source, doc }
    }

    /// The default as shown by `--describe`.
    pub fn default_text(&self) -> String {
        match &self.default {
            Value::Num(v) => v.to_string(),
            Value::List(l) => l.iter().map(|v| v.to_string()).collect::<Vec<_>>().join(","),
            Value::Text(t) => t.clone(),
        }
    }
}

/// One parameter as recorded in stimulus.json.
#[derive(Debug, Clone, Serialize)]
pub struct Recorded {
    /// The value used.
    pub value: Value,
    /// Its unit.
    pub unit: &'static str,
    /// Source of the default.
    pub source: &'static str,
}

/// The parameter values a protocol works with, defaults filled in and ranges checked.
#[derive(Debug, Clone, Default)]
pub struct Params {
    values: BTreeMap<&'static str, Value>,
    specs: Vec<Spec>,
}

impl Params {
    /// Parse `name=value` arguments against `specs` for `protocol`.
    pub fn parse(protocol: &str, specs: Vec<Spec>, args: &[String]) -> Result<Self> {
        let mut values: BTreeMap<&'static str, Value> = specs.iter().map(|s| (s.name, s.default.clone())).collect();
        for a in args {
            let (name, raw) = a.split_once('=').ok_or_else(|| {
                Error::Usage(format!("'{a}' is not a parameter setting; write NAME=VALUE (see `sufficit stimulus --describe {protocol}`)"))
            })?;
            let spec = specs.iter().find(|s| s.name == name).ok_or_else(|| {
                let names: Vec<_> = specs.iter().map(|s| s.name).collect();
                Error::Usage(format!("{protocol} has no parameter '{name}'; it has: {}", names.join(", ")))
            })?;
            let v = match &spec.default {
                Value::Num(_) => Value::Num(number(protocol, name, raw)?),
                Value::List(_) => Value::List(
                    raw.split(',')
                        .filter(|s| !s.trim().is_empty())
                        .map(|s| number(protocol, name, s))
                        .collect::<Result<_>>()?,
                ),
                Value::Text(_) => Value::Text(raw.to_string()),
            };
            values.insert(spec.name, v);
        }
        let p = Params { values, specs };
        p.check(protocol)?;
        Ok(p)
    }

    fn check(&self, protocol: &str) -> Result<()> {
        for s in &self.specs {
            let bad = |v: f64| !(v.is_finite() && v >= s.min && v <= s.max);
            let range = || format!("{protocol}: {} must be between {} and {} {}", s.name, s.min, s.max, s.unit);
            match &self.values[s.name] {
                Value::Num(v) if bad(*v) => return Err(Error::Usage(format!("{}, not {v}", range()))),
                Value::List(l) if l.is_empty() => {
                    return Err(Error::Usage(format!("{protocol}: {} needs at least one value", s.name)))
                }
                Value::List(l) if l.iter().any(|&v| bad(v)) => {
                    return Err(Error::Usage(format!("{} (each value), not {l:?}", range())))
                }
                Value::Text(t) if !s.choices.is_empty() && !s.choices.contains(&t.as_str()) => {
                    return Err(Error::Usage(format!(
                        "{protocol}: {} must be one of {}, not '{t}'",
                        s.name,
                        s.choices.join(", ")
                    )))
                }
                _ => {}
            }
        }
        Ok(())
    }

    /// A numeric parameter.
    pub fn num(&self, name: &str) -> f64 {
        match self.values.get(name) {
            Some(Value::Num(v)) => *v,
            _ => panic!("protocol bug: '{name}' is not a numeric parameter"),
        }
    }

    /// A list parameter.
    pub fn list(&self, name: &str) -> Vec<f64> {
        match self.values.get(name) {
            Some(Value::List(v)) => v.clone(),
            _ => panic!("protocol bug: '{name}' is not a list parameter"),
        }
    }

    /// A text parameter.
    pub fn text(&self, name: &str) -> String {
        match self.values.get(name) {
            Some(Value::Text(v)) => v.clone(),
            _ => panic!("protocol bug: '{name}' is not a text parameter"),
        }
    }

    /// Every parameter with unit and source, for stimulus.json.
    pub fn recorded(&self) -> BTreeMap<String, Recorded> {
        self.specs
            .iter()
            .map(|s| {
                (s.name.to_string(), Recorded { value: self.values[s.name].clone(), unit: s.unit, source: s.source })
            })
            .collect()
    }
}

fn number(protocol: &str, name: &str, raw: &str) -> Result<f64> {
    raw.trim().parse::<f64>().map_err(|_| Error::Usage(format!("{protocol}: {name} must be a number, not '{raw}'")))
}
