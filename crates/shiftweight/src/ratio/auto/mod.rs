//! Data-driven choice among ratio estimators and their stabilisation, judged on held-out rows.
//!
//! **The criterion.** For any candidate ratio g, the Pearson (least-squares) criterion
//!
//! ```text
//! J(g) = 1/2 E_source[g(x)^2] - E_target[g(x)]  =  1/2 E_source[(g - w*)^2] - 1/2 E_source[w*^2]
//! ```
//!
//! differs from the squared error to the true ratio w* only by a constant, so it ranks functions
//! by accuracy without any labels (Kanamori, Hido, Sugiyama 2009, JMLR 10, section 3). It is
//! estimated on held-out rows: source and target rows are each split into `folds` seeded folds;
//! every candidate is fitted on the other folds of both samples (choosing its own
//! hyperparameters there by its own criterion) and scored on the held-out fold of both samples;
//! the table reports the mean over folds and its standard error (sd / sqrt(folds)).
//!
//! **Judged by the weights handed over.** Raw estimates are not what a user should receive, and
//! on raw weights the held-out J rewards heavy tails: it estimates E_source[w^2] from held-out
//! source rows, which rarely contain the thin tail where a heavy-tailed estimate explodes, while
//! E_target\[w\] sees it, so the most extreme candidate looks best. So each candidate is scored
//! (with [`SelectionScore::CappedLeastSquares`], the default) through the weights it would hand
//! over: `g = m min(s w, c)`, with `s` the scale that gives the capped training-fold source weights
//! mean 1 ([`crate::weights::stabilize`] with an upper bound) and `m` the mean of the raw
//! training-fold source weights (the cap moves weight between rows, not its total; see
//! [`WeightCap`]), for each cap `c` of
//! [`CAP_LEVELS`] and Ionides' truncation level sqrt(n) (Ionides 2008, *J. Computational and
//! Graphical Statistics* 17(2)). Capped weights are bounded, so the variance of the held-out
//! score is at most c^2 / n_held_out: a heavy tail can no longer buy a low score. Each candidate
//! keeps the cap with its lowest mean score; its weights after that cap are what it hands over.
//! [`SelectionScore::RelativePearson`] instead scores the bounded relative ratio
//! g / (alpha g + 1 - alpha) by the relative Pearson criterion (Yamada et al. 2013, alpha =
//! [`RELATIVE_ALPHA`]); [`SelectionScore::LeastSquares`] scores raw weights (no cap). The three
//! are compared in docs/automatic-choice.md.
//!
//! **The choice.** Uniform weights (w = 1, "no correction", score -1/2 exactly under every
//! score) are always in the table. A candidate is eligible only if its mean score is lower than
//! uniform's by more than `se_margin` of its standard errors (default 1, common practice) and the
//! heavy-tail guard below does not exclude it. Among the eligible candidates whose mean is within
//! one standard error of the lowest (the one-standard-error rule, common practice), the one whose
//! held-out capped source weights have the largest Kish effective sample size is chosen
//! (`prefer_stable`, default on; off: the lowest mean). With none eligible the choice is uniform
//! weights and the fitted model says so in a warning: the data give no evidence that weighting
//! would help.
//!
//! **Heavy-tail guard.** The raw held-out source weights of each candidate (pooled over the folds,
//! each from a model that did not see the row) get a generalised Pareto tail fit
//! ([`crate::diagnostics::pareto_k`]). A candidate with k >= `tail_k` (default
//! [`TAIL_EXCLUDE_K`] = 1) is listed with its k and score but not chosen, and a warning says
//! why. At k >= 1 the fitted tail has no finite mean (Vehtari et al. 2024, JMLR 25(72)), while a
//! true ratio has mean 1 under the source: such an estimate is not a credible ratio, and its
//! capped weights would mostly be the cap. The stricter 0.7 of the same paper
//! ([`TAIL_UNRELIABLE_K`], the level above which raw importance-sampling estimates are unreliable
//! at practical sample sizes) is not the default here because the scores are of capped weights,
//! whose variance is bounded; in docs/automatic-choice.md it cost more than it saved (on 1-D
//! Gaussian pairs it excluded the most accurate candidate and fell back to uniform weights).
//!
//! **Scale.** Above `max_rows` rows in a sample, the candidates are scored on a seeded random
//! subsample of `max_rows` rows of that sample. The winner then runs its own hyperparameter
//! search once on the whole subsample, and is refitted on all rows with that choice held fixed
//! ([`RatioEstimator::with_chosen`]; an estimator without it is refitted as it is). A penalty or
//! kernel width chosen on fewer rows is, if anything, a little smoother than one chosen on all
//! rows; in exchange the search costs O(`max_rows`) rather than O(n) times its grid.
//!
//! Default candidates: uLSIF, RuLSIF (alpha 0.1), KLIEP (width by its source-and-target
//! likelihood cross-validation) and the classifier with linear, quadratic and Fourier features;
//! the quadratic one only up to [`QUADRATIC_DEFAULT_MAX_COLUMNS`] columns (its cost grows like
//! d^4, see [`default_candidates_for`]; a warning says when it is left out).
//!
//! Candidates are named, boxed estimators: any [`RatioEstimator`] that scores new rows can enter.
//! KMM cannot: it is transductive (weights exist only for the rows it was fitted on), so it has no
//! value at held-out rows and no honest held-out score. A candidate that fails in any fold (for
//! example a transductive one, or a solver that does not converge) gets an infinite score and a
//! warning.
//!
//! The fitted model records the chosen cap in [`FittedRatio::cap`]: its `ratio` and
//! `source_weights` are the capped weights (with the raw source weights' mean), and
//! [`FittedRatio::raw_ratio`] gives the estimate before the cap. When the raw source weights'
//! mean is far below 1 by the rule of [`crate::diagnostics::mean_check`] (the source seems to
//! cover only part of the target), the fitted model warns, and the capped weights keep that mean
//! so that [`crate::diagnostics::diagnose`] calls them unreliable. [`decision_summary`] says in
//! plain words what was chosen and why.
//!
//! Complexity: folds x (cost of fitting and scoring every candidate on (folds-1)/folds of the
//! (subsampled) rows) + folds x candidates x caps x O(n log n) for the caps' scales, plus one
//! fit of the winner on the subsample and one refit on all rows (with fixed hyperparameters above
//! `max_rows`: for the classifier, folds + 1 logistic fits instead of folds x grid). Folds run one after another with the candidates in parallel;
//! memory is one copy of the (subsampled) rows for the current fold plus the pooled held-out
//! source weights of every candidate and cap.

