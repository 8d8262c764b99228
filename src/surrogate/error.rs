use thiserror::Error;

/// Failures while fitting or using a surrogate.
#[derive(Debug, Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum SurrogateError {
    #[error("the covariance matrix of {n} runs is not positive definite even with jitter {jitter:e}: remove duplicate points or let the nugget grow")]
    NotPositiveDefinite { n: usize, jitter: f64 },
    #[error("the trend with {m} coefficients cannot be estimated from {n} runs: use `surrogate.mean: constant` or add runs")]
    TrendNotIdentifiable { n: usize, m: usize },
    #[error("experiment `{experiment}` has {n} finished runs; at least {min} are needed to fit a surrogate (one per hyperparameter: a length-scale per parameter, the signal variance and the nugget). Run more points (`assay design --add`, `assay run`) or fix the failing runs (`assay status`)")]
    TooFewRuns {
        experiment: String,
        n: usize,
        min: usize,
    },
    #[error("experiment `{experiment}` has {n} finished runs; holding out {n_out} (`surrogate.holdout`) leaves fewer than the {min} needed to fit. Lower `surrogate.holdout` or run more points")]
    HoldoutTooLarge {
        experiment: String,
        n: usize,
        n_out: usize,
        min: usize,
    },
    #[error("a hyperparameter is not a finite number (the search diverged)")]
    NonFiniteHyperparameters,
    #[error("the hyperparameter search used its budget of {max} factorisations")]
    BudgetExhausted { max: u64 },
    #[error("the surrogate record of `{experiment}` is malformed: {what}; run `assay fit` again")]
    MalformedRecord { experiment: String, what: String },
    #[error("unknown {what} `{name}` in the surrogate record")]
    UnknownName { what: &'static str, name: String },
    #[error("every start of the hyperparameter search failed for `{output}`: {reason}")]
    OptimisationFailed { output: String, reason: String },
}
