//! Model discrepancy: what the simulator misses even at the true constants.
//!
//! The field measurements are modelled as y(x) = η(x, θ) + δ(x) + ε (Kennedy & O'Hagan
//! 2001, eq. 5 there *(equation number from memory)*), η the simulator (through its
//! surrogate), ε the measurement noise and δ a zero-mean Gaussian process, independent
//! of η and ε, with covariance
//!
//!   cov(δ(x), δ(x′)) = s² ρ(|x − x′| / ℓ)
//!
//! over the curve's x, ρ the squared-exponential or Matérn correlation of the surrogate's
//! kernels ([`Kernel`]). Each output quantity of an experiment has its own δ, and the δ
//! of different quantities and experiments are independent. A quantity with a single x
//! value (every scalar output) has no length-scale: its δ is one offset N(0, s²), shared
//! by the replicates of that value (it does not average out over replicates, unlike the
//! noise).
//!
//! The sd s and the length-scale ℓ are either fixed or sampled with the parameters on
//! z = ln s, z = ln ℓ, with weak priors (defaults, see [`Discrepancy::new`]): s
//! half-normal, ℓ lognormal.
//!
//! # References
//! Kennedy, M. C. & O'Hagan, A. (2001), Bayesian calibration of computer models, JRSS B
//! 63(3), 425–464. Brynjarsdóttir, J. & O'Hagan, A. (2014), Learning about physical
//! parameters: the importance of model discrepancy, Inverse Problems 30(11), 114007.
//! Rasmussen & Williams (2006), §4.2 (the correlation functions).

use crate::study::spec::{DiscrepancySdSpec, LengthScaleSpec};
use crate::study::{DiscrepancyParams, Experiment, Study, Target};
use crate::surrogate::Kernel;
use ndarray::Array2;
use rand::Rng;
use rand_distr::StandardNormal;

/// A discrepancy hyperparameter: fixed, or sampled with a prior.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Hyper {
    Fixed(f64),
    /// p(v) ∝ exp(−v²/(2τ²)), v > 0, τ = `scale`.
    HalfNormal {
        scale: f64,
    },
    /// ln v ~ N(mu, sigma²).
    LogNormal {
        mu: f64,
        sigma: f64,
    },
}

impl Hyper {
    pub fn is_sampled(&self) -> bool {
        !matches!(self, Hyper::Fixed(_))
    }

    /// ln p(v) on the constrained scale, up to a constant; −∞ for v ≤ 0. Zero for a
    /// fixed value (not part of the state).
    ///
    /// # Formula
    /// half-normal: −v²/(2τ²); lognormal: −ln v − (ln v − μ)²/(2σ²).
    pub fn ln_prior(&self, v: f64) -> f64 {
        if !(v > 0.0 && v.is_finite()) {
            return f64::NEG_INFINITY;
        }
        match *self {
            Hyper::Fixed(_) => 0.0,
            Hyper::HalfNormal { scale } => -0.5 * (v / scale).powi(2),
            Hyper::LogNormal { mu, sigma } => -v.ln() - 0.5 * ((v.ln() - mu) / sigma).powi(2),
        }
    }

    /// A draw from the prior (the fixed value when fixed).
    pub fn draw<R: Rng + ?Sized>(&self, rng: &mut R) -> f64 {
        let e: f64 = rng.sample(StandardNormal);
        match *self {
            Hyper::Fixed(v) => v,
            // Zero has probability zero; keep the draw strictly positive anyway.
            Hyper::HalfNormal { scale } => (scale * e.abs()).max(f64::MIN_POSITIVE),
            Hyper::LogNormal { mu, sigma } => (mu + sigma * e).exp(),
        }
    }

    /// The prior's quantile at probability `p` in (0, 1) (the fixed value when fixed).
    ///
    /// # Formula
    /// half-normal: τ Φ⁻¹((1 + p)/2); lognormal: exp(μ + σ Φ⁻¹(p)).
    pub fn quantile(&self, p: f64) -> f64 {
        use statrs::distribution::{ContinuousCDF, Normal};
        let z = |q: f64| {
            Normal::new(0.0, 1.0)
                .expect("the standard normal")
                .inverse_cdf(q)
        };
        match *self {
            Hyper::Fixed(v) => v,
            Hyper::HalfNormal { scale } => scale * z(0.5 * (1.0 + p)),
            Hyper::LogNormal { mu, sigma } => (mu + sigma * z(p)).exp(),
        }
    }

