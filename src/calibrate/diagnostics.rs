//! Convergence diagnostics: rank-normalised split-R̂ and bulk/tail effective sample size.
//!
//! # References
//! Vehtari, A., Gelman, A., Simpson, D., Carpenter, B. & Bürkner, P.-C. (2021).
//! Rank-normalization, folding, and localization: an improved R̂ for assessing
//! convergence of MCMC. Bayesian Analysis 16(2), 667–718. Geyer, C. J. (1992),
//! Practical Markov chain Monte Carlo, Statistical Science 7(4), 473–483 (initial
//! monotone sequence estimator).

use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, Normal};

/// R̂ above this suggests the chains have not mixed (Vehtari et al. 2021 recommend 1.01).
pub const RHAT_WARN: f64 = 1.01;
/// Fewer effective draws than this, all chains together, make the summaries and tail
/// quantiles unreliable (Vehtari et al. 2021, §4: bulk and tail ESS above 400, i.e. 100
/// per chain with four chains).
pub const ESS_WARN: f64 = 400.0;

/// Diagnostics of one parameter.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Diagnostics {
    pub rhat: f64,
    pub ess_bulk: f64,
    pub ess_tail: f64,
}

impl Diagnostics {
    /// Compute all three for `chains` (one vector of draws per chain).
    pub fn of(chains: &[Vec<f64>]) -> Self {
        Self::of_pooled(&Pooled::new(chains))
    }

    /// All three from draws already split and sorted (the rank normalisation is made
    /// once, for both the bulk R̂ and the bulk ESS).
    pub(crate) fn of_pooled(p: &Pooled) -> Self {
        if p.split.is_empty() {
            return Self {
                rhat: f64::NAN,
                ess_bulk: f64::NAN,
                ess_tail: f64::NAN,
            };
        }
        let z = rank_normalize(&p.split);
        Self {
            rhat: rhat_from(&p.split, &z),
            ess_bulk: ess_raw(&z),
            ess_tail: ess_tail_from(&p.split, &p.sorted),
        }
    }
}

/// One quantity's draws prepared once for all its diagnostics: the split chains and all
/// draws sorted (the sorts dominate the cost of the diagnostics on long chains).
pub(crate) struct Pooled {
    split: Vec<Vec<f64>>,
    /// Every draw of every chain (before splitting), ascending.
    pub sorted: Vec<f64>,
}

impl Pooled {
    pub(crate) fn new(chains: &[Vec<f64>]) -> Self {
        Self {
            split: split(chains),
            sorted: sorted_draws(chains),
        }
    }

    /// [`mcse_quantile`] of these draws.
    pub(crate) fn mcse_quantile(&self, p: f64) -> f64 {
        mcse_quantile_from(&self.split, &self.sorted, p)
    }
}

/// All draws of all chains, ascending.
fn sorted_draws(chains: &[Vec<f64>]) -> Vec<f64> {
    let mut all: Vec<f64> = chains.iter().flatten().copied().collect();
    all.sort_unstable_by(f64::total_cmp);
    all
}

/// Split every chain in two halves (the middle draw of an odd chain is dropped).
fn split(chains: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let mut out = Vec::with_capacity(2 * chains.len());
    for c in chains {
        let h = c.len() / 2;
        out.push(c[..h].to_vec());
        out.push(c[c.len() - h..].to_vec());
    }
    out
}

/// Replace every draw by Φ⁻¹((r − 3/8)/(S + 1/4)), r its pooled rank (ties averaged).
fn rank_normalize(chains: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let mut all: Vec<(f64, usize, usize)> = Vec::new();
    for (c, ch) in chains.iter().enumerate() {
        for (i, v) in ch.iter().enumerate() {
            all.push((*v, c, i));
        }
    }
    // Unstable: draws that tie share their average rank, so their order does not matter.
    all.sort_unstable_by(|a, b| a.0.total_cmp(&b.0));
    let s = all.len() as f64;
    let normal = Normal::new(0.0, 1.0).expect("standard normal");
    let mut out: Vec<Vec<f64>> = chains.iter().map(|c| vec![0.0; c.len()]).collect();
    let mut k = 0;
    while k < all.len() {
        let mut j = k;
        while j + 1 < all.len() && all[j + 1].0 == all[k].0 {
            j += 1;
        }
        // Average rank of the tie group, ranks 1-based.
        let r = (k + j) as f64 / 2.0 + 1.0;
        let z = normal.inverse_cdf((r - 0.375) / (s + 0.25));
        for item in &all[k..=j] {
            out[item.1][item.2] = z;
        }
        k = j + 1;
    }
    out
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn var(v: &[f64]) -> f64 {
    let m = mean(v);
    v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() as f64 - 1.0)
}

