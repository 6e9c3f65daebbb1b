//! Classical two-sample statistics used by the shift tests: the AUC with its DeLong standard
//! error, the Mann-Whitney U normal approximation, the two-sample Kolmogorov-Smirnov test, the
//! chi-square test of a 2 x k table, effect sizes, and Benjamini-Hochberg adjustment.
//!
//! Conventions follow scipy.stats so results compare directly (see each function).

use super::kolmogorov::kolmogorov_sf;
use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF, Normal};

/// Two-sided 95% normal quantile.
const Z975: f64 = 1.959_963_984_540_054;

/// Largest sample size (of either sample) for which the exact Kolmogorov-Smirnov distribution is
/// used; above it the asymptotic one. The same rule as scipy.stats.ks_2samp(method="auto").
pub const KS_EXACT_MAX_N: usize = 10_000;

/// Midranks (1-based, ties get the average rank) of `v`, and the tie-group sizes.
fn midranks(v: &[f64]) -> (Vec<f64>, Vec<usize>) {
    let n = v.len();
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_unstable_by(|&a, &b| v[a].total_cmp(&v[b]));
    let mut ranks = vec![0.0; n];
    let mut ties = Vec::new();
    let mut i = 0;
    while i < n {
        let mut j = i + 1;
        while j < n && v[order[j]] == v[order[i]] {
            j += 1;
        }
        let r = (i + j + 1) as f64 / 2.0; // mean of ranks i+1 ..= j
        for &k in &order[i..j] {
            ranks[k] = r;
        }
        ties.push(j - i);
        i = j;
    }
    (ranks, ties)
}

/// The AUC of scores `pos` (target rows, class 1) against `neg` (source rows, class 0) with its
/// DeLong standard error and 95% confidence interval.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct AucSummary {
    /// P(score of a positive > score of a negative) + P(tie) / 2 = U / (n_pos n_neg).
    pub auc: f64,
    /// The Mann-Whitney U statistic of the positives.
    pub u: f64,
    /// DeLong standard error (NaN when either class has fewer than 2 rows).
    pub std_error: f64,
    /// Lower end of the 95% interval, clipped to [0, 1].
    pub ci_low: f64,
    /// Upper end of the 95% interval, clipped to [0, 1].
    pub ci_high: f64,
}

/// AUC as the Mann-Whitney (1947) U statistic over n_pos * n_neg, ties counted half, with the
/// DeLong, DeLong & Clarke-Pearson (1988, Biometrics 44, 837-845) standard error from placement
/// values computed by midranks. O((n_pos + n_neg) log(n_pos + n_neg)).
pub fn auc_summary(pos: &[f64], neg: &[f64]) -> Result<AucSummary> {
    let (m, n) = (pos.len(), neg.len());
    if m == 0 || n == 0 {
        return Err(Error::TooFewRows {
            argument: if m == 0 {
                "positive scores".into()
            } else {
                "negative scores".into()
            },
            found: 0,
            required: 1,
        });
    }
    if let Some(i) = pos.iter().chain(neg).position(|v| !v.is_finite()) {
        return Err(Error::NonFinite {
            argument: "scores".into(),
            row: i,
            column: 0,
            value: f64::NAN,
        });
    }
    let pooled: Vec<f64> = pos.iter().chain(neg).copied().collect();
    let (r_all, _) = midranks(&pooled);
    let (r_pos, _) = midranks(pos);
    let (r_neg, _) = midranks(neg);
    let (mf, nf) = (m as f64, n as f64);
    let rank_sum: f64 = r_all[..m].iter().sum();
    let u = rank_sum - mf * (mf + 1.0) / 2.0;
    let auc = u / (mf * nf);
    // Placement values: v10_i = share of negatives below positive i; v01_j = share of positives
    // above negative j (ties half).
    let v10: Vec<f64> = (0..m).map(|i| (r_all[i] - r_pos[i]) / nf).collect();
    let v01: Vec<f64> = (0..n)
        .map(|j| 1.0 - (r_all[m + j] - r_neg[j]) / mf)
        .collect();
    let var = |v: &[f64]| -> f64 {
        let k = v.len() as f64;
        let mean = v.iter().sum::<f64>() / k;
        v.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (k - 1.0)
    };
    let std_error = if m >= 2 && n >= 2 {
        (var(&v10) / mf + var(&v01) / nf).sqrt()
    } else {
        f64::NAN
    };
    let (ci_low, ci_high) = if std_error.is_finite() {
        (
            (auc - Z975 * std_error).max(0.0),
            (auc + Z975 * std_error).min(1.0),
        )
    } else {
        (0.0, 1.0)
    };
    Ok(AucSummary {
        auc,
        u,
        std_error,
        ci_low,
        ci_high,
    })
}

