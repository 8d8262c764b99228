//! `cantilever`: a closed-form simulator used as assay's bundled example.
//!
//! A prismatic cantilever of length L whose root is not perfectly clamped but
//! held by a rotational spring of stiffness k_theta, loaded by a point load P
//! at the free tip. The deflection at a station x (distance from the root) is
//!
//! ```text
//!   w(x) = P x^2 (3L - x) / (6 E I)  +  P L x / k_theta
//! ```
//!
//! The first term is the Euler–Bernoulli deflection of a clamped cantilever
//! under a tip load (e.g. W. C. Young & R. G. Budynas, *Roark's Formulas for
//! Stress and Strain*, 7th ed., McGraw-Hill 2002, Table 8.1, case 1a with the
//! load at the free end, table and case numbers from memory; J. M. Gere & B. J. Goodno, *Mechanics of Materials*,
//! appendix table "Deflections and slopes of beams", cantilever with a
//! concentrated load at the free end). The second
//! term is the rigid-body rotation of the beam about the spring-supported
//! root: the root moment is M = P L, the root rotates by theta = M / k_theta,
//! and a point at distance x moves by theta * x (small rotations).
//!
//! Units on the command line (converted to SI internally):
//!   E in GPa, k_theta in MN·m/rad, load in kN, length in m, inertia in cm^4,
//!   stations in m; output deflection in mm.
//!
//! Standard library only; arguments are parsed by hand.

use std::fmt::Write as _;
use std::process::ExitCode;

const USAGE: &str = "\
cantilever - closed-form deflection of a tip-loaded cantilever with a rotational spring at the root

USAGE:
    cantilever --E <GPa> --k-theta <MN*m/rad> --load <kN> --out <path.csv> [OPTIONS]

MODEL:
    w(x) = P*x^2*(3L - x) / (6*E*I) + P*L*x / k_theta
    (Euler-Bernoulli cantilever under a tip load, plus the rigid rotation
    of the root spring under the root moment P*L)

REQUIRED:
    --E <GPa>              Young's modulus, in GPa (> 0)
    --k-theta <MN*m/rad>   rotational stiffness of the root spring, in MN*m/rad (> 0)
    --load <kN>            tip load P, in kN (any finite value; sign gives direction)
    --out <path.csv>       output CSV file (header `station,deflection`)

OPTIONAL:
    --length <m>           beam length L, in m (> 0)                [default: 2.0]
    --inertia <cm^4>       second moment of area I, in cm^4 (> 0)   [default: 800.0]
    --stations <m,m,...>   comma-separated stations x, in m, each in [0, L]
                                                                    [default: 0.5,1.0,1.5,2.0]
    --fail-if-E-above <GPa>
                           exit with status 1 (no output file) if E exceeds this
                           value; for provoking a failing run in tests
    -h, --help             print this help and exit

OUTPUT:
    CSV with header `station,deflection`, one row per station, in the order given;
    station in m, deflection in mm (positive in the direction of the load).

EXIT STATUS:
    0 success; 1 run failed (--fail-if-E-above triggered, or the file could not be
    written); 2 bad, missing or out-of-range argument.
";

/// Parsed command-line inputs, in the units of the command line.
#[derive(Debug, Clone, PartialEq)]
struct Inputs {
    e_gpa: f64,
    k_theta_mnm: f64,
    load_kn: f64,
    length_m: f64,
    inertia_cm4: f64,
    stations_m: Vec<f64>,
    out: String,
    fail_if_e_above: Option<f64>,
}

/// Outcome of argument parsing.
#[derive(Debug)]
enum Parsed {
    Help,
    Run(Inputs),
}

/// Tip-loaded cantilever with a rotational root spring, all quantities in SI.
#[derive(Debug, Clone, Copy)]
struct Beam {
    /// Young's modulus, Pa.
    e: f64,
    /// Rotational stiffness of the root spring, N·m/rad.
    k_theta: f64,
    /// Tip load, N.
    p: f64,
    /// Length, m.
    l: f64,
    /// Second moment of area, m^4.
    i: f64,
}

