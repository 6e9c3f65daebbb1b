//! Stabilising importance weights: flattening, Pareto smoothing, clipping, truncation and
//! normalisation, applied in one fixed order and recorded.
//!
//! [`stabilize`] applies the steps that are switched on, always in this order:
//!
//! 1. **flatten** (`power` in [0, 1]): `w <- w^power` (Shimodaira 2000, *J. Statistical Planning
//!    and Inference* 90). `power = 1` leaves the weights alone, `power = 0` makes every non-zero
//!    weight 1. A zero weight stays zero (the row is outside the target's support).
//! 2. **smooth** (PSIS; Vehtari, Simpson, Gelman, Yao & Gabry 2024, JMLR 25(72)): the M largest
//!    weights (M = ceil(min(0.2 n, 3 sqrt n))) are replaced by the expected order statistics of a
//!    generalised Pareto distribution fitted to them (Zhang & Stephens 2009), capped at the largest
//!    original weight: the z-th largest-but-(M - z) tail weight becomes
//!    `u + F^-1((z - 1/2) / M)`, u the largest weight outside the tail. Order is kept (tied weights
//!    get the mean of their smoothed values, so the result does not depend on the row order);
//!    weights outside the tail and weights equal to u are untouched; with fewer than 5 tail rows, or
//!    a tail that cannot be fitted, nothing changes.
//! 3. **upper_quantile** `q` in (0, 1]: `w <- min(w, Q_q(w))` with Q_q the q-quantile of the weights
//!    entering this step (linear interpolation, as numpy's default). Scale-free.
//! 4. **lower / upper / truncate / normalize**, together:
//!    - with `normalize` (the default), the bounds are on the scale of the *output*, whose mean is
//!      exactly 1 (to rounding) over the source rows: the result is `clamp(s w, lower, U)` with the
//!      one scale `s` that makes its mean 1, where `U = min(upper, sqrt(n))` if `truncate` else
//!      `upper`. So every output weight lies in [lower, U]; truncation is Ionides' rule
//!      (2008, *J. Computational and Graphical Statistics* 17(2)): no weight above sqrt(n) times the
//!      mean weight, with the mean taken over the final weights. This needs `lower <= 1 <= upper`.
//!    - without `normalize`, the bounds are on the scale of the weights given:
//!      `clamp(w, lower, min(upper, sqrt(n) * mean(w)))`, the truncation level using the mean of the
//!      weights entering the step, as in Ionides (2008).
//!
//! Complexity: O(n) for steps 1 and 3 (selection), O(n + M log M + M sqrt M) for step 2,
//! O(n log n) for step 4 when bounds are combined with normalisation (one sort to find s), O(n)
//! otherwise.
//!
//! Clipping and truncation trade bias for variance (common practice); see
//! [`crate::diagnostics::clip_tradeoff`] for the trade-off on a given set of weights. None of these
//! steps can repair weights where the source does not cover the target.

use crate::data::validate_weights;
use crate::diagnostics::{self, TailFit};
use crate::error::{Error, Result};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Which stabilisation steps to apply (see the module docs for the order). Builder setters
/// consume and return the options; [`stabilize`] checks them.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StabilizeOptions {
    /// Lower bound (default none). With `normalize`, on the mean-1 scale and at most 1.
    pub lower: Option<f64>,
    /// Upper bound (default none). With `normalize`, on the mean-1 scale and at least 1.
    pub upper: Option<f64>,
    /// Clip from above at this quantile of the weights, in (0, 1] (default none).
    pub upper_quantile: Option<f64>,
    /// Truncate at sqrt(n) times the mean weight (Ionides 2008; default false).
    pub truncate: bool,
    /// Flattening exponent in [0, 1] (Shimodaira 2000; default 1 = no flattening).
    pub power: f64,
    /// Pareto-smooth the largest weights (PSIS; default false).
    pub smooth: bool,
    /// Rescale to mean 1 over the rows (default true).
    pub normalize: bool,
}

impl Default for StabilizeOptions {
    fn default() -> Self {
        Self {
            lower: None,
            upper: None,
            upper_quantile: None,
            truncate: false,
            power: 1.0,
            smooth: false,
            normalize: true,
        }
    }
}

