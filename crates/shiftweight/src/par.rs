//! Deterministic parallel reduction over fixed-size row chunks.
//!
//! Rows are cut into chunks of [`CHUNK_ROWS`]; batches of [`BATCH_CHUNKS`] chunks are mapped in
//! parallel and their partial results folded in chunk order. Chunk and batch sizes never depend on
//! the thread count, so the floating-point summation order, and therefore every result, is
//! bitwise identical for any number of threads and across runs.

/// Rows per chunk of every parallel pass (and per block in chunked kernel evaluation). Fixed (not
/// derived from the thread count) so that results are bitwise identical whatever the number of
/// threads; scoring rows in blocks of this size gives the same results as scoring them at once.
pub const CHUNK_ROWS: usize = 2048;
use rayon::prelude::*;

/// Chunks mapped in parallel per batch (bounds memory to BATCH_CHUNKS partials at a time).
pub const BATCH_CHUNKS: usize = 8;

/// Maps every chunk `start..end` of `0..n_rows` with `map` (in parallel) and folds the partials
/// into `acc` with `fold`, in chunk order.
pub fn reduce_chunks<T, A, M, F>(n_rows: usize, acc: A, map: M, fold: F) -> A
where
    T: Send,
    M: Fn(usize, usize) -> T + Sync,
    F: FnMut(&mut A, T),
{
    reduce_chunks_sized(n_rows, CHUNK_ROWS, acc, map, fold)
}

/// As [`reduce_chunks`] with chunks of `chunk_rows` rows (a constant chosen by the caller, never
/// derived from the thread count, so results stay bitwise identical for any number of threads).
/// Useful when each row is expensive (e.g. one held-out pair of a cross-validation) and the
/// default chunk would leave too few chunks to keep every thread busy.
pub fn reduce_chunks_sized<T, A, M, F>(
    n_rows: usize,
    chunk_rows: usize,
    mut acc: A,
    map: M,
    mut fold: F,
) -> A
where
    T: Send,
    M: Fn(usize, usize) -> T + Sync,
    F: FnMut(&mut A, T),
{
    let chunk_rows = chunk_rows.max(1);
    let n_chunks = n_rows.div_ceil(chunk_rows);
    let mut first = 0;
    while first < n_chunks {
        let last = (first + BATCH_CHUNKS).min(n_chunks);
        let partials: Vec<T> = (first..last)
            .into_par_iter()
            .map(|k| {
                let start = k * chunk_rows;
                map(start, (start + chunk_rows).min(n_rows))
            })
            .collect();
        for p in partials {
            fold(&mut acc, p);
        }
        first = last;
    }
    acc
}

/// Adds `src` into `dst` elementwise.
pub fn add_into(dst: &mut [f64], src: &[f64]) {
    for (a, b) in dst.iter_mut().zip(src) {
        *a += b;
    }
}