mod criteria;
mod summary;

use criteria::{cap_levels, cap_scale, kish_fraction, mean_of};
pub use criteria::{
    least_squares_criterion, relative_pearson_criterion, SelectionScore, CAP_LEVELS,
    RELATIVE_ALPHA, TAIL_EXCLUDE_K, TAIL_UNRELIABLE_K,
};
pub use summary::decision_summary;

use super::classifier::{ClassifierRatio, FeatureMap, Features};
use super::kliep::KLRatio;
use super::{
    fit_meta, params, standardise_pair, EstimatorKind, FittedRatio, LeastSquaresRatio,
    RatioEstimator, RatioForm, ScoreRow, Selection, WeightCap,
};
use crate::data::{kfold_assignment, validate_pair, Matrix, MatrixView};
use crate::diagnostics::mean_check;
use crate::error::{Error, Result};
use crate::weights::{stabilize, StabilizeOptions};
use rayon::prelude::*;

/// Uniform weights w = 1: the "no correction" baseline.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct UniformRatio;

impl RatioEstimator for UniformRatio {
    fn fit(&self, source: MatrixView, target: MatrixView) -> Result<FittedRatio> {
        validate_pair(&source, &target, 1)?;
        let (st, _, _, warnings) = standardise_pair(source, target);
        Ok(FittedRatio {
            kind: EstimatorKind::Uniform,
            standardizer: st,
            form: RatioForm::Uniform,
            source_weights: vec![1.0; source.rows()],
            selection: Selection {
                criterion: "none (uniform weights)".into(),
                ..Default::default()
            },
            meta: fit_meta(&source, &target, 0),
            warnings,
            encoding: None,
            cap: None,
        })
    }
}

/// A named candidate estimator.
pub struct Candidate {
    /// Name shown in the score table (unique within one [`AutoRatio`]).
    pub name: String,
    /// The estimator; it must score new rows.
    pub estimator: Box<dyn RatioEstimator + Send + Sync>,
}

