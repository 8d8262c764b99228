//! Pins the content of the records that `assay all` writes for the bundled cantilever
//! study (models/cantilever/study.yaml), so that a change of the code that changes any
//! recorded number, key or string is caught.
//!
//! What is pinned, against the files in `tests/fixtures/cantilever-pinned/`:
//!
//! - `design.yaml`, `surrogate.yaml`, `posterior.yaml`, `checks.yaml`: each record's body,
//!   that is everything but its `provenance` block (tool version, git commit, command
//!   line, host, user, clock times and input hashes legitimately differ between runs);
//! - `runs.yaml`: the body of every run record `runs/<point>/<experiment>/run.yaml`,
//!   keyed `<point>/<experiment>`, with the temporary campaign folder in the simulator's
//!   command line written as `<runs>`;
//! - `posterior-samples.yaml`: the header, the number of rows and the sha256 of
//!   `posterior-samples.csv` (16,000 draws, about 1 MB: its hash is committed, not the
//!   file; the test also requires the hash to equal the one `posterior.yaml` records).
//!
//! Wall-clock keys ([`TIME_KEYS`]: `elapsed_s`, `sampling_s`, `started_utc`, ...) are
//! removed from the bodies before comparing. Bodies are compared as YAML values walked in
//! parallel: the same structure, the same keys in the same order, the same strings,
//! booleans and integers, and floats equal to the relative tolerance [`REL_TOL`].
//!
//! Which machines can check which records. Two runs on one machine write byte-identical
//! bodies and samples, whatever the number of threads. But the surrogate and everything
//! after it depend on the numerical libraries' last digits: OpenBLAS picks its kernels by
//! CPU, and glibc's libm picks FMA or non-FMA code for `exp`/`ln`/`pow` by CPU. Those
//! last-digit differences do not stay small: the hyperparameter search takes a different
//! path (other evaluation counts, hyperparameters different by ~1e-4 relative), and the
//! Metropolis accept/reject steps then make every draw different (measured on the machine
//! that wrote the fixture by forcing other kernels with `OPENBLAS_CORETYPE`, or hiding
//! FMA from libm with `GLIBC_TUNABLES`). No tolerance both absorbs that and catches a
//! changed draw. So:
//!
//! - the design and the run records (no linear algebra) are compared on every machine;
//! - the surrogate, posterior, checks and samples are compared number for number only
//!   when this machine's numerical stack (CPU architecture, OpenBLAS build and kernel,
//!   glibc version, the CPU's FMA/AVX features: see [`numeric_stack`]) is the one recorded
//!   in `numeric-stack.txt` when the fixture was written; then the samples' sha256 must
//!   match too, which catches any changed draw. On any other stack only their shape is
//!   compared (structure, keys, strings other than the samples' hash, booleans, the
//!   samples' header and row count) and the test says so on stderr. This cannot fail
//!   falsely on another CPU, and it still catches every changed number on the machine
//!   that pins them. `ASSAY_PIN_STRICT=1` forces the number-for-number comparison,
//!   `ASSAY_PIN_STRICT=0` the shape-only one.
//!
//! Regenerating after an intended change of numbers: run
//! `tests/fixtures/cantilever-pinned/make.sh` (it runs this test with `ASSAY_PIN_WRITE=1`,
//! which writes the fixture from a fresh `assay all` instead of comparing, and records this
//! machine's numerical stack), review `git diff tests/fixtures/cantilever-pinned`, and
//! commit it with the change that explains it.

mod common;

use common::{assay_in_repo, ensure_model_binary, repo_root};
use serde_yaml::{Mapping, Value};
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

// Links the library, and with it the BLAS that `numeric_stack` asks for its build.
extern crate assay;

/// Relative tolerance of float comparisons. On the machine that wrote the fixture the
/// bodies are reproduced exactly; the tolerance only absorbs last-digit differences of a
/// stack that prints a value one ulp apart without changing the computation's path, and
/// is far below any change a code edit makes to an MCMC run (those move the posterior
/// summaries by 1e-5 or more, and every draw).
const REL_TOL: f64 = 1e-9;

/// Keys whose values are clock readings or durations: never compared.
const TIME_KEYS: &[&str] = &[
    "elapsed_s",
    "sampling_s",
    "started_utc",
    "ended_utc",
    "owner_started_utc",
];

/// String keys holding a hash of numbers that depend on the numerical stack: compared
/// only number for number (see the module doc).
const STACK_HASH_KEYS: &[&str] = &["samples_sha256", "sha256"];

/// Records whose numbers do not involve linear algebra: compared on every machine.
const STACK_FREE: &[&str] = &["design.yaml", "runs.yaml"];
/// Records from the surrogate on: compared number for number on the fixture's stack only.
const STACK_BOUND: &[&str] = &[
    "surrogate.yaml",
    "posterior.yaml",
    "checks.yaml",
    "posterior-samples.yaml",
];

