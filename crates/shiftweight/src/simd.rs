//! The CPU-specific code of the crate, each piece beside its portable twin.
//!
//! Naming rule: a function written with the intrinsics of one instruction set ends in that set's
//! name (`_avx2`, `_avx512`) and is `unsafe` (the caller checks the CPU); its twin in plain Rust
//! ends in `_portable` and performs the same floating-point operations in the same order, so both
//! give bitwise-equal results (a test below checks each pair). Where a caller should not choose, a
//! function with the bare name (`masked_pair_sums`) detects the CPU and calls one of the two.
//! [`with_wide_simd`] is the other form: it compiles ordinary code a second time for 256-bit
//! vectors, which changes only the vector width, never the results.
//!
//! Complexity of each function is stated on it; none allocates more than its output.

/// Runs `f` compiled for 256-bit vectors (AVX2) when the CPU has them, else as compiled for the
/// baseline target. Only the vector width differs: Rust never fuses a multiply and an add on its
/// own, so both versions round identically and give bitwise equal results.
#[inline(always)]
pub(crate) fn with_wide_simd<R>(f: impl FnOnce() -> R) -> R {
    #[cfg(target_arch = "x86_64")]
    {
        #[target_feature(enable = "avx2")]
        unsafe fn wide<R>(f: impl FnOnce() -> R) -> R {
            f()
        }
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the CPU was just checked to support AVX2, the only feature enabled.
            return unsafe { wide(f) };
        }
    }
    f()
}

/// Dot product with sixteen independent partial sums in four groups of four, so that the loop
/// becomes four independent chains of 4-lane vector operations (a single running sum is a chain
/// of dependent additions that the compiler may not reorder; eight sums in one array were
/// vectorised as 2-lane operations with shuffles). Fixed summation order.
#[inline(always)]
pub(crate) fn dot_portable(x: &[f64], y: &[f64]) -> f64 {
    let mut acc = [[0.0f64; 4]; 4];
    let (xc, yc) = (x.chunks_exact(16), y.chunks_exact(16));
    let (xr, yr) = (xc.remainder(), yc.remainder());
    for (p, q) in xc.zip(yc) {
        for (j, a) in acc.iter_mut().enumerate() {
            for (i, v) in a.iter_mut().enumerate() {
                *v += p[4 * j + i] * q[4 * j + i];
            }
        }
    }
    let mut lanes = [0.0f64; 4];
    for (i, l) in lanes.iter_mut().enumerate() {
        *l = (acc[0][i] + acc[1][i]) + (acc[2][i] + acc[3][i]);
    }
    let mut s = (lanes[0] + lanes[2]) + (lanes[1] + lanes[3]);
    for (p, q) in xr.iter().zip(yr) {
        s += p * q;
    }
    s
}

/// [`dot_portable`] with 4-lane AVX2 vectors: register j holds the partial sums acc[j][0..4], added and
/// combined in the same order, so the result is bitwise equal to [`dot_portable`]'s.
///
/// # Safety
/// The CPU must support AVX2.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
pub(crate) unsafe fn dot_avx2(x: &[f64], y: &[f64]) -> f64 {
    use std::arch::x86_64::{
        _mm256_add_pd, _mm256_loadu_pd, _mm256_mul_pd, _mm256_setzero_pd, _mm256_storeu_pd,
    };
    let n = x.len().min(y.len());
    let n16 = n / 16 * 16;
    let (px, py) = (x.as_ptr(), y.as_ptr());
    let mut acc = [_mm256_setzero_pd(); 4];
    let mut k = 0;
    while k < n16 {
        for (j, a) in acc.iter_mut().enumerate() {
            // SAFETY: k + 4 j + 4 <= n16 <= the length of both slices.
            let (u, v) = unsafe {
                (
                    _mm256_loadu_pd(px.add(k + 4 * j)),
                    _mm256_loadu_pd(py.add(k + 4 * j)),
                )
            };
            *a = _mm256_add_pd(*a, _mm256_mul_pd(u, v));
        }
        k += 16;
    }
    let l = _mm256_add_pd(_mm256_add_pd(acc[0], acc[1]), _mm256_add_pd(acc[2], acc[3]));
    let mut lanes = [0.0f64; 4];
    // SAFETY: `lanes` holds four f64.
    unsafe { _mm256_storeu_pd(lanes.as_mut_ptr(), l) };
    let mut s = (lanes[0] + lanes[2]) + (lanes[1] + lanes[3]);
    for (p, q) in x[n16..n].iter().zip(&y[n16..n]) {
        s += p * q;
    }
    s
}