impl std::fmt::Debug for Candidate {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Candidate")
            .field("name", &self.name)
            .finish_non_exhaustive()
    }
}

/// Default `max_rows`: above this many rows in a sample, candidates are scored on a subsample.
pub const DEFAULT_MAX_ROWS: usize = 20_000;

/// Name of the always-present baseline in the score table.
pub const UNIFORM_NAME: &str = "uniform";

/// A candidate of the automatic choice in plain words, as the reports and every message print
/// it: the names of [`default_candidates`] and [`UNIFORM_NAME`] become what the estimator is
/// (`classifier_quadratic`: "logistic classifier on quadratic features"); any other name (a
/// caller's own candidate) is returned as given.
pub fn candidate_words(name: &str) -> String {
    match name {
        UNIFORM_NAME => "uniform weights (no correction)".into(),
        "ulsif" => "uLSIF (least-squares fit of Gaussian kernels)".into(),
        "classifier_linear" => "logistic classifier on the features".into(),
        QUADRATIC_NAME => "logistic classifier on quadratic features".into(),
        "classifier_fourier" => "logistic classifier on random Fourier features".into(),
        "kliep" => "KLIEP (maximum-likelihood fit of Gaussian kernels)".into(),
        n if n.starts_with("rulsif_alpha_") => format!(
            "RuLSIF, relative ratio with alpha = {}",
            &n["rulsif_alpha_".len()..]
        ),
        n => n.to_string(),
    }
}

/// Above this many columns the quadratic classifier is left out of the default candidates (see
/// [`default_candidates_for`]).
pub const QUADRATIC_DEFAULT_MAX_COLUMNS: usize = 20;

/// The default candidates for data with `n_features` columns: [`default_candidates`] without the
/// quadratic classifier above [`QUADRATIC_DEFAULT_MAX_COLUMNS`] columns. Its d(d + 3)/2 mapped
/// features make each Newton step O(n d^4), and the penalty search fits it six times per fold:
/// measured on 1,000 + 1,000 rows (Gaussian mean shift), one fit with the penalty search took
/// 0.32 s at d = 20 (230 features) and 19.5 s at d = 40 (860 features), where the whole automatic
/// choice took 2.2 s and 70 s. It can still be added as an explicit candidate.
pub fn default_candidates_for(seed: u64, n_features: usize) -> Vec<Candidate> {
    let mut out = default_candidates(seed);
    if n_features > QUADRATIC_DEFAULT_MAX_COLUMNS {
        out.retain(|c| c.name != QUADRATIC_NAME);
    }
    out
}

/// Name of the quadratic classifier among the default candidates.
pub const QUADRATIC_NAME: &str = "classifier_quadratic";

/// The default candidates, seeded with `seed`, whatever the number of columns (the automatic
/// choice uses [`default_candidates_for`]). Adding an estimator is one line here.
///
/// The linear and quadratic classifiers choose their penalty by out-of-fold log-loss (with the
/// fixed default l2 = 1, small samples under-fit the curvature of the log-ratio and the weights
/// blow up in the tails); the Fourier classifier keeps l2 = 1 to bound the cost. KLIEP chooses
/// its width by likelihood cross-validation holding out source and target rows.
pub fn default_candidates(seed: u64) -> Vec<Candidate> {
    fn c(name: &str, e: impl RatioEstimator + Send + Sync + 'static) -> Candidate {
        Candidate {
            name: name.into(),
            estimator: Box::new(e),
        }
    }
    vec![
        c("ulsif", LeastSquaresRatio::new().seed(seed)),
        c(
            "rulsif_alpha_0.1",
            LeastSquaresRatio::new().alpha(0.1).seed(seed),
        ),
        c("kliep", KLRatio::new().seed(seed)),
        c(
            "classifier_linear",
            ClassifierRatio::new().l2(None).seed(seed),
        ),
        c(
            QUADRATIC_NAME,
            ClassifierRatio::new()
                .features(Features::Quadratic)
                .l2(None)
                .seed(seed),
        ),
        c(
            "classifier_fourier",
            ClassifierRatio::new()
                .features(Features::Fourier)
                .seed(seed),
        ),
    ]
}

