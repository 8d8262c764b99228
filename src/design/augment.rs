//! Choosing new points among candidates: spread out with respect to the points a design
//! already has.

use super::lhs::random_uniform;
use ndarray::{Array2, ArrayView2};
use rand::Rng;

fn dist2(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(u, v)| (u - v) * (u - v)).sum()
}

fn rows(x: ArrayView2<f64>) -> Vec<Vec<f64>> {
    x.rows().into_iter().map(|r| r.to_vec()).collect()
}

/// Pick `n` of the `candidates` (rows), each as far as possible from the `existing`
/// points and from those picked before it: greedy maximin.
///
/// # Formula
/// Repeat n times: choose the candidate c maximising min_{y ∈ existing ∪ picked} ‖c − y‖
/// (Euclidean, in the coordinates given: pass points scaled to the unit box so that
/// every parameter counts alike). With no existing points the first pick is a uniformly
/// random candidate. Ties go to the lower index. O(m (e + n) d) for m candidates and
/// e existing points.
///
/// Returns the indices of the picked candidates, in the order picked. Greedy maximin
/// favours the candidates on the outside of the cloud: it spreads the picks over the
/// candidates' whole extent.
///
/// # References
/// Johnson, M. E., Moore, L. M. & Ylvisaker, D. (1990). Minimax and maximin distance
/// designs. Journal of Statistical Planning and Inference 26(2), 131–148 (the maximin
/// criterion; the greedy sequential form is the usual way to apply it to a candidate set).
///
/// # Panics
/// If `n` exceeds the number of candidates, or the column counts differ while there
/// are existing points.
///
/// # Example
/// ```
/// use ndarray::array;
/// let candidates = array![[0.1, 0.1], [0.5, 0.5], [0.9, 0.9], [0.12, 0.1]];
/// let existing = array![[0.0, 0.0]];
/// let mut rng = assay::rng::stream(1, 0);
/// let picked = assay::design::pick_spread(candidates.view(), existing.view(), 2, &mut rng);
/// assert_eq!(picked, vec![2, 1]);
/// ```
pub fn pick_spread<R: Rng + ?Sized>(
    candidates: ArrayView2<f64>,
    existing: ArrayView2<f64>,
    n: usize,
    rng: &mut R,
) -> Vec<usize> {
    let m = candidates.nrows();
    assert!(n <= m, "cannot pick {n} of {m} candidates");
    assert!(
        existing.nrows() == 0 || existing.ncols() == candidates.ncols(),
        "candidates and existing points have different dimensions"
    );
    let cand = rows(candidates);
    let mut nearest: Vec<f64> = cand
        .iter()
        .map(|c| {
            existing
                .rows()
                .into_iter()
                .map(|e| dist2(c, e.as_slice().expect("row")))
                .fold(f64::INFINITY, f64::min)
        })
        .collect();
    let mut picked = Vec::with_capacity(n);
    for _ in 0..n {
        let best = if existing.nrows() == 0 && picked.is_empty() {
            rng.gen_range(0..m)
        } else {
            argmax(&nearest)
        };
        picked.push(best);
        let chosen = cand[best].clone();
        for (c, near) in cand.iter().zip(nearest.iter_mut()) {
            *near = near.min(dist2(c, &chosen));
        }
        nearest[best] = f64::NEG_INFINITY;
    }
    picked
}

fn argmax(v: &[f64]) -> usize {
    let mut best = 0;
    for (i, x) in v.iter().enumerate() {
        if *x > v[best] {
            best = i;
        }
    }
    best
}

/// Candidates drawn per new point, and bounds on their number: enough that the
/// screened maximin choice below has good options, few enough to stay fast
/// (the cost is O(candidates × (existing + new) × d)).
const CANDIDATES_PER_POINT: usize = 100;
const MIN_CANDIDATES: usize = 1000;
const MAX_CANDIDATES: usize = 20_000;

/// Fraction of the candidates, those that raise the discrepancy least, among which the
/// maximin choice is made.
const SCREEN: f64 = 0.1;

