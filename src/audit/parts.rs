//! The parts of a study each stage depends on, hashed.
//!
//! A stage is stale when a part it depends on changed, not when any byte of the study
//! file changed: a new `calibration.draws` leaves the design and the runs valid. Each
//! part is hashed over a canonical JSON form of the *checked* study (numbers in
//! shortest round-trip form), so comments, key order and layout do not count.
//!
//! What each stage depends on:
//!
//! | stage | parts |
//! | --- | --- |
//! | design | `parameters` (names, ranges; priors too when `design.space` is `prior`), `design` |
//! | runs | none here: each run's `key` hashes its simulator definition and point |
//! | surrogate | `parameters` (names, ranges: they scale the inputs), `surrogate` |
//! | posterior | `parameters` (names, ranges, priors), `experiments` (names, noise, field data values), `calibration` |

use crate::study::{DesignSpace, Noise, Prior, Study};
use serde_json::{json, Value};
use std::collections::BTreeMap;

fn sha(v: &Value) -> String {
    crate::record::sha256_hex(v.to_string().as_bytes())
}

fn prior_json(p: &Prior) -> Value {
    match p {
        Prior::Uniform => json!("uniform"),
        Prior::Normal { mean, sd } => json!({"normal": {"mean": mean, "sd": sd}}),
        Prior::LogNormal { mu, sigma } => json!({"lognormal": {"mu": mu, "sigma": sigma}}),
    }
}

fn parameters_json(study: &Study, with_priors: bool) -> Value {
    Value::Array(
        study
            .parameters
            .iter()
            .map(|p| {
                let mut v = json!({"name": p.name, "range": [p.lo, p.hi]});
                if with_priors {
                    v["prior"] = prior_json(&p.prior);
                }
                v
            })
            .collect(),
    )
}

/// Parts of the study `design.yaml` depends on.
pub fn design_parts(study: &Study) -> BTreeMap<String, String> {
    let d = &study.design;
    let by_prior = d.space == DesignSpace::Prior;
    let mut parts = BTreeMap::from([
        ("parameters".into(), sha(&parameters_json(study, by_prior))),
        (
            "design".into(),
            sha(&json!({
                "method": format!("{:?}", d.method),
                "points": d.points,
                "seed": d.seed,
                "space": format!("{:?}", d.space),
            })),
        ),
    ]);
    // Only studies with controls have this part, so older records stay fresh.
    if !study.controls.is_empty() {
        parts.insert("controls".into(), sha(&controls_json(study)));
    }
    parts
}

/// The controls and, with `design.controls: from_data`, the field conditions the
/// design was built on.
fn controls_json(study: &Study) -> Value {
    json!({
        "controls": study
            .controls
            .iter()
            .map(|p| json!({"name": p.name, "range": [p.lo, p.hi]}))
            .collect::<Vec<_>>(),
        "conditions": study.design.conditions,
    })
}

/// Parts of the study `surrogate.yaml` depends on.
pub fn surrogate_parts(study: &Study) -> BTreeMap<String, String> {
    let s = &study.surrogate;
    let mut parts = BTreeMap::from([
        ("parameters".into(), sha(&parameters_json(study, false))),
        (
            "surrogate".into(),
            sha(&json!({
                "kernel": format!("{:?}", s.kernel),
                "mean": format!("{:?}", s.mean),
                "seed": s.seed,
            })),
        ),
    ]);
    if !study.controls.is_empty() {
        parts.insert("controls".into(), sha(&controls_json(study)));
    }
    parts
}

/// Parts of the study `posterior.yaml` depends on.
pub fn posterior_parts(study: &Study) -> BTreeMap<String, String> {
    let experiments: Vec<Value> = study
        .experiments
        .iter()
        .map(|e| {
            let noise = match &e.noise {
                Noise::Sd(v) => json!({"sd": v}),
                Noise::Column(c) => json!({"sd_column": c}),
                Noise::Unknown { shape, scale } => {
                    json!({"unknown": {"shape": shape, "scale": scale}})
                }
            };
            let rows: Vec<Value> = e
                .data
                .rows
                .iter()
                .map(|r| {
                    // The conditions only with controls, so older records stay fresh.
                    if r.controls.is_empty() {
                        json!([r.x, r.y, r.sd])
                    } else {
                        json!([r.x, r.y, r.sd, r.controls])
                    }
                })
                .collect();
            json!({"name": e.name, "noise": noise, "data": rows})
        })
        .collect();
    let c = &study.calibration;
    let mut calibration = json!({
        "chains": c.chains,
        "warmup": c.warmup,
        "draws": c.draws,
        "seed": c.seed,
        "sampler": format!("{:?}", c.sampler),
        "walkers": c.walkers,
        "until_converged": c.until_converged,
        "prior_from": c.prior_from.as_ref().map(|p| p.display().to_string()),
    });
    // Only when present, so records made before the key existed stay fresh.
    if let Some(d) = &c.discrepancy {
        calibration["discrepancy"] = json!({
            "kernel": format!("{:?}", d.kernel),
            "sd": format!("{:?}", d.sd),
            "length_scale": format!("{:?}", d.length_scale),
            "experiments": d.experiments,
        });
        // Only when not the default, so records made before the key existed stay fresh.
        if d.hyperparameters != crate::study::HyperparameterMode::Sampled {
            calibration["discrepancy"]["hyperparameters"] = json!(d.hyperparameters.name());
        }
    }
    BTreeMap::from([
        ("parameters".into(), sha(&parameters_json(study, true))),
        ("experiments".into(), sha(&Value::Array(experiments))),
        ("calibration".into(), sha(&calibration)),
    ])
}

