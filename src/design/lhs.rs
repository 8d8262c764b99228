//! Latin hypercubes: plain (McKay et al. 1979) and maximin by simulated annealing on
//! the φp criterion (Morris & Mitchell 1995); independent uniform points.

use super::polish::polish_discrepancy;
use super::quality::{min_distance, phi_p, PHI_P};
use ndarray::{Array2, ArrayView2};
use rand::seq::SliceRandom;
use rand::Rng;
use serde::{Deserialize, Serialize};

/// Latin hypercube of `n` points in `d` dimensions in the unit box.
///
/// # Formula
/// For each dimension j an independent random permutation π_j of 0..n;
/// x_ij = (π_j(i) + u_ij) / n with u_ij ~ U(0, 1). Each of the n equal strata of every
/// dimension holds exactly one point.
///
/// # References
/// McKay, M. D., Beckman, R. J. & Conover, W. J. (1979). A comparison of three methods
/// for selecting values of input variables in the analysis of output from a computer
/// code. Technometrics 21(2), 239–245.
///
/// # Example
/// ```
/// use rand::SeedableRng;
/// let mut rng = rand_chacha::ChaCha20Rng::seed_from_u64(1);
/// let x = assay::design::latin_hypercube(5, 2, &mut rng);
/// let mut strata: Vec<usize> = x.column(0).iter().map(|v| (v * 5.0) as usize).collect();
/// strata.sort();
/// assert_eq!(strata, vec![0, 1, 2, 3, 4]);
/// ```
pub fn latin_hypercube<R: Rng + ?Sized>(n: usize, d: usize, rng: &mut R) -> Array2<f64> {
    let mut x = Array2::zeros((n, d));
    let mut perm: Vec<usize> = (0..n).collect();
    for j in 0..d {
        perm.shuffle(rng);
        for i in 0..n {
            let u: f64 = rng.gen();
            x[[i, j]] = (perm[i] as f64 + u) / n as f64;
        }
    }
    x
}

/// `n` independent uniform points in the unit box of dimension `d`.
pub fn random_uniform<R: Rng + ?Sized>(n: usize, d: usize, rng: &mut R) -> Array2<f64> {
    Array2::from_shape_fn((n, d), |_| rng.gen())
}

/// Settings of the maximin search ([`maximin_latin_hypercube`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MaximinParams {
    /// Exponent p of φp; even. Default [`PHI_P`].
    pub p: i32,
    /// Swaps proposed by the annealing on φp. Default [`default_proposals`].
    pub proposals: usize,
    /// Swaps proposed by the second stage, the descent on the centered L2 discrepancy
    /// that keeps the minimum distance. Default [`default_polish`]; 0 skips it.
    pub polish: usize,
}

impl MaximinParams {
    /// The defaults for `n` points in `d` dimensions.
    pub fn new(n: usize, d: usize) -> Self {
        Self {
            p: PHI_P,
            proposals: default_proposals(n, d),
            polish: default_polish(n, d),
        }
    }
}

/// Proposals per point and dimension: the cap for small designs, where the search has
/// levelled off by then.
const PROPOSALS_PER_POINT_DIM: usize = 1000;

/// Work caps: a proposal costs about n operations, so n × proposals stays under these
/// (1,000 × 8 then takes about 1.5 s of one core in a release build, both stages).
const WORK_ANNEAL: usize = 60_000_000;
const WORK_POLISH: usize = 100_000_000;

/// Designs up to this size keep their n × n squared distances in memory (32 MB);
/// larger ones recompute distances from the coordinates.
const MATRIX_MAX_N: usize = 2048;

/// Pairs farther apart than this multiple of the squared scale distance (twice the
/// distance) contribute less than 4^-25 ≈ 1e-15 of the closest pair's term to φp^p
/// (for p = 50) and are skipped.
const FAR: f64 = 4.0;

/// Rescale when φp^p in units of the scale falls below this, i.e. when the closest pair
/// is more than 1.15 times the scale distance apart: the skipped far pairs then stay
/// below 1e-12 of the total each.
const RESCALE_BELOW: f64 = 1e-3;

/// The scale distance and the full sums are recomputed after this many proposals, so
/// that rounding in the running sums cannot build up.
const REFRESH_EVERY: usize = 5000;

