use ndarray::Array2;
use rand::seq::SliceRandom;
use rand::Rng;

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
    }
}
