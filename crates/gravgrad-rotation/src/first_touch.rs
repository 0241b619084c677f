//! Fresh vectors whose pages are first touched on every core. A fresh page is mapped by the kernel
//! on its first write, a cost comparable to the arithmetic of a pass over the samples (about 0.5 ms
//! per MB on the 2-core VM of `docs/performance.md`); `vec![x; n]` of anything but zeros writes every
//! page on one core before the parallel work begins.

use rayon::prelude::*;

/// `n` copies of `v`, written in parallel.
pub(crate) fn filled<T: Copy + Send + Sync>(n: usize, v: T) -> Vec<T> {
    let mut out = Vec::with_capacity(n);
    (0..n).into_par_iter().map(|_| v).collect_into_vec(&mut out);
    out
}
