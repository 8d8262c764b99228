//! Parse a simulator's output file and match it to the field data's stations.
//!
//! Curves are matched to the field x values exactly (relative tolerance
//! [`X_MATCH_RTOL`]) or, failing that, by linear interpolation between the two
//! neighbouring simulated x values; a field x outside the simulated range is an error.

use crate::study::OutputFormat;

/// Relative tolerance under which a simulated x equals a field x (text round-off).
pub const X_MATCH_RTOL: f64 = 1e-9;

/// A parsed output: the x column (curves) and one vector per quantity.
#[derive(Debug, Clone, PartialEq)]
pub struct Parsed {
    pub x: Option<Vec<f64>>,
    pub y: Vec<Vec<f64>>,
}

/// Parse `text` in `format` with curve column `x` (if any) and quantities `y`.
///
/// # Errors
/// A message naming what is missing or wrong: no such column or key, a value that is
/// not a finite number, an empty file, columns of different lengths.
pub fn parse_output(
    text: &str,
    format: OutputFormat,
    x: Option<&str>,
    y: &[String],
) -> Result<Parsed, String> {
    if text.trim().is_empty() {
        return Err("the output file is empty".into());
    }
    let parsed = match format {
        OutputFormat::Csv => parse_csv(text, x, y)?,
        OutputFormat::Yaml => {
            let v: serde_json::Value = serde_yaml::from_str(text)
                .map_err(|e| format!("the output is not valid YAML: {e}"))?;
            parse_tree(&v, x, y)?
        }
        OutputFormat::Json => {
            let v: serde_json::Value = serde_json::from_str(text)
                .map_err(|e| format!("the output is not valid JSON: {e}"))?;
            parse_tree(&v, x, y)?
        }
    };
    let n = parsed.x.as_ref().map(Vec::len).unwrap_or(1);
    for (q, col) in y.iter().zip(&parsed.y) {
        if col.len() != n {
            return Err(format!(
                "`{q}` has {} values but {} were expected",
                col.len(),
                n
            ));
        }
    }
    Ok(parsed)
}

fn finite(v: f64, what: &str) -> Result<f64, String> {
    if v.is_finite() {
        Ok(v)
    } else {
        Err(format!("{what} is {v}, not a finite number"))
    }
}

fn parse_csv(text: &str, x: Option<&str>, y: &[String]) -> Result<Parsed, String> {
    let mut r = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let headers = r
        .headers()
        .map_err(|e| format!("cannot read the CSV header: {e}"))?
        .clone();
    let col = |name: &str| {
        if headers.iter().filter(|h| *h == name).count() > 1 {
            return Err(format!(
                "column `{name}` appears more than once in the output"
            ));
        }
        headers.iter().position(|h| h == name).ok_or_else(|| {
            format!(
                "no column `{name}` in the output (columns: {})",
                headers.iter().collect::<Vec<_>>().join(", ")
            )
        })
    };
    let xi = x.map(col).transpose()?;
    let yi = y.iter().map(|n| col(n)).collect::<Result<Vec<_>, _>>()?;
    let mut xs = Vec::new();
    let mut ys = vec![Vec::new(); y.len()];
    for (k, rec) in r.records().enumerate() {
        let line = k + 2;
        let rec = rec.map_err(|e| format!("line {line}: malformed CSV row: {e}"))?;
        let num = |i: usize, name: &str| -> Result<f64, String> {
            let s = rec.get(i).unwrap_or("");
            let v: f64 = s
                .parse()
                .map_err(|_| format!("line {line}: `{s}` in column `{name}` is not a number"))?;
            finite(v, &format!("line {line}: column `{name}`"))
        };
        if let (Some(i), Some(n)) = (xi, x) {
            xs.push(num(i, n)?);
        }
        for (q, (&i, n)) in yi.iter().zip(y).enumerate() {
            ys[q].push(num(i, n)?);
        }
    }
    if ys.first().map(Vec::is_empty).unwrap_or(true) {
        return Err("the output has a header but no data rows".into());
    }
    if x.is_none() && ys[0].len() != 1 {
        return Err(format!(
            "a scalar output needs exactly one data row, found {}",
            ys[0].len()
        ));
    }
    Ok(Parsed {
        x: x.map(|_| xs),
        y: ys,
    })
}

fn numbers(v: &serde_json::Value, name: &str) -> Result<Vec<f64>, String> {
    let one = |v: &serde_json::Value| -> Result<f64, String> {
        match v {
            serde_json::Value::Number(n) => {
                finite(n.as_f64().unwrap_or(f64::NAN), &format!("`{name}`"))
            }
            serde_json::Value::String(s) => {
                let x: f64 = s
                    .parse()
                    .map_err(|_| format!("`{name}`: `{s}` is not a number"))?;
                finite(x, &format!("`{name}`"))
            }
            other => Err(format!("`{name}`: {other} is not a number")),
        }
    };
    match v {
        serde_json::Value::Array(a) => a.iter().map(one).collect(),
        other => Ok(vec![one(other)?]),
    }
}

