//! The audit trail and the report on the bundled cantilever example (runs in seconds):
//! `assay verify` names a flipped byte in a run output, in design.yaml and in the
//! samples; a changed parameter range makes the design and everything after it stale
//! and `assay all` redoes exactly those stages; the report is one offline HTML file with
//! a plot for every expected figure and the caution.

mod common;

use common::{edit, ensure_model_binary, repo_root, yaml_string, Env};
use scraper::{Html, Selector};
use std::path::{Path, PathBuf};

/// A copy of `models/cantilever` in the test's folder: the simulator by absolute path
/// and a shorter MCMC (2 chains × 1000 draws), so that each `assay all` takes seconds.
fn cantilever(env: &Env) -> PathBuf {
    let bin = ensure_model_binary("cantilever");
    let dir = repo_root().join("models/cantilever");
    let text = std::fs::read_to_string(dir.join("study.yaml")).unwrap();
    let text = edit(
        &text,
        "\"../../target/release/cantilever\"",
        &yaml_string(&bin.display().to_string()),
    );
    let text = edit(
        &text,
        "calibration: {chains: 4, warmup: 2000, draws: 4000, seed: 11}",
        "calibration: {chains: 2, warmup: 500, draws: 1000, seed: 11}",
    );
    for f in ["field-A.csv", "field-B.csv"] {
        std::fs::copy(dir.join(f), env.path(f)).unwrap();
    }
    env.write("study.yaml", &text)
}

fn campaign(env: &Env) -> PathBuf {
    env.runs_root().join("cantilever")
}

/// `assay --runs … --quiet ARGS STUDY`: exit code, stdout, stderr.
fn assay(env: &Env, args: &[&str], study: &Path) -> (Option<i32>, String, String) {
    let out = env.assay(args).arg(study).output().expect("assay starts");
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn all_ok(env: &Env, study: &Path) -> String {
    let (code, out, err) = assay(env, &["all"], study);
    assert_eq!(code, Some(0), "assay all:\n{out}\n{err}");
    out
}

/// Flip the lowest bit of the first digit after `marker` (a digit stays a digit, so the
/// file still parses and only its content changes).
fn flip_digit_after(path: &Path, marker: &str) {
    let mut bytes = std::fs::read(path).unwrap();
    let text = String::from_utf8_lossy(&bytes).into_owned();
    let start = text
        .find(marker)
        .unwrap_or_else(|| panic!("`{marker}` in {}", path.display()))
        + marker.len();
    let at = start
        + bytes[start..]
            .iter()
            .position(u8::is_ascii_digit)
            .expect("a digit");
    bytes[at] ^= 1;
    std::fs::write(path, bytes).unwrap();
}

/// The status word `assay verify` prints for a stage (`ok`, `stale`, …).
fn stage_state<'a>(out: &'a str, stage: &str) -> &'a str {
    out.lines()
        .find_map(|l| {
            let mut w = l.split_whitespace();
            (w.next() == Some(stage)).then(|| w.next().unwrap_or(""))
        })
        .unwrap_or_else(|| panic!("no line for {stage}:\n{out}"))
}

#[test]
fn an_untouched_campaign_verifies_clean() {
    let env = Env::new();
    let study = cantilever(&env);
    all_ok(&env, &study);
    let (code, out, err) = assay(&env, &["verify"], &study);
    assert_eq!(code, Some(0), "{out}\n{err}");
    for stage in ["design", "runs", "surrogate", "posterior"] {
        assert_eq!(stage_state(&out, stage), "ok", "{out}");
    }
    assert!(out.contains("60 done, 0 failed"), "{out}");
    assert!(out.contains("ok: every record matches"), "{out}");
}

#[test]
fn a_flipped_byte_in_a_run_output_is_named() {
    let env = Env::new();
    let study = cantilever(&env);
    all_ok(&env, &study);
    let out_csv = campaign(&env).join("runs/p0007/bench-B/out.csv");
    flip_digit_after(&out_csv, "\n");
    let (code, out, err) = assay(&env, &["verify"], &study);
    assert_eq!(code, Some(1), "{out}\n{err}");
    assert!(
        out.contains("altered    runs/p0007/bench-B/out.csv: sha256"),
        "{out}"
    );
    assert!(err.contains("does not verify: 1 problem"), "{err}");
    // Gone altogether: missing.
    std::fs::remove_file(&out_csv).unwrap();
    let (code, out, _) = assay(&env, &["verify"], &study);
    assert_eq!(code, Some(1));
    assert!(
        out.contains("missing    runs/p0007/bench-B/out.csv"),
        "{out}"
    );
}

