//! `assay predict`: the surrogate as a stand-in for the simulator, checked against the
//! simulator itself (the closed-form cantilever of models/cantilever).

mod common;

use common::{assay_in_repo as assay, ensure_model_binary};
use std::path::Path;
use std::process::Command;

/// A prediction must lie within this many predictive sds of the true value, plus an
/// absolute allowance for round-off in the simulator's printed output (mm).
const N_SD: f64 = 4.0;
const ABS_MM: f64 = 1e-6;

/// Deflections at stations 0.5, 1, 1.5, 2 m from the simulator itself.
fn truth(sim: &Path, e: f64, k: f64, load: f64, dir: &Path) -> Vec<f64> {
    let out = dir.join("truth.csv");
    let st = Command::new(sim)
        .args([
            "--E",
            &e.to_string(),
            "--k-theta",
            &k.to_string(),
            "--load",
            &load.to_string(),
            "--out",
        ])
        .arg(&out)
        .status()
        .unwrap();
    assert!(st.success());
    std::fs::read_to_string(&out)
        .unwrap()
        .lines()
        .skip(1)
        .map(|l| l.split(',').nth(1).unwrap().parse().unwrap())
        .collect()
}

#[test]
fn predictions_agree_with_the_simulator_within_their_sd() {
    let sim = ensure_model_binary("cantilever");
    let tmp = tempfile::tempdir().unwrap();
    let out = assay(tmp.path(), &["all", "models/cantilever/study.yaml"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // Points inside the box, in a column order different from the study's.
    let pts = [
        (1.3, 180.0),
        (2.2, 205.0),
        (3.7, 231.0),
        (1.05, 238.0),
        (2.9, 172.0),
    ];
    let mut text = String::from("k_theta,E\n");
    for (k, e) in pts {
        text.push_str(&format!("{k},{e}\n"));
    }
    let at = tmp.path().join("points.csv");
    std::fs::write(&at, text).unwrap();
    let res = tmp.path().join("pred.csv");
    let o = assay(
        tmp.path(),
        &[
            "predict",
            "models/cantilever/study.yaml",
            "--at",
            at.to_str().unwrap(),
            "--out",
            res.to_str().unwrap(),
        ],
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let mut r = csv::Reader::from_path(&res).unwrap();
    let header: Vec<String> = r.headers().unwrap().iter().map(String::from).collect();
    // The contract: parameters first (study order), then EXP.Y@X.mean, EXP.Y@X.sd.
    assert_eq!(
        &header[..4],
        &[
            "E",
            "k_theta",
            "bench-A.deflection@0.5.mean",
            "bench-A.deflection@0.5.sd"
        ]
    );
    assert_eq!(header.len(), 2 + 2 * 2 * 4);
    for (row, (k, e)) in r.records().zip(pts) {
        let row = row.unwrap();
        for (exp, load) in [("bench-A", 5.0), ("bench-B", 9.0)] {
            let t = truth(&sim, e, k, load, tmp.path());
            for (j, x) in ["0.5", "1", "1.5", "2"].iter().enumerate() {
                let col = |s: &str| {
                    header
                        .iter()
                        .position(|h| h == &format!("{exp}.deflection@{x}.{s}"))
                        .unwrap()
                };
                let m: f64 = row[col("mean")].parse().unwrap();
                let sd: f64 = row[col("sd")].parse().unwrap();
                assert!(
                    (m - t[j]).abs() <= N_SD * sd + ABS_MM,
                    "{exp} at x={x}, E={e}, k={k}: {m} ± {sd} vs simulator {}",
                    t[j]
                );
            }
        }
    }
}

#[test]
fn bad_points_files_are_bad_input() {
    let tmp = tempfile::tempdir().unwrap();
    let at = tmp.path().join("points.csv");
    std::fs::write(&at, "E,k_theta\n200,abc\n").unwrap();
    let o = assay(
        tmp.path(),
        &[
            "predict",
            "models/cantilever/study.yaml",
            "--at",
            at.to_str().unwrap(),
        ],
    );
    assert_eq!(o.status.code(), Some(2));
    let msg = String::from_utf8_lossy(&o.stderr);
    assert!(
        msg.contains(&format!(
            "{}:2: `abc` in column `k_theta` is not a number",
            at.display()
        )),
        "{msg}"
    );
}
