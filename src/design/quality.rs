//! Space-filling quality of a point set in the unit box: pairwise distances, the φp
//! criterion, the centered L2 discrepancy and column correlations.

use ndarray::ArrayView2;
use serde::{Deserialize, Serialize};

/// Exponent p of the φp criterion recorded in `design.yaml` and optimised by the
/// maximin Latin hypercube. Morris & Mitchell (1995) show that for large p, φp orders
/// designs like the maximin distance (with the number of closest pairs as tie-break);
/// 50 is large enough for that and small enough that d^-p stays inside f64 after the
/// scaling in [`phi_p`].
pub const PHI_P: i32 = 50;

/// Quality of a design in its unit box (`design.yaml` key `quality`).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Quality {
    /// Smallest Euclidean distance between two points (larger is better).
    pub min_distance: f64,
    /// φp with p = [`PHI_P`] (smaller is better).
    pub phi_p: f64,
    /// Squared centered L2 discrepancy CD² (smaller is better).
    pub cl2_discrepancy: f64,
    /// Largest absolute Pearson correlation between two columns (smaller is better).
    pub max_abs_correlation: f64,
}

/// All four metrics of the rows of `x` (points in the unit box).
pub fn quality(x: ArrayView2<f64>) -> Quality {
    Quality {
        min_distance: min_distance(x),
        phi_p: phi_p(x, PHI_P),
        cl2_discrepancy: centered_l2_discrepancy(x),
        max_abs_correlation: max_abs_correlation(x),
    }
}

fn dist2(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(u, v)| (u - v) * (u - v)).sum()
}

fn rows(x: ArrayView2<f64>) -> Vec<Vec<f64>> {
    x.rows().into_iter().map(|r| r.to_vec()).collect()
}

/// Smallest Euclidean distance between two rows of `x`; infinity for fewer than two rows.
pub fn min_distance(x: ArrayView2<f64>) -> f64 {
    let r = rows(x);
    let mut best = f64::INFINITY;
    for i in 0..r.len() {
        for j in i + 1..r.len() {
            best = best.min(dist2(&r[i], &r[j]));
        }
    }
    best.sqrt()
}

/// The φp criterion of Morris & Mitchell (1995).
///
/// # Formula
/// φp = (Σ_{i<j} d_ij^(−p))^(1/p), d_ij the Euclidean distance between rows i and j.
/// Evaluated as φp = (1/d_min)·(Σ (d_min/d_ij)^p)^(1/p) so that no term overflows.
/// Zero for fewer than two rows; infinity if two rows coincide.
///
/// # References
/// Morris, M. D. & Mitchell, T. J. (1995). Exploratory designs for computational
/// experiments. Journal of Statistical Planning and Inference 43(3), 381–402.
///
/// # Example
/// ```
/// use ndarray::array;
/// // Two points at distance 0.5: φp = 1/0.5 for every p.
/// let x = array![[0.0, 0.0], [0.3, 0.4]];
/// assert!((assay::design::phi_p(x.view(), 50) - 2.0).abs() < 1e-12);
/// ```
pub fn phi_p(x: ArrayView2<f64>, p: i32) -> f64 {
    let r = rows(x);
    if r.len() < 2 {
        return 0.0;
    }
    let d_min = min_distance(x);
    if d_min == 0.0 {
        return f64::INFINITY;
    }
    let mut s = 0.0;
    for i in 0..r.len() {
        for j in i + 1..r.len() {
            s += (d_min / dist2(&r[i], &r[j]).sqrt()).powi(p);
        }
    }
    s.powf(1.0 / f64::from(p)) / d_min
}

