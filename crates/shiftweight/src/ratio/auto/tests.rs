use super::*;
use rand_distr::{Distribution, Normal};

fn gaussian(n: usize, d: usize, mean: f64, seed: u64) -> Vec<f64> {
    let mut r = crate::random::rng(seed);
    let g = Normal::new(mean, 1.0).unwrap();
    (0..n * d).map(|_| g.sample(&mut r)).collect()
}

#[test]
fn criterion_of_uniform_is_minus_half() {
    // J(1) = 1/2 - 1 by the definition of the criterion (Kanamori et al. 2009).
    assert_eq!(least_squares_criterion(&[1.0; 4], &[1.0; 3]), -0.5);
}

#[test]
fn picks_a_weighting_estimator_under_shift_and_uniform_without() {
    let s = gaussian(300, 2, 0.0, 1);
    let t = gaussian(300, 2, 1.0, 2);
    let (sv, tv) = (
        MatrixView::new(&s, 300, 2).unwrap(),
        MatrixView::new(&t, 300, 2).unwrap(),
    );
    let auto = AutoRatio::new()
        .without_defaults()
        .candidate("classifier_linear", ClassifierRatio::new())
        .candidate("ulsif", LeastSquaresRatio::new().n_basis(50));
    let m = auto.fit(sv, tv).unwrap();
    assert_ne!(m.selection.candidate.as_deref(), Some(UNIFORM_NAME));
    assert_eq!(
        m.selection.labels,
        vec!["uniform", "classifier_linear", "ulsif"]
    );
    assert_eq!(m.selection.table[0].score, -0.5);
    assert!(m.selection.table[1].score < -0.5);
    // The summary names the choice in the words of the reports, not by its identifier.
    let chosen = m.selection.candidate.clone().unwrap();
    let why = decision_summary(&m).unwrap();
    assert!(
        why.contains(&format!("Chose {}:", candidate_words(&chosen))),
        "{why}"
    );
    assert!(!why.contains(&chosen), "{why}");
    let again = FittedRatio::from_json(&m.to_json().unwrap()).unwrap();
    assert_eq!(again.selection, m.selection);

    let same = gaussian(300, 2, 0.0, 3);
    let m0 = AutoRatio::new()
        .without_defaults()
        .candidate("classifier_linear", ClassifierRatio::new())
        .fit(sv, MatrixView::new(&same, 300, 2).unwrap())
        .unwrap();
    assert_eq!(m0.selection.candidate.as_deref(), Some(UNIFORM_NAME));
    assert_eq!(m0.kind, EstimatorKind::Uniform);
    assert!(m0
        .warnings
        .iter()
        .any(|w| w.contains("no candidate estimator beat uniform")));
}

#[test]
fn every_default_candidate_has_words() {
    // Each default candidate and the uniform baseline print as what they are; a name
    // without words would reach the reports and messages as an identifier.
    let names: Vec<String> = default_candidates(0).into_iter().map(|c| c.name).collect();
    for name in names.iter().map(String::as_str).chain([UNIFORM_NAME]) {
        let words = candidate_words(name);
        assert_ne!(words, name);
        assert!(!words.contains('_'), "{name}: {words}");
    }
    assert_eq!(
        candidate_words("rulsif_alpha_0.1"),
        "RuLSIF, relative ratio with alpha = 0.1"
    );
    // A caller's own candidate keeps its name.
    assert_eq!(candidate_words("my_model"), "my_model");
}

fn row(name: &str, mean: f64, std_error: f64, k: Option<f64>) -> CandidateScore {
    CandidateScore {
        name: name.into(),
        mean,
        std_error,
        per_fold: vec![mean; 3],
        error: None,
        pareto_k: k,
        excluded: k
            .filter(|k| *k >= TAIL_EXCLUDE_K)
            .map(|_| "heavy tail".into()),
        cap: None,
        cap_is_truncation: false,
        ess_fraction: 0.5,
    }
}

#[test]
fn quadratic_classifier_is_a_default_only_up_to_the_column_cap() {
    let names = |d: usize| -> Vec<String> {
        default_candidates_for(0, d)
            .into_iter()
            .map(|c| c.name)
            .collect()
    };
    let all: Vec<String> = default_candidates(0).into_iter().map(|c| c.name).collect();
    assert_eq!(names(QUADRATIC_DEFAULT_MAX_COLUMNS), all);
    let wide = names(QUADRATIC_DEFAULT_MAX_COLUMNS + 1);
    assert_eq!(wide.len(), all.len() - 1);
    assert!(!wide.iter().any(|n| n == QUADRATIC_NAME));
    assert!(all.iter().any(|n| n == QUADRATIC_NAME));
}

