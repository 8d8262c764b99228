//! Principal-component basis of an experiment's output vector (a curve, or one value).
//!
//! # Formula
//! Runs i = 1 … n give output vectors y_i (p values: every quantity at every station).
//! Each value is centred by its mean over the runs, ȳ_j, and each quantity q is divided
//! by one scale s_q, the root mean square of its centred values over runs and stations
//! (one scale per quantity keeps the shape of a curve: stations with a small spread stay
//! small instead of being blown up to unit variance). With Z the n × p matrix of
//! standardised outputs and its thin SVD Z = U S Vᵀ,
//!
//!   φ_k = S_k v_k / √n (basis vector k, standardised units),
//!   w_ik = √n U_ik (weight of run i; mean 0 and variance 1 over the runs, divisor n).
//!
//! The first K components are kept, K the smallest count whose share of the variance
//! Σ_{k≤K} S_k² / Σ_k S_k² reaches `variance_kept`. The discarded part,
//! r_i = z_i − Σ_{k≤K} w_ik φ_k, enters the prediction as a diagonal variance per value,
//! D_j = s_j² · (1/n) Σ_i r_ij² (output units²), the mean square of what the kept
//! components miss at that value. So the output is
//!
//!   y(θ) = ȳ + diag(s) Σ_k w_k(θ) φ_k + e,  e ~ N(0, diag(D)),
//!
//! with one Gaussian process per weight w_k(θ).
//!
//! # References
//! Higdon, D., Gattiker, J., Williams, B. & Rightley, M. (2008). Computer model
//! calibration using high-dimensional output. Journal of the American Statistical
//! Association 103(482), 570–583 (basis from the SVD of the centred, scaled runs; one GP
//! per weight; the discarded variance as an error term — the per-value diagonal D used
//! here is our choice, the paper's form is quoted from memory).

use ndarray::{Array1, Array2, Axis};
use ndarray_linalg::SVD;

/// Relative spread under which a quantity is treated as constant over the runs.
const CONSTANT_RTOL: f64 = 1e-12;
/// Components whose share of the variance is below this are numerically zero (they
/// carry round-off, not signal) and are never kept.
const NEGLIGIBLE_SHARE: f64 = 1e-12;

/// The basis of one experiment's outputs.
#[derive(Debug, Clone, PartialEq)]
pub struct Basis {
    /// Mean of each output value over the runs.
    pub mean: Vec<f64>,
    /// Scale of each output value (its quantity's s_q; 0 for a constant quantity).
    pub scale: Vec<f64>,
    /// Kept basis vectors φ_k as columns, p × K, standardised units.
    pub vectors: Array2<f64>,
    /// Share of the standardised variance of each kept component.
    pub explained: Vec<f64>,
    /// D_j, the variance the kept components miss at each value, output units².
    pub discarded: Vec<f64>,
    /// The setting the basis was made with.
    pub variance_kept: f64,
}

/// Quantity of each output value: the part of its name before `@`.
pub fn quantity_groups(names: &[String]) -> Vec<usize> {
    let mut seen: Vec<&str> = Vec::new();
    names
        .iter()
        .map(|n| {
            let q = n.split('@').next().unwrap_or(n);
            match seen.iter().position(|s| *s == q) {
                Some(i) => i,
                None => {
                    seen.push(q);
                    seen.len() - 1
                }
            }
        })
        .collect()
}

impl Basis {
    /// Number of kept components K.
    pub fn n_components(&self) -> usize {
        self.vectors.ncols()
    }

    /// Number of output values p.
    pub fn n_values(&self) -> usize {
        self.mean.len()
    }

    /// Share of the standardised variance kept (Σ explained).
    pub fn explained_total(&self) -> f64 {
        self.explained.iter().sum()
    }

    /// The basis in output units: B_jk = s_j φ_jk (p × K).
    pub fn vectors_in_output_units(&self) -> Array2<f64> {
        let mut b = self.vectors.clone();
        for (j, mut row) in b.rows_mut().into_iter().enumerate() {
            row *= self.scale[j];
        }
        b
    }

