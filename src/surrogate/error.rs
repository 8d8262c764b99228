use thiserror::Error;

/// Failures while fitting or using a surrogate.
#[derive(Debug, Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum SurrogateError {
    #[error("the covariance matrix of {n} runs is not positive definite even with jitter {jitter:e}: remove duplicate points or let the nugget grow")]
    NotPositiveDefinite { n: usize, jitter: f64 },
    #[error("the trend with {m} coefficients cannot be estimated from {n} runs: use `surrogate.mean: constant` or add runs")]
    TrendNotIdentifiable { n: usize, m: usize },
    #[error("experiment `{experiment}` has {n} finished runs; at least {min} are needed to fit a surrogate")]
    TooFewRuns {
        experiment: String,
        n: usize,
        min: usize,
    },
    #[error("a hyperparameter is not a finite number (the search diverged)")]
    NonFiniteHyperparameters,
    #[error("every start of the hyperparameter search failed for `{output}`: {reason}")]
    OptimisationFailed { output: String, reason: String },
}
