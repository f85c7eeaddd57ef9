//! One error type for the library. Every variant that concerns a file names it, because a
//! practitioner with 200 images needs to know which one is wrong and what to do about it.

use std::path::PathBuf;

#[derive(Debug, thiserror::Error)]
pub enum GroveError {
    /// A file exists but its content is unusable (corrupt image, bad label value, ...).
    #[error("{}: {message}", path.display())]
    Input { path: PathBuf, message: String },
    /// The operating system refused a read or write.
    #[error("{}: {source}", path.display())]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// A setting is out of range or inconsistent with the data.
    #[error("invalid setting: {0}")]
    Config(String),
    /// The data as a whole cannot be used (no labelled pixels, one class only, ...).
    #[error("{0}")]
    Data(String),
    /// A model file that is not a grove model, is damaged, or is too new.
    #[error("{}: {message}", path.display())]
    Model { path: PathBuf, message: String },
}

pub type Result<T> = std::result::Result<T, GroveError>;

impl GroveError {
    pub fn input(path: impl Into<PathBuf>, message: impl Into<String>) -> Self {
        GroveError::Input {
            path: path.into(),
            message: message.into(),
        }
    }

    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        GroveError::Io {
            path: path.into(),
            source,
        }
    }
}
