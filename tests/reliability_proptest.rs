//! Smoke run of the parsers that read what users and simulators write: the study parser,
//! the field-data reader, the placeholder grammar and the simulator output parsers.
//! Arbitrary and mutated inputs must give a value or a clean error, never a panic.
//!
//! This is the quick, deterministic part of the fuzzing (a fixed seed, a few hundred
//! cases per entry point, inside `make test`); the cargo-fuzz targets in `fuzz/` search
//! the same entry points for as long as one lets them (DEVELOPERS.md, "Fuzzing").

use assay::runs::parse::{match_stations, parse_output, Parsed};
use assay::study::{self, placeholder, FieldData, OutputFormat};
use proptest::prelude::*;
use proptest::test_runner::{Config, RngSeed};
use std::collections::BTreeMap;
use std::path::Path;

/// Cases per property: enough to walk every branch of these small parsers many times
/// over, few enough that the file runs in a few seconds.
const CASES: u32 = 400;

/// Fixed so a failure is reproduced by running the test again (proptest also records
/// the shrunk case in `tests/reliability_proptest.proptest-regressions`).
const SEED: u64 = 20_261_202;

fn config() -> Config {
    Config {
        cases: CASES,
        rng_seed: RngSeed::Fixed(SEED),
        ..Config::default()
    }
}

/// A valid study: the starting point of the mutations.
const STUDY: &str = r#"name: smoke
parameters:
  - name: E
    unit: GPa
    range: [150.0, 250.0]
    prior: {normal: {mean: 200.0, sd: 20.0}}
  - name: k
    range: [0.1, 0.9]
    prior: {lognormal: {mu: -0.7, sigma: 0.3}}
simulator:
  command: ["./sim.sh", "--E", "{{E}}", "--k", "{{ k }}", "{{run_dir}}/out.csv"]
  files:
    - {template: deck.tmpl, to: deck.inp}
  output: {file: out.csv, format: csv, x: station, y: [deflection, strain]}
  timeout_s: 60
  retries: 1
  env: {OMP_NUM_THREADS: "1", CASE: "{{run_id}}"}
experiments:
  - name: bench-A
    settings: {load: 1200.0, label: first}
    data: field-A.csv
    noise: {sd_column: sd}
  - name: bench-B
    settings: {load: 900}
    data: field-B.csv
    noise: {unknown: {shape: 2.0, scale: 0.01}}
design: {method: sobol, points: 16, seed: 7}
execution: {backend: local, jobs: 2, slurm: {partition: short, time: "10:00"}}
surrogate: {kernel: matern32, mean: linear, holdout: 0.2}
calibration: {chains: 2, warmup: 200, draws: 400, seed: 11}
checks: {confirmation_runs: 2}
"#;

const DATA: &str =
    "station,deflection,strain,sd\n0.5,1.0,0.1,0.05\n1.0,2.0,0.2,0.05\n1.0,2.1,0.2,0.05\n";
const DECK: &str = "E = {{E}}\nk = {{k}}\nload = {{load}}\n";

/// Parse a study whose every data file reads as `data` and every template as `deck`.
fn parse_study(text: &str, data: &str) -> Result<study::Study, study::StudyErrors> {
    let read = |p: &Path| -> std::io::Result<String> {
        if p.extension().is_some_and(|e| e == "tmpl") {
            Ok(DECK.to_string())
        } else {
            Ok(data.to_string())
        }
    };
    study::parse(text, Path::new("study.yaml"), Path::new("."), &read)
}

/// One edit of a text, at a place given as a share of its length.
#[derive(Debug, Clone)]
enum Edit {
    Delete { at: f64, len: usize },
    Insert { at: f64, text: String },
    Truncate { at: f64 },
    DuplicateLine { at: f64 },
    SwapLines { a: f64, b: f64 },
}

fn edit_strategy() -> impl Strategy<Value = Edit> {
    // Characters that matter to YAML and CSV, numbers and a few non-ASCII ones.
    let piece = "[-:{}\\[\\],&*!|>'\"#%@`?0-9a-z .\n\t\u{0}é∞]{1,12}";
    prop_oneof![
        (0.0..1.0, 1usize..20).prop_map(|(at, len)| Edit::Delete { at, len }),
        (0.0..1.0, piece).prop_map(|(at, text)| Edit::Insert { at, text }),
        (0.0..1.0).prop_map(|at| Edit::Truncate { at }),
        (0.0..1.0).prop_map(|at| Edit::DuplicateLine { at }),
        (0.0..1.0, 0.0..1.0).prop_map(|(a, b)| Edit::SwapLines { a, b }),
    ]
}

fn apply(text: &str, edit: &Edit) -> String {
    let chars: Vec<char> = text.chars().collect();
    let pos = |at: f64| ((at * chars.len() as f64) as usize).min(chars.len());
    let mut lines: Vec<&str> = text.split_inclusive('\n').collect();
    let line = |at: f64, n: usize| ((at * n as f64) as usize).min(n.saturating_sub(1));
    match edit {
        Edit::Delete { at, len } => {
            let i = pos(*at);
            let j = (i + len).min(chars.len());
            chars[..i].iter().chain(&chars[j..]).collect()
        }
        Edit::Insert { at, text } => {
            let i = pos(*at);
            let mut s: String = chars[..i].iter().collect();
            s.push_str(text);
            s.extend(&chars[i..]);
            s
        }
        Edit::Truncate { at } => chars[..pos(*at)].iter().collect(),
        Edit::DuplicateLine { at } => {
            if !lines.is_empty() {
                let i = line(*at, lines.len());
                lines.insert(i, lines[i]);
            }
            lines.concat()
        }
        Edit::SwapLines { a, b } => {
            if !lines.is_empty() {
                let (i, j) = (line(*a, lines.len()), line(*b, lines.len()));
                lines.swap(i, j);
            }
            lines.concat()
        }
    }
}