/// Final temperature as a fraction of the initial one (geometric cooling).
const COOLING: f64 = 1e-3;

/// Default number of swaps proposed to the annealing on φp for `n` points in `d`
/// dimensions: 1,000 n d, capped so that n × proposals stays under a fixed amount of work.
pub fn default_proposals(n: usize, d: usize) -> usize {
    (PROPOSALS_PER_POINT_DIM * n * d).min(WORK_ANNEAL / n.max(1))
}

/// Default number of swaps proposed to the discrepancy stage, as [`default_proposals`]
/// with its own work cap.
pub fn default_polish(n: usize, d: usize) -> usize {
    (PROPOSALS_PER_POINT_DIM * n * d).min(WORK_POLISH / n.max(1))
}

/// What the maximin search did (`design.yaml`: `rounds[0].search`).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct SearchReport {
    /// Exponent of the criterion.
    pub p: i32,
    /// Swaps proposed and accepted.
    pub proposals: usize,
    pub accepted: usize,
    /// Swaps proposed and accepted by the discrepancy stage.
    pub polish_proposals: usize,
    pub polish_accepted: usize,
    /// φp of the starting random Latin hypercube and of the result.
    pub phi_p_start: f64,
    pub phi_p_end: f64,
}

/// A maximin Latin hypercube: a random one improved by swapping two values within a
/// column, under simulated annealing on φp.
///
/// # Formula
/// Minimises φp = (Σ_{i<j} d_ij^(−p))^(1/p) (Morris & Mitchell 1995) over the Latin
/// hypercubes with the starting one's column values. A proposal swaps x_(i1,k) and
/// x_(i2,k): only pairs that hold i1 or i2 change, so it costs O(n). Row i1 is drawn
/// with probability proportional to its share of φp^p half of the time (the rows of
/// the closest pairs) and uniformly otherwise; i2 and k uniformly. A proposal that
/// changes ln φp by δ is accepted with probability min(1, exp(−δ/T)), T falling
/// geometrically from the mean uphill δ of trial proposals to 10⁻³ times that; the best
/// design visited is kept.
///
/// A second stage then lowers the squared centered L2 discrepancy CD² (Hickernell 1998)
/// by greedy column swaps that never bring two points closer than the first stage's
/// minimum distance: the maximin distance is kept exactly while the projections become
/// more even (on 1,000 × 8 it lowers CD² about threefold; φp rises by a few per cent).
/// Swaps keep every value in its stratum, so the result is still a Latin hypercube.
///
/// # References
/// Morris, M. D. & Mitchell, T. J. (1995). Exploratory designs for computational
/// experiments. Journal of Statistical Planning and Inference 43(3), 381–402.
/// McKay, M. D., Beckman, R. J. & Conover, W. J. (1979). Technometrics 21(2), 239–245.
/// Hickernell, F. J. (1998). A generalized discrepancy and quadrature error bound.
/// Mathematics of Computation 67(221), 299–322.
///
/// # Panics
/// If `params.p` is not a positive even number.
///
/// # Example
/// ```
/// use assay::design::{latin_hypercube, maximin_latin_hypercube, min_distance, MaximinParams};
/// let plain = latin_hypercube(20, 3, &mut assay::rng::stream(5, 0));
/// let (best, report) =
///     maximin_latin_hypercube(20, 3, &MaximinParams::new(20, 3), &mut assay::rng::stream(5, 0));
/// assert!(min_distance(best.view()) > min_distance(plain.view()));
/// assert!(report.phi_p_end < report.phi_p_start);
/// ```
pub fn maximin_latin_hypercube<R: Rng + ?Sized>(
    n: usize,
    d: usize,
    params: &MaximinParams,
    rng: &mut R,
) -> (Array2<f64>, SearchReport) {
    assert!(
        params.p > 0 && params.p % 2 == 0,
        "the exponent of phi_p must be positive and even"
    );
    let start = latin_hypercube(n, d, rng);
    let phi_start = phi_p(start.view(), params.p);
    // With 2 points or 1 dimension every swap gives the same point set.
    if n < 3 || d < 2 || params.proposals == 0 {
        let report = SearchReport {
            p: params.p,
            proposals: 0,
            accepted: 0,
            polish_proposals: 0,
            polish_accepted: 0,
            phi_p_start: phi_start,
            phi_p_end: phi_start,
        };
        return (start, report);
    }
    let mut s = Annealer::new(
        start.as_slice().expect("standard layout").to_vec(),
        n,
        d,
        params.p,
    );
    let (mut best, accepted) = s.run(params.proposals, rng);
    let floor = min_distance(ArrayView2::from_shape((n, d), &best).expect("n × d values")).powi(2);
    let polish_accepted = polish_discrepancy(&mut best, n, d, floor, params.polish, rng);
    let x = Array2::from_shape_vec((n, d), best).expect("n × d values");
    let report = SearchReport {
        p: params.p,
        proposals: params.proposals,
        accepted,
        polish_proposals: params.polish,
        polish_accepted,
        phi_p_start: phi_start,
        phi_p_end: phi_p(x.view(), params.p),
    };
    (x, report)
}

