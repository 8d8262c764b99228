//! The `tensile-bar` program as assay sees it: arguments, exit codes, messages, CSV.

use std::path::PathBuf;
use std::process::{Command, Output};
use std::sync::atomic::{AtomicUsize, Ordering};

const BIN: &str = env!("CARGO_BIN_EXE_tensile-bar");

/// Specimen A of the example study at representative aluminium values.
const GOOD: &str = "\
# flat specimen
E = 70        # GPa
sigma0 = 270  # MPa
Q = 60        # MPa
b = 15
gauge_length = 50
grip_length = 30
gauge_width = 12.5
grip_width = 20
thickness = 3
taper = 0.015
displacements = 0.1, 0.2, 1.0, 3.5
";

/// A fresh folder under the system temp dir, unique per test in this process,
/// removed when dropped.
struct TempDir(PathBuf);

impl TempDir {
    fn new() -> TempDir {
        static N: AtomicUsize = AtomicUsize::new(0);
        let d = std::env::temp_dir().join(format!(
            "tensile-bar-cli-{}-{}",
            std::process::id(),
            N.fetch_add(1, Ordering::SeqCst)
        ));
        std::fs::create_dir_all(&d).unwrap();
        TempDir(d)
    }

    fn join(&self, name: &str) -> PathBuf {
        self.0.join(name)
    }
}

impl Drop for TempDir {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// Write `input` to a temp folder and run the program on it with `extra` arguments.
/// Returns the output, the path of the CSV and the folder (alive while it is held).
fn run(input: &str, extra: &[&str]) -> (Output, PathBuf, TempDir) {
    let d = TempDir::new();
    let inp = d.join("bar.inp");
    std::fs::write(&inp, input).unwrap();
    let out = d.join("forces.csv");
    let mut cmd = Command::new(BIN);
    cmd.arg(&inp).arg("--out").arg(&out).args(extra);
    (cmd.output().unwrap(), out, d)
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

#[test]
fn writes_one_row_per_displacement() {
    let (o, out, _d) = run(GOOD, &[]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let text = std::fs::read_to_string(out).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines[0], "displacement,force");
    assert_eq!(lines.len(), 5);
    let rows: Vec<(f64, f64)> = lines[1..]
        .iter()
        .map(|l| {
            let (a, b) = l.split_once(',').unwrap();
            (a.parse().unwrap(), b.parse().unwrap())
        })
        .collect();
    assert_eq!(rows[0].0, 0.1);
    assert_eq!(rows[3].0, 3.5);
    // Elastic at 0.1 mm: about 3 kN (see the hand calculation in bar.rs; the taper
    // adds a little compliance); hardening after yield: force keeps rising.
    assert!((rows[0].1 - 3.0).abs() < 0.05, "{rows:?}");
    assert!(rows[1].1 < rows[2].1 && rows[2].1 < rows[3].1, "{rows:?}");
}

#[test]
fn help_exits_zero() {
    let o = Command::new(BIN).arg("--help").output().unwrap();
    assert_eq!(o.status.code(), Some(0));
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(text.contains("tensile-bar INPUT --out <forces.csv>"));
    assert!(text.contains("sigma0"));
}

#[test]
fn bad_input_exits_two_naming_key_and_line() {
    let (o, out, _d) = run(&GOOD.replace("Q = 60", "Q = sixty"), &[]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("line 4: key `Q`: cannot read `sixty` as a number"),
        "{}",
        stderr(&o)
    );
    assert!(!out.exists());

    let (o, _, _d) = run(&GOOD.replace("b = 15", "b = {{b}}"), &[]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("line 5: key `b`: unrendered placeholder"));

    let (o, _, _d) = run(&GOOD.replace("taper", "tapper"), &[]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("line 11: key `tapper`: unknown key"));
}

#[test]
fn bad_arguments_exit_two() {
    let o = Command::new(BIN).arg("nowhere.inp").output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("argument --out: required"));

    let d = TempDir::new();
    let o = Command::new(BIN)
        .arg(d.join("missing.inp"))
        .arg("--out")
        .arg(d.join("f.csv"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("cannot read input file"));

    let (o, _, _d) = run(GOOD, &["--cost-seconds", "-3"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("argument --cost-seconds"));
}

#[test]
fn non_convergence_exits_one_naming_the_step() {
    let text = format!("{GOOD}max_iterations = 1\nmax_cutbacks = 0\n");
    let (o, out, _d) = run(&text, &[]);
    assert_eq!(o.status.code(), Some(1));
    let e = stderr(&o);
    assert!(
        e.contains("step 3 of 4 (prescribed displacement 1 mm)")
            && e.contains("global Newton did not converge in 1 iterations"),
        "{e}"
    );
    assert!(!out.exists());
}

#[test]
fn cost_seconds_sleeps() {
    let t = std::time::Instant::now();
    let (o, out, _d) = run(GOOD, &["--cost-seconds", "0.3"]);
    assert_eq!(o.status.code(), Some(0));
    assert!(t.elapsed().as_secs_f64() >= 0.3);
    assert!(out.exists());
}
