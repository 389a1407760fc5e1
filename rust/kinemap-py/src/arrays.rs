//! Borrowing numpy arrays as Rust slices, with shape checks that name the argument.

use crate::errors::invalid;
use numpy::prelude::*;
use numpy::{Element, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::PyResult;

/// View an `(N, 3)` float64 array as `&[[f64; 3]]` without copying.
pub fn vectors<'a>(a: &'a PyReadonlyArray2<'_, f64>, name: &str) -> PyResult<&'a [[f64; 3]]> {
    let shape = a.shape();
    if shape[1] != 3 {
        return Err(invalid(format!(
            "`{name}` must have shape (N, 3), got ({}, {})",
            shape[0], shape[1]
        )));
    }
    let flat = a
        .as_slice()
        .map_err(|_| invalid(format!("`{name}` must be C-contiguous")))?;
    let (chunks, rest) = flat.as_chunks::<3>();
    debug_assert!(rest.is_empty());
    Ok(chunks)
}

/// A contiguous 1-D array as a slice, with its expected length checked.
pub fn slice1<'a, T: Element>(
    a: &'a PyReadonlyArray1<'_, T>,
    name: &str,
    len: Option<usize>,
) -> PyResult<&'a [T]> {
    let s = a
        .as_slice()
        .map_err(|_| invalid(format!("`{name}` must be C-contiguous")))?;
    if let Some(n) = len {
        if s.len() != n {
            return Err(invalid(format!(
                "`{name}` must have length {n}, got {}",
                s.len()
            )));
        }
    }
    Ok(s)
}

/// A contiguous 2-D array of an expected shape as a flat slice.
pub fn slice2<'a, T: Element>(
    a: &'a PyReadonlyArray2<'_, T>,
    name: &str,
    shape: (usize, usize),
) -> PyResult<&'a [T]> {
    let sh = a.shape();
    if (sh[0], sh[1]) != shape {
        return Err(invalid(format!(
            "`{name}` must have shape ({}, {}), got ({}, {})",
            shape.0, shape.1, sh[0], sh[1]
        )));
    }
    a.as_slice()
        .map_err(|_| invalid(format!("`{name}` must be C-contiguous")))
}