impl Beam {
    /// Build from command-line units: GPa, MN·m/rad, kN, m, cm^4.
    fn from_cli_units(
        e_gpa: f64,
        k_theta_mnm: f64,
        load_kn: f64,
        length_m: f64,
        inertia_cm4: f64,
    ) -> Beam {
        Beam {
            e: e_gpa * 1e9,             // 1 GPa = 1e9 Pa
            k_theta: k_theta_mnm * 1e6, // 1 MN·m/rad = 1e6 N·m/rad
            p: load_kn * 1e3,           // 1 kN = 1e3 N
            l: length_m,
            i: inertia_cm4 * 1e-8, // 1 cm^4 = (1e-2 m)^4 = 1e-8 m^4
        }
    }

    /// Deflection at station x (m), in m.
    fn deflection_m(&self, x: f64) -> f64 {
        let bending = self.p * x * x * (3.0 * self.l - x) / (6.0 * self.e * self.i);
        let root_rotation = self.p * self.l * x / self.k_theta;
        bending + root_rotation
    }

    /// Deflection at station x (m), in mm.
    fn deflection_mm(&self, x: f64) -> f64 {
        self.deflection_m(x) * 1e3
    }
}

fn parse_number(flag: &str, raw: &str) -> Result<f64, String> {
    let v: f64 = raw
        .trim()
        .parse()
        .map_err(|_| format!("argument {flag}: cannot parse '{raw}' as a number"))?;
    if !v.is_finite() {
        return Err(format!("argument {flag}: value '{raw}' is not finite"));
    }
    Ok(v)
}

fn parse_positive(flag: &str, raw: &str) -> Result<f64, String> {
    let v = parse_number(flag, raw)?;
    if v <= 0.0 {
        return Err(format!("argument {flag}: must be > 0, got {v}"));
    }
    Ok(v)
}

fn parse_stations(raw: &str) -> Result<Vec<f64>, String> {
    let mut out = Vec::new();
    for part in raw.split(',') {
        if part.trim().is_empty() {
            return Err(format!("argument --stations: empty entry in '{raw}'"));
        }
        out.push(parse_number("--stations", part)?);
    }
    Ok(out)
}