    /// Centre and scale the runs, take the SVD, keep components up to `variance_kept`.
    ///
    /// `outputs` holds one output vector per run; `groups[j]` is the quantity of value j
    /// (see [`quantity_groups`]).
    ///
    /// # Panics
    /// If there are no runs, rows of different lengths, or `variance_kept` ∉ (0, 1].
    pub fn fit(outputs: &[Vec<f64>], groups: &[usize], variance_kept: f64) -> Self {
        assert!(!outputs.is_empty(), "a basis needs runs");
        assert!(variance_kept > 0.0 && variance_kept <= 1.0);
        let (mean, scale) = Self::standardisation(outputs, groups);
        let z = Self::standardise(outputs, &mean, &scale);
        let (vectors, explained) = Self::components(&z, variance_kept);
        Self::assemble(outputs, mean, scale, vectors, explained, variance_kept)
    }

    /// Rebuild from recorded parts: the centring and scale are recomputed from the
    /// runs, the vectors and shares come from the record, the discarded variance is
    /// recomputed (it equals the recorded one for the same runs).
    ///
    /// # Panics
    /// If there are no runs or the shapes disagree.
    pub fn from_parts(
        outputs: &[Vec<f64>],
        groups: &[usize],
        vectors: Array2<f64>,
        explained: Vec<f64>,
        variance_kept: f64,
    ) -> Self {
        assert!(!outputs.is_empty(), "a basis needs runs");
        let (mean, scale) = Self::standardisation(outputs, groups);
        assert_eq!(
            vectors.nrows(),
            mean.len(),
            "basis vectors of the wrong length"
        );
        Self::assemble(outputs, mean, scale, vectors, explained, variance_kept)
    }

    fn assemble(
        outputs: &[Vec<f64>],
        mean: Vec<f64>,
        scale: Vec<f64>,
        vectors: Array2<f64>,
        explained: Vec<f64>,
        variance_kept: f64,
    ) -> Self {
        let n = outputs.len();
        let p = mean.len();
        let z = Self::standardise(outputs, &mean, &scale);
        let mut basis = Self {
            mean,
            scale,
            vectors,
            explained,
            discarded: vec![0.0; p],
            variance_kept,
        };
        let fitted = basis.weights(outputs).dot(&basis.vectors.t());
        for j in 0..p {
            let ms = (0..n)
                .map(|i| (z[[i, j]] - fitted[[i, j]]).powi(2))
                .sum::<f64>()
                / n as f64;
            basis.discarded[j] = basis.scale[j] * basis.scale[j] * ms;
        }
        basis
    }

    fn standardisation(outputs: &[Vec<f64>], groups: &[usize]) -> (Vec<f64>, Vec<f64>) {
        let n = outputs.len() as f64;
        let p = outputs[0].len();
        assert!(outputs.iter().all(|r| r.len() == p), "ragged outputs");
        assert_eq!(groups.len(), p);
        let mean: Vec<f64> = (0..p)
            .map(|j| outputs.iter().map(|r| r[j]).sum::<f64>() / n)
            .collect();
        let n_groups = groups.iter().max().map_or(0, |g| g + 1);
        let mut scale = vec![0.0; p];
        for g in 0..n_groups {
            let cols: Vec<usize> = (0..p).filter(|j| groups[*j] == g).collect();
            let ss: f64 = cols
                .iter()
                .map(|&j| {
                    outputs
                        .iter()
                        .map(|r| (r[j] - mean[j]).powi(2))
                        .sum::<f64>()
                })
                .sum();
            let s = (ss / (n * cols.len() as f64)).sqrt();
            let size = cols.iter().map(|&j| mean[j].abs()).fold(0.0, f64::max);
            let s = if s <= CONSTANT_RTOL * size.max(f64::MIN_POSITIVE) {
                0.0
            } else {
                s
            };
            for &j in &cols {
                scale[j] = s;
            }
        }
        (mean, scale)
    }

    fn standardise(outputs: &[Vec<f64>], mean: &[f64], scale: &[f64]) -> Array2<f64> {
        Array2::from_shape_fn((outputs.len(), mean.len()), |(i, j)| {
            if scale[j] > 0.0 {
                (outputs[i][j] - mean[j]) / scale[j]
            } else {
                0.0
            }
        })
    }

