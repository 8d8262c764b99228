//! Gaussian likelihood of one experiment's field data, counting measurement noise and
//! the surrogate's predictive covariance.
//!
//! Replicates of one output value enter through their sufficient statistics, so the
//! cost does not grow with the number of replicates.
//!
//! # Formula
//! For output value j with replicates y_r, sds σ_r (w_r = 1/σ_r², W = Σ w_r,
//! ȳ_j = Σ w_r y_r / W, V_j = 1/W), and the surrogate's prediction of the simulator's
//! output vector η ~ N(μ(θ), C(θ)) with C = B diag(v(θ)) Bᵀ + D (low rank plus diagonal:
//! the principal-component basis B, the weights' predictive variances v and the
//! discarded variance D), integrating η out of ∏_j ∏_r N(y_jr; η_j, σ_r²):
//! ln L = ln N(ȳ; μ, B diag(v) Bᵀ + Λ) + Σ_j C_j,  Λ = D + diag(V),
//! C_j = −(n_j−1)/2 ln 2π − Σ ln σ_r + ½ ln V_j − ½ Σ w_r (y_r − ȳ_j)²  (independent of θ).
//!
//! The normal density itself is evaluated in `woodbury.rs` (Woodbury identity
//! and matrix determinant lemma, O(p K²) per evaluation, never a p × p factorisation
//! without a discrepancy).
//!
//! With an unknown variance σ² shared by every replicate of the experiment, V = σ²/n_j
//! and C_j depends on σ²:
//! C_j = −(n_j−1)/2 ln 2π − ½ ln n_j − (n_j−1)/2 ln σ² − S_j/(2σ²), S_j = Σ_r (y_r − ȳ)².
//! Summed over the output values, the σ²-dependent part is
//! −(ν/2) ln σ² − S/(2σ²) with ν = Σ_j (n_j − 1) and S = Σ_j S_j, both precomputed, so
//! an evaluation costs the same as with known noise.
//!
//! Input: the experiment's field data and noise, and the surrogate's prediction at θ
//! (with a discrepancy, its hyperparameters). Output: ln L, and its derivatives for the
//! gradient-based sampler. Must not: call the surrogate (the posterior does), open
//! files or print.
//!
//! # References
//! Higdon et al. (2008), JASA 103(482), 570–583 (the basis form of
//! the likelihood). Gelman et al. (2013), Bayesian Data Analysis, 3rd ed., §2.5 (normal mean with known
//! variance) and §3.2 (normal with unknown variance; the split of the sum of squares
//! into n(ȳ − μ)² + S is eq. 3.3 there, quoted from memory); Kennedy, M. C. &
//! O'Hagan, A. (2001), Bayesian calibration of computer models, JRSS B 63(3), 425–464
//! (emulator variance in the likelihood).

use super::discrepancy::Discrepancy;
use super::prior::InverseGamma;
use super::woodbury::{
    ln_normal_factored_low_rank, ln_normal_gradient, ln_normal_low_rank, Base, LikelihoodGradient,
    LN_2PI,
};
use crate::study::{Experiment, Noise, Target};
use crate::surrogate::LowRankPrediction;
use ndarray::{Array1, Array2, ArrayView2};
use ndarray_linalg::{Cholesky, UPLO};
use std::sync::OnceLock;

/// Precomputed statistics of one output value's replicates.
///
/// With known noise `var_mean` is V and `constant` is C_j. With unknown noise
/// `var_mean` is 1/n_j (V = σ²/n_j) and `constant` is the σ²-free part of C_j,
/// −(n_j−1)/2 ln 2π − ½ ln n_j.
#[derive(Debug, Clone, PartialEq)]
struct Group {
    ybar: f64,
    var_mean: f64,
    constant: f64,
}

/// How the measurement noise enters.
#[derive(Debug, Clone, PartialEq)]
enum NoiseModel {
    /// Known sds, folded into the groups.
    Known,
    /// Unknown σ² with an inverse-gamma prior; ν = Σ(n_j − 1) and S = Σ S_j.
    Unknown {
        prior: InverseGamma,
        dof: f64,
        ss: f64,
        n_values: f64,
    },
}

