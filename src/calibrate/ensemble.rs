//! The affine-invariant ensemble sampler with the stretch move (Goodman & Weare 2010).
//!
//! W walkers move in the unconstrained space of [`LogPosterior`]. The ensemble is split
//! into two halves; each walker k of one half proposes Y = X_j + s (X_k − X_j), with j a
//! walker of the other half drawn uniformly and s drawn from g(s) ∝ 1/√s on [1/a, a],
//! and accepts with probability min(1, s^(d−1) p(Y)/p(X_k)). While one half moves, the
//! other stays fixed, so the walkers of a half are updated in parallel. Each walker has
//! its own random stream (stream k of the seed), so the draws do not depend on the
//! number of threads. Warm-up iterations are discarded; every walker is reported as one
//! chain (their draws are correlated across walkers, which R-hat and ESS do not see:
//! common practice, and the reason the default sampler stays adaptive Metropolis).
//!
//! # References
//! Goodman, J. & Weare, J. (2010), Ensemble samplers with affine invariance, Commun.
//! Appl. Math. Comput. Sci. 5(1), 65–80 (stretch move, eq. 7–10; a = 2).
//! Foreman-Mackey, D., Hogg, D. W., Lang, D. & Goodman, J. (2013), PASP 125, 306–312
//! (the parallel two-half update, Algorithm 3).

use super::chain::{initial_point, next_target, Chain, SamplerParams, Termination};
use super::posterior::LogPosterior;
use crate::progress::Observer;
use rand::Rng;
use rayon::prelude::*;
use std::sync::atomic::{AtomicBool, Ordering};

/// The stretch scale a of Goodman & Weare (2010), their recommended value.
pub const STRETCH: f64 = 2.0;

/// Default walkers for a state of dimension `dim`: max(2·dim + 2, 8), even.
pub fn default_walkers(dim: usize) -> usize {
    let w = (2 * dim + 2).max(8);
    w + w % 2
}

/// Draw s from g(s) ∝ 1/√s on [1/a, a] by inversion: s = ((a − 1) u + 1)² / a.
pub fn stretch_factor<R: Rng + ?Sized>(rng: &mut R, a: f64) -> f64 {
    let u: f64 = rng.gen();
    ((a - 1.0) * u + 1.0).powi(2) / a
}

struct Walker {
    rng: rand_chacha::ChaCha20Rng,
    z: Vec<f64>,
    lp: f64,
    accepted: usize,
    chain: Chain,
}

/// One half-step: walkers `mine` move against the fixed positions `other`.
fn move_half(post: &LogPosterior<'_>, mine: &mut [Walker], other: &[Vec<f64>], keep: bool) {
    let d = post.dim();
    mine.par_iter_mut().for_each(|w| {
        let j = w.rng.gen_range(0..other.len());
        let s = stretch_factor(&mut w.rng, STRETCH);
        let y: Vec<f64> =
            w.z.iter()
                .zip(&other[j])
                .map(|(xk, xj)| xj + s * (xk - xj))
                .collect();
        let lp_new = post.ln_density(&y);
        let ln_ratio = (d as f64 - 1.0) * s.ln() + lp_new - w.lp;
        let u: f64 = w.rng.gen();
        let accept = !ln_ratio.is_nan() && u.ln() < ln_ratio;
        if accept {
            w.z = y;
            w.lp = lp_new;
        }
        if keep {
            if accept {
                w.accepted += 1;
            }
            w.chain.keep(post, &w.z, w.lp);
        }
    });
}

/// Run the ensemble: `params.warmup` discarded iterations, then `params.draws` kept per
/// walker (extended with `until_converged`).
pub fn sample(
    post: &LogPosterior<'_>,
    params: &SamplerParams,
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Vec<Chain> {
    let n = params
        .walkers
        .unwrap_or_else(|| default_walkers(post.dim()));
    let mut walkers: Vec<Walker> = (0..n)
        .into_par_iter()
        .map(|k| {
            let mut rng = crate::rng::stream(params.seed, k as u64);
            let z = post.to_unconstrained(&initial_point(post, &mut rng, k, n));
            let lp = post.ln_density(&z);
            Walker {
                rng,
                z,
                lp,
                accepted: 0,
                chain: Chain {
                    step_scale: STRETCH,
                    ..Chain::new(k)
                },
            }
        })
        .collect();
    let half = n / 2;
    let mut t = 0usize;
    let mut total = params.warmup + params.draws;
    observer.start("MCMC (ensemble)", (n * total) as u64);
    let mut interrupted = false;
    loop {
        while t < total {
            if stop.load(Ordering::Relaxed) {
                interrupted = true;
                break;
            }
            let keep = t >= params.warmup;
            for first in [true, false] {
                let (a, b) = walkers.split_at_mut(half);
                let (mine, fixed) = if first { (a, &*b) } else { (b, &*a) };
                let other: Vec<Vec<f64>> = fixed.iter().map(|w| w.z.clone()).collect();
                move_half(post, mine, &other, keep);
            }
            t += 1;
            if t % 100 == 0 {
                observer.advance((100 * n) as u64, "");
            }
        }
        if interrupted {
            break;
        }
        let chains: Vec<Chain> = walkers.iter().map(|w| w.chain.clone()).collect();
        match next_target(params, t - params.warmup, &chains) {
            None => break,
            Some(target) => {
                observer.note(&format!(
                    "not converged after {} draws per walker: {} more per walker",
                    t - params.warmup,
                    target + params.warmup - total
                ));
                total = target + params.warmup;
            }
        }
    }
    observer.finish();
    walkers
        .into_iter()
        .map(|mut w| {
            let kept = w.chain.theta.len().max(1);
            w.chain.acceptance_rate = w.accepted as f64 / kept as f64;
            if interrupted {
                w.chain.termination = Termination::Interrupted;
            }
            w.chain
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    /// The inverse-CDF draw of g(s) ∝ 1/√s on [1/a, a] against its CDF
    /// P(s ≤ x) = (√x − 1/√a) / (√a − 1/√a) (the integral of 1/√s, normalised).
    #[test]
    fn stretch_factor_follows_its_density() {
        let mut rng = rand_chacha::ChaCha20Rng::seed_from_u64(5);
        let n = 200_000;
        let a = STRETCH;
        let draws: Vec<f64> = (0..n).map(|_| stretch_factor(&mut rng, a)).collect();
        assert!(draws.iter().all(|&s| (1.0 / a..=a).contains(&s)));
        for x in [0.6_f64, 0.8, 1.0, 1.3, 1.7] {
            let cdf = (x.sqrt() - 1.0 / a.sqrt()) / (a.sqrt() - 1.0 / a.sqrt());
            let emp = draws.iter().filter(|&&s| s <= x).count() as f64 / n as f64;
            // Binomial sd at n = 2e5 is at most 0.0011; 5 sd.
            assert!((emp - cdf).abs() < 0.0056, "x = {x}: {emp} vs {cdf}");
        }
    }

    #[test]
    fn default_walkers_are_even_and_exceed_the_dimension() {
        for d in 1..20 {
            let w = default_walkers(d);
            assert_eq!(w % 2, 0);
            assert!(w > d && w >= 8);
        }
    }
}
