//! Holdout validation: fit on part of the runs, predict the rest, and compare with
//! the reference distributions of Bastos & O'Hagan (2009).
//!
//! # Formula
//! For one GP fitted to n runs with q trend coefficients and m held-out runs with
//! observed values y* (here: the held-out runs' weights on a principal component),
//! predictive mean m* and joint predictive covariance V* (latent covariance plus the
//! nugget on the diagonal, since the runs the GP was fitted to carry it too),
//!
//!   D_MD = (y* − m*)ᵀ V*⁻¹ (y* − m*).
//!
//! If the emulator is right, (n − q)/(m (n − q − 2)) · D_MD follows an F distribution
//! with (m, n − q) degrees of freedom, so
//!
//!   E(D_MD) = m,  Var(D_MD) = 2m (m + n − q − 2)/(n − q − 4)  (n − q > 4).
//!
//! A D_MD far above the reference says the emulator's errors are larger or more
//! correlated than it claims (too small a variance, or a wrong length-scale); far below,
//! that its variance is too large.
//!
//! The scaled-F reference and its mean and variance are quoted from memory of Bastos &
//! O'Hagan (2009, §3 *(section from memory)*); the F law holds there when σ² is
//! integrated out under its non-informative prior with the other hyperparameters fixed.
//! assay plugs in the estimated σ², for which the exact law is χ²_m (mean m, variance
//! 2m); the F form is the slightly wider of the two and is what is reported.
//!
//! # References
//! Bastos, L. S. & O'Hagan, A. (2009). Diagnostics for Gaussian process emulators.
//! Technometrics 51(4), 425–438.

use super::gp::Gp;
use super::validation::{summarize, Validation};
use ndarray::{Array1, ArrayView1, ArrayView2};
use ndarray_linalg::{FactorizeC, SolveC, UPLO};
use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, FisherSnedecor};

/// Reference distribution of the Mahalanobis distance: m(n − q − 2)/(n − q) · F(m, n − q).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MahalanobisReference {
    /// Held-out points m.
    pub n_points: usize,
    /// Degrees of freedom n − q.
    pub dof: usize,
    /// E(D_MD) = m.
    pub mean: f64,
    /// Var(D_MD); absent when n − q ≤ 4 (infinite).
    pub variance: Option<f64>,
    /// 2.5 % and 97.5 % quantiles of the reference.
    pub q025: f64,
    pub q975: f64,
}

/// The Mahalanobis distance of one component on the held-out runs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MahalanobisCheck {
    pub component: String,
    pub value: f64,
    pub reference: MahalanobisReference,
}

impl MahalanobisCheck {
    /// Is the distance outside the central 95 % of its reference?
    pub fn outside(&self) -> bool {
        self.value < self.reference.q025 || self.value > self.reference.q975
    }
}

/// What the holdout validation found for one experiment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Holdout {
    /// The `surrogate.holdout` setting.
    pub fraction: f64,
    /// Held-out design points.
    pub point_ids: Vec<String>,
    /// Runs the validation surrogate was fitted to.
    pub n_fit: usize,
    /// Errors of the held-out output values (all values pooled), through the basis.
    pub validation: Validation,
    /// Per principal component.
    pub mahalanobis: Vec<MahalanobisCheck>,
}

impl Holdout {
    /// The holdout validation of a surrogate fitted to `n_fit` runs without the
    /// held-out ones (`point_ids`): its components' [`mahalanobis_check`]s, and its
    /// `predicted` mean and marginal variance of every output value at each held-out
    /// run against their observed `outputs`.
    pub(crate) fn new(
        fraction: f64,
        point_ids: &[String],
        n_fit: usize,
        mahalanobis: Vec<MahalanobisCheck>,
        outputs: &[Vec<f64>],
        predicted: &[(Vec<f64>, Vec<f64>)],
    ) -> Holdout {
        let p = predicted.first().map_or(0, |(m, _)| m.len());
        // One validation per output value (Q² about that value's own mean), then pooled.
        let per_value: Vec<Validation> = (0..p)
            .map(|j| {
                let y: Vec<f64> = outputs.iter().map(|o| o[j]).collect();
                let m: Vec<f64> = predicted.iter().map(|(m, _)| m[j]).collect();
                let sd: Vec<f64> = predicted.iter().map(|(_, v)| v[j].sqrt()).collect();
                Validation::from_loo(&y, &m, &sd)
            })
            .collect();
        Holdout {
            fraction,
            point_ids: point_ids.to_vec(),
            n_fit,
            validation: summarize(&per_value.iter().collect::<Vec<_>>()),
            mahalanobis,
        }
    }

    /// Plain warnings when the holdout says the surrogate is poor.
    pub fn verdicts(&self) -> Vec<String> {
        let mut out = Vec::new();
        if let Some(w) = self.validation.verdict() {
            out.push(format!("on the held-out runs, {w}"));
        }
        for c in self.mahalanobis.iter().filter(|c| c.outside()) {
            let what = if c.value > c.reference.q975 {
                "its errors on the held-out runs are larger than its variance says"
            } else {
                "its variance is larger than its errors on the held-out runs"
            };
            out.push(format!(
                "the surrogate of {} looks poor: Mahalanobis distance {:.3} is outside the 95 % range [{:.3}, {:.3}] of its reference (mean {}): {what}",
                c.component, c.value, c.reference.q025, c.reference.q975, c.reference.mean
            ));
        }
        out
    }
}

/// The reference of D_MD for m held-out points, n training runs, q trend coefficients.
///
/// # Panics
/// If m = 0 or n ≤ q.
pub fn mahalanobis_reference(m: usize, n: usize, q: usize) -> MahalanobisReference {
    assert!(m > 0 && n > q, "no points or no degrees of freedom");
    let dof = n - q;
    let (mf, df) = (m as f64, dof as f64);
    let c = mf * (df - 2.0) / df;
    let f = FisherSnedecor::new(mf, df).expect("positive degrees of freedom");
    MahalanobisReference {
        n_points: m,
        dof,
        mean: mf,
        variance: (dof > 4).then(|| 2.0 * mf * (mf + df - 2.0) / (df - 4.0)),
        q025: c * f.inverse_cdf(0.025),
        q975: c * f.inverse_cdf(0.975),
    }
}

/// D_MD of a GP at held-out inputs `x` (unit box) with observed values `y`.
///
/// # Formula
/// See the module documentation; V* includes the nugget σ²η on its diagonal.
///
/// # Panics
/// If V* cannot be factored (it is a GP covariance plus a positive nugget).
pub fn mahalanobis(gp: &Gp, x: ArrayView2<f64>, y: ArrayView1<f64>) -> f64 {
    let (m, mut c) = gp.predict_cov(x);
    let g = gp.nugget_var();
    for i in 0..c.nrows() {
        c[[i, i]] += g;
    }
    let e: Array1<f64> = &y - &m;
    let f = c
        .factorizec(UPLO::Lower)
        .expect("predictive covariance with a nugget is positive definite");
    let s = f.solvec(&e).expect("solve with a Cholesky factor");
    e.dot(&s)
}

/// One component's D_MD on the held-out runs (inputs `x` in the unit box, the
/// component's weights `w` of their outputs) with its reference.
pub(crate) fn mahalanobis_check(
    component: &str,
    gp: &Gp,
    x: ArrayView2<f64>,
    w: ArrayView1<f64>,
) -> MahalanobisCheck {
    MahalanobisCheck {
        component: component.to_string(),
        value: mahalanobis(gp, x, w),
        reference: mahalanobis_reference(x.nrows(), gp.n_train(), gp.n_trend()),
    }
}