/// Automatic choice among ratio estimators. Build with [`AutoRatio::new`] and the setters.
#[derive(Debug)]
pub struct AutoRatio {
    /// Include [`default_candidates`] (default true).
    pub use_defaults: bool,
    /// Further candidates, scored after the defaults.
    pub candidates: Vec<Candidate>,
    /// Number of held-out folds (default 5, at least 2).
    pub folds: usize,
    /// Seed of the folds, the subsample and the default candidates (default 0).
    pub seed: u64,
    /// How many standard errors a candidate must beat uniform weights by (default 1, >= 0).
    pub se_margin: f64,
    /// How held-out weights are scored (default capped least squares).
    pub score: SelectionScore,
    /// Among candidates within one standard error of the best, take the one with the largest
    /// effective sample size (default true).
    pub prefer_stable: bool,
    /// Pareto k at or above which a candidate is not chosen (default 0.7, > 0).
    pub tail_k: f64,
    /// Rows per sample above which candidates are scored on a subsample (default 20,000, >= 100).
    pub max_rows: usize,
}

impl Default for AutoRatio {
    fn default() -> Self {
        Self {
            use_defaults: true,
            candidates: Vec::new(),
            folds: 5,
            seed: 0,
            se_margin: 1.0,
            score: SelectionScore::default(),
            prefer_stable: true,
            tail_k: TAIL_EXCLUDE_K,
            max_rows: DEFAULT_MAX_ROWS,
        }
    }
}

/// Held-out score of one candidate (with its best cap).
#[derive(Debug, Clone, PartialEq)]
pub struct CandidateScore {
    /// Candidate name.
    pub name: String,
    /// Mean held-out score over folds (lower is better; infinite when the candidate failed).
    pub mean: f64,
    /// Standard error of the mean over folds.
    pub std_error: f64,
    /// Score on each fold.
    pub per_fold: Vec<f64>,
    /// The failure message, when the candidate failed in some fold.
    pub error: Option<String>,
    /// Pareto k of the pooled held-out raw source weights (None when it cannot be estimated,
    /// e.g. for bounded or too few weights).
    pub pareto_k: Option<f64>,
    /// Why the candidate may not be chosen despite its score (the heavy-tail guard).
    pub excluded: Option<String>,
    /// The cap on the mean-1 scale that goes with the candidate (None: raw weights).
    pub cap: Option<f64>,
    /// Whether the cap is Ionides' truncation level sqrt(n) (recomputed at the refit).
    pub cap_is_truncation: bool,
    /// Kish effective sample size of the pooled held-out (capped) source weights, as a fraction
    /// of the rows.
    pub ess_fraction: f64,
}

/// A seeded subsample of at most `max_rows` rows (all rows, unsampled, below that).
fn subsample(x: MatrixView, max_rows: usize, seed: u64) -> Option<Matrix> {
    if x.rows() <= max_rows {
        return None;
    }
    let mut r = crate::random::rng(seed);
    let mut idx = rand::seq::index::sample(&mut r, x.rows(), max_rows).into_vec();
    idx.sort_unstable();
    Some(x.select_rows(&idx))
}

/// Held-out scores of one candidate and fold: per cap, (score, capped held-out source weights);
/// plus the raw held-out source weights.
type FoldScores = (Vec<(f64, Vec<f64>)>, Vec<f64>);

impl AutoRatio {
    /// Defaults: the default candidates plus uniform weights, 5 folds, seed 0, margin 1 SE,
    /// capped least squares, stable choice within 1 SE, tail guard at k = 1, subsample above
    /// 20,000 rows per sample.
    pub fn new() -> Self {
        Self::default()
    }
    /// Only uniform weights and the candidates added with [`AutoRatio::candidate`].
    pub fn without_defaults(mut self) -> Self {
        self.use_defaults = false;
        self
    }
    /// Adds a named candidate.
    pub fn candidate(
        mut self,
        name: &str,
        estimator: impl RatioEstimator + Send + Sync + 'static,
    ) -> Self {
        self.candidates.push(Candidate {
            name: name.into(),
            estimator: Box::new(estimator),
        });
        self
    }
    /// Adds a named, already boxed candidate.
    pub fn boxed_candidate(
        mut self,
        name: &str,
        estimator: Box<dyn RatioEstimator + Send + Sync>,
    ) -> Self {
        self.candidates.push(Candidate {
            name: name.into(),
            estimator,
        });
        self
    }
    /// Held-out folds (>= 2).
    pub fn folds(mut self, k: usize) -> Self {
        self.folds = k;
        self
    }
    /// Seed of the folds, the subsample and the default candidates.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }
    /// Standard errors by which a candidate must beat uniform weights (>= 0).
    pub fn se_margin(mut self, m: f64) -> Self {
        self.se_margin = m;
        self
    }
    /// How held-out weights are scored.
    pub fn score(mut self, s: SelectionScore) -> Self {
        self.score = s;
        self
    }
    /// Stable choice among candidates within one standard error of the best.
    pub fn prefer_stable(mut self, on: bool) -> Self {
        self.prefer_stable = on;
        self
    }
    /// Pareto k at or above which a candidate is not chosen (> 0).
    pub fn tail_k(mut self, k: f64) -> Self {
        self.tail_k = k;
        self
    }
    /// Rows per sample above which candidates are scored on a subsample (>= 100).
    pub fn max_rows(mut self, n: usize) -> Self {
        self.max_rows = n;
        self
    }