#[test]
fn heavy_tailed_candidates_are_not_chosen_however_low_their_score() {
    let uniform = row(UNIFORM_NAME, -0.5, 0.0, None);
    // Rule under test: k >= TAIL_EXCLUDE_K (1, Vehtari et al. 2024) is not eligible.
    let table = vec![
        uniform.clone(),
        row("bounded", -1.9, 0.2, Some(0.4)),
        row("heavy", -407.5, 161.3, Some(1.29)),
    ];
    assert_eq!(choose(&table, 1.0, false), 1);
    assert_eq!(choose(&table, 1.0, true), 1);
    // Only heavy-tailed candidates: uniform weights.
    let table = vec![uniform.clone(), row("a", -400.0, 1.0, Some(1.0))];
    assert_eq!(choose(&table, 1.0, true), 0);
    // k below the limit, or unknown: chosen on its score.
    let table = vec![
        uniform.clone(),
        row("a", -2.0, 0.1, Some(0.99)),
        row("b", -3.0, 0.1, None),
    ];
    assert_eq!(choose(&table, 1.0, false), 2);
    // The lowest mean is too noisy to beat uniform by one standard error (-8.0 + 9.1 > -0.5);
    // the steady runner-up is chosen.
    let table = vec![
        uniform.clone(),
        row("noisy", -8.0, 9.1, Some(0.5)),
        row("steady", -5.9, 0.3, Some(0.31)),
    ];
    assert_eq!(choose(&table, 1.0, false), 2);
    assert_eq!(choose(&table, 0.0, false), 1);
    // Failed candidates (infinite mean, NaN standard error) are never eligible.
    let table = vec![uniform, row("failed", f64::INFINITY, f64::NAN, None)];
    assert_eq!(choose(&table, 1.0, true), 0);
}

#[test]
fn the_stable_rule_takes_the_largest_ess_within_one_standard_error() {
    let with_ess = |name: &str, mean: f64, se: f64, ess: f64| CandidateScore {
        ess_fraction: ess,
        ..row(name, mean, se, None)
    };
    let table = vec![
        row(UNIFORM_NAME, -0.5, 0.0, None),
        with_ess("best", -2.0, 0.3, 0.10),
        with_ess("close_and_steady", -1.8, 0.1, 0.60),
        with_ess("steadier_but_worse", -1.5, 0.1, 0.90),
    ];
    // -1.8 is within -2.0 + 0.3; -1.5 is not.
    assert_eq!(choose(&table, 1.0, true), 2);
    assert_eq!(choose(&table, 1.0, false), 1);
}

#[test]
fn criteria_of_uniform_weights_and_of_the_truth() {
    // Both criteria give -1/2 at w = 1 (Kanamori et al. 2009; Yamada et al. 2013).
    assert_eq!(relative_pearson_criterion(&[1.0; 5], &[1.0; 2]), -0.5);
    // Relative ratio of w = 3 with alpha 1/2 is 3 / 2: bounded by 1 / alpha = 2.
    let v = relative_pearson_criterion(&[3.0], &[3.0]);
    assert!((v - (0.25 * 2.25 + 0.25 * 2.25 - 1.5)).abs() < 1e-12);
    // Caps: Ionides' sqrt(n) first, then the grid below it.
    assert_eq!(
        cap_levels(400),
        vec![(20.0, true), (10.0, false), (5.0, false), (3.0, false)]
    );
    assert_eq!(cap_levels(16), vec![(4.0, true), (3.0, false)]);
    // The cap's scale gives mean 1: min(s w, 2) over w = (1, 1, 10): s = 1/2 (common arithmetic).
    let s = cap_scale(&[1.0, 1.0, 10.0], 2.0).unwrap();
    assert!((s - 0.5).abs() < 1e-12, "{s}");
}

#[test]
fn score_tables_with_infinite_and_nan_entries_survive_the_model_file() {
    let sel = Selection {
        criterion: "c".into(),
        table: vec![
            ScoreRow {
                params: params([("std_error", f64::NAN), ("pareto_k", 1.5)]),
                score: f64::INFINITY,
            },
            ScoreRow {
                params: params([("std_error", 0.25)]),
                score: f64::NEG_INFINITY,
            },
        ],
        ..Default::default()
    };
    let text = serde_json::to_string(&sel).unwrap();
    assert!(
        text.contains("\"inf\"") && text.contains("\"nan\""),
        "{text}"
    );
    let back: Selection = serde_json::from_str(&text).unwrap();
    assert_eq!(back.table[0].score, f64::INFINITY);
    assert!(back.table[0].params["std_error"].is_nan());
    assert_eq!(back.table[0].params["pareto_k"], 1.5);
    assert_eq!(back.table[1].score, f64::NEG_INFINITY);
    let bad = text.replace("\"inf\"", "\"lots\"");
    let err = serde_json::from_str::<Selection>(&bad)
        .unwrap_err()
        .to_string();
    assert!(err.contains("lots"), "{err}");
}

