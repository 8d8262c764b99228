//! The numbers behind the report's plots, from typed records: pure functions.

use crate::calibrate::{discrepancy_sd_draws, field_emulator, Emulator, PosteriorBody, Samples};
use crate::check::DrawnVariances;
use crate::study::{Experiment, Noise, Study};
use crate::surrogate::{ExperimentModel, FittedSurrogate};

/// Leave-one-out predictions of one output value at the training runs.
#[derive(Debug, Clone, PartialEq)]
pub struct LooOutput {
    pub name: String,
    pub observed: Vec<f64>,
    pub mean: Vec<f64>,
    pub sd: Vec<f64>,
}

/// Leave-one-out predictions of every output value of one experiment.
pub fn loo_of(model: &ExperimentModel) -> Vec<LooOutput> {
    model
        .leave_one_out()
        .into_iter()
        .zip(&model.outputs)
        .map(|((observed, mean, sd), o)| LooOutput {
            name: o.name.clone(),
            observed,
            mean,
            sd,
        })
        .collect()
}

/// The posterior predictive of one output value (a quantity at one station).
#[derive(Debug, Clone, PartialEq)]
pub struct BandPoint {
    /// The station (curve x), or `None` for a scalar output.
    pub x: Option<f64>,
    /// E(μ(θ)) over the posterior draws.
    pub mean: f64,
    /// √(E(s²(θ)) + Var(μ(θ))): surrogate and parameter uncertainty.
    pub sd_model: f64,
    /// √(sd_model² + E(σ²)): plus measurement noise (a new measurement's spread).
    pub sd_total: f64,
    /// The field measurements (replicates) of this output value.
    pub observed: Vec<f64>,
}

/// Posterior predictive bands of one output quantity of one experiment.
#[derive(Debug, Clone, PartialEq)]
pub struct PredictiveQuantity {
    pub experiment: String,
    pub quantity: String,
    pub points: Vec<BandPoint>,
}

