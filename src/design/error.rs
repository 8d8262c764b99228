/// A design that cannot be made as asked (bad settings, not a numerical failure).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum DesignError {
    #[error("a design needs at least one parameter")]
    NoParameters,
    #[error("{n} points are too few for a design (at least 2)")]
    TooFewPoints { n: usize },
    #[error(
        "sobol holds direction numbers for at most {max} parameters, the study has {d}; use `lhs`"
    )]
    TooManyDimensions { d: usize, max: usize },
    #[error("{n} points are more than the Sobol' sequence holds ({max})")]
    TooManyPoints { n: usize, max: usize },
    #[error("nothing to add: the number of new points must be at least 1")]
    NothingToAdd,
    #[error("the design's parameters ({design}) differ from the study's ({study})")]
    ParametersDiffer { design: String, study: String },
    #[error("point {id} has {name} = {value} outside the range [{lo}, {hi}]")]
    OutsideRange {
        id: String,
        name: String,
        value: f64,
        lo: f64,
        hi: f64,
    },
}