    /// The prior's natural scale, around which a search for its mode is boxed: the
    /// half-normal scale τ, the lognormal median e^μ, the fixed value itself.
    pub fn reference(&self) -> f64 {
        match *self {
            Hyper::Fixed(v) => v,
            Hyper::HalfNormal { scale } => scale,
            Hyper::LogNormal { mu, .. } => mu.exp(),
        }
    }

    /// How the record names it: `fixed`, `half_normal(scale 0.1)`, `lognormal(mu -1, sigma 1)`.
    pub fn describe(&self) -> String {
        match *self {
            Hyper::Fixed(_) => "fixed".into(),
            Hyper::HalfNormal { scale } => format!("half_normal(scale {scale})"),
            Hyper::LogNormal { mu, sigma } => format!("lognormal(mu {mu}, sigma {sigma})"),
        }
    }
}

/// Which hyperparameter of a quantity's discrepancy.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HyperKind {
    Sd,
    LengthScale,
}

impl HyperKind {
    /// Column prefix in `posterior-samples.csv`.
    pub fn column_prefix(self) -> &'static str {
        match self {
            HyperKind::Sd => "discrepancy_sd",
            HyperKind::LengthScale => "discrepancy_length_scale",
        }
    }
}

/// The discrepancy of one output quantity of an experiment.
#[derive(Debug, Clone, PartialEq)]
pub struct DiscrepancyBlock {
    pub quantity: String,
    /// Positions of the quantity's values in the experiment's output vector.
    pub index: Vec<usize>,
    /// Their x, when the quantity has at least two distinct x values (with controls the
    /// same x recurs at every field condition: δ is a function of x alone).
    pub x: Option<Vec<f64>>,
    pub sd: Hyper,
    /// `None` without x (or, with controls, without two distinct positions).
    pub length_scale: Option<Hyper>,
    /// With controls: each value's position in the unit box of the controls (then of x
    /// for curves), used instead of `x`: δ is then a function of the test conditions.
    pub at: Option<Vec<Vec<f64>>>,
}

/// The discrepancy term of one experiment.
#[derive(Debug, Clone, PartialEq)]
pub struct Discrepancy {
    pub kernel: Kernel,
    pub blocks: Vec<DiscrepancyBlock>,
}

/// Share of the largest measured magnitude used as the default half-normal scale of
/// the discrepancy sd: a priori δ is below about 20 % of the measured values with
/// probability 0.95 (1.96 τ). A weak prior by intent (common practice: scale the prior
/// to the data's magnitude); give your own when you know the model's error better.
pub const DEFAULT_SD_SHARE: f64 = 0.1;
/// sigma of the default lognormal prior of the length-scale: its central 95 % spans a
/// factor e^{±1.96} ≈ 7 either side of the median (half the x span).
pub const DEFAULT_LENGTH_SIGMA: f64 = 1.0;

