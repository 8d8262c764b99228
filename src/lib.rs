//! assay: calibrate the parameters of expensive simulators.
//!
//! A pipeline of stages, each a module: [`study`] → [`design`] → [`runs`] →
//! [`surrogate`] → [`calibrate`], with [`record`] for the YAML records they leave.
//! The numerical stages (design, surrogate, calibrate) open no files and print nothing.
#![deny(unsafe_code)]

pub mod study;
pub mod design;
pub mod record;
pub mod rng;
pub mod progress;
pub mod runs;
pub mod surrogate;
mod blas;
pub mod calibrate;
pub use blas::init as init_blas;
pub mod campaign;
