//! The input file: `key = value` lines, `#` starts a comment.
//!
//! assay renders this file from a template with `{{placeholders}}`, so a value that
//! still holds `{{` is reported as an unrendered placeholder rather than as a number
//! that does not parse. Every error names the key and, when the key is present, the
//! line; the program exits with status 2 on any of them.

use std::collections::BTreeMap;
use std::fmt;

/// Everything the program needs, in the units of the input file.
#[derive(Debug, Clone, PartialEq)]
pub struct Input {
    /// Young's modulus E, GPa.
    pub e_gpa: f64,
    /// Initial yield stress σ0, MPa.
    pub sigma0_mpa: f64,
    /// Voce saturation increment Q, MPa.
    pub q_mpa: f64,
    /// Voce rate b, dimensionless.
    pub b: f64,
    /// Gauge length, mm.
    pub gauge_length_mm: f64,
    /// Length of each wider end between the gauge and the loading point, mm (0: no ends).
    pub grip_length_mm: f64,
    /// Gauge width at the ends of the gauge section, mm.
    pub gauge_width_mm: f64,
    /// Width of the wider ends, mm.
    pub grip_width_mm: f64,
    /// Thickness, the same everywhere, mm.
    pub thickness_mm: f64,
    /// Fractional reduction of the gauge width at mid-gauge, varying linearly to zero
    /// at the gauge ends.
    pub taper: f64,
    /// Elements in the gauge section.
    pub gauge_elements: usize,
    /// Elements in each wider end.
    pub grip_elements: usize,
    /// Prescribed end displacements, mm, in loading order.
    pub displacements_mm: Vec<f64>,
    /// Equal increments per prescribed displacement (only the last is written out).
    pub substeps: usize,
    /// Cap on the global Newton iterations per increment.
    pub max_iterations: usize,
    /// Cap on halvings of a failing increment per prescribed displacement.
    pub max_cutbacks: usize,
}

impl Input {
    /// The solution controls of this input.
    pub fn controls(&self) -> crate::bar::Controls {
        crate::bar::Controls {
            substeps: self.substeps,
            max_iterations: self.max_iterations,
            max_cutbacks: self.max_cutbacks,
        }
    }
}

/// Default number of gauge elements.
pub const DEFAULT_GAUGE_ELEMENTS: usize = 40;
/// Default number of elements in each wider end.
pub const DEFAULT_GRIP_ELEMENTS: usize = 4;
/// Default cap on global Newton iterations per increment.
pub const DEFAULT_MAX_ITERATIONS: usize = 25;
/// Default cap on halvings of a failing increment (down to 1/1024 of the step).
pub const DEFAULT_MAX_CUTBACKS: usize = 10;
/// Largest accepted `max_cutbacks`: 2^-40 of a step is below any meaningful displacement.
const MAX_CUTBACKS: usize = 40;
/// Largest accepted element count or step count; guards against a typo that would run
/// for hours or exhaust memory.
const MAX_COUNT: usize = 1_000_000;

/// A problem in the input file.
#[derive(Debug, Clone, PartialEq)]
pub struct InputError {
    /// 1-based line number, when the problem sits on a line.
    pub line: Option<usize>,
    /// The key concerned, when there is one.
    pub key: Option<String>,
    pub message: String,
}

impl fmt::Display for InputError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match (&self.line, &self.key) {
            (Some(l), Some(k)) => write!(f, "line {l}: key `{k}`: {}", self.message),
            (Some(l), None) => write!(f, "line {l}: {}", self.message),
            (None, Some(k)) => write!(f, "key `{k}`: {}", self.message),
            (None, None) => write!(f, "{}", self.message),
        }
    }
}