impl Discrepancy {
    /// The discrepancy of an experiment whose output vector is `targets` (quantity-major,
    /// [`crate::study::FieldData::targets`]), with quantity names `quantities`.
    ///
    /// Defaults for hyperparameters the study leaves out:
    /// - sd: half-normal with scale τ = [`DEFAULT_SD_SHARE`] × max_j |ȳ_j| over the
    ///   quantity's values (1 if they are all zero);
    /// - length-scale: lognormal with median half the span of the quantity's x values
    ///   and sigma [`DEFAULT_LENGTH_SIGMA`].
    pub fn new(params: &DiscrepancyParams, quantities: &[String], targets: &[Target]) -> Self {
        let blocks = quantities
            .iter()
            .enumerate()
            .filter_map(|(q, name)| {
                let index: Vec<usize> = (0..targets.len())
                    .filter(|&j| targets[j].quantity == q)
                    .collect();
                if index.is_empty() {
                    return None;
                }
                let xs: Vec<f64> = index.iter().filter_map(|&j| targets[j].x).collect();
                // With controls one x can recur (once per field condition): a
                // length-scale needs two distinct x values.
                let mut distinct = xs.clone();
                distinct.sort_by(f64::total_cmp);
                distinct.dedup();
                let x = (xs.len() == index.len() && distinct.len() >= 2).then_some(xs);
                let sd = match params.sd {
                    Some(DiscrepancySdSpec::Fixed(v)) => Hyper::Fixed(v),
                    Some(DiscrepancySdSpec::HalfNormal { scale }) => Hyper::HalfNormal { scale },
                    None => {
                        let big = index
                            .iter()
                            .map(|&j| {
                                let v = &targets[j].values;
                                (v.iter().sum::<f64>() / v.len() as f64).abs()
                            })
                            .fold(0.0, f64::max);
                        Hyper::HalfNormal {
                            scale: if big > 0.0 {
                                DEFAULT_SD_SHARE * big
                            } else {
                                1.0
                            },
                        }
                    }
                };
                let length_scale = x.as_ref().map(|xs| match params.length_scale {
                    Some(LengthScaleSpec::Fixed(v)) => Hyper::Fixed(v),
                    Some(LengthScaleSpec::Lognormal { mu, sigma }) => {
                        Hyper::LogNormal { mu, sigma }
                    }
                    None => {
                        let lo = xs.iter().copied().fold(f64::INFINITY, f64::min);
                        let hi = xs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                        Hyper::LogNormal {
                            mu: (0.5 * (hi - lo)).ln(),
                            sigma: DEFAULT_LENGTH_SIGMA,
                        }
                    }
                });
                Some(DiscrepancyBlock {
                    quantity: name.clone(),
                    index,
                    x,
                    sd,
                    length_scale,
                    at: None,
                })
            })
            .collect();
        Self {
            kernel: params.kernel.into(),
            blocks,
        }
    }

    /// Make δ a function of the test conditions (`controls`): each value's position is
    /// its condition's control values scaled to the unit box of `controls`, followed for
    /// curves by its x scaled to the span of the data's x. The correlation is
    /// ρ(‖a − b‖ / ℓ) (Euclidean distance in that box, one length-scale). A block with
    /// at least two distinct positions gets a length-scale: the study's
    /// `length_scale` (then in unit-box units), else lognormal with median 0.5 (half the
    /// box) and sigma [`DEFAULT_LENGTH_SIGMA`].
    pub fn over_controls(
        mut self,
        params: &DiscrepancyParams,
        targets: &[Target],
        conditions: &[Vec<f64>],
        controls: &[crate::study::Parameter],
    ) -> Self {
        let xs: Vec<f64> = targets.iter().filter_map(|t| t.x).collect();
        let x_lo = xs.iter().copied().fold(f64::INFINITY, f64::min);
        let x_hi = xs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        for b in &mut self.blocks {
            let at: Vec<Vec<f64>> = b
                .index
                .iter()
                .map(|&j| {
                    let t = &targets[j];
                    let mut v: Vec<f64> = conditions[t.condition]
                        .iter()
                        .zip(controls)
                        .map(|(c, p)| (c - p.lo) / (p.hi - p.lo))
                        .collect();
                    if let Some(x) = t.x {
                        if x_hi > x_lo {
                            v.push((x - x_lo) / (x_hi - x_lo));
                        }
                    }
                    v
                })
                .collect();
            let mut distinct = at.clone();
            distinct.sort_by(|a, b| a.partial_cmp(b).unwrap_or(std::cmp::Ordering::Equal));
            distinct.dedup();
            if distinct.len() < 2 {
                continue;
            }
            b.x = None;
            b.length_scale = Some(match params.length_scale {
                Some(LengthScaleSpec::Fixed(v)) => Hyper::Fixed(v),
                Some(LengthScaleSpec::Lognormal { mu, sigma }) => Hyper::LogNormal { mu, sigma },
                None => Hyper::LogNormal {
                    mu: 0.5f64.ln(),
                    sigma: DEFAULT_LENGTH_SIGMA,
                },
            });
            b.at = Some(at);
        }
        self
    }

    /// The hyperparameters in state order: for each block its sd, then its
    /// length-scale; `(block, kind, hyper)`, fixed ones included.
    pub fn hypers(&self) -> Vec<(usize, HyperKind, Hyper)> {
        let mut out = Vec::new();
        for (b, blk) in self.blocks.iter().enumerate() {
            out.push((b, HyperKind::Sd, blk.sd));
            if let Some(l) = blk.length_scale {
                out.push((b, HyperKind::LengthScale, l));
            }
        }
        out
    }