/// State of the φp search. Terms are t_ij = (s2 / d2_ij)^(p/2), scaled by the squared
/// distance s2 of the closest pair at the last refresh so that they stay near 1.
struct Annealer {
    x: Vec<f64>,
    n: usize,
    d: usize,
    half_p: i32,
    /// Squared distances, row-major n × n, when n ≤ MATRIX_MAX_N.
    d2: Option<Vec<f64>>,
    s2: f64,
    /// Row sums of the terms, and their total over pairs (φp^p in units of s2^(−p/2)).
    rows: Vec<f64>,
    total: f64,
    /// Per-proposal scratch: (j, new d2 to i1, new d2 to i2, change of t_i1j, change of t_i2j).
    changes: Vec<(usize, f64, f64, f64, f64)>,
}

impl Annealer {
    fn new(x: Vec<f64>, n: usize, d: usize, p: i32) -> Self {
        let mut a = Self {
            x,
            n,
            d,
            half_p: p / 2,
            d2: (n <= MATRIX_MAX_N).then(|| vec![0.0; n * n]),
            s2: 1.0,
            rows: vec![0.0; n],
            total: 0.0,
            changes: Vec::with_capacity(n),
        };
        a.refresh();
        a
    }

    fn dist2_of(&self, i: usize, j: usize) -> f64 {
        let (a, b) = (
            &self.x[i * self.d..(i + 1) * self.d],
            &self.x[j * self.d..(j + 1) * self.d],
        );
        a.iter().zip(b).map(|(u, v)| (u - v) * (u - v)).sum()
    }

    fn dist2(&self, i: usize, j: usize) -> f64 {
        match &self.d2 {
            Some(m) => m[i * self.n + j],
            None => self.dist2_of(i, j),
        }
    }

    fn term(&self, d2: f64) -> f64 {
        if d2 > FAR * self.s2 {
            0.0
        } else {
            pow_int(self.s2 / d2, self.half_p)
        }
    }

    /// Recompute distances, the scale and the sums from the coordinates.
    fn refresh(&mut self) {
        let n = self.n;
        let mut min = f64::INFINITY;
        if let Some(mut m) = self.d2.take() {
            for i in 0..n {
                for j in i + 1..n {
                    let v = self.dist2_of(i, j);
                    m[i * n + j] = v;
                    m[j * n + i] = v;
                    min = min.min(v);
                }
            }
            self.d2 = Some(m);
        } else {
            for i in 0..n {
                for j in i + 1..n {
                    min = min.min(self.dist2_of(i, j));
                }
            }
        }
        // Coinciding points (probability zero with jittered strata) would make every
        // term infinite; a tiny positive scale keeps the arithmetic finite.
        self.s2 = min.max(f64::MIN_POSITIVE);
        self.recompute_sums();
    }

    /// Row sums and total from the distances, at the current scale.
    fn recompute_sums(&mut self) {
        let n = self.n;
        self.rows.iter_mut().for_each(|r| *r = 0.0);
        self.total = 0.0;
        for i in 0..n {
            for j in i + 1..n {
                let t = self.term(self.dist2(i, j));
                self.rows[i] += t;
                self.rows[j] += t;
                self.total += t;
            }
        }
    }

