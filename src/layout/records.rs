//! Typed reading and writing of the campaign's records.

use super::{
    Campaign, CampaignError, CHECK_DRAWS, DESIGN_FILE, POSTERIOR_FILE, SAMPLES_FILE, SURROGATE_FILE,
};
use crate::calibrate::{PosteriorBody, Samples};
use crate::design::{Design, DesignBody};
use crate::record::{read_record, sha256_file, Record};
use crate::surrogate::SurrogateBody;
use anyhow::{bail, Context, Result};

/// Read the record `file` of the campaign, or say which command makes it.
///
/// # Errors
/// A missing record (naming `assay <stage>`) or a malformed one.
pub fn read_stage_record<T: serde::de::DeserializeOwned>(
    c: &Campaign,
    file: &str,
    stage: &str,
) -> Result<Record<T>> {
    let path = c.path(file);
    if !path.exists() {
        bail!(
            "no {file} in {}: run `assay {stage} {}` first",
            c.dir.display(),
            c.study.file.display()
        );
    }
    read_record(&path)
}

/// Read a campaign record when it exists.
///
/// # Errors
/// A malformed record.
pub fn read_if_exists<T: serde::de::DeserializeOwned>(
    c: &Campaign,
    file: &str,
) -> Result<Option<Record<T>>> {
    let path = c.path(file);
    if path.exists() {
        Ok(Some(read_record(&path)?))
    } else {
        Ok(None)
    }
}

/// Read `surrogate.yaml`. A record from before the principal-component basis lacks its
/// keys; the error then says to refit.
///
/// # Errors
/// A missing or malformed record.
pub fn read_surrogate(c: &Campaign) -> Result<Record<SurrogateBody>> {
    read_stage_record(c, SURROGATE_FILE, "fit").with_context(|| {
        format!(
            "cannot use {}; if it was written by an older assay, run `assay fit {}` again",
            c.path(SURROGATE_FILE).display(),
            c.study.file.display()
        )
    })
}

/// Read `posterior.yaml`.
///
/// # Errors
/// A missing or malformed record.
pub fn read_posterior(c: &Campaign) -> Result<Record<PosteriorBody>> {
    read_stage_record(c, POSTERIOR_FILE, "calibrate")
}

/// Read `design.yaml`.
///
/// # Errors
/// A missing or malformed design.
pub fn load_design(c: &Campaign) -> Result<Design> {
    let path = c.path(DESIGN_FILE);
    let rec: Record<DesignBody> = read_stage_record(c, DESIGN_FILE, "design")?;
    rec.body
        .to_design()
        .with_context(|| format!("{} is malformed", path.display()))
}

/// The sha256 of `design.yaml`.
///
/// # Errors
/// I/O.
pub fn design_sha256(c: &Campaign) -> Result<String> {
    Ok(sha256_file(&c.path(DESIGN_FILE))?)
}

/// Read `posterior-samples.csv`.
///
/// # Errors
/// A file that cannot be read; a malformed one ([`CampaignError::Samples`], naming the
/// line).
pub fn read_samples(c: &Campaign) -> Result<Samples> {
    let path = c.path(SAMPLES_FILE);
    let text = std::fs::read_to_string(&path)
        .with_context(|| format!("cannot read {}", path.display()))?;
    Ok(
        Samples::parse_csv(&text).map_err(|message| CampaignError::Samples {
            file: path.clone(),
            message,
        })?,
    )
}

/// The posterior samples, their rows thinned evenly to at most [`CHECK_DRAWS`], and
/// those rows' parameter values in the study's order.
pub struct Draws {
    pub samples: Samples,
    /// Thinned rows, every column.
    pub rows: Vec<Vec<f64>>,
    /// The same rows' parameter values, in the study's order.
    pub theta: Vec<Vec<f64>>,
}