/// Posterior predictive of every output value of experiment `e`, from the surrogate at
/// the given posterior draws, by the law of total variance over the draws.
///
/// # Formula
/// With surrogate mean μ(θ) and variance s²(θ) at each draw θ, and noise variance σ²:
/// mean = E(μ), sd_model² = E(s²) + Var(μ), sd_total² = sd_model² + E(σ²) + E(s_δ²)
/// (expectations over the draws; Var with divisor n). σ² is the study's known noise (per
/// output value, the mean of its replicates' sd²) or, for unknown noise, the drawn σ² of
/// each draw; s_δ the model-discrepancy sd of the value's quantity at each draw (0
/// without a discrepancy).
///
/// With controls, the bands are drawn against each control in turn: one quantity per
/// control, output quantity and station (`y against T`), its points the field
/// conditions sorted by that control.
///
/// `model` is the experiment's field emulator with `n_outputs` entries; `draws` are
/// parameter vectors; `drawn` the draws' noise sds for unknown noise and discrepancy sds
/// (same length as `draws`), else `None`. Returns `None` when the surrogate's outputs do not match the
/// field data (a stale surrogate) or there are no draws.
pub fn predictive(
    study: &Study,
    e: &Experiment,
    model: &dyn Emulator,
    n_outputs: usize,
    draws: &[Vec<f64>],
    drawn: crate::check::DrawnVariances<'_>,
) -> Option<Vec<PredictiveQuantity>> {
    let noise_sd = drawn.noise_sd;
    let targets = e.data.targets(study.simulator.output.y.len());
    if targets.len() != n_outputs || draws.is_empty() {
        return None;
    }
    let n = draws.len() as f64;
    let k = targets.len();
    let (mut s_m, mut s_m2, mut s_v) = (vec![0.0; k], vec![0.0; k], vec![0.0; k]);
    for theta in draws {
        let (m, v) = model.predict(theta);
        for i in 0..k {
            s_m[i] += m[i];
            s_m2[i] += m[i] * m[i];
            s_v[i] += v[i];
        }
    }
    let drawn_noise_var = noise_sd.map(|s| s.iter().map(|v| v * v).sum::<f64>() / s.len() as f64);
    let mut out: Vec<PredictiveQuantity> = study
        .simulator
        .output
        .y
        .iter()
        .map(|q| PredictiveQuantity {
            experiment: e.name.clone(),
            quantity: q.clone(),
            points: Vec::new(),
        })
        .collect();
    // With controls: one band per control, quantity and station, against the control.
    let conditions = e.data.conditions();
    let stations = e.data.stations();
    let n_q = study.simulator.output.y.len();
    let mut by_control: Vec<PredictiveQuantity> = Vec::new();
    for c in &study.controls {
        for q in &study.simulator.output.y {
            for x in &stations {
                let value = match x {
                    Some(x) => format!("{q}@{}", crate::study::placeholder::format_number(*x)),
                    None => q.clone(),
                };
                by_control.push(PredictiveQuantity {
                    experiment: e.name.clone(),
                    quantity: format!("{value} against {}", c.name),
                    points: Vec::new(),
                });
            }
        }
    }
    for (i, t) in targets.iter().enumerate() {
        let mean = s_m[i] / n;
        let var_m = (s_m2[i] / n - mean * mean).max(0.0);
        let sd_model = (s_v[i] / n + var_m).sqrt();
        let noise_var = match (&e.noise, drawn_noise_var) {
            (Noise::Unknown { .. }, Some(v)) => v,
            (Noise::Unknown { .. }, None) => 0.0,
            (Noise::Sd(sd), _) => sd * sd,
            (Noise::Column(_), _) => {
                let sds: Vec<f64> = t.sds.iter().flatten().copied().collect();
                sds.iter().map(|s| s * s).sum::<f64>() / sds.len().max(1) as f64
            }
        };
        let disc_var = drawn.discrepancy_sd.map_or(0.0, |d| {
            d.iter().map(|r| r[t.quantity].powi(2)).sum::<f64>() / d.len().max(1) as f64
        });
        let point = BandPoint {
            x: t.x,
            mean,
            sd_model,
            sd_total: (sd_model * sd_model + noise_var + disc_var).sqrt(),
            observed: t.values.clone(),
        };
        if study.controls.is_empty() {
            out[t.quantity].points.push(point);
        } else {
            let per_control = n_q * stations.len();
            for j in 0..study.controls.len() {
                by_control[j * per_control + t.value]
                    .points
                    .push(BandPoint {
                        x: Some(conditions[t.condition][j]),
                        ..point.clone()
                    });
            }
        }
    }
    if study.controls.is_empty() {
        Some(out)
    } else {
        for q in &mut by_control {
            q.points
                .sort_by(|a, b| a.x.partial_cmp(&b.x).unwrap_or(std::cmp::Ordering::Equal));
        }
        by_control.retain(|q| !q.points.is_empty());
        Some(by_control)
    }
}

/// The posterior predictive bands of every experiment, from at most `max_draws`
/// thinned posterior draws, with a note for each experiment whose bands cannot be made.
#[derive(Debug, Clone, Default)]
pub struct Bands {
    pub quantities: Vec<PredictiveQuantity>,
    pub notes: Vec<String>,
    /// Posterior draws the bands were computed from.
    pub n_draws: usize,
}