/// Parse the arguments (without the program name).
fn parse_args<I: IntoIterator<Item = String>>(args: I) -> Result<Parsed, String> {
    let mut e = None;
    let mut k = None;
    let mut load = None;
    let mut length = None;
    let mut inertia = None;
    let mut stations = None;
    let mut out = None;
    let mut fail_above = None;

    let mut it = args.into_iter();
    while let Some(arg) = it.next() {
        if arg == "-h" || arg == "--help" {
            return Ok(Parsed::Help);
        }
        // Accept both `--flag value` and `--flag=value`.
        let (flag, inline) = match arg.split_once('=') {
            Some((f, v)) if f.starts_with("--") => (f.to_string(), Some(v.to_string())),
            _ => (arg.clone(), None),
        };
        let slot: &mut Option<String> = match flag.as_str() {
            "--E" => &mut e,
            "--k-theta" => &mut k,
            "--load" => &mut load,
            "--length" => &mut length,
            "--inertia" => &mut inertia,
            "--stations" => &mut stations,
            "--out" => &mut out,
            "--fail-if-E-above" => &mut fail_above,
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
    }

    let required = |name: &str, v: Option<String>| {
        v.ok_or_else(|| format!("argument {name}: required but not given"))
    };
    let e_gpa = parse_positive("--E", &required("--E", e)?)?;
    let k_theta_mnm = parse_positive("--k-theta", &required("--k-theta", k)?)?;
    let load_kn = parse_number("--load", &required("--load", load)?)?;
    let out = required("--out", out)?;
    if out.is_empty() {
        return Err("argument --out: empty path".to_string());
    }
    let length_m = match length {
        Some(s) => parse_positive("--length", &s)?,
        None => 2.0,
    };
    let inertia_cm4 = match inertia {
        Some(s) => parse_positive("--inertia", &s)?,
        None => 800.0,
    };
    let stations_m = match stations {
        Some(s) => parse_stations(&s)?,
        None => vec![0.5, 1.0, 1.5, 2.0],
    };
    for &x in &stations_m {
        if x < 0.0 || x > length_m {
            return Err(format!(
                "argument --stations: station {x} m lies outside the beam [0, {length_m}] m"
            ));
        }
    }
    let fail_if_e_above = match fail_above {
        Some(s) => Some(parse_number("--fail-if-E-above", &s)?),
        None => None,
    };

    Ok(Parsed::Run(Inputs {
        e_gpa,
        k_theta_mnm,
        load_kn,
        length_m,
        inertia_cm4,
        stations_m,
        out,
        fail_if_e_above,
    }))
}

/// CSV text for the given inputs.
fn render_csv(inp: &Inputs) -> String {
    let beam = Beam::from_cli_units(
        inp.e_gpa,
        inp.k_theta_mnm,
        inp.load_kn,
        inp.length_m,
        inp.inertia_cm4,
    );
    let mut s = String::from("station,deflection\n");
    for &x in &inp.stations_m {
        // `{}` on f64 prints the shortest string that round-trips.
        let _ = writeln!(s, "{},{}", x, beam.deflection_mm(x));
    }
    s
}

fn main() -> ExitCode {
    let inp = match parse_args(std::env::args().skip(1)) {
        Ok(Parsed::Help) => {
            print!("{USAGE}");
            return ExitCode::SUCCESS;
        }
        Ok(Parsed::Run(inp)) => inp,
        Err(msg) => {
            eprintln!("cantilever: error: {msg}");
            eprintln!("(run `cantilever --help` for usage)");
            return ExitCode::from(2);
        }
    };

    if let Some(limit) = inp.fail_if_e_above {
        if inp.e_gpa > limit {
            eprintln!(
                "cantilever: run failed on purpose: --E {} GPa is above --fail-if-E-above {} GPa; no output written",
                inp.e_gpa, limit
            );
            return ExitCode::from(1);
        }
    }

    let csv = render_csv(&inp);
    if let Err(err) = std::fs::write(&inp.out, csv) {
        eprintln!("cantilever: error: cannot write --out '{}': {err}", inp.out);
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

    fn rel_close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol * b.abs().max(1e-300)
    }

    #[test]
    fn hand_computed_case() {
        // E = 200 GPa, I = 1000 cm^4, P = 6 kN, L = 2 m, k_theta = 2 MN·m/rad, x = L = 2 m.
        // SI: E = 2e11 Pa, I = 1000e-8 = 1e-5 m^4, so E I = 2e6 N·m^2; P = 6000 N; k = 2e6 N·m/rad.
        // bending  = P x^2 (3L - x) / (6 E I) = 6000 * 4 * (6 - 2) / (6 * 2e6) = 96000 / 1.2e7 = 0.008 m = 8 mm
        // rotation = P L x / k = 6000 * 2 * 2 / 2e6 = 24000 / 2e6 = 0.012 m = 12 mm
        // total    = 20 mm
        let b = Beam::from_cli_units(200.0, 2.0, 6.0, 2.0, 1000.0);
        assert!(
            rel_close(b.deflection_mm(2.0), 20.0, 1e-12),
            "{}",
            b.deflection_mm(2.0)
        );
        // Mid-span, x = 1 m:
        // bending  = 6000 * 1 * (6 - 1) / 1.2e7 = 30000 / 1.2e7 = 0.0025 m = 2.5 mm
        // rotation = 6000 * 2 * 1 / 2e6 = 0.006 m = 6 mm
        // total    = 8.5 mm
        assert!(
            rel_close(b.deflection_mm(1.0), 8.5, 1e-12),
            "{}",
            b.deflection_mm(1.0)
        );
    }

    #[test]
    fn rigid_root_gives_handbook_tip_deflection() {
        // With k_theta -> infinity the root is clamped and the tip deflection is
        // P L^3 / (3 E I) (Roark Table 8.1 case 1a, from memory; Gere & Goodno,
        // cantilever tables).
        let (e, p, l, i) = (205.0, 5.0, 2.0, 800.0);
        let b = Beam::from_cli_units(e, 1e30, p, l, i);
        let expected_m = (p * 1e3) * l.powi(3) / (3.0 * (e * 1e9) * (i * 1e-8));
        assert!(rel_close(b.deflection_m(l), expected_m, 1e-12));
        // And the rotation term is negligible: matches the clamped formula at every station.
        for &x in &[0.25, 0.5, 1.0, 1.7] {
            let clamped = (p * 1e3) * x * x * (3.0 * l - x) / (6.0 * (e * 1e9) * (i * 1e-8));
            assert!(rel_close(b.deflection_m(x), clamped, 1e-12));
        }
    }

    #[test]
    fn very_stiff_beam_leaves_only_root_rotation() {
        // With E I -> infinity only the rigid rotation remains: w = P L x / k_theta, linear in x.
        let b = Beam::from_cli_units(1e30, 1.8, 9.0, 2.0, 800.0);
        for &x in &[0.5, 1.0, 2.0] {
            let expected = 9e3 * 2.0 * x / 1.8e6;
            assert!(rel_close(b.deflection_m(x), expected, 1e-12));
        }
    }

    #[test]
    fn zero_at_root_and_linear_in_load() {
        let b1 = Beam::from_cli_units(205.0, 1.8, 5.0, 2.0, 800.0);
        let b2 = Beam::from_cli_units(205.0, 1.8, 10.0, 2.0, 800.0);
        assert_eq!(b1.deflection_mm(0.0), 0.0);
        assert!(rel_close(
            b2.deflection_mm(1.5),
            2.0 * b1.deflection_mm(1.5),
            1e-14
        ));
    }

    #[test]
    fn parse_defaults_and_required() {
        let p = parse_args(args("--E 205 --k-theta 1.8 --load 5 --out o.csv")).unwrap();
        let Parsed::Run(inp) = p else {
            panic!("expected Run")
        };
        assert_eq!(inp.length_m, 2.0);
        assert_eq!(inp.inertia_cm4, 800.0);
        assert_eq!(inp.stations_m, vec![0.5, 1.0, 1.5, 2.0]);
        assert_eq!(inp.fail_if_e_above, None);

        let p = parse_args(args(
            "--E=205 --k-theta=1.8 --load=-5 --out=o.csv --stations=0,2",
        ))
        .unwrap();
        let Parsed::Run(inp) = p else {
            panic!("expected Run")
        };
        assert_eq!(inp.load_kn, -5.0);
        assert_eq!(inp.stations_m, vec![0.0, 2.0]);

        assert!(matches!(parse_args(args("--help")), Ok(Parsed::Help)));
    }

    #[test]
    fn parse_errors_name_the_argument() {
        let cases = [
            ("--k-theta 1.8 --load 5 --out o.csv", "--E"),
            ("--E 205 --load 5 --out o.csv", "--k-theta"),
            ("--E 205 --k-theta 1.8 --out o.csv", "--load"),
            ("--E 205 --k-theta 1.8 --load 5", "--out"),
            ("--E 0 --k-theta 1.8 --load 5 --out o.csv", "--E"),
            ("--E 205 --k-theta -1 --load 5 --out o.csv", "--k-theta"),
            (
                "--E 205 --k-theta 1.8 --load 5 --out o.csv --length 0",
                "--length",
            ),
            (
                "--E 205 --k-theta 1.8 --load 5 --out o.csv --inertia -3",
                "--inertia",
            ),
            ("--E abc --k-theta 1.8 --load 5 --out o.csv", "--E"),
            (
                "--E 205 --k-theta 1.8 --load 5 --out o.csv --stations 0.5,,1",
                "--stations",
            ),
            (
                "--E 205 --k-theta 1.8 --load 5 --out o.csv --stations 2.5",
                "--stations",
            ),
            ("--E 205 --k-theta 1.8 --load 5 --out o.csv --E 200", "--E"),
            ("--E 205 --k-theta 1.8 --load", "--load"),
            (
                "--E 205 --k-theta 1.8 --load 5 --out o.csv --bogus 1",
                "--bogus",
            ),
            ("--E NaN --k-theta 1.8 --load 5 --out o.csv", "--E"),
        ];
        for (line, name) in cases {
            let err = parse_args(args(line)).expect_err(line);
            assert!(
                err.contains(name),
                "error for '{line}' should name {name}: {err}"
            );
        }
    }

    #[test]
    fn csv_has_header_and_one_row_per_station() {
        let Parsed::Run(inp) = parse_args(args(
            "--E 200 --k-theta 2 --load 6 --inertia 1000 --stations 1,2 --out o.csv",
        ))
        .unwrap() else {
            panic!()
        };
        let text = render_csv(&inp);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "station,deflection");
        assert_eq!(lines.len(), 3);
        let row: Vec<f64> = lines[2].split(',').map(|v| v.parse().unwrap()).collect();
        assert_eq!(row[0], 2.0);
        assert!(rel_close(row[1], 20.0, 1e-12));
    }
}
