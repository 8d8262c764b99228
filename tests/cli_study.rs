//! The study parser through the command line: `assay validate` on a good study and on
//! one broken study per kind of error. Every error must exit with code 2 and name the
//! file, the key path and the line (docs/study.md, "How errors are reported").
//!
//! Expected line numbers are not typed in: each is the line of the minimal study (see
//! `common::Env::minimal_study`) that holds the edited text, found with `line_of`.

mod common;

use common::{edit, line_of, Env, EXPERIMENT};
use std::path::Path;

/// Exit code for bad input (README.md lists the exit codes: 0 success, 2 bad input,
/// 3 finished but some runs failed, 1 anything else).
const EXIT_BAD_INPUT: i32 = 2;

/// Run `assay validate` on `study`; assert exit code 2 and return the `error:` lines.
fn validate_fails(env: &Env, study: &Path) -> Vec<String> {
    let out = env
        .assay(["validate"])
        .arg(study)
        .output()
        .expect("assay runs");
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert_eq!(
        out.status.code(),
        Some(EXIT_BAD_INPUT),
        "expected exit code {EXIT_BAD_INPUT}; stdout:\n{}\nstderr:\n{stderr}",
        String::from_utf8_lossy(&out.stdout)
    );
    let errors: Vec<String> = stderr
        .lines()
        .filter(|l| l.starts_with("error: "))
        .map(str::to_string)
        .collect();
    assert!(!errors.is_empty(), "no `error:` line in stderr:\n{stderr}");
    errors
}

/// Write `text` as the study, validate it, and return its single error line, after
/// checking that it starts with `error: <study file>:<line>: <key>: `.
fn one_error(env: &Env, text: &str, line: usize, key: &str) -> String {
    let study = env.write_study_text(text);
    let errors = validate_fails(env, &study);
    assert_eq!(
        errors.len(),
        1,
        "expected exactly one error, got:\n{}",
        errors.join("\n")
    );
    let e = errors.into_iter().next().expect("one error");
    let head = if key.is_empty() {
        format!("error: {}:{line}: ", study.display())
    } else {
        format!("error: {}:{line}: {key}: ", study.display())
    };
    assert!(
        e.starts_with(&head),
        "error should start with\n  {head}\nbut is\n  {e}"
    );
    e
}

/// The message part of an error line that starts with `error: <file>:<line>: <key>: `.
fn message<'a>(error: &'a str, study: &Path, line: usize, key: &str) -> &'a str {
    let head = format!("error: {}:{line}: {key}: ", study.display());
    error
        .strip_prefix(&head)
        .unwrap_or_else(|| panic!("`{error}` does not start with `{head}`"))
}

#[test]
fn a_good_study_validates_and_names_its_parameters() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let out = env
        .assay(["validate"])
        .arg(study)
        .output()
        .expect("assay runs");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(0),
        "stdout:\n{stdout}\nstderr:\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // Each parameter is listed on its own line with its range.
    assert!(
        stdout
            .lines()
            .any(|l| l.trim_start().starts_with("A ") && l.contains("[0, 1]")),
        "{stdout}"
    );
    assert!(
        stdout
            .lines()
            .any(|l| l.trim_start().starts_with("B ") && l.contains("[1, 2]") && l.contains("mm")),
        "{stdout}"
    );
    assert!(stdout.contains(EXPERIMENT), "{stdout}");
    assert!(stdout.contains("ok: the study is valid"), "{stdout}");
}

#[test]
fn unknown_top_level_key() {
    let env = Env::new();
    let text = format!("{}colour: blue\n", env.minimal_study("ok"));
    let line = line_of(&text, "colour: blue");
    let e = one_error(&env, &text, line, "colour");
    assert!(e.contains("unknown key `colour`"), "{e}");
}