/// Classic R̂ of already split chains.
fn rhat_basic(chains: &[Vec<f64>]) -> f64 {
    let n = chains[0].len() as f64;
    let means: Vec<f64> = chains.iter().map(|c| mean(c)).collect();
    let w = mean(&chains.iter().map(|c| var(c)).collect::<Vec<_>>());
    let b = n * var(&means);
    let var_plus = (n - 1.0) / n * w + b / n;
    (var_plus / w).sqrt()
}

fn median(chains: &[Vec<f64>]) -> f64 {
    let all = sorted_draws(chains);
    let n = all.len();
    if n % 2 == 1 {
        all[n / 2]
    } else {
        0.5 * (all[n / 2 - 1] + all[n / 2])
    }
}

/// Rank-normalised split-R̂: the larger of the bulk R̂ and the R̂ of the folded draws
/// |θ − median|. Close to 1 at convergence; above 1.01 suggests running longer.
pub fn rhat(chains: &[Vec<f64>]) -> f64 {
    let sp = split(chains);
    if sp.is_empty() {
        return f64::NAN;
    }
    rhat_from(&sp, &rank_normalize(&sp))
}

/// [`rhat`] of split chains `sp` whose rank-normalised values are `z`.
fn rhat_from(sp: &[Vec<f64>], z: &[Vec<f64>]) -> f64 {
    if sp.is_empty() || sp[0].len() < 2 {
        return f64::NAN;
    }
    let bulk = rhat_basic(z);
    let med = median(sp);
    let folded: Vec<Vec<f64>> = sp
        .iter()
        .map(|c| c.iter().map(|v| (v - med).abs()).collect())
        .collect();
    let tail = rhat_basic(&rank_normalize(&folded));
    bulk.max(tail)
}

/// Autocovariance of `x` about `mu` at every lag t < n, biased (divided by n):
/// Σ_i (x_i − μ)(x_(i+t) − μ) / n.
///
/// # Formula
/// By the fast Fourier transform of the centred series zero-padded to at least 2n (so
/// the circular correlation equals the linear one): γ = IFFT(|FFT(x − μ)|²) / (L n), L
/// the padded length (Wiener–Khinchin; the method arviz's `autocov` uses, O(n log n)
/// instead of O(n · lags)).
pub(crate) fn autocovariance(x: &[f64], mu: f64) -> Vec<f64> {
    use rustfft::{num_complex::Complex, FftPlanner};
    let n = x.len();
    let len = (2 * n).next_power_of_two();
    let mut buf: Vec<Complex<f64>> = x
        .iter()
        .map(|v| Complex::new(v - mu, 0.0))
        .chain(std::iter::repeat(Complex::new(0.0, 0.0)))
        .take(len)
        .collect();
    thread_local! {
        // Plans are costly to make and the same few lengths recur: the planner keeps them.
        static PLANNER: std::cell::RefCell<FftPlanner<f64>> =
            std::cell::RefCell::new(FftPlanner::new());
    }
    let (forward, inverse) = PLANNER.with(|p| {
        let mut p = p.borrow_mut();
        (p.plan_fft_forward(len), p.plan_fft_inverse(len))
    });
    forward.process(&mut buf);
    for c in buf.iter_mut() {
        *c = Complex::new(c.norm_sqr(), 0.0);
    }
    inverse.process(&mut buf);
    let scale = 1.0 / (len as f64 * n as f64);
    buf[..n].iter().map(|c| c.re * scale).collect()
}

