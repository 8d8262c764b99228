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
