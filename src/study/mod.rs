//! The study file: what the user asked for.
//!
//! Input: the text of `study.yaml` (and the files it names: field data, templates).
//! Output: a checked [`Study`] that every later stage reads.
//! Must not: run anything, write anything, or print.
//!
//! Main types: [`spec::StudySpec`] (the wire shape, `deny_unknown_fields`),
//! [`Study`] (the resolved, validated working form), [`StudyError`] (one per problem,
//! naming file, key path and line).

mod data;
mod error;
mod locate;
pub mod placeholder;
pub mod spec;
mod validate;

pub use data::{FieldData, FieldRow, Target};
pub use error::{StudyError, StudyErrors};
pub use locate::LineIndex;
pub use spec::{schema_json, Backend, SlurmSpec};
pub use validate::{
    load, parse, CalibrationParams, DesignMethod, DesignParams, DesignSpace, Experiment,
    FileTemplate, HyperpriorChoice, KernelChoice, MeanChoice, Noise, OutputFormat, OutputSpec,
    Parameter, Prior, Simulator, Study, SurrogateParams,
};