/// The likelihood of one experiment.
#[derive(Debug, Clone)]
pub struct ExperimentLikelihood {
    pub name: String,
    groups: Vec<Group>,
    noise: NoiseModel,
    discrepancy: Option<Discrepancy>,
    /// With a discrepancy whose hyperparameters are all fixed: the diagonal λ of the
    /// first evaluation and the Cholesky factor of diag(λ) + K_δ, reused while λ stays
    /// the same (known noise and a surrogate whose discarded variance does not depend
    /// on θ: every evaluation).
    base_factor: OnceLock<(Vec<f64>, Array2<f64>)>,
}

impl ExperimentLikelihood {
    /// From the experiment's targets (replicates per output value) and its noise.
    pub fn new(e: &Experiment, targets: &[Target]) -> Self {
        if let Noise::Unknown { shape, scale } = e.noise {
            let values: Vec<Vec<f64>> = targets.iter().map(|t| t.values.clone()).collect();
            return Self::with_unknown_noise(&e.name, &values, InverseGamma { shape, scale });
        }
        let groups = targets
            .iter()
            .map(|t| {
                let sds: Vec<f64> = t
                    .sds
                    .iter()
                    .map(|s| match (&e.noise, s) {
                        (Noise::Sd(v), _) => *v,
                        (Noise::Column(_), Some(v)) => *v,
                        (Noise::Column(_), None) => {
                            unreachable!("validation requires the sd column")
                        }
                        (Noise::Unknown { .. }, _) => unreachable!("handled above"),
                    })
                    .collect();
                Self::group(&t.values, &sds)
            })
            .collect();
        Self {
            name: e.name.clone(),
            groups,
            noise: NoiseModel::Known,
            discrepancy: None,
            base_factor: OnceLock::new(),
        }
    }

    /// From plain values and sds per output value (tests, other stages).
    pub fn from_values(name: &str, values: &[Vec<f64>], sds: &[Vec<f64>]) -> Self {
        Self {
            name: name.into(),
            groups: values
                .iter()
                .zip(sds)
                .map(|(v, s)| Self::group(v, s))
                .collect(),
            noise: NoiseModel::Known,
            discrepancy: None,
            base_factor: OnceLock::new(),
        }
    }

    /// From plain values per output value whose replicates share one unknown noise
    /// variance σ² with an inverse-gamma `prior`.
    ///
    /// # Panics
    /// If an output value has no replicate.
    pub fn with_unknown_noise(name: &str, values: &[Vec<f64>], prior: InverseGamma) -> Self {
        let mut dof = 0.0;
        let mut ss = 0.0;
        let mut n_values = 0.0;
        let groups = values
            .iter()
            .map(|v| {
                assert!(!v.is_empty(), "an output value without data");
                let n = v.len() as f64;
                let ybar = v.iter().sum::<f64>() / n;
                dof += n - 1.0;
                ss += v.iter().map(|y| (y - ybar).powi(2)).sum::<f64>();
                n_values += n;
                Group {
                    ybar,
                    var_mean: 1.0 / n,
                    constant: -(n - 1.0) / 2.0 * LN_2PI - 0.5 * n.ln(),
                }
            })
            .collect();
        Self {
            name: name.into(),
            groups,
            noise: NoiseModel::Unknown {
                prior,
                dof,
                ss,
                n_values,
            },
            discrepancy: None,
            base_factor: OnceLock::new(),
        }
    }

    /// Add a model-discrepancy term: Σ = Σ_surrogate + Σ_noise + Σ_δ.
    ///
    /// # Panics
    /// If a block of `d` points past the experiment's output values.
    pub fn with_discrepancy(mut self, d: Discrepancy) -> Self {
        assert!(d
            .blocks
            .iter()
            .all(|b| b.index.iter().all(|&j| j < self.groups.len())));
        self.discrepancy = Some(d);
        self.base_factor = OnceLock::new();
        self
    }

    /// The discrepancy term, if any.
    pub fn discrepancy(&self) -> Option<&Discrepancy> {
        self.discrepancy.as_ref()
    }

    /// Number of sampled discrepancy hyperparameters.
    pub fn n_discrepancy(&self) -> usize {
        self.discrepancy.as_ref().map_or(0, Discrepancy::n_sampled)
    }

