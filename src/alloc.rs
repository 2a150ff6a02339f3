//! Checked, fallible allocation of working arrays sized by the input.
//!
//! Every array whose size follows from the data (a row Gram matrix of `n`
//! rows, a `p x p` factor, per-row vectors, a grid of penalties) is sized
//! with checked arithmetic and reserved with `try_reserve` first, so that a
//! size beyond what can be allocated is a typed [`Error::TooLarge`] naming
//! the bytes, never a panic or an abort.

use crate::error::{Error, Result};

/// Bytes of `count` elements of `T`, exactly (`u128` cannot overflow for
/// the products used here; it saturates otherwise).
fn bytes_of<T>(counts: &[usize]) -> u128 {
    counts
        .iter()
        .fold(std::mem::size_of::<T>() as u128, |acc, &c| {
            acc.saturating_mul(c as u128)
        })
}

/// The number of elements `prod(counts)` as a `usize`, or
/// [`Error::TooLarge`] when the bytes exceed what can be addressed.
pub(crate) fn checked_len<T>(what: &'static str, counts: &[usize]) -> Result<usize> {
    let bytes = bytes_of::<T>(counts);
    if bytes > isize::MAX as u128 {
        return Err(Error::TooLarge { what, bytes });
    }
    let size = std::mem::size_of::<T>().max(1) as u128;
    Ok((bytes / size) as usize)
}

/// A vector of `len` copies of `value`, allocated fallibly.
///
/// # Errors
/// [`Error::TooLarge`] naming `what` and the bytes.
pub(crate) fn vec<T: Clone>(what: &'static str, len: usize, value: T) -> Result<Vec<T>> {
    let mut v = with_capacity(what, len)?;
    v.resize(len, value);
    Ok(v)
}

/// An empty vector with room for `len` elements, allocated fallibly.
///
/// # Errors
/// [`Error::TooLarge`] naming `what` and the bytes.
pub(crate) fn with_capacity<T>(what: &'static str, len: usize) -> Result<Vec<T>> {
    let len = checked_len::<T>(what, &[len])?;
    let mut v = Vec::new();
    v.try_reserve_exact(len).map_err(|_| Error::TooLarge {
        what,
        bytes: bytes_of::<T>(&[len]),
    })?;
    Ok(v)
}

/// Checks that `copies` matrices of `rows x cols` doubles can be
/// allocated: their total size is checked, and the memory of one of them
/// is reserved once and released (faer's matrices cannot be allocated
/// fallibly themselves; reserving one is enough to catch a size that no
/// allocator can serve, without inflating the peak).
///
/// # Errors
/// [`Error::TooLarge`] naming `what` and the bytes.
pub(crate) fn reserve_matrices(
    what: &'static str,
    rows: usize,
    cols: usize,
    copies: usize,
) -> Result<()> {
    checked_len::<f64>(what, &[rows, cols, copies.max(1)])?;
    let len = checked_len::<f64>(what, &[rows, cols])?;
    let mut probe: Vec<f64> = Vec::new();
    probe.try_reserve_exact(len).map_err(|_| Error::TooLarge {
        what,
        bytes: bytes_of::<f64>(&[rows, cols, copies.max(1)]),
    })?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn impossible_sizes_are_typed_errors() {
        let huge = usize::MAX / 4;
        match vec::<f64>("probe", huge, 0.0) {
            Err(Error::TooLarge { what, bytes }) => {
                assert_eq!(what, "probe");
                assert_eq!(bytes, 8 * huge as u128);
            }
            other => panic!("{other:?}"),
        }
        match reserve_matrices("square", 1 << 33, 1 << 33, 1) {
            Err(Error::TooLarge { bytes, .. }) => assert_eq!(bytes, 1u128 << 69),
            other => panic!("{other:?}"),
        }
        assert_eq!(vec("small", 3, 1.5).map(|v| v.len()), Ok(3));
    }
}