    /// Rejects out-of-range settings with an error naming the parameter.
    pub fn check(&self) -> Result<()> {
        crate::data::check_folds(self.folds)?;
        if !(self.se_margin.is_finite() && self.se_margin >= 0.0) {
            return Err(Error::param(
                "se_margin",
                format!("must be finite and >= 0, got {}", self.se_margin),
            ));
        }
        if !(self.tail_k.is_finite() && self.tail_k > 0.0) {
            return Err(Error::param(
                "tail_k",
                format!("must be finite and > 0, got {}", self.tail_k),
            ));
        }
        if self.max_rows < 100 {
            return Err(Error::param(
                "max_rows",
                format!("must be at least 100, got {}", self.max_rows),
            ));
        }
        let mut seen = vec![UNIFORM_NAME.to_string()];
        for c in &self.candidates {
            if c.name.is_empty()
                || seen.contains(&c.name)
                || (self.use_defaults && is_default_name(&c.name))
            {
                return Err(Error::param(
                    "candidates",
                    format!("candidate name {:?} is empty or used twice (\"{UNIFORM_NAME}\" is always present)", c.name),
                ));
            }
            seen.push(c.name.clone());
        }
        Ok(())
    }

    fn default_set(&self, n_features: usize) -> Vec<Candidate> {
        if self.use_defaults {
            default_candidates_for(self.seed, n_features)
        } else {
            Vec::new()
        }
    }

    /// Scores uniform weights and every candidate on held-out folds (see the module docs).
    /// Returns the scores, uniform first, and the index of the chosen one.
    pub fn evaluate(
        &self,
        source: MatrixView,
        target: MatrixView,
    ) -> Result<(Vec<CandidateScore>, usize)> {
        self.check()?;
        validate_pair(&source, &target, self.folds)?;
        let (sub_s, sub_t) = self.subsamples(source, target);
        self.evaluate_rows(
            sub_s.as_ref().map_or(source, |m| m.view()),
            sub_t.as_ref().map_or(target, |m| m.view()),
        )
    }

    /// The seeded scoring subsamples of the source and the target (`None` for a sample of at
    /// most `max_rows` rows, which is scored whole).
    fn subsamples(
        &self,
        source: MatrixView,
        target: MatrixView,
    ) -> (Option<Matrix>, Option<Matrix>) {
        (
            subsample(source, self.max_rows, self.seed ^ 0x7375_6273),
            subsample(target, self.max_rows, self.seed ^ 0x7375_6274),
        )
    }