/// Every key the file may hold, with a one-line description for messages and `--help`.
pub const KEYS: &[(&str, &str)] = &[
    ("E", "Young's modulus, GPa (> 0)"),
    ("sigma0", "initial yield stress, MPa (> 0)"),
    ("Q", "Voce saturation increment, MPa (> 0)"),
    ("b", "Voce rate, dimensionless (> 0)"),
    ("gauge_length", "gauge length, mm (> 0)"),
    ("gauge_width", "gauge width at the gauge ends, mm (> 0)"),
    ("thickness", "thickness, mm (> 0)"),
    (
        "grip_length",
        "length of each wider end, mm (>= 0) [default 0]",
    ),
    (
        "grip_width",
        "width of the wider ends, mm (> 0) [default gauge_width]",
    ),
    (
        "taper",
        "width reduction at mid-gauge, fraction in [0, 0.5) [default 0]",
    ),
    (
        "gauge_elements",
        "elements in the gauge (integer >= 1) [default 40]",
    ),
    (
        "grip_elements",
        "elements in each wider end (integer >= 1) [default 4]",
    ),
    (
        "displacements",
        "prescribed end displacements, mm, comma-separated",
    ),
    (
        "displacement_max",
        "last displacement of an even range, mm (with displacement_count)",
    ),
    (
        "displacement_count",
        "number of displacements max/n, 2max/n, ..., max (integer >= 1)",
    ),
    (
        "substeps",
        "increments per prescribed displacement (integer >= 1) [default 1]",
    ),
    (
        "max_iterations",
        "global Newton iterations per increment (integer >= 1) [default 25]",
    ),
    (
        "max_cutbacks",
        "halvings of a failing increment per displacement (integer >= 0) [default 10]",
    ),
];

/// One `key = value` line.
#[derive(Debug, Clone)]
struct Entry {
    line: usize,
    value: String,
}

fn err(line: Option<usize>, key: Option<&str>, message: impl Into<String>) -> InputError {
    InputError {
        line,
        key: key.map(str::to_string),
        message: message.into(),
    }
}

fn is_identifier(s: &str) -> bool {
    let mut chars = s.chars();
    match chars.next() {
        Some(c) if c.is_ascii_alphabetic() || c == '_' => {}
        _ => return false,
    }
    chars.all(|c| c.is_ascii_alphanumeric() || c == '_')
}

/// Split the text into entries, checking the line syntax, unknown and repeated keys.
fn entries(text: &str) -> Result<BTreeMap<String, Entry>, InputError> {
    let mut map: BTreeMap<String, Entry> = BTreeMap::new();
    for (i, raw) in text.lines().enumerate() {
        let line = i + 1;
        let content = match raw.find('#') {
            Some(at) => &raw[..at],
            None => raw,
        }
        .trim();
        if content.is_empty() {
            continue;
        }
        let Some((k, v)) = content.split_once('=') else {
            return Err(err(
                Some(line),
                None,
                format!("expected `key = value`, got `{content}`"),
            ));
        };
        let (k, v) = (k.trim(), v.trim());
        if !is_identifier(k) {
            return Err(err(
                Some(line),
                None,
                format!("`{k}` is not a key (expected a name such as `sigma0`)"),
            ));
        }
        if !KEYS.iter().any(|(name, _)| *name == k) {
            let known: Vec<&str> = KEYS.iter().map(|(n, _)| *n).collect();
            return Err(err(
                Some(line),
                Some(k),
                format!("unknown key (known keys: {})", known.join(", ")),
            ));
        }
        if let Some(prev) = map.get(k) {
            return Err(err(
                Some(line),
                Some(k),
                format!("given more than once (first on line {})", prev.line),
            ));
        }
        if v.is_empty() {
            return Err(err(Some(line), Some(k), "missing value after `=`"));
        }
        if v.contains("{{") || v.contains("}}") {
            return Err(err(
                Some(line),
                Some(k),
                format!("unrendered placeholder in `{v}` (the template was not filled in)"),
            ));
        }
        map.insert(
            k.to_string(),
            Entry {
                line,
                value: v.to_string(),
            },
        );
    }
    Ok(map)
}

/// Typed access to the entries, with the key and line in every error.
struct Reader {
    map: BTreeMap<String, Entry>,
}

impl Reader {
    fn line(&self, key: &str) -> Option<usize> {
        self.map.get(key).map(|e| e.line)
    }

