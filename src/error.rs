//! Errors that end a command. Each carries one plain sentence for the user;
//! the binary prints it and exits with code 2.

use std::path::{Path, PathBuf};

/// An error that stops a command, with one sentence naming what went wrong.
#[derive(Debug, thiserror::Error)]
pub enum CwError {
    /// The input file is missing, unreadable, or not a usable recording.
    #[error("{}: {message}", path.display())]
    Input { path: PathBuf, message: String },
    /// An output file could not be written, or would overwrite a user's file.
    #[error("{}: {message}", path.display())]
    Output { path: PathBuf, message: String },
    /// The command line or a parameter is not usable.
    #[error("{0}")]
    Usage(String),
}

impl CwError {
    pub fn input(path: &Path, message: impl Into<String>) -> Self {
        CwError::Input {
            path: path.to_path_buf(),
            message: message.into(),
        }
    }
    pub fn output(path: &Path, message: impl Into<String>) -> Self {
        CwError::Output {
            path: path.to_path_buf(),
            message: message.into(),
        }
    }
}

pub type Result<T> = std::result::Result<T, CwError>;
