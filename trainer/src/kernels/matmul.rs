//! A bounds-checked, single-threaded wrapper over the `gemm` crate for
//! strided matrices.

use super::Float;

/// A read-only strided matrix view: element `(i, j)` is `data[i * rs + j * cs]`.
#[derive(Clone, Copy)]
pub(crate) struct View<'a, T> {
    pub data: &'a [T],
    pub rows: usize,
    pub cols: usize,
    pub rs: usize,
    pub cs: usize,
}

impl<'a, T> View<'a, T> {
    /// A row-major `rows x cols` matrix with row stride `rs`.
    pub fn rows(data: &'a [T], rows: usize, cols: usize, rs: usize) -> Self {
        Self {
            data,
            rows,
            cols,
            rs,
            cs: 1,
        }
    }

    /// The transpose (no copy).
    pub fn t(self) -> Self {
        Self {
            rows: self.cols,
            cols: self.rows,
            rs: self.cs,
            cs: self.rs,
            ..self
        }
    }

    fn fits(&self) -> bool {
        self.rows == 0
            || self.cols == 0
            || (self.rows - 1) * self.rs + (self.cols - 1) * self.cs < self.data.len()
    }
}

/// `dst = a * b` (or `dst += a * b` with `accumulate`), `dst` row-major with row stride `dst_rs`.
///
/// # Panics
/// When the shapes disagree or a view reaches past its slice.
pub(crate) fn gemm<T: Float>(
    dst: &mut [T],
    dst_rs: usize,
    a: View<'_, T>,
    b: View<'_, T>,
    accumulate: bool,
) {
    let (m, k, n) = (a.rows, a.cols, b.cols);
    assert_eq!(b.rows, k, "inner dimensions");
    assert!(a.fits() && b.fits(), "operand view out of bounds");
    if m == 0 || n == 0 {
        return;
    }
    assert!(
        (m - 1) * dst_rs + n <= dst.len(),
        "destination out of bounds"
    );
    if k == 0 {
        if !accumulate {
            for i in 0..m {
                dst[i * dst_rs..i * dst_rs + n].fill(T::ZERO);
            }
        }
        return;
    }
    let one = T::from_f64(1.0);
    // SAFETY: every index the kernel touches lies inside the slices (checked
    // above: largest offsets of a, b and dst are below their lengths), `dst`
    // is borrowed mutably and does not alias `a` or `b`, and the strides fit
    // in isize because they index existing allocations.
    unsafe {
        gemm::gemm(
            m,
            n,
            k,
            dst.as_mut_ptr(),
            1,
            dst_rs as isize,
            accumulate,
            a.data.as_ptr(),
            a.cs as isize,
            a.rs as isize,
            b.data.as_ptr(),
            b.cs as isize,
            b.rs as isize,
            one,
            one,
            false,
            false,
            false,
            gemm::Parallelism::None,
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn strided_products_match_a_hand_calculation() {
        // a = [[1, 2], [3, 4]], b = [[5, 6], [7, 8]]: a b = [[19, 22], [43, 50]],
        // a^T b = [[26, 30], [38, 44]] (hand calculation).
        let a = [1f64, 2., 3., 4.];
        let b = [5f64, 6., 7., 8.];
        let mut d = [0f64; 4];
        gemm(
            &mut d,
            2,
            View::rows(&a, 2, 2, 2),
            View::rows(&b, 2, 2, 2),
            false,
        );
        assert_eq!(d, [19., 22., 43., 50.]);
        gemm(
            &mut d,
            2,
            View::rows(&a, 2, 2, 2).t(),
            View::rows(&b, 2, 2, 2),
            true,
        );
        assert_eq!(d, [19. + 26., 22. + 30., 43. + 38., 50. + 44.]);
    }
}
