//! The study file: what the user asked for.
//!
//! Input: the text of `study.yaml` (and the files it names: field data, templates).
//! Output: a checked [`Study`] that every later stage reads.
//! Must not: run anything, write anything, or print.
//!
//! Main types: [`spec::StudySpec`] (the wire shape, `deny_unknown_fields`),
//! [`Study`] (the resolved, validated working form), [`StudyError`] (one per problem,
//! naming file, key path and line). Each stage checks its own settings in its
//! `params.rs` (e.g. [`DesignParams::check`]), which reads only [`spec`] and
//! [`issues`]; this module adds the file and the line.

mod checked;
mod checker;
mod data;
mod error;
mod experiments;
pub mod issues;
mod locate;
pub mod placeholder;
mod schema;
mod sections;
mod slurm;
pub mod spec;
mod tagged;
mod validate;

pub use checked::{
    Experiment, FileTemplate, Noise, OutputFormat, OutputSpec, Parameter, Prior, Simulator, Study,
};
pub use data::{FieldData, FieldRow, Target};
pub use error::{StudyError, StudyErrors};
pub use issues::{Issue, Issues};
pub use locate::LineIndex;
pub use schema::schema_json;
pub use sections::is_folder_name;
pub use spec::{
    Backend, DesignMethod, DesignSpace, HyperparameterMode, HyperpriorChoice, KernelChoice,
    MeanChoice, SlurmSpec,
};
pub use validate::{load, parse};

// Each stage's settings live beside the stage (its `params.rs`); these paths stay for
// the code that reads them through the study.
pub use crate::calibrate::params::{CalibrationParams, DiscrepancyParams};
pub use crate::check::params::RefineParams;
pub use crate::design::params::DesignParams;
pub use crate::surrogate::params::SurrogateParams;

/// A study parsed from `text` whose every data file reads as `data` (unit tests of the
/// stages that need a checked study but no files).
///
/// # Panics
/// If the study is not valid.
#[cfg(test)]
pub(crate) fn parse_with_data(text: &str, data: &str) -> Study {
    let read = |_: &std::path::Path| Ok(data.to_string());
    parse(
        text,
        std::path::Path::new("s.yaml"),
        std::path::Path::new("."),
        &read,
    )
    .expect("a valid study")
}
