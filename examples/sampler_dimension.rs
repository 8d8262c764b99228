//! Benchmark helper (not a test): how the adaptive Metropolis and the No-U-Turn samplers
//! scale with the number of parameters, on a correlated Gaussian posterior.
//!
//! For d = 2, 4, 8, 16: an exact linear emulator y = Aθ at 2d outputs, A with entries
//! from a fixed pseudo-random stream (invented), noise sd 0.1, normal priors N(0, 1) on
//! ranges of ±30 sds, invented data at θ = 0.3·(1, −1, 1, …) plus fixed deviations. Each
//! sampler runs 4 chains on one thread; printed per d and sampler: evaluations, seconds,
//! the smallest bulk ESS over the parameters, ESS per 1,000 evaluations and ESS per
//! second. With a surrogate an evaluation costs far more than here, so ESS per
//! evaluation is the figure that carries over (an evaluation with its gradient costs
//! about 1.3–2 times one without on the bundled studies).
//!
//! Usage: cargo run --release --example sampler_dimension

use assay::calibrate::{
    sample, summarize, Emulator, ExperimentLikelihood, LogPosterior, SamplerParams,
};
use assay::progress::Silent;
use assay::study::spec::SamplerChoice;
use assay::study::{Parameter, Prior};
use assay::surrogate::{LowRankGradient, LowRankPrediction};
use ndarray::Array2;
use rand::Rng;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Instant;

struct Linear {
    a: Array2<f64>,
}

impl Emulator for Linear {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let m = self.a.dot(&ndarray::Array1::from(theta.to_vec())).to_vec();
        let p = m.len();
        (m, vec![0.0; p])
    }

    fn predict_low_rank_with_gradient(
        &self,
        theta: &[f64],
    ) -> Option<(LowRankPrediction, LowRankGradient)> {
        let (m, v) = self.predict(theta);
        let d = theta.len();
        Some((
            LowRankPrediction::diagonal(m, v),
            LowRankGradient {
                mean: self.a.clone(),
                weight_var: Array2::zeros((0, d)),
                diag: None,
            },
        ))
    }

    fn has_gradient(&self) -> bool {
        true
    }
}

fn main() {
    println!(
        "d  sampler              evaluations  seconds  min_bulk_ess  ess_per_1000_evals  ess_per_s"
    );
    for d in [2usize, 4, 8, 16] {
        let p = 2 * d;
        let mut rng = assay::rng::stream(2026, d as u64);
        let a = Array2::from_shape_fn((p, d), |_| rng.gen::<f64>() * 2.0 - 1.0);
        let truth: Vec<f64> = (0..d)
            .map(|l| if l % 2 == 0 { 0.3 } else { -0.3 })
            .collect();
        let em = Linear { a };
        let values: Vec<Vec<f64>> = em
            .predict(&truth)
            .0
            .iter()
            .enumerate()
            .map(|(j, m)| vec![m + 0.1 * ((j as f64 * 1.7).sin())])
            .collect();
        let sds: Vec<Vec<f64>> = values.iter().map(|_| vec![0.1]).collect();
        let params: Vec<Parameter> = (0..d)
            .map(|l| Parameter {
                name: format!("t{l}"),
                unit: None,
                lo: -30.0,
                hi: 30.0,
                prior: Prior::Normal { mean: 0.0, sd: 1.0 },
            })
            .collect();
        let names: Vec<String> = params.iter().map(|p| p.name.clone()).collect();
        for (label, sp) in [
            (
                "adaptive_metropolis",
                SamplerParams::metropolis(4, 4000, 20000, 7),
            ),
            (
                "nuts",
                SamplerParams {
                    kind: SamplerChoice::Nuts,
                    ..SamplerParams::metropolis(4, 1000, 2000, 7)
                },
            ),
        ] {
            let lik = ExperimentLikelihood::from_values("lin", &values, &sds);
            let post = LogPosterior::new(params.clone(), vec![(&em as &dyn Emulator, lik)]);
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(1)
                .build()
                .expect("pool");
            let t0 = Instant::now();
            let chains = pool.install(|| sample(&post, &sp, &AtomicBool::new(false), &Silent));
            let secs = t0.elapsed().as_secs_f64();
            let s = summarize(&names, &[], &chains);
            let ess = s
                .diagnostics
                .iter()
                .map(|g| g.ess_bulk)
                .fold(f64::INFINITY, f64::min);
            let evals = post.n_evaluations.load(Ordering::Relaxed);
            println!(
                "{d:<2} {label:<20} {evals:>11}  {secs:>7.3}  {ess:>12.0}  {:>18.2}  {:>9.0}",
                1000.0 * ess / evals as f64,
                ess / secs
            );
        }
    }
}