/// Whether [`masked_pair_sums`] has its vector version on this CPU (AVX-512F).
pub(crate) fn masked_pair_sums_has_avx512() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("avx512f")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// Relabellings processed together for one row of L~: each 16-value piece of the row is loaded
/// once and added under this many masks (twelve mask pointers and accumulators still fit in the
/// registers).
#[cfg(target_arch = "x86_64")]
const MASK_GROUP: usize = 12;

/// For relabellings c = 0..b given as bit masks over the N matrix positions (`bits`, `words` =
/// ceil(N / 16) u16 words per relabelling, bit i % 16 of word i / 16 set when position i is
/// selected, then one all-zero mask), the sums over selected pairs of the strict lower triangle,
/// sum_{i selected} sum_{j < i selected} L~_ij, one per relabelling.
///
/// Only rows a relabelling selects contribute, and within them only selected columns, so a
/// relabelling needs about N^2 / 8 additions instead of the N^2 / 2 multiply-adds of a column of
/// L~ P. For each row i, the relabellings that select it are taken in groups of [`MASK_GROUP`];
/// each 16-value piece of the row is loaded once and added into each group member's f32
/// accumulator under that member's 16 mask bits (AVX-512 masked adds). A row's 16 lanes are then
/// summed in f32 (like the f32 dot product that gives an entry of L~ P) and added to the
/// relabelling's f64 total, rows in ascending order. Zero padding masks fill the last group.
/// Time O(N^2 b / 8 + N b); the row and the group's masks stay in the L1 cache.
pub(crate) fn masked_pair_sums(
    lower: &[f32],
    n: usize,
    bits: &[u16],
    words: usize,
    b: usize,
) -> Vec<f64> {
    assert_eq!(lower.len(), n * n);
    assert_eq!(bits.len(), (b + 1) * words);
    assert!(words * 16 >= n);
    #[cfg(target_arch = "x86_64")]
    if masked_pair_sums_has_avx512() {
        // SAFETY: AVX-512F was just detected; the slice lengths were checked above.
        return unsafe { masked_pair_sums_avx512(lower, n, bits, words, b) };
    }
    masked_pair_sums_portable(lower, n, bits, words, b)
}

/// [`masked_pair_sums`] in plain Rust, with the same f32 additions in the same order as the
/// AVX-512 version (16 lanes, pieces in ascending order, the same reduction tree
/// [`reduce_lanes`]), so both give bitwise equal sums. Used where AVX-512F is missing (the product
/// route is the default there) and as the check of the vector code.
pub(crate) fn masked_pair_sums_portable(
    lower: &[f32],
    n: usize,
    bits: &[u16],
    words: usize,
    b: usize,
) -> Vec<f64> {
    let mut out = vec![0.0f64; b];
    for i in 1..n {
        let row = &lower[i * n..i * n + i];
        for (c, o) in out.iter_mut().enumerate() {
            let mask = &bits[c * words..(c + 1) * words];
            if (mask[i / 16] >> (i % 16)) & 1 == 0 {
                continue;
            }
            let mut lanes = [0.0f32; 16];
            for (k, word) in mask.iter().enumerate().take(i.div_ceil(16)) {
                for (l, lane) in lanes.iter_mut().enumerate() {
                    let j = 16 * k + l;
                    if (word >> l) & 1 == 1 {
                        *lane += if j < i { row[j] } else { 0.0 };
                    }
                }
            }
            *o += f64::from(reduce_lanes(&lanes));
        }
    }
    out
}