    /// The prior of the noise variance when it is unknown (and sampled).
    pub fn noise_prior(&self) -> Option<InverseGamma> {
        match self.noise {
            NoiseModel::Known => None,
            NoiseModel::Unknown { prior, .. } => Some(prior),
        }
    }

    /// With unknown noise, the conditional posterior of σ² given emulator means `mean`
    /// when the emulator variance is neglected: inverse-gamma(α + N/2,
    /// β + ½(S + Σ_j n_j (ȳ_j − μ_j)²)), N the number of measurements (BDA3 §3.2–3.3
    /// with a known mean, quoted from memory). The sampler starts the noise there.
    pub fn noise_conditional(&self, mean: &[f64]) -> Option<InverseGamma> {
        let NoiseModel::Unknown {
            prior,
            ss,
            n_values,
            ..
        } = self.noise
        else {
            return None;
        };
        let resid: f64 = self
            .groups
            .iter()
            .zip(mean)
            .map(|(g, m)| (g.ybar - m).powi(2) / g.var_mean)
            .sum();
        Some(InverseGamma {
            shape: prior.shape + 0.5 * n_values,
            scale: prior.scale + 0.5 * (ss + resid),
        })
    }

    fn group(values: &[f64], sds: &[f64]) -> Group {
        let w: Vec<f64> = sds.iter().map(|s| 1.0 / (s * s)).collect();
        let wsum: f64 = w.iter().sum();
        let ybar = values.iter().zip(&w).map(|(y, w)| y * w).sum::<f64>() / wsum;
        let v = 1.0 / wsum;
        let n = values.len() as f64;
        let constant = -(n - 1.0) / 2.0 * LN_2PI - sds.iter().map(|s| s.ln()).sum::<f64>()
            + 0.5 * v.ln()
            - 0.5
                * values
                    .iter()
                    .zip(&w)
                    .map(|(y, w)| w * (y - ybar).powi(2))
                    .sum::<f64>();
        Group {
            ybar,
            var_mean: v,
            constant,
        }
    }

    /// Number of output values.
    pub fn len(&self) -> usize {
        self.groups.len()
    }

    pub fn is_empty(&self) -> bool {
        self.groups.is_empty()
    }

    /// ln L given the emulator's mean and variance of each output value (known noise).
    ///
    /// # Panics
    /// In debug builds, if the noise is unknown: use [`Self::ln_likelihood_with_noise`].
    pub fn ln_likelihood(&self, mean: &[f64], var: &[f64]) -> f64 {
        debug_assert!(
            self.noise == NoiseModel::Known,
            "unknown noise needs its variance"
        );
        self.ln_likelihood_with_noise(mean, var, 1.0)
    }

    /// ln L given the emulator's mean and variance of each output value, treated as
    /// independent, and, when the noise is unknown, its variance `noise_var` (ignored
    /// with known noise).
    pub fn ln_likelihood_with_noise(&self, mean: &[f64], var: &[f64], noise_var: f64) -> f64 {
        let p = mean.len();
        self.ln_likelihood_parts(mean, Array2::zeros((p, 0)).view(), &[], var, noise_var, &[])
    }

    /// ln L given the emulator's low-rank-plus-diagonal prediction of the output vector
    /// and, when the noise is unknown, its variance `noise_var` (ignored with known
    /// noise). See the module documentation for the formula.
    pub fn ln_likelihood_low_rank(&self, pred: &LowRankPrediction, noise_var: f64) -> f64 {
        self.ln_likelihood_full(pred, noise_var, &[])
    }

    /// As [`Self::ln_likelihood_low_rank`], with the sampled discrepancy
    /// hyperparameters `discrepancy` (sd and length-scale per quantity, in
    /// [`Discrepancy::hypers`] order, fixed ones left out; empty without a discrepancy).
    ///
    /// # Formula
    /// ln N(ȳ; μ, B diag(v) Bᵀ + Λ + K_δ) + Σ_j C_j: the base D = Λ + K_δ is dense, so it
    /// is factored (Cholesky, LAPACK) and the low-rank surrogate part enters by
    /// [`ln_normal_factored_low_rank`]; with fixed hyperparameters and an unchanged Λ the
    /// factor of the first evaluation is reused.
    pub fn ln_likelihood_full(
        &self,
        pred: &LowRankPrediction,
        noise_var: f64,
        discrepancy: &[f64],
    ) -> f64 {
        self.ln_likelihood_parts(
            &pred.mean,
            pred.basis.view(),
            &pred.weight_var,
            &pred.diag,
            noise_var,
            discrepancy,
        )
    }