#[test]
fn a_flipped_byte_in_the_design_is_named_and_makes_later_stages_stale() {
    let env = Env::new();
    let study = cantilever(&env);
    all_ok(&env, &study);
    flip_digit_after(&campaign(&env).join("design.yaml"), "- id: p0003\n  E: ");
    let (code, out, err) = assay(&env, &["verify"], &study);
    assert_eq!(code, Some(1), "{out}\n{err}");
    assert!(
        out.contains("design.yaml changed since surrogate.yaml was made"),
        "{out}"
    );
    // The point's runs were made at other values than the (edited) design says.
    assert_eq!(stage_state(&out, "runs"), "stale", "{out}");
    assert!(out.contains("(first: p0003/bench-A)"), "{out}");
    assert_eq!(stage_state(&out, "surrogate"), "stale", "{out}");
    assert_eq!(stage_state(&out, "posterior"), "stale", "{out}");
}

#[test]
fn a_flipped_byte_in_the_samples_is_named() {
    let env = Env::new();
    let study = cantilever(&env);
    all_ok(&env, &study);
    let samples = campaign(&env).join("posterior-samples.csv");
    flip_digit_after(&samples, "\n1,");
    let (code, out, _) = assay(&env, &["verify"], &study);
    assert_eq!(code, Some(1), "{out}");
    assert!(
        out.contains("altered    posterior-samples.csv: sha256"),
        "{out}"
    );
    assert_eq!(stage_state(&out, "surrogate"), "ok", "{out}");
    // `assay all` redoes only the calibration, and all verifies again.
    let again = all_ok(&env, &study);
    assert!(again.contains("surrogate: up to date"), "{again}");
    assert!(!again.contains("posterior: up to date"), "{again}");
    assert_eq!(assay(&env, &["verify"], &study).0, Some(0));
}

#[test]
fn a_changed_range_makes_the_design_and_everything_after_it_stale() {
    let env = Env::new();
    let study = cantilever(&env);
    all_ok(&env, &study);
    let text = std::fs::read_to_string(&study).unwrap();
    std::fs::write(
        &study,
        edit(&text, "range: [170.0, 240.0]", "range: [165.0, 240.0]"),
    )
    .unwrap();

    let (code, out, _) = assay(&env, &["verify"], &study);
    assert_eq!(code, Some(1), "{out}");
    for stage in ["design", "runs", "surrogate", "posterior"] {
        assert_eq!(stage_state(&out, stage), "stale", "{stage}:\n{out}");
    }
    assert!(
        out.contains("the study's `parameters` changed since design.yaml was made"),
        "{out}"
    );
    // `assay design` alone does not throw the runs' design away without --force.
    let (code, _, err) = assay(&env, &["design"], &study);
    assert_eq!(code, Some(2), "{err}");
    assert!(
        err.contains("exists but does not match the study: the study's `parameters` changed")
            && err.contains("--force"),
        "{err}"
    );

    let out = all_ok(&env, &study);
    assert!(out.contains("design: 30 points written anew"), "{out}");
    assert!(
        out.contains("runs: 60 done now, 0 failed, 0 already done"),
        "{out}"
    );
    assert!(
        !out.contains("up to date"),
        "every later stage is redone:\n{out}"
    );
    // The earlier runs are kept, not overwritten.
    let kept = std::fs::read_dir(campaign(&env).join("superseded/p0001"))
        .unwrap()
        .count();
    assert_eq!(
        kept, 2,
        "p0001's two experiments are kept under superseded/"
    );
    let (code, out, _) = assay(&env, &["verify"], &study);
    assert_eq!(code, Some(0), "{out}");
}