/// [`Bands`] of every experiment of `study`: the surrogate `fitted` (when there is one)
/// at thinned draws of `samples` (unless `samples_ok` is false: none then), with the
/// noise and discrepancy sds as calibrated (`posterior`).
pub fn predictive_bands(
    study: &Study,
    fitted: Option<&FittedSurrogate>,
    posterior: &PosteriorBody,
    samples: &Samples,
    samples_ok: bool,
    max_draws: usize,
) -> Bands {
    let mut quantities = Vec::new();
    let mut notes = Vec::new();
    let rows = samples.thinned(max_draws);
    let cols: Vec<Option<usize>> = study
        .parameters
        .iter()
        .map(|p| samples.column(&p.name))
        .collect();
    let draws: Vec<Vec<f64>> = if !samples_ok {
        Vec::new()
    } else if cols.iter().all(Option::is_some) {
        rows.iter()
            .map(|r| cols.iter().map(|j| r[j.expect("checked")]).collect())
            .collect()
    } else {
        notes.push("the samples do not have a column for every parameter of the study: run `assay calibrate` again".into());
        Vec::new()
    };
    for e in &study.experiments {
        let Some(fitted) = fitted else {
            notes.push("no surrogate.yaml: predictive bands need the surrogate".into());
            break;
        };
        let Some(model) = fitted.experiments.iter().find(|m| m.experiment == e.name) else {
            notes.push(format!("the surrogate has no experiment `{}`", e.name));
            continue;
        };
        let noise: Option<Vec<f64>> = samples
            .column(&format!("noise_sd.{}", e.name))
            .map(|j| rows.iter().map(|r| r[j]).collect());
        let disc = match discrepancy_sd_draws(study, e, posterior, samples, &rows) {
            Ok(d) => d,
            Err(err) => {
                notes.push(format!("{}: {err}", e.name));
                continue;
            }
        };
        let drawn = DrawnVariances {
            noise_sd: noise.as_deref(),
            discrepancy_sd: disc.as_deref(),
        };
        // With controls the emulator gives the field vector (one entry per target)
        // when the surrogate's outputs are the runs' values.
        let n_outputs = if study.controls.is_empty() {
            model.outputs.len()
        } else if model.outputs.len() == crate::runs::value_names(study, e).len() {
            e.data.targets(study.simulator.output.y.len()).len()
        } else {
            0
        };
        match predictive(
            study,
            e,
            &field_emulator(study, e, model),
            n_outputs,
            &draws,
            drawn,
        ) {
            Some(q) => quantities.extend(q),
            None if !draws.is_empty() => notes.push(format!(
                "{}: the surrogate's outputs do not match the field data (run `assay all` to bring the records up to date)",
                e.name
            )),
            None => {}
        }
    }
    Bands {
        quantities,
        notes,
        n_draws: draws.len(),
    }
}

/// Share of field measurements inside mean ± 2·sd_total, over every point of `qs`.
pub fn band_coverage(qs: &[PredictiveQuantity]) -> Option<f64> {
    let (mut inside, mut n) = (0usize, 0usize);
    for p in qs.iter().flat_map(|q| &q.points) {
        for y in &p.observed {
            n += 1;
            if (y - p.mean).abs() <= 2.0 * p.sd_total {
                inside += 1;
            }
        }
    }
    (n > 0).then(|| inside as f64 / n as f64)
}

