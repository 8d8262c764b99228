//! A two-parameter curve simulator for surrogate and gradient tests:
//! y(t) = a t + sin(w t) + 0.1 a w t² at six stations, run at a Latin hypercube of the
//! parameters' box (a closed form, so no process is started).

use assay::runs::{ExperimentRuns, RunSet};
use assay::study::Parameter;
use ndarray::Array2;

pub fn curve(theta: &[f64], t: f64) -> f64 {
    theta[0] * t + (theta[1] * t).sin() + 0.1 * theta[0] * theta[1] * t * t
}

pub const STATIONS: [f64; 6] = [0.2, 0.5, 0.9, 1.4, 2.0, 2.6];

/// An n-point Latin hypercube in the d-dimensional unit cube from stream `seed`.
pub fn inputs(n: usize, d: usize, seed: u64) -> Array2<f64> {
    let mut rng = assay::rng::stream(seed, 0);
    assay::design::latin_hypercube(n, d, &mut rng)
}

/// The curve run at `n` points of a Latin hypercube over the two parameters' ranges, as
/// the run set of one experiment `name`.
pub fn curve_runs(n: usize, seed: u64, params: &[Parameter], name: &str) -> RunSet {
    let u = inputs(n, 2, seed);
    let theta: Vec<Vec<f64>> = u
        .rows()
        .into_iter()
        .map(|r| {
            (0..2)
                .map(|l| params[l].lo + (params[l].hi - params[l].lo) * r[l])
                .collect()
        })
        .collect();
    let outputs: Vec<Vec<f64>> = theta
        .iter()
        .map(|t| STATIONS.iter().map(|s| curve(t, *s)).collect())
        .collect();
    RunSet {
        experiments: vec![ExperimentRuns {
            experiment: name.into(),
            point_ids: (1..=n).map(|i| format!("p{i:04}")).collect(),
            inputs: theta,
            outputs,
            value_names: STATIONS.iter().map(|s| format!("y@{s}")).collect(),
            record_sha256: vec![String::new(); n],
            output_sha256: vec![None; n],
        }],
    }
}

/// GPs at fixed hyperparameters fitted to a smooth function of 14 points in the 3-D unit
/// box, one per kernel and trend: the cases of the prediction-gradient tests.
pub fn gradient_test_gps() -> Vec<(
    assay::surrogate::Kernel,
    assay::surrogate::Trend,
    assay::surrogate::Gp,
)> {
    use assay::surrogate::{Gp, Hyper, Kernel, Trend};
    let x = inputs(14, 3, 5);
    let y = ndarray::Array1::from_iter(
        x.rows()
            .into_iter()
            .map(|r| (3.0 * r[0]).sin() + r[1] * r[2] + 0.5 * r[2]),
    );
    let hyper = Hyper {
        ln_signal_var: 0.3,
        ln_length_scales: vec![0.4f64.ln(), 0.7f64.ln(), 0.9f64.ln()],
        ln_nugget: 1e-6f64.ln(),
    };
    let mut out = Vec::new();
    for kernel in [
        Kernel::Matern52,
        Kernel::Matern32,
        Kernel::SquaredExponential,
    ] {
        for trend in [Trend::Zero, Trend::Constant, Trend::Linear] {
            let gp = Gp::fit(x.view(), y.view(), kernel, trend, hyper.clone()).unwrap();
            out.push((kernel, trend, gp));
        }
    }
    out
}
