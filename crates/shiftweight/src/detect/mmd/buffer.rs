//! The pooled kernel matrix of the kernel-matrix route (doubly centred, f32, lower triangle, on a
//! seeded shuffle of the rows) and the zero-filled buffer that holds it.

use super::*;

/// The Gaussian kernel matrix K of the pooled rows (unit diagonal) in the form the permutation
/// products use: the doubly centred K~ = HKH (H = I - 11'/N) as its strict lower triangle in f32
/// plus its diagonal in f64, and in f64 the row sums r = K 1, the total 1'K1 and the kernel sum
/// over the first `ns` rows.
pub(super) struct CentredKernel {
    pub(super) n: usize,
    /// Position in the matrix of each pooled row (a seeded shuffle; see [`centred_kernel`]).
    pub(super) pos: Vec<usize>,
    /// 1.0 at the positions of the first `ns` pooled rows (the observed source rows), else 0.0.
    pub(super) src: Vec<f64>,
    /// Root mean square of the off-diagonal entries of K~.
    pub(super) rms: f64,
    /// Row-major N x N; entry (i, j), j < i, holds K~_ij rounded to f32; the rest is zero.
    pub(super) lower: ZeroedBuffer,
    /// K~_ii = 1 - 2 c_i with c_i = r_i / N - 1'K1 / (2 N^2).
    pub(super) diag: Vec<f64>,
    pub(super) r: Vec<f64>,
    pub(super) total: f64,
    /// 1'K1 over the first `ns` rows (diagonal included).
    pub(super) s_xx_first: f64,
}

/// Builds [`CentredKernel`] for the rows of `z`, the first `ns` of them the source rows, placed in
/// a seeded random order (`order_seed`): the f32 sums along a row of K~ P then run over a random
/// subset of rows whatever the input order, which keeps their partial sums random walks (with
/// inputs sorted on a feature they would drift, and the f32 error was measured 10 times larger).
/// Only the
/// strict lower triangle of K is evaluated (with the shared vectorised kernel helper, in f64), in
/// fixed chunks of [`KERNEL_CHUNK`] rows, in parallel; partial sums are combined in chunk order, so
/// the result is bitwise identical for any thread count. O(N^2 d / 2) time; N^2 f32 values plus
/// a KERNEL_CHUNK x N f64 scratch per thread.
pub(super) fn centred_kernel(
    z: MatrixView,
    sigma: f64,
    ns: usize,
    order_seed: u64,
) -> CentredKernel {
    let n = z.rows();
    let mut order: Vec<usize> = (0..n).collect();
    order.shuffle(&mut rng(order_seed));
    let mut pos = vec![0; n];
    for (k, &i) in order.iter().enumerate() {
        pos[i] = k;
    }
    let src: Vec<f64> = order.iter().map(|&i| f64::from(u8::from(i < ns))).collect();
    let shuffled = z.select_rows(&order);
    let z = shuffled.view();
    let z_sq = kernel::row_sq_norms(z);
    let mut lower_buf = ZeroedBuffer::new(n * n);
    let lower: &mut [f32] = lower_buf.as_mut_slice();
    // Per chunk of rows s..e: the strictly lower row sums, the column sums over columns 0..e.
    let parts: Vec<(Vec<f64>, Vec<f64>, f64)> = lower
        .par_chunks_mut(KERNEL_CHUNK * n)
        .enumerate()
        .map_init(Vec::new, |buf: &mut Vec<f64>, (c, out)| {
            let s = c * KERNEL_CHUNK;
            let e = (s + KERNEL_CHUNK).min(n);
            buf.resize((e - s) * e, 0.0);
            kernel::kernel_block_into(
                z.slice_rows(s, e),
                z.slice_rows(0, e),
                &z_sq[..e],
                sigma,
                buf,
            );
            let mut rows = Vec::with_capacity(e - s);
            let mut cols = vec![0.0; e];
            let mut xx = 0.0;
            crate::simd::with_wide_simd(|| {
                for i in s..e {
                    let k_row = &buf[(i - s) * e..(i - s) * e + i];
                    rows.push(sum_f64(k_row));
                    if src[i] == 1.0 {
                        xx += k_row.iter().zip(&src).map(|(k, w)| k * w).sum::<f64>();
                    }
                    for (cj, v) in cols.iter_mut().zip(k_row) {
                        *cj += v;
                    }
                    for (o, v) in out[(i - s) * n..(i - s) * n + i].iter_mut().zip(k_row) {
                        *o = *v as f32;
                    }
                }
            });
            (rows, cols, xx)
        })
        .collect();
    let mut r = vec![1.0; n];
    let mut lower_xx = 0.0;
    for (c, (rows, cols, xx)) in parts.iter().enumerate() {
        let s = c * KERNEL_CHUNK;
        for (k, v) in rows.iter().enumerate() {
            r[s + k] += v;
        }
        lower_xx += xx;
        for (rj, v) in r.iter_mut().zip(cols) {
            *rj += v;
        }
    }
    let total = sum_f64(&r);
    let nf = n as f64;
    let shift = total / (2.0 * nf * nf);
    let cen: Vec<f64> = r.iter().map(|ri| ri / nf - shift).collect();
    let sq_parts: Vec<f64> = lower
        .par_chunks_mut(KERNEL_CHUNK * n)
        .enumerate()
        .map(|(c, out)| {
            crate::simd::with_wide_simd(|| {
                let mut sq = 0.0;
                for (k, row) in out.chunks_exact_mut(n).enumerate() {
                    let i = c * KERNEL_CHUNK + k;
                    let ci = cen[i];
                    for (o, cj) in row[..i].iter_mut().zip(&cen) {
                        *o = (f64::from(*o) - ci - cj) as f32;
                    }
                    sq += row[..i].iter().map(|v| f64::from(*v).powi(2)).sum::<f64>();
                }
                sq
            })
        })
        .collect();
    let pairs = (nf * (nf - 1.0) / 2.0).max(1.0);
    let rms = (sq_parts.iter().sum::<f64>() / pairs).sqrt();
    CentredKernel {
        n,
        pos,
        src,
        rms,
        lower: lower_buf,
        diag: cen.iter().map(|c| 1.0 - 2.0 * c).collect(),
        r,
        total,
        s_xx_first: ns as f64 + 2.0 * lower_xx,
    }
}

