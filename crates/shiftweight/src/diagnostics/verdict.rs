//! The diagnosis of a weight vector: its verdict, the numbers behind it and its warnings.

use super::*;

/// Verdict on the Pareto k (Vehtari et al. 2024).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// k < 0.5: the weighted estimate has finite variance and converges at the usual rate.
    Good,
    /// 0.5 <= k <= threshold: usable, but estimates converge slowly and can be noisy.
    Usable,
    /// k above min(0.7, 1 - 1/log10 n), the tail could not be checked, or (in [`diagnose`]) the
    /// mean weight is far below 1 (see [`mean_check`]).
    Unreliable,
}

impl Verdict {
    /// `good`, `usable` or `unreliable`.
    pub fn as_str(&self) -> &'static str {
        match self {
            Verdict::Good => "good",
            Verdict::Usable => "usable",
            Verdict::Unreliable => "unreliable",
        }
    }

    /// The verdict for a tail fit: unreliable above the sample-size threshold (or above 0.7),
    /// usable from 0.5, good below. A bounded tail (all largest weights equal) is good; a tail that
    /// could not be fitted is unreliable.
    pub fn from_tail(t: &TailFit) -> Verdict {
        match t.k {
            Some(k) if k > t.k_threshold || k > K_UNRELIABLE => Verdict::Unreliable,
            Some(k) if k >= K_GOOD => Verdict::Usable,
            Some(_) => Verdict::Good,
            None if t.bounded => Verdict::Good,
            None => Verdict::Unreliable,
        }
    }
}

/// Effective sample size within one group of rows (e.g. one class label).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GroupEss {
    /// Group name.
    pub group: String,
    /// Rows in the group.
    pub n: usize,
    /// Kish ESS of the group's weights.
    pub ess: f64,
    /// ESS / n within the group.
    pub ess_fraction: f64,
    /// Share of the total weight the group holds.
    pub weight_share: f64,
    /// Share of the rows the group holds.
    pub row_share: f64,
}

/// Row groups for per-group diagnostics: a group code per row and the name of every code.
#[derive(Debug, Clone, Copy)]
pub struct Groups<'a> {
    /// Group code of every row, in 0..names.len().
    pub codes: &'a [usize],
    /// Name of each group code.
    pub names: &'a [String],
}

/// Everything [`diagnose`] finds about a set of weights. Serialisable.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Diagnosis {
    /// Number of weights.
    pub n: usize,
    /// Mean weight, as given (not rescaled).
    pub mean: f64,
    /// Standard error of the mean weight (None below two weights); see [`mean_check`].
    #[serde(default)]
    pub mean_std_error: Option<f64>,
    /// One-sided 99.9% upper bound on the mean weight (None below two weights).
    #[serde(default)]
    pub mean_upper_bound: Option<f64>,
    /// True when that bound is below [`MEAN_FLOOR`]: the weights miss much of the target mass or
    /// do not normalise. Makes the verdict `unreliable`.
    #[serde(default)]
    pub mean_too_low: bool,
    /// Kish effective sample size.
    pub ess: f64,
    /// ESS / n.
    pub ess_fraction: f64,
    /// Pareto k of the upper tail (None when it cannot be estimated; see `tail.note`).
    pub pareto_k: Option<f64>,
    /// `good`, `usable` or `unreliable` (from the Pareto k, and unreliable when `mean_too_low`).
    pub verdict: Verdict,
    /// Details of the tail fit (tail size, threshold, sample-size-dependent bound).
    pub tail: TailFit,
    /// Share of the total weight held by the largest 1% of rows (at least one row).
    pub top1_share: f64,
    /// Number of rows in that top 1%.
    pub top1_rows: usize,
    /// Fewest rows that together carry half of the total weight.
    pub rows_for_half: usize,
    /// Largest weight divided by the mean weight.
    pub max_over_mean: f64,
    /// (level, value) quantiles of the weights (linear interpolation, as numpy's default).
    pub quantiles: Vec<(f64, f64)>,
    /// Rows with weight exactly zero.
    pub n_zero: usize,
    /// Plain-language warnings, most important first.
    pub warnings: Vec<String>,
    /// Per-group effective sample sizes (empty unless groups were given).
    pub groups: Vec<GroupEss>,
    /// Values of the target that the source never has (from typed tables; see
    /// [`Diagnosis::with_support_gaps`]).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub support_gaps: Vec<crate::table::SupportGap>,
}