#[test]
fn unknown_nested_key_names_its_full_path() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "    range: [0.0, 1.0]",
        "    rnage: [0.0, 1.0]",
    );
    let line = line_of(&text, "rnage");
    let e = one_error(&env, &text, line, "parameters[0].rnage");
    assert!(e.contains("unknown key `rnage`"), "{e}");
    // The message lists the keys that are allowed, so the typo is easy to fix.
    assert!(e.contains("`range`"), "{e}");
}

#[test]
fn wrong_type_of_a_range() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "    range: [0.0, 1.0]",
        "    range: \"abc\"",
    );
    let line = line_of(&text, "\"abc\"");
    let e = one_error(&env, &text, line, "parameters[0].range");
    assert!(e.contains("invalid type"), "{e}");
}

#[test]
fn reversed_range_message_is_pinned() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "    range: [0.0, 1.0]",
        "    range: [1.0, 0.0]",
    );
    let line = line_of(&text, "[1.0, 0.0]");
    let study = env.path("study.yaml");
    let e = one_error(&env, &text, line, "parameters[0].range");
    assert_eq!(
        message(&e, &study, line, "parameters[0].range"),
        "range [1, 0] is reversed or empty (expected [low, high] with low < high)"
    );
}

#[test]
fn empty_range() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "    range: [1.0, 2.0]",
        "    range: [1.5, 1.5]",
    );
    let line = line_of(&text, "[1.5, 1.5]");
    let e = one_error(&env, &text, line, "parameters[1].range");
    assert!(e.contains("range [1.5, 1.5] is reversed or empty"), "{e}");
}

#[test]
fn normal_prior_mean_outside_the_range_message_is_pinned() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "    range: [1.0, 2.0]\n",
        "    range: [1.0, 2.0]\n    prior: {normal: {mean: 3.0, sd: 0.5}}\n",
    );
    let line = line_of(&text, "normal:");
    let study = env.path("study.yaml");
    let e = one_error(&env, &text, line, "parameters[1].prior.normal.mean");
    assert_eq!(
        message(&e, &study, line, "parameters[1].prior.normal.mean"),
        "prior mean 3 is outside the range [1, 2]"
    );
}

#[test]
fn lognormal_prior_median_outside_the_range() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "    range: [1.0, 2.0]\n",
        "    range: [1.0, 2.0]\n    prior: {lognormal: {mu: 2.0, sigma: 0.5}}\n",
    );
    let line = line_of(&text, "lognormal:");
    let e = one_error(&env, &text, line, "parameters[1].prior.lognormal.mu");
    // The median of a lognormal is exp(mu); exp(2) ≈ 7.39 lies above the range [1, 2].
    let median = 2.0f64.exp();
    assert!(
        e.contains(&format!(
            "prior median exp(2) = {median} is outside the range [1, 2]"
        )),
        "{e}"
    );
}

#[test]
fn duplicate_parameter_name() {
    let env = Env::new();
    let text = edit(&env.minimal_study("ok"), "  - name: B", "  - name: A");
    // Keep the command's placeholders known, so that the duplicate is the only error.
    let text = edit(&text, "\"{{B}}\"", "\"{{A}}\"");
    let line = line_of(&text, "unit: mm") - 1;
    let e = one_error(&env, &text, line, "parameters[1].name");
    assert!(e.ends_with("duplicate parameter name `A`"), "{e}");
}

#[test]
fn malformed_parameter_name_message_is_pinned() {
    let env = Env::new();
    let text = edit(&env.minimal_study("ok"), "  - name: B", "  - name: 2B");
    let text = edit(&text, "\"{{B}}\"", "\"{{A}}\"");
    let line = line_of(&text, "name: 2B");
    let study = env.path("study.yaml");
    let e = one_error(&env, &text, line, "parameters[1].name");
    assert_eq!(
        message(&e, &study, line, "parameters[1].name"),
        "`2B` is not a valid parameter name (expected [A-Za-z_][A-Za-z0-9_]*)"
    );
}