/// Stand-in for the temporary campaign folder in run records.
const RUNS_PLACEHOLDER: &str = "<runs>";

fn fixture_dir() -> PathBuf {
    repo_root().join("tests/fixtures/cantilever-pinned")
}

/// This process's numerical stack: everything known to change the last digits of the
/// surrogate fit on an unchanged binary. `assay` runs as a child with the same
/// environment and the same shared libraries, so it computes on the same stack.
fn numeric_stack() -> String {
    let mut parts = vec![format!(
        "{}-{}",
        std::env::consts::ARCH,
        std::env::consts::OS
    )];
    parts.push(blas_config());
    parts.push(libc_version());
    #[cfg(target_arch = "x86_64")]
    {
        let features = [
            ("fma", std::arch::is_x86_feature_detected!("fma")),
            ("avx", std::arch::is_x86_feature_detected!("avx")),
            ("avx2", std::arch::is_x86_feature_detected!("avx2")),
            ("avx512f", std::arch::is_x86_feature_detected!("avx512f")),
        ];
        let on: Vec<&str> = features
            .iter()
            .filter(|(_, on)| *on)
            .map(|(name, _)| *name)
            .collect();
        parts.push(format!("cpu features: {}", on.join(" ")));
    }
    if let Ok(t) = std::env::var("GLIBC_TUNABLES") {
        parts.push(format!("GLIBC_TUNABLES={t}"));
    }
    parts.join("\n") + "\n"
}

/// OpenBLAS's build and chosen kernel, e.g. `OpenBLAS 0.3.21 DYNAMIC_ARCH ... SkylakeX`.
#[cfg(feature = "openblas-system")]
fn blas_config() -> String {
    extern "C" {
        fn openblas_get_config() -> *const std::os::raw::c_char;
    }
    // SAFETY: returns a pointer to a static NUL-terminated string inside libopenblas.
    let config = unsafe { std::ffi::CStr::from_ptr(openblas_get_config()) };
    let text = config.to_string_lossy();
    format!(
        "blas: {}",
        text.split_whitespace().collect::<Vec<_>>().join(" ")
    )
}

#[cfg(not(feature = "openblas-system"))]
fn blas_config() -> String {
    "blas: unknown".into()
}

/// The C library's version (glibc's libm selects its code by CPU).
#[cfg(all(target_os = "linux", target_env = "gnu"))]
fn libc_version() -> String {
    extern "C" {
        fn gnu_get_libc_version() -> *const std::os::raw::c_char;
    }
    // SAFETY: returns a pointer to a static NUL-terminated string inside glibc.
    let v = unsafe { std::ffi::CStr::from_ptr(gnu_get_libc_version()) };
    format!("glibc {}", v.to_string_lossy())
}

#[cfg(not(all(target_os = "linux", target_env = "gnu")))]
fn libc_version() -> String {
    "libc: unknown".into()
}

/// How two bodies are compared.
#[derive(Clone, Copy, PartialEq, Debug)]
enum Mode {
    /// Everything, floats to [`REL_TOL`].
    Numbers,
    /// Structure, keys, strings (but [`STACK_HASH_KEYS`]), booleans, nulls; no numbers.
    Shape,
}

/// Remove the wall-clock keys, at any depth.
fn strip_time(v: &mut Value) {
    match v {
        Value::Mapping(m) => {
            for k in TIME_KEYS {
                m.shift_remove(*k);
            }
            for (_, x) in m.iter_mut() {
                strip_time(x);
            }
        }
        Value::Sequence(s) => s.iter_mut().for_each(strip_time),
        _ => {}
    }
}

/// Replace `from` by `to` in every string, at any depth.
fn replace_in_strings(v: &mut Value, from: &str, to: &str) {
    match v {
        Value::String(s) if s.contains(from) => *s = s.replace(from, to),
        Value::Mapping(m) => m
            .iter_mut()
            .for_each(|(_, x)| replace_in_strings(x, from, to)),
        Value::Sequence(s) => s.iter_mut().for_each(|x| replace_in_strings(x, from, to)),
        _ => {}
    }
}

