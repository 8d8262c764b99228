//! Benchmark helper for `benches/gp_vs_sklearn.py` (not a test): fit a GP to a CSV of
//! training data and predict a CSV of test points, printing timings as JSON.
//!
//! Usage: gp_bench TRAIN.csv TEST.csv N_STARTS PRED_POINTS.csv
//! CSVs: inputs already scaled to the unit box in the first d columns, output last.

use assay::surrogate::{fit_hyperparameters, FitParams, HyperBounds, Kernel, Trend};
use ndarray::{Array1, Array2};
use rayon::prelude::*;
use std::time::Instant;

fn read(path: &str) -> (Array2<f64>, Array1<f64>) {
    let mut r = csv::ReaderBuilder::new()
        .has_headers(false)
        .from_path(path)
        .expect("csv");
    let rows: Vec<Vec<f64>> = r
        .records()
        .map(|rec| {
            rec.expect("row")
                .iter()
                .map(|v| v.parse().expect("number"))
                .collect()
        })
        .collect();
    let d = rows[0].len() - 1;
    let x = Array2::from_shape_fn((rows.len(), d), |(i, j)| rows[i][j]);
    let y = Array1::from_iter(rows.iter().map(|r| r[d]));
    (x, y)
}

fn main() {
    let a: Vec<String> = std::env::args().collect();
    let (x, y) = read(&a[1]);
    let (xt, yt) = read(&a[2]);
    let n_starts: usize = a[3].parse().expect("starts");
    let (xp, _) = read(&a[4]);
    let mean = y.mean().expect("non-empty");
    let sd = y.std(1.0);
    let ys = y.mapv(|v| (v - mean) / sd);
    let params = FitParams {
        kernel: Kernel::Matern52,
        trend: Trend::Constant,
        bounds: HyperBounds::default(),
        hyperprior: None,
        n_starts,
        max_iters: 200,
    };
    let mut rng = assay::rng::stream(1, 0);
    let t0 = Instant::now();
    let fit = fit_hyperparameters(x.view(), ys.view(), params, "bench", &mut rng).expect("fit");
    let fit_s = t0.elapsed().as_secs_f64();
    let (m, _) = fit.gp.predict(xt.view());
    let rmse = (m
        .iter()
        .zip(yt.iter())
        .map(|(m, t)| (mean + sd * m - t).powi(2))
        .sum::<f64>()
        / yt.len() as f64)
        .sqrt();
    // Prediction with sds, in parallel chunks as `assay predict` does.
    let t1 = Instant::now();
    let chunk = 1000;
    let starts: Vec<usize> = (0..xp.nrows()).step_by(chunk).collect();
    let check: f64 = starts
        .par_iter()
        .map(|&s| {
            let e = (s + chunk).min(xp.nrows());
            let (m, v) = fit.gp.predict(xp.slice(ndarray::s![s..e, ..]));
            m.sum() + v.sum()
        })
        .sum();
    let pred_s = t1.elapsed().as_secs_f64();
    println!(
        "{{\"n\": {}, \"fit_s\": {fit_s}, \"rmse\": {rmse}, \"rmse_pct_sd\": {}, \"predict_s\": {pred_s}, \"predict_points\": {}, \"factorisations\": {}, \"check\": {check}}}",
        x.nrows(),
        100.0 * rmse / yt.std(1.0),
        xp.nrows(),
        fit.n_evaluations
    );
}