impl StabilizeOptions {
    /// Defaults: only normalisation to mean 1.
    pub fn new() -> Self {
        Self::default()
    }
    /// Lower bound (>= 0).
    pub fn lower(mut self, v: f64) -> Self {
        self.lower = Some(v);
        self
    }
    /// Upper bound (> 0).
    pub fn upper(mut self, v: f64) -> Self {
        self.upper = Some(v);
        self
    }
    /// Upper clip at a quantile in (0, 1].
    pub fn upper_quantile(mut self, q: f64) -> Self {
        self.upper_quantile = Some(q);
        self
    }
    /// Truncation at sqrt(n) times the mean weight.
    pub fn truncate(mut self, on: bool) -> Self {
        self.truncate = on;
        self
    }
    /// Flattening exponent in [0, 1].
    pub fn power(mut self, p: f64) -> Self {
        self.power = p;
        self
    }
    /// Pareto smoothing of the largest weights.
    pub fn smooth(mut self, on: bool) -> Self {
        self.smooth = on;
        self
    }
    /// Rescaling to mean 1.
    pub fn normalize(mut self, on: bool) -> Self {
        self.normalize = on;
        self
    }

    /// Rejects out-of-range options, naming the option.
    pub fn check(&self) -> Result<()> {
        if let Some(l) = self.lower {
            if !(l.is_finite() && l >= 0.0) {
                return Err(Error::param(
                    "lower",
                    format!("must be finite and >= 0, got {l}"),
                ));
            }
            if self.normalize && l > 1.0 {
                return Err(Error::param(
                    "lower",
                    format!("must be at most 1 when normalize is on (the weights are rescaled to mean 1), got {l}"),
                ));
            }
        }
        if let Some(u) = self.upper {
            if !(u.is_finite() && u > 0.0) {
                return Err(Error::param(
                    "upper",
                    format!("must be finite and > 0, got {u}"),
                ));
            }
            if self.normalize && u < 1.0 {
                return Err(Error::param(
                    "upper",
                    format!("must be at least 1 when normalize is on (the weights are rescaled to mean 1), got {u}"),
                ));
            }
        }
        if let (Some(l), Some(u)) = (self.lower, self.upper) {
            if l > u {
                return Err(Error::param("lower", format!("{l} is above upper = {u}")));
            }
        }
        if let Some(q) = self.upper_quantile {
            if !(q > 0.0 && q <= 1.0) {
                return Err(Error::param(
                    "upper_quantile",
                    format!("must be in (0, 1], got {q}"),
                ));
            }
        }
        if !(self.power.is_finite() && (0.0..=1.0).contains(&self.power)) {
            return Err(Error::param(
                "power",
                format!("must be in [0, 1], got {}", self.power),
            ));
        }
        Ok(())
    }
}

/// One step that [`stabilize`] applied.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StepRecord {
    /// `flatten`, `smooth`, `upper_quantile`, `lower`, `upper`, `truncate` or `normalize`.
    pub step: String,
    /// Rows whose weight this step changed.
    pub rows_changed: usize,
    /// The bound, exponent, Pareto k or scale the step used (see `note`).
    pub value: Option<f64>,
    /// What the value means and anything worth knowing.
    pub note: String,
}

/// What [`stabilize`] did.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StabilizeReport {
    /// Number of weights.
    pub n: usize,
    /// The options as given.
    pub options: StabilizeOptions,
    /// The steps applied, in order.
    pub steps: Vec<StepRecord>,
    /// The lower bound in force on the output (None if none).
    pub lower_used: Option<f64>,
    /// The upper bound in force on the output (None if none): the smaller of `upper` and the
    /// truncation level.
    pub upper_used: Option<f64>,
    /// The tail fit used for smoothing (None unless `smooth`).
    pub smoothing_tail: Option<TailFit>,
}

/// Stabilised weights and the record of what was done.
#[derive(Debug, Clone, PartialEq)]
pub struct Stabilized {
    /// The stabilised weights, one per input row, in the input order.
    pub weights: Vec<f64>,
    /// What was done.
    pub report: StabilizeReport,
}

fn count_changed(a: &[f64], b: &[f64]) -> usize {
    a.par_iter().zip(b).filter(|(x, y)| x != y).count()
}

