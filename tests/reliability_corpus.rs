//! The corpus of broken inputs (`tests/corpus/<case>/`): study files and field-data files
//! that are wrong in one way each. `assay validate` must refuse every one with exit code
//! 2 (bad input, docs/study.md "How errors are reported") and one `error:` line that
//! names the file, the line and the key where they are known, and says what is wrong.
//!
//! Each case folder holds `study.yaml`, its field data `field-A.csv` and the template
//! `deck.tmpl`; a case differs from the others only in what it breaks. The table below
//! pins the start of the first error line (after `error: `), so the wording is part of
//! the interface (the error format of docs/study.md, "How errors are reported"; a
//! message says what is wrong and, where it can, what to do). Reproduce one by hand with
//! `cd tests/corpus/<case> && assay validate study.yaml`.

mod common;

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::Command;

/// Exit code for bad input (README.md lists the exit codes: 0 success, 2 bad input,
/// 3 finished but some runs failed, 1 anything else).
const EXIT_BAD_INPUT: i32 = 2;

/// Case folder → the start of its first error line, as printed by `assay validate
/// study.yaml` run inside the folder.
const CASES: &[(&str, &str)] = &[
    ("calibration-chains-zero", "study.yaml:26: calibration.chains: chains must be at least 1"),
    ("calibration-nuts-sampled-discrepancy", "study.yaml:27: calibration.sampler: `nuts` needs the discrepancy's hyperparameters fixed"),
    ("calibration-too-few-draws", "study.yaml:26: calibration.draws: 3 draws per chain are too few (at least 10)"),
    ("data-duplicated-column", "study.yaml:23: experiments[0].data: ./field-A.csv:1: column `deflection` appears more than once"),
    ("data-empty-cell", "study.yaml:23: experiments[0].data: ./field-A.csv:2: empty cell in column `deflection`"),
    ("data-empty-file", "study.yaml:23: experiments[0].data: ./field-A.csv:1: the data file is empty (expected a header line naming the columns, then one row per measurement)"),
    ("data-header-only", "study.yaml:23: experiments[0].data: ./field-A.csv:1: no data rows"),
    ("data-infinite", "study.yaml:23: experiments[0].data: ./field-A.csv:2: `inf` in column `deflection` is not finite"),
    ("data-missing-x-column", "study.yaml:23: experiments[0].data: ./field-A.csv:1: no column `station` (columns: deflection)"),
    ("data-missing-y-column", "study.yaml:23: experiments[0].data: ./field-A.csv:1: no column `deflection` (columns: station, defl)"),
    ("data-nan", "study.yaml:23: experiments[0].data: ./field-A.csv:3: `NaN` in column `deflection` is not finite"),
    ("data-not-utf8", "study.yaml:23: experiments[0].data: cannot read data file `./field-A.csv`: stream did not contain valid UTF-8"),
    ("data-path-is-a-folder", "study.yaml:23: experiments[0].data: cannot read data file `./folder`"),
    ("data-ragged-row", "study.yaml:23: experiments[0].data: ./field-A.csv:3: malformed row"),
    ("data-sd-column-missing", "study.yaml:23: experiments[0].data: ./field-A.csv:1: no column `sd` (columns: station, deflection)"),
    ("data-sd-column-nonpositive", "study.yaml:23: experiments[0].data: ./field-A.csv:3: sd `0` in column `sd` must be > 0"),
    ("data-text-in-number", "study.yaml:23: experiments[0].data: ./field-A.csv:3: `two` in column `deflection` is not a number"),
    ("discrepancy-hyperparameters-unknown", "study.yaml:32: calibration.discrepancy.hyperparameters: unknown variant `mode`, expected `sampled` or `map`"),
    ("discrepancy-map-nothing-to-estimate", "study.yaml:34: calibration.discrepancy.hyperparameters: `map` needs a hyperparameter to estimate, but `sd` and `length_scale` are both fixed: give one of them a prior or leave `hyperparameters` out"),
    ("design-one-point", "study.yaml:25: design.points: 1 points are too few (at least 2)"),
    ("empty-study-file", "study.yaml: the study file is empty (expected a mapping with at least `name`, `parameters`, `simulator` and `experiments`)"),
    ("env-name-injects-shell", "study.yaml:20: simulator.env.X;touch pwned;Y: `X;touch pwned;Y` is not a valid environment variable name (expected [A-Za-z_][A-Za-z0-9_]*)"),
    ("experiment-name-escapes", "study.yaml:21: experiments[0].name: `../../bench` is not a valid experiment name (expected [A-Za-z0-9._-]+)"),
    ("malformed-placeholder", "study.yaml:10: simulator.command[4]: unclosed `{{` (expected `{{name}}`)"),
    ("missing-data-file", "study.yaml:23: experiments[0].data: cannot read data file `./no-such-field.csv`"),
    ("missing-required-range", "study.yaml:6: parameters[1]: missing key `range`"),
    ("missing-required-simulator", "study.yaml:1: missing key `simulator`"),
    ("missing-template-file", "study.yaml:12: simulator.files[0].template: cannot read template `./no-such.tmpl`"),
    ("name-absolute", "study.yaml:1: name: `/tmp/corpus` is not a valid study name (expected [A-Za-z0-9._-]+)"),
    ("name-dot-dot", "study.yaml:1: name: `..` is not a valid study name (expected [A-Za-z0-9._-]+)"),
    ("name-empty", "study.yaml:1: name: `` is not a valid study name (expected [A-Za-z0-9._-]+)"),
    ("name-escapes-upwards", "study.yaml:1: name: `../escape` is not a valid study name (expected [A-Za-z0-9._-]+)"),
    ("name-with-nul", r#"study.yaml:1: name: `cor\0pus` is not a valid study name (expected [A-Za-z0-9._-]+)"#),
    ("name-with-slash", "study.yaml:1: name: `a/b` is not a valid study name (expected [A-Za-z0-9._-]+)"),
    ("noise-sd-negative", "study.yaml:24: experiments[0].noise.sd: sd -0.05 must be > 0"),
    ("noise-unknown-shape-zero", "study.yaml:24: experiments[0].noise.unknown.shape: inverse-gamma shape 0 must be > 0"),
    ("output-file-escapes", "study.yaml:14: simulator.output.file: `../out.csv` must be a relative path inside the run folder (no `..`, not absolute)"),
    ("parameter-name-duplicate", "study.yaml:6: parameters[1].name: duplicate parameter name `E`"),
    ("parameter-name-not-identifier", "study.yaml:6: parameters[1].name: `k-1` is not a valid parameter name (expected [A-Za-z_][A-Za-z0-9_]*)"),
    ("parameter-name-reserved", "study.yaml:6: parameters[1].name: `run_dir` is reserved for the run folder placeholders"),
    ("placeholder-not-an-identifier", "study.yaml:10: simulator.command[4]: `{{k + 1}}` is not a placeholder (expected `{{name}}` with a parameter, setting, run_dir or run_id)"),
    ("prior-lognormal-median-outside", "study.yaml:8: parameters[1].prior.lognormal.mu: prior median exp(3) = 20.085536923187668 is outside the range [0.1, 0.9]"),
    ("prior-lognormal-nonpositive-range", "study.yaml:8: parameters[1].prior: a lognormal prior needs a range with positive values, got [-2, -1]"),
    ("prior-normal-mean-outside", "study.yaml:8: parameters[1].prior.normal.mean: prior mean 1.5 is outside the range [0.1, 0.9]"),
    ("prior-normal-sd-zero", "study.yaml:8: parameters[1].prior.normal.sd: sd 0 must be > 0"),
    ("range-empty", "study.yaml:5: parameters[0].range: range [150, 150] is reversed or empty (expected [low, high] with low < high)"),
    ("range-infinite", "study.yaml:5: parameters[0].range: range [150, inf] must be finite"),
    ("range-nan", "study.yaml:5: parameters[0].range: range [NaN, 250] must be finite"),
    ("range-reversed", "study.yaml:5: parameters[0].range: range [250, 150] is reversed or empty (expected [low, high] with low < high)"),
    ("setting-clashes-with-parameter", "study.yaml:22: experiments[0].settings.E: setting `E` clashes with a parameter, control or run placeholder"),
    ("slurm-partition-newline", "study.yaml:27: execution.slurm.partition: must be one line"),
    ("study-is-a-folder", "study.yaml: cannot read the study file: it is a folder"),
    ("study-not-a-mapping", "study.yaml:1: invalid type: sequence, expected a mapping of keys"),
    ("study-not-utf8", "study.yaml: the study file is not UTF-8 text (invalid byte at offset 12)"),
    ("study-only-a-comment", "study.yaml: the study file is empty (expected a mapping with at least `name`, `parameters`, `simulator` and `experiments`)"),
    ("syntax-bad-indentation", "study.yaml:4: mapping values are not allowed in this context"),
    ("syntax-duplicate-key", "study.yaml:1: duplicate key `name`"),
    ("syntax-tab-indentation", "study.yaml:7: found a tab character that violates indentation, while scanning a plain scalar"),
    ("syntax-unclosed-flow-sequence", r#"study.yaml:5: parameters[0].range[1]: invalid type: string "250.0 - name", expected f64"#),
    ("syntax-unterminated-string", "study.yaml:10: did not find expected ',' or ']', while parsing a flow sequence"),
    ("template-to-absolute", "study.yaml:12: simulator.files[0].to: `/tmp/deck.inp` must be a relative path inside the run folder (no `..`, not absolute)"),
    ("template-to-parent", "study.yaml:12: simulator.files[0].to: `../../deck.inp` must be a relative path inside the run folder (no `..`, not absolute)"),
    ("timeout-zero", "study.yaml:18: simulator.timeout_s: timeout 0 must be > 0 seconds"),
    ("type-command-is-string", r#"study.yaml:10: simulator.command: invalid type: string "./sim.sh --E {{E}}", expected a sequence"#),
    ("type-parameters-mapping", "study.yaml:3: parameters: invalid type: map, expected a sequence"),
    ("type-points-is-text", r#"study.yaml:25: design.points: invalid type: string "many", expected usize"#),
    ("type-points-negative", "study.yaml:25: design.points: invalid type: integer `-5`, expected usize"),
    ("type-range-is-text", r#"study.yaml:5: parameters[0].range: invalid type: string "wide", expected an array of length 2"#),
    ("type-range-three-values", "study.yaml:5: parameters[0].range: invalid length 3, expected sequence of 2 elements"),
    ("type-retries-fraction", "study.yaml:19: simulator.retries: invalid type: floating point `1.5`, expected u32"),
    ("unknown-design-method", "study.yaml:25: design.method: unknown variant `grid`, expected one of `lhs`, `sobol`, `random`"),
    ("unknown-nested-key", "study.yaml:15: simulator.output.fromat: unknown key `fromat`, expected one of `file`, `format`, `x`, `y`"),
    ("unknown-output-format", "study.yaml:15: simulator.output.format: unknown variant `xlsx`, expected one of `csv`, `yaml`, `json`"),
    ("unknown-placeholder-in-command", "study.yaml:10: simulator.command[4]: unknown placeholder `{{kk}}` for experiment `bench-A`"),
    ("unknown-placeholder-in-template", "study.yaml:12: simulator.files[0].template: unknown placeholder `{{lod}}` for experiment `bench-A` (template ./deck.tmpl:3)"),
    ("unknown-prior", "study.yaml:6: parameters[1]: unknown prior `cauchy`; expected `uniform`, `{normal: {mean, sd}}` or `{lognormal: {mu, sigma}}`"),
    ("unknown-top-level-key", "study.yaml:27: colour: unknown key `colour`"),
    ("yaml-alias-bomb", "study.yaml: the YAML expands too far through its aliases (`*name`); a study needs none this large (repetition limit exceeded)"),
    ("yaml-deep-nesting", "study.yaml:8: the YAML is nested too deeply (recursion limit exceeded)"),
];

fn corpus() -> PathBuf {
    common::repo_root().join("tests").join("corpus")
}

/// `assay validate study.yaml` inside `dir`: exit code, stdout and stderr.
fn validate(dir: &Path, runs: &Path) -> (Option<i32>, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_assay"))
        .arg("--runs")
        .arg(runs)
        .arg("--quiet")
        .args(["validate", "study.yaml"])
        .current_dir(dir)
        .output()
        .expect("assay starts");
    let text = |b: &[u8]| String::from_utf8_lossy(b).into_owned();
    (out.status.code(), text(&out.stdout), text(&out.stderr))
}

/// A temporary copy of case `case`'s study and template (its data is for the caller).
fn copy_of(case: &str) -> tempfile::TempDir {
    let dir = tempfile::tempdir().expect("temp folder");
    for f in ["study.yaml", "deck.tmpl", "field-A.csv"] {
        std::fs::copy(corpus().join(case).join(f), dir.path().join(f)).expect("copy");
    }
    dir
}

#[test]
fn every_case_folder_is_in_the_table_and_every_entry_has_a_folder() {
    let folders: BTreeSet<String> = std::fs::read_dir(corpus())
        .expect("tests/corpus")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    let table: BTreeSet<String> = CASES.iter().map(|(c, _)| c.to_string()).collect();
    assert_eq!(table.len(), CASES.len(), "a case is listed twice");
    assert_eq!(folders, table, "tests/corpus and the table disagree");
    // Our acceptance rule for the corpus: at least 40 broken inputs.
    assert!(CASES.len() >= 40);
}

#[test]
fn every_broken_input_is_refused_with_exit_2_and_its_message() {
    let runs = tempfile::tempdir().expect("temp folder");
    let mut failures = Vec::new();
    for (case, expected) in CASES {
        let (code, _, stderr) = validate(&corpus().join(case), runs.path());
        let first = stderr
            .lines()
            .find(|l| l.starts_with("error: "))
            .unwrap_or("");
        if stderr.contains("panicked") {
            failures.push(format!("{case}: panicked:\n{stderr}"));
        } else if code != Some(EXIT_BAD_INPUT) {
            failures.push(format!(
                "{case}: exit code {code:?}, expected {EXIT_BAD_INPUT}:\n{stderr}"
            ));
        } else if !first.starts_with(&format!("error: {expected}")) {
            failures.push(format!(
                "{case}:\n  expected  error: {expected}\n  got       {first}"
            ));
        }
    }
    // Validation writes nothing: not even the campaign folder.
    assert_eq!(
        std::fs::read_dir(runs.path()).expect("runs folder").count(),
        0,
        "validate wrote into the runs folder"
    );
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn the_corpus_base_study_is_valid() {
    // The cases are the base study with one thing broken. Without a valid base, a case
    // could fail for a reason other than the one it is named for.
    let dir = copy_of("range-reversed");
    let study = dir.path().join("study.yaml");
    let text = std::fs::read_to_string(&study).expect("study");
    let fixed = common::edit(&text, "range: [250.0, 150.0]", "range: [150.0, 250.0]");
    std::fs::write(&study, fixed).expect("write");
    let (code, _, stderr) = validate(dir.path(), &dir.path().join("runs"));
    assert_eq!(code, Some(0), "{stderr}");
}

#[test]
fn duplicated_x_values_in_field_data_are_replicates_not_an_error() {
    // docs/study.md, "Field data": repeated x values are replicates. The corpus therefore
    // holds a duplicated *column* (ambiguous), not duplicated x values (valid).
    let dir = copy_of("data-duplicated-column");
    std::fs::write(
        dir.path().join("field-A.csv"),
        "station,deflection\n0.5,1.02\n0.5,1.04\n1.0,2.11\n",
    )
    .expect("write");
    let (code, stdout, stderr) = validate(dir.path(), &dir.path().join("runs"));
    assert_eq!(code, Some(0), "{stderr}");
    assert!(
        stdout.contains("3 data rows at 2 output locations"),
        "{stdout}"
    );
}
