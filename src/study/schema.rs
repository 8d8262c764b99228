//! The JSON Schema of the study file ([`schema_json`], `assay schema`): derived for the
//! plain structs of [`super::spec`], written here by hand for the tagged choices whose
//! readers (`tagged.rs`) take a YAML value apart themselves.
//!
//! Input: the wire types. Output: the schema text. Must not: read or check a study.

use super::spec::{DiscrepancySdSpec, LengthScaleSpec, NoiseSpec, PriorSpec, StudySpec};
use schemars::{json_schema, JsonSchema, Schema, SchemaGenerator};

/// The schema of `{fixed: number}`.
fn fixed_schema(description: &str) -> serde_json::Value {
    serde_json::json!({
        "type": "object",
        "description": description,
        "properties": {"fixed": {"type": "number", "exclusiveMinimum": 0}},
        "required": ["fixed"],
        "additionalProperties": false,
    })
}

impl JsonSchema for DiscrepancySdSpec {
    fn schema_name() -> std::borrow::Cow<'static, str> {
        "DiscrepancySdSpec".into()
    }

    /// As [`DiscrepancySdSpec`]'s reader: exactly one of `fixed` (a number) or
    /// `half_normal` (number `scale`).
    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "Standard deviation of the model discrepancy, in the output's unit: `{fixed: v}` or `{half_normal: {scale: s}}` (sampled). Default: half-normal with scale 0.1 × the largest mean measured value of the quantity.",
            "oneOf": [
                fixed_schema("Fixed at this value."),
                one_key_schema("half_normal", &["scale"], "Sampled, with a half-normal prior of this scale."),
            ]
        })
    }
}

impl JsonSchema for LengthScaleSpec {
    fn schema_name() -> std::borrow::Cow<'static, str> {
        "LengthScaleSpec".into()
    }

    /// As [`LengthScaleSpec`]'s reader: exactly one of `fixed` (a number) or `lognormal`
    /// (numbers `mu`, `sigma`).
    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "Length-scale of the model discrepancy along x, in x's unit (curves only): `{fixed: v}` or `{lognormal: {mu, sigma}}` (sampled; mu and sigma of ln ℓ). Default: lognormal with median half the span of the field x values and sigma 1.",
            "oneOf": [
                fixed_schema("Fixed at this value."),
                one_key_schema("lognormal", &["mu", "sigma"], "Sampled: ln ℓ is normal with mean mu and standard deviation sigma."),
            ]
        })
    }
}

/// The schema of a tagged choice `{key: {fields…}}` with exactly one key.
fn one_key_schema(key: &str, fields: &[&str], description: &str) -> serde_json::Value {
    let props: serde_json::Map<String, serde_json::Value> = fields
        .iter()
        .map(|f| (f.to_string(), serde_json::json!({"type": "number"})))
        .collect();
    serde_json::json!({
        "type": "object",
        "description": description,
        "properties": {
            key: {
                "type": "object",
                "properties": props,
                "required": fields,
                "additionalProperties": false,
            }
        },
        "required": [key],
        "additionalProperties": false,
    })
}

impl JsonSchema for PriorSpec {
    fn schema_name() -> std::borrow::Cow<'static, str> {
        "PriorSpec".into()
    }

    /// As [`PriorSpec`]'s reader: the text `uniform`, or a one-key mapping `normal`,
    /// `lognormal` (numbers `mean`, `sd` / `mu`, `sigma`) or `uniform` (whose value the
    /// reader ignores).
    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "Prior density, truncated to the range: `uniform` (default), `{normal: {mean, sd}}` or `{lognormal: {mu, sigma}}` (mu and sigma of ln x).",
            "oneOf": [
                {"const": "uniform"},
                {
                    "type": "object",
                    "properties": {"uniform": true},
                    "required": ["uniform"],
                    "additionalProperties": false,
                },
                one_key_schema("normal", &["mean", "sd"], "Normal prior with this mean and standard deviation, truncated to the range."),
                one_key_schema("lognormal", &["mu", "sigma"], "Lognormal prior: ln x is normal with mean mu and standard deviation sigma; truncated to the range."),
            ]
        })
    }
}

impl JsonSchema for NoiseSpec {
    fn schema_name() -> std::borrow::Cow<'static, str> {
        "NoiseSpec".into()
    }

    /// As [`NoiseSpec`]'s reader: exactly one of `sd` (a number), `sd_column` (a
    /// column name) or `unknown` (numbers `shape`, `scale`).
    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "Measurement noise of the field data: `{sd: v}`, `{sd_column: NAME}` or `{unknown: {shape: a, scale: b}}` (inverse-gamma prior on the variance).",
            "oneOf": [
                {
                    "type": "object",
                    "description": "Known standard deviation, in the output's unit.",
                    "properties": {"sd": {"type": "number"}},
                    "required": ["sd"],
                    "additionalProperties": false,
                },
                {
                    "type": "object",
                    "description": "Known standard deviation per row, from this column of the data file.",
                    "properties": {"sd_column": {"type": "string"}},
                    "required": ["sd_column"],
                    "additionalProperties": false,
                },
                one_key_schema("unknown", &["shape", "scale"], "Unknown variance with an inverse-gamma prior (shape a, scale b), estimated with the parameters."),
            ]
        })
    }
}

/// The JSON Schema (draft 2020-12) of the study file, pretty-printed.
pub fn schema_json() -> String {
    let mut schema = schemars::schema_for!(StudySpec);
    schema.insert("title".into(), "assay study file".into());
    serde_json::to_string_pretty(&schema).expect("a schema serialises")
}

/// The schema of what `tagged::lines` reads.
pub(super) fn lines_schema(_: &mut SchemaGenerator) -> Schema {
    json_schema!({
        "description": "Shell lines run on the node before the simulator: a list of lines or one block of text.",
        "oneOf": [
            {"type": "string"},
            {"type": "array", "items": {"type": "string"}},
        ]
    })
}