/// One-sided Mann-Whitney test that `pos` tends to exceed `neg`: returns (U, p) with the normal
/// approximation, tie correction and continuity correction, as scipy.stats.mannwhitneyu(pos, neg,
/// alternative="greater", method="asymptotic"). Returns p = 1 when every value is tied.
pub fn mann_whitney_greater(pos: &[f64], neg: &[f64]) -> Result<(f64, f64)> {
    let s = auc_summary(pos, neg)?;
    let (m, n) = (pos.len() as f64, neg.len() as f64);
    let pooled: Vec<f64> = pos.iter().chain(neg).copied().collect();
    let (_, ties) = midranks(&pooled);
    let nn = m + n;
    let tie_term: f64 = ties.iter().map(|&t| (t as f64).powi(3) - t as f64).sum();
    let var = m * n / 12.0 * ((nn + 1.0) - tie_term / (nn * (nn - 1.0)));
    if !(var > 0.0) {
        return Ok((s.u, 1.0));
    }
    let z = (s.u - m * n / 2.0 - 0.5) / var.sqrt();
    Ok((s.u, normal_sf(z)))
}

/// Upper tail of the standard normal.
pub(crate) fn normal_sf(z: f64) -> f64 {
    Normal::new(0.0, 1.0).map(|d| d.sf(z)).unwrap_or(f64::NAN)
}

/// Which distribution gave a Kolmogorov-Smirnov p-value.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum KsMode {
    /// The exact null distribution of D (lattice-path recursion).
    Exact,
    /// The one-sample Kolmogorov distribution at the effective size n1 n2 / (n1 + n2).
    Asymptotic,
}

/// A two-sample Kolmogorov-Smirnov test.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct KsResult {
    /// D = sup_x |F_source(x) - F_target(x)|.
    pub statistic: f64,
    /// Two-sided p-value.
    pub p_value: f64,
    /// How the p-value was computed.
    pub mode: KsMode,
}

/// Two-sided two-sample Kolmogorov-Smirnov test.
///
/// The statistic is that of scipy.stats.ks_2samp. The p-value follows scipy's `method="auto"`
/// choice: exact when both samples have at most `KS_EXACT_MAX_N` rows, otherwise asymptotic.
/// - Exact: P(D >= d) under the null, by a recursion over the lattice paths from (0, 0) to
///   (n1, n2): q(i, j) = 1 at points where |i/n1 - j/n2| >= d, else
///   q(i, j) = (i q(i-1, j) + j q(i, j-1)) / (i + j), and p = q(n1, n2). Every term is a
///   probability (no cancellation), so small p-values keep their relative accuracy. Integer
///   arithmetic decides the boundary exactly. O(n1 n2) time, O(n2) memory.
/// - Asymptotic: P(D_e >= d) for the one-sample two-sided statistic with
///   e = round(n1 n2 / (n1 + n2)) observations (Smirnov 1939's limit argument: the two-sample
///   statistic scaled by sqrt(e) has the one-sample limit), computed by
///   [`kolmogorov_sf`](super::kolmogorov::kolmogorov_sf) (Simard & L'Ecuyer 2011). This is the
///   definition of scipy.stats.ks_2samp(method="asymp"), whose values the tests reproduce.
pub fn ks_two_sample(a: &[f64], b: &[f64]) -> Result<KsResult> {
    let mode = if a.len().max(b.len()) <= KS_EXACT_MAX_N {
        KsMode::Exact
    } else {
        KsMode::Asymptotic
    };
    ks_two_sample_with(a, b, mode)
}

