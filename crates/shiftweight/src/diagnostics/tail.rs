//! The generalised Pareto fit of the upper tail of the weights and the Pareto k estimate.

use super::*;

/// Number of largest weights the tail fit uses for S weights: `ceil(min(0.2 S, 3 sqrt(S)))`
/// (Vehtari et al. 2024, for independent draws; the formula is from memory).
pub fn tail_size(s: usize) -> usize {
    let s = s as f64;
    (0.2 * s).min(3.0 * s.sqrt()).ceil() as usize
}

/// Sample-size-dependent bound on k above which the estimate is unreliable:
/// `min(0.7, 1 - 1 / log10(S))` (Vehtari et al. 2024). Below 10 weights it is 0.
pub fn k_threshold(s: usize) -> f64 {
    let l = (s as f64).log10();
    if l <= 1.0 {
        return 0.0;
    }
    K_UNRELIABLE.min(1.0 - 1.0 / l)
}

/// A fitted generalised Pareto distribution for the exceedances of the tail.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct GpdFit {
    pub k: f64,
    pub sigma: f64,
}

impl GpdFit {
    /// Quantile function of the GPD at probability p in [0, 1).
    pub(crate) fn quantile(&self, p: f64) -> f64 {
        let l = (-p).ln_1p(); // log(1 - p) <= 0
        if self.k.abs() < 1e-12 {
            -self.sigma * l
        } else {
            self.sigma * (-self.k * l).exp_m1() / self.k
        }
    }
}

/// Zhang & Stephens (2009) estimate of the GPD for exceedances `x` (sorted ascending, >= 0, not
/// all zero), with the weakly informative prior of Vehtari et al. (2024) on k.
///
/// Objective: the posterior mean of theta = -k / sigma over a grid of m = 30 + floor(sqrt(M))
/// values `theta_j = 1/x_max + (1 - sqrt(m / (j - 1/2))) / (3 x*)` (x* the first quartile), each
/// weighted by its profile likelihood `M (log(-theta/k(theta)) - k(theta) - 1)` with
/// `k(theta) = mean log(1 - theta x)`. Then k = k(theta_hat), sigma = -k / theta_hat. The prior
/// shrinks k towards 0.5 as if 10 more observations had k = 0.5: k <- (M k + 5) / (M + 10)
/// (grid constants and prior weight from memory). Returns None if the fit is not finite.
pub(crate) fn fit_gpd(x: &[f64]) -> Option<GpdFit> {
    let n = x.len();
    if n < MIN_TAIL {
        return None;
    }
    let xmax = x[n - 1];
    if !(xmax > 0.0) {
        return None;
    }
    // The estimator is scale-equivariant: fit on x / xmax, rescale sigma at the end.
    let inv = 1.0 / xmax;
    let xs: Vec<f64> = x.iter().map(|v| v * inv).collect();
    let q1 = xs[((n as f64 / 4.0 + 0.5).floor() as usize).clamp(1, n) - 1];
    // A zero first quartile (many ties at the threshold) would make the grid infinite; use the
    // smallest positive exceedance instead (our guard).
    let xstar = if q1 > 0.0 {
        q1
    } else {
        xs.iter().copied().find(|v| *v > 0.0)?
    };
    let m = 30 + (n as f64).sqrt().floor() as usize;
    let prior = 3.0;
    let kof = |theta: f64| xs.iter().map(|v| (-theta * v).ln_1p()).sum::<f64>() / n as f64;
    let thetas: Vec<f64> = (1..=m)
        .map(|j| 1.0 + (1.0 - (m as f64 / (j as f64 - 0.5)).sqrt()) / (prior * xstar))
        .collect();
    let loglik: Vec<f64> = thetas
        .par_iter()
        .map(|&t| {
            let k = kof(t);
            let l = n as f64 * ((-t / k).ln() - k - 1.0);
            if l.is_finite() {
                l
            } else {
                f64::NEG_INFINITY
            }
        })
        .collect();
    let lmax = loglik.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !lmax.is_finite() {
        return None;
    }
    // Normalised posterior weights exp(l_j - lmax) / sum (computed stably).
    let wts: Vec<f64> = loglik.iter().map(|l| (l - lmax).exp()).collect();
    let wsum: f64 = wts.iter().sum();
    let theta: f64 = thetas.iter().zip(&wts).map(|(t, w)| t * w).sum::<f64>() / wsum;
    let k = kof(theta);
    let sigma = -k / theta * xmax;
    let k = (n as f64 * k + 10.0 * 0.5) / (n as f64 + 10.0);
    (k.is_finite() && sigma.is_finite() && sigma > 0.0).then_some(GpdFit { k, sigma })
}

