//! Problems found by a stage's settings check, before they have a file and a line.
//!
//! Input: the key path in the study file and what is wrong with the value there.
//! Output: an [`Issues`] list, in the order found; the study turns each into a
//! [`StudyError`](super::StudyError), looking its line up in the study text.
//! Must not: import a stage module. The `params.rs` files of the stages depend on this
//! file and on [`super::spec`] only.

/// One problem: the key path (`calibration.chains`) and what is wrong.
#[derive(Debug, Clone, PartialEq)]
pub struct Issue {
    pub key: String,
    pub message: String,
}

/// The problems found in one section, in the order found.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Issues(Vec<Issue>);

impl Issues {
    /// Note that the value at `key` is wrong: `message` says how.
    pub fn push(&mut self, key: impl Into<String>, message: impl Into<String>) {
        self.0.push(Issue {
            key: key.into(),
            message: message.into(),
        });
    }

    /// No problem found?
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }
}

impl IntoIterator for Issues {
    type Item = Issue;
    type IntoIter = std::vec::IntoIter<Issue>;

    fn into_iter(self) -> Self::IntoIter {
        self.0.into_iter()
    }
}