/// Sum with four interleaved accumulators (a fixed order, so deterministic; vectorises).
pub(super) fn sum_f64(v: &[f64]) -> f64 {
    let mut acc = [0.0; 4];
    let mut quads = v.chunks_exact(4);
    for q in &mut quads {
        for l in 0..4 {
            acc[l] += q[l];
        }
    }
    let tail: f64 = quads.remainder().iter().sum();
    (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
}

/// A zero-filled f32 buffer for the N x N kernel matrix. On Linux it is an anonymous mapping
/// aligned to 2 MiB and marked for transparent huge pages (`madvise(MADV_HUGEPAGE)`): the first
/// writes to the 32 MB lower triangle at N = 4,000 then take 16 page faults instead of about 8,000.
/// Pages stay zero until written, as with
/// `vec![0.0; len]`. Elsewhere, or if the mapping fails, it is a plain `Vec`.
pub(super) struct ZeroedBuffer {
    pub(super) inner: ZeroedInner,
}

pub(super) enum ZeroedInner {
    Heap(Vec<f32>),
    #[cfg(target_os = "linux")]
    Mapped {
        /// Start of the aligned, `len`-element region inside the mapping.
        data: std::ptr::NonNull<f32>,
        len: usize,
        /// The whole mapping, for `munmap`.
        base: *mut libc::c_void,
        bytes: usize,
    },
}

// SAFETY: the mapping is owned exclusively by this value (like a Vec's allocation); shared access
// only hands out `&[f32]` and mutable access needs `&mut self`.
unsafe impl Send for ZeroedBuffer {}
// SAFETY: as above; `&ZeroedBuffer` only gives read access.
unsafe impl Sync for ZeroedBuffer {}

impl ZeroedBuffer {
    pub(super) fn new(len: usize) -> Self {
        #[cfg(target_os = "linux")]
        {
            const HUGE: usize = 2 << 20;
            if let Some(bytes) = len
                .checked_mul(std::mem::size_of::<f32>())
                .and_then(|b| b.checked_add(HUGE))
            {
                // SAFETY: an anonymous private mapping with no address hint has no preconditions;
                // the result is checked against MAP_FAILED before use.
                let base = unsafe {
                    libc::mmap(
                        std::ptr::null_mut(),
                        bytes,
                        libc::PROT_READ | libc::PROT_WRITE,
                        libc::MAP_PRIVATE | libc::MAP_ANONYMOUS,
                        -1,
                        0,
                    )
                };
                if base != libc::MAP_FAILED && len > 0 {
                    let offset = (HUGE - base as usize % HUGE) % HUGE;
                    // SAFETY: offset < HUGE and offset + 4 len <= bytes, so the region lies inside
                    // the mapping; the mapping is page-aligned, hence the region is f32-aligned.
                    let data = unsafe { base.cast::<u8>().add(offset) }.cast::<f32>();
                    // SAFETY: the range is inside the mapping just created; MADV_HUGEPAGE is only a
                    // hint, and its failure leaves ordinary pages, so the result is not checked.
                    unsafe {
                        libc::madvise(
                            data.cast(),
                            len * std::mem::size_of::<f32>(),
                            libc::MADV_HUGEPAGE,
                        )
                    };
                    if let Some(data) = std::ptr::NonNull::new(data) {
                        return Self {
                            inner: ZeroedInner::Mapped {
                                data,
                                len,
                                base,
                                bytes,
                            },
                        };
                    }
                }
                if base != libc::MAP_FAILED {
                    // SAFETY: `base` and `bytes` are the mapping just created, not used after.
                    unsafe { libc::munmap(base, bytes) };
                }
            }
        }
        Self {
            inner: ZeroedInner::Heap(vec![0.0; len]),
        }
    }

    pub(super) fn as_slice(&self) -> &[f32] {
        match &self.inner {
            ZeroedInner::Heap(v) => v,
            #[cfg(target_os = "linux")]
            // SAFETY: `data` points to `len` f32 inside a live read-write mapping owned by self;
            // anonymous pages read as zero until written, and zero bits are 0.0f32.
            ZeroedInner::Mapped { data, len, .. } => unsafe {
                std::slice::from_raw_parts(data.as_ptr(), *len)
            },
        }
    }

    pub(super) fn as_mut_slice(&mut self) -> &mut [f32] {
        match &mut self.inner {
            ZeroedInner::Heap(v) => v,
            #[cfg(target_os = "linux")]
            // SAFETY: as in `as_slice`, and `&mut self` makes this the only live reference.
            ZeroedInner::Mapped { data, len, .. } => unsafe {
                std::slice::from_raw_parts_mut(data.as_ptr(), *len)
            },
        }
    }
}

impl Drop for ZeroedBuffer {
    fn drop(&mut self) {
        #[cfg(target_os = "linux")]
        if let ZeroedInner::Mapped { base, bytes, .. } = self.inner {
            // SAFETY: `base` and `bytes` describe the mapping created in `new`, unmapped once.
            unsafe { libc::munmap(base, bytes) };
        }
    }
}