    fn number_at(key: &str, line: usize, raw: &str) -> Result<f64, InputError> {
        let v: f64 = raw.parse().map_err(|_| {
            err(
                Some(line),
                Some(key),
                format!("cannot read `{raw}` as a number"),
            )
        })?;
        if !v.is_finite() {
            return Err(err(
                Some(line),
                Some(key),
                format!("`{raw}` is not a finite number"),
            ));
        }
        Ok(v)
    }

    fn optional_number(&self, key: &str) -> Result<Option<f64>, InputError> {
        match self.map.get(key) {
            None => Ok(None),
            Some(e) => Reader::number_at(key, e.line, &e.value).map(Some),
        }
    }

    fn required_number(&self, key: &str) -> Result<f64, InputError> {
        self.optional_number(key)?
            .ok_or_else(|| err(None, Some(key), "required but not given"))
    }

    /// A number passing `ok`, whose condition is described by `expect` in the error.
    fn check(
        &self,
        key: &str,
        v: f64,
        ok: impl Fn(f64) -> bool,
        expect: &str,
    ) -> Result<f64, InputError> {
        if ok(v) {
            Ok(v)
        } else {
            Err(err(
                self.line(key),
                Some(key),
                format!("must be {expect}, got {v}"),
            ))
        }
    }

    fn positive(&self, key: &str) -> Result<f64, InputError> {
        let v = self.required_number(key)?;
        self.check(key, v, |x| x > 0.0, "> 0")
    }

    fn optional_count(&self, key: &str) -> Result<Option<usize>, InputError> {
        let Some(e) = self.map.get(key) else {
            return Ok(None);
        };
        let n: usize = e.value.parse().map_err(|_| {
            err(
                Some(e.line),
                Some(key),
                format!("cannot read `{}` as a whole number >= 1", e.value),
            )
        })?;
        if n == 0 || n > MAX_COUNT {
            return Err(err(
                Some(e.line),
                Some(key),
                format!("must be a whole number in [1, {MAX_COUNT}], got {n}"),
            ));
        }
        Ok(Some(n))
    }
}