/// As [`ks_two_sample`] with the p-value mode chosen by the caller (exact mode costs O(n1 n2)).
pub fn ks_two_sample_with(a: &[f64], b: &[f64], mode: KsMode) -> Result<KsResult> {
    let mut sa = a.to_vec();
    let mut sb = b.to_vec();
    sa.sort_unstable_by(f64::total_cmp);
    sb.sort_unstable_by(f64::total_cmp);
    ks_sorted(&sa, &sb, mode)
}

/// KS test of two already sorted samples.
pub(crate) fn ks_sorted(sa: &[f64], sb: &[f64], mode: KsMode) -> Result<KsResult> {
    let (n1, n2) = (sa.len(), sb.len());
    if n1 == 0 || n2 == 0 {
        return Err(Error::TooFewRows {
            argument: if n1 == 0 {
                "source".into()
            } else {
                "target".into()
            },
            found: 0,
            required: 1,
        });
    }
    // Largest |c1 n2 - c2 n1| over the pooled values, counting all values <= v.
    let (mut i, mut j) = (0usize, 0usize);
    let mut max_diff: i64 = 0;
    while i < n1 || j < n2 {
        let v = match (sa.get(i), sb.get(j)) {
            (Some(x), Some(y)) => x.min(*y),
            (Some(x), None) => *x,
            (None, Some(y)) => *y,
            (None, None) => break,
        };
        while i < n1 && sa[i] == v {
            i += 1;
        }
        while j < n2 && sb[j] == v {
            j += 1;
        }
        let diff = (i as i64 * n2 as i64 - j as i64 * n1 as i64).abs();
        max_diff = max_diff.max(diff);
    }
    let statistic = max_diff as f64 / (n1 as f64 * n2 as f64);
    let p_value = match mode {
        KsMode::Exact => ks_exact_sf(n1, n2, max_diff),
        KsMode::Asymptotic => {
            let (m, n) = (n1 as f64, n2 as f64);
            let effective = (m * n / (m + n)).round().max(1.0) as u64;
            kolmogorov_sf(effective, statistic)
        }
    };
    Ok(KsResult {
        statistic,
        p_value: p_value.clamp(0.0, 1.0),
        mode,
    })
}

/// P(D >= d) with d n1 n2 = `max_diff`, by the lattice-path recursion described in
/// [`ks_two_sample`].
fn ks_exact_sf(n1: usize, n2: usize, max_diff: i64) -> f64 {
    if max_diff == 0 {
        return 1.0;
    }
    let outside =
        |i: usize, j: usize| (i as i64 * n2 as i64 - j as i64 * n1 as i64).abs() >= max_diff;
    let mut q = vec![0.0f64; n2 + 1];
    // Row i = 0.
    for j in 1..=n2 {
        q[j] = if outside(0, j) { 1.0 } else { q[j - 1] };
    }
    for i in 1..=n1 {
        q[0] = if outside(i, 0) { 1.0 } else { q[0] };
        let fi = i as f64;
        for j in 1..=n2 {
            q[j] = if outside(i, j) {
                1.0
            } else {
                let fj = j as f64;
                (fi * q[j] + fj * q[j - 1]) / (fi + fj)
            };
        }
    }
    q[n2]
}

/// A chi-square test of homogeneity of a 2 x k table of counts.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChiSquareResult {
    /// Pearson's statistic (with Yates' correction when dof = 1).
    pub statistic: f64,
    /// Upper tail of the chi-square distribution with `dof` degrees of freedom.
    pub p_value: f64,
    /// Degrees of freedom, k - 1.
    pub dof: usize,
    /// Smallest expected count in any cell (below 5 the approximation is rough; common practice).
    pub min_expected: f64,
}