/// A record's body: the file without `provenance` and without wall-clock keys.
fn body(path: &Path) -> Value {
    let text = std::fs::read_to_string(path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    let mut v: Value = serde_yaml::from_str(&text)
        .unwrap_or_else(|e| panic!("{} is not YAML: {e}", path.display()));
    let m = v
        .as_mapping_mut()
        .unwrap_or_else(|| panic!("{} is not a mapping", path.display()));
    assert!(
        m.shift_remove("provenance").is_some(),
        "{} has no provenance block",
        path.display()
    );
    strip_time(&mut v);
    v
}

fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// What one `assay all` produced, as the values the fixture holds, by fixture file name.
fn produced(runs_root: &Path) -> Vec<(&'static str, Value)> {
    let campaign = runs_root.join("cantilever");
    let mut out = Vec::new();
    for name in [
        "design.yaml",
        "surrogate.yaml",
        "posterior.yaml",
        "checks.yaml",
    ] {
        out.push((name, body(&campaign.join(name))));
    }

    // Every run record, in point then experiment order.
    let mut records = Vec::new();
    for point in sorted_entries(&campaign.join("runs")) {
        for exp in sorted_entries(&point) {
            let rel = format!(
                "{}/{}",
                point.file_name().unwrap().to_string_lossy(),
                exp.file_name().unwrap().to_string_lossy()
            );
            records.push((rel, body(&exp.join("run.yaml"))));
        }
    }
    assert!(!records.is_empty(), "no run records were written");
    let mut runs = Mapping::new();
    let roots = [
        runs_root.to_path_buf(),
        runs_root.canonicalize().expect("campaign root"),
    ];
    for (rel, mut b) in records {
        for root in &roots {
            replace_in_strings(&mut b, &root.to_string_lossy(), RUNS_PLACEHOLDER);
        }
        runs.insert(Value::String(rel), b);
    }
    out.push(("runs.yaml", Value::Mapping(runs)));

    let csv = std::fs::read(campaign.join("posterior-samples.csv")).expect("samples file");
    let text = String::from_utf8(csv.clone()).expect("samples are UTF-8");
    let mut samples = Mapping::new();
    samples.insert(
        "header".into(),
        text.lines().next().unwrap_or_default().into(),
    );
    samples.insert(
        "rows".into(),
        Value::Number((text.lines().count().saturating_sub(1) as u64).into()),
    );
    samples.insert("sha256".into(), sha256_hex(&csv).into());
    out.push(("posterior-samples.yaml", Value::Mapping(samples)));
    out
}

fn sorted_entries(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .unwrap_or_else(|e| panic!("cannot list {}: {e}", dir.display()))
        .map(|e| e.expect("folder entry").path())
        .filter(|p| p.is_dir())
        .collect();
    v.sort();
    v
}

fn floats_agree(a: f64, b: f64) -> bool {
    if a.is_nan() || b.is_nan() {
        return a.is_nan() && b.is_nan();
    }
    if a == b {
        return true;
    }
    (a - b).abs() <= REL_TOL * a.abs().max(b.abs())
}

fn kind(v: &Value) -> &'static str {
    match v {
        Value::Null => "null",
        Value::Bool(_) => "bool",
        Value::Number(n) if n.is_f64() => "float",
        Value::Number(_) => "integer",
        Value::String(_) => "string",
        Value::Sequence(_) => "sequence",
        Value::Mapping(_) => "mapping",
        Value::Tagged(_) => "tagged",
    }
}

fn short(v: &Value) -> String {
    let s = serde_yaml::to_string(v).unwrap_or_default();
    let s = s.trim_end();
    if s.chars().count() > 80 {
        format!("{}...", s.chars().take(80).collect::<String>())
    } else {
        s.to_string()
    }
}

/// Walk `want` (the fixture) and `got` in parallel and list every difference.
fn compare(want: &Value, got: &Value, path: &str, mode: Mode, diffs: &mut Vec<String>) {
    if kind(want) != kind(got) {
        diffs.push(format!(
            "{path}: fixture has a {} ({}), the run a {} ({})",
            kind(want),
            short(want),
            kind(got),
            short(got)
        ));
        return;
    }
    match (want, got) {
        (Value::Mapping(w), Value::Mapping(g)) => {
            let wk: Vec<String> = w.keys().map(short).collect();
            let gk: Vec<String> = g.keys().map(short).collect();
            if wk != gk {
                diffs.push(format!(
                    "{path}: keys differ\n    fixture: {wk:?}\n    run:     {gk:?}"
                ));
            }
            for (k, wv) in w {
                let key = short(k);
                let Some(gv) = g.get(k) else { continue };
                let skip = mode == Mode::Shape && STACK_HASH_KEYS.contains(&key.as_str());
                if !skip {
                    compare(wv, gv, &format!("{path}.{key}"), mode, diffs);
                }
            }
        }
        (Value::Sequence(w), Value::Sequence(g)) => {
            if w.len() != g.len() {
                diffs.push(format!(
                    "{path}: fixture has {} items, the run {}",
                    w.len(),
                    g.len()
                ));
            }
            for (i, (wv, gv)) in w.iter().zip(g).enumerate() {
                compare(wv, gv, &format!("{path}[{i}]"), mode, diffs);
            }
        }
        (Value::Number(w), Value::Number(g)) => {
            if mode == Mode::Shape {
                return;
            }
            let same = match (w.as_i64(), g.as_i64(), w.as_u64(), g.as_u64()) {
                (Some(a), Some(b), _, _) => a == b,
                (_, _, Some(a), Some(b)) => a == b,
                _ => match (w.as_f64(), g.as_f64()) {
                    (Some(a), Some(b)) if w.is_f64() && g.is_f64() => floats_agree(a, b),
                    _ => false,
                },
            };
            if !same {
                diffs.push(format!("{path}: fixture {w}, run {g}"));
            }
        }
        _ => {
            if want != got {
                diffs.push(format!(
                    "{path}: fixture {}, run {}",
                    short(want),
                    short(got)
                ));
            }
        }
    }
}

