//! An experiment's surrogate evaluated at its field conditions: with `controls`, the
//! simulator's inputs are (controls, parameters), and the field vector holds values
//! measured at several conditions. For calibration the parameters θ vary and the
//! conditions are fixed by the data.
//!
//! Pure: no files, no clock.
//!
//! # Formula
//! For conditions c_1 … c_m and component k of the basis, the component's GP gives the
//! joint predictive mean μ_k ∈ Rᵐ and covariance C_k (m × m) of the weights w_k(c_i, θ)
//! (R&W eq. 2.24 with the trend's term, [`Gp::predict_cov`]). The output value a at
//! condition i is η_ia = mean_a + scale_a Σ_k φ_ka w_k(c_i, θ) plus the discarded
//! variance D_a, so
//!   Cov(η_ia, η_jb) = Σ_k B_ak B_bk C_k[i, j] + δ_ij δ_ab D_a,
//! with B the basis in output units. Writing C_k = U_k Λ_k U_kᵀ (symmetric
//! eigendecomposition, LAPACK `dsyevd` through ndarray-linalg), the field vector's
//! covariance is G diag(λ) Gᵀ + diag(D) with G[(i, a), (k, l)] = B_ak U_k[i, l]: the
//! low-rank-plus-diagonal form the likelihood evaluates by Woodbury, of rank K·m. The
//! covariance across conditions is kept, not only its diagonal (Kennedy & O'Hagan
//! 2001, §4: the emulator's joint uncertainty at the field inputs).
//!
//! # References
//! Kennedy, M. C. & O'Hagan, A. (2001), Bayesian calibration of computer models, JRSS B
//! 63(3), 425–464. Rasmussen & Williams (2006), Gaussian Processes for Machine
//! Learning, MIT Press, §2.2 and §2.7.

use super::model::{ExperimentModel, LowRankPrediction};
use ndarray::Array2;
use ndarray_linalg::{Eigh, UPLO};

/// The surrogate of an experiment at its field conditions.
#[derive(Debug, Clone)]
pub struct ConditionedModel<'a> {
    pub model: &'a ExperimentModel,
    /// Control values of each condition, one row per condition.
    pub conditions: Vec<Vec<f64>>,
    /// For each entry of the field vector: (condition, value index in a run's outputs).
    pub entries: Vec<(usize, usize)>,
}

impl ConditionedModel<'_> {
    /// Mean and low-rank-plus-diagonal covariance of the field vector at parameters θ.
    pub fn predict_low_rank(&self, theta: &[f64]) -> LowRankPrediction {
        let m = self.conditions.len();
        let k = self.model.components.len();
        let d = self.model.lo.len();
        let x = Array2::from_shape_fn((m, d), |(i, j)| {
            let n_c = self.conditions[i].len();
            let v = if j < n_c {
                self.conditions[i][j]
            } else {
                theta[j - n_c]
            };
            (v - self.model.lo[j]) / (self.model.hi[j] - self.model.lo[j])
        });
        let mut w = Array2::<f64>::zeros((m, k));
        let mut factors = Vec::with_capacity(k);
        let p = self.entries.len();
        for (c, comp) in self.model.components.iter().enumerate() {
            let (mean, cov) = comp.gp.predict_cov(x.view());
            w.column_mut(c).assign(&mean);
            match cov.eigh(UPLO::Lower) {
                Ok((lam, u)) => factors.push((lam, u)),
                Err(_) => return LowRankPrediction::diagonal(vec![f64::NAN; p], vec![f64::NAN; p]),
            }
        }
        let recon: Vec<Vec<f64>> = (0..m)
            .map(|i| self.model.basis.reconstruct(&w.row(i).to_owned()))
            .collect();
        let b = self.model.basis_out();
        let mut g = Array2::<f64>::zeros((p, k * m));
        let mut weight_var = vec![0.0; k * m];
        for (c, (lam, u)) in factors.iter().enumerate() {
            for l in 0..m {
                weight_var[c * m + l] = lam[l].max(0.0);
                for (row, &(i, a)) in self.entries.iter().enumerate() {
                    g[[row, c * m + l]] = b[[a, c]] * u[[i, l]];
                }
            }
        }
        LowRankPrediction {
            mean: self.entries.iter().map(|&(i, a)| recon[i][a]).collect(),
            basis: g,
            weight_var,
            diag: self
                .entries
                .iter()
                .map(|&(_, a)| self.model.basis.discarded[a])
                .collect(),
        }
    }

    /// Mean and marginal variance of every entry of the field vector at θ.
    pub fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let p = self.predict_low_rank(theta);
        let v = p.marginal_var();
        (p.mean, v)
    }
}

/// What the calibration and the checks evaluate for one experiment: the surrogate
/// itself (no controls: the field vector is a run's output vector) or the surrogate at
/// the field conditions.
#[derive(Debug, Clone)]
pub enum FieldEmulator<'a> {
    Plain(&'a ExperimentModel),
    Conditioned(ConditionedModel<'a>),
}

impl<'a> FieldEmulator<'a> {
    /// For a field vector whose entries are `entries` (condition, value) at
    /// `conditions`: the plain surrogate when there are no controls (`n_controls` = 0).
    pub fn new(
        model: &'a ExperimentModel,
        n_controls: usize,
        conditions: Vec<Vec<f64>>,
        entries: Vec<(usize, usize)>,
    ) -> Self {
        if n_controls == 0 {
            Self::Plain(model)
        } else {
            Self::Conditioned(ConditionedModel {
                model,
                conditions,
                entries,
            })
        }
    }

    pub fn predict_low_rank(&self, theta: &[f64]) -> LowRankPrediction {
        match self {
            Self::Plain(m) => m.predict_low_rank(theta),
            Self::Conditioned(c) => c.predict_low_rank(theta),
        }
    }

    pub fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        match self {
            Self::Plain(m) => m.predict(theta),
            Self::Conditioned(c) => c.predict(theta),
        }
    }
}
