//! The sections of the report page, one file each, in page order: the study, the
//! design, the runs, the surrogate's validation, the posterior, the predictive checks,
//! and the provenance with the audit. Each appends its `<section>` to the page.

mod design;
mod posterior;
mod predictive;
mod provenance;
mod runs;
mod study;
mod surrogate;

pub(crate) use design::design_section;
pub(crate) use posterior::posterior_section;
pub(crate) use predictive::predictive_section;
pub(crate) use provenance::provenance_section;
pub(crate) use runs::runs_section;
pub(crate) use study::study_section;
pub(crate) use surrogate::surrogate_section;
