//! The workflow: one step per stage. Each step reads its inputs through
//! [`crate::layout`], calls the stage's pure core, writes one record and returns a
//! typed result; it says what it did through the [`Session`]'s [`Events`].
//!
//! Adding a stage means adding its core in its own folder and one step file here.
//! Must not: print (the CLI implements [`Events`]), or hold a stage's computation.

mod calibrate;
mod check;
mod design;
mod fit;
mod predict;
mod refine;
mod report;
mod run;
mod session;
mod uptodate;

pub use calibrate::calibrate_stage;
pub use check::{check_stage, Confirm};
pub use design::{augment_design, refine_design, save_design, write_design, DesignOutcome};
pub use fit::{basis_warnings, fit_stage, DISCARDED_SD_WARN};
pub use predict::{parse_points, predict_csv};
pub use refine::{posterior_means, refine, refinement_done, write_refinement};
pub use report::report_stage;
pub use run::{run_stage, status, StatusReport};
pub use session::{Event, Events, Quiet, Session};
pub use uptodate::{up_to_date, INTERRUPTED};