/// Chi-square test of homogeneity of the 2 x k table with rows `source_counts` and
/// `target_counts` (k categories, each with a positive total). Matches
/// scipy.stats.chi2_contingency with its default `correction=True`: when dof = 1 each observed
/// count is moved by min(0.5, |expected - observed|) towards its expected count (Yates 1934).
pub fn chi_square_two_rows(
    source_counts: &[f64],
    target_counts: &[f64],
) -> Result<ChiSquareResult> {
    let k = source_counts.len();
    if target_counts.len() != k {
        return Err(Error::LengthMismatch {
            argument: "target_counts".into(),
            expected: k,
            found: target_counts.len(),
        });
    }
    let r0: f64 = source_counts.iter().sum();
    let r1: f64 = target_counts.iter().sum();
    let total = r0 + r1;
    if !(r0 > 0.0 && r1 > 0.0) {
        return Err(Error::param(
            "counts",
            "both rows of the table need a positive total",
        ));
    }
    if k <= 1 {
        return Ok(ChiSquareResult {
            statistic: 0.0,
            p_value: 1.0,
            dof: 0,
            min_expected: r0.min(r1),
        });
    }
    let dof = k - 1;
    let mut stat = 0.0;
    let mut min_expected = f64::INFINITY;
    for c in 0..k {
        let col = source_counts[c] + target_counts[c];
        if !(col > 0.0) {
            return Err(Error::param(
                "counts",
                format!("category {c} has no rows in either sample"),
            ));
        }
        for (obs, row) in [(source_counts[c], r0), (target_counts[c], r1)] {
            let e = row * col / total;
            min_expected = min_expected.min(e);
            let mut o = obs;
            if dof == 1 {
                let diff = e - o;
                o += diff.signum() * diff.abs().min(0.5);
            }
            stat += (o - e) * (o - e) / e;
        }
    }
    let p_value = ChiSquared::new(dof as f64)
        .map(|d| d.sf(stat))
        .unwrap_or(f64::NAN);
    Ok(ChiSquareResult {
        statistic: stat,
        p_value,
        dof,
        min_expected,
    })
}

/// Benjamini-Hochberg (1995) step-up adjusted p-values: with p_(1) <= ... <= p_(m),
/// adj_(i) = min(1, min_{k >= i} m p_(k) / k), returned in the input order. Rejecting every
/// hypothesis with adj <= q controls the false discovery rate at q for independent tests.
pub fn benjamini_hochberg(p: &[f64]) -> Vec<f64> {
    let m = p.len();
    let mut order: Vec<usize> = (0..m).collect();
    order.sort_by(|&a, &b| p[a].total_cmp(&p[b]));
    let mut adj = vec![0.0; m];
    let mut running = 1.0f64;
    for (rank, &i) in order.iter().enumerate().rev() {
        running = running.min(p[i] * m as f64 / (rank + 1) as f64);
        adj[i] = running.min(1.0);
    }
    adj
}

/// Pooled within-sample standard deviation sqrt(((n1 - 1) s1^2 + (n2 - 1) s2^2) / (n1 + n2 - 2)).
pub(crate) fn pooled_sd(a: &[f64], b: &[f64]) -> f64 {
    let ms = |v: &[f64]| {
        let n = v.len() as f64;
        let mean = v.iter().sum::<f64>() / n;
        (mean, v.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>())
    };
    let (_, ssa) = ms(a);
    let (_, ssb) = ms(b);
    let df = (a.len() + b.len()) as f64 - 2.0;
    if df > 0.0 {
        ((ssa + ssb) / df).sqrt()
    } else {
        f64::NAN
    }
}

/// Standardised mean difference (mean(target) - mean(source)) / pooled sd (Cohen's d). `None`
/// when the pooled within-sample standard deviation is zero or undefined.
pub fn standardized_mean_difference(source: &[f64], target: &[f64]) -> Option<f64> {
    if source.is_empty() || target.is_empty() {
        return None;
    }
    let sd = pooled_sd(source, target);
    if !(sd > 0.0) {
        return None;
    }
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    Some((mean(target) - mean(source)) / sd)
}