fn mutated(base: &'static str) -> impl Strategy<Value = String> {
    proptest::collection::vec(edit_strategy(), 1..6)
        .prop_map(move |edits| edits.iter().fold(base.to_string(), |t, e| apply(&t, e)))
}

fn names(v: &[&str]) -> Vec<String> {
    v.iter().map(|s| s.to_string()).collect()
}

/// Every study error names a file and says what is wrong.
fn assert_clean(errors: &study::StudyErrors) {
    assert!(!errors.0.is_empty(), "an error without a message");
    for e in &errors.0 {
        assert!(!e.message.trim().is_empty(), "an empty message: {e:?}");
        assert_eq!(e.file, Path::new("study.yaml"), "{e:?}");
    }
}

#[test]
fn the_unmutated_study_is_valid() {
    // Without this the mutations below would only ever test the error path.
    let s = parse_study(STUDY, DATA).expect("the base study is valid");
    assert_eq!(s.experiments.len(), 2);
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn study_parser_survives_mutated_studies(text in mutated(STUDY)) {
        if let Err(e) = parse_study(&text, DATA) {
            assert_clean(&e);
        }
    }

    #[test]
    fn study_parser_survives_arbitrary_text(text in any::<String>()) {
        if let Err(e) = parse_study(&text, DATA) {
            assert_clean(&e);
        }
    }

    #[test]
    fn study_parser_survives_mutated_field_data(data in mutated(DATA)) {
        if let Err(e) = parse_study(STUDY, &data) {
            assert_clean(&e);
        }
    }

    #[test]
    fn field_data_reader_survives_arbitrary_text(
        text in any::<String>(),
        control in proptest::option::of("[a-z]{1,3}"),
        x in proptest::option::of("[a-z]{1,3}"),
        sd in proptest::option::of("[a-z]{1,3}"),
    ) {
        let controls: Vec<String> = control.into_iter().collect();
        let _ = FieldData::parse(&text, &controls, x.as_deref(), &names(&["y"]), sd.as_deref());
    }

    #[test]
    fn placeholders_survive_arbitrary_text(text in "([{}a-zA-Z_0-9 ]|\\{\\{|\\}\\}){0,40}") {
        let mut values = BTreeMap::new();
        values.insert("a".to_string(), "1".to_string());
        let _ = placeholder::render(&text, &values);
        let _ = placeholder::names(&text);
    }

    #[test]
    fn csv_output_parser_survives_mutated_output(
        text in mutated("x,y,z\n0,1.5,2\n1,2.5,3\n2,3.5,4\n"),
        curve in any::<bool>(),
    ) {
        check_output(&text, OutputFormat::Csv, curve);
    }

    #[test]
    fn yaml_output_parser_survives_mutated_output(
        text in mutated("x: [0, 1, 2]\ny: [1.5, 2.5, 3.5]\nz: [\"2\", 3, 4e0]\n"),
        curve in any::<bool>(),
    ) {
        check_output(&text, OutputFormat::Yaml, curve);
    }

    #[test]
    fn json_output_parser_survives_mutated_output(
        text in mutated(r#"{"x": [0, 1, 2], "y": [1.5, 2.5, 3.5], "z": ["2", 3, 4e0]}"#),
        curve in any::<bool>(),
    ) {
        check_output(&text, OutputFormat::Json, curve);
    }

    #[test]
    fn output_parsers_survive_arbitrary_text(text in any::<String>(), curve in any::<bool>()) {
        for format in [OutputFormat::Csv, OutputFormat::Yaml, OutputFormat::Json] {
            check_output(&text, format, curve);
        }
    }

    #[test]
    fn station_matching_survives_any_parsed_output(
        xs in proptest::option::of(proptest::collection::vec(-3.0f64..3.0, 0..5)),
        ys in proptest::collection::vec(proptest::collection::vec(-3.0f64..3.0, 0..5), 1..3),
        stations in proptest::collection::vec(proptest::option::of(-4.0f64..4.0), 0..5),
    ) {
        let parsed = Parsed { x: xs, y: ys };
        let _ = match_stations(&parsed, &stations);
    }
}

/// Parse `text` as a curve (`x`, `y`, `z`) or as scalars, then match it to stations
/// inside and outside the simulated range: a value or an error, never a panic.
fn check_output(text: &str, format: OutputFormat, curve: bool) {
    let x = curve.then_some("x");
    let ys = names(&["y", "z"]);
    if let Ok(p) = parse_output(text, format, x, &ys) {
        assert_eq!(p.y.len(), ys.len());
        let stations = if curve {
            vec![Some(0.0), Some(0.5), Some(1.0), Some(5.0)]
        } else {
            vec![None]
        };
        let _ = match_stations(&p, &stations);
    }
}