/// Effective sample size of (already split) chains, by the multi-chain autocorrelation
/// and Geyer's initial monotone sequence.
fn ess_raw(chains: &[Vec<f64>]) -> f64 {
    let m = chains.len();
    let n = chains[0].len();
    if n < 4 {
        return f64::NAN;
    }
    let nf = n as f64;
    let means: Vec<f64> = chains.iter().map(|c| mean(c)).collect();
    let acovs: Vec<Vec<f64>> = chains
        .iter()
        .zip(&means)
        .map(|(c, mu)| autocovariance(c, *mu))
        .collect();
    let acov = |c: usize, t: usize| -> f64 { acovs[c][t] };
    let acov0: Vec<f64> = (0..m).map(|c| acov(c, 0)).collect();
    let w = mean(
        &acov0
            .iter()
            .map(|a| a * nf / (nf - 1.0))
            .collect::<Vec<_>>(),
    );
    let b_over_n = if m > 1 { var(&means) } else { 0.0 };
    let var_plus = w * (nf - 1.0) / nf + b_over_n;
    if var_plus.is_nan() || var_plus <= 0.0 {
        return f64::NAN;
    }
    let mean_acov = |t: usize| -> f64 { (0..m).map(|c| acov(c, t)).sum::<f64>() / m as f64 };
    let rho_at = |t: usize| 1.0 - (w - mean_acov(t)) / var_plus;
    // Geyer's initial positive sequence, then made monotone (Vehtari et al. 2021, eq. 10;
    // the same steps as arviz's `_ess`).
    let mut rho = vec![0.0; n];
    rho[0] = 1.0;
    let mut rho_even = 1.0;
    let mut rho_odd = rho_at(1);
    rho[1] = rho_odd;
    let mut t: usize = 1;
    while t + 3 < n && rho_even + rho_odd > 0.0 {
        rho_even = rho_at(t + 1);
        rho_odd = rho_at(t + 2);
        if rho_even + rho_odd >= 0.0 {
            rho[t + 1] = rho_even;
            rho[t + 2] = rho_odd;
        }
        t += 2;
    }
    let max_t = t as isize - 2;
    if rho_even > 0.0 {
        rho[(max_t + 1) as usize] = rho_even;
    }
    let mut k: isize = 1;
    while k <= max_t - 2 {
        let ku = k as usize;
        if rho[ku + 1] + rho[ku + 2] > rho[ku - 1] + rho[ku] {
            rho[ku + 1] = (rho[ku - 1] + rho[ku]) / 2.0;
            rho[ku + 2] = rho[ku + 1];
        }
        k += 2;
    }
    let head: f64 = if max_t >= 0 {
        rho[..=(max_t as usize)].iter().sum()
    } else {
        0.0
    };
    let total = (m * n) as f64;
    let tau = (-1.0 + 2.0 * head + rho[(max_t + 1) as usize]).max(1.0 / total.log10());
    total / tau
}

/// Bulk ESS: ESS of the rank-normalised split chains.
pub fn ess_bulk(chains: &[Vec<f64>]) -> f64 {
    let sp = split(chains);
    if sp.is_empty() {
        return f64::NAN;
    }
    ess_raw(&rank_normalize(&sp))
}

/// Tail ESS: the smaller ESS of the indicators θ ≤ q05 and θ ≤ q95 (split chains).
pub fn ess_tail(chains: &[Vec<f64>]) -> f64 {
    let sp = split(chains);
    if sp.is_empty() {
        return f64::NAN;
    }
    ess_tail_from(&sp, &sorted_draws(chains))
}

/// [`ess_tail`] of split chains `sp`, given all draws `sorted` (before splitting).
fn ess_tail_from(sp: &[Vec<f64>], sorted: &[f64]) -> f64 {
    // Quantiles of all draws (before splitting), as in Vehtari et al. (2021) §4.3.
    let q = |p: f64| quantile_sorted(sorted, p);
    let (q05, q95) = (q(0.05), q(0.95));
    let ind = |thr: f64| -> Vec<Vec<f64>> {
        sp.iter()
            .map(|c| {
                c.iter()
                    .map(|v| if *v <= thr { 1.0 } else { 0.0 })
                    .collect()
            })
            .collect()
    };
    ess_raw(&ind(q05)).min(ess_raw(&ind(q95)))
}

/// ESS of the p-quantile: the ESS of the indicator I(θ ≤ q_p) over the split chains,
/// q_p the type-7 quantile of all draws (Vehtari et al. 2021, §4.3).
pub fn ess_quantile(chains: &[Vec<f64>], p: f64) -> f64 {
    let sp = split(chains);
    if sp.is_empty() {
        return f64::NAN;
    }
    ess_quantile_from(&sp, &sorted_draws(chains), p)
}

