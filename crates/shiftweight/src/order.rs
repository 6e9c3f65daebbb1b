//! Order statistics: several ranks at once by selection, the fewest largest values reaching a
//! sum, and the one quantile rule of the crate.
//!
//! Quantiles use linear interpolation between order statistics: with h = (n - 1) q, the value
//! x_(floor h) + (h - floor h) (x_(floor h + 1) - x_(floor h)) (0-based order statistics). This is
//! definition 7 of Hyndman & Fan (1996, "Sample quantiles in statistical packages", The American
//! Statistician 50(4)) and the default `linear` method of `numpy.quantile`.

/// Partially orders `a` so that `a[r]` holds the r-th smallest value for every rank in `ranks`
/// (sorted ascending, relative to `offset`), with smaller values to its left and larger to its
/// right. Large halves are processed in parallel.
pub(crate) fn multi_select(a: &mut [f64], ranks: &[usize], offset: usize) {
    if ranks.is_empty() || a.is_empty() {
        return;
    }
    let mid = ranks.len() / 2;
    let r = ranks[mid] - offset;
    let (left, _, right) = a.select_nth_unstable_by(r, f64::total_cmp);
    let (lr, rr) = (&ranks[..mid], &ranks[mid + 1..]);
    if left.len() + right.len() > 1 << 16 {
        rayon::join(
            || multi_select(left, lr, offset),
            || multi_select(right, rr, offset + r + 1),
        );
    } else {
        multi_select(left, lr, offset);
        multi_select(right, rr, offset + r + 1);
    }
}

/// Positions (lo, hi) of the order statistics of quantile `level` of `n` values, and the
/// interpolation fraction between them (see the module doc). `n` >= 1.
pub(crate) fn quantile_ranks(n: usize, level: f64) -> (usize, usize, f64) {
    let h = (n - 1) as f64 * level;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    (lo, hi, h - lo as f64)
}

/// The smallest number of the largest values of `b` whose sum reaches `need` (expected O(len)).
/// Returns None when all of `b` does not reach it.
pub(crate) fn fewest_reaching(b: &mut [f64], mut need: f64) -> Option<usize> {
    let mut count = 0;
    let mut b = b;
    loop {
        if need <= 0.0 {
            return Some(count);
        }
        if b.len() <= 32 {
            b.sort_unstable_by(|x, y| y.total_cmp(x));
            for v in b.iter() {
                need -= v;
                count += 1;
                if need <= 0.0 {
                    return Some(count);
                }
            }
            return None;
        }
        let mid = b.len() / 2;
        let (lower, pivot, upper) = b.select_nth_unstable_by(mid, f64::total_cmp);
        let pivot = *pivot;
        let su: f64 = upper.iter().sum();
        if su >= need {
            b = upper;
        } else {
            need -= su + pivot;
            count += upper.len() + 1;
            b = lower;
        }
    }
}

/// Quantile `q` in [0, 1] of `sorted` (ascending, not empty) by the rule of the module doc. O(1).
pub(crate) fn quantile_of_sorted(sorted: &[f64], q: f64) -> f64 {
    let (lo, hi, f) = quantile_ranks(sorted.len(), q);
    sorted[lo] + f * (sorted[hi] - sorted[lo])
}

/// Quantile `q` in [0, 1] of `v` (not empty, any order) by the rule of the module doc, by selection
/// on a copy. Expected O(n).
pub(crate) fn quantile_by_selection(v: &[f64], q: f64) -> f64 {
    let (lo, _, f) = quantile_ranks(v.len(), q);
    let mut a = v.to_vec();
    let (_, x, right) = a.select_nth_unstable_by(lo, f64::total_cmp);
    let x = *x;
    if f > 0.0 && !right.is_empty() {
        let y = right.iter().copied().fold(f64::INFINITY, f64::min);
        x + f * (y - x)
    } else {
        x
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantiles_match_numpy_linear() {
        // Reference: numpy.quantile([3, 1, 4, 1, 5, 9, 2, 6], q) with the default method
        // "linear" (numpy 2, run for this test): 1.0, 1.0, 1.75, 3.5, 6.8999999999999995, 8.79, 9.0.
        let x = [3.0, 1.0, 4.0, 1.0, 5.0, 9.0, 2.0, 6.0];
        let mut sorted = x.to_vec();
        sorted.sort_by(f64::total_cmp);
        for (q, want) in [
            (0.0, 1.0),
            (0.1, 1.0),
            (0.25, 1.75),
            (0.5, 3.5),
            (0.9, 6.8999999999999995),
            (0.99, 8.79),
            (1.0, 9.0),
        ] {
            let a = quantile_of_sorted(&sorted, q);
            let b = quantile_by_selection(&x, q);
            assert!(
                (a - want).abs() <= 1e-12 * want,
                "q = {q}: {a} against numpy {want}"
            );
            assert_eq!(
                a.to_bits(),
                b.to_bits(),
                "q = {q}: sorted and selection differ"
            );
        }
    }
}