#[test]
fn malformed_study_name() {
    let env = Env::new();
    // A name with `/` would put the campaign folder outside `--runs`.
    let text = edit(&env.minimal_study("ok"), "name: tsim", "name: ../outside");
    let e = one_error(&env, &text, 1, "name");
    assert!(
        e.contains("`../outside` is not a valid study name (expected [A-Za-z0-9._-]+)"),
        "{e}"
    );
}

#[test]
fn duplicate_experiment_name() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "    noise: {sd: 0.1}\n",
        "    noise: {sd: 0.1}\n  - name: bench # again\n    data: field.csv\n    noise: {sd: 0.2}\n",
    );
    let line = line_of(&text, "# again");
    let e = one_error(&env, &text, line, "experiments[1].name");
    assert!(e.ends_with("duplicate experiment name `bench`"), "{e}");
}

#[test]
fn missing_data_file() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "data: field.csv",
        "data: no-such-file.csv",
    );
    let line = line_of(&text, "no-such-file.csv");
    let e = one_error(&env, &text, line, "experiments[0].data");
    let expected = env.path("no-such-file.csv");
    assert!(
        e.contains(&format!("cannot read data file `{}`", expected.display())),
        "{e}"
    );
}

#[test]
fn missing_template_file() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "  output:\n",
        "  files:\n    - {template: no-such.tmpl, to: deck.inp}\n  output:\n",
    );
    let line = line_of(&text, "no-such.tmpl");
    let e = one_error(&env, &text, line, "simulator.files[0].template");
    let expected = env.path("no-such.tmpl");
    assert!(
        e.contains(&format!("cannot read template `{}`", expected.display())),
        "{e}"
    );
}

#[test]
fn unknown_placeholder_in_the_command_message_is_pinned() {
    let env = Env::new();
    let text = edit(&env.minimal_study("ok"), "\"{{B}}\"", "\"{{C}}\"");
    let line = line_of(&text, "{{C}}");
    let study = env.path("study.yaml");
    // `{{C}}` is the fourth argument (index 3): program, mode, A, C, out.
    let e = one_error(&env, &text, line, "simulator.command[3]");
    assert_eq!(
        message(&e, &study, line, "simulator.command[3]"),
        "unknown placeholder `{{C}}` for experiment `bench` (known: A, B, run_dir, run_id, study_dir)"
    );
}

#[test]
fn unknown_placeholder_in_a_template_names_the_template_and_its_line() {
    let env = Env::new();
    let template = env.write("deck.tmpl", "# deck\na = {{A}}\nb = {{Bee}}\n");
    let text = edit(
        &env.minimal_study("ok"),
        "  output:\n",
        "  files:\n    - {template: deck.tmpl, to: deck.inp}\n  output:\n",
    );
    let line = line_of(&text, "deck.tmpl");
    let e = one_error(&env, &text, line, "simulator.files[0].template");
    assert!(e.contains("unknown placeholder `{{Bee}}`"), "{e}");
    // `{{Bee}}` is on line 3 of the template written above.
    assert!(
        e.contains(&format!("(template {}:3)", template.display())),
        "{e}"
    );
}

#[test]
fn malformed_placeholder() {
    let env = Env::new();
    let text = edit(&env.minimal_study("ok"), "\"{{B}}\"", "\"{{ 1x }}\"");
    let line = line_of(&text, "{{ 1x }}");
    let e = one_error(&env, &text, line, "simulator.command[3]");
    assert!(
        e.ends_with("`{{ 1x }}` is not a placeholder (expected `{{name}}` with a parameter, setting, run_dir or run_id)"),
        "{e}"
    );
}

#[test]
fn non_number_in_the_data_names_the_data_file_and_line() {
    let env = Env::new();
    let text = env.minimal_study("ok");
    let study = env.write_study_text(&text);
    // Overwrite the field data: `abc` is on line 3 (the header is line 1).
    let data = env.write("field.csv", "x,y\n0,0.6\n0.5,abc\n2,3.5\n");
    let errors = validate_fails(&env, &study);
    assert_eq!(errors.len(), 1, "{errors:?}");
    let line = line_of(&text, "data: field.csv");
    assert_eq!(
        message(&errors[0], &study, line, "experiments[0].data"),
        format!("{}:3: `abc` in column `y` is not a number", data.display())
    );
}

