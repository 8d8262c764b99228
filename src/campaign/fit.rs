//! The fit step: fit the surrogate to the finished runs and write `surrogate.yaml`.

use super::{Event, Session};
use crate::audit;
use crate::layout::{load_design, Campaign, DESIGN_FILE, SURROGATE_FILE};
use crate::record::{write_record, Record};
use crate::runs;
use crate::surrogate::{fit_surrogate, FittedSurrogate, SurrogateBody};
use anyhow::Result;
use std::collections::BTreeMap;

/// Fit the surrogate to the finished runs, write `surrogate.yaml` and say so; returns it with
/// the number of design points left out per experiment (no finished run).
///
/// # Errors
/// A missing design, unreadable runs, a failed fit, or I/O.
pub fn fit_stage(
    c: &Campaign,
    s: &Session<'_>,
) -> Result<(FittedSurrogate, BTreeMap<String, usize>)> {
    let design = load_design(c)?;
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.input_named(DESIGN_FILE, &c.path(DESIGN_FILE))?;
    let (set, _) = runs::load_runs(&c.study, &design, &c.dir)?;
    let mut excluded = BTreeMap::new();
    for er in &set.experiments {
        excluded.insert(
            er.experiment.clone(),
            design.points.len() - er.point_ids.len(),
        );
        for ((id, h), out) in er
            .point_ids
            .iter()
            .zip(&er.record_sha256)
            .zip(&er.output_sha256)
        {
            let dir = format!("runs/{id}/{}", er.experiment);
            clock.input_hash(&format!("{dir}/run.yaml"), h);
            if let Some(out) = out {
                let file = &c.study.simulator.output.file;
                clock.input_hash(&format!("{dir}/{file}"), out);
            }
        }
    }
    clock.study_parts(audit::surrogate_parts(&c.study));
    let seed = c.study.surrogate.seed;
    clock.seed("surrogate", seed);
    let fitted = fit_surrogate(&set, &c.study.design_variables(), c.study.surrogate, seed)?;
    let mut body = SurrogateBody::from_fitted(&fitted, &c.study.design_variable_names());
    for e in &mut body.experiments {
        e.n_excluded = excluded.get(&e.name).copied().unwrap_or(0);
    }
    write_record(
        &c.path(SURROGATE_FILE),
        &Record::new("surrogate", clock.finish(), body),
    )?;
    s.say(Event::Fitted {
        surrogate: &fitted,
        excluded: &excluded,
        basis_warnings: &basis_warnings(c, &fitted),
    });
    Ok((fitted, excluded))
}

/// √D_j above this share of the measurement noise sd draws a warning: the basis then
/// adds at least 25 % to the variance the likelihood sees at that value (our choice).
pub const DISCARDED_SD_WARN: f64 = 0.5;

/// Warnings when a basis leaves out variance comparable to the measurement noise: the
/// largest ratio √D_j / σ_j over the output values of each experiment with known noise
/// (`noise.sd` or an sd column; the smallest sd of the value's replicates).
pub fn basis_warnings(c: &Campaign, s: &FittedSurrogate) -> Vec<String> {
    use crate::study::Noise;
    let mut out = Vec::new();
    for e in &c.study.experiments {
        let Some(m) = s.experiments.iter().find(|m| m.experiment == e.name) else {
            continue;
        };
        let targets = e.data.targets(c.study.simulator.output.y.len());
        if targets.len() != m.basis.n_values() {
            continue;
        }
        let mut worst: Option<(f64, usize, f64)> = None;
        for (j, t) in targets.iter().enumerate() {
            let sd = match &e.noise {
                Noise::Sd(v) => Some(*v),
                Noise::Column(_) => t.sds.iter().flatten().copied().reduce(f64::min),
                Noise::Unknown { .. } => None,
            };
            let Some(sd) = sd.filter(|v| *v > 0.0) else {
                continue;
            };
            let ratio = m.basis.discarded[j].sqrt() / sd;
            if worst.is_none_or(|(r, _, _)| ratio > r) {
                worst = Some((ratio, j, sd));
            }
        }
        if let Some((ratio, j, sd)) = worst.filter(|(r, _, _)| *r > DISCARDED_SD_WARN) {
            out.push(format!(
                "{}: the principal components leave out variance comparable to the measurement noise (at {}: sd {:.3e} left out vs noise sd {sd}, ratio {ratio:.2} > {DISCARDED_SD_WARN}); this blurs the parameters those components depend on: raise `surrogate.variance_kept` (now {})",
                e.name,
                m.outputs[j].name,
                m.basis.discarded[j].sqrt(),
                m.basis.variance_kept
            ));
        }
    }
    out
}
