//! The surrogate on an open test function: the Borehole function (Harper & Gupta 1983;
//! input ranges of Morris, Mitchell & Ylvisaker 1993, Technometrics 35(3), 243–255;
//! formula, ranges, issue and pages quoted from memory). Water flow through a borehole,
//! 8 inputs.

use assay::surrogate::{fit_hyperparameters, FitParams, HyperBounds, Kernel, Trend};
use ndarray::{Array1, Array2};

/// Our acceptance rule: held-out RMSE below 1 % of the output's sd, and the
/// fraction of held-out points inside the 95 % band between 0.85 and 1.
const RMSE_FRACTION_MAX: f64 = 0.01;
const COVERAGE_MIN: f64 = 0.85;

/// (low, high) of rw, r, Tu, Hu, Tl, Hl, L, Kw.
const RANGES: [(f64, f64); 8] = [
    (0.05, 0.15),
    (100.0, 50_000.0),
    (63_070.0, 115_600.0),
    (990.0, 1110.0),
    (63.1, 116.0),
    (700.0, 820.0),
    (1120.0, 1680.0),
    (9855.0, 12_045.0),
];

/// f = 2π Tu (Hu − Hl) / (ln(r/rw) [1 + 2 L Tu / (ln(r/rw) rw² Kw) + Tu/Tl]), m³/yr.
fn borehole(x: &[f64]) -> f64 {
    let [rw, r, tu, hu, tl, hl, l, kw] = [x[0], x[1], x[2], x[3], x[4], x[5], x[6], x[7]];
    let lr = (r / rw).ln();
    2.0 * std::f64::consts::PI * tu * (hu - hl)
        / (lr * (1.0 + 2.0 * l * tu / (lr * rw * rw * kw) + tu / tl))
}

fn scaled(u: &Array2<f64>) -> Vec<Vec<f64>> {
    u.rows()
        .into_iter()
        .map(|row| {
            row.iter()
                .zip(RANGES)
                .map(|(v, (lo, hi))| lo + (hi - lo) * v)
                .collect()
        })
        .collect()
}

#[test]
fn borehole_is_reproduced_to_one_percent_of_its_spread() {
    let mut rng = assay::rng::stream(2024, 0);
    let u_train = assay::design::latin_hypercube(200, 8, &mut rng);
    let u_test = assay::design::latin_hypercube(500, 8, &mut rng);
    let y_train: Vec<f64> = scaled(&u_train).iter().map(|x| borehole(x)).collect();
    let y_test: Vec<f64> = scaled(&u_test).iter().map(|x| borehole(x)).collect();
    let mean = y_train.iter().sum::<f64>() / 200.0;
    let sd = (y_train.iter().map(|y| (y - mean).powi(2)).sum::<f64>() / 199.0).sqrt();
    let y = Array1::from_iter(y_train.iter().map(|v| (v - mean) / sd));
    let params = FitParams {
        kernel: Kernel::Matern52,
        trend: Trend::Linear,
        bounds: HyperBounds::default(),
        hyperprior: None,
        n_starts: 4,
        max_iters: 200,
    };
    let fit = fit_hyperparameters(u_train.view(), y.view(), params, "borehole", &mut rng).unwrap();
    let (m, v) = fit.gp.predict(u_test.view());
    let mut sse = 0.0;
    let mut inside = 0;
    for i in 0..500 {
        let pred = mean + sd * m[i];
        let psd = sd * v[i].sqrt();
        sse += (pred - y_test[i]).powi(2);
        if (pred - y_test[i]).abs() <= 1.959_964 * psd {
            inside += 1;
        }
    }
    let rmse = (sse / 500.0).sqrt();
    let coverage = inside as f64 / 500.0;
    eprintln!(
        "borehole: held-out RMSE {:.4} % of sd, coverage95 {coverage}",
        100.0 * rmse / sd
    );
    assert!(
        rmse < RMSE_FRACTION_MAX * sd,
        "held-out RMSE {rmse} vs sd {sd} ({:.3} %)",
        100.0 * rmse / sd
    );
    assert!(
        (COVERAGE_MIN..=1.0).contains(&coverage),
        "coverage {coverage}"
    );
}

/// A larger training set, as the benchmarks use: 1,000 Latin-hypercube runs, one start
/// of the search. Before the objective was taken per training point, its gradient at the
/// central start (|g| ≈ 500) made the first L-BFGS step leave the region where K can be
/// factored and the search stopped after two factorisations, with a held-out RMSE of
/// 11 % of the sd. The acceptance level is our 1 % (Harper & Gupta's function, as
/// above).
#[test]
fn borehole_with_a_thousand_runs_is_fitted_not_left_at_the_start() {
    let mut rng = assay::rng::stream(7, 0);
    let u_train = assay::design::latin_hypercube(1000, 8, &mut rng);
    let u_test = assay::design::latin_hypercube(300, 8, &mut rng);
    let y_train: Vec<f64> = scaled(&u_train).iter().map(|x| borehole(x)).collect();
    let y_test: Vec<f64> = scaled(&u_test).iter().map(|x| borehole(x)).collect();
    let n = y_train.len() as f64;
    let mean = y_train.iter().sum::<f64>() / n;
    let sd = (y_train.iter().map(|y| (y - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    let y = Array1::from_iter(y_train.iter().map(|v| (v - mean) / sd));
    let params = FitParams {
        kernel: Kernel::Matern52,
        trend: Trend::Constant,
        bounds: HyperBounds::default(),
        hyperprior: None,
        n_starts: 1,
        max_iters: 200,
    };
    let fit = fit_hyperparameters(u_train.view(), y.view(), params, "borehole", &mut rng).unwrap();
    assert!(
        fit.n_evaluations > 10,
        "{} factorisations",
        fit.n_evaluations
    );
    let (m, _) = fit.gp.predict(u_test.view());
    let sse: f64 = (0..300)
        .map(|i| (mean + sd * m[i] - y_test[i]).powi(2))
        .sum();
    let rmse = (sse / 300.0).sqrt();
    assert!(
        rmse < RMSE_FRACTION_MAX * sd,
        "held-out RMSE {:.3} % of sd",
        100.0 * rmse / sd
    );
}