#[test]
fn noise_sd_must_be_positive() {
    for sd in ["0.0", "-0.1"] {
        let env = Env::new();
        let text = edit(
            &env.minimal_study("ok"),
            "noise: {sd: 0.1}",
            &format!("noise: {{sd: {sd}}}"),
        );
        let line = line_of(&text, "noise:");
        let e = one_error(&env, &text, line, "experiments[0].noise.sd");
        assert!(e.ends_with("must be > 0"), "sd {sd}: {e}");
    }
}

#[test]
fn surrogate_variance_kept_and_holdout_must_be_shares() {
    for (key, bad, msg) in [
        (
            "variance_kept",
            "0.0",
            "variance_kept 0 must be in (0, 1] (the share of a curve's variance kept by its principal components)",
        ),
        (
            "variance_kept",
            "1.5",
            "variance_kept 1.5 must be in (0, 1] (the share of a curve's variance kept by its principal components)",
        ),
        (
            "holdout",
            "0.5",
            "holdout 0.5 must be in [0, 0.5) (the share of design points held out for validation)",
        ),
        (
            "holdout",
            "-0.1",
            "holdout -0.1 must be in [0, 0.5) (the share of design points held out for validation)",
        ),
    ] {
        let env = Env::new();
        let text = format!("{}surrogate:\n  {key}: {bad}\n", env.minimal_study("ok"));
        let line = line_of(&text, &format!("{key}: {bad}"));
        let e = one_error(&env, &text, line, &format!("surrogate.{key}"));
        assert!(e.ends_with(msg), "{key} {bad}: {e}");
    }
}

#[test]
fn an_unknown_hyperprior_is_refused() {
    let env = Env::new();
    let text = format!(
        "{}surrogate: {{hyperprior: gamma}}\n",
        env.minimal_study("ok")
    );
    let line = line_of(&text, "hyperprior: gamma");
    let e = one_error(&env, &text, line, "surrogate.hyperprior");
    assert!(
        e.ends_with("unknown variant `gamma`, expected `none` or `lognormal`"),
        "{e}"
    );
}

#[test]
fn a_design_of_one_point_is_too_small() {
    let env = Env::new();
    let text = edit(&env.minimal_study("ok"), "points: 4", "points: 1");
    let line = line_of(&text, "points: 1");
    let e = one_error(&env, &text, line, "design.points");
    assert!(e.ends_with("1 points are too few (at least 2)"), "{e}");
}

#[test]
fn every_error_is_reported_not_only_the_first() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "    range: [0.0, 1.0]",
        "    range: [1.0, 0.0]",
    );
    let text = edit(&text, "points: 4", "points: 1");
    let study = env.write_study_text(&text);
    let errors = validate_fails(&env, &study);
    assert_eq!(errors.len(), 2, "{errors:?}");
    // In file order: the range comes before the design.
    assert!(errors[0].contains("parameters[0].range"), "{errors:?}");
    assert!(errors[1].contains("design.points"), "{errors:?}");
}

#[test]
fn yaml_syntax_error_names_the_file_and_the_line() {
    let env = Env::new();
    // A stray `]` closes a flow sequence that is not open: a syntax error, not a type error.
    let text = edit(
        &env.minimal_study("ok"),
        "    range: [0.0, 1.0]",
        "    range: [0.0, 1.0]]",
    );
    let line = line_of(&text, "1.0]]");
    let e = one_error(&env, &text, line, "");
    assert!(e.contains("did not find expected key"), "{e}");
}

