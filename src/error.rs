//! One error type for the library. Every variant that concerns a file names it, because a
//! practitioner with 200 images needs to know which one is wrong and what to do about it.
//!
//! Each error has a [`ErrorKind`], and each kind its own process exit code, so a batch script
//! or a scheduler can tell "fix the command line" from "fix the data", "fix the model file",
//! "fix the disk" and "report a bug" without parsing messages.

use std::path::PathBuf;

#[derive(Debug, thiserror::Error)]
pub enum GroveError {
    /// A file exists but its content is unusable (corrupt image, bad label value, ...).
    #[error("{}: {message}", path.display())]
    Input { path: PathBuf, message: String },
    /// The operating system refused to read an input.
    #[error("{}: {}", path.display(), describe_io(source))]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// An output cannot be written (refused by grove's safety rules, or by the system).
    #[error("{}: {message}", path.display())]
    Output { path: PathBuf, message: String },
    /// A setting is out of range or inconsistent with the data.
    #[error("invalid setting: {0}")]
    Config(String),
    /// The data as a whole cannot be used (no labelled pixels, one class only, ...).
    #[error("{0}")]
    Data(String),
    /// A model file that is not a grove model, is damaged, or is too new.
    #[error("{}: {message}", path.display())]
    Model { path: PathBuf, message: String },
    /// A bug in grove: an invariant did not hold.
    #[error("internal error (a bug in grove, please report it): {0}")]
    Internal(String),
}

pub type Result<T> = std::result::Result<T, GroveError>;

/// What went wrong, coarsely: decides the exit code.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ErrorKind {
    /// The command line: unknown option, value out of range (exit 2, as for parse errors).
    Usage,
    /// An input image, label file, class table or dataset folder (exit 3).
    InputData,
    /// The model file (exit 4).
    ModelFile,
    /// Writing an output: refused, unwritable, disk full (exit 5).
    Output,
    /// A bug in grove (exit 70, `EX_SOFTWARE` of BSD sysexits).
    Internal,
}

impl ErrorKind {
    /// The process exit code for this kind (documented in the README).
    pub fn exit_code(self) -> i32 {
        match self {
            ErrorKind::Usage => 2,
            ErrorKind::InputData => 3,
            ErrorKind::ModelFile => 4,
            ErrorKind::Output => 5,
            ErrorKind::Internal => 70,
        }
    }
}

impl GroveError {
    pub fn input(path: impl Into<PathBuf>, message: impl Into<String>) -> Self {
        GroveError::Input {
            path: path.into(),
            message: message.into(),
        }
    }

    /// A failed read of an input file or folder.
    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        GroveError::Io {
            path: path.into(),
            source,
        }
    }

    pub fn output(path: impl Into<PathBuf>, message: impl Into<String>) -> Self {
        GroveError::Output {
            path: path.into(),
            message: message.into(),
        }
    }

    /// A failed write: the system's reason in words a user can act on.
    pub fn write(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        GroveError::Output {
            path: path.into(),
            message: format!("cannot write: {}", describe_io(&source)),
        }
    }

    pub fn model(path: impl Into<PathBuf>, message: impl Into<String>) -> Self {
        GroveError::Model {
            path: path.into(),
            message: message.into(),
        }
    }

    pub fn kind(&self) -> ErrorKind {
        match self {
            GroveError::Input { .. } | GroveError::Io { .. } | GroveError::Data(_) => {
                ErrorKind::InputData
            }
            GroveError::Output { .. } => ErrorKind::Output,
            GroveError::Config(_) => ErrorKind::Usage,
            GroveError::Model { .. } => ErrorKind::ModelFile,
            GroveError::Internal(_) => ErrorKind::Internal,
        }
    }
}

/// An OS error in plain words (without the raw `(os error N)` suffix), with what to do where
/// the cause is common.
pub fn describe_io(e: &std::io::Error) -> String {
    use std::io::ErrorKind as K;
    match e.kind() {
        K::NotFound => "no such file or folder".into(),
        K::PermissionDenied => "permission denied (check the file's owner and mode)".into(),
        K::AlreadyExists => "already exists".into(),
        K::IsADirectory => "is a folder, not a file (are the arguments in the right order?)".into(),
        K::NotADirectory => "a part of this path is a file, not a folder".into(),
        K::StorageFull => "no space left on the device; free some space and run again".into(),
        K::ReadOnlyFilesystem => "the file system is read-only".into(),
        K::UnexpectedEof => "the file ends early (truncated)".into(),
        K::InvalidData => format!("unreadable content ({e})"),
        _ => {
            let text = e.to_string();
            match text.find(" (os error") {
                Some(i) => text[..i].to_string(),
                None => text,
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kinds_have_distinct_exit_codes() {
        let kinds = [
            ErrorKind::Usage,
            ErrorKind::InputData,
            ErrorKind::ModelFile,
            ErrorKind::Output,
            ErrorKind::Internal,
        ];
        let mut codes: Vec<i32> = kinds.iter().map(|k| k.exit_code()).collect();
        codes.sort();
        codes.dedup();
        assert_eq!(codes.len(), kinds.len());
        assert!(!codes.contains(&0) && !codes.contains(&1));
    }

    #[test]
    fn io_messages_drop_the_raw_os_suffix() {
        let e = std::io::Error::from_raw_os_error(21); // EISDIR on Linux
        let text = describe_io(&e);
        assert!(!text.contains("os error"), "{text}");
    }
}
