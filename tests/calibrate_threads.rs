//! Reproducibility: the same seed gives the same samples bit for bit whatever the number
//! of threads (docs/methods.md, "Random streams"). Chain i draws from random stream i of
//! the seed (`src/rng.rs`), so the draws cannot depend on which thread runs which chain.
//!
//! The posterior includes an estimated noise variance, so the noise state and its
//! starting draw are covered as well as the parameters.

use assay::calibrate::{
    sample, Chain, Emulator, ExperimentLikelihood, InverseGamma, LogPosterior, SamplerParams,
};
use assay::progress::Silent;
use assay::study::spec::SamplerChoice;
use assay::study::{Parameter, Prior};
use assay::surrogate::{LowRankGradient, LowRankPrediction};
use std::sync::atomic::AtomicBool;

/// y = (θ₁ + θ₂ x) at three x values, exact.
struct Line;

impl Emulator for Line {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let m = [0.0, 1.0, 2.0]
            .iter()
            .map(|x| theta[0] + theta[1] * x)
            .collect();
        (m, vec![0.0; 3])
    }

    fn predict_low_rank_with_gradient(
        &self,
        theta: &[f64],
    ) -> Option<(LowRankPrediction, LowRankGradient)> {
        let (m, v) = self.predict(theta);
        let grad = LowRankGradient {
            mean: ndarray::array![[1.0, 0.0], [1.0, 1.0], [1.0, 2.0]],
            weight_var: ndarray::Array2::zeros((0, 2)),
            diag: None,
        };
        Some((LowRankPrediction::diagonal(m, v), grad))
    }

    fn has_gradient(&self) -> bool {
        true
    }
}

fn run(threads: usize, kind: SamplerChoice) -> Vec<Chain> {
    let parameters = vec![
        Parameter {
            name: "a".into(),
            unit: None,
            lo: -5.0,
            hi: 5.0,
            prior: Prior::Uniform,
        },
        Parameter {
            name: "b".into(),
            unit: None,
            lo: 0.0,
            hi: 4.0,
            prior: Prior::Normal { mean: 1.0, sd: 1.0 },
        },
    ];
    let values = vec![vec![0.4, 0.6], vec![1.7], vec![3.4, 3.6, 3.3]];
    let lik = ExperimentLikelihood::with_unknown_noise(
        "e",
        &values,
        InverseGamma {
            shape: 2.0,
            scale: 0.1,
        },
    );
    let em = Line;
    let post = LogPosterior::new(parameters, vec![(&em as &dyn Emulator, lik)]);
    let params = SamplerParams {
        kind,
        ..SamplerParams::metropolis(4, 500, 1000, 77)
    };
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .unwrap()
        .install(|| sample(&post, &params, &AtomicBool::new(false), &Silent))
}

fn bits(rows: &[Vec<f64>]) -> Vec<Vec<u64>> {
    rows.iter()
        .map(|r| r.iter().map(|v| v.to_bits()).collect())
        .collect()
}

#[test]
fn one_thread_and_two_threads_give_identical_samples() {
    same_samples(SamplerChoice::AdaptiveMetropolis);
}

#[test]
fn one_thread_and_two_threads_give_identical_samples_with_nuts() {
    same_samples(SamplerChoice::Nuts);
}

fn same_samples(kind: SamplerChoice) {
    let one = run(1, kind);
    let two = run(2, kind);
    assert_eq!(one.len(), two.len());
    for (c1, c2) in one.iter().zip(&two) {
        assert_eq!(c1.index, c2.index);
        assert_eq!(c1.theta.len(), 1000);
        assert_eq!(c1.noise_var[0].len(), 1, "one noise variance per draw");
        assert_eq!(bits(&c1.theta), bits(&c2.theta), "chain {}", c1.index);
        assert_eq!(
            bits(&c1.noise_var),
            bits(&c2.noise_var),
            "chain {}",
            c1.index
        );
        assert_eq!(
            bits(std::slice::from_ref(&c1.ln_posterior)),
            bits(std::slice::from_ref(&c2.ln_posterior)),
            "chain {}",
            c1.index
        );
        assert_eq!(c1.step_scale.to_bits(), c2.step_scale.to_bits());
    }
    // The chains differ from each other (distinct streams), or the test proves little.
    assert_ne!(bits(&one[0].theta), bits(&one[1].theta));
}