#[test]
fn a_missing_study_file_is_bad_input() {
    let env = Env::new();
    let study = env.path("no-such-study.yaml");
    let errors = validate_fails(&env, &study);
    assert!(
        errors[0].contains(&study.display().to_string()),
        "{errors:?}"
    );
    assert!(
        errors[0].contains("cannot read the study file"),
        "{errors:?}"
    );
}

#[test]
fn help_lists_the_commands() {
    let env = Env::new();
    let out = env.assay(["--help"]).output().expect("assay runs");
    assert_eq!(out.status.code(), Some(0));
    let stdout = String::from_utf8_lossy(&out.stdout);
    for verb in [
        "validate",
        "design",
        "run",
        "status",
        "fit",
        "calibrate",
        "all",
    ] {
        assert!(
            stdout.lines().any(|l| l.trim_start().starts_with(verb)),
            "--help does not list `{verb}`:\n{stdout}"
        );
    }
}

#[test]
fn an_unknown_command_is_bad_input() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let out = env
        .assay(["frobnicate"])
        .arg(&study)
        .output()
        .expect("assay runs");
    assert_eq!(out.status.code(), Some(EXIT_BAD_INPUT));
    assert!(String::from_utf8_lossy(&out.stderr).contains("frobnicate"));
}

#[test]
fn calibration_and_slurm_options_are_checked_with_their_lines() {
    let env = Env::new();
    let base = env.minimal_study("ok");
    let cases = [
        (
            "seed: 3}",
            "seed: 3, sampler: ensemble, walkers: 7}",
            "calibration.walkers",
            "7 walkers: the ensemble needs an even number, at least 4 and more than the 2 parameters",
        ),
        (
            "seed: 3}",
            "seed: 3, walkers: 8}",
            "calibration.walkers",
            "walkers belong to `sampler: ensemble`",
        ),
        (
            "seed: 3}",
            "seed: 3, max_draws: 500}",
            "calibration.max_draws",
            "max_draws belongs to `until_converged: true`",
        ),
        (
            "seed: 3}",
            "seed: 3, until_converged: true, max_draws: 50}",
            "calibration.max_draws",
            "max_draws 50 is less than draws 100",
        ),
    ];
    for (from, to, key, msg) in cases {
        let text = edit(&base, from, to);
        let line = line_of(&text, to);
        let e = one_error(&env, &text, line, key);
        assert_eq!(message(&e, &env.path("study.yaml"), line, key), msg);
    }
    let text = edit(
        &base,
        "seed: 3}",
        "seed: 3, prior_from: nowhere/posterior.yaml}",
    );
    let line = line_of(&text, "prior_from");
    let e = one_error(&env, &text, line, "calibration.prior_from");
    assert!(
        e.contains("no such file:") && e.contains("nowhere/posterior.yaml"),
        "{e}"
    );

    let slurm = [
        (
            "partition: \"my part\"",
            "execution.slurm.partition",
            "`my part` is not a Slurm name (letters, digits, `._-,+`)",
        ),
        (
            "mem: 4GB",
            "execution.slurm.mem",
            "`4GB` is not a Slurm memory size (a number with K, M, G or T)",
        ),
        (
            "time: \"1 hour\"",
            "execution.slurm.time",
            "`1 hour` is not a Slurm time (`MM`, `HH:MM:SS`, `D-HH:MM`)",
        ),
        (
            "extra_args: [\"constraint=avx2\"]",
            "execution.slurm.extra_args",
            "`constraint=avx2` is not an sbatch option (options start with `-`)",
        ),
        (
            "array_limit: 0",
            "execution.slurm.array_limit",
            "must be at least 1",
        ),
    ];
    for (kv, key, msg) in slurm {
        let text = format!("{base}execution:\n  backend: slurm\n  slurm:\n    {kv}\n");
        let line = line_of(&text, kv);
        let e = one_error(&env, &text, line, key);
        assert_eq!(message(&e, &env.path("study.yaml"), line, key), msg);
    }
}
