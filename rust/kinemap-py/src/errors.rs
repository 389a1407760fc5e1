//! Mapping of core errors to the Python exceptions defined in `kinemap/errors.py`.

use pyo3::exceptions::{PyMemoryError, PyRuntimeError};
use pyo3::PyErr;

pyo3::import_exception!(kinemap.errors, InvalidInputError);
pyo3::import_exception!(kinemap.errors, KinemapError);

/// Newtype so `?` can turn a core error into a Python exception (orphan rule).
pub struct CoreErr(pub kinemap_core::Error);

impl From<kinemap_core::Error> for CoreErr {
    fn from(e: kinemap_core::Error) -> Self {
        CoreErr(e)
    }
}

impl From<CoreErr> for PyErr {
    fn from(e: CoreErr) -> PyErr {
        use kinemap_core::Error as E;
        match e.0 {
            E::Shape(m) | E::NonFinite(m) | E::Range(m) | E::Kernel(m) => {
                InvalidInputError::new_err(m)
            }
            E::Threads(m) => PyRuntimeError::new_err(m),
            E::Memory(m) => PyMemoryError::new_err(m),
        }
    }
}

/// A bad-input error from the binding layer itself.
pub fn invalid(msg: impl Into<String>) -> PyErr {
    InvalidInputError::new_err(msg.into())
}