/// Read the samples and thin them for the checks and refinement ([`Draws`]).
///
/// # Errors
/// No samples file, a malformed one, or one without a column for a parameter.
pub fn posterior_draws(c: &Campaign) -> Result<Draws> {
    let samples = read_samples(c)?;
    let rows: Vec<Vec<f64>> = samples
        .thinned(CHECK_DRAWS)
        .into_iter()
        .map(<[f64]>::to_vec)
        .collect();
    let cols = c
        .study
        .parameters
        .iter()
        .map(|p| {
            samples
                .column(&p.name)
                .ok_or_else(|| CampaignError::SamplesColumn {
                    file: c.path(SAMPLES_FILE),
                    column: p.name.clone(),
                })
        })
        .collect::<Result<Vec<usize>, CampaignError>>()?;
    let theta: Vec<Vec<f64>> = rows
        .iter()
        .map(|r| cols.iter().map(|&j| r[j]).collect())
        .collect();
    Ok(Draws {
        samples,
        rows,
        theta,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::layout::is_bad_input;

    fn campaign(dir: &std::path::Path) -> Campaign {
        let text = "name: t\nparameters:\n  - {name: a, range: [0, 5]}\n  - {name: b, range: [1, 2]}\nsimulator:\n  command: [sim]\n  output: {file: o.csv, x: x, y: [y]}\nexperiments:\n  - {name: e, data: d.csv, noise: {sd: 0.1}}\n";
        let study = crate::study::parse_with_data(text, "x,y\n0,1.5\n1,2.0\n");
        Campaign::new(study, dir, vec!["assay".into()])
    }

    #[test]
    fn a_missing_record_names_the_command_that_makes_it() {
        let tmp = tempfile::tempdir().unwrap();
        let c = campaign(tmp.path());
        let e = read_surrogate(&c).unwrap_err();
        let chain: Vec<String> = e.chain().map(|e| e.to_string()).collect();
        assert!(
            chain[1].starts_with("no surrogate.yaml in ") && chain[1].contains("run `assay fit "),
            "{chain:?}"
        );
        assert!(read_if_exists::<PosteriorBody>(&c, POSTERIOR_FILE)
            .unwrap()
            .is_none());
    }

    #[test]
    fn posterior_draws_are_thinned_rows_and_parameters_in_study_order() {
        let tmp = tempfile::tempdir().unwrap();
        let c = campaign(tmp.path());
        std::fs::create_dir_all(&c.dir).unwrap();
        // Columns in another order than the study's parameters.
        let mut text = String::from("chain,draw,b,a,log_posterior\n");
        for i in 0..3000 {
            text.push_str(&format!(
                "{},{},{},{},-1\n",
                i / 1500,
                i % 1500,
                1.0 + i as f64 / 3000.0,
                i
            ));
        }
        std::fs::write(c.path(SAMPLES_FILE), text).unwrap();
        let d = posterior_draws(&c).unwrap();
        // 3000 draws thinned to at most CHECK_DRAWS = 2000: every second one.
        assert_eq!(d.rows.len(), 1500);
        assert_eq!(d.theta[1], vec![2.0, 1.0 + 2.0 / 3000.0]);
        assert_eq!(d.samples.n_draws(), 3000);
    }

    #[test]
    fn malformed_samples_are_bad_input_naming_file_and_line() {
        let tmp = tempfile::tempdir().unwrap();
        let c = campaign(tmp.path());
        std::fs::create_dir_all(&c.dir).unwrap();
        std::fs::write(
            c.path(SAMPLES_FILE),
            "chain,draw,a,log_posterior\n0,0,1,-1\n",
        )
        .unwrap();
        let e = posterior_draws(&c).err().unwrap();
        assert!(is_bad_input(&e));
        assert!(
            e.to_string()
                .ends_with("posterior-samples.csv has no column `b`: run `assay calibrate` again"),
            "{e}"
        );
        std::fs::write(c.path(SAMPLES_FILE), "chain,draw,a,b\n0,0,1,x\n").unwrap();
        let e = posterior_draws(&c).err().unwrap();
        assert!(is_bad_input(&e));
        assert!(
            e.to_string()
                .ends_with("posterior-samples.csv:line 2: `x` is not a number"),
            "{e}"
        );
    }
}