    /// Whether [`Self::ln_likelihood_with_gradient`] gives derivatives: not with
    /// sampled discrepancy hyperparameters, nor with a discrepancy and an unknown noise
    /// variance.
    pub fn has_gradient(&self) -> bool {
        match &self.discrepancy {
            None => true,
            Some(d) => d.n_sampled() == 0 && self.noise == NoiseModel::Known,
        }
    }

    /// ln L (as [`Self::ln_likelihood_low_rank`]) with its derivatives with respect to
    /// the prediction's mean and weight variances, its diagonal (when `with_diag`) and
    /// the noise variance; `None` where [`Self::has_gradient`] is false. A likelihood of
    /// −∞ comes with zero derivatives.
    ///
    /// # Formula
    /// See `ln_normal_gradient` (`woodbury.rs`); with an unknown variance σ²,
    /// Λ_j = diag_j + σ²/n_j gives ∂/∂σ² = Σ_j (1/n_j) ∂/∂Λ_j − ν/(2σ²) + S/(2σ⁴)
    /// (module documentation).
    pub fn ln_likelihood_with_gradient(
        &self,
        pred: &LowRankPrediction,
        noise_var: f64,
        with_diag: bool,
    ) -> Option<LikelihoodGradient> {
        if !self.has_gradient() {
            return None;
        }
        let p = self.groups.len();
        let k = pred.weight_var.len();
        let minus_inf = LikelihoodGradient {
            value: f64::NEG_INFINITY,
            mean: vec![0.0; p],
            weight_var: vec![0.0; k],
            diag: if with_diag { vec![0.0; p] } else { Vec::new() },
            noise_var: 0.0,
        };
        let (scale, mut s, mut ds) = match self.noise {
            NoiseModel::Known => (1.0, 0.0, 0.0),
            NoiseModel::Unknown { dof, ss, .. } => {
                if !(noise_var > 0.0 && noise_var.is_finite()) {
                    return Some(minus_inf);
                }
                (
                    noise_var,
                    -0.5 * (dof * noise_var.ln() + ss / noise_var),
                    -0.5 * dof / noise_var + 0.5 * ss / (noise_var * noise_var),
                )
            }
        };
        let mut r = Vec::with_capacity(p);
        let mut lambda = Vec::with_capacity(p);
        for ((g, m), d) in self.groups.iter().zip(&pred.mean).zip(&pred.diag) {
            r.push(g.ybar - m);
            lambda.push(d + scale * g.var_mean);
            s += g.constant;
        }
        if lambda.iter().any(|l| !(*l > 0.0 && l.is_finite())) || r.iter().any(|v| !v.is_finite()) {
            return Some(minus_inf);
        }
        let base = match &self.discrepancy {
            None => Base::Diagonal(lambda.clone()),
            Some(d) => match self.base_factor(d, &lambda, &[]) {
                Some(l) => Base::Dense(l),
                None => return Some(minus_inf),
            },
        };
        let unknown = self.noise != NoiseModel::Known;
        let Some(mut lg) = ln_normal_gradient(
            &r,
            &base,
            pred.basis.view(),
            &pred.weight_var,
            with_diag || unknown,
        ) else {
            return Some(minus_inf);
        };
        if unknown {
            ds += self
                .groups
                .iter()
                .zip(&lg.diag)
                .map(|(g, dl)| g.var_mean * dl)
                .sum::<f64>();
        }
        lg.value += s;
        lg.noise_var = ds;
        if !with_diag {
            lg.diag.clear();
        }
        Some(lg)
    }

    /// The lower Cholesky factor of diag(λ) + K_δ(hyper).
    fn base_factor(&self, d: &Discrepancy, lambda: &[f64], hyper: &[f64]) -> Option<Array2<f64>> {
        let factor = || {
            let mut base = Array2::from_diag(&Array1::from(lambda.to_vec()));
            d.add_covariance(hyper, &mut base);
            base.cholesky(UPLO::Lower).ok()
        };
        if d.n_sampled() > 0 {
            return factor();
        }
        if let Some((key, l)) = self.base_factor.get() {
            if key.as_slice() == lambda {
                return Some(l.clone());
            }
            return factor();
        }
        let l = factor()?;
        // Another thread may have set it first with the same λ (same factor) or
        // another one (the key tells them apart).
        let _ = self.base_factor.set((lambda.to_vec(), l.clone()));
        Some(l)
    }

