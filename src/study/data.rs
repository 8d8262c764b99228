//! Field (test) data: a CSV with the curve's x column (if any), one column per output
//! quantity and optionally an sd column. Parsing is a pure function over the text.

/// One row of field data.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldRow {
    /// 1-based line in the data file (header is line 1).
    pub line: usize,
    pub x: Option<f64>,
    /// One value per output quantity, in the study's `y` order.
    pub y: Vec<f64>,
    /// Per-row measurement sd, from the sd column when one is named.
    pub sd: Option<f64>,
}

/// The replicates of one output value: quantity `quantity` at `x`.
#[derive(Debug, Clone, PartialEq)]
pub struct Target {
    /// Index into the study's output quantities.
    pub quantity: usize,
    pub x: Option<f64>,
    /// Observed values (replicates).
    pub values: Vec<f64>,
    /// Per-replicate sd when the data carry one.
    pub sds: Vec<Option<f64>>,
}

/// Parsed field data of one experiment.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldData {
    pub rows: Vec<FieldRow>,
}

impl FieldData {
    /// Parse CSV `text` with columns `x_col` (optional), each of `y_cols`, and
    /// optionally `sd_col`. Errors are `(line, message)`.
    pub fn parse(
        text: &str,
        x_col: Option<&str>,
        y_cols: &[String],
        sd_col: Option<&str>,
    ) -> Result<Self, (usize, String)> {
        if text.trim().is_empty() {
            return Err((
                1,
                "the data file is empty (expected a header line naming the columns, then one row per measurement)".into(),
            ));
        }
        let mut reader = csv::ReaderBuilder::new()
            .trim(csv::Trim::All)
            .from_reader(text.as_bytes());
        let headers = reader
            .headers()
            .map_err(|e| (1, format!("cannot read the header: {e}")))?
            .clone();
        let find = |name: &str| -> Result<usize, (usize, String)> {
            if headers.iter().filter(|h| *h == name).count() > 1 {
                // Which of the two is meant cannot be told: refuse rather than pick one.
                return Err((1, format!("column `{name}` appears more than once")));
            }
            headers.iter().position(|h| h == name).ok_or_else(|| {
                (
                    1,
                    format!(
                        "no column `{name}` (columns: {})",
                        headers.iter().collect::<Vec<_>>().join(", ")
                    ),
                )
            })
        };
        let xi = x_col.map(find).transpose()?;
        let yi = y_cols
            .iter()
            .map(|c| find(c))
            .collect::<Result<Vec<_>, _>>()?;
        let si = sd_col.map(find).transpose()?;
        let mut rows = Vec::new();
        for (k, rec) in reader.records().enumerate() {
            let line = k + 2;
            let rec = rec.map_err(|e| (line, format!("malformed row: {e}")))?;
            let num = |i: usize, what: &str| -> Result<f64, (usize, String)> {
                let s = rec.get(i).unwrap_or("");
                if s.is_empty() {
                    return Err((line, format!("empty cell in column `{what}`")));
                }
                let v: f64 = s
                    .parse()
                    .map_err(|_| (line, format!("`{s}` in column `{what}` is not a number")))?;
                if v.is_finite() {
                    Ok(v)
                } else {
                    Err((line, format!("`{s}` in column `{what}` is not finite")))
                }
            };
            let x = match (xi, x_col) {
                (Some(i), Some(n)) => Some(num(i, n)?),
                _ => None,
            };
            let y = yi
                .iter()
                .zip(y_cols)
                .map(|(&i, n)| num(i, n))
                .collect::<Result<Vec<_>, _>>()?;
            let sd = match (si, sd_col) {
                (Some(i), Some(n)) => {
                    let v = num(i, n)?;
                    if v <= 0.0 {
                        return Err((line, format!("sd `{v}` in column `{n}` must be > 0")));
                    }
                    Some(v)
                }
                _ => None,
            };
            rows.push(FieldRow { line, x, y, sd });
        }
        if rows.is_empty() {
            return Err((1, "no data rows".into()));
        }
        Ok(Self { rows })
    }

    /// Distinct x values in order of first appearance (`[None]` for scalar outputs).
    pub fn stations(&self) -> Vec<Option<f64>> {
        let mut out: Vec<Option<f64>> = Vec::new();
        for r in &self.rows {
            if !out.contains(&r.x) {
                out.push(r.x);
            }
        }
        out
    }

    /// Group the rows into targets: for each quantity, for each station, the replicates.
    /// The order (quantity-major, then station) is the experiment's output vector order.
    pub fn targets(&self, n_quantities: usize) -> Vec<Target> {
        let stations = self.stations();
        let mut out = Vec::new();
        for q in 0..n_quantities {
            for &x in &stations {
                let reps: Vec<&FieldRow> = self.rows.iter().filter(|r| r.x == x).collect();
                out.push(Target {
                    quantity: q,
                    x,
                    values: reps.iter().map(|r| r.y[q]).collect(),
                    sds: reps.iter().map(|r| r.sd).collect(),
                });
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn groups_replicates_by_station() {
        let text = "station,deflection\n0.5,1.0\n1.0,2.0\n0.5,1.2\n";
        let d = FieldData::parse(text, Some("station"), &["deflection".into()], None).unwrap();
        let t = d.targets(1);
        assert_eq!(t.len(), 2);
        assert_eq!(t[0].values, vec![1.0, 1.2]);
        assert_eq!(t[1].x, Some(1.0));
    }

    #[test]
    fn names_line_and_column_of_a_bad_number() {
        let text = "x,y\n1,2\n2,abc\n";
        let e = FieldData::parse(text, Some("x"), &["y".into()], None).unwrap_err();
        assert_eq!(e.0, 3);
        assert!(e.1.contains("`abc` in column `y`"));
    }
}