/// Stabilises weights; see the module docs for the steps and their order.
pub fn stabilize(w: &[f64], options: &StabilizeOptions) -> Result<Stabilized> {
    options.check()?;
    let n = w.len();
    validate_weights(w, n, "weights")?;
    let mut v = w.to_vec();
    let mut steps = Vec::new();

    if options.power != 1.0 {
        let p = options.power;
        let old = v.clone();
        v.par_iter_mut().for_each(|x| {
            if *x > 0.0 {
                *x = x.powf(p);
            }
        });
        steps.push(StepRecord {
            step: "flatten".into(),
            rows_changed: count_changed(&old, &v),
            value: Some(p),
            note: "w <- w^power (Shimodaira 2000); zero weights stay zero".into(),
        });
    }

    let mut smoothing_tail = None;
    if options.smooth {
        let (changed, tail) = pareto_smooth(&mut v);
        let note = match (&tail.k, &tail.note) {
            (Some(_), _) => format!(
                "the {} largest weights replaced by generalised Pareto quantiles (PSIS); value = fitted k",
                tail.tail_size
            ),
            (None, Some(why)) => format!("left unchanged: {why}"),
            (None, None) => "left unchanged".into(),
        };
        steps.push(StepRecord {
            step: "smooth".into(),
            rows_changed: changed,
            value: tail.k,
            note,
        });
        smoothing_tail = Some(tail);
    }

    if let Some(q) = options.upper_quantile {
        let bound = crate::order::quantile_by_selection(&v, q);
        if bound <= 0.0 {
            return Err(Error::param(
                "upper_quantile",
                format!("the {q}-quantile of the weights is 0, so clipping there would set every weight to 0"),
            ));
        }
        let mut changed = 0;
        for x in &mut v {
            if *x > bound {
                *x = bound;
                changed += 1;
            }
        }
        steps.push(StepRecord {
            step: "upper_quantile".into(),
            rows_changed: changed,
            value: Some(bound),
            note: format!("clipped from above at the {q}-quantile of the weights (value, before normalisation)"),
        });
    }

    let (lower_used, upper_used) = if options.normalize {
        bound_and_normalize(&mut v, options, &mut steps)?
    } else {
        bound_only(&mut v, options, &mut steps)
    };

    Ok(Stabilized {
        weights: v,
        report: StabilizeReport {
            n,
            options: options.clone(),
            steps,
            lower_used,
            upper_used,
            smoothing_tail,
        },
    })
}

/// Records the rows moved to each bound.
fn record_bounds(
    steps: &mut Vec<StepRecord>,
    raised: usize,
    lowered: usize,
    lower: f64,
    upper: f64,
    upper_is_truncation: bool,
    scale_note: &str,
) {
    if lower > 0.0 {
        steps.push(StepRecord {
            step: "lower".into(),
            rows_changed: raised,
            value: Some(lower),
            note: format!("raised to the lower bound{scale_note}"),
        });
    }
    if upper.is_finite() {
        let (step, what) = if upper_is_truncation {
            (
                "truncate",
                "truncated at sqrt(n) times the mean weight (Ionides 2008)",
            )
        } else {
            ("upper", "clipped at the upper bound")
        };
        steps.push(StepRecord {
            step: step.into(),
            rows_changed: lowered,
            value: Some(upper),
            note: format!("{what}{scale_note}"),
        });
    }
}

/// Step 4 without normalisation: bounds on the input scale.
fn bound_only(
    v: &mut [f64],
    o: &StabilizeOptions,
    steps: &mut Vec<StepRecord>,
) -> (Option<f64>, Option<f64>) {
    let n = v.len();
    let lower = o.lower.unwrap_or(0.0);
    let upper = o.upper.unwrap_or(f64::INFINITY);
    let trunc = if o.truncate {
        let mean = v.iter().sum::<f64>() / n as f64;
        (n as f64).sqrt() * mean
    } else {
        f64::INFINITY
    };
    let u = upper.min(trunc);
    let (mut raised, mut lowered) = (0, 0);
    for x in v.iter_mut() {
        if *x < lower {
            *x = lower;
            raised += 1;
        } else if *x > u {
            *x = u;
            lowered += 1;
        }
    }
    record_bounds(
        steps,
        raised,
        lowered,
        lower,
        u,
        trunc < upper,
        " (scale of the weights given)",
    );
    ((lower > 0.0).then_some(lower), u.is_finite().then_some(u))
}

