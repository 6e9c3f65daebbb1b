//! The "How the weights were estimated" section: the estimator in plain words and every candidate
//! of its selection with score, standard error, ESS and Pareto k where recorded. Candidate names
//! of the automatic choice are put in words by the core's [`shiftweight::ratio::candidate_words`],
//! the one mapping the command line's messages use too. O(candidates x hyperparameters).

use crate::format::num;
use serde::Serialize;
use shiftweight::ratio::{candidate_words, EstimatorKind, RatioForm};
use shiftweight::FittedRatio;
use std::collections::BTreeMap;

/// One candidate of the estimator's selection.
#[derive(Debug, Clone, Serialize)]
pub struct CandidateRow {
    /// Candidate name (an estimator's, or its hyperparameters for a grid search).
    pub name: String,
    /// What the candidate is, in plain words, when the name is an estimator's identifier.
    pub words: Option<String>,
    /// Selection score (lower is better; infinite when it failed).
    pub score: f64,
    /// Standard error of the score, when recorded.
    pub std_error: Option<f64>,
    /// Effective sample size of its weights, when recorded.
    pub effective_sample_size: Option<f64>,
    /// Pareto k of its held-out weights, when recorded.
    pub pareto_k: Option<f64>,
    /// The chosen candidate.
    pub chosen: bool,
    /// Why it may not be chosen (excluded or failed), when so.
    pub excluded: Option<String>,
}

/// The estimator, what it chose and the scores that chose it.
#[derive(Debug, Clone, Serialize)]
pub struct EstimatorPart {
    /// Method name.
    pub method: String,
    /// The chosen weighting in plain words.
    pub description: String,
    /// Selection criterion (lower is better).
    pub criterion: String,
    /// Chosen hyperparameters.
    pub chosen: BTreeMap<String, f64>,
    /// Every candidate with its score, in the order tried.
    pub candidates: Vec<CandidateRow>,
    /// Warnings raised during the fit.
    pub warnings: Vec<String>,
}

impl EstimatorPart {
    /// The report section of a fitted model.
    pub fn from_model(model: &FittedRatio) -> Self {
        let sel = &model.selection;
        let c = &sel.chosen;
        let get = |k: &str| c.get(k).copied();
        // Inside the automatic choice every candidate chose its own hyperparameters.
        let searched =
            |k: &str| sel.candidate.is_some() || sel.table.iter().any(|r| r.params.contains_key(k));
        let how = |k: &str| {
            if searched(k) {
                "chosen by cross-validation"
            } else {
                "given"
            }
        };
        let alpha = get("alpha").unwrap_or(0.0);
        let (method, base) = match (&model.kind, &model.form) {
            (EstimatorKind::LeastSquares, _) => {
                let name = if alpha > 0.0 {
                    format!("RuLSIF (alpha = {})", num(alpha))
                } else {
                    "uLSIF".to_string()
                };
                let d = format!(
                    "{name}, a least-squares fit of Gaussian kernels, width {} and penalty {} {}",
                    get("sigma").map_or("n/a".into(), num),
                    get("lam").map_or("n/a".into(), num),
                    if searched("sigma") {
                        "chosen by leave-one-out cross-validation"
                    } else {
                        "given"
                    }
                );
                (name, d)
            }
            (EstimatorKind::Classifier, RatioForm::LogLinear { map, .. }) => {
                let feats = match map.name() {
                    "linear" => "the features",
                    "quadratic" => "quadratic features",
                    _ => "random Fourier features",
                };
                // The Fourier candidate of the automatic choice keeps its fixed penalty
                // (`shiftweight::ratio::auto::default_candidates`).
                let how_l2 = if sel.candidate.is_some() && map.name() == "fourier" {
                    "fixed"
                } else {
                    how("l2")
                };
                (
                    format!("classifier ({} features)", map.name()),
                    format!(
                        "logistic classifier on {feats}, penalty {} {how_l2}",
                        get("l2").map_or("n/a".into(), num),
                    ),
                )
            }
            (EstimatorKind::Kliep, _) => (
                "KLIEP".into(),
                format!(
                    "KLIEP, a maximum-likelihood fit of Gaussian kernels, width {} {}",
                    get("sigma").map_or("n/a".into(), num),
                    if searched("sigma") {
                        "chosen by likelihood cross-validation"
                    } else {
                        "given"
                    }
                ),
            ),
            (EstimatorKind::KernelMeanMatching, _) => (
                "KMM".into(),
                format!(
                    "kernel mean matching, width {} and ridge {}",
                    get("sigma").map_or("n/a".into(), num),
                    get("ridge").map_or("n/a".into(), num)
                ),
            ),
            (EstimatorKind::Uniform, _) => {
                ("uniform".into(), "uniform weights (no correction)".into())
            }
            (other, _) => (other.name().into(), other.name().into()),
        };
        let description = match &sel.candidate {
            // The base already says what was chosen: do not repeat it in brackets.
            Some(name) if base.starts_with(&candidate_words(name)) => format!(
                "{base}; chosen among {} candidates by the held-out least-squares score",
                sel.labels.len()
            ),
            Some(name) => format!(
                "{base}; chosen among {} candidates ({}) by the held-out least-squares score",
                sel.labels.len(),
                candidate_words(name)
            ),
            None => base,
        };
        let named = sel.labels.len() == sel.table.len() && !sel.labels.is_empty();
        let keys: Vec<String> = sel
            .table
            .first()
            .map(|r| r.params.keys().cloned().collect())
            .unwrap_or_default();
        let facts = ["std_error", "pareto_k", "excluded", "ess", "noise_level"];
        let candidates = sel
            .table
            .iter()
            .enumerate()
            .map(|(i, r)| {
                let p = |k: &str| r.params.get(k).copied().filter(|v| v.is_finite());
                let (name, chosen) = if named {
                    (
                        sel.labels[i].clone(),
                        sel.candidate.as_deref() == Some(&sel.labels[i]),
                    )
                } else {
                    let hyper: Vec<String> = keys
                        .iter()
                        .filter(|k| !facts.contains(&k.as_str()))
                        .map(|k| {
                            format!(
                                "{k} = {}",
                                r.params.get(k).map_or("n/a".into(), |v| num(*v))
                            )
                        })
                        .collect();
                    let chosen = keys
                        .iter()
                        .filter(|k| !facts.contains(&k.as_str()))
                        .all(|k| r.params.get(k) == c.get(k));
                    (hyper.join(", "), chosen)
                };
                let excluded = if !r.score.is_finite() {
                    Some("could not be scored (see the warnings)".to_string())
                } else if r.params.get("excluded").is_some_and(|v| *v > 0.0) {
                    let quoted = format!("candidate {name:?} was not chosen");
                    Some(
                        model
                            .warnings
                            .iter()
                            .find(|w| w.starts_with(&quoted))
                            .and_then(|w| w.split_once(": ").map(|(_, why)| why.to_string()))
                            .unwrap_or_else(|| "excluded by the selection rule".into()),
                    )
                } else {
                    None
                };
                let words = Some(candidate_words(&name)).filter(|w| *w != name);
                CandidateRow {
                    name,
                    words,
                    score: r.score,
                    std_error: p("std_error"),
                    effective_sample_size: p("ess"),
                    pareto_k: p("pareto_k"),
                    chosen,
                    excluded,
                }
            })
            .collect();
        EstimatorPart {
            method,
            description,
            criterion: sel.criterion.clone(),
            chosen: sel.chosen.clone(),
            candidates,
            warnings: model.warnings.clone(),
        }
    }
}