fn write_fixture(values: &[(&str, Value)], stack: &str) {
    let dir = fixture_dir();
    std::fs::create_dir_all(&dir).expect("fixture folder");
    for (name, v) in values {
        let text = serde_yaml::to_string(v).expect("a value serialises");
        std::fs::write(dir.join(name), text).expect("write fixture");
    }
    std::fs::write(dir.join("numeric-stack.txt"), stack).expect("write numeric stack");
    eprintln!("records_pinned: wrote the fixture to {}", dir.display());
}

#[test]
fn cantilever_records_match_the_pinned_fixture() {
    ensure_model_binary("cantilever");
    let tmp = tempfile::Builder::new()
        .prefix("assay-pinned-")
        .tempdir()
        .expect("temp folder");
    let out = assay_in_repo(tmp.path(), &["all", "models/cantilever/study.yaml"]);
    assert!(
        out.status.success(),
        "assay all failed:\n{}\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    let values = produced(tmp.path());
    let stack = numeric_stack();

    // The samples file is the one the posterior record describes, on every stack.
    let posterior = &values
        .iter()
        .find(|(n, _)| *n == "posterior.yaml")
        .unwrap()
        .1;
    let samples = &values
        .iter()
        .find(|(n, _)| *n == "posterior-samples.yaml")
        .unwrap()
        .1;
    assert_eq!(
        posterior.get("samples_sha256"),
        samples.get("sha256"),
        "posterior.yaml's samples_sha256 is not the hash of posterior-samples.csv"
    );

    if std::env::var("ASSAY_PIN_WRITE").as_deref() == Ok("1") {
        write_fixture(&values, &stack);
        return;
    }

    let dir = fixture_dir();
    let fixture_stack = std::fs::read_to_string(dir.join("numeric-stack.txt"))
        .expect("tests/fixtures/cantilever-pinned/numeric-stack.txt");
    let numbers = match std::env::var("ASSAY_PIN_STRICT").as_deref() {
        Ok("1") => true,
        Ok("0") => false,
        _ => stack == fixture_stack,
    };
    if !numbers {
        eprintln!(
            "records_pinned: this numerical stack is not the fixture's, so the surrogate, \
             posterior, checks and samples are compared by shape only.\n\
             fixture:\n{fixture_stack}this machine:\n{stack}"
        );
    }

    let mut diffs = Vec::new();
    for (name, got) in &values {
        let mode = if STACK_FREE.contains(name) || numbers {
            Mode::Numbers
        } else {
            assert!(STACK_BOUND.contains(name), "{name} is not classified");
            Mode::Shape
        };
        let path = dir.join(name);
        let text = std::fs::read_to_string(&path)
            .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
        let want: Value = serde_yaml::from_str(&text).expect("fixture is YAML");
        compare(&want, got, name, mode, &mut diffs);
        if *name == "posterior-samples.yaml" && mode == Mode::Shape {
            // The shape of the samples file does not depend on the stack.
            for key in ["header", "rows"] {
                if want.get(key) != got.get(key) {
                    diffs.push(format!(
                        "{name}.{key}: fixture {}, run {}",
                        short(&want[key]),
                        short(&got[key])
                    ));
                }
            }
        }
    }
    const SHOWN: usize = 40;
    assert!(
        diffs.is_empty(),
        "{} difference(s) from the pinned cantilever records (comparing {}):\n{}{}\n\
         If the change of numbers is intended, regenerate the fixture with \
         tests/fixtures/cantilever-pinned/make.sh and commit it with the change.",
        diffs.len(),
        if numbers {
            "numbers"
        } else {
            "shape only, and numbers of the design and runs"
        },
        diffs
            .iter()
            .take(SHOWN)
            .map(|d| format!("  {d}\n"))
            .collect::<String>(),
        if diffs.len() > SHOWN { "  ...\n" } else { "" }
    );
}
