//! Benchmark helper (not a test): log-posterior evaluations per second against a fitted
//! surrogate, single-threaded, at points spread over the parameter box.
//!
//! Usage: likelihood_bench STUDY.yaml CAMPAIGN_DIR N
//! (CAMPAIGN_DIR holds `surrogate.yaml`, e.g. runs/tensile-bar after `assay fit`.)
//! Prints one JSON line: evaluations, seconds, evaluations per second, mean log posterior.

use assay::calibrate::{Emulator, ExperimentLikelihood, LogPosterior};
use assay::record::{read_record, Record};
use assay::surrogate::SurrogateBody;
use std::path::Path;
use std::time::Instant;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    assert_eq!(
        args.len(),
        4,
        "usage: likelihood_bench STUDY.yaml CAMPAIGN_DIR N"
    );
    let study = assay::study::load(Path::new(&args[1])).expect("study");
    let rec: Record<SurrogateBody> =
        read_record(&Path::new(&args[2]).join("surrogate.yaml")).expect("surrogate.yaml");
    let fitted = rec.body.to_fitted().expect("rebuild");
    let n: usize = args[3].parse().expect("N");
    let mut experiments: Vec<(&dyn Emulator, ExperimentLikelihood)> = Vec::new();
    for (e, m) in study.experiments.iter().zip(&fitted.experiments) {
        let targets = e.data.targets(study.simulator.output.y.len());
        experiments.push((m as &dyn Emulator, ExperimentLikelihood::new(e, &targets)));
    }
    let post = LogPosterior::new(study.parameters.clone(), experiments);
    // A fixed low-discrepancy walk through the central 80 % of the box (additive
    // recurrence with the golden-ratio family), the same on every run.
    let alpha: Vec<f64> = (1..=study.parameters.len())
        .map(|j| (j as f64 * 0.618_033_988_749_895).fract() + 0.1)
        .collect();
    let points: Vec<Vec<f64>> = (0..n)
        .map(|i| {
            study
                .parameters
                .iter()
                .zip(&alpha)
                .map(|(p, a)| p.lo + (p.hi - p.lo) * (0.1 + 0.8 * ((i as f64 * a).fract())))
                .collect()
        })
        .collect();
    assay::init_blas();
    let t = Instant::now();
    let mut total = 0.0;
    for p in &points {
        total += post.ln_posterior(p);
    }
    let s = t.elapsed().as_secs_f64();
    println!(
        "{{\"evaluations\": {n}, \"seconds\": {s:.4}, \"per_second\": {:.0}, \"mean_ln_posterior\": {:.6}}}",
        n as f64 / s,
        total / n as f64
    );
}
