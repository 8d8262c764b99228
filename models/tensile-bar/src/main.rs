//! `tensile-bar`: a small nonlinear finite-element program, used as assay's bundled
//! example of an expensive simulator.
//!
//! A flat tensile specimen under displacement control along its axis: two-node bar
//! elements through a wider end, a gauge section with a slight linear taper (narrowest
//! at mid-gauge, so yielding starts there) and another wider end. The material is
//! one-dimensional rate-independent plasticity (von Mises in 1D) with Voce isotropic
//! hardening σy(ε̄p) = σ0 + Q (1 − exp(−b ε̄p)) (Voce 1948), integrated by the
//! backward-Euler return mapping with a local Newton iteration and the consistent
//! tangent; each load increment is solved by global Newton–Raphson (Simo & Hughes
//! 1998, ch. 1–2, chapters from memory). See `material.rs` and `bar.rs` for the formulas and references.
//!
//! Units: lengths in mm, E in GPa, stresses in MPa, forces written in kN.
//! Standard library only; arguments and the input file are parsed by hand.

#![forbid(unsafe_code)]

mod bar;
mod input;
mod material;

use std::fmt::Write as _;
use std::process::ExitCode;
use std::time::Duration;

const USAGE: &str = "\
tensile-bar - 1D finite-element tensile bar with Voce-hardening plasticity

USAGE:
    tensile-bar INPUT --out <forces.csv> [--cost-seconds S]

ARGUMENTS:
    INPUT                  input file: `key = value` lines, `#` starts a comment
    --out <path.csv>       output CSV, header `displacement,force` (mm, kN), one row
                           per prescribed displacement (reaction at the loaded end)
    --cost-seconds <S>     sleep S seconds after solving, to imitate an expensive run
    -h, --help             print this help and exit

MODEL:
    two-node bar elements: wider end | gauge (width reduced by `taper` at mid-gauge,
    linear to the gauge ends) | wider end; node 0 held, last node displaced.
    sigma_y(ebar_p) = sigma0 + Q*(1 - exp(-b*ebar_p))        (Voce 1948)
    backward-Euler return mapping, consistent tangent, global Newton-Raphson
    (Simo & Hughes 1998, Computational Inelasticity, ch. 1-2)

INPUT KEYS:
";

const USAGE_TAIL: &str = "
EXIT STATUS:
    0 success; 1 the solution failed (the message names the step) or the output could
    not be written; 2 bad arguments or a bad input file (the message names the key and
    line).
";

fn usage() -> String {
    let mut s = String::from(USAGE);
    for (k, d) in input::KEYS {
        let _ = writeln!(s, "    {k:<20}{d}");
    }
    s.push_str(USAGE_TAIL);
    s
}

/// Parsed command line.
#[derive(Debug, Clone, PartialEq)]
struct Args {
    input: String,
    out: String,
    cost_seconds: f64,
}

#[derive(Debug, PartialEq)]
enum Parsed {
    Help,
    Run(Args),
}

/// Longest accepted `--cost-seconds`: a day (a typo should not hang a campaign).
const MAX_COST_SECONDS: f64 = 86_400.0;

fn parse_args<I: IntoIterator<Item = String>>(args: I) -> Result<Parsed, String> {
    let mut input = None;
    let mut out: Option<String> = None;
    let mut cost: Option<String> = None;
    let mut it = args.into_iter();
    while let Some(arg) = it.next() {
        if arg == "-h" || arg == "--help" {
            return Ok(Parsed::Help);
        }
        if arg.starts_with("--") {
            let (flag, inline) = match arg.split_once('=') {
                Some((f, v)) => (f.to_string(), Some(v.to_string())),
                None => (arg.clone(), None),
            };
            let slot = match flag.as_str() {
                "--out" => &mut out,
                "--cost-seconds" => &mut cost,
                _ => return Err(format!("unknown argument '{arg}' (see --help)")),
            };
            if slot.is_some() {
                return Err(format!("argument {flag}: given more than once"));
            }
            let value = match inline {
                Some(v) => v,
                None => it
                    .next()
                    .ok_or_else(|| format!("argument {flag}: missing value"))?,
            };
            *slot = Some(value);
        } else if input.is_none() {
            input = Some(arg);
        } else {
            return Err(format!(
                "unexpected extra argument '{arg}' (one INPUT file)"
            ));
        }
    }
    let input = input.ok_or("argument INPUT: required but not given")?;
    let out = out.ok_or("argument --out: required but not given")?;
    if out.is_empty() {
        return Err("argument --out: empty path".into());
    }
    let cost_seconds = match cost {
        None => 0.0,
        Some(raw) => {
            let v: f64 = raw.trim().parse().map_err(|_| {
                format!("argument --cost-seconds: cannot parse '{raw}' as a number")
            })?;
            if !(0.0..=MAX_COST_SECONDS).contains(&v) {
                return Err(format!(
                    "argument --cost-seconds: must be in [0, {MAX_COST_SECONDS}], got '{raw}'"
                ));
            }
            v
        }
    };
    Ok(Parsed::Run(Args {
        input,
        out,
        cost_seconds,
    }))
}