/// Step 4 with normalisation: finds the one scale s with mean(clamp(s v, L, U)) = 1.
fn bound_and_normalize(
    v: &mut [f64],
    o: &StabilizeOptions,
    steps: &mut Vec<StepRecord>,
) -> Result<(Option<f64>, Option<f64>)> {
    let n = v.len();
    let nf = n as f64;
    let lower = o.lower.unwrap_or(0.0);
    let upper = o.upper.unwrap_or(f64::INFINITY);
    let trunc = if o.truncate { nf.sqrt() } else { f64::INFINITY };
    let u = upper.min(trunc);
    let total: f64 = v.iter().sum();
    if !(total > 0.0) {
        return Err(Error::InvalidWeights {
            argument: "weights".into(),
            reason: "all weights are zero".into(),
        });
    }
    if lower == 0.0 && u.is_infinite() {
        let s = nf / total;
        let mut changed = 0;
        for x in v.iter_mut() {
            let y = *x * s;
            changed += usize::from(y != *x);
            *x = y;
        }
        steps.push(StepRecord {
            step: "normalize".into(),
            rows_changed: changed,
            value: Some(s),
            note: "rescaled to mean 1 (value = scale factor)".into(),
        });
        return Ok((None, None));
    }
    if lower >= u {
        // Only possible with lower = upper = 1: every weight is 1.
        let changed = v.iter().filter(|x| **x != lower).count();
        v.iter_mut().for_each(|x| *x = lower);
        record_bounds(
            steps,
            changed,
            0,
            lower,
            u,
            trunc < upper,
            " (all weights set to 1)",
        );
        return Ok((Some(lower), Some(u)));
    }
    let n_pos = v.iter().filter(|x| **x > 0.0).count();
    let sup = if u.is_finite() {
        (u * n_pos as f64 + lower * (n - n_pos) as f64) / nf
    } else {
        f64::INFINITY
    };
    if sup < 1.0 {
        let name = if trunc < upper { "truncate" } else { "upper" };
        return Err(Error::param(
            name,
            format!(
                "an upper bound of {u} cannot give mean 1: only {n_pos} of {n} weights are non-zero, so the mean \
                 is at most {sup:.4}"
            ),
        ));
    }
    // Sorted copy with prefix sums: f(s) is evaluated in O(log n).
    let mut sorted = v.to_vec();
    sorted.par_sort_unstable_by(f64::total_cmp);
    let mut prefix = Vec::with_capacity(n + 1);
    prefix.push(0.0);
    let mut acc = 0.0;
    for x in &sorted {
        acc += x;
        prefix.push(acc);
    }
    // Counts below L/s and at or above U/s, and the sum in between, at scale s.
    let parts = |s: f64| {
        let a = sorted.partition_point(|x| x * s <= lower);
        let b = sorted.partition_point(|x| x * s < u).max(a);
        (a, b, prefix[b] - prefix[a])
    };
    let f = |s: f64| {
        let (a, b, mid) = parts(s);
        (lower * a as f64 + if b < n { u * (n - b) as f64 } else { 0.0 } + s * mid) / nf
    };
    let s0 = nf / total;
    let (mut lo, mut hi) = (s0, s0);
    for _ in 0..2100 {
        if f(lo) <= 1.0 {
            break;
        }
        lo *= 0.5;
    }
    for _ in 0..2100 {
        if f(hi) >= 1.0 {
            break;
        }
        hi *= 2.0;
    }
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            break;
        }
        if f(mid) < 1.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    // f is linear on the final bracket's segment: solve it exactly there when possible.
    let (a, b, mid) = parts(hi);
    let mut s = hi;
    if mid > 0.0 {
        let exact = (nf - lower * a as f64 - if b < n { u * (n - b) as f64 } else { 0.0 }) / mid;
        if exact.is_finite() && exact > 0.0 && parts(exact).0 == a && parts(exact).1 == b {
            s = exact;
        }
    }
    let (mut raised, mut lowered) = (0, 0);
    for x in v.iter_mut() {
        let y = *x * s;
        if y < lower {
            *x = lower;
            raised += 1;
        } else if y > u {
            *x = u;
            lowered += 1;
        } else {
            *x = y;
        }
    }
    record_bounds(
        steps,
        raised,
        lowered,
        lower,
        u,
        trunc < upper,
        " (on the mean-1 scale of the output)",
    );
    steps.push(StepRecord {
        step: "normalize".into(),
        rows_changed: n - raised - lowered,
        value: Some(s),
        note: "rescaled so the bounded weights have mean 1 (value = scale factor of the unbounded rows)".into(),
    });
    Ok(((lower > 0.0).then_some(lower), u.is_finite().then_some(u)))
}