#[test]
fn duplicate_names_and_bad_settings_are_rejected() {
    let a = AutoRatio::new().candidate("ulsif", LeastSquaresRatio::new());
    assert!(a.check().is_err());
    let b = AutoRatio::new()
        .without_defaults()
        .candidate("uniform", UniformRatio);
    assert!(b.check().is_err());
    assert!(AutoRatio::new().folds(1).check().is_err());
    assert!(AutoRatio::new().se_margin(-1.0).check().is_err());
    assert!(AutoRatio::new().tail_k(0.0).check().is_err());
    assert!(AutoRatio::new().max_rows(10).check().is_err());
    assert!(SelectionScore::from_name("nope").is_err());
}

#[test]
fn holding_a_fits_choice_fixed_reproduces_that_fit() {
    // A refit with the chosen hyperparameters held fixed is the same model as the search's
    // own final fit on the same rows (the search ends by fitting at its choice), so the refit
    // of the automatic choice changes only the cost of the search, not what it fits.
    let s = gaussian(400, 2, 0.0, 21);
    let t = gaussian(300, 2, 0.7, 22);
    let (sv, tv) = (
        MatrixView::new(&s, 400, 2).unwrap(),
        MatrixView::new(&t, 300, 2).unwrap(),
    );
    let searched: Vec<(&str, crate::ratio::BoxedEstimator)> = vec![
        ("l2", Box::new(ClassifierRatio::new().l2(None).seed(3))),
        ("lam", Box::new(LeastSquaresRatio::new().seed(3))),
        ("sigma", Box::new(KLRatio::new().seed(3))),
    ];
    for (key, e) in searched {
        let m = e.fit(sv, tv).unwrap();
        let fixed = e
            .with_chosen(&m.selection.chosen)
            .expect("a searched estimator");
        let again = fixed.fit(sv, tv).unwrap();
        assert_eq!(again.selection.chosen[key], m.selection.chosen[key]);
        assert!(
            again.selection.table.len() <= 1,
            "{key}: the refit searched again"
        );
        let (a, b) = (m.ratio(sv).unwrap(), again.ratio(sv).unwrap());
        for (x, y) in a.iter().zip(&b) {
            assert!(
                (x - y).abs() <= 1e-9 * x.abs().max(1.0),
                "{key}: {x} vs {y}"
            );
        }
    }
    // Nothing to hold fixed when nothing was searched.
    let given = ClassifierRatio::new().l2(Some(1.0));
    let m = given.fit(sv, tv).unwrap();
    assert!(given.with_chosen(&m.selection.chosen).is_none());
}

#[test]
fn above_max_rows_the_winner_is_refitted_with_its_subsample_choice() {
    let s = gaussian(900, 2, 0.0, 31);
    let t = gaussian(700, 2, 1.0, 32);
    let (sv, tv) = (
        MatrixView::new(&s, 900, 2).unwrap(),
        MatrixView::new(&t, 700, 2).unwrap(),
    );
    let auto = AutoRatio::new()
        .without_defaults()
        .candidate("classifier_linear", ClassifierRatio::new().l2(None).seed(4))
        .max_rows(300);
    let m = auto.fit(sv, tv).unwrap();
    assert_eq!(m.selection.candidate.as_deref(), Some("classifier_linear"));
    assert_eq!(m.selection.chosen["refit_with_subsample_choice"], 1.0);
    assert_eq!(m.meta.n_source, 900);
    assert_eq!(m.source_weights.len(), 900);
    let text = decision_summary(&m).unwrap();
    assert!(
        text.contains("keeping the hyperparameters it chose"),
        "{text}"
    );
    // Below max_rows nothing is subsampled and the winner searches on all rows.
    let whole = auto.max_rows(5000).fit(sv, tv).unwrap();
    assert!(!whole
        .selection
        .chosen
        .contains_key("refit_with_subsample_choice"));
}

#[test]
fn auto_ratio_is_send_and_sync() {
    fn is<T: Send + Sync>() {}
    is::<AutoRatio>();
    is::<FittedRatio>();
}
