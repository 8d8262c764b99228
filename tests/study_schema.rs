//! `assay schema`: the JSON Schema of the study file accepts every bundled and test
//! study, rejects the malformed ones the study reader rejects, and agrees with the
//! reader on a table of edge cases.

mod common;

use common::{edit, repo_root, Env};
use serde_json::Value;

fn schema() -> Value {
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_assay"))
        .arg("schema")
        .output()
        .expect("assay starts");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("the schema is JSON")
}

fn validator() -> jsonschema::Validator {
    let s = schema();
    assert_eq!(
        s["$schema"], "https://json-schema.org/draft/2020-12/schema",
        "draft 2020-12"
    );
    jsonschema::validator_for(&s).expect("the schema compiles")
}

/// A study file as the JSON value the schema sees (YAML is read as JSON data).
fn as_json(yaml: &str) -> Value {
    serde_yaml::from_str(yaml).expect("valid YAML")
}

fn errors(v: &jsonschema::Validator, yaml: &str) -> Vec<String> {
    v.iter_errors(&as_json(yaml))
        .map(|e| e.to_string())
        .collect()
}

/// Every study file under `models/` (and the docs' complete example).
fn bundled_studies() -> Vec<(String, String)> {
    let mut out = Vec::new();
    for entry in std::fs::read_dir(repo_root().join("models")).unwrap() {
        let p = entry.unwrap().path().join("study.yaml");
        if p.exists() {
            out.push((
                p.display().to_string(),
                std::fs::read_to_string(&p).unwrap(),
            ));
        }
    }
    assert!(out.len() >= 2, "the bundled studies are found: {out:?}");
    let doc = std::fs::read_to_string(repo_root().join("docs/study.md")).unwrap();
    let start = doc
        .find("```yaml\nname: cantilever")
        .expect("the complete example")
        + 8;
    let end = start + doc[start..].find("```").unwrap();
    out.push(("docs/study.md example".into(), doc[start..end].to_string()));
    out
}

#[test]
fn every_bundled_and_test_study_validates() {
    let v = validator();
    for (name, text) in bundled_studies() {
        let e = errors(&v, &text);
        assert!(e.is_empty(), "{name}: {e:?}");
    }
    let env = Env::new();
    for mode in ["ok", "fail"] {
        let text = env.minimal_study(mode);
        assert!(errors(&v, &text).is_empty(), "{text}");
    }
}