impl Diagnosis {
    /// Adds the support gaps of typed tables ([`crate::table::support_gaps`]) for a target of
    /// `n_target` rows: one warning per gap, first among the warnings, since no weighting of the
    /// source rows can cover target rows with a value the source never has.
    pub fn with_support_gaps(
        mut self,
        gaps: Vec<crate::table::SupportGap>,
        n_target: usize,
    ) -> Self {
        let mut w: Vec<String> = gaps.iter().map(|g| g.describe(n_target)).collect();
        w.append(&mut self.warnings);
        self.warnings = w;
        self.support_gaps = gaps;
        self
    }
    /// The JSON document (format `shiftweight.weight-diagnosis`).
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(DIAGNOSIS_FORMAT, self)
    }
    /// Reads a document written by [`Diagnosis::to_json`].
    pub fn from_json(text: &str) -> Result<Self> {
        model::from_json_tagged(DIAGNOSIS_FORMAT, text)
    }
}

pub(super) fn pct(x: f64) -> String {
    let p = 100.0 * x;
    if p >= 10.0 {
        format!("{p:.0}%")
    } else if p >= 1.0 {
        format!("{p:.1}%")
    } else {
        format!("{p:.2}%")
    }
}

pub(super) fn plural(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

/// Diagnoses a set of importance weights: ESS, Pareto k and verdict, concentration, quantiles,
/// zero weights, warnings, and optionally the ESS within each group of rows.
///
/// O(n) passes plus a multi-select of a copy of the weights (O(n log q) for the q order
/// statistics needed) and O(M log M) for the tail; memory one copy of the weights.
pub fn diagnose(w: &[f64], groups: Option<Groups>) -> Result<Diagnosis> {
    let n = w.len();
    validate_weights(w, n, "weights")?;
    if let Some(g) = groups {
        if g.codes.len() != n {
            return Err(Error::LengthMismatch {
                argument: "groups".into(),
                expected: n,
                found: g.codes.len(),
            });
        }
        if let Some(i) = g.codes.iter().position(|c| *c >= g.names.len()) {
            return Err(Error::param(
                "groups",
                format!(
                    "row {i} has group code {} but only {} group names were given",
                    g.codes[i],
                    g.names.len()
                ),
            ));
        }
    }
    let (total, max, n_zero) = sum_max_zeros(w);
    let ess = kish(w, max);
    let mc = mean_check_known(w, total, max);
    let mean = mc.mean;

    // Order statistics needed: quantiles, the top-1% boundary, the tail start.
    let top1_rows = ((n as f64) * 0.01).ceil().max(1.0) as usize;
    let (_, tail_start) = tail_ranks(n);
    let mut ranks: Vec<usize> = Vec::with_capacity(2 * QUANTILE_LEVELS.len() + 2);
    for &l in &QUANTILE_LEVELS {
        let (lo, hi, _) = quantile_ranks(n, l);
        ranks.push(lo);
        ranks.push(hi);
    }
    ranks.push(n - top1_rows);
    if let Some(r) = tail_start {
        ranks.push(r);
    }
    ranks.sort_unstable();
    ranks.dedup();
    let mut a = w.to_vec();
    multi_select(&mut a, &ranks, 0);

    let quantiles = QUANTILE_LEVELS
        .iter()
        .map(|&l| {
            let (lo, hi, f) = quantile_ranks(n, l);
            (l, a[lo] + f * (a[hi] - a[lo]))
        })
        .collect();
    let top1_share = a[n - top1_rows..].iter().sum::<f64>() / total;

    // Fewest rows carrying half the weight: walk the blocks between selected ranks from the top.
    let rows_for_half = {
        let mut bounds = vec![n];
        for &r in ranks.iter().rev() {
            bounds.push(r + 1);
            bounds.push(r);
        }
        bounds.push(0);
        bounds.dedup();
        let need = 0.5 * total;
        let mut acc = 0.0;
        let mut count = 0;
        let mut found = None;
        for pair in bounds.windows(2) {
            let (hi, lo) = (pair[0], pair[1]);
            if hi <= lo {
                continue;
            }
            let block_sum: f64 = a[lo..hi].iter().sum();
            if acc + block_sum >= need {
                found = fewest_reaching(&mut a[lo..hi], need - acc).map(|k| count + k);
                break;
            }
            acc += block_sum;
            count += hi - lo;
        }
        // Rounding can leave the last block a hair short: then every row is needed.
        found.unwrap_or(n)
    };

    // The tail: after the multi-select, a[r..] holds the M+1 largest values; sort them.
    let tail = match tail_start {
        Some(r) => {
            a[r..].sort_unstable_by(f64::total_cmp);
            tail_fit_from_sorted(&a[r..], n)
        }
        None => tail_fit_from_sorted(&[], n),
    };
    drop(a);
    let verdict = if mc.too_low {
        Verdict::Unreliable
    } else {
        Verdict::from_tail(&tail)
    };

    let group_rows = match groups {
        Some(g) => group_ess(w, g, total),
        None => Vec::new(),
    };

    let mut d = Diagnosis {
        n,
        mean,
        mean_std_error: mc.std_error,
        mean_upper_bound: mc.upper_bound,
        mean_too_low: mc.too_low,
        ess,
        ess_fraction: ess / n as f64,
        pareto_k: tail.k,
        verdict,
        tail,
        top1_share,
        top1_rows,
        rows_for_half,
        max_over_mean: max / mean,
        quantiles,
        n_zero,
        warnings: Vec::new(),
        groups: group_rows,
        support_gaps: Vec::new(),
    };
    d.warnings = warnings_for(&d);
    Ok(d)
}

pub(super) fn group_ess(w: &[f64], g: Groups, total: f64) -> Vec<GroupEss> {
    let k = g.names.len();
    // Per-group max first (for overflow-safe squares), then scaled sums.
    let mut max = vec![0.0f64; k];
    let mut count = vec![0usize; k];
    for (v, &c) in w.iter().zip(g.codes) {
        max[c] = max[c].max(*v);
        count[c] += 1;
    }
    let mut s1 = vec![0.0; k];
    let mut s2 = vec![0.0; k];
    for (v, &c) in w.iter().zip(g.codes) {
        if max[c] > 0.0 {
            let x = v / max[c];
            s1[c] += x;
            s2[c] += x * x;
        }
    }
    (0..k)
        .map(|c| {
            let ess = if s2[c] > 0.0 {
                s1[c] * s1[c] / s2[c]
            } else {
                0.0
            };
            GroupEss {
                group: g.names[c].clone(),
                n: count[c],
                ess,
                ess_fraction: if count[c] > 0 {
                    ess / count[c] as f64
                } else {
                    0.0
                },
                weight_share: s1[c] * max[c] / total,
                row_share: count[c] as f64 / w.len() as f64,
            }
        })
        .collect()
}

/// Plain-language warnings. Thresholds for concentration and ESS are this library's rules of thumb
/// (stated in the README); the k thresholds are those of Vehtari et al. (2024).
pub(super) fn warnings_for(d: &Diagnosis) -> Vec<String> {
    let mut out = Vec::new();
    let mc = MeanCheck {
        mean: d.mean,
        std_error: d.mean_std_error,
        upper_bound: d.mean_upper_bound,
        too_low: d.mean_too_low,
    };
    out.extend(mean_warning(&mc));
    let tail_verdict = Verdict::from_tail(&d.tail);
    match (tail_verdict, d.pareto_k) {
        (Verdict::Unreliable, Some(k)) => out.push(format!(
            "Pareto k = {k:.2} is above {:.2} (the limit for {} weights): the largest weights dominate and \
             weighted estimates are unreliable. Check support overlap, then consider smoothing or truncating \
             the weights or a smoother ratio model.",
            d.tail.k_threshold.min(K_UNRELIABLE),
            d.n
        )),
        (Verdict::Unreliable, None) => out.push(format!(
            "The tail of the weights could not be checked ({}); treat them as unverified.",
            d.tail.note.as_deref().unwrap_or("no fit")
        )),
        (Verdict::Usable, Some(k)) => out.push(format!(
            "Pareto k = {k:.2} is between 0.5 and {:.2}: weighted estimates are usable but converge slowly and \
             can be noisy.",
            d.tail.k_threshold.min(K_UNRELIABLE)
        )),
        _ => {}
    }
    if d.rows_for_half * 20 < d.n {
        out.push(format!(
            "{} ({}) carry half of the total weight.",
            plural(d.rows_for_half, "row", "rows"),
            pct(d.rows_for_half as f64 / d.n as f64)
        ));
    }
    if d.ess_fraction < 0.1 {
        out.push(format!(
            "The effective sample size is {}: a weighted fit rests on about that many rows.",
            ess_words(d.ess, d.n, "rows")
        ));
    }
    if d.n_zero > 0 {
        out.push(format!(
            "{} ({}) have weight zero and drop out of any weighted fit.",
            plural(d.n_zero, "row", "rows"),
            pct(d.n_zero as f64 / d.n as f64)
        ));
    }
    for g in &d.groups {
        if g.n == 0 {
            continue;
        }
        if g.weight_share < 0.2 * g.row_share || g.ess < 10.0_f64.min(g.n as f64) {
            out.push(format!(
                "Group '{}' holds {} of the rows but {} of the weight (ESS {}): a weighted model may \
                 largely ignore it.",
                g.group,
                pct(g.row_share),
                pct(g.weight_share),
                ess_rows(g.ess)
            ));
        }
    }
    out
}