    /// [`AutoRatio::evaluate`] on rows already subsampled.
    fn evaluate_rows(
        &self,
        source: MatrixView,
        target: MatrixView,
    ) -> Result<(Vec<CandidateScore>, usize)> {
        let defaults = self.default_set(source.cols());
        let all: Vec<&Candidate> = defaults.iter().chain(&self.candidates).collect();
        let k = self.folds;
        let fold_s = kfold_assignment(source.rows(), k, self.seed ^ 0x0061_7574_6f73)?;
        let fold_t = kfold_assignment(target.rows(), k, self.seed ^ 0x0061_7574_6f74)?;
        let split = |x: MatrixView, fold: &[usize], j: usize| -> (Matrix, Matrix) {
            let (inside, held): (Vec<usize>, Vec<usize>) =
                (0..x.rows()).partition(|i| fold[*i] != j);
            (x.select_rows(&inside), x.select_rows(&held))
        };
        let n_train_s = (0..source.rows()).filter(|i| fold_s[*i] != 0).count();
        let caps: Vec<(f64, bool)> = if self.score == SelectionScore::LeastSquares {
            Vec::new()
        } else {
            cap_levels(n_train_s)
        };
        let n_opts = caps.len().max(1);
        let score = self.score;
        // per[candidate][fold]: per cap (score, capped held-out source weights) and raw weights.
        let mut per: Vec<Vec<std::result::Result<FoldScores, String>>> =
            vec![Vec::with_capacity(k); all.len()];
        for j in 0..k {
            let (tr_s, te_s) = split(source, &fold_s, j);
            let (tr_t, te_t) = split(target, &fold_t, j);
            let scores: Vec<std::result::Result<FoldScores, String>> = all
                .par_iter()
                .map(|c| {
                    let m = c
                        .estimator
                        .fit(tr_s.view(), tr_t.view())
                        .map_err(|e| e.to_string())?;
                    let ws = m.ratio(te_s.view()).map_err(|e| e.to_string())?;
                    let wt = m.ratio(te_t.view()).map_err(|e| e.to_string())?;
                    let mut out = Vec::with_capacity(n_opts);
                    if caps.is_empty() {
                        out.push((score.of(&ws, &wt), ws.clone()));
                    } else {
                        let mass = mean_of(&m.source_weights);
                        for (cap, _) in &caps {
                            let s =
                                cap_scale(&m.source_weights, *cap).map_err(|e| e.to_string())?;
                            let g = |w: &[f64]| -> Vec<f64> {
                                w.iter().map(|x| mass * (s * x).min(*cap)).collect()
                            };
                            let (gs, gt) = (g(&ws), g(&wt));
                            out.push((score.of(&gs, &gt), gs));
                        }
                    }
                    if out.iter().all(|(v, _)| v.is_finite()) {
                        Ok((out, ws))
                    } else {
                        Err("held-out weights are not finite".into())
                    }
                })
                .collect();
            for (p, s) in per.iter_mut().zip(scores) {
                p.push(s);
            }
        }
        let mut out = vec![CandidateScore {
            name: UNIFORM_NAME.into(),
            mean: -0.5,
            std_error: 0.0,
            per_fold: vec![-0.5; k],
            error: None,
            pareto_k: None,
            excluded: None,
            cap: None,
            cap_is_truncation: false,
            ess_fraction: 1.0,
        }];
        for (c, p) in all.iter().zip(per) {
            out.push(self.summarise(&c.name, p, &caps));
        }
        let best = choose(&out, self.se_margin, self.prefer_stable);
        Ok((out, best))
    }

    /// One table row from a candidate's per-fold results: its best cap's mean, standard error,
    /// effective sample size, and the tail fit of its raw weights.
    fn summarise(
        &self,
        name: &str,
        p: Vec<std::result::Result<FoldScores, String>>,
        caps: &[(f64, bool)],
    ) -> CandidateScore {
        if let Some(e) = p.iter().find_map(|r| r.as_ref().err().cloned()) {
            return CandidateScore {
                name: name.into(),
                mean: f64::INFINITY,
                std_error: f64::NAN,
                per_fold: p
                    .iter()
                    .map(|r| r.as_ref().map_or(f64::INFINITY, |(o, _)| o[0].0))
                    .collect(),
                error: Some(e),
                pareto_k: None,
                excluded: None,
                cap: None,
                cap_is_truncation: false,
                ess_fraction: 0.0,
            };
        }
        let folds: Vec<FoldScores> = p.into_iter().map(|r| r.expect("no error")).collect();
        let n_opts = folds[0].0.len();
        let mut best: Option<(usize, f64, f64, Vec<f64>)> = None;
        for o in 0..n_opts {
            let per_fold: Vec<f64> = folds.iter().map(|(v, _)| v[o].0).collect();
            let (mean, se) = crate::metrics::mean_and_std_error(&per_fold);
            if best.as_ref().is_none_or(|b| mean < b.1) {
                best = Some((o, mean, se, per_fold));
            }
        }
        let (o, mean, std_error, per_fold) = best.expect("at least one option");
        let pooled: Vec<f64> = folds
            .iter()
            .flat_map(|(v, _)| v[o].1.iter().copied())
            .collect();
        let raw: Vec<f64> = folds.iter().flat_map(|(_, r)| r.iter().copied()).collect();
        let pareto_k = crate::diagnostics::pareto_k(&raw).ok().and_then(|f| f.k);
        let limit = self.tail_k;
        let excluded = pareto_k.filter(|kk| *kk >= limit).map(|kk| {
            format!(
                "its held-out raw source weights have a fitted Pareto tail shape k = {kk:.2} >= \
                 {limit} (a tail too heavy for reliable weighted estimates, Vehtari et al. 2024), so \
                 its weights would rest on a few rows and its held-out score is not reliable"
            )
        });
        CandidateScore {
            name: name.into(),
            mean,
            std_error,
            per_fold,
            error: None,
            pareto_k,
            excluded,
            cap: caps.get(o).map(|c| c.0),
            cap_is_truncation: caps.get(o).is_some_and(|c| c.1),
            ess_fraction: kish_fraction(&pooled),
        }
    }
}

