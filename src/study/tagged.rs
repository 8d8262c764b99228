//! Readers of the study file's tagged choices (`{normal: {mean, sd}}`, `{sd: v}`,
//! `{fixed: v}`…) and of line lists: they take a YAML value apart themselves, so that a
//! wrong form is reported in the words of the study file.
//!
//! Input: the YAML value at a key of [`super::spec`]'s types.
//! Output: the wire value, or a message naming what was expected.
//! Must not: check values (ranges, signs): that is validation's work.

use super::spec::{DiscrepancySdSpec, LengthScaleSpec, NoiseSpec, PriorSpec};
use serde::de::Error as _;
use serde::{Deserialize, Deserializer};
use serde_yaml::Value;

/// A one-key mapping `{key: value}` (the form of tagged choices in the study file).
fn one_key(v: Value, what: &str, expected: &str) -> Result<(String, Value), String> {
    match v {
        Value::Mapping(m) if m.len() == 1 => {
            let (k, v) = m.into_iter().next().expect("one entry");
            match k {
                Value::String(k) => Ok((k, v)),
                other => Err(format!(
                    "{what}: key {other:?} is not a name; expected {expected}"
                )),
            }
        }
        Value::Mapping(m) => Err(format!(
            "{what}: expected exactly one of {expected}, found {} keys",
            m.len()
        )),
        other => Err(format!(
            "{what}: expected {expected}, found {}",
            kind(&other)
        )),
    }
}

fn kind(v: &Value) -> &'static str {
    match v {
        Value::Null => "nothing",
        Value::Bool(_) => "a boolean",
        Value::Number(_) => "a number",
        Value::String(_) => "a string",
        Value::Sequence(_) => "a list",
        Value::Mapping(_) => "a mapping",
        Value::Tagged(_) => "a tagged value",
    }
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct NormalWire {
    mean: f64,
    sd: f64,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct LognormalWire {
    mu: f64,
    sigma: f64,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct UnknownWire {
    shape: f64,
    scale: f64,
}

fn sub<T: serde::de::DeserializeOwned>(v: Value, key: &str) -> Result<T, String> {
    serde_yaml::from_value(v).map_err(|e| {
        format!(
            "{key}: {}",
            e.to_string().replace("unknown field", "unknown key")
        )
    })
}

impl<'de> Deserialize<'de> for PriorSpec {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        const EXPECTED: &str = "`uniform`, `{normal: {mean, sd}}` or `{lognormal: {mu, sigma}}`";
        let v = Value::deserialize(d)?;
        if let Value::String(s) = &v {
            return match s.as_str() {
                "uniform" => Ok(PriorSpec::Uniform),
                other => Err(D::Error::custom(format!(
                    "unknown prior `{other}`; expected {EXPECTED}"
                ))),
            };
        }
        let (k, inner) = one_key(v, "prior", EXPECTED).map_err(D::Error::custom)?;
        match k.as_str() {
            "normal" => sub::<NormalWire>(inner, "normal").map(|w| PriorSpec::Normal {
                mean: w.mean,
                sd: w.sd,
            }),
            "lognormal" => sub::<LognormalWire>(inner, "lognormal").map(|w| PriorSpec::Lognormal {
                mu: w.mu,
                sigma: w.sigma,
            }),
            "uniform" => Ok(PriorSpec::Uniform),
            other => Err(format!("unknown prior `{other}`; expected {EXPECTED}")),
        }
        .map_err(D::Error::custom)
    }
}

impl<'de> Deserialize<'de> for NoiseSpec {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        const EXPECTED: &str = "`{sd: v}`, `{sd_column: name}` or `{unknown: {shape, scale}}`";
        let v = Value::deserialize(d)?;
        let (k, inner) = one_key(v, "noise", EXPECTED).map_err(D::Error::custom)?;
        match k.as_str() {
            "sd" => sub::<f64>(inner, "sd").map(NoiseSpec::Sd),
            "sd_column" => sub::<String>(inner, "sd_column").map(NoiseSpec::SdColumn),
            "unknown" => sub::<UnknownWire>(inner, "unknown").map(|w| NoiseSpec::Unknown {
                shape: w.shape,
                scale: w.scale,
            }),
            other => Err(format!("unknown noise form `{other}`; expected {EXPECTED}")),
        }
        .map_err(D::Error::custom)
    }
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct HalfNormalWire {
    scale: f64,
}

impl<'de> Deserialize<'de> for DiscrepancySdSpec {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        const EXPECTED: &str = "`{fixed: v}` or `{half_normal: {scale: s}}`";
        let v = Value::deserialize(d)?;
        let (k, inner) = one_key(v, "sd", EXPECTED).map_err(D::Error::custom)?;
        match k.as_str() {
            "fixed" => sub::<f64>(inner, "fixed").map(DiscrepancySdSpec::Fixed),
            "half_normal" => sub::<HalfNormalWire>(inner, "half_normal")
                .map(|w| DiscrepancySdSpec::HalfNormal { scale: w.scale }),
            other => Err(format!("unknown sd form `{other}`; expected {EXPECTED}")),
        }
        .map_err(D::Error::custom)
    }
}

impl<'de> Deserialize<'de> for LengthScaleSpec {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        const EXPECTED: &str = "`{fixed: v}` or `{lognormal: {mu, sigma}}`";
        let v = Value::deserialize(d)?;
        let (k, inner) = one_key(v, "length_scale", EXPECTED).map_err(D::Error::custom)?;
        match k.as_str() {
            "fixed" => sub::<f64>(inner, "fixed").map(LengthScaleSpec::Fixed),
            "lognormal" => {
                sub::<LognormalWire>(inner, "lognormal").map(|w| LengthScaleSpec::Lognormal {
                    mu: w.mu,
                    sigma: w.sigma,
                })
            }
            other => Err(format!(
                "unknown length_scale form `{other}`; expected {EXPECTED}"
            )),
        }
        .map_err(D::Error::custom)
    }
}

/// A list of lines, or one block of text split into lines.
pub(super) fn lines<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<String>, D::Error> {
    #[derive(Deserialize)]
    #[serde(untagged)]
    enum Lines {
        Block(String),
        List(Vec<String>),
    }
    Ok(match Lines::deserialize(d)? {
        Lines::Block(s) => s.lines().map(str::to_string).collect(),
        Lines::List(v) => v,
    })
}
