//! Model discrepancy (Kennedy & O'Hagan 2001): a biased curve calibrated with and without
//! it, and the study keys. (The likelihood against a dense normal density is in
//! `tests/likelihood_woodbury.rs`; the posterior against the closed-form linear-Gaussian
//! posterior with a known noise-plus-discrepancy covariance in
//! `tests/calibrate_linear_gaussian.rs`.)

use assay::calibrate::{
    sample, summarize, Emulator, ExperimentLikelihood, LogPosterior, SamplerParams,
};
use assay::progress::Silent;
use std::sync::atomic::AtomicBool;

/// Convergence threshold recommended by Vehtari et al. (2021).
const RHAT_MAX: f64 = 1.01;

fn lcg(h: &mut u64) -> f64 {
    *h = h
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    (*h >> 11) as f64 / (1u64 << 53) as f64
}

/// True compliance of the biased-curve study.
const K_TRUE: f64 = 1.0;
/// Measurement sd of the biased-curve study (known).
const BIAS_SIGMA: f64 = 0.01;

/// The simulator of the biased-curve study in closed form: a tip-loaded cantilever's
/// deflection shape y = k x² (3 − x) / 2 (Euler–Bernoulli, unit length), k a compliance.
struct Cantilever {
    xs: Vec<f64>,
}

impl Emulator for Cantilever {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let m = self
            .xs
            .iter()
            .map(|x| theta[0] * x * x * (3.0 - x) / 2.0)
            .collect();
        (m, vec![0.0; self.xs.len()])
    }
}