    fn ln_likelihood_parts(
        &self,
        mean: &[f64],
        basis: ArrayView2<f64>,
        weight_var: &[f64],
        diag: &[f64],
        noise_var: f64,
        discrepancy: &[f64],
    ) -> f64 {
        debug_assert_eq!(mean.len(), self.groups.len());
        let (scale, mut s) = match self.noise {
            NoiseModel::Known => (1.0, 0.0),
            NoiseModel::Unknown { dof, ss, .. } => {
                if !(noise_var > 0.0 && noise_var.is_finite()) {
                    return f64::NEG_INFINITY;
                }
                (noise_var, -0.5 * (dof * noise_var.ln() + ss / noise_var))
            }
        };
        let p = self.groups.len();
        let mut r = Vec::with_capacity(p);
        let mut lambda = Vec::with_capacity(p);
        for ((g, m), d) in self.groups.iter().zip(mean).zip(diag) {
            r.push(g.ybar - m);
            lambda.push(d + scale * g.var_mean);
            s += g.constant;
        }
        let Some(d) = &self.discrepancy else {
            return s + ln_normal_low_rank(&r, &lambda, basis, weight_var);
        };
        if lambda.iter().any(|l| !(*l >= 0.0 && l.is_finite()))
            || discrepancy.iter().any(|h| !(*h > 0.0 && h.is_finite()))
        {
            return f64::NEG_INFINITY;
        }
        match self.base_factor(d, &lambda, discrepancy) {
            Some(l) => s + ln_normal_factored_low_rank(&r, &l, basis, weight_var),
            None => f64::NEG_INFINITY,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn replicates_equal_the_product_of_normals_with_exact_emulator() {
        // With s² = 0 the likelihood must equal ∏ N(y_r; μ, σ²) exactly.
        let ys = vec![1.0, 1.4, 0.7];
        let sd = 0.3;
        let l = ExperimentLikelihood::from_values("t", std::slice::from_ref(&ys), &[vec![sd; 3]]);
        let mu = 1.1;
        let direct: f64 = ys
            .iter()
            .map(|y| -0.5 * (LN_2PI + (sd * sd).ln() + (y - mu).powi(2) / (sd * sd)))
            .sum();
        assert!((l.ln_likelihood(&[mu], &[0.0]) - direct).abs() < 1e-12);
    }

    #[test]
    fn unknown_noise_equals_the_product_of_normals_at_each_variance() {
        // Curve of three values with 3, 1 and 2 replicates; exact emulator.
        let ys = vec![vec![1.0, 1.4, 0.7], vec![2.0], vec![2.9, 3.3]];
        let mu = [1.1, 2.2, 3.0];
        let prior = InverseGamma {
            shape: 2.0,
            scale: 1.0,
        };
        let l = ExperimentLikelihood::with_unknown_noise("t", &ys, prior);
        for var in [0.01f64, 0.3, 4.0] {
            let direct: f64 = ys
                .iter()
                .zip(mu)
                .flat_map(|(g, m)| {
                    g.iter()
                        .map(move |y| -0.5 * (LN_2PI + var.ln() + (y - m).powi(2) / var))
                })
                .sum();
            let got = l.ln_likelihood_with_noise(&mu, &[0.0; 3], var);
            assert!(
                (got - direct).abs() < 1e-12,
                "σ² = {var}: {got} vs {direct}"
            );
        }
        // The same data with the variance known must give the same value.
        let sds: Vec<Vec<f64>> = ys.iter().map(|g| vec![0.3_f64.sqrt(); g.len()]).collect();
        let known = ExperimentLikelihood::from_values("t", &ys, &sds);
        let a = known.ln_likelihood(&mu, &[0.05; 3]);
        let b = l.ln_likelihood_with_noise(&mu, &[0.05; 3], 0.3);
        assert!((a - b).abs() < 1e-12, "{a} vs {b}");
    }
}
