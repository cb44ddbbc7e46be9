//! Errors about the user's input files. Each one names the file and, where there is one, the row, id or field.

use std::path::Path;

#[derive(Debug, thiserror::Error)]
pub enum InputError {
    #[error("{file}: {reason}")]
    Io { file: String, reason: String },
    #[error("vectors {file}: {reason}")]
    Vectors { file: String, reason: String },
    #[error("catalogue {file}: {reason}")]
    Catalogue { file: String, reason: String },
    #[error("{0}")]
    Matching(String),
    #[error("{0}")]
    Usage(String),
}

impl InputError {
    pub fn io(path: &Path, e: std::io::Error) -> InputError {
        InputError::Io {
            file: path.display().to_string(),
            reason: e.to_string(),
        }
    }
}

/// Formats a list of ids for a message: all of them when few, else the first ones and the count.
pub fn id_list(ids: &[String]) -> String {
    const SHOW: usize = 20;
    let shown: Vec<&str> = ids.iter().take(SHOW).map(String::as_str).collect();
    if ids.len() > SHOW {
        format!("{} ... and {} more", shown.join(", "), ids.len() - SHOW)
    } else {
        shown.join(", ")
    }
}
