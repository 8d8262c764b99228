//! A run's identity: the fingerprint of its definition and its key, and the names of
//! its output values. Both executors use these; so does the record.

use super::store::Fingerprint;
use crate::study::{placeholder, Experiment, Study};

/// Names of an experiment's output values: `y@x` for curves, `y` for scalars.
pub fn value_names(study: &Study, e: &Experiment) -> Vec<String> {
    let stations = e.data.stations();
    let mut out = Vec::new();
    for q in &study.simulator.output.y {
        for s in &stations {
            match s {
                Some(x) => out.push(format!("{q}@{}", placeholder::format_number(*x))),
                None => out.push(q.clone()),
            }
        }
    }
    out
}

fn sha_json(v: &serde_json::Value) -> String {
    crate::record::sha256_hex(v.to_string().as_bytes())
}

/// The fingerprint of experiment `e`'s runs under the study's simulator section.
pub fn fingerprint(study: &Study, e: &Experiment) -> Fingerprint {
    let sim = &study.simulator;
    let files: Vec<serde_json::Value> = sim
        .files
        .iter()
        .map(|f| serde_json::json!({"to": f.to, "text": f.text}))
        .collect();
    Fingerprint {
        command: sha_json(&serde_json::json!(sim.command)),
        files: sha_json(&serde_json::json!(files)),
        output: sha_json(&serde_json::json!({
            "file": sim.output.file,
            "format": format!("{:?}", sim.output.format),
            "x": sim.output.x,
            "y": sim.output.y,
            "stations": e.data.stations().iter().map(|s| s.map(|v| v.to_bits())).collect::<Vec<_>>(),
        })),
        env: sha_json(&serde_json::json!(sim.env)),
        settings: sha_json(&serde_json::json!(e.settings)),
    }
}

/// A run's key: sha256 of its fingerprint and its parameter values (bit-exact).
pub fn run_key(fp: &Fingerprint, values: &[f64]) -> String {
    let bits: Vec<u64> = values.iter().map(|v| v.to_bits()).collect();
    sha_json(&serde_json::json!({"fingerprint": fp, "parameters": bits}))
}
