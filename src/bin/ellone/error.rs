//! The error every subcommand returns: a library error, or a message of the tool's own, with
//! optional context (which option or file it concerns) prepended.

use std::fmt;

/// A failure of the command-line tool, printed as one line on stderr.
#[derive(Debug)]
pub struct CliError {
    message: String,
}

/// Shorthand for the subcommands' results.
pub type CliResult<T> = Result<T, CliError>;

impl CliError {
    /// A failure described by `message`.
    pub fn new(message: impl Into<String>) -> Self {
        Self {
            message: message.into(),
        }
    }

    /// Prepends `context` (e.g. "--y labels.csv") to the message.
    pub fn context(self, context: impl fmt::Display) -> Self {
        Self {
            message: format!("{context}: {}", self.message),
        }
    }
}

impl fmt::Display for CliError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::error::Error for CliError {}

impl From<ellone::Error> for CliError {
    fn from(e: ellone::Error) -> Self {
        Self::new(e.to_string())
    }
}
