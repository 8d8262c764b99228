//! The predict step: surrogate mean and sd at the user's points, as CSV.

use crate::layout::{read_surrogate, Campaign, CampaignError};
use anyhow::{Context, Result};
use std::path::Path;

/// Parse prediction points: a CSV whose header names every parameter (any order).
///
/// # Errors
/// [`CampaignError::FileLine`] naming the file and line of a missing column or a bad number.
pub fn parse_points(text: &str, file: &Path, names: &[String]) -> Result<Vec<Vec<f64>>> {
    let bad = |line: usize, message: String| CampaignError::FileLine {
        file: file.to_path_buf(),
        line,
        message,
    };
    let mut r = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let headers = r
        .headers()
        .map_err(|e| bad(1, format!("cannot read the header: {e}")))?
        .clone();
    let mut idx = Vec::new();
    for n in names {
        let i = headers.iter().position(|h| h == n).ok_or_else(|| {
            bad(
                1,
                format!(
                    "no column `{n}` (the header must name every parameter: {})",
                    names.join(", ")
                ),
            )
        })?;
        idx.push(i);
    }
    let mut out = Vec::new();
    for (k, rec) in r.records().enumerate() {
        let line = k + 2;
        let rec = rec.map_err(|e| bad(line, format!("malformed row: {e}")))?;
        let mut row = Vec::with_capacity(idx.len());
        for (&i, n) in idx.iter().zip(names) {
            let s = rec.get(i).unwrap_or("");
            let v: f64 = s
                .parse()
                .map_err(|_| bad(line, format!("`{s}` in column `{n}` is not a number")))?;
            if !v.is_finite() {
                return Err(bad(line, format!("`{s}` in column `{n}` is not finite")).into());
            }
            row.push(v);
        }
        out.push(row);
    }
    if out.is_empty() {
        return Err(bad(1, "no points (the file has a header but no rows)".into()).into());
    }
    Ok(out)
}

/// Surrogate mean and sd at `points`, as CSV: the controls and parameters, then for every experiment
/// and output value `EXP.Y.mean`, `EXP.Y.sd` (curves: `EXP.Y@X.mean`, `EXP.Y@X.sd`).
/// Also returns how many points lie outside the parameter box (extrapolation).
pub fn predict_csv(c: &Campaign, points: &[Vec<f64>]) -> Result<(Vec<u8>, usize)> {
    use rayon::prelude::*;
    let fitted = read_surrogate(c)?.body.to_fitted()?;
    let names = c.study.design_variable_names();
    let mut header = names.clone();
    for e in &fitted.experiments {
        for o in &e.outputs {
            header.push(format!("{}.{}.mean", e.experiment, o.name));
            header.push(format!("{}.{}.sd", e.experiment, o.name));
        }
    }
    let rows: Vec<Vec<String>> = points
        .par_iter()
        .map(|p| {
            let mut row: Vec<String> = p.iter().map(|v| format!("{v}")).collect();
            for e in &fitted.experiments {
                let (m, v) = e.predict(p);
                for (mi, vi) in m.iter().zip(&v) {
                    row.push(format!("{mi}"));
                    row.push(format!("{}", vi.sqrt()));
                }
            }
            row
        })
        .collect();
    let outside = points
        .iter()
        .filter(|p| {
            p.iter()
                .zip(&c.study.design_variables())
                .any(|(v, par)| *v < par.lo || *v > par.hi)
        })
        .count();
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(&header)?;
    for r in rows {
        w.write_record(&r)?;
    }
    Ok((
        w.into_inner().context("cannot write the predictions")?,
        outside,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names() -> Vec<String> {
        vec!["E".into(), "k".into()]
    }

    #[test]
    fn columns_are_found_by_name_in_any_order() {
        let pts = parse_points("k, E\n2, 200\n3.5,190\n", Path::new("p.csv"), &names()).unwrap();
        assert_eq!(pts, vec![vec![200.0, 2.0], vec![190.0, 3.5]]);
    }

    #[test]
    fn a_bad_number_names_file_line_and_column() {
        let e = parse_points("E,k\n200,2\n190,abc\n", Path::new("p.csv"), &names()).unwrap_err();
        assert_eq!(
            e.to_string(),
            "p.csv:3: `abc` in column `k` is not a number"
        );
        let e = parse_points("E,k\n200,inf\n", Path::new("p.csv"), &names()).unwrap_err();
        assert_eq!(e.to_string(), "p.csv:2: `inf` in column `k` is not finite");
    }

    #[test]
    fn a_missing_column_or_no_rows_is_refused_as_bad_input() {
        let e = parse_points("E\n200\n", Path::new("p.csv"), &names()).unwrap_err();
        assert!(e.to_string().starts_with("p.csv:1: no column `k`"), "{e}");
        assert!(crate::layout::is_bad_input(&e));
        let e = parse_points("E,k\n", Path::new("p.csv"), &names()).unwrap_err();
        assert_eq!(
            e.to_string(),
            "p.csv:1: no points (the file has a header but no rows)"
        );
    }
}