    /// ln φp of the current design.
    fn ln_phi(&self, total: f64) -> f64 {
        total.ln() / f64::from(2 * self.half_p) - 0.5 * self.s2.ln()
    }

    fn pick_row<R: Rng + ?Sized>(&self, rng: &mut R) -> usize {
        if rng.gen::<bool>() {
            return rng.gen_range(0..self.n);
        }
        let sum: f64 = self.rows.iter().map(|r| r.max(0.0)).sum();
        if sum.is_finite() && sum > 0.0 {
            let mut target = rng.gen::<f64>() * sum;
            for (i, r) in self.rows.iter().enumerate() {
                target -= r.max(0.0);
                if target <= 0.0 {
                    return i;
                }
            }
        }
        rng.gen_range(0..self.n)
    }

    /// Evaluate swapping column k of rows i1 and i2: the new total, with the changes
    /// left in `self.changes`. `None` when a term would overflow.
    fn propose(&mut self, i1: usize, i2: usize, k: usize) -> Option<f64> {
        let d = self.d;
        let (a, b) = (self.x[i1 * d + k], self.x[i2 * d + k]);
        self.changes.clear();
        let mut delta = 0.0;
        for j in 0..self.n {
            if j == i1 || j == i2 {
                continue;
            }
            let xj = self.x[j * d + k];
            let (da, db) = ((a - xj) * (a - xj), (b - xj) * (b - xj));
            let (o1, o2) = (self.dist2(i1, j), self.dist2(i2, j));
            let (n1, n2) = (o1 - da + db, o2 - db + da);
            let far = FAR * self.s2;
            if o1 > far && o2 > far && n1 > far && n2 > far {
                self.changes.push((j, n1, n2, 0.0, 0.0));
                continue;
            }
            let c1 = self.term(n1) - self.term(o1);
            let c2 = self.term(n2) - self.term(o2);
            if !(c1.is_finite() && c2.is_finite()) {
                return None;
            }
            delta += c1 + c2;
            self.changes.push((j, n1, n2, c1, c2));
        }
        Some(self.total + delta)
    }

    /// Apply the proposal evaluated last.
    fn accept(&mut self, i1: usize, i2: usize, k: usize, total: f64) {
        let (d, n) = (self.d, self.n);
        self.x.swap(i1 * d + k, i2 * d + k);
        let mut r1 = 0.0;
        let mut r2 = 0.0;
        let t12 = self.term(self.dist2(i1, i2));
        for &(j, n1, n2, c1, c2) in &self.changes {
            if let Some(m) = self.d2.as_mut() {
                m[i1 * n + j] = n1;
                m[j * n + i1] = n1;
                m[i2 * n + j] = n2;
                m[j * n + i2] = n2;
            }
            self.rows[j] += c1 + c2;
            r1 += self.term(n1);
            r2 += self.term(n2);
        }
        self.rows[i1] = r1 + t12;
        self.rows[i2] = r2 + t12;
        self.total = total;
    }

    /// Simulated annealing for `proposals` steps; the best coordinates and the number
    /// of accepted swaps.
    fn run<R: Rng + ?Sized>(&mut self, proposals: usize, rng: &mut R) -> (Vec<f64>, usize) {
        let (n, d) = (self.n, self.d);
        let draw = |s: &Self, rng: &mut R| {
            let i1 = s.pick_row(rng);
            let mut i2 = rng.gen_range(0..n - 1);
            if i2 >= i1 {
                i2 += 1;
            }
            (i1, i2, rng.gen_range(0..d))
        };
        // Initial temperature: the mean uphill change of ln φp over trial proposals.
        let base = self.ln_phi(self.total);
        let mut uphill = Vec::new();
        for _ in 0..TRIALS {
            let (i1, i2, k) = draw(self, rng);
            if let Some(t) = self.propose(i1, i2, k) {
                let delta = self.ln_phi(t) - base;
                if delta > 0.0 && delta.is_finite() {
                    uphill.push(delta);
                }
            }
        }
        let t0 = if uphill.is_empty() {
            f64::MIN_POSITIVE
        } else {
            uphill.iter().sum::<f64>() / uphill.len() as f64
        };
        let mut best = self.x.clone();
        let mut best_ln = base;
        let mut accepted = 0;
        for it in 0..proposals {
            if it > 0 && it % REFRESH_EVERY == 0 {
                self.refresh();
            }
            let temp = t0 * COOLING.powf(it as f64 / proposals as f64);
            let (i1, i2, k) = draw(self, rng);
            let Some(total) = self.propose(i1, i2, k) else {
                continue;
            };
            let delta = self.ln_phi(total) - self.ln_phi(self.total);
            if delta <= 0.0 || rng.gen::<f64>() < (-delta / temp).exp() {
                self.accept(i1, i2, k, total);
                accepted += 1;
                if self.total < RESCALE_BELOW {
                    // The closest pair has moved away from the scale distance: rescale,
                    // so that the pairs skipped as far stay negligible.
                    self.refresh();
                }
                let now = self.ln_phi(self.total);
                if now < best_ln {
                    best_ln = now;
                    best.copy_from_slice(&self.x);
                }
            }
        }
        (best, accepted)
    }
}

