//! The samples file `posterior-samples.csv`: one format, written here after sampling and
//! read here by every later stage (checks, refinement, report, a later study's
//! `calibration.prior_from`).
//!
//! Format (records reference, `docs/records.md`): the header
//! `chain,draw,<parameters...>,<noise...>,log_posterior`, one noise sd column
//! `noise_sd.<experiment>` per estimated noise, then one column per sampled discrepancy
//! hyperparameter, `discrepancy_sd.<experiment>.<quantity>` and
//! `discrepancy_length_scale.<experiment>.<quantity>`; numbers in shortest round-trip form.
//! Must not: open files (the caller reads and writes the bytes).

use super::chain::Chain;
use super::discrepancy::{Hyper, HyperKind};

/// The samples file's bytes for `chains`: parameters `names` (study order), noise sds of
/// the experiments `noise_names`, the sampled discrepancy hyperparameters
/// `discrepancy_labels` (experiment, quantity, kind, as
/// [`LogPosterior::discrepancy_labels`](super::LogPosterior::discrepancy_labels) gives
/// them), then the log posterior.
///
/// # Errors
/// Only when the CSV writer fails, which writing to memory does not.
pub fn write_csv(
    names: &[String],
    noise_names: &[String],
    discrepancy_labels: &[(String, String, HyperKind, Hyper)],
    chains: &[Chain],
) -> Result<Vec<u8>, csv::Error> {
    let mut csv = csv::Writer::from_writer(Vec::new());
    let mut header = vec!["chain".to_string(), "draw".to_string()];
    header.extend(names.iter().cloned());
    header.extend(noise_names.iter().map(|e| format!("noise_sd.{e}")));
    header.extend(
        discrepancy_labels
            .iter()
            .map(|(e, q, kind, _)| format!("{}.{e}.{q}", kind.column_prefix())),
    );
    header.push("log_posterior".into());
    csv.write_record(&header)?;
    for ch in chains {
        for (i, (((th, nv), dv), lp)) in ch
            .theta
            .iter()
            .zip(&ch.noise_var)
            .zip(&ch.discrepancy)
            .zip(&ch.ln_posterior)
            .enumerate()
        {
            let mut row = vec![ch.index.to_string(), i.to_string()];
            row.extend(th.iter().map(|v| format!("{v}")));
            row.extend(nv.iter().map(|v| format!("{}", v.sqrt())));
            row.extend(dv.iter().map(|v| format!("{v}")));
            row.push(format!("{lp}"));
            csv.write_record(&row)?;
        }
    }
    csv.into_inner().map_err(|e| e.into_error().into())
}

/// Kept MCMC draws as read from `posterior-samples.csv`.
#[derive(Debug, Clone, PartialEq)]
pub struct Samples {
    /// The columns after `chain` and `draw`: parameters, noise sds, `log_posterior`.
    pub columns: Vec<String>,
    /// Per chain (in chain-number order), per draw, one value per column.
    pub chains: Vec<Vec<Vec<f64>>>,
}

impl Samples {
    /// Parse the text of `posterior-samples.csv` (`chain,draw,<columns…>`).
    ///
    /// # Errors
    /// A missing `chain`/`draw` header, a malformed row or a non-number, with its line.
    pub fn parse_csv(text: &str) -> Result<Self, String> {
        let mut r = csv::ReaderBuilder::new().from_reader(text.as_bytes());
        let header = r.headers().map_err(|e| format!("line 1: {e}"))?.clone();
        if header.len() < 3 || &header[0] != "chain" || &header[1] != "draw" {
            return Err("line 1: expected a header `chain,draw,…`".into());
        }
        let columns: Vec<String> = header.iter().skip(2).map(str::to_string).collect();
        let mut chains: Vec<(usize, Vec<Vec<f64>>)> = Vec::new();
        for (i, rec) in r.records().enumerate() {
            let line = i + 2;
            let rec = rec.map_err(|e| format!("line {line}: {e}"))?;
            let chain: usize = rec[0]
                .parse()
                .map_err(|_| format!("line {line}: chain `{}` is not a number", &rec[0]))?;
            let row: Result<Vec<f64>, String> = rec
                .iter()
                .skip(2)
                .map(|v| {
                    v.parse::<f64>()
                        .map_err(|_| format!("line {line}: `{v}` is not a number"))
                })
                .collect();
            let row = row?;
            match chains.iter_mut().find(|(c, _)| *c == chain) {
                Some((_, rows)) => rows.push(row),
                None => chains.push((chain, vec![row])),
            }
        }
        chains.sort_by_key(|(c, _)| *c);
        Ok(Self {
            columns,
            chains: chains.into_iter().map(|(_, rows)| rows).collect(),
        })
    }

    pub fn column(&self, name: &str) -> Option<usize> {
        self.columns.iter().position(|c| c == name)
    }

    /// Column `j` of every chain, chains one after the other.
    pub fn pooled(&self, j: usize) -> Vec<f64> {
        self.chains
            .iter()
            .flat_map(|c| c.iter().map(move |r| r[j]))
            .collect()
    }

    /// Column `j` of each chain.
    pub fn per_chain(&self, j: usize) -> Vec<Vec<f64>> {
        self.chains
            .iter()
            .map(|c| c.iter().map(|r| r[j]).collect())
            .collect()
    }

    pub fn n_draws(&self) -> usize {
        self.chains.iter().map(Vec::len).sum()
    }

    /// At most `max` draws spread evenly over all chains (every k-th pooled draw), each
    /// as its full row.
    pub fn thinned(&self, max: usize) -> Vec<&[f64]> {
        let n = self.n_draws();
        let step = n.div_ceil(max.max(1)).max(1);
        self.chains
            .iter()
            .flat_map(|c| c.iter())
            .step_by(step)
            .map(Vec::as_slice)
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn samples_parse_by_chain_and_thin_evenly() {
        let text = "chain,draw,E,log_posterior\n0,0,1,-1\n0,1,2,-2\n1,0,3,-3\n1,1,4,-4\n";
        let s = Samples::parse_csv(text).unwrap();
        assert_eq!(s.columns, ["E", "log_posterior"]);
        assert_eq!(s.per_chain(0), vec![vec![1.0, 2.0], vec![3.0, 4.0]]);
        assert_eq!(s.pooled(1), vec![-1.0, -2.0, -3.0, -4.0]);
        let t: Vec<f64> = s.thinned(2).iter().map(|r| r[0]).collect();
        assert_eq!(t, vec![1.0, 3.0]);
        assert!(Samples::parse_csv("a,b\n1,2\n").is_err());
        let e = Samples::parse_csv("chain,draw,E\n0,0,x\n").unwrap_err();
        assert!(e.contains("line 2"), "{e}");
    }
}