/// `n` new points in the unit box that fill the gaps left by `existing` (rows).
///
/// # Formula
/// Draw m uniform candidates (m = 100 n, between 1,000 and 20,000). Then n times: rank
/// the candidates by the squared centered L2 discrepancy (Hickernell 1998) of
/// existing ∪ picked ∪ {c}, keep the tenth (`SCREEN`) that raise it least, and pick
/// among those the one farthest from all points (maximin). Plain greedy maximin would
/// pick corners of the box first — in 5 or more dimensions the corners are the points
/// farthest from any design — and so make the union *less* uniform than random points
/// would; the discrepancy screen keeps the new points where the design is thin. Each
/// step is O(m d) with running sums.
///
/// # References
/// Hickernell, F. J. (1998). Mathematics of Computation 67(221), 299–322.
/// Morris, M. D. & Mitchell, T. J. (1995). Journal of Statistical Planning and
/// Inference 43(3), 381–402.
///
/// # Panics
/// If `existing` has no rows.
pub fn fill_gaps<R: Rng + ?Sized>(existing: ArrayView2<f64>, n: usize, rng: &mut R) -> Array2<f64> {
    let (e, d) = existing.dim();
    assert!(e > 0, "fill_gaps needs existing points");
    let m = (CANDIDATES_PER_POINT * n)
        .clamp(MIN_CANDIDATES, MAX_CANDIDATES)
        .max(n);
    let cand = rows(random_uniform(m, d, rng).view());
    let ex = rows(existing);
    let centre = |p: &[f64]| -> Vec<f64> { p.iter().map(|v| (v - 0.5).abs()).collect() };
    let single = |c: &[f64]| -> f64 { c.iter().map(|v| 1.0 + 0.5 * v - 0.5 * v * v).product() };
    let kernel = |x: &[f64], cx: &[f64], y: &[f64], cy: &[f64]| -> f64 {
        (0..d)
            .map(|k| 1.0 + 0.5 * cx[k] + 0.5 * cy[k] - 0.5 * (x[k] - y[k]).abs())
            .product()
    };
    let cand_c: Vec<Vec<f64>> = cand.iter().map(|p| centre(p)).collect();
    // Per candidate: its own single and diagonal terms, Σ of its kernel with every
    // point so far, and its squared distance to the nearest point so far.
    let own: Vec<(f64, f64)> = cand_c
        .iter()
        .map(|c| (single(c), c.iter().map(|v| 1.0 + v).product()))
        .collect();
    let mut cross = vec![0.0; m];
    let mut nearest = vec![f64::INFINITY; m];
    let add_point = |p: &[f64], cross: &mut [f64], nearest: &mut [f64]| {
        let cp = centre(p);
        for i in 0..m {
            cross[i] += kernel(&cand[i], &cand_c[i], p, &cp);
            nearest[i] = nearest[i].min(dist2(&cand[i], p));
        }
    };
    for p in &ex {
        add_point(p, &mut cross, &mut nearest);
    }
    let mut taken = vec![false; m];
    let mut out = Array2::zeros((n, d));
    for row in 0..n {
        // CD² of the union with candidate i, up to terms equal for every candidate.
        // Points in the union if candidate i is added: the existing, those picked, i.
        let size = (e + row + 1) as f64;
        let score: Vec<f64> = (0..m)
            .map(|i| {
                if taken[i] {
                    f64::INFINITY
                } else {
                    -2.0 / size * own[i].0 + (2.0 * cross[i] + own[i].1) / (size * size)
                }
            })
            .collect();
        let free = m - row;
        let keep = ((free as f64 * SCREEN).ceil() as usize).clamp(1, free);
        let mut sorted = score.clone();
        let (_, cut, _) = sorted.select_nth_unstable_by(keep - 1, f64::total_cmp);
        let cut = *cut;
        let mut best: Option<usize> = None;
        for i in 0..m {
            if !taken[i] && score[i] <= cut && best.is_none_or(|b| nearest[i] > nearest[b]) {
                best = Some(i);
            }
        }
        let b = best.expect("a free candidate");
        taken[b] = true;
        out.row_mut(row)
            .iter_mut()
            .zip(&cand[b])
            .for_each(|(o, v)| *o = *v);
        let p = cand[b].clone();
        add_point(&p, &mut cross, &mut nearest);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::design::{centered_l2_discrepancy, latin_hypercube};
    use ndarray::{concatenate, Axis};

    #[test]
    fn pick_spread_takes_the_far_candidates_first() {
        let c = ndarray::array![[0.5], [0.0], [1.0], [0.25], [0.75]];
        let e = ndarray::array![[0.5]];
        let mut rng = crate::rng::stream(1, 0);
        let p = pick_spread(c.view(), e.view(), 4, &mut rng);
        assert_eq!(p, vec![1, 2, 3, 4]);
    }

    #[test]
    fn fill_gaps_beats_random_points_on_discrepancy_in_one_case() {
        let mut rng = crate::rng::stream(4, 0);
        let x = latin_hypercube(20, 5, &mut rng);
        let add = fill_gaps(x.view(), 10, &mut rng);
        let rnd = random_uniform(10, 5, &mut rng);
        let a = centered_l2_discrepancy(concatenate![Axis(0), x, add].view());
        let b = centered_l2_discrepancy(concatenate![Axis(0), x, rnd].view());
        assert!(a < b, "{a} vs {b}");
    }
}