/// Index of the chosen row of a score table whose row 0 is uniform weights. Eligible are the rows
/// not excluded by the heavy-tail guard whose mean beats uniform's by more than `se_margin` of
/// their own standard errors. Without `prefer_stable` the eligible row with the lowest mean is
/// chosen; with it, among eligible rows within one standard error of that lowest mean, the one
/// with the largest effective sample size. Uniform if none is eligible.
fn choose(scores: &[CandidateScore], se_margin: f64, prefer_stable: bool) -> usize {
    let uniform = scores[0].mean;
    let eligible: Vec<usize> = (1..scores.len())
        .filter(|&i| {
            let s = &scores[i];
            s.excluded.is_none() && s.mean + se_margin * s.std_error < uniform
        })
        .collect();
    let Some(&lowest) = eligible
        .iter()
        .min_by(|a, b| scores[**a].mean.total_cmp(&scores[**b].mean))
    else {
        return 0;
    };
    if !prefer_stable {
        return lowest;
    }
    let bar = scores[lowest].mean + scores[lowest].std_error;
    eligible
        .into_iter()
        .filter(|&i| scores[i].mean <= bar)
        .max_by(|a, b| {
            scores[*a]
                .ess_fraction
                .total_cmp(&scores[*b].ess_fraction)
                .then(b.cmp(a))
        })
        .unwrap_or(lowest)
}

fn is_default_name(name: &str) -> bool {
    default_candidates(0).iter().any(|c| c.name == name)
}

/// Table-row parameter names of the automatic choice's score table.
fn row_params(s: &CandidateScore) -> std::collections::BTreeMap<String, f64> {
    let mut p = params([("std_error", s.std_error), ("ess_fraction", s.ess_fraction)]);
    if let Some(k) = s.pareto_k {
        p.insert("pareto_k".into(), k);
    }
    if s.excluded.is_some() {
        p.insert("excluded".into(), 1.0);
    }
    if let Some(c) = s.cap {
        p.insert("cap".into(), c);
        p.insert(
            "cap_is_truncation".into(),
            if s.cap_is_truncation { 1.0 } else { 0.0 },
        );
    }
    p
}

