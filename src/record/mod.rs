//! Records: the YAML files every stage leaves, with one envelope and a provenance block.
//!
//! Input: a stage's body (any serde type) and what the stage read.
//! Output: an atomically written YAML file.
//! Main types: [`Record`], [`Provenance`], [`ProvenanceClock`].

mod hash;
mod io;
mod provenance;

pub use hash::{sha256_file, sha256_hex};
pub use io::{
    read_record, write_atomic, write_atomic_unsynced, write_record, write_record_unsynced,
};
pub use provenance::{Provenance, ProvenanceClock};

use serde::{Deserialize, Serialize};

/// Version of the record layout; bumped when a key changes meaning.
pub const SCHEMA_VERSION: u32 = 1;

/// The shared envelope: schema version, what kind of record, provenance, then the body's
/// own keys at the top level.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Record<T> {
    pub schema_version: u32,
    pub kind: String,
    pub provenance: Provenance,
    #[serde(flatten)]
    pub body: T,
}

impl<T> Record<T> {
    pub fn new(kind: &str, provenance: Provenance, body: T) -> Self {
        Self {
            schema_version: SCHEMA_VERSION,
            kind: kind.to_string(),
            provenance,
            body,
        }
    }
}