#[test]
fn a_changed_calibration_setting_makes_only_the_posterior_stale() {
    let env = Env::new();
    let study = cantilever(&env);
    all_ok(&env, &study);
    let text = std::fs::read_to_string(&study).unwrap();
    std::fs::write(
        &study,
        edit(&text, "draws: 1000, seed: 11", "draws: 1200, seed: 11"),
    )
    .unwrap();
    let (code, out, _) = assay(&env, &["verify"], &study);
    assert_eq!(code, Some(1), "{out}");
    assert_eq!(stage_state(&out, "design"), "ok", "{out}");
    assert_eq!(stage_state(&out, "runs"), "ok", "{out}");
    assert_eq!(stage_state(&out, "surrogate"), "ok", "{out}");
    assert_eq!(stage_state(&out, "posterior"), "stale", "{out}");
    assert!(out.contains("the study's `calibration` changed"), "{out}");

    let out = all_ok(&env, &study);
    assert!(out.contains("design: 30 points kept"), "{out}");
    assert!(
        out.contains("0 done now, 0 failed, 60 already done"),
        "{out}"
    );
    assert!(out.contains("surrogate: up to date"), "{out}");
    assert!(!out.contains("posterior: up to date"), "{out}");
    let samples = std::fs::read_to_string(campaign(&env).join("posterior-samples.csv")).unwrap();
    assert_eq!(samples.lines().count(), 1 + 2 * 1200);
    assert_eq!(assay(&env, &["verify"], &study).0, Some(0));
}

fn sel(s: &str) -> Selector {
    Selector::parse(s).expect("a valid selector")
}

#[test]
fn the_report_is_offline_html_with_every_plot_and_the_caution() {
    let env = Env::new();
    let study = cantilever(&env);
    let out = all_ok(&env, &study);
    assert!(out.contains("report: "), "`all` writes the report:\n{out}");
    let text = std::fs::read_to_string(campaign(&env).join("report.html")).unwrap();
    let doc = Html::parse_document(&text);
    assert!(doc.errors.is_empty(), "HTML parse errors: {:?}", doc.errors);

    // One figure per expected plot, each holding exactly one SVG, and no other SVG.
    let mut found: Vec<String> = Vec::new();
    for f in doc.select(&sel("figure[data-plot]")) {
        let kind = f.value().attr("data-plot").unwrap();
        let name = f.value().attr("data-name").unwrap();
        assert_eq!(f.select(&sel("svg")).count(), 1, "{kind} {name}");
        found.push(format!("{kind}:{name}"));
    }
    found.sort();
    let mut expected = vec![
        "design:design",
        "loo:bench-A",
        "loo:bench-B",
        "trace:E",
        "trace:k_theta",
        "density:E",
        "density:k_theta",
        "pairs:parameters",
        "predictive:bench-A/deflection",
        "predictive:bench-B/deflection",
    ];
    expected.sort();
    assert_eq!(found, expected);
    assert_eq!(doc.select(&sel("svg")).count(), expected.len());
    for svg in doc.select(&sel("svg")) {
        assert!(svg.value().attr("viewbox").is_some() || svg.value().attr("viewBox").is_some());
        assert!(svg.value().attr("width").is_none(), "scales with the page");
    }

    // Offline: nothing to fetch, nothing to run.
    for e in doc.select(&sel("*")) {
        for (name, value) in e.value().attrs() {
            if matches!(name, "src" | "href" | "xlink:href" | "action" | "srcset") {
                let v = value.trim().to_ascii_lowercase();
                assert!(
                    !v.starts_with("http://") && !v.starts_with("https://") && !v.starts_with("//"),
                    "external URL in {name}: {value}"
                );
            }
        }
    }
    for tag in ["script", "link", "img", "iframe", "object"] {
        assert_eq!(doc.select(&sel(tag)).count(), 0, "no <{tag}>");
    }
    assert!(!text.contains("url("), "no CSS url()");
    let style: String = doc.select(&sel("style")).flat_map(|s| s.text()).collect();
    assert!(style.contains("@media print") && style.contains("max-width: 100%"));

    // The caution, the posterior table and the audit are in the text.
    let body: String = doc.root_element().text().collect();
    assert!(
        body.contains(assay::calibrate::CAUTION),
        "the caution is embedded"
    );
    assert!(
        body.contains("Every record matches its files"),
        "audit shown"
    );
    let table_rows: Vec<String> = doc
        .select(&sel("#posterior table tbody tr"))
        .map(|r| r.text().collect::<String>())
        .collect();
    assert!(
        table_rows.iter().any(|r| r.starts_with("EGPa")),
        "{table_rows:?}"
    );
}

