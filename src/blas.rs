//! BLAS threading. assay parallelises across hyperparameter starts, outputs and chains
//! with rayon, over small matrices; OpenBLAS's own threads on top of that oversubscribe
//! the cores and spin (measured: the cantilever fit took > 10 min of system time with
//! OpenBLAS threads, 0.8 s without). So OpenBLAS runs single-threaded inside assay.

use std::sync::Once;

#[cfg(feature = "openblas-system")]
#[allow(unsafe_code)]
mod ffi {
    extern "C" {
        pub fn openblas_set_num_threads(n: std::os::raw::c_int);
    }

    pub fn single_thread() {
        // SAFETY: a plain setter in libopenblas with no preconditions; called once,
        // before assay's first BLAS call (guarded by `Once`).
        unsafe { openblas_set_num_threads(1) }
    }
}

static INIT: Once = Once::new();

/// Make the BLAS library single-threaded (once per process).
pub fn init() {
    INIT.call_once(|| {
        #[cfg(feature = "openblas-system")]
        ffi::single_thread();
    });
}

/// y ← A x, or y ← Aᵀ x with `transpose`, for a column-major matrix A (unit stride
/// down a column, any column stride ≥ its rows: a block of a larger column-major array
/// too), by the BLAS `dgemv`: one optimised kernel call where ndarray's own
/// matrix-vector loop, or a LAPACK triangular solve of the same size, costs several times
/// more at the sizes of a surrogate's prediction (tens of training points).
///
/// # Panics
/// If A is not column-major as above, if the lengths disagree with its shape, or if a
/// dimension exceeds the BLAS integer range.
#[allow(unsafe_code)]
pub(crate) fn gemv_f(transpose: bool, a: ndarray::ArrayView2<f64>, x: &[f64], y: &mut [f64]) {
    let (m, n) = a.dim();
    let (nx, ny) = if transpose { (m, n) } else { (n, m) };
    assert_eq!(x.len(), nx, "gemv: x has the wrong length");
    assert_eq!(y.len(), ny, "gemv: y has the wrong length");
    if ny == 0 {
        return;
    }
    if nx == 0 {
        y.fill(0.0);
        return;
    }
    let strides = a.strides();
    let lda = if n == 1 {
        m.max(1) as isize
    } else {
        strides[1]
    };
    assert!(
        (strides[0] == 1 || m == 1) && lda >= m as isize,
        "gemv: the matrix must be column-major (unit stride down a column)"
    );
    let c_int = |v: usize| std::os::raw::c_int::try_from(v).expect("gemv: too large for BLAS");
    init();
    // SAFETY: A's m × n elements lie at a.as_ptr() + i + j·lda (unit stride down a
    // column, column stride lda ≥ m, checked above), all inside the array the view
    // borrows; x holds nx and y ny values with unit stride (checked above); dgemv reads A
    // and x and writes only y, which is a unique borrow, so nothing aliases.
    unsafe {
        cblas_sys::cblas_dgemv(
            cblas_sys::CblasColMajor,
            if transpose {
                cblas_sys::CblasTrans
            } else {
                cblas_sys::CblasNoTrans
            },
            c_int(m),
            c_int(n),
            1.0,
            a.as_ptr(),
            c_int(lda as usize),
            x.as_ptr(),
            1,
            0.0,
            y.as_mut_ptr(),
            1,
        );
    }
}

/// Solve L y = b (or Lᵀ y = b with `transpose`) in place for a lower-triangular,
/// column-major, contiguous n × n matrix L with a nonzero diagonal, by the BLAS
/// `dtrsv`: forward (back) substitution, backward stable (Higham 2002, *Accuracy and
/// Stability of Numerical Algorithms*, §8.1; from memory), without the copies and
/// workspace a LAPACK `dtrtrs` call through ndarray-linalg makes for one right-hand side.
///
/// # Panics
/// If L is not square, column-major and contiguous, if `b` has the wrong length, or if n
/// exceeds the BLAS integer range.
#[allow(unsafe_code)]
pub(crate) fn trsv_lower_f(transpose: bool, l: ndarray::ArrayView2<f64>, b: &mut [f64]) {
    let (m, n) = l.dim();
    assert_eq!(m, n, "trsv: the matrix must be square");
    assert_eq!(b.len(), n, "trsv: b has the wrong length");
    assert!(
        l.t().is_standard_layout(),
        "trsv: the matrix must be column-major and contiguous"
    );
    if n == 0 {
        return;
    }
    let ni = std::os::raw::c_int::try_from(n).expect("trsv: too large for BLAS");
    init();
    // SAFETY: L is a contiguous column-major n × n block with leading dimension n ≥ 1
    // (checked above); b holds n values with unit stride and is a unique borrow, the only
    // thing dtrsv writes; L is only read. dtrsv divides by the diagonal: a zero there
    // gives infinities in b, not undefined behaviour.
    unsafe {
        cblas_sys::cblas_dtrsv(
            cblas_sys::CblasColMajor,
            cblas_sys::CblasLower,
            if transpose {
                cblas_sys::CblasTrans
            } else {
                cblas_sys::CblasNoTrans
            },
            cblas_sys::CblasNonUnit,
            ni,
            l.as_ptr(),
            ni,
            b.as_mut_ptr(),
            1,
        );
    }
}

#[cfg(test)]
mod tests {
    use super::gemv_f;
    use ndarray::{array, Array2, ShapeBuilder};

    #[test]
    fn gemv_matches_the_definition() {
        // [[1, 2, 3], [4, 5, 6]] · (1, 0, −1) = (−2, −2): hand arithmetic.
        let mut a = Array2::zeros((2, 3).f());
        a.assign(&array![[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]]);
        let mut y = [9.0; 2];
        gemv_f(false, a.view(), &[1.0, 0.0, -1.0], &mut y);
        assert_eq!(y, [-2.0, -2.0]);
        // Transposed: (1, −1) · A = (−3, −3, −3).
        let mut yt = [9.0; 3];
        gemv_f(true, a.view(), &[1.0, -1.0], &mut yt);
        assert_eq!(yt, [-3.0, -3.0, -3.0]);
        // A block of a larger column-major array (column stride 3, rows 1..3 of 4 × 3).
        let mut big = Array2::zeros((4, 3).f());
        big.slice_mut(ndarray::s![1..3, ..]).assign(&a);
        let mut yb = [9.0; 2];
        gemv_f(
            false,
            big.slice(ndarray::s![1..3, ..]),
            &[1.0, 0.0, -1.0],
            &mut yb,
        );
        assert_eq!(yb, [-2.0, -2.0]);
    }

    #[test]
    fn trsv_solves_both_triangular_systems() {
        // L = [[2, 0], [1, 4]]: L y = (4, 6) gives y = (2, 1); Lᵀ y = (4, 8) gives
        // y = (1, 2) (hand arithmetic).
        let mut l = Array2::zeros((2, 2).f());
        l.assign(&array![[2.0, 0.0], [1.0, 4.0]]);
        let mut b = [4.0, 6.0];
        super::trsv_lower_f(false, l.view(), &mut b);
        assert_eq!(b, [2.0, 1.0]);
        let mut bt = [4.0, 8.0];
        super::trsv_lower_f(true, l.view(), &mut bt);
        assert_eq!(bt, [1.0, 2.0]);
    }

    #[test]
    #[should_panic(expected = "column-major")]
    fn gemv_refuses_a_row_major_matrix() {
        let a = array![[1.0, 2.0], [3.0, 4.0]];
        let mut y = [0.0; 2];
        gemv_f(false, a.view(), &[1.0, 1.0], &mut y);
    }
}
