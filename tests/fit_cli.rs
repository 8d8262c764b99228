//! `assay fit` with the basis options through the command line: the bundled cantilever
//! study with `holdout`, `hyperprior: lognormal` and `variance_kept` set, the terminal
//! report, and `surrogate.yaml` decoded with this test's own structs (docs/records.md).

mod common;

use common::{assay_in_repo, ensure_model_binary, repo_root};
use serde::Deserialize;
use std::collections::BTreeMap;

#[derive(Deserialize)]
struct Reference {
    n_points: usize,
    dof: usize,
    mean: f64,
    variance: Option<f64>,
    q025: f64,
    q975: f64,
}

#[derive(Deserialize)]
struct Mahalanobis {
    component: String,
    value: f64,
    reference: Reference,
}

#[derive(Deserialize)]
struct Holdout {
    fraction: f64,
    point_ids: Vec<String>,
    n_fit: usize,
    mahalanobis: Vec<Mahalanobis>,
}

#[derive(Deserialize)]
struct Basis {
    variance_kept: f64,
    n_components: usize,
    explained_variance: f64,
    discarded_variance: f64,
    scales: BTreeMap<String, f64>,
    vectors: Vec<Vec<f64>>,
    discarded_by_value: Vec<f64>,
}

#[derive(Deserialize)]
struct Component {
    name: String,
    explained: f64,
}

#[derive(Deserialize)]
struct Output {
    name: String,
}

#[derive(Deserialize)]
struct Experiment {
    name: String,
    n_runs: usize,
    basis: Basis,
    components: Vec<Component>,
    outputs: Vec<Output>,
    holdout: Option<Holdout>,
}

#[derive(Deserialize)]
struct Hyperprior {
    kind: String,
    median_length_scale: f64,
    sd_ln_length_scale: f64,
}

#[derive(Deserialize)]
struct Body {
    variance_kept: f64,
    holdout: f64,
    hyperprior: Option<Hyperprior>,
    experiments: Vec<Experiment>,
}

#[test]
fn fit_reports_the_basis_and_the_holdout_and_records_them() {
    let sim = ensure_model_binary("cantilever");
    let tmp = tempfile::tempdir().unwrap();
    let model = repo_root().join("models/cantilever");
    for f in ["field-A.csv", "field-B.csv"] {
        std::fs::copy(model.join(f), tmp.path().join(f)).unwrap();
    }
    let study = std::fs::read_to_string(model.join("study.yaml"))
        .unwrap()
        .replace(
            "\"../../target/release/cantilever\"",
            &format!("{:?}", sim.display().to_string()),
        )
        .replace(
            "surrogate: {kernel: matern52, mean: linear}",
            "surrogate: {kernel: matern52, mean: linear, variance_kept: 0.9999, holdout: 0.2, hyperprior: lognormal}",
        );
    assert!(
        study.contains("holdout: 0.2"),
        "the study's surrogate line changed"
    );
    let path = tmp.path().join("study.yaml");
    std::fs::write(&path, study).unwrap();
    let runs = tmp.path().join("runs");
    let p = path.to_str().unwrap();
    for cmd in [["design", p], ["run", p]] {
        let out = assay_in_repo(&runs, &cmd);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
    let out = assay_in_repo(&runs, &["fit", p]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        stdout.contains("log-normal length-scale prior (MAP)"),
        "{stdout}"
    );
    assert!(stdout.contains("holdout validation"), "{stdout}");
    assert!(
        stdout.contains("Mahalanobis distance per component"),
        "{stdout}"
    );

    let text = std::fs::read_to_string(runs.join("cantilever/surrogate.yaml")).unwrap();
    // The envelope's keys sit beside the body's (docs/records.md); only the body's are read.
    let b: Body = serde_yaml::from_str(&text).unwrap();
    assert_eq!(b.variance_kept, 0.9999);
    assert_eq!(b.holdout, 0.2);
    let hp = b.hyperprior.expect("hyperprior recorded");
    assert_eq!(hp.kind, "lognormal");
    assert_eq!((hp.median_length_scale, hp.sd_ln_length_scale), (0.5, 1.5));
    let mut any_poor = false;
    for e in &b.experiments {
        let k = e.basis.n_components;
        assert_eq!(e.basis.variance_kept, 0.9999);
        assert!(k >= 1 && k == e.components.len() && k == e.basis.vectors.len());
        let p = e.outputs.len();
        assert!(e.basis.vectors.iter().all(|v| v.len() == p));
        assert_eq!(e.basis.discarded_by_value.len(), p);
        assert_eq!(e.basis.scales.keys().collect::<Vec<_>>(), ["deflection"]);
        let shares: f64 = e.components.iter().map(|c| c.explained).sum();
        assert!((shares - e.basis.explained_variance).abs() < 1e-12);
        assert!(e.basis.explained_variance >= 0.9999 - 1e-12);
        assert!((e.basis.discarded_variance - (1.0 - e.basis.explained_variance)).abs() < 1e-12);
        assert_eq!(e.components[0].name, "pc1");
        assert!(e.outputs[0].name.starts_with("deflection@"));
        let h = e.holdout.as_ref().expect("holdout recorded");
        assert_eq!(h.fraction, 0.2);
        assert_eq!(h.point_ids.len(), 6, "round(0.2 × 30)");
        assert_eq!(h.n_fit + h.point_ids.len(), e.n_runs);
        for m in &h.mahalanobis {
            let r = &m.reference;
            assert_eq!(r.n_points, 6);
            // A linear trend in 2 parameters: q = 3.
            assert_eq!(r.dof, h.n_fit - 3);
            assert_eq!(r.mean, 6.0);
            let n_q = r.dof as f64;
            let var = 2.0 * 6.0 * (6.0 + n_q - 2.0) / (n_q - 4.0);
            assert!((r.variance.unwrap() - var).abs() < 1e-9 * var);
            assert!(r.q025 < r.mean && r.mean < r.q975);
            let outside = m.value < r.q025 || m.value > r.q975;
            let said = stdout.contains(&format!(
                "{}: the surrogate of {} looks poor",
                e.name, m.component
            ));
            assert_eq!(
                outside, said,
                "{} {}: {}\n{stdout}",
                e.name, m.component, m.value
            );
            any_poor |= outside;
        }
    }
    if !any_poor {
        assert!(
            stdout.contains("the surrogate looks adequate") || stdout.contains("warning:"),
            "{stdout}"
        );
    }
}
