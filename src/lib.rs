//! assay: calibrate the parameters of expensive simulators.
//!
//! A pipeline of stages, each a module: [`study`] → [`design`] → [`runs`] →
//! [`surrogate`] → [`calibrate`] → [`check`] → [`report`], with [`record`] for the YAML
//! records they leave. Above them, [`layout`] knows the campaign folder, [`audit`]
//! checks the records against each other, and [`campaign`] holds one step per stage.
//! The numerical stages (design, surrogate, calibrate) open no files and print nothing.
#![deny(unsafe_code)]

pub mod audit;
mod blas;
pub mod calibrate;
pub mod check;
pub mod design;
pub mod progress;
pub mod record;
pub mod report;
pub mod rng;
pub mod runs;
pub mod study;
pub mod surrogate;
pub use blas::init as init_blas;
pub mod campaign;
pub mod layout;
