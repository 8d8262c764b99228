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
    is_folder_name, load, parse, CalibrationParams, DesignMethod, DesignParams, DesignSpace,
    DiscrepancyParams, Experiment, FileTemplate, HyperparameterMode, HyperpriorChoice,
    KernelChoice, MeanChoice, Noise, OutputFormat, OutputSpec, Parameter, Prior, RefineParams,
    Simulator, Study, SurrogateParams,
};

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