/// PSIS smoothing in place (see the module docs). Returns the rows changed and the tail fit.
pub(crate) fn pareto_smooth(v: &mut [f64]) -> (usize, TailFit) {
    let n = v.len();
    let fit = match diagnostics::pareto_k(v) {
        Ok(f) => f,
        Err(e) => {
            return (
                0,
                TailFit {
                    k: None,
                    sigma: None,
                    tail_size: 0,
                    tail_start: 0.0,
                    k_threshold: diagnostics::k_threshold(n),
                    bounded: false,
                    note: Some(e.to_string()),
                },
            )
        }
    };
    let (Some(k), Some(sigma)) = (fit.k, fit.sigma) else {
        return (0, fit);
    };
    let gpd = diagnostics::GpdFit { k, sigma };
    let m = fit.tail_size;
    let u = fit.tail_start;
    let vmax = v.iter().copied().fold(0.0, f64::max);
    let mut idx: Vec<usize> = (0..n).filter(|&i| v[i] > u).collect();
    idx.sort_unstable_by(|&i, &j| v[i].total_cmp(&v[j]).then(i.cmp(&j)));
    let c = idx.len().min(m);
    let idx = &idx[idx.len() - c..];
    let new: Vec<f64> = (0..c)
        .map(|j| {
            let z = (m - c + j + 1) as f64;
            (u + gpd.quantile((z - 0.5) / m as f64)).min(vmax)
        })
        .collect();
    // Tied weights get the mean of their smoothed values (row-order independence).
    let mut out = new.clone();
    let mut start = 0;
    while start < c {
        let mut end = start + 1;
        while end < c && v[idx[end]] == v[idx[start]] {
            end += 1;
        }
        if end - start > 1 {
            let mean = (new[start..end].iter().sum::<f64>() / (end - start) as f64)
                .clamp(new[start], new[end - 1]);
            out[start..end].iter_mut().for_each(|x| *x = mean);
        }
        start = end;
    }
    let mut changed = 0;
    for (&i, &y) in idx.iter().zip(&out) {
        if v[i] != y {
            v[i] = y;
            changed += 1;
        }
    }
    (changed, fit)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diagnostics::tail_size;
    use crate::random::rng;
    use rand::Rng;

    const TAG: u64 = 0x7374_6162;

    fn heavy(n: usize, xi: f64, seed: u64) -> Vec<f64> {
        let mut r = rng(seed ^ TAG);
        (0..n)
            .map(|_| ((1.0 - r.random::<f64>()).powf(-xi) - 1.0) / xi)
            .collect()
    }

    fn mean(v: &[f64]) -> f64 {
        v.iter().sum::<f64>() / v.len() as f64
    }

    #[test]
    fn normalisation_gives_mean_one() {
        let w = heavy(1234, 0.6, 1);
        let s = stabilize(&w, &StabilizeOptions::new()).unwrap();
        assert!((mean(&s.weights) - 1.0).abs() < 1e-12);
        assert_eq!(s.report.steps.len(), 1);
        assert_eq!(s.report.steps[0].step, "normalize");
        // Proportional to the input.
        let c = s.weights[0] / w[0];
        assert!(s
            .weights
            .iter()
            .zip(&w)
            .all(|(a, b)| (a - c * b).abs() <= 1e-12 * a.max(1.0)));
    }

    #[test]
    fn bounds_hold_after_normalisation() {
        let w = heavy(2000, 0.9, 2);
        let o = StabilizeOptions::new().lower(0.2).upper(5.0);
        let s = stabilize(&w, &o).unwrap();
        assert!((mean(&s.weights) - 1.0).abs() < 1e-12);
        assert!(s.weights.iter().all(|x| (0.2..=5.0).contains(x)));
        assert!(s.weights.contains(&5.0) && s.weights.contains(&0.2));
        let names: Vec<&str> = s.report.steps.iter().map(|r| r.step.as_str()).collect();
        assert_eq!(names, ["lower", "upper", "normalize"]);
        assert_eq!(s.report.upper_used, Some(5.0));
        // Truncation (Ionides 2008): every weight at most sqrt(n) times the mean (= 1) after
        // normalisation.
        let s = stabilize(&w, &StabilizeOptions::new().truncate(true)).unwrap();
        let lim = (2000f64).sqrt();
        assert!((mean(&s.weights) - 1.0).abs() < 1e-12);
        assert!(s.weights.iter().all(|x| *x <= lim));
        assert!(s
            .report
            .steps
            .iter()
            .any(|r| r.step == "truncate" && r.rows_changed > 0));
        // Without normalisation: min(w, sqrt(n) * mean(w)) exactly as Ionides (2008).
        let s = stabilize(&w, &StabilizeOptions::new().truncate(true).normalize(false)).unwrap();
        let level = lim * mean(&w);
        assert!(s.weights.iter().zip(&w).all(|(a, b)| *a == b.min(level)));
    }

    #[test]
    fn flattening_and_quantile_clipping() {
        let w = [0.0, 1.0, 4.0, 9.0];
        let s = stabilize(&w, &StabilizeOptions::new().power(0.5).normalize(false)).unwrap();
        assert_eq!(s.weights, vec![0.0, 1.0, 2.0, 3.0]);
        // power 0: every non-zero weight equal, zeros stay zero.
        let s = stabilize(&w, &StabilizeOptions::new().power(0.0)).unwrap();
        assert_eq!(s.weights, vec![0.0, 4.0 / 3.0, 4.0 / 3.0, 4.0 / 3.0]);
        // Median of [1, 2, 3, 4, 100] is 3 (numpy.quantile linear): clip, no normalisation.
        let s = stabilize(
            &[1.0, 2.0, 3.0, 4.0, 100.0],
            &StabilizeOptions::new().upper_quantile(0.5).normalize(false),
        )
        .unwrap();
        assert_eq!(s.weights, vec![1.0, 2.0, 3.0, 3.0, 3.0]);
        assert_eq!(s.report.steps[0].rows_changed, 2);
    }

    #[test]
    fn options_are_checked_by_name() {
        let w = [1.0, 2.0];
        for (o, name) in [
            (StabilizeOptions::new().power(1.5), "power"),
            (StabilizeOptions::new().upper(0.5), "upper"),
            (StabilizeOptions::new().lower(2.0), "lower"),
            (
                StabilizeOptions::new().upper_quantile(0.0),
                "upper_quantile",
            ),
            (StabilizeOptions::new().lower(f64::NAN), "lower"),
            (
                StabilizeOptions::new()
                    .normalize(false)
                    .lower(3.0)
                    .upper(2.0),
                "lower",
            ),
        ] {
            match stabilize(&w, &o) {
                Err(Error::InvalidParameter { name: got, .. }) => assert_eq!(got, name),
                other => panic!("{name}: unexpected {other:?}"),
            }
        }
        // Mean 1 is impossible with upper = 1.5 when only 1 of 4 rows is non-zero.
        assert!(stabilize(&[0.0, 0.0, 0.0, 1.0], &StabilizeOptions::new().upper(1.5)).is_err());
        assert!(matches!(
            stabilize(&[1.0, -2.0], &StabilizeOptions::new()),
            Err(Error::InvalidWeights { .. })
        ));
    }

    #[test]
    fn pareto_smoothing_keeps_order_and_changes_only_the_tail() {
        let n = 4000;
        let w = heavy(n, 0.9, 3);
        let s = stabilize(&w, &StabilizeOptions::new().smooth(true).normalize(false)).unwrap();
        let m = tail_size(n);
        let mut order: Vec<usize> = (0..n).collect();
        order.sort_by(|&i, &j| w[i].total_cmp(&w[j]));
        // Untouched below the tail, order kept everywhere (PSIS, Vehtari et al. 2024).
        for (rank, &i) in order.iter().enumerate() {
            if rank < n - m {
                assert_eq!(s.weights[i], w[i]);
            }
        }
        for p in order.windows(2) {
            assert!(s.weights[p[0]] <= s.weights[p[1]]);
        }
        let changed = s.report.steps[0].rows_changed;
        assert!(changed > 0 && changed <= m);
        // Capped at the largest raw weight.
        let wmax = w.iter().copied().fold(0.0, f64::max);
        assert!(s.weights.iter().all(|x| *x <= wmax));
        // A short tail (fewer than 5 rows) is left alone.
        let small = [3.0, 1.0, 2.0, 50.0, 4.0, 0.5, 7.0, 1.5, 2.5, 9.0];
        let s = stabilize(
            &small,
            &StabilizeOptions::new().smooth(true).normalize(false),
        )
        .unwrap();
        assert_eq!(s.weights, small.to_vec());
        assert_eq!(s.report.steps[0].rows_changed, 0);
    }
}