/// Parts whose hash differs between a record and the study now, by name; a part the
/// record does not name counts as changed.
pub fn changed_parts(
    recorded: &BTreeMap<String, String>,
    now: &BTreeMap<String, String>,
) -> Vec<String> {
    now.iter()
        .filter(|(k, v)| recorded.get(*k) != Some(*v))
        .map(|(k, _)| k.clone())
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn study(parameters: &str, rest: &str) -> Study {
        let text = format!(
            "name: t\nparameters:\n{parameters}simulator:\n  command: [sim]\n  output: {{file: o.csv, x: x, y: [y]}}\nexperiments:\n  - {{name: e, data: d.csv, noise: {{sd: 0.1}}}}\n{rest}"
        );
        crate::study::parse_with_data(&text, "x,y\n0,1.5\n1,2.0\n")
    }

    const BASE: &str = "  - {name: a, unit: mm, range: [0, 5]}\n";

    #[test]
    fn each_stage_sees_only_its_parts() {
        let base = study(BASE, "");
        let same = |f: fn(&Study) -> BTreeMap<String, String>, other: &Study| {
            changed_parts(&f(&base), &f(other))
        };
        // A unit, a comment and the layout change nothing.
        let cosmetic = study(
            "  # the only parameter\n  - name: a\n    unit: cm\n    range: [0.0, 5.0]\n",
            "",
        );
        for f in [design_parts, surrogate_parts, posterior_parts] {
            assert!(same(f, &cosmetic).is_empty());
        }
        // A range: every stage.
        let range = study("  - {name: a, unit: mm, range: [0, 6]}\n", "");
        assert_eq!(same(design_parts, &range), ["parameters"]);
        assert_eq!(same(surrogate_parts, &range), ["parameters"]);
        assert_eq!(same(posterior_parts, &range), ["parameters"]);
        // A prior: the posterior only, unless the design is spread by the prior.
        let prior = study(
            "  - {name: a, unit: mm, range: [0, 5], prior: {normal: {mean: 2, sd: 1}}}\n",
            "",
        );
        assert!(same(design_parts, &prior).is_empty());
        assert!(same(surrogate_parts, &prior).is_empty());
        assert_eq!(same(posterior_parts, &prior), ["parameters"]);
        let by_prior = |prior: &str| {
            design_parts(&study(
                &format!("  - {{name: a, range: [0, 5]{prior}}}\n"),
                "design: {space: prior}\n",
            ))
        };
        assert_eq!(
            changed_parts(
                &by_prior(""),
                &by_prior(", prior: {normal: {mean: 2, sd: 1}}")
            ),
            ["parameters"]
        );
        // Stage settings: their own stage.
        let cal = study(BASE, "calibration: {draws: 100}\n");
        assert!(same(design_parts, &cal).is_empty());
        assert!(same(surrogate_parts, &cal).is_empty());
        assert_eq!(same(posterior_parts, &cal), ["calibration"]);
        let sur = study(BASE, "surrogate: {kernel: matern32}\n");
        assert_eq!(same(surrogate_parts, &sur), ["surrogate"]);
        assert!(same(posterior_parts, &sur).is_empty());
        let des = study(BASE, "design: {points: 12}\n");
        assert_eq!(same(design_parts, &des), ["design"]);
        assert!(same(surrogate_parts, &des).is_empty());
    }

    #[test]
    fn changed_parts_names_what_differs_or_is_missing() {
        let now = BTreeMap::from([
            ("a".to_string(), "1".to_string()),
            ("b".to_string(), "2".to_string()),
            ("c".to_string(), "3".to_string()),
        ]);
        let rec = BTreeMap::from([
            ("a".to_string(), "1".to_string()),
            ("b".to_string(), "9".to_string()),
        ]);
        assert_eq!(changed_parts(&rec, &now), ["b", "c"]);
        assert!(changed_parts(&now, &now).is_empty());
    }
}
