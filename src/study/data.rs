//! Field (test) data: a CSV with one column per control (if any), the curve's x column
//! (if any), one column per output quantity and optionally an sd column. Parsing is a
//! pure function over the text.

/// One row of field data.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldRow {
    /// 1-based line in the data file (header is line 1).
    pub line: usize,
    /// One value per control, in the study's `controls` order (empty without controls).
    pub controls: Vec<f64>,
    pub x: Option<f64>,
    /// One value per output quantity, in the study's `y` order.
    pub y: Vec<f64>,
    /// Per-row measurement sd, from the sd column when one is named.
    pub sd: Option<f64>,
}

/// The replicates of one output value: quantity `quantity` at `x`, under condition
/// `condition`.
#[derive(Debug, Clone, PartialEq)]
pub struct Target {
    /// Index into [`FieldData::conditions`] (0 without controls).
    pub condition: usize,
    /// Index of the value in a run's output vector (quantity-major, then station, as
    /// `runs::value_names`).
    pub value: usize,
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
        control_cols: &[String],
        x_col: Option<&str>,
        y_cols: &[String],
        sd_col: Option<&str>,
    ) -> Result<Self, (usize, String)> {
        let mut reader = csv::ReaderBuilder::new()
            .trim(csv::Trim::All)
            .from_reader(text.as_bytes());
        let headers = reader
            .headers()
            .map_err(|e| (1, format!("cannot read the header: {e}")))?
            .clone();
        let find = |name: &str| -> Result<usize, (usize, String)> {
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
        let ci = control_cols
            .iter()
            .map(|c| find(c))
            .collect::<Result<Vec<_>, _>>()?;
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
                let v: f64 = s
                    .parse()
                    .map_err(|_| (line, format!("`{s}` in column `{what}` is not a number")))?;
                if v.is_finite() {
                    Ok(v)
                } else {
                    Err((line, format!("`{s}` in column `{what}` is not finite")))
                }
            };
            let controls = ci
                .iter()
                .zip(control_cols)
                .map(|(&i, n)| num(i, n))
                .collect::<Result<Vec<_>, _>>()?;
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
            rows.push(FieldRow {
                line,
                controls,
                x,
                y,
                sd,
            });
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

    /// Distinct control values (conditions) in order of first appearance (`[[]]` without
    /// controls).
    pub fn conditions(&self) -> Vec<Vec<f64>> {
        let mut out: Vec<Vec<f64>> = Vec::new();
        for r in &self.rows {
            if !out.contains(&r.controls) {
                out.push(r.controls.clone());
            }
        }
        out
    }

    /// Group the rows into targets: for each condition, for each quantity, for each
    /// station measured at that condition, the replicates. This is the order of the
    /// experiment's field vector; without controls it is the run's output vector order
    /// (quantity-major, then station) and `value` counts up from 0.
    pub fn targets(&self, n_quantities: usize) -> Vec<Target> {
        let stations = self.stations();
        let mut out = Vec::new();
        for (ci, cond) in self.conditions().iter().enumerate() {
            for q in 0..n_quantities {
                for (si, &x) in stations.iter().enumerate() {
                    let reps: Vec<&FieldRow> = self
                        .rows
                        .iter()
                        .filter(|r| r.x == x && &r.controls == cond)
                        .collect();
                    if reps.is_empty() {
                        continue;
                    }
                    out.push(Target {
                        condition: ci,
                        value: q * stations.len() + si,
                        quantity: q,
                        x,
                        values: reps.iter().map(|r| r.y[q]).collect(),
                        sds: reps.iter().map(|r| r.sd).collect(),
                    });
                }
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
        let d = FieldData::parse(text, &[], Some("station"), &["deflection".into()], None).unwrap();
        let t = d.targets(1);
        assert_eq!(t.len(), 2);
        assert_eq!(t[0].values, vec![1.0, 1.2]);
        assert_eq!(t[1].x, Some(1.0));
    }

    #[test]
    fn names_line_and_column_of_a_bad_number() {
        let text = "x,y\n1,2\n2,abc\n";
        let e = FieldData::parse(text, &[], Some("x"), &["y".into()], None).unwrap_err();
        assert_eq!(e.0, 3);
        assert!(e.1.contains("`abc` in column `y`"));
    }

    #[test]
    fn groups_replicates_by_condition_then_quantity_and_station() {
        let text = "T,x,y\n20,0,1\n40,0,2\n20,1,3\n20,0,1.5\n";
        let d = FieldData::parse(text, &["T".into()], Some("x"), &["y".into()], None).unwrap();
        assert_eq!(d.conditions(), vec![vec![20.0], vec![40.0]]);
        let t = d.targets(1);
        // T = 20: x = 0 (two replicates) and x = 1; T = 40: x = 0 only.
        assert_eq!(t.len(), 3);
        assert_eq!(
            (t[0].condition, t[0].value, t[0].values.clone()),
            (0, 0, vec![1.0, 1.5])
        );
        assert_eq!((t[1].condition, t[1].value), (0, 1));
        assert_eq!(
            (t[2].condition, t[2].value, t[2].values.clone()),
            (1, 0, vec![2.0])
        );
    }
}