    fn components(z: &Array2<f64>, variance_kept: f64) -> (Array2<f64>, Vec<f64>) {
        let (n, p) = z.dim();
        let total: f64 = z.iter().map(|v| v * v).sum();
        if total == 0.0 {
            return (Array2::zeros((p, 0)), vec![]);
        }
        let (_, s, vt) = z.svd(false, true).expect("SVD of a finite matrix");
        let vt = vt.expect("right singular vectors were asked for");
        let share: Vec<f64> = s.iter().map(|v| v * v / total).collect();
        let mut k = 0;
        let mut cum = 0.0;
        while k < share.len() && share[k] > NEGLIGIBLE_SHARE && k + 1 < n {
            cum += share[k];
            k += 1;
            // A hair below the target still counts: the shares carry round-off.
            if cum >= variance_kept - 1e-12 {
                break;
            }
        }
        let mut vectors = Array2::zeros((p, k));
        for c in 0..k {
            // Sign convention: the largest entry of each vector is positive, so that
            // the basis is the same whatever sign the SVD routine returns.
            let row = vt.row(c);
            let imax = (0..p)
                .max_by(|a, b| row[*a].abs().total_cmp(&row[*b].abs()))
                .unwrap_or(0);
            let sign = if row[imax] < 0.0 { -1.0 } else { 1.0 };
            for j in 0..p {
                vectors[[j, c]] = sign * s[c] * row[j] / (n as f64).sqrt();
            }
        }
        (vectors, share[..k].to_vec())
    }

    /// Weights of output vectors on the kept components (n × K): the least-squares
    /// projection w_ik = z_i · φ_k / (φ_k · φ_k) (the φ_k are orthogonal).
    pub fn weights(&self, outputs: &[Vec<f64>]) -> Array2<f64> {
        let z = Self::standardise(outputs, &self.mean, &self.scale);
        let mut w = z.dot(&self.vectors);
        let norms = self.vectors.map_axis(Axis(0), |c| c.dot(&c));
        for (mut col, nrm) in w.columns_mut().into_iter().zip(norms.iter()) {
            col /= *nrm;
        }
        w
    }

    /// Output vector of weights `w` (K): ȳ + diag(s) Σ_k w_k φ_k.
    pub fn reconstruct(&self, w: &Array1<f64>) -> Vec<f64> {
        let zz = self.vectors.dot(w);
        (0..self.n_values())
            .map(|j| self.mean[j] + self.scale[j] * zz[j])
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_single_value_is_one_component_with_the_standardised_output_as_weight() {
        // One value per run: the basis is ±1, and the weight is (y − ȳ)/sd, so the single
        // GP is the GP of the standardised output (the scalar case of the surrogate).
        let y: Vec<Vec<f64>> = [1.0, 4.0, 2.0, 7.0].iter().map(|v| vec![*v]).collect();
        let b = Basis::fit(&y, &[0], 0.999);
        assert_eq!(b.n_components(), 1);
        assert!((b.explained[0] - 1.0).abs() < 1e-12);
        let w = b.weights(&y);
        let mean = 3.5;
        let sd = ((2.5f64.powi(2) + 0.25 + 1.5f64.powi(2) + 3.5f64.powi(2)) / 4.0).sqrt();
        for (i, v) in [1.0, 4.0, 2.0, 7.0].iter().enumerate() {
            assert!((w[[i, 0]] - (v - mean) / sd).abs() < 1e-12);
        }
        assert!(b.discarded[0] < 1e-24);
    }

    #[test]
    fn all_components_reconstruct_the_runs_exactly() {
        // Structural check: with every component kept the runs are reproduced.
        let y = vec![
            vec![1.0, 2.0, 3.5],
            vec![0.5, 2.5, 2.0],
            vec![1.5, 1.0, 3.0],
            vec![2.0, 3.0, 5.0],
        ];
        let b = Basis::fit(&y, &[0, 0, 0], 1.0);
        let w = b.weights(&y);
        for (i, row) in y.iter().enumerate() {
            let r = b.reconstruct(&w.row(i).to_owned());
            for (a, c) in r.iter().zip(row) {
                assert!((a - c).abs() < 1e-12, "{a} vs {c}");
            }
        }
        // The weights have mean 0 and variance 1 (divisor n) by construction.
        for col in w.columns() {
            assert!(col.mean().unwrap().abs() < 1e-12);
            assert!((col.dot(&col) / 4.0 - 1.0).abs() < 1e-12);
        }
    }

    #[test]
    fn a_constant_output_has_no_component() {
        let y = vec![vec![2.0, 3.0]; 5];
        let b = Basis::fit(&y, &[0, 0], 0.999);
        assert_eq!(b.n_components(), 0);
        assert_eq!(b.reconstruct(&Array1::zeros(0)), vec![2.0, 3.0]);
        assert_eq!(b.discarded, vec![0.0, 0.0]);
    }
}