/// Cases on which the schema and the study reader must agree: (description, edit of the
/// minimal study, accepted?). Rejections here are all caught while reading; value
/// checks (low < high, sd > 0) are `assay validate`'s alone and not in this table.
fn cases(text: &str) -> Vec<(&'static str, String, bool)> {
    let noise = "noise: {sd: 0.1}";
    let range = "range: [0.0, 1.0]";
    let design = "design: {method: lhs, points: 4, seed: 7}";
    vec![
        ("unknown top-level key", format!("{text}controls: {{temperature: 8}}\n"), false),
        ("checks section", format!("{text}checks: {{confirmation_runs: 2}}\n"), true),
        ("unknown key in checks", format!("{text}checks: {{refine: 2}}\n"), false),
        ("unknown key in a parameter", edit(text, range, "range: [0.0, 1.0]\n    scale: log"), false),
        ("range of three numbers", edit(text, range, "range: [0.0, 1.0, 2.0]"), false),
        ("range as text", edit(text, range, "range: \"0 to 1\""), false),
        ("prior uniform as text", edit(text, range, "range: [0.0, 1.0]\n    prior: uniform"), true),
        ("normal prior", edit(text, range, "range: [0.0, 1.0]\n    prior: {normal: {mean: 0.5, sd: 0.2}}"), true),
        ("lognormal prior", edit(text, "range: [1.0, 2.0]", "range: [1.0, 2.0]\n    prior: {lognormal: {mu: 0.3, sigma: 1}}"), true),
        ("unknown prior", edit(text, range, "range: [0.0, 1.0]\n    prior: gamma"), false),
        ("prior with two forms", edit(text, range, "range: [0.0, 1.0]\n    prior: {normal: {mean: 0.5, sd: 0.2}, lognormal: {mu: 0, sigma: 1}}"), false),
        ("normal prior missing sd", edit(text, range, "range: [0.0, 1.0]\n    prior: {normal: {mean: 0.5}}"), false),
        ("normal prior with extra key", edit(text, range, "range: [0.0, 1.0]\n    prior: {normal: {mean: 0.5, sd: 0.2, df: 3}}"), false),
        ("noise sd_column", edit(text, noise, "noise: {sd_column: s}"), true),
        ("unknown noise", edit(text, noise, "noise: {unknown: {shape: 3, scale: 0.02}}"), true),
        ("noise with two forms", edit(text, noise, "noise: {sd: 0.1, sd_column: s}"), false),
        ("noise as a number", edit(text, noise, "noise: 0.1"), false),
        ("unknown noise missing scale", edit(text, noise, "noise: {unknown: {shape: 3}}"), false),
        ("sd as text", edit(text, noise, "noise: {sd: small}"), false),
        ("design method sobol", edit(text, design, "design: {method: sobol, points: 4, seed: 7, space: prior}"), true),
        ("unknown design method", edit(text, design, "design: {method: halton, points: 4}"), false),
        ("negative points", edit(text, design, "design: {points: -4}"), false),
        ("settings number and text", edit(text, noise, "settings: {load: 5.0, mesh: fine.msh}\n    noise: {sd: 0.1}"), true),
        ("setting as a list", edit(text, noise, "settings: {load: [1, 2]}\n    noise: {sd: 0.1}"), false),
        ("kernel", format!("{text}surrogate: {{kernel: squared-exponential, mean: linear}}\n"), true),
        ("unknown kernel", format!("{text}surrogate: {{kernel: rbf}}\n"), false),
        ("missing simulator", text.replacen("simulator:", "simulator_:", 1), false),
        ("slurm settings, prelude as a block", format!("{text}execution:\n  backend: slurm\n  slurm: {{partition: short, time: \"00:10:00\", cpus_per_task: 2, array_limit: 8, extra_args: [--exclusive], prelude: \"module load x\\nexport Y=1\"}}\n"), true),
        ("slurm prelude as a list", format!("{text}execution: {{slurm: {{prelude: [module load x, export Y=1]}}}}\n"), true),
        ("unknown slurm key", format!("{text}execution: {{slurm: {{nodes: 2}}}}\n"), false),
        ("unknown backend", format!("{text}execution: {{backend: pbs}}\n"), false),
        ("discrepancy with defaults", edit(text, "seed: 3}", "seed: 3, discrepancy: {}}"), true),
        ("discrepancy in every form", edit(text, "seed: 3}", "seed: 3, discrepancy: {kernel: matern52, sd: {half_normal: {scale: 0.1}}, length_scale: {lognormal: {mu: -1, sigma: 1}}, experiments: [bench]}}"), true),
        ("discrepancy fixed", edit(text, "seed: 3}", "seed: 3, discrepancy: {sd: {fixed: 0.1}, length_scale: {fixed: 0.5}}}"), true),
        ("unknown key in discrepancy", edit(text, "seed: 3}", "seed: 3, discrepancy: {variance: 0.1}}"), false),
        ("unknown discrepancy sd form", edit(text, "seed: 3}", "seed: 3, discrepancy: {sd: {normal: {mean: 0, sd: 1}}}}"), false),
        ("discrepancy sd with two forms", edit(text, "seed: 3}", "seed: 3, discrepancy: {sd: {fixed: 0.1, half_normal: {scale: 1}}}}"), false),
        ("unknown discrepancy kernel", edit(text, "seed: 3}", "seed: 3, discrepancy: {kernel: rbf}}"), false),
        ("discrepancy hyperparameters at their mode", edit(text, "seed: 3}", "seed: 3, discrepancy: {hyperparameters: map}}"), true),
        ("discrepancy hyperparameters sampled", edit(text, "seed: 3}", "seed: 3, discrepancy: {hyperparameters: sampled}}"), true),
        ("unknown discrepancy hyperparameters mode", edit(text, "seed: 3}", "seed: 3, discrepancy: {hyperparameters: mode}}"), false),
    ]
}

#[test]
fn schema_and_reader_agree_on_edge_cases() {
    let v = validator();
    let env = Env::new();
    env.write_field_data();
    env.write("field-sd.csv", "x,y,s\n0,0.6,0.1\n0.5,1.3,0.1\n2,3.5,0.1\n");
    let text = env.minimal_study("ok");
    for (what, study, accepted) in cases(&text) {
        let schema_ok = errors(&v, &study).is_empty();
        assert_eq!(schema_ok, accepted, "schema on `{what}`:\n{study}");
        // The reader: a read-stage rejection is the only reason for these to fail.
        let study = study.replace(
            "data: field.csv\n    noise: {sd_column: s}",
            "data: field-sd.csv\n    noise: {sd_column: s}",
        );
        let path = env.write("study.yaml", &study);
        let out = env.assay(["validate"]).arg(&path).output().unwrap();
        assert_eq!(
            out.status.success(),
            accepted,
            "assay validate on `{what}`: {}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
}