/// A prior density on a grid over the range, normalised to integrate to 1 (trapezoid
/// rule), for overlaying on a marginal posterior.
pub fn prior_curve(p: &crate::study::Parameter, n: usize) -> Vec<(f64, f64)> {
    let n = n.max(2);
    let xs: Vec<f64> = (0..n)
        .map(|i| p.lo + (p.hi - p.lo) * i as f64 / (n - 1) as f64)
        .collect();
    let dens: Vec<f64> = xs
        .iter()
        .map(|&x| crate::calibrate::ln_prior(p, x).exp())
        .collect();
    let h = (p.hi - p.lo) / (n - 1) as f64;
    let area: f64 = dens.windows(2).map(|w| 0.5 * h * (w[0] + w[1])).sum();
    xs.into_iter()
        .zip(dens)
        .map(|(x, d)| (x, if area > 0.0 { d / area } else { 0.0 }))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// μ(θ) = (θ, 2θ), s²(θ) = (0.01, 0.04): a surrogate whose moments are known.
    struct Linear;
    impl Emulator for Linear {
        fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
            (vec![theta[0], 2.0 * theta[0]], vec![0.01, 0.04])
        }
    }

    fn study(noise: &str) -> Study {
        let text = format!(
            "name: t\nparameters:\n  - {{name: a, range: [0, 5]}}\nsimulator:\n  command: [sim]\n  output: {{file: o.csv, x: x, y: [y]}}\nexperiments:\n  - {{name: e, data: d.csv, noise: {noise}}}\n"
        );
        crate::study::parse_with_data(&text, "x,y,s\n0,1.5,0.2\n1,2.0,0.4\n1,9.0,0.2\n")
    }

    /// The bands of `s`'s experiment at `draws`, with the drawn noise and discrepancy
    /// sds `drawn`, against the surrogate [`Linear`] of `n_outputs` values.
    fn bands(
        s: &Study,
        n_outputs: usize,
        draws: &[Vec<f64>],
        drawn: crate::check::DrawnVariances<'_>,
    ) -> Option<Vec<PredictiveQuantity>> {
        predictive(s, &s.experiments[0], &Linear, n_outputs, draws, drawn)
    }

    #[test]
    fn predictive_bands_follow_the_law_of_total_variance() {
        use crate::check::DrawnVariances;
        // Draws θ = 1 and 3: E[μ] = (2, 4), Var[μ] = (1, 4) (divisor n), E[s²] = (0.01, 0.04).
        let draws = vec![vec![1.0], vec![3.0]];
        let s = study("{sd: 0.1}");
        let q = bands(&s, 2, &draws, DrawnVariances::default()).unwrap();
        assert_eq!(q.len(), 1);
        let p = &q[0].points;
        assert_eq!((p[0].x, p[1].x), (Some(0.0), Some(1.0)));
        assert!((p[0].mean - 2.0).abs() < 1e-12 && (p[1].mean - 4.0).abs() < 1e-12);
        assert!((p[0].sd_model - 1.01f64.sqrt()).abs() < 1e-12);
        assert!((p[1].sd_model - 4.04f64.sqrt()).abs() < 1e-12);
        assert!((p[0].sd_total - 1.02f64.sqrt()).abs() < 1e-12);
        assert_eq!(p[1].observed, vec![2.0, 9.0]);
        // Within 2·sd_total: 1.5 (|−0.5| ≤ 2.02) and 2.0 (|−2| ≤ 4.03); 9.0 is not.
        assert!((band_coverage(&q).unwrap() - 2.0 / 3.0).abs() < 1e-12);

        // A discrepancy: the mean of the drawn s_δ² (0.2² and 0.4²: 0.1) is added.
        let disc = [vec![0.2], vec![0.4]];
        let drawn = DrawnVariances {
            noise_sd: None,
            discrepancy_sd: Some(&disc),
        };
        let q = bands(&s, 2, &draws, drawn).unwrap();
        assert!((q[0].points[0].sd_total - (1.02f64 + 0.1).sqrt()).abs() < 1e-12);

        // Per-row sds: the mean of the replicates' sd² at each station.
        let s = study("{sd_column: s}");
        let q = bands(&s, 2, &draws, DrawnVariances::default()).unwrap();
        let p = &q[0].points;
        assert!((p[1].sd_total - (4.04f64 + (0.16 + 0.04) / 2.0).sqrt()).abs() < 1e-12);

        // Unknown noise: the mean of the drawn σ².
        let s = study("{unknown: {shape: 3, scale: 1}}");
        let drawn = DrawnVariances {
            noise_sd: Some(&[0.1, 0.3]),
            discrepancy_sd: None,
        };
        let q = bands(&s, 2, &draws, drawn).unwrap();
        assert!((q[0].points[0].sd_total - (1.01f64 + 0.05).sqrt()).abs() < 1e-12);

        // A surrogate with other outputs than the data (stale) gives no bands.
        assert!(bands(&s, 3, &draws, DrawnVariances::default()).is_none());
        assert!(bands(&s, 2, &[], DrawnVariances::default()).is_none());
    }

    #[test]
    fn uniform_prior_curve_is_flat_with_unit_area() {
        let p = crate::study::Parameter {
            name: "a".into(),
            unit: None,
            lo: 2.0,
            hi: 6.0,
            prior: crate::study::Prior::Uniform,
        };
        let c = prior_curve(&p, 11);
        // A uniform density on [2, 6] is 1/4 everywhere (closed form).
        assert!(c.iter().all(|(_, d)| (d - 0.25).abs() < 1e-12), "{c:?}");
    }
}
