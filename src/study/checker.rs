//! The collector of a study file's problems: each with file, key path and line.

use super::error::{StudyError, StudyErrors};
use super::issues::Issues;
use super::locate::LineIndex;
use std::collections::BTreeSet;
use std::path::Path;

/// Collects the problems of one study file, each with the line of its key.
pub(super) struct Checker<'a> {
    file: &'a Path,
    index: LineIndex,
    errors: Vec<StudyError>,
}

impl<'a> Checker<'a> {
    /// A checker for the study `text` of `file`.
    pub(super) fn new(file: &'a Path, text: &str) -> Self {
        Self {
            file,
            index: LineIndex::new(text),
            errors: Vec::new(),
        }
    }

    /// The value at `key` is wrong: `message` says how.
    pub(super) fn err(&mut self, key: impl Into<String>, message: impl Into<String>) {
        let key = key.into();
        let line = self.index.line(&key);
        self.errors.push(StudyError {
            file: self.file.to_path_buf(),
            key,
            line,
            message: message.into(),
        });
    }

    /// Run a stage's settings `check` and report the issues it found, in its order.
    pub(super) fn checked<T>(&mut self, check: impl FnOnce(&mut Issues) -> T) -> T {
        let mut issues = Issues::default();
        let checked = check(&mut issues);
        for issue in issues {
            self.err(issue.key, issue.message);
        }
        checked
    }

    /// Every problem found, without repeats and by line, if there was any.
    pub(super) fn finish(mut self) -> Result<(), StudyErrors> {
        if self.errors.is_empty() {
            return Ok(());
        }
        // Dedupe identical messages (a placeholder error repeats per experiment).
        let mut seen = BTreeSet::new();
        self.errors.retain(|e| seen.insert(e.to_string()));
        self.errors.sort_by_key(|e| e.line.unwrap_or(usize::MAX));
        Err(StudyErrors(self.errors))
    }
}