/// Squared centered L2 discrepancy of the rows of `x` (points in [0, 1]^d).
///
/// # Formula
/// With c_ik = |x_ik − ½|:
///
/// CD² = (13/12)^d − (2/n) Σ_i Π_k (1 + c_ik/2 − c_ik²/2)
///       + (1/n²) Σ_i Σ_j Π_k (1 + c_ik/2 + c_jk/2 − |x_ik − x_jk|/2)
///
/// This is the squared value, the number `scipy.stats.qmc.discrepancy(x, method="CD")`
/// returns.
///
/// # References
/// Hickernell, F. J. (1998). A generalized discrepancy and quadrature error bound.
/// Mathematics of Computation 67(221), 299–322.
///
/// # Panics
/// If `x` has no rows.
///
/// # Example
/// ```
/// use ndarray::array;
/// // One point at the centre of [0, 1]: (13/12) − 2 + 1 = 1/12.
/// let x = array![[0.5]];
/// let cd2 = assay::design::centered_l2_discrepancy(x.view());
/// assert!((cd2 - 1.0 / 12.0).abs() < 1e-15);
/// ```
pub fn centered_l2_discrepancy(x: ArrayView2<f64>) -> f64 {
    let (n, d) = x.dim();
    assert!(n > 0, "the discrepancy of an empty set is undefined");
    let r = rows(x);
    let c: Vec<Vec<f64>> = r
        .iter()
        .map(|p| p.iter().map(|v| (v - 0.5).abs()).collect())
        .collect();
    let single: f64 = c
        .iter()
        .map(|ci| {
            ci.iter()
                .map(|v| 1.0 + 0.5 * v - 0.5 * v * v)
                .product::<f64>()
        })
        .sum();
    let mut pair = 0.0;
    for i in 0..n {
        // The pair term is symmetric: diagonal once, off-diagonal twice.
        pair += c[i].iter().map(|v| 1.0 + v).product::<f64>();
        for j in i + 1..n {
            let mut prod = 1.0;
            for k in 0..d {
                prod *= 1.0 + 0.5 * c[i][k] + 0.5 * c[j][k] - 0.5 * (r[i][k] - r[j][k]).abs();
            }
            pair += 2.0 * prod;
        }
    }
    let nf = n as f64;
    (13.0f64 / 12.0).powi(d as i32) - 2.0 / nf * single + pair / (nf * nf)
}

/// Largest absolute Pearson correlation between two columns of `x`; 0 with fewer than
/// two columns or rows, and a constant column counts as uncorrelated.
pub fn max_abs_correlation(x: ArrayView2<f64>) -> f64 {
    let (n, d) = x.dim();
    if n < 2 || d < 2 {
        return 0.0;
    }
    let centred: Vec<Vec<f64>> = (0..d)
        .map(|k| {
            let col = x.column(k);
            let mean = col.sum() / n as f64;
            col.iter().map(|v| v - mean).collect()
        })
        .collect();
    let norms: Vec<f64> = centred
        .iter()
        .map(|c| c.iter().map(|v| v * v).sum::<f64>().sqrt())
        .collect();
    let mut best: f64 = 0.0;
    for a in 0..d {
        for b in a + 1..d {
            if norms[a] == 0.0 || norms[b] == 0.0 {
                continue;
            }
            let dot: f64 = centred[a].iter().zip(&centred[b]).map(|(u, v)| u * v).sum();
            best = best.max((dot / (norms[a] * norms[b])).abs());
        }
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn min_distance_and_correlation_of_a_small_set() {
        let x = array![[0.0, 0.0], [1.0, 1.0], [0.0, 0.5]];
        assert_eq!(min_distance(x.view()), 0.5);
        // Columns (0, 1, 0) and (0, 1, 0.5): r = 0.866...
        let r = max_abs_correlation(x.view());
        assert!((r - 0.75f64.sqrt()).abs() < 1e-12, "{r}");
    }

    #[test]
    fn phi_p_tends_to_one_over_the_min_distance() {
        // Morris & Mitchell (1995): φp → 1/d_min as p → ∞.
        let x = array![[0.1, 0.2], [0.8, 0.3], [0.4, 0.9], [0.45, 0.5]];
        let inv = 1.0 / min_distance(x.view());
        let v = phi_p(x.view(), 400);
        assert!(v >= inv && v < inv * 1.01, "{v} vs {inv}");
    }
}