impl RatioEstimator for AutoRatio {
    fn fit(&self, source: MatrixView, target: MatrixView) -> Result<FittedRatio> {
        self.check()?;
        validate_pair(&source, &target, self.folds)?;
        let (sub_s, sub_t) = self.subsamples(source, target);
        let subsampled = sub_s.is_some() || sub_t.is_some();
        let (scored_s, scored_t) = (
            sub_s.as_ref().map_or(source, |m| m.view()),
            sub_t.as_ref().map_or(target, |m| m.view()),
        );
        let (scores, best) = self.evaluate_rows(scored_s, scored_t)?;
        let win = &scores[best];
        let name = win.name.clone();
        let mut refit_fixed = false;
        let mut fitted = if best == 0 {
            UniformRatio.fit(source, target)?
        } else {
            let defaults = self.default_set(source.cols());
            let c = defaults
                .iter()
                .chain(&self.candidates)
                .find(|c| c.name == name)
                .expect("the chosen name comes from this list");
            // Above max_rows the winner's own hyperparameter search runs on the scoring
            // subsample, and the refit on all rows holds its choice fixed: the search costs
            // O(max_rows) instead of O(n) times the grid size.
            let fixed = if subsampled {
                let on_sub = c.estimator.fit(scored_s, scored_t)?;
                c.estimator.with_chosen(&on_sub.selection.chosen)
            } else {
                None
            };
            refit_fixed = fixed.is_some();
            match fixed {
                Some(e) => e.fit(source, target)?,
                None => c.estimator.fit(source, target)?,
            }
        };
        // The raw source weights' mean, checked before any cap (see the module doc).
        let raw_mean = if best == 0 {
            None
        } else {
            Some(mean_check(&fitted.source_weights)?)
        };
        if let Some(c) = win.cap {
            let upper = if win.cap_is_truncation {
                (source.rows() as f64).sqrt().max(1.0)
            } else {
                c
            };
            let mass = mean_of(&fitted.source_weights);
            let scale = cap_scale(&fitted.source_weights, upper)?;
            let cap = WeightCap { scale, upper, mass };
            for w in fitted.source_weights.iter_mut() {
                *w = cap.apply(*w);
            }
            fitted.cap = Some(cap);
        }
        let mut warnings = Vec::new();
        if let Some(mc) = raw_mean {
            if mc.too_low {
                warnings.push(format!(
                    "the raw estimate's mean weight over the source rows is {:.3} (99.9% upper bound \
                     {:.3}), far below 1: the source seems to cover only part of the target, and no \
                     weighting corrects for target rows outside the source's support; the weights \
                     handed over keep that mean so that diagnose() flags them (see check_overlap)",
                    mc.mean,
                    mc.upper_bound.unwrap_or(f64::NAN)
                ));
            }
        }
        let d = source.cols();
        if self.use_defaults && d > QUADRATIC_DEFAULT_MAX_COLUMNS {
            warnings.push(format!(
                "the quadratic classifier is not among the default candidates above \
                 {QUADRATIC_DEFAULT_MAX_COLUMNS} columns (here {d}: {} quadratic features, and each \
                 Newton step costs O(rows x features^2)); add it as an explicit candidate to score it",
                FeatureMap::Quadratic.dim(d)
            ));
        }
        for s in &scores {
            if let Some(e) = &s.error {
                warnings.push(format!(
                    "candidate {:?} could not be scored and was skipped: {e}",
                    s.name
                ));
            }
            if let Some(why) = &s.excluded {
                warnings.push(format!(
                    "candidate {:?} was not chosen although it scored {:.4}: {why}",
                    s.name, s.mean
                ));
            }
        }
        if best == 0 {
            warnings.push(format!(
                "no candidate estimator beat uniform weights (w = 1, no correction) on the held-out \
                 criterion by more than {} standard error(s); uniform weights were chosen: the data \
                 give no evidence that weighting would help",
                self.se_margin
            ));
        }
        fitted.warnings.extend(warnings);
        let mut chosen = fitted.selection.chosen.clone();
        chosen.insert("folds".into(), self.folds as f64);
        chosen.insert("se_margin".into(), self.se_margin);
        chosen.insert("tail_k".into(), self.tail_k);
        chosen.insert("max_rows".into(), self.max_rows as f64);
        chosen.insert(
            "prefer_stable".into(),
            if self.prefer_stable { 1.0 } else { 0.0 },
        );
        chosen.insert(
            "scored_source_rows".into(),
            source.rows().min(self.max_rows) as f64,
        );
        chosen.insert(
            "scored_target_rows".into(),
            target.rows().min(self.max_rows) as f64,
        );
        if let Some(c) = &fitted.cap {
            chosen.insert("cap".into(), c.upper);
        }
        if refit_fixed {
            chosen.insert("refit_with_subsample_choice".into(), 1.0);
        }
        fitted.selection = Selection {
            criterion: format!(
                "{}; candidates whose held-out raw source weights have a Pareto tail shape k >= {} \
                 are not chosen{}",
                self.score.describe(),
                self.tail_k,
                if self.prefer_stable {
                    "; among candidates within one standard error of the best, the largest \
                     effective sample size wins"
                } else {
                    ""
                }
            ),
            chosen,
            table: scores
                .iter()
                .map(|s| ScoreRow {
                    params: row_params(s),
                    score: s.mean,
                })
                .collect(),
            labels: scores.iter().map(|s| s.name.clone()).collect(),
            candidate: Some(name),
        };
        fitted.meta.seed = self.seed;
        Ok(fitted)
    }
}

#[cfg(test)]
mod tests;