/// Parse and check the input file text.
///
/// # Errors
/// A line that is not `key = value`, an unknown or repeated key, a missing required
/// key, a value that is not a (finite) number or whole number, an unrendered
/// placeholder, a value out of its range, or both or neither forms of the
/// displacement list.
pub fn parse_input(text: &str) -> Result<Input, InputError> {
    let r = Reader {
        map: entries(text)?,
    };

    let e_gpa = r.positive("E")?;
    let sigma0_mpa = r.positive("sigma0")?;
    let q_mpa = r.positive("Q")?;
    let b = r.positive("b")?;
    let gauge_length_mm = r.positive("gauge_length")?;
    let gauge_width_mm = r.positive("gauge_width")?;
    let thickness_mm = r.positive("thickness")?;
    let grip_length_mm = match r.optional_number("grip_length")? {
        Some(v) => r.check("grip_length", v, |x| x >= 0.0, ">= 0")?,
        None => 0.0,
    };
    let grip_width_mm = match r.optional_number("grip_width")? {
        Some(v) => r.check("grip_width", v, |x| x > 0.0, "> 0")?,
        None => gauge_width_mm,
    };
    let taper = match r.optional_number("taper")? {
        Some(v) => r.check("taper", v, |x| (0.0..0.5).contains(&x), "in [0, 0.5)")?,
        None => 0.0,
    };
    let gauge_elements = r
        .optional_count("gauge_elements")?
        .unwrap_or(DEFAULT_GAUGE_ELEMENTS);
    let grip_elements = r
        .optional_count("grip_elements")?
        .unwrap_or(DEFAULT_GRIP_ELEMENTS);
    let substeps = r.optional_count("substeps")?.unwrap_or(1);
    let max_iterations = r
        .optional_count("max_iterations")?
        .unwrap_or(DEFAULT_MAX_ITERATIONS);
    let max_cutbacks = match r.map.get("max_cutbacks") {
        None => DEFAULT_MAX_CUTBACKS,
        Some(e) => match e.value.parse::<usize>() {
            Ok(n) if n <= MAX_CUTBACKS => n,
            _ => {
                return Err(err(
                    Some(e.line),
                    Some("max_cutbacks"),
                    format!(
                        "must be a whole number in [0, {MAX_CUTBACKS}], got `{}`",
                        e.value
                    ),
                ))
            }
        },
    };

    let list = r.map.get("displacements");
    let max = r.optional_number("displacement_max")?;
    let count = r.optional_count("displacement_count")?;
    let displacements_mm = match (list, max, count) {
        (Some(e), None, None) => {
            let mut v = Vec::new();
            for part in e.value.split(',') {
                let part = part.trim();
                if part.is_empty() {
                    return Err(err(
                        Some(e.line),
                        Some("displacements"),
                        format!("empty entry in `{}`", e.value),
                    ));
                }
                v.push(Reader::number_at("displacements", e.line, part)?);
            }
            v
        }
        (None, Some(m), Some(n)) => (1..=n).map(|i| m * i as f64 / n as f64).collect(),
        (Some(e), _, _) => return Err(err(
            Some(e.line),
            Some("displacements"),
            "give either `displacements` or `displacement_max` with `displacement_count`, not both",
        )),
        (None, Some(_), None) => {
            return Err(err(
                None,
                Some("displacement_count"),
                "required with `displacement_max` but not given",
            ))
        }
        (None, None, Some(_)) => {
            return Err(err(
                None,
                Some("displacement_max"),
                "required with `displacement_count` but not given",
            ))
        }
        (None, None, None) => {
            return Err(err(
                None,
                Some("displacements"),
                "required but not given (or give `displacement_max` and `displacement_count`)",
            ))
        }
    };
    if displacements_mm.len() > MAX_COUNT {
        return Err(err(
            r.line("displacements"),
            Some("displacements"),
            format!("more than {MAX_COUNT} values"),
        ));
    }

    Ok(Input {
        e_gpa,
        sigma0_mpa,
        q_mpa,
        b,
        gauge_length_mm,
        grip_length_mm,
        gauge_width_mm,
        grip_width_mm,
        thickness_mm,
        taper,
        gauge_elements,
        grip_elements,
        displacements_mm,
        substeps,
        max_iterations,
        max_cutbacks,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    pub(crate) const GOOD: &str = "\
# a tensile bar
E = 70          # GPa
sigma0 = 270
Q = 60
b = 15
gauge_length = 50
grip_length = 30
gauge_width = 12.5
grip_width = 20
thickness = 3
taper = 0.015
displacements = 0.1, 0.5 ,1.0
";

    #[test]
    fn parses_a_good_file_with_comments_and_spaces() {
        let inp = parse_input(GOOD).unwrap();
        assert_eq!(inp.e_gpa, 70.0);
        assert_eq!(inp.sigma0_mpa, 270.0);
        assert_eq!(inp.q_mpa, 60.0);
        assert_eq!(inp.b, 15.0);
        assert_eq!(inp.grip_width_mm, 20.0);
        assert_eq!(inp.taper, 0.015);
        assert_eq!(inp.displacements_mm, vec![0.1, 0.5, 1.0]);
        assert_eq!(inp.gauge_elements, DEFAULT_GAUGE_ELEMENTS);
        assert_eq!(inp.grip_elements, DEFAULT_GRIP_ELEMENTS);
        assert_eq!(inp.substeps, 1);
        assert_eq!(inp.max_iterations, DEFAULT_MAX_ITERATIONS);
        assert_eq!(inp.max_cutbacks, DEFAULT_MAX_CUTBACKS);
    }

    #[test]
    fn defaults_for_optional_geometry() {
        let text = "E=70\nsigma0=270\nQ=60\nb=15\ngauge_length=50\ngauge_width=10\nthickness=2\ndisplacements=1";
        let inp = parse_input(text).unwrap();
        assert_eq!(inp.grip_length_mm, 0.0);
        assert_eq!(inp.grip_width_mm, 10.0);
        assert_eq!(inp.taper, 0.0);
    }

    #[test]
    fn range_form_of_the_displacements() {
        let text = GOOD.replace(
            "displacements = 0.1, 0.5 ,1.0",
            "displacement_max = 2\ndisplacement_count = 4",
        );
        let inp = parse_input(&text).unwrap();
        assert_eq!(inp.displacements_mm, vec![0.5, 1.0, 1.5, 2.0]);
    }

    /// One case per invariant: (edit of the good file, expected Display text).
    #[test]
    fn bad_inputs_name_the_key_and_line() {
        let cases: &[(&str, &str, &str)] = &[
            (
                "E = 70",
                "E = abc",
                "line 2: key `E`: cannot read `abc` as a number",
            ),
            ("E = 70", "E = 0", "line 2: key `E`: must be > 0, got 0"),
            (
                "E = 70",
                "E = inf",
                "line 2: key `E`: `inf` is not a finite number",
            ),
            (
                "E = 70",
                "E = {{E}}",
                "line 2: key `E`: unrendered placeholder in `{{E}}`",
            ),
            ("E = 70", "", "key `E`: required but not given"),
            ("E = 70", "E =", "line 2: key `E`: missing value after `=`"),
            (
                "E = 70",
                "E 70",
                "line 2: expected `key = value`, got `E 70`",
            ),
            ("E = 70", "youngs = 70", "line 2: key `youngs`: unknown key"),
            (
                "E = 70",
                "E = 70\nE = 71",
                "line 3: key `E`: given more than once (first on line 2)",
            ),
            ("E = 70", "2E = 70", "line 2: `2E` is not a key"),
            (
                "sigma0 = 270",
                "sigma0 = -5",
                "line 3: key `sigma0`: must be > 0, got -5",
            ),
            ("Q = 60", "Q = 0", "line 4: key `Q`: must be > 0, got 0"),
            ("b = 15", "b = -1", "line 5: key `b`: must be > 0, got -1"),
            (
                "gauge_length = 50",
                "gauge_length = 0",
                "line 6: key `gauge_length`: must be > 0",
            ),
            (
                "grip_length = 30",
                "grip_length = -1",
                "line 7: key `grip_length`: must be >= 0",
            ),
            (
                "taper = 0.015",
                "taper = 0.5",
                "line 11: key `taper`: must be in [0, 0.5), got 0.5",
            ),
            (
                "thickness = 3",
                "",
                "key `thickness`: required but not given",
            ),
            (
                "thickness = 3",
                "thickness = 3\ngauge_elements = 0",
                "line 11: key `gauge_elements`: must be a whole number in [1, 1000000], got 0",
            ),
            (
                "thickness = 3",
                "thickness = 3\ngrip_elements = 2.5",
                "line 11: key `grip_elements`: cannot read `2.5` as a whole number >= 1",
            ),
            (
                "displacements = 0.1, 0.5 ,1.0",
                "displacements = 0.1,,1.0",
                "line 12: key `displacements`: empty entry in `0.1,,1.0`",
            ),
            (
                "displacements = 0.1, 0.5 ,1.0",
                "displacements = 0.1, x",
                "line 12: key `displacements`: cannot read `x` as a number",
            ),
            (
                "displacements = 0.1, 0.5 ,1.0",
                "",
                "key `displacements`: required but not given",
            ),
            (
                "displacements = 0.1, 0.5 ,1.0",
                "displacements = 1\ndisplacement_max = 2\ndisplacement_count = 4",
                "line 12: key `displacements`: give either",
            ),
            (
                "thickness = 3",
                "thickness = 3\nmax_cutbacks = -1",
                "line 11: key `max_cutbacks`: must be a whole number in [0, 40], got `-1`",
            ),
            (
                "displacements = 0.1, 0.5 ,1.0",
                "displacement_max = 2",
                "key `displacement_count`: required with `displacement_max`",
            ),
            (
                "displacements = 0.1, 0.5 ,1.0",
                "displacement_count = 3",
                "key `displacement_max`: required with `displacement_count`",
            ),
        ];
        for (from, to, expected) in cases {
            assert!(
                GOOD.contains(from),
                "test case edits a missing line: {from}"
            );
            let text = GOOD.replacen(from, to, 1);
            let e = parse_input(&text).expect_err(to);
            let shown = e.to_string();
            assert!(
                shown.starts_with(expected),
                "input edit `{from}` -> `{to}`:\n  got      {shown}\n  expected {expected}..."
            );
        }
    }
}
