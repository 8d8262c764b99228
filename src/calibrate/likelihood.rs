//! Gaussian likelihood of one experiment's field data, counting measurement noise and
//! the surrogate's predictive variance.
//!
//! Replicates of one output value enter through their sufficient statistics, so the
//! cost does not grow with the number of replicates.
//!
//! # Formula
//! For output value j with replicates y_r, sds σ_r (w_r = 1/σ_r², W = Σ w_r,
//! ȳ = Σ w_r y_r / W, V = 1/W) and surrogate prediction N(μ_j(θ), s_j²(θ)), integrating
//! the unknown simulator output η_j ~ N(μ_j, s_j²) out of ∏_r N(y_r; η_j, σ_r²):
//! ln L_j = ln N(ȳ; μ_j, s_j² + V) + C_j,
//! C_j = −(n−1)/2 ln 2π − Σ ln σ_r + ½ ln V − ½ Σ w_r (y_r − ȳ)²  (independent of θ).
//! Surrogate errors of different output values are treated as independent here.
//!
//! # References
//! Gelman et al. (2013), Bayesian Data Analysis, 3rd ed., §2.5 (normal mean with known
//! variance); Kennedy, M. C. & O'Hagan, A. (2001), Bayesian calibration of computer
//! models, JRSS B 63(3), 425–464 (emulator variance in the likelihood).

use crate::study::{Experiment, Noise, Target};

/// Anything that predicts an experiment's output vector at parameter values θ.
pub trait Emulator: Sync {
    /// Mean and variance of each output value (the experiment's output order).
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>);
}

impl Emulator for crate::surrogate::ExperimentModel {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        crate::surrogate::ExperimentModel::predict(self, theta)
    }
}

/// Precomputed statistics of one output value's replicates.
#[derive(Debug, Clone, PartialEq)]
struct Group {
    ybar: f64,
    var_mean: f64,
    constant: f64,
}

const LN_2PI: f64 = 1.837_877_066_409_345_3;

/// The likelihood of one experiment.
#[derive(Debug, Clone)]
pub struct ExperimentLikelihood {
    pub name: String,
    groups: Vec<Group>,
}

impl ExperimentLikelihood {
    /// From the experiment's targets (replicates per output value) and its noise.
    pub fn new(e: &Experiment, targets: &[Target]) -> Self {
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
                    })
                    .collect();
                Self::group(&t.values, &sds)
            })
            .collect();
        Self {
            name: e.name.clone(),
            groups,
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
        }
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

    /// ln L given the emulator's mean and variance of each output value.
    pub fn ln_likelihood(&self, mean: &[f64], var: &[f64]) -> f64 {
        debug_assert_eq!(mean.len(), self.groups.len());
        let mut s = 0.0;
        for ((g, m), v) in self.groups.iter().zip(mean).zip(var) {
            let tot = v + g.var_mean;
            s += -0.5 * (LN_2PI + tot.ln() + (g.ybar - m).powi(2) / tot) + g.constant;
        }
        s
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
}