#[test]
fn the_report_shows_failed_runs_before_any_surrogate() {
    let env = Env::new();
    let study = env.write_minimal_study("fail");
    assert_eq!(assay(&env, &["design"], &study).0, Some(0));
    let (code, _, _) = assay(&env, &["run"], &study);
    assert_eq!(code, Some(3), "failed runs");
    let (code, out, err) = assay(&env, &["report"], &study);
    assert_eq!(code, Some(0), "{out}\n{err}");
    let text = std::fs::read_to_string(env.campaign().join("report.html")).unwrap();
    let doc = Html::parse_document(&text);
    let reasons: String = doc
        .select(&sel("#runs table"))
        .nth(1)
        .expect("a table of failure reasons")
        .text()
        .collect();
    assert!(reasons.contains("exit code 3"), "{reasons}");
    assert!(text.contains("No surrogate yet"));
    assert_eq!(doc.select(&sel("svg")).count(), 1, "the design plot only");
}

/// Remove the `study_parts` block from a record's provenance, as an assay version
/// before it wrote.
fn strip_study_parts(path: &Path) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut out = String::new();
    let mut skipping = false;
    for line in text.lines() {
        if line == "  study_parts:" {
            skipping = true;
            continue;
        }
        if skipping && line.starts_with("    ") {
            continue;
        }
        skipping = false;
        out.push_str(line);
        out.push('\n');
    }
    assert_ne!(out, text, "{} had study_parts", path.display());
    std::fs::write(path, out).unwrap();
}

#[test]
fn records_of_earlier_versions_keep_their_runs_and_refit_the_rest() {
    let env = Env::new();
    let study = cantilever(&env);
    all_ok(&env, &study);
    for f in ["design.yaml", "surrogate.yaml"] {
        strip_study_parts(&campaign(&env).join(f));
    }
    let (code, out, _) = assay(&env, &["verify"], &study);
    assert_eq!(code, Some(1), "{out}");
    // An old design is judged by its settings: still fine, so its runs are kept.
    assert_eq!(stage_state(&out, "design"), "ok", "{out}");
    assert_eq!(stage_state(&out, "runs"), "ok", "{out}");
    assert!(
        out.contains("surrogate.yaml was made by an earlier assay that did not record the study parts it used"),
        "{out}"
    );
    assert_eq!(stage_state(&out, "posterior"), "stale", "{out}");
    let out = all_ok(&env, &study);
    assert!(out.contains("design: 30 points kept"), "{out}");
    assert!(
        out.contains("0 done now, 0 failed, 60 already done"),
        "{out}"
    );
    assert!(
        !out.contains("up to date"),
        "surrogate and posterior redone:\n{out}"
    );
    assert_eq!(assay(&env, &["verify"], &study).0, Some(0));
}

#[test]
fn a_report_without_the_samples_says_so_and_keeps_the_rest() {
    let env = Env::new();
    let study = cantilever(&env);
    all_ok(&env, &study);
    std::fs::remove_file(campaign(&env).join("posterior-samples.csv")).unwrap();
    let (code, out, err) = assay(&env, &["report"], &study);
    assert_eq!(code, Some(0), "{out}\n{err}");
    let text = std::fs::read_to_string(campaign(&env).join("report.html")).unwrap();
    let doc = Html::parse_document(&text);
    let body: String = doc.root_element().text().collect();
    assert!(
        body.contains("No traces, densities or pairwise plot: cannot read posterior-samples.csv"),
        "the reason is shown"
    );
    assert!(
        body.contains("missing posterior-samples.csv"),
        "and the audit names it"
    );
    // The design and the two leave-one-out plots remain.
    assert_eq!(doc.select(&sel("svg")).count(), 3);
    assert_eq!(
        doc.select(&sel("#posterior table")).count(),
        3,
        "posterior, correlation, chains"
    );
}