/// The sum of 16 f32 lanes by a fixed tree: t_m = (l_m + l_{8+m}) + (l_{4+m} + l_{12+m}) for
/// m = 0..4, then (t_0 + t_2) + (t_1 + t_3). The AVX-512 code reduces its accumulators in this
/// order.
fn reduce_lanes(l: &[f32; 16]) -> f32 {
    let t: [f32; 4] = std::array::from_fn(|m| (l[m] + l[8 + m]) + (l[4 + m] + l[12 + m]));
    (t[0] + t[2]) + (t[1] + t[3])
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
pub(crate) unsafe fn masked_pair_sums_avx512(
    lower: &[f32],
    n: usize,
    bits: &[u16],
    words: usize,
    b: usize,
) -> Vec<f64> {
    let mut out = vec![0.0f64; b];
    let mut sel: Vec<usize> = vec![b; b + MASK_GROUP];
    for i in 1..n {
        let (wk, shift) = (i / 16, i % 16);
        // The relabellings selecting row i, without branches (the bits are random).
        let mut real = 0;
        for c in 0..b {
            sel[real] = c;
            real += usize::from((bits[c * words + wk] >> shift) & 1);
        }
        if real == 0 {
            continue;
        }
        // Pad to whole groups with the all-zero mask b; its sums are dropped.
        let len = real.div_ceil(MASK_GROUP) * MASK_GROUP;
        sel[real..len].fill(b);
        let sel = &sel[..len];
        // SAFETY: i < n, so row i starts inside `lower` (length n * n).
        let row = unsafe { lower.as_ptr().add(i * n) };
        for group in sel.chunks_exact(MASK_GROUP) {
            // SAFETY: every index in `sel` is <= b and `bits` holds (b + 1) * words words.
            let masks: [*const u16; MASK_GROUP] =
                std::array::from_fn(|m| unsafe { bits.as_ptr().add(group[m] * words) });
            // SAFETY: the row has i <= n - 1 values after `row`; every mask has `words` >
            // i / 16 words.
            let sums = unsafe { masked_group_sums_avx512(row, i, &masks) };
            for (&c, sum) in group.iter().zip(sums) {
                // Index b is the padding mask.
                if c < b {
                    out[c] += f64::from(sum);
                }
            }
        }
    }
    out
}

/// Sums of the first `len` values at `row` under each of the masks (bit l of word k selects value
/// 16 k + l), each in 16 f32 lanes reduced at the end.
///
/// # Safety
/// AVX-512F must be available; `row` must be valid for `len` reads and every mask for
/// `len.div_ceil(16)` reads.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
#[inline]
unsafe fn masked_group_sums_avx512(
    row: *const f32,
    len: usize,
    masks: &[*const u16; MASK_GROUP],
) -> [f32; MASK_GROUP] {
    use std::arch::x86_64::*;
    let (full, tail) = (len / 16, len % 16);
    let mut acc = [_mm512_setzero_ps(); MASK_GROUP];
    for k in 0..full {
        // SAFETY: 16 k + 16 <= len values are valid at `row` (caller's contract).
        let piece = unsafe { _mm512_loadu_ps(row.add(16 * k)) };
        for (a, m) in acc.iter_mut().zip(masks) {
            // SAFETY: k < len.div_ceil(16), the words valid at every mask (caller's contract).
            *a = _mm512_mask_add_ps(*a, unsafe { *m.add(k) }, *a, piece);
        }
    }
    if tail > 0 {
        // SAFETY: the masked load reads only the `tail` values at 16 full .. len, which are
        // valid; masked-off lanes are not accessed.
        let piece = unsafe { _mm512_maskz_loadu_ps((1u16 << tail) - 1, row.add(16 * full)) };
        for (a, m) in acc.iter_mut().zip(masks) {
            // SAFETY: full = len.div_ceil(16) - 1 here, a valid word of every mask.
            *a = _mm512_mask_add_ps(*a, unsafe { *m.add(full) }, *a, piece);
        }
    }
    acc.map(|a| {
        // The tree of reduce_lanes: quarters q_k = lanes 4k..4k+4, (q0 + q2) + (q1 + q3), then
        // lanes (0 + 2) and (1 + 3), then their sum.
        let q = |k| match k {
            0 => _mm512_extractf32x4_ps::<0>(a),
            1 => _mm512_extractf32x4_ps::<1>(a),
            2 => _mm512_extractf32x4_ps::<2>(a),
            _ => _mm512_extractf32x4_ps::<3>(a),
        };
        let t = _mm_add_ps(_mm_add_ps(q(0), q(2)), _mm_add_ps(q(1), q(3)));
        let u = _mm_add_ps(t, _mm_movehl_ps(t, t));
        _mm_cvtss_f32(u) + _mm_cvtss_f32(_mm_shuffle_ps::<1>(u, u))
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::random::rng;
    use rand::RngCore;
    use rand_distr::{Distribution, Normal};

    fn gauss(n: usize, mean: f64, sd: f64, seed: u64) -> Vec<f64> {
        let mut r = rng(seed);
        let g = Normal::new(mean, sd).unwrap();
        (0..n).map(|_| g.sample(&mut r)).collect()
    }

    #[test]
    fn avx2_dot_is_bitwise_equal_to_the_portable_dot() {
        // Same partial sums in the same order (see `dot_avx2`): equal bits for every length,
        // including remainders after the 16-wide blocks; and both near an f64 reference sum.
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            for n in [0usize, 1, 7, 15, 16, 17, 33, 200, 203] {
                let x = gauss(n, 0.0, 1.0, 40 + n as u64);
                let y = gauss(n, 1.0, 2.0, 80 + n as u64);
                // SAFETY: AVX2 was just detected.
                let wide = unsafe { dot_avx2(&x, &y) };
                let plain = dot_portable(&x, &y);
                assert_eq!(wide.to_bits(), plain.to_bits(), "n = {n}");
                let naive: f64 = x.iter().zip(&y).map(|(a, b)| a * b).sum();
                let scale: f64 = x.iter().zip(&y).map(|(a, b)| (a * b).abs()).sum();
                assert!((plain - naive).abs() <= 1e-14 * scale.max(1.0), "n = {n}");
            }
        }
    }

    #[cfg(target_arch = "x86_64")]
    #[test]
    fn masked_sums_vector_and_portable_versions_are_bitwise_equal() {
        // The AVX-512 code must do the portable code's f32 additions in the same order: equal
        // bits, not a tolerance. Sizes with partial pieces, empty and padded groups.
        if !masked_pair_sums_has_avx512() {
            eprintln!("no AVX-512F on this CPU: only the portable version runs here");
            return;
        }
        for (n, b, seed) in [
            (2usize, 1usize, 1u64),
            (31, 13, 2),
            (300, 40, 3),
            (1000, 25, 4),
        ] {
            let mut r = rng(seed);
            let mut lower = vec![0.0f32; n * n];
            for i in 0..n {
                for j in 0..i {
                    lower[i * n + j] = (r.next_u32() as f32 / u32::MAX as f32) - 0.5;
                }
            }
            let words = n.div_ceil(16);
            let mut bits = vec![0u16; (b + 1) * words];
            for c in 0..b {
                for i in 0..n {
                    if !r.next_u32().is_multiple_of(3) {
                        bits[c * words + i / 16] |= 1 << (i % 16);
                    }
                }
            }
            // SAFETY: AVX-512F was detected above; the lengths match masked_pair_sums's checks.
            let fast = unsafe { masked_pair_sums_avx512(&lower, n, &bits, words, b) };
            let plain = masked_pair_sums_portable(&lower, n, &bits, words, b);
            assert_eq!(
                fast.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                plain.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                "n = {n}, b = {b}"
            );
        }
    }
}
