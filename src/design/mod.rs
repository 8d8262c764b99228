//! Designs of experiments: where in the parameter box to run the simulator.
//!
//! Input: parameter ranges, a method, a size and an injected RNG.
//! Output: a [`Design`] (points with ids, in the parameters' units).
//! Must not: open files, print, or create its own RNG.

mod lhs;
mod wire;

pub use lhs::{latin_hypercube, random_uniform};
pub use wire::DesignBody;

use crate::study::{DesignMethod, Parameter};
use rand::Rng;

/// One design point.
#[derive(Debug, Clone, PartialEq)]
pub struct DesignPoint {
    /// `p0001`, `p0002`, ...
    pub id: String,
    /// One value per parameter, in the study's order and units.
    pub values: Vec<f64>,
}

/// A set of points over the parameter box.
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    pub method: DesignMethod,
    pub seed: u64,
    pub names: Vec<String>,
    pub points: Vec<DesignPoint>,
}

/// Id of the `i`-th point (0-based): `p` and at least four digits.
pub fn point_id(i: usize) -> String {
    format!("p{:04}", i + 1)
}

/// Build a design of `n` points over the box of `params`.
///
/// # Panics
/// If `n` is 0 or a range is reversed (the study validation rules both out).
pub fn generate<R: Rng + ?Sized>(
    params: &[Parameter],
    method: DesignMethod,
    n: usize,
    seed: u64,
    rng: &mut R,
) -> Design {
    assert!(n > 0, "design size must be positive");
    let d = params.len();
    let unit = match method {
        DesignMethod::Lhs => latin_hypercube(n, d, rng),
        DesignMethod::Random => random_uniform(n, d, rng),
    };
    let points = (0..n)
        .map(|i| DesignPoint {
            id: point_id(i),
            values: params
                .iter()
                .enumerate()
                .map(|(j, p)| p.lo + (p.hi - p.lo) * unit[[i, j]])
                .collect(),
        })
        .collect();
    Design {
        method,
        seed,
        names: params.iter().map(|p| p.name.clone()).collect(),
        points,
    }
}