/// Wasserstein-1 distance between the empirical distributions of two sorted samples:
/// the integral of |F_a - F_b| (as scipy.stats.wasserstein_distance). O(n1 + n2).
pub(crate) fn wasserstein1_sorted(sa: &[f64], sb: &[f64]) -> f64 {
    let (n1, n2) = (sa.len() as f64, sb.len() as f64);
    let (mut i, mut j) = (0usize, 0usize);
    let mut total = 0.0;
    let mut prev: Option<f64> = None;
    let mut gap = 0.0; // |F_a - F_b| on the current interval
    while i < sa.len() || j < sb.len() {
        let v = match (sa.get(i), sb.get(j)) {
            (Some(x), Some(y)) => x.min(*y),
            (Some(x), None) => *x,
            (None, Some(y)) => *y,
            (None, None) => break,
        };
        if let Some(p) = prev {
            total += gap * (v - p);
        }
        while i < sa.len() && sa[i] == v {
            i += 1;
        }
        while j < sb.len() && sb[j] == v {
            j += 1;
        }
        gap = (i as f64 / n1 - j as f64 / n2).abs();
        prev = Some(v);
    }
    total
}

/// Wasserstein-1 distance between the empirical distributions of `a` and `b`.
pub fn wasserstein1(a: &[f64], b: &[f64]) -> f64 {
    let mut sa = a.to_vec();
    let mut sb = b.to_vec();
    sa.sort_unstable_by(f64::total_cmp);
    sb.sort_unstable_by(f64::total_cmp);
    wasserstein1_sorted(&sa, &sb)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn auc_hand_example_with_ties() {
        // Hand-worked from the definition (Mann & Whitney 1947): pairs (pos, neg) with
        // pos > neg: (2,1), (3,1), (3,2) -> 3; ties: (2,2) -> 0.5; total 3.5 of 2 x 3 = 6 pairs.
        let s = auc_summary(&[2.0, 3.0], &[1.0, 2.0, 4.0]).unwrap();
        assert!((s.u - 3.5).abs() < 1e-12);
        assert!((s.auc - 3.5 / 6.0).abs() < 1e-12);
    }

    #[test]
    fn bh_matches_1995_worked_example() {
        // The fifteen p-values of the worked example in Benjamini & Hochberg (1995, section 4;
        // values from memory). The step-up procedure at q = 0.05 rejects four hypotheses (as
        // stated in the paper); the adjusted values below are m p_(k) / k minimised from the
        // right, worked by hand.
        let p = [
            0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262,
            0.5719, 0.6528, 0.7590, 1.0000,
        ];
        let adj = benjamini_hochberg(&p);
        assert_eq!(adj.iter().filter(|v| **v <= 0.05).count(), 4);
        let by_hand = [
            0.0015,
            0.003,
            0.0095,
            0.035625,
            0.0603,
            15.0 * 0.0298 / 7.0,
            15.0 * 0.0298 / 7.0,
            0.0645,
            0.0765,
            0.486,
            15.0 * 0.4262 / 11.0,
            15.0 * 0.5719 / 12.0,
            15.0 * 0.6528 / 13.0,
            15.0 * 0.7590 / 14.0,
            1.0,
        ];
        for (a, b) in adj.iter().zip(by_hand) {
            assert!((a - b).abs() < 1e-12, "{a} vs {b}");
        }
    }

    #[test]
    fn ks_exact_small_case_by_enumeration() {
        // n1 = n2 = 2: the C(4, 2) = 6 equally likely label orders of 4 distinct values give
        // D = 1 for two of them (aabb, bbaa): P(D >= 1) = 1/3 (enumerated by hand).
        let r = ks_two_sample(&[1.0, 2.0], &[3.0, 4.0]).unwrap();
        assert_eq!(r.statistic, 1.0);
        assert!((r.p_value - 1.0 / 3.0).abs() < 1e-15);
    }

    #[test]
    fn chi_square_two_by_two_yates_hand_example() {
        // Table [[10, 20], [20, 10]]: expected 15 everywhere; Yates moves each |O - E| = 5 to
        // 4.5: statistic 4 * 4.5^2 / 15 = 5.4 (worked by hand).
        let r = chi_square_two_rows(&[10.0, 20.0], &[20.0, 10.0]).unwrap();
        assert!((r.statistic - 5.4).abs() < 1e-12);
        assert_eq!(r.dof, 1);
    }

    #[test]
    fn wasserstein_hand_example() {
        // Point masses at 0 and at 1 and 3: W1 = (1 + 3) / 2 = 2 (worked by hand).
        assert!((wasserstein1(&[0.0, 0.0], &[1.0, 3.0]) - 2.0).abs() < 1e-12);
    }
}
