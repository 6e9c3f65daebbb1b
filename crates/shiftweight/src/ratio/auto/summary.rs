//! [`decision_summary`]: the automatic choice of a fitted model in plain words.

use super::*;

/// The automatic choice of a fitted model in plain words: which estimator and why (its score
/// and standard error against uniform weights', its effective sample size), which cap, what was
/// excluded and why; or, when uniform weights were kept, that no correction was found to help.
/// None for a model that did not come from [`AutoRatio`].
pub fn decision_summary(m: &FittedRatio) -> Option<String> {
    let sel = &m.selection;
    let chosen = sel.candidate.as_ref()?;
    if sel.labels.is_empty() {
        return None;
    }
    let row = |name: &str| {
        sel.labels
            .iter()
            .position(|l| l == name)
            .map(|i| &sel.table[i])
    };
    let mut out = Vec::new();
    let ess = kish_fraction(&m.source_weights);
    let scored = sel.chosen.get("scored_source_rows").copied();
    if chosen == UNIFORM_NAME {
        out.push(format!(
            "Kept uniform weights (no correction): no candidate estimator beat them on held-out rows \
             by more than {} standard error(s), so the data give no evidence that weighting would help.",
            sel.chosen.get("se_margin").copied().unwrap_or(1.0)
        ));
    } else if let Some(r) = row(chosen) {
        let se = r.params.get("std_error").copied().unwrap_or(f64::NAN);
        out.push(format!(
            "Chose {}: held-out score {:.4} (standard error {se:.4}) against -0.5 for uniform \
             weights (lower is better).",
            candidate_words(chosen),
            r.score
        ));
        match m.cap {
            Some(c) => out.push(format!(
                "Its weights are capped at {:.3} times the mean weight{}, keeping the raw estimate's \
                 mean of {:.3}; the raw estimate remains available.",
                c.upper,
                if r.params.get("cap_is_truncation") == Some(&1.0) {
                    " (Ionides' truncation level sqrt(n))"
                } else {
                    ""
                },
                c.mass
            )),
            None => out.push("Its weights are the raw estimates (no cap).".into()),
        }
        let n = m.source_weights.len();
        out.push(format!(
            "Effective sample size of the weights: {}.",
            crate::diagnostics::ess_words(ess * n as f64, n, "source rows")
        ));
    }
    let excluded: Vec<String> = sel
        .labels
        .iter()
        .zip(&sel.table)
        .filter(|(_, r)| r.params.get("excluded") == Some(&1.0))
        .map(|(l, r)| {
            format!(
                "{} (Pareto k {:.2} of its raw weights)",
                candidate_words(l),
                r.params.get("pareto_k").copied().unwrap_or(f64::NAN)
            )
        })
        .collect();
    if !excluded.is_empty() {
        out.push(format!(
            "Not eligible because their weights have too heavy a tail: {}.",
            excluded.join(", ")
        ));
    }
    let failed: Vec<String> = sel
        .labels
        .iter()
        .zip(&sel.table)
        .filter(|(_, r)| r.score.is_infinite())
        .map(|(l, _)| candidate_words(l))
        .collect();
    if !failed.is_empty() {
        out.push(format!("Could not be scored: {}.", failed.join(", ")));
    }
    if let (Some(n), true) = (
        scored,
        (m.meta.n_source as f64) > scored.unwrap_or(f64::INFINITY),
    ) {
        let fixed = if sel.chosen.contains_key("refit_with_subsample_choice") {
            ", keeping the hyperparameters it chose on that subsample"
        } else {
            ""
        };
        out.push(format!(
            "Candidates were scored on a seeded subsample of {n:.0} source rows; the winner was refitted on all {} rows{fixed}.",
            m.meta.n_source
        ));
    }
    Some(out.join(" "))
}