/// The Pareto fit of the upper tail of a set of weights.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TailFit {
    /// Estimated shape k; None when it cannot be estimated (see `note`).
    pub k: Option<f64>,
    /// Estimated GPD scale of the exceedances (same units as the weights).
    pub sigma: Option<f64>,
    /// Number of largest weights used (M).
    pub tail_size: usize,
    /// The weight the tail is measured from (the largest weight outside the tail).
    pub tail_start: f64,
    /// Unreliable above this k for this many weights: min(0.7, 1 - 1/log10 S).
    pub k_threshold: f64,
    /// True when the largest weights are all equal (a bounded tail: no heavy-tail problem).
    pub bounded: bool,
    /// Why k is missing, if it is.
    pub note: Option<String>,
}

/// Fits the tail of `sorted_top`: the M+1 largest weights sorted ascending (first = tail start).
pub(super) fn tail_fit_from_sorted(sorted_top: &[f64], s: usize) -> TailFit {
    let m = sorted_top.len().saturating_sub(1);
    let u = sorted_top.first().copied().unwrap_or(0.0);
    let mut fit = TailFit {
        k: None,
        sigma: None,
        tail_size: m,
        tail_start: u,
        k_threshold: k_threshold(s),
        bounded: false,
        note: None,
    };
    if m < MIN_TAIL {
        fit.note = Some(format!(
            "too few weights ({s}) to fit the tail: the tail would hold {m} rows, at least {MIN_TAIL} are needed"
        ));
        return fit;
    }
    let x: Vec<f64> = sorted_top[1..].iter().map(|v| v - u).collect();
    if x[m - 1] <= 0.0 {
        fit.bounded = true;
        fit.note =
            Some("the largest weights are all equal: the tail is bounded (no heavy tail)".into());
        return fit;
    }
    match fit_gpd(&x) {
        Some(g) => {
            fit.k = Some(g.k);
            fit.sigma = Some(g.sigma);
        }
        None => fit.note = Some("the generalised Pareto fit did not give a finite estimate".into()),
    }
    fit
}

/// Tail size and the rank (0-based, ascending) of the tail start, if there is room for a tail.
pub(super) fn tail_ranks(s: usize) -> (usize, Option<usize>) {
    let m = tail_size(s).min(s.saturating_sub(1));
    (m, (s > m).then(|| s - m - 1))
}

/// Pareto k of the upper tail (Zhang & Stephens 2009; tail size and prior of Vehtari et al. 2024).
/// O(n) selection plus O(M log M).
pub fn pareto_k(w: &[f64]) -> Result<TailFit> {
    validate_weights(w, w.len(), "weights")?;
    let s = w.len();
    let (m, start) = tail_ranks(s);
    let mut a = w.to_vec();
    let Some(r) = start else {
        return Ok(tail_fit_from_sorted(&[], s));
    };
    a.select_nth_unstable_by(r, f64::total_cmp);
    let top = &mut a[r..];
    top.sort_unstable_by(f64::total_cmp);
    debug_assert_eq!(top.len(), m + 1);
    Ok(tail_fit_from_sorted(top, s))
}