    /// Number of sampled hyperparameters (their share of the state).
    pub fn n_sampled(&self) -> usize {
        self.hypers().iter().filter(|h| h.2.is_sampled()).count()
    }

    /// Σ ln p of the sampled hyperparameters `values` (state order).
    pub fn ln_prior(&self, values: &[f64]) -> f64 {
        self.hypers()
            .iter()
            .filter(|h| h.2.is_sampled())
            .zip(values)
            .map(|(h, v)| h.2.ln_prior(*v))
            .sum()
    }

    /// A draw of the sampled hyperparameters from their priors, in state order.
    pub fn draw<R: Rng + ?Sized>(&self, rng: &mut R) -> Vec<f64> {
        self.hypers()
            .iter()
            .filter(|h| h.2.is_sampled())
            .map(|h| h.2.draw(rng))
            .collect()
    }

    /// (sd, length-scale) of every block given the sampled `values` (state order).
    pub fn resolve(&self, values: &[f64]) -> Vec<(f64, Option<f64>)> {
        let mut it = values.iter();
        let mut take = |h: Hyper| match h {
            Hyper::Fixed(v) => v,
            _ => *it.next().expect("one value per sampled hyperparameter"),
        };
        self.blocks
            .iter()
            .map(|b| {
                let s = take(b.sd);
                let l = b.length_scale.map(&mut take);
                (s, l)
            })
            .collect()
    }

    /// The same discrepancy with every sampled hyperparameter fixed at its value in
    /// `values` (state order, as [`Self::resolve`]): what is sampled with θ once the
    /// hyperparameters have been estimated (`hyperparameters: map`).
    ///
    /// # Panics
    /// If `values` does not hold one value per sampled hyperparameter.
    pub fn fixed_at(&self, values: &[f64]) -> Self {
        assert_eq!(
            values.len(),
            self.n_sampled(),
            "one value per sampled hyperparameter"
        );
        let mut out = self.clone();
        for (b, (s, l)) in out.blocks.iter_mut().zip(self.resolve(values)) {
            b.sd = Hyper::Fixed(s);
            b.length_scale = l.map(Hyper::Fixed);
        }
        out
    }

    /// Add the discrepancy covariance at `values` to `cov` (p × p).
    ///
    /// # Formula
    /// cov[i, j] += s_q² ρ(|x_i − x_j| / ℓ_q) for values i, j of quantity q (s_q² on the
    /// diagonal without x; with controls ‖a_i − a_j‖ between the values' positions in
    /// the unit box, [`Self::over_controls`]); nothing across quantities.
    pub fn add_covariance(&self, values: &[f64], cov: &mut Array2<f64>) {
        for (b, (s, l)) in self.blocks.iter().zip(self.resolve(values)) {
            let s2 = s * s;
            for (a, &i) in b.index.iter().enumerate() {
                if let (Some(at), Some(l)) = (&b.at, l) {
                    for (c, &j) in b.index.iter().enumerate() {
                        let d2: f64 = at[a]
                            .iter()
                            .zip(&at[c])
                            .map(|(u, v)| (u - v) * (u - v))
                            .sum();
                        cov[[i, j]] += s2 * self.kernel.corr(d2.sqrt() / l);
                    }
                    continue;
                }
                match (&b.x, l) {
                    (Some(x), Some(l)) => {
                        for (c, &j) in b.index.iter().enumerate() {
                            cov[[i, j]] += s2 * self.kernel.corr((x[a] - x[c]).abs() / l);
                        }
                    }
                    _ => cov[[i, i]] += s2,
                }
            }
        }
    }
}