/// Calibrate the biased curve through a parsed study, with or without
/// `calibration.discrepancy` (default priors); the posterior summary and the
/// discrepancy's labels.
fn calibrate_biased(discrepancy: bool) -> assay::calibrate::PosteriorSummary {
    // Invented data: the true curve plus a systematic bias 0.06 sin(πx) that the
    // simulator cannot produce, plus noise of sd BIAS_SIGMA (fixed pseudo-random draws).
    let mut h = 3u64;
    let mut data = String::from("x,y\n");
    for i in 1..=12 {
        let x = i as f64 / 12.0;
        let u1 = lcg(&mut h).max(1e-12);
        let u2 = lcg(&mut h);
        let z = (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos();
        let y = K_TRUE * x * x * (3.0 - x) / 2.0
            + 0.06 * (std::f64::consts::PI * x).sin()
            + BIAS_SIGMA * z;
        data.push_str(&format!("{x},{y}\n"));
    }
    let text = format!(
        "name: biased\nparameters:\n  - {{name: k, range: [0.5, 2.0]}}\nsimulator:\n  command: [sim]\n  output: {{file: o.csv, x: x, y: [y]}}\nexperiments:\n  - {{name: bend, data: d.csv, noise: {{sd: {BIAS_SIGMA}}}}}\n{}",
        if discrepancy { "calibration: {discrepancy: {}}\n" } else { "" }
    );
    let read = |_: &std::path::Path| Ok(data.clone());
    let study =
        assay::study::parse(&text, "s.yaml".as_ref(), ".".as_ref(), &read).expect("valid study");
    let e = &study.experiments[0];
    let targets = e.data.targets(1);
    let em = Cantilever {
        xs: targets.iter().map(|t| t.x.unwrap()).collect(),
    };
    let mut lik = ExperimentLikelihood::new(e, &targets);
    if let Some(d) = assay::calibrate::discrepancy_of(&study, e) {
        lik = lik.with_discrepancy(d);
    }
    let post = LogPosterior::new(study.parameters.clone(), vec![(&em as &dyn Emulator, lik)]);
    assert_eq!(post.dim(), if discrepancy { 3 } else { 1 });
    let chains = sample(
        &post,
        &SamplerParams::metropolis(4, 4000, 20000, 5),
        &AtomicBool::new(false),
        &Silent,
    );
    summarize(&["k".into()], &[], &chains).with_discrepancy(&post, &chains)
}

/// A curve with a systematic bias (Brynjarsdóttir & O'Hagan 2014, §2–3, show the same
/// effect on their simple machine; sections and their content from memory): without a
/// discrepancy the posterior of k is narrow and excludes the true value; with one
/// (default weak priors) it is at least three times wider and its central 95 % interval
/// holds the true value. The discrepancy's sd and length-scale are sampled and reported.
#[test]
fn a_biased_curve_gets_a_wider_honest_posterior_with_discrepancy() {
    let without = calibrate_biased(false);
    let with = calibrate_biased(true);
    let (a, b) = (without.parameters[0], with.parameters[0]);
    assert!(
        K_TRUE < a.q025 || K_TRUE > a.q975,
        "without discrepancy the bias should push the 95 % interval [{}, {}] off the truth {K_TRUE}",
        a.q025,
        a.q975
    );
    assert!(
        b.q025 < K_TRUE && K_TRUE < b.q975,
        "with discrepancy the 95 % interval [{}, {}] should hold the truth {K_TRUE}",
        b.q025,
        b.q975
    );
    assert!(b.sd > 3.0 * a.sd, "sd with {} vs without {}", b.sd, a.sd);
    for d in [&without.diagnostics[0], &with.diagnostics[0]] {
        assert!(d.rhat < RHAT_MAX, "{d:?}");
    }
    assert!(without.discrepancy.is_empty());
    let (_, _, d) = &with.discrepancy[0];
    assert_eq!(d.kernel, "squared-exponential");
    let sd = d.sd.posterior.expect("sampled sd");
    let ell = d
        .length_scale
        .as_ref()
        .and_then(|l| l.posterior)
        .expect("sampled length-scale");
    assert!(sd.mean > 0.0 && ell.mean > 0.0);
    assert!(d.sd.prior.starts_with("half_normal"), "{}", d.sd.prior);
}

/// Parse a one-experiment study with `calibration:` block `calibration` and outputs
/// `output` (`x: x, ` or nothing); the errors as `line: key: message`.
fn study_errors(output: &str, calibration: &str) -> Vec<String> {
    let text = format!(
        "name: t\nparameters:\n  - {{name: a, range: [0, 1]}}\nsimulator:\n  command: [sim]\n  output: {{file: o.csv, {output}y: [y]}}\nexperiments:\n  - {{name: e, data: d.csv, noise: {{sd: 0.1}}}}\ncalibration:\n{calibration}"
    );
    let read = |_: &std::path::Path| Ok("x,y\n0,1.5\n1,2.0\n".to_string());
    match assay::study::parse(&text, "s.yaml".as_ref(), ".".as_ref(), &read) {
        Ok(_) => Vec::new(),
        Err(e) => {
            e.0.iter()
                .map(|e| format!("{}: {}: {}", e.line.unwrap_or(0), e.key, e.message))
                .collect()
        }
    }
}

#[test]
fn discrepancy_settings_parse_in_each_form() {
    for block in [
        "  discrepancy: {}\n",
        "  discrepancy:\n    kernel: matern52\n    sd: {fixed: 0.2}\n    length_scale: {fixed: 0.5}\n",
        "  discrepancy:\n    sd: {half_normal: {scale: 0.1}}\n    length_scale: {lognormal: {mu: -1, sigma: 0.5}}\n    experiments: [e]\n",
        "  discrepancy: {hyperparameters: map}\n",
        "  discrepancy: {hyperparameters: sampled}\n",
        "  discrepancy: {sd: {fixed: 0.2}, hyperparameters: map}\n",
        // At the mode the hyperparameters are fixed while θ is sampled: NUTS has its
        // gradient.
        "  sampler: nuts\n  discrepancy: {hyperparameters: map}\n",
    ] {
        assert_eq!(study_errors("x: x, ", block), Vec::<String>::new(), "{block}");
    }
    assert_eq!(
        study_errors("", "  discrepancy: {sd: {fixed: 0.2}}\n"),
        Vec::<String>::new()
    );
}

/// One test per invariant, with the exact message and line.
#[test]
fn discrepancy_settings_are_checked_one_invariant_at_a_time() {
    let cases = [
        (
            "x: x, ",
            "  discrepancy:\n    sd: {fixed: 0}\n",
            "11: calibration.discrepancy.sd.fixed: discrepancy sd 0 must be a finite number > 0",
        ),
        (
            "x: x, ",
            "  discrepancy:\n    sd: {half_normal: {scale: -1}}\n",
            "11: calibration.discrepancy.sd.half_normal.scale: half-normal scale -1 must be a finite number > 0",
        ),
        (
            "x: x, ",
            "  discrepancy:\n    length_scale: {fixed: -0.5}\n",
            "11: calibration.discrepancy.length_scale.fixed: discrepancy length_scale -0.5 must be a finite number > 0",
        ),
        (
            "x: x, ",
            "  discrepancy:\n    length_scale: {lognormal: {mu: 0, sigma: 0}}\n",
            "11: calibration.discrepancy.length_scale.lognormal: lognormal mu 0 must be finite and sigma 0 a finite number > 0",
        ),
        (
            "",
            "  discrepancy:\n    length_scale: {fixed: 0.5}\n",
            "11: calibration.discrepancy.length_scale: length_scale needs curve outputs (`simulator.output.x`) or `controls`; with scalar outputs and no controls the discrepancy is an independent offset per output quantity",
        ),
        (
            "x: x, ",
            "  discrepancy:\n    experiments: [e, f]\n",
            "11: calibration.discrepancy.experiments[1]: no experiment `f` (experiments: e)",
        ),
        (
            "x: x, ",
            "  discrepancy:\n    experiments: []\n",
            "11: calibration.discrepancy.experiments: name at least one experiment (or leave the key out for every experiment)",
        ),
        (
            "x: x, ",
            "  discrepancy:\n    sd: {fixed: 0.2}\n    length_scale: {fixed: 0.5}\n    hyperparameters: map\n",
            "13: calibration.discrepancy.hyperparameters: `map` needs a hyperparameter to estimate, but `sd` and `length_scale` are both fixed: give one of them a prior or leave `hyperparameters` out",
        ),
        (
            "",
            "  discrepancy:\n    sd: {fixed: 0.2}\n    hyperparameters: map\n",
            "12: calibration.discrepancy.hyperparameters: `map` needs a hyperparameter to estimate, but `sd` is fixed and scalar outputs have no length-scale: give `sd` a prior (`{half_normal: {scale: s}}`) or leave `hyperparameters` out",
        ),
    ];
    for (output, block, want) in cases {
        assert_eq!(
            study_errors(output, block),
            vec![want.to_string()],
            "{block}"
        );
    }
    // Unknown keys and forms are refused by the reader, with the line.
    let e = study_errors("x: x, ", "  discrepancy:\n    variance: 1\n");
    assert_eq!(e.len(), 1);
    assert!(e[0].starts_with("11: calibration.discrepancy"), "{e:?}");
    assert!(e[0].contains("unknown"), "{e:?}");
    assert_eq!(
        study_errors("x: x, ", "  discrepancy:\n    hyperparameters: mode\n"),
        ["11: calibration.discrepancy.hyperparameters: unknown variant `mode`, expected `sampled` or `map`"]
    );
    assert_eq!(
        study_errors("x: x, ", "  discrepancy:\n    sd: {normal: 1}\n"),
        ["11: calibration.discrepancy: unknown sd form `normal`; expected `{fixed: v}` or `{half_normal: {scale: s}}`"]
    );
}
