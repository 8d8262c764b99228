//! Benchmark helper for `benches/compare/run` (not a test): Cholesky factorisations per
//! second through assay's LAPACK (ndarray-linalg over the system OpenBLAS, one thread, as
//! assay runs it), printed as JSON for the comparison with numpy.
//!
//! Usage: cholesky_rate N [REPEATS]
//! The matrix is A Aᵀ + N·I with A's entries from a fixed-seed ChaCha stream: symmetric
//! positive definite and well conditioned. Prints the median seconds per factorisation.

use ndarray::Array2;
use ndarray_linalg::{Cholesky, UPLO};
use rand::{Rng, SeedableRng};
use std::time::Instant;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let n: usize = args
        .get(1)
        .and_then(|s| s.parse().ok())
        .expect("usage: cholesky_rate N [REPEATS]");
    let repeats: usize = args.get(2).and_then(|s| s.parse().ok()).unwrap_or(7);
    assay::init_blas();
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(1);
    let a = Array2::from_shape_fn((n, n), |_| rng.gen_range(-1.0..1.0));
    let mut m = a.dot(&a.t());
    for i in 0..n {
        m[[i, i]] += n as f64;
    }
    let mut times = Vec::with_capacity(repeats);
    for _ in 0..repeats {
        let t = Instant::now();
        let l = m.cholesky(UPLO::Lower).expect("positive definite");
        times.push(t.elapsed().as_secs_f64());
        std::hint::black_box(l);
    }
    times.sort_by(f64::total_cmp);
    let median = times[times.len() / 2];
    println!(
        "{{\"n\": {n}, \"repeats\": {repeats}, \"median_s\": {median}, \"per_s\": {}}}",
        1.0 / median
    );
}