/// x^e; the default exponent (p/2 = 25) unrolled, since `powi` with an exponent known
/// only at run time is a library call and this is the inner loop.
fn pow_int(x: f64, e: i32) -> f64 {
    if e == 25 {
        let x2 = x * x;
        let x4 = x2 * x2;
        let x8 = x4 * x4;
        let x16 = x8 * x8;
        x16 * x8 * x
    } else {
        x.powi(e)
    }
}

/// Trial proposals that set the initial temperature.
const TRIALS: usize = 200;

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        // Stratification (McKay et al. 1979): every stratum of every dimension holds one point.
        #[test]
        fn one_point_per_stratum(n in 1usize..60, d in 1usize..8, seed in any::<u64>()) {
            let mut rng = crate::rng::stream(seed, 0);
            let x = latin_hypercube(n, d, &mut rng);
            for j in 0..d {
                let mut strata: Vec<usize> = x.column(j).iter().map(|v| (v * n as f64).floor() as usize).collect();
                strata.sort_unstable();
                prop_assert_eq!(strata, (0..n).collect::<Vec<_>>());
            }
        }

        // The maximin search only swaps values within columns: still one point per stratum.
        #[test]
        fn maximin_keeps_one_point_per_stratum(n in 1usize..40, d in 1usize..6, seed in any::<u64>()) {
            let mut rng = crate::rng::stream(seed, 0);
            let params = MaximinParams { p: PHI_P, proposals: 2000, polish: 2000 };
            let (x, _) = maximin_latin_hypercube(n, d, &params, &mut rng);
            for j in 0..d {
                let mut strata: Vec<usize> = x.column(j).iter().map(|v| (v * n as f64).floor() as usize).collect();
                strata.sort_unstable();
                prop_assert_eq!(strata, (0..n).collect::<Vec<_>>());
            }
        }
    }

    #[test]
    fn running_sums_match_a_fresh_computation() {
        let mut rng = crate::rng::stream(11, 0);
        let x = latin_hypercube(30, 4, &mut rng);
        let mut a = Annealer::new(x.as_slice().unwrap().to_vec(), 30, 4, PHI_P);
        a.run(3000, &mut rng);
        let (rows, total) = (a.rows.clone(), a.total);
        a.recompute_sums();
        // Thousands of incremental updates: rounding only.
        const RTOL: f64 = 1e-9;
        for (r, f) in rows.iter().zip(&a.rows) {
            assert!((r - f).abs() <= RTOL * a.total, "{r} vs {f}");
        }
        assert!(
            (total - a.total).abs() <= RTOL * a.total,
            "{total} vs {}",
            a.total
        );
        assert!(a.total >= RESCALE_BELOW);
    }

    #[test]
    fn the_search_returns_a_better_design() {
        let mut rng = crate::rng::stream(2, 0);
        let (x, r) = maximin_latin_hypercube(25, 3, &MaximinParams::new(25, 3), &mut rng);
        assert!(r.phi_p_end < r.phi_p_start);
        assert!(r.accepted > 0);
        assert!(1.0 / min_distance(x.view()) <= r.phi_p_end * (1.0 + 1e-12));
    }
}
