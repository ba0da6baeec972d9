//! The core's error type: every fallible core function returns `Result<_, CoreError>`.

use std::fmt;

/// What went wrong in the core. The binding layer maps `InvalidInput` to a
/// `ValueError` subclass, `Interrupted` to `KeyboardInterrupt`, and the rest to
/// `MottleError`.
#[derive(Debug, Clone, PartialEq)]
pub enum CoreError {
    /// The input is inconsistent; the message names the value and what is accepted.
    InvalidInput(String),
    /// A cancel flag was raised (Ctrl-C) before the work finished.
    Interrupted,
    /// A bug: a worker panicked. The message carries the panic text.
    Internal(String),
}

impl fmt::Display for CoreError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CoreError::InvalidInput(message) => write!(f, "{message}"),
            CoreError::Interrupted => write!(f, "interrupted"),
            CoreError::Internal(message) => {
                write!(f, "internal error in the mottle core: {message}")
            }
        }
    }
}

impl std::error::Error for CoreError {}

/// Shorthand for an `InvalidInput` error.
pub fn invalid<T>(message: impl Into<String>) -> Result<T, CoreError> {
    Err(CoreError::InvalidInput(message.into()))
}