/// The model discrepancy of experiment `e` when the study gives it one.
pub fn discrepancy_of(study: &Study, e: &Experiment) -> Option<Discrepancy> {
    let d = study.calibration.discrepancy.as_ref()?;
    if !d.experiments.contains(&e.name) {
        return None;
    }
    let y = &study.simulator.output.y;
    let targets = e.data.targets(y.len());
    let disc = Discrepancy::new(d, y, &targets);
    Some(if study.controls.is_empty() {
        disc
    } else {
        disc.over_controls(d, &targets, &e.data.conditions(), &study.controls)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// With controls, δ's covariance between measurements is s² ρ(‖a − b‖/ℓ) over the
    /// conditions' positions in the unit box of the controls (R&W eq. 4.9 for the
    /// squared exponential: ρ(r) = exp(−r²/2)); equal conditions share s².
    #[test]
    fn over_controls_the_covariance_follows_the_conditions() {
        use crate::study::{KernelChoice, Parameter, Prior};
        let params = DiscrepancyParams {
            kernel: KernelChoice::SquaredExponential,
            sd: Some(DiscrepancySdSpec::Fixed(2.0)),
            length_scale: Some(LengthScaleSpec::Fixed(0.5)),
            experiments: vec!["e".into()],
            hyperparameters: Default::default(),
        };
        // Scalar output at T = 10, 30 (range [0, 40]: unit positions 0.25 and 0.75).
        let targets: Vec<Target> = [0usize, 1]
            .iter()
            .map(|&c| Target {
                condition: c,
                value: 0,
                quantity: 0,
                x: None,
                values: vec![1.0],
                sds: vec![None],
            })
            .collect();
        let controls = [Parameter {
            name: "T".into(),
            unit: None,
            lo: 0.0,
            hi: 40.0,
            prior: Prior::Uniform,
        }];
        let d = Discrepancy::new(&params, &["y".into()], &targets).over_controls(
            &params,
            &targets,
            &[vec![10.0], vec![30.0]],
            &controls,
        );
        let mut cov = Array2::zeros((2, 2));
        d.add_covariance(&[], &mut cov);
        assert!((cov[[0, 0]] - 4.0).abs() < 1e-15);
        // Distance 0.5 at length-scale 0.5: r = 1.
        assert!((cov[[0, 1]] - 4.0 * (-0.5f64).exp()).abs() < 1e-15);
        assert!((cov[[1, 0]] - cov[[0, 1]]).abs() < 1e-15);
    }

    /// Fixing the sampled hyperparameters at values leaves the covariance unchanged
    /// and nothing sampled.
    #[test]
    fn fixed_at_keeps_the_covariance_and_samples_nothing() {
        let d = Discrepancy {
            kernel: Kernel::SquaredExponential,
            blocks: vec![
                DiscrepancyBlock {
                    quantity: "a".into(),
                    index: vec![0, 1, 2],
                    x: Some(vec![0.0, 0.4, 1.0]),
                    sd: Hyper::HalfNormal { scale: 1.0 },
                    length_scale: Some(Hyper::Fixed(0.3)),
                    at: None,
                },
                DiscrepancyBlock {
                    quantity: "b".into(),
                    index: vec![3],
                    x: None,
                    sd: Hyper::HalfNormal { scale: 2.0 },
                    length_scale: None,
                    at: None,
                },
            ],
        };
        let values = [0.7, 1.3];
        let f = d.fixed_at(&values);
        assert_eq!(f.n_sampled(), 0);
        assert_eq!(f.blocks[0].sd, Hyper::Fixed(0.7));
        assert_eq!(f.blocks[0].length_scale, Some(Hyper::Fixed(0.3)));
        assert_eq!(f.blocks[1].sd, Hyper::Fixed(1.3));
        let (mut a, mut b) = (Array2::zeros((4, 4)), Array2::zeros((4, 4)));
        d.add_covariance(&values, &mut a);
        f.add_covariance(&[], &mut b);
        assert_eq!(a, b);
    }

    #[test]
    fn priors_match_their_closed_forms() {
        // Half-normal scale 2 at v = 1: −1/8; lognormal(0, 1) at e: −1 − ½.
        assert!((Hyper::HalfNormal { scale: 2.0 }.ln_prior(1.0) + 0.125).abs() < 1e-15);
        let ln = Hyper::LogNormal {
            mu: 0.0,
            sigma: 1.0,
        };
        assert!((ln.ln_prior(std::f64::consts::E) + 1.5).abs() < 1e-15);
        assert_eq!(ln.ln_prior(0.0), f64::NEG_INFINITY);
        // Quantiles: the half-normal's median is τ Φ⁻¹(¾) = 0.6744898 τ; the
        // lognormal's median is e^μ and its 97.5 % point e^{μ + 1.959964 σ}.
        let hn = Hyper::HalfNormal { scale: 2.0 };
        assert!((hn.quantile(0.5) - 2.0 * 0.674_489_750_196_081_7).abs() < 1e-12);
        assert!((ln.quantile(0.5) - 1.0).abs() < 1e-12);
        assert!((ln.quantile(0.975) - 1.959_963_984_540_054f64.exp()).abs() < 1e-9);
    }
}