fn parse_tree(v: &serde_json::Value, x: Option<&str>, y: &[String]) -> Result<Parsed, String> {
    let map = v
        .as_object()
        .ok_or("the output must be a mapping of names to numbers or lists")?;
    let get = |name: &str| {
        map.get(name)
            .ok_or_else(|| format!("no key `{name}` in the output"))
    };
    let xs = x.map(|n| get(n).and_then(|v| numbers(v, n))).transpose()?;
    let ys = y
        .iter()
        .map(|n| get(n).and_then(|v| numbers(v, n)))
        .collect::<Result<Vec<_>, _>>()?;
    Ok(Parsed { x: xs, y: ys })
}

/// The experiment's output vector (quantity-major, then station) from a parsed output.
///
/// # Errors
/// An empty curve or scalar, columns of different lengths, a field x outside the
/// simulated range, or simulated x values that are not distinct.
pub fn match_stations(parsed: &Parsed, stations: &[Option<f64>]) -> Result<Vec<f64>, String> {
    let n = parsed.x.as_ref().map_or(1, Vec::len);
    if n == 0 {
        // A JSON or YAML output may hold `x: []`, which the CSV reader cannot.
        return Err("the output's curve has no points".into());
    }
    if let Some(col) = parsed.y.iter().find(|c| c.len() != n) {
        return Err(format!(
            "an output quantity has {} values but {n} were expected",
            col.len()
        ));
    }
    let mut out = Vec::with_capacity(parsed.y.len() * stations.len());
    match &parsed.x {
        None => {
            for col in &parsed.y {
                out.extend(std::iter::repeat_n(col[0], stations.len()));
            }
        }
        Some(xs) => {
            let mut order: Vec<usize> = (0..xs.len()).collect();
            order.sort_by(|&a, &b| xs[a].total_cmp(&xs[b]));
            for w in order.windows(2) {
                if xs[w[0]] == xs[w[1]] {
                    return Err(format!("the simulated x value {} appears twice", xs[w[0]]));
                }
            }
            let (lo, hi) = (xs[order[0]], xs[order[order.len() - 1]]);
            for col in &parsed.y {
                for s in stations {
                    let t = s.unwrap_or(f64::NAN);
                    let tol = X_MATCH_RTOL * t.abs().max(1.0);
                    if let Some(k) = order.iter().find(|&&k| (xs[k] - t).abs() <= tol) {
                        out.push(col[*k]);
                        continue;
                    }
                    if !(t > lo && t < hi) {
                        return Err(format!(
                            "field x = {t} is outside the simulated range [{lo}, {hi}]"
                        ));
                    }
                    let j = order
                        .iter()
                        .position(|&k| xs[k] > t)
                        .expect("t is inside the range");
                    let (a, b) = (order[j - 1], order[j]);
                    let w = (t - xs[a]) / (xs[b] - xs[a]);
                    out.push(col[a] + w * (col[b] - col[a]));
                }
            }
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names(v: &[&str]) -> Vec<String> {
        v.iter().map(|s| s.to_string()).collect()
    }

    #[test]
    fn csv_curve_exact_and_interpolated() {
        let p = parse_output(
            "x,y\n0,0\n1,10\n2,20\n",
            OutputFormat::Csv,
            Some("x"),
            &names(&["y"]),
        )
        .unwrap();
        let v = match_stations(&p, &[Some(1.0), Some(1.5)]).unwrap();
        assert_eq!(v, vec![10.0, 15.0]);
        let e = match_stations(&p, &[Some(3.0)]).unwrap_err();
        assert!(e.contains("outside the simulated range"), "{e}");
    }

    #[test]
    fn non_finite_and_missing_are_errors() {
        let e =
            parse_output("x,y\n0,NaN\n", OutputFormat::Csv, Some("x"), &names(&["y"])).unwrap_err();
        assert!(e.contains("not a finite number"), "{e}");
        let e =
            parse_output("x,z\n0,1\n", OutputFormat::Csv, Some("x"), &names(&["y"])).unwrap_err();
        assert!(e.contains("no column `y`"), "{e}");
        assert!(parse_output("", OutputFormat::Csv, None, &names(&["y"])).is_err());
    }

    #[test]
    fn an_empty_curve_is_an_error_not_a_panic() {
        // Found by the proptest smoke run (tests/reliability_proptest.rs): a JSON or
        // YAML output may hold empty lists, and matching indexed the first x.
        let p = parse_output(
            r#"{"x": [], "y": []}"#,
            OutputFormat::Json,
            Some("x"),
            &names(&["y"]),
        )
        .unwrap();
        let e = match_stations(&p, &[Some(1.0)]).unwrap_err();
        assert_eq!(e, "the output's curve has no points");
        let ragged = Parsed {
            x: Some(vec![0.0, 1.0]),
            y: vec![vec![1.0]],
        };
        let e = match_stations(&ragged, &[Some(0.5)]).unwrap_err();
        assert_eq!(e, "an output quantity has 1 values but 2 were expected");
    }

    #[test]
    fn yaml_and_json_scalars_and_curves() {
        let p = parse_output("y: 2.5\n", OutputFormat::Yaml, None, &names(&["y"])).unwrap();
        assert_eq!(p.y, vec![vec![2.5]]);
        let p = parse_output(
            r#"{"x": [1, 2], "y": [3, 4]}"#,
            OutputFormat::Json,
            Some("x"),
            &names(&["y"]),
        )
        .unwrap();
        assert_eq!(match_stations(&p, &[Some(2.0)]).unwrap(), vec![4.0]);
    }
}
