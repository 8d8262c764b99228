use std::fmt;
use std::path::PathBuf;

/// One problem in a study: which file, which key, which line, what is wrong.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub struct StudyError {
    /// The file the problem is in (the study, a data file or a template).
    pub file: PathBuf,
    /// Key path in the study, e.g. `parameters[1].range`; empty for the whole file.
    pub key: String,
    /// 1-based line in `file`, when known.
    pub line: Option<usize>,
    /// What is wrong and what is expected.
    pub message: String,
}

impl fmt::Display for StudyError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some(line) = self.line {
            write!(f, ":{line}")?;
        }
        if self.key.is_empty() {
            write!(f, ": {}", self.message)
        } else {
            write!(f, ": {}: {}", self.key, self.message)
        }
    }
}

impl std::error::Error for StudyError {}

/// Every problem found in one study, in file order. Never empty.
#[derive(Debug, Clone, PartialEq)]
pub struct StudyErrors(pub Vec<StudyError>);

impl fmt::Display for StudyErrors {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for (i, e) in self.0.iter().enumerate() {
            if i > 0 {
                writeln!(f)?;
            }
            write!(f, "{e}")?;
        }
        Ok(())
    }
}

impl std::error::Error for StudyErrors {}
