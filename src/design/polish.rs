//! Second stage of the maximin Latin hypercube: lower the centered L2 discrepancy by
//! column swaps that never bring two points closer than the maximin stage left them.

use rand::Rng;

/// Designs up to this size keep their n × n pair products and squared distances in
/// memory (2 × 32 MB at the limit); larger ones recompute them from the coordinates.
const MATRIX_MAX_N: usize = 2048;

/// Pair products and row products are recomputed after this many accepted swaps, so
/// that rounding in the running products cannot build up.
const REFRESH_EVERY: usize = 2000;

fn g(c: f64) -> f64 {
    1.0 + 0.5 * c - 0.5 * c * c
}

/// State of the descent on CD² (Hickernell 1998):
/// CD² = (13/12)^d − (2/n) Σ_i s_i + (1/n²) Σ_i Σ_j P_ij with
/// s_i = Π_k g(c_ik), g(c) = 1 + c/2 − c²/2, c_ik = |x_ik − ½|, and
/// P_ij = Π_k (1 + c_ik/2 + c_jk/2 − |x_ik − x_jk|/2). A swap in column k of rows i1
/// and i2 changes one factor of s_i1, s_i2 and of the pair products of i1 and i2 with
/// the other rows, so it is evaluated in O(n) with the products stored.
struct Polisher<'a> {
    x: &'a mut [f64],
    n: usize,
    d: usize,
    single: Vec<f64>,
    pairs: Option<Vec<f64>>,
    d2: Option<Vec<f64>>,
    floor: f64,
    /// Per-proposal scratch: (j, factor of P_i1j, factor of P_i2j, new d2 to i1, to i2).
    changes: Vec<(usize, f64, f64, f64, f64)>,
}

impl<'a> Polisher<'a> {
    fn new(x: &'a mut [f64], n: usize, d: usize, floor: f64) -> Self {
        let big = n > MATRIX_MAX_N;
        let mut p = Self {
            x,
            n,
            d,
            single: vec![0.0; n],
            pairs: (!big).then(|| vec![0.0; n * n]),
            d2: (!big).then(|| vec![0.0; n * n]),
            floor,
            changes: Vec::with_capacity(n),
        };
        p.refresh();
        p
    }

    fn row(&self, i: usize) -> &[f64] {
        &self.x[i * self.d..(i + 1) * self.d]
    }

    fn pair_of(&self, i: usize, j: usize) -> f64 {
        self.row(i)
            .iter()
            .zip(self.row(j))
            .map(|(a, b)| 1.0 + 0.5 * (a - 0.5).abs() + 0.5 * (b - 0.5).abs() - 0.5 * (a - b).abs())
            .product()
    }

    fn dist2_of(&self, i: usize, j: usize) -> f64 {
        self.row(i)
            .iter()
            .zip(self.row(j))
            .map(|(a, b)| (a - b) * (a - b))
            .sum()
    }

    fn pair(&self, i: usize, j: usize) -> f64 {
        match &self.pairs {
            Some(m) => m[i * self.n + j],
            None => self.pair_of(i, j),
        }
    }

    fn dist2(&self, i: usize, j: usize) -> f64 {
        match &self.d2 {
            Some(m) => m[i * self.n + j],
            None => self.dist2_of(i, j),
        }
    }

    fn refresh(&mut self) {
        let n = self.n;
        for i in 0..n {
            self.single[i] = self.row(i).iter().map(|v| g((v - 0.5).abs())).product();
        }
        if let (Some(mut pm), Some(mut dm)) = (self.pairs.take(), self.d2.take()) {
            for i in 0..n {
                for j in i..n {
                    let (p, q) = (self.pair_of(i, j), self.dist2_of(i, j));
                    pm[i * n + j] = p;
                    pm[j * n + i] = p;
                    dm[i * n + j] = q;
                    dm[j * n + i] = q;
                }
            }
            self.pairs = Some(pm);
            self.d2 = Some(dm);
        }
    }

