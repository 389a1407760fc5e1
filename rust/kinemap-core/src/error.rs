//! The one error type of the core. Messages are lowercase, name the offending value and say
//! what was expected, so the Python layer can pass them on unchanged.

use std::fmt;

/// Everything the core can refuse.
#[derive(Debug, Clone, PartialEq)]
pub enum Error {
    /// An input array has the wrong length or shape.
    Shape(String),
    /// A coordinate, weight or q-vector is NaN or infinite; the message names the index.
    NonFinite(String),
    /// A value is outside its allowed range (group index, thread count, grid size).
    Range(String),
    /// The thread pool could not be built.
    Threads(String),
    /// The requested kernel level (`KINEMAP_KERNEL`) is unknown or not supported by this CPU.
    Kernel(String),
    /// A large allocation (fine grid, output, atom arrays) failed; the message gives its size.
    Memory(String),
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Error::Shape(m)
            | Error::NonFinite(m)
            | Error::Range(m)
            | Error::Threads(m)
            | Error::Kernel(m)
            | Error::Memory(m) => f.write_str(m),
        }
    }
}

impl std::error::Error for Error {}

/// Shorthand for the core's results.
pub type Result<T> = std::result::Result<T, Error>;