/// [`ess_quantile`] of split chains `sp`, given all draws `sorted` (before splitting).
fn ess_quantile_from(sp: &[Vec<f64>], sorted: &[f64], p: f64) -> f64 {
    let q = quantile_sorted(sorted, p);
    let ind: Vec<Vec<f64>> = sp
        .iter()
        .map(|c| c.iter().map(|v| if *v <= q { 1.0 } else { 0.0 }).collect())
        .collect();
    // A constant indicator carries no autocorrelation: every draw counts (as arviz).
    if ind.iter().flatten().all(|v| *v == ind[0][0]) {
        return sorted.len() as f64;
    }
    ess_raw(&ind)
}

/// Monte Carlo standard error of the p-quantile of the pooled draws.
///
/// # Formula
/// With S the number of draws, θ₍₁₎ ≤ … ≤ θ₍S₎ the sorted draws and N = [`ess_quantile`]:
/// the quantile's rank is, approximately, S times a Beta(N p + 1, N (1 − p) + 1) variable;
/// with a, b that Beta's 15.87 % and 84.13 % quantiles (±1 sd of a normal),
/// i₁ = ⌊max(a S − 1, 0)⌋, i₂ = ⌈min(b S − 1, S − 1)⌉ (0-based),
/// MCSE = (θ₍i₂₎ − θ₍i₁₎) / 2. Zero when every draw is the same; NaN with fewer than
/// four draws per split chain.
///
/// # References
/// Vehtari, Gelman, Simpson, Carpenter & Bürkner (2021), Bayesian Analysis 16(2),
/// 667–718, §4.3 (MCSE of quantiles by inverting the interval of the indicator's
/// mean); the index convention is arviz 0.23's `mcse(method="quantile")`, against whose
/// output `tests/diagnostics_reference.rs` checks it.
///
/// # Example
/// ```
/// use assay::calibrate::mcse_quantile;
/// // Identical draws: no Monte Carlo error.
/// assert_eq!(mcse_quantile(&[vec![2.0; 20], vec![2.0; 20]], 0.5), 0.0);
/// ```
pub fn mcse_quantile(chains: &[Vec<f64>], p: f64) -> f64 {
    mcse_quantile_from(&split(chains), &sorted_draws(chains), p)
}

/// [`mcse_quantile`] of split chains `sp`, given all draws `all` sorted (before
/// splitting).
fn mcse_quantile_from(sp: &[Vec<f64>], all: &[f64], p: f64) -> f64 {
    use statrs::distribution::Beta;
    let (Some(first), Some(last)) = (all.first(), all.last()) else {
        return f64::NAN;
    };
    if first == last {
        return 0.0;
    }
    let n_eff = if sp.is_empty() {
        f64::NAN
    } else {
        ess_quantile_from(sp, all, p)
    };
    let Ok(beta) = Beta::new(n_eff * p + 1.0, n_eff * (1.0 - p) + 1.0) else {
        return f64::NAN;
    };
    // Φ(−1) and Φ(1) to the precision arviz writes them.
    let (lo, hi) = (beta.inverse_cdf(0.158_655_3), beta.inverse_cdf(0.841_344_7));
    let s = all.len() as f64;
    let i1 = (lo * s - 1.0).max(0.0).floor() as usize;
    let i2 = (hi * s - 1.0).min(s - 1.0).ceil() as usize;
    (all[i2] - all[i1]) / 2.0
}

/// Quantile of sorted values by linear interpolation (type 7, as numpy's default).
pub fn quantile_sorted(sorted: &[f64], p: f64) -> f64 {
    let n = sorted.len();
    if n == 1 {
        return sorted[0];
    }
    let h = (n - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

#[cfg(test)]
mod autocovariance_tests {
    use super::*;

    #[test]
    fn fft_autocovariance_equals_the_direct_sum() {
        // The definition, summed directly, on an AR(1)-like series of odd length.
        let mut rng = crate::rng::stream(5, 0);
        let mut x = vec![0.0; 1001];
        for i in 1..x.len() {
            let e: f64 = rand::Rng::sample(&mut rng, rand_distr::StandardNormal);
            x[i] = 0.9 * x[i - 1] + e;
        }
        let mu = mean(&x);
        let got = autocovariance(&x, mu);
        let n = x.len();
        for t in [0, 1, 7, 100, 999, 1000] {
            let direct: f64 = (0..n - t)
                .map(|i| (x[i] - mu) * (x[i + t] - mu))
                .sum::<f64>()
                / n as f64;
            assert!(
                (got[t] - direct).abs() < 1e-10 * (1.0 + direct.abs()),
                "lag {t}"
            );
        }
    }
}