    /// Change of n² CD² if column k of rows i1 and i2 were swapped; `None` if the swap
    /// would bring two points closer than the floor.
    fn propose(&mut self, i1: usize, i2: usize, k: usize) -> Option<f64> {
        let (n, d) = (self.n, self.d);
        let (a, b) = (self.x[i1 * d + k], self.x[i2 * d + k]);
        let (ca, cb) = ((a - 0.5).abs(), (b - 0.5).abs());
        self.changes.clear();
        let mut off = 0.0;
        for j in 0..n {
            if j == i1 || j == i2 {
                continue;
            }
            let xj = self.x[j * d + k];
            let (da, db) = ((a - xj) * (a - xj), (b - xj) * (b - xj));
            let n1 = self.dist2(i1, j) - da + db;
            let n2 = self.dist2(i2, j) - db + da;
            if n1 < self.floor || n2 < self.floor {
                return None;
            }
            let cj = (xj - 0.5).abs();
            let ka = 1.0 + 0.5 * ca + 0.5 * cj - 0.5 * (a - xj).abs();
            let kb = 1.0 + 0.5 * cb + 0.5 * cj - 0.5 * (b - xj).abs();
            // Every factor is at least 1/2, so the ratios are safe.
            let (f1, f2) = (kb / ka, ka / kb);
            off += self.pair(i1, j) * (f1 - 1.0) + self.pair(i2, j) * (f2 - 1.0);
            self.changes.push((j, f1, f2, n1, n2));
        }
        let (ga, gb) = (g(ca), g(cb));
        let d_single = self.single[i1] * (gb / ga - 1.0) + self.single[i2] * (ga / gb - 1.0);
        let d_diag = self.pair(i1, i1) * ((1.0 + cb) / (1.0 + ca) - 1.0)
            + self.pair(i2, i2) * ((1.0 + ca) / (1.0 + cb) - 1.0);
        Some(-2.0 * n as f64 * d_single + d_diag + 2.0 * off)
    }

    fn accept(&mut self, i1: usize, i2: usize, k: usize) {
        let (n, d) = (self.n, self.d);
        let (a, b) = (self.x[i1 * d + k], self.x[i2 * d + k]);
        let (ca, cb) = ((a - 0.5).abs(), (b - 0.5).abs());
        let (ga, gb) = (g(ca), g(cb));
        self.single[i1] *= gb / ga;
        self.single[i2] *= ga / gb;
        if let (Some(pm), Some(dm)) = (self.pairs.as_mut(), self.d2.as_mut()) {
            pm[i1 * n + i1] *= (1.0 + cb) / (1.0 + ca);
            pm[i2 * n + i2] *= (1.0 + ca) / (1.0 + cb);
            for &(j, f1, f2, n1, n2) in &self.changes {
                let p1 = pm[i1 * n + j] * f1;
                let p2 = pm[i2 * n + j] * f2;
                pm[i1 * n + j] = p1;
                pm[j * n + i1] = p1;
                pm[i2 * n + j] = p2;
                pm[j * n + i2] = p2;
                dm[i1 * n + j] = n1;
                dm[j * n + i1] = n1;
                dm[i2 * n + j] = n2;
                dm[j * n + i2] = n2;
            }
        }
        self.x.swap(i1 * d + k, i2 * d + k);
    }
}

/// Greedy descent on the centered L2 discrepancy by `proposals` random column swaps of
/// the n × d row-major design `x`, accepting a swap only when it lowers CD² and keeps
/// every squared distance ≥ `floor`. Returns the number of accepted swaps.
///
/// # References
/// Hickernell, F. J. (1998). A generalized discrepancy and quadrature error bound.
/// Mathematics of Computation 67(221), 299–322.
pub fn polish_discrepancy<R: Rng + ?Sized>(
    x: &mut [f64],
    n: usize,
    d: usize,
    floor: f64,
    proposals: usize,
    rng: &mut R,
) -> usize {
    if n < 3 || d < 2 {
        return 0;
    }
    let mut p = Polisher::new(x, n, d, floor);
    let mut accepted = 0;
    for _ in 0..proposals {
        let i1 = rng.gen_range(0..n);
        let mut i2 = rng.gen_range(0..n - 1);
        if i2 >= i1 {
            i2 += 1;
        }
        let k = rng.gen_range(0..d);
        if let Some(delta) = p.propose(i1, i2, k) {
            if delta < 0.0 {
                p.accept(i1, i2, k);
                accepted += 1;
                if accepted % REFRESH_EVERY == 0 {
                    p.refresh();
                }
            }
        }
    }
    accepted
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::design::{centered_l2_discrepancy, latin_hypercube, min_distance};
    use ndarray::Array2;

    #[test]
    fn the_descent_lowers_the_discrepancy_and_keeps_the_floor() {
        let mut rng = crate::rng::stream(8, 0);
        let start = latin_hypercube(40, 4, &mut rng);
        let floor = min_distance(start.view()).powi(2);
        let mut x = start.as_slice().unwrap().to_vec();
        let acc = polish_discrepancy(&mut x, 40, 4, floor, 5000, &mut rng);
        let end = Array2::from_shape_vec((40, 4), x).unwrap();
        assert!(acc > 0);
        assert!(centered_l2_discrepancy(end.view()) < centered_l2_discrepancy(start.view()));
        assert!(min_distance(end.view()).powi(2) >= floor);
    }
}