#[cfg(test)]
mod props {
    //! Properties over random weights: finite, non-negative outputs; invariance to a permutation of
    //! the rows (outputs permuted the same way, equal up to rounding).
    use super::*;
    use crate::diagnostics::{clip_tradeoff, diagnose, effective_sample_size, pareto_k};
    use proptest::prelude::*;

    fn weights() -> impl Strategy<Value = Vec<f64>> {
        // Mixtures of zeros, tiny, ordinary and huge weights; at least one non-zero.
        prop::collection::vec(
            prop_oneof![Just(0.0), 1e-12..1e-6f64, 0.0..10.0f64, 1e3..1e12f64],
            2..300,
        )
        .prop_filter("not all zero", |w| w.iter().any(|v| *v > 0.0))
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-9 * a.abs().max(b.abs()).max(1e-300)
    }

    fn options() -> impl Strategy<Value = StabilizeOptions> {
        (
            any::<bool>(),
            any::<bool>(),
            0.0..=1.0f64,
            any::<bool>(),
            prop::option::of(0.05..=1.0f64),
        )
            .prop_map(|(smooth, truncate, power, normalize, q)| StabilizeOptions {
                lower: None,
                upper: None,
                upper_quantile: q,
                truncate,
                power,
                smooth,
                normalize,
            })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        #[test]
        fn stabilize_is_finite_nonnegative_and_order_free(w in weights(), o in options(), seed in any::<u64>()) {
            let perm = {
                use rand::seq::SliceRandom;
                let mut p: Vec<usize> = (0..w.len()).collect();
                p.shuffle(&mut crate::random::rng(seed));
                p
            };
            let wp: Vec<f64> = perm.iter().map(|&i| w[i]).collect();
            let (a, b) = match (stabilize(&w, &o), stabilize(&wp, &o)) {
                (Ok(a), Ok(b)) => (a, b),
                (Err(_), Err(_)) => return Ok(()), // e.g. a quantile of 0: refused either way
                (x, y) => panic!("one order failed: {x:?} / {y:?}"),
            };
            prop_assert!(a.weights.iter().all(|x| x.is_finite() && *x >= 0.0));
            for (j, &i) in perm.iter().enumerate() {
                prop_assert!(close(b.weights[j], a.weights[i]), "row {i}: {} vs {}", a.weights[i], b.weights[j]);
            }
            if o.normalize {
                let m = a.weights.iter().sum::<f64>() / a.weights.len() as f64;
                prop_assert!((m - 1.0).abs() < 1e-9);
            }
        }

        #[test]
        fn diagnostics_are_finite_and_order_free(w in weights(), seed in any::<u64>()) {
            let mut wp = w.clone();
            {
                use rand::seq::SliceRandom;
                wp.shuffle(&mut crate::random::rng(seed));
            }
            let (d, dp) = (diagnose(&w, None).unwrap(), diagnose(&wp, None).unwrap());
            for x in [d.ess, d.ess_fraction, d.top1_share, d.max_over_mean, d.mean] {
                prop_assert!(x.is_finite() && x >= 0.0);
            }
            prop_assert!(d.ess >= 1.0 - 1e-9 && d.ess <= w.len() as f64 * (1.0 + 1e-12));
            prop_assert!(close(d.ess, dp.ess));
            prop_assert_eq!(d.rows_for_half, dp.rows_for_half);
            prop_assert_eq!(d.verdict, dp.verdict);
            prop_assert_eq!(d.pareto_k.is_some(), dp.pareto_k.is_some());
            if let (Some(k1), Some(k2)) = (d.pareto_k, dp.pareto_k) {
                prop_assert!(k1.is_finite() && close(k1, k2));
            }
            for (a, b) in d.quantiles.iter().zip(&dp.quantiles) {
                prop_assert!(a.1 >= 0.0 && a.1 == b.1);
            }
            prop_assert!(close(effective_sample_size(&w).unwrap(), d.ess));
            prop_assert_eq!(pareto_k(&w).unwrap().k, d.pareto_k);
            let t = clip_tradeoff(&w, None).unwrap();
            let tp = clip_tradeoff(&wp, None).unwrap();
            for (a, b) in t.levels.iter().zip(&tp.levels) {
                prop_assert!(a.ess.is_finite() && a.ess >= 0.0 && a.mean_shift >= -1e-12 && a.upper.is_finite());
                prop_assert!(close(a.ess, b.ess));
            }
        }
    }
}