/// CSV text of the results: `displacement,force` in mm and kN, shortest round-trip
/// number form.
fn render_csv(results: &[bar::StepResult]) -> String {
    let mut s = String::from("displacement,force\n");
    for r in results {
        let _ = writeln!(s, "{},{}", r.displacement_mm, r.force_n / 1000.0);
    }
    s
}

fn main() -> ExitCode {
    let args = match parse_args(std::env::args().skip(1)) {
        Ok(Parsed::Help) => {
            print!("{}", usage());
            return ExitCode::SUCCESS;
        }
        Ok(Parsed::Run(a)) => a,
        Err(msg) => {
            eprintln!("tensile-bar: error: {msg}");
            eprintln!("(run `tensile-bar --help` for usage)");
            return ExitCode::from(2);
        }
    };
    let text = match std::fs::read_to_string(&args.input) {
        Ok(t) => t,
        Err(e) => {
            eprintln!(
                "tensile-bar: error: cannot read input file '{}': {e}",
                args.input
            );
            return ExitCode::from(2);
        }
    };
    let inp = match input::parse_input(&text) {
        Ok(i) => i,
        Err(e) => {
            eprintln!("tensile-bar: error: input file '{}': {e}", args.input);
            return ExitCode::from(2);
        }
    };
    let model = bar::Bar::from_input(&inp);
    let results = match bar::solve(&model, &inp.displacements_mm, inp.controls()) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("tensile-bar: error: {e}; no output written");
            return ExitCode::from(1);
        }
    };
    if args.cost_seconds > 0.0 {
        std::thread::sleep(Duration::from_secs_f64(args.cost_seconds));
    }
    if let Err(e) = std::fs::write(&args.out, render_csv(&results)) {
        eprintln!("tensile-bar: error: cannot write --out '{}': {e}", args.out);
        return ExitCode::from(1);
    }
    ExitCode::SUCCESS
}

#[cfg(test)]
mod tests {
    use super::*;

    fn args(s: &str) -> Vec<String> {
        s.split_whitespace().map(String::from).collect()
    }

    #[test]
    fn parses_arguments() {
        assert_eq!(
            parse_args(args("bar.inp --out f.csv")).unwrap(),
            Parsed::Run(Args {
                input: "bar.inp".into(),
                out: "f.csv".into(),
                cost_seconds: 0.0
            })
        );
        assert_eq!(
            parse_args(args("--out=f.csv --cost-seconds 0.5 bar.inp")).unwrap(),
            Parsed::Run(Args {
                input: "bar.inp".into(),
                out: "f.csv".into(),
                cost_seconds: 0.5
            })
        );
        assert_eq!(parse_args(args("--help")).unwrap(), Parsed::Help);
    }

    #[test]
    fn bad_arguments_name_the_argument() {
        let cases = [
            ("--out f.csv", "argument INPUT: required"),
            ("bar.inp", "argument --out: required"),
            ("bar.inp --out", "argument --out: missing value"),
            (
                "bar.inp --out a --out b",
                "argument --out: given more than once",
            ),
            (
                "bar.inp --out f --cost-seconds -1",
                "argument --cost-seconds: must be in",
            ),
            (
                "bar.inp --out f --cost-seconds x",
                "argument --cost-seconds: cannot parse",
            ),
            (
                "bar.inp --out f --cost-seconds NaN",
                "argument --cost-seconds: must be in",
            ),
            ("bar.inp --out f --bogus 1", "unknown argument '--bogus'"),
            ("a.inp b.inp --out f", "unexpected extra argument 'b.inp'"),
        ];
        for (line, expected) in cases {
            let e = parse_args(args(line)).expect_err(line);
            assert!(e.starts_with(expected), "{line}: {e}");
        }
    }

    #[test]
    fn csv_has_header_and_one_row_per_displacement_in_kn() {
        let rows = vec![
            bar::StepResult {
                displacement_mm: 0.1,
                force_n: 3000.0,
                iterations: 0,
                residuals: vec![],
                plastic: false,
                cutbacks: 0,
            },
            bar::StepResult {
                displacement_mm: 2.0,
                force_n: 12_345.5,
                iterations: 3,
                residuals: vec![],
                plastic: true,
                cutbacks: 0,
            },
        ];
        assert_eq!(render_csv(&rows), "displacement,force\n0.1,3\n2,12.3455\n");
    }
}
