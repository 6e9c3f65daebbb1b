use super::*;
use crate::Matrix;

/// One-hot probability rows (a classifier sure of its predicted class).
fn one_hot(pred: &[usize], k: usize) -> Matrix {
    let mut v = vec![0.0; pred.len() * k];
    for (i, &c) in pred.iter().enumerate() {
        v[i * k + c] = 1.0;
    }
    Matrix::new(v, pred.len(), k).unwrap()
}

/// Source: class 0 predicted 0 in 8 of 10 rows, class 1 predicted 1 in 7 of 10 rows; target:
/// 9 of 20 rows predicted 0, i.e. mu = (0.45, 0.55) = A (0.3, 0.7).
fn two_class_case() -> (Matrix, Vec<usize>, Matrix) {
    let mut labels = vec![0; 10];
    labels.extend(vec![1; 10]);
    let mut pred = vec![0; 8];
    pred.extend(vec![1; 2]);
    pred.extend(vec![0; 3]);
    pred.extend(vec![1; 7]);
    let mut pred_t = vec![0; 9];
    pred_t.extend(vec![1; 11]);
    (one_hot(&pred, 2), labels, one_hot(&pred_t, 2))
}

#[test]
fn bbse_solves_the_confusion_equation_exactly() {
    // Analytic: A = [[0.8, 0.3], [0.2, 0.7]], mu = (0.45, 0.55) gives q = A^{-1} mu = (0.3, 0.7)
    // (the BBSE equation of Lipton, Wang & Smola 2018).
    let (ps, labels, pt) = two_class_case();
    let est = LabelShift::new()
        .method(LabelShiftMethod::Bbse)
        .fit(ps.view(), &labels, pt.view())
        .unwrap();
    let b = est.bbse.as_ref().unwrap();
    assert!((b.raw_proportions[0] - 0.3).abs() < 1e-12);
    assert!((b.raw_proportions[1] - 0.7).abs() < 1e-12);
    assert!((est.class_weights[0] - 0.6).abs() < 1e-12); // 0.3 / 0.5
    assert!((est.class_weights[1] - 1.4).abs() < 1e-12);
    // Condition number of A: singular values of [[0.8, 0.3], [0.2, 0.7]] are the square roots
    // of the eigenvalues of A^T A = [[0.68, 0.38], [0.38, 0.58]] (analytic 2 x 2 formula).
    let (t, d): (f64, f64) = (0.68 + 0.58, 0.68 * 0.58 - 0.38 * 0.38);
    let disc = (t * t / 4.0 - d).sqrt();
    let cond = ((t / 2.0 + disc) / (t / 2.0 - disc)).sqrt();
    assert!((b.condition_number - cond).abs() < 1e-9 * cond);
}

#[test]
fn bbse_variance_with_a_perfect_classifier_is_binomial() {
    // A = I, so q = mu and the delta-method variance reduces to the binomial q (1 - q) / n_t
    // (analytic); the source columns of A have zero variance.
    let labels: Vec<usize> = (0..40).map(|i| i % 2).collect();
    let ps = one_hot(&labels, 2);
    let pred_t: Vec<usize> = (0..50).map(|i| usize::from(i >= 15)).collect();
    let pt = one_hot(&pred_t, 2);
    let est = LabelShift::new()
        .method(LabelShiftMethod::Bbse)
        .fit(ps.view(), &labels, pt.view())
        .unwrap();
    let b = est.bbse.unwrap();
    let se = (0.3f64 * 0.7 / 50.0).sqrt();
    assert!((b.std_errors[0] - se).abs() < 1e-12);
    assert!((b.std_errors[1] - se).abs() < 1e-12);
    // 95% normal quantile 1.959964 (scipy.stats.norm.ppf(0.975)).
    assert!((b.interval_low.iter().sum::<f64>() - (1.0 - 2.0 * 1.959_963_985 * se)).abs() < 1e-8);
}

#[test]
fn singular_confusion_matrix_is_an_error_naming_the_class() {
    // The classifier never predicts class 2: the third row of A is zero.
    let labels = vec![0, 1, 2, 0, 1, 2];
    let ps = one_hot(&[0, 1, 0, 0, 1, 1], 3);
    let pt = one_hot(&[0, 1, 1], 3);
    let err = LabelShift::new()
        .method(LabelShiftMethod::Bbse)
        .fit(ps.view(), &labels, pt.view())
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("source_probabilities") && err.contains("[2]"),
        "{err}"
    );
}

#[test]
fn absent_class_and_bad_rows_are_errors_naming_the_argument() {
    let (ps, _, pt) = two_class_case();
    let labels = vec![0; 20];
    let err = LabelShift::new()
        .fit(ps.view(), &labels, pt.view())
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("source_labels") && err.contains("[1]"),
        "{err}"
    );
    let bad = Matrix::new(vec![0.5, 0.6, 0.5, 0.5], 2, 2).unwrap();
    let err = LabelShift::new()
        .fit(bad.view(), &[0, 1], pt.view())
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("source_probabilities") && err.contains("row 0"),
        "{err}"
    );
    let err = LabelShift::new()
        .fit(ps.view(), &[0; 19], pt.view())
        .unwrap_err()
        .to_string();
    assert!(err.contains("source_labels"), "{err}");
    for (opt, est) in [
        ("level", LabelShift::new().level(1.0)),
        ("bootstrap", LabelShift::new().bootstrap(5)),
        ("max_iter", LabelShift::new().max_iter(0)),
    ] {
        let (ps, labels, pt) = two_class_case();
        let err = est.fit(ps.view(), &labels, pt.view()).unwrap_err();
        assert!(err.to_string().contains(opt), "{err}");
    }
}

/// Seeded soft probabilities: rows drawn from a 3-class problem with overlapping classes.
fn soft_case(n_s: usize, n_t: usize, q: [f64; 3], seed: u64) -> (Matrix, Vec<usize>, Matrix) {
    use rand::Rng;
    let mut r = crate::random::rng(seed);
    let centre = [[2.0, 0.0, 0.0], [0.0, 2.0, 0.0], [0.0, 0.0, 2.0]];
    let draw = |y: usize, r: &mut rand_chacha::ChaCha8Rng| -> Vec<f64> {
        let z: Vec<f64> = (0..3)
            .map(|c| centre[y][c] + r.random_range(-1.5..1.5))
            .collect();
        let m = z.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
        let e: Vec<f64> = z.iter().map(|v| (v - m).exp()).collect();
        let s: f64 = e.iter().sum();
        e.iter().map(|v| v / s).collect()
    };
    let labels: Vec<usize> = (0..n_s).map(|i| i % 3).collect();
    let ps: Vec<f64> = labels.iter().flat_map(|&y| draw(y, &mut r)).collect();
    let pt: Vec<f64> = (0..n_t)
        .flat_map(|_| {
            let u: f64 = r.random();
            let y = if u < q[0] {
                0
            } else if u < q[0] + q[1] {
                1
            } else {
                2
            };
            draw(y, &mut r)
        })
        .collect();
    (
        Matrix::new(ps, n_s, 3).unwrap(),
        labels,
        Matrix::new(pt, n_t, 3).unwrap(),
    )
}

#[test]
fn em_fixed_point_satisfies_the_likelihood_optimality_conditions() {
    // First-order (KKT) conditions of max_q sum_i ln sum_y q_y r_iy over the simplex
    // (Saerens et al. 2002): (1/n) sum_i r_iy / s_i = 1 for every class with q_y > 0.
    let (ps, labels, pt) = soft_case(300, 400, [0.6, 0.3, 0.1], 1);
    let est = LabelShift::new()
        .bootstrap(0)
        .fit(ps.view(), &labels, pt.view())
        .unwrap();
    let e = est.em.as_ref().unwrap();
    assert!(e.converged);
    let post = e.calibration.apply(&pt);
    let p = &est.source_proportions;
    let q = &est.target_proportions;
    for y in 0..3 {
        let mut g = 0.0;
        for i in 0..post.rows() {
            let row = post.row(i);
            let s: f64 = (0..3).map(|c| q[c] * row[c] / p[c]).sum();
            g += row[y] / p[y] / s;
        }
        assert!(
            (g / post.rows() as f64 - 1.0).abs() < 1e-7,
            "class {y}: {g}"
        );
    }
    assert!(e.log_likelihood_gain >= 0.0);
    assert!(est.interval_low.is_none());
}

#[test]
fn calibration_gradient_vanishes_so_calibrated_means_equal_class_shares() {
    // At the minimum of the calibration log-loss the gradient in each bias is zero, i.e. the mean
    // calibrated probability of class k equals its share among the labelled rows (the score
    // equation of a multinomial likelihood with per-class intercepts, analytic).
    let (ps, labels, _) = soft_case(600, 10, [0.3, 0.3, 0.4], 2);
    let cal = Calibration::fit(&ps, &labels, None).unwrap();
    assert!(cal.converged && cal.inverse_temperature > 0.0);
    assert!(cal.log_loss_after <= cal.log_loss_before);
    let pi = cal.apply(&ps);
    for k in 0..3 {
        let mean: f64 = (0..pi.rows()).map(|i| pi.row(i)[k]).sum::<f64>() / pi.rows() as f64;
        assert!((mean - 1.0 / 3.0).abs() < 1e-8, "class {k}: {mean}");
    }
}

#[test]
fn bootstrap_is_seeded_and_the_document_round_trips() {
    let (ps, labels, pt) = soft_case(150, 150, [0.5, 0.25, 0.25], 3);
    let fit = |seed| {
        LabelShift::new()
            .bootstrap(40)
            .seed(seed)
            .fit(ps.view(), &labels, pt.view())
            .unwrap()
    };
    let (a, b, c) = (fit(7), fit(7), fit(8));
    assert_eq!(a, b);
    assert_ne!(a.interval_low, c.interval_low);
    let lo = a.interval_low.as_ref().unwrap();
    let hi = a.interval_high.as_ref().unwrap();
    for j in 0..3 {
        assert!(lo[j] <= hi[j] && lo[j] >= 0.0 && hi[j] <= 1.0);
    }
    let again = LabelShiftEstimate::from_json(&a.to_json().unwrap()).unwrap();
    assert_eq!(again, a);
    let adjusted = a.adjust(pt.view()).unwrap();
    for i in 0..adjusted.rows() {
        assert!((adjusted.row(i).iter().sum::<f64>() - 1.0).abs() < 1e-12);
    }
    let bad = a
        .to_json()
        .unwrap()
        .replace("\"n_classes\":3", "\"n_classes\":4");
    assert!(matches!(
        LabelShiftEstimate::from_json(&bad),
        Err(Error::ModelFile(_))
    ));
}

#[test]
fn adjusted_probabilities_are_proportional_to_weighted_posteriors() {
    // Saerens et al. 2002, eq. 2.4: p_t(y|x) = w_y p_s(y|x) / sum_c w_c p_s(c|x).
    let (ps, labels, pt) = two_class_case();
    let est = LabelShift::new()
        .method(LabelShiftMethod::Bbse)
        .fit(ps.view(), &labels, pt.view())
        .unwrap();
    let p = Matrix::new(vec![0.5, 0.5, 0.9, 0.1], 2, 2).unwrap();
    let adj = est.adjust(p.view()).unwrap();
    assert!((adj.row(0)[0] - 0.6 / 2.0).abs() < 1e-12);
    let expect = 0.9 * 0.6 / (0.9 * 0.6 + 0.1 * 1.4);
    assert!((adj.row(1)[0] - expect).abs() < 1e-12);
    assert_eq!(
        est.sample_weights(&[1, 0]).unwrap(),
        vec![est.class_weights[1], est.class_weights[0]]
    );
    assert!(est.sample_weights(&[2]).is_err());
}

#[test]
fn class_mix_test_chi_square_and_permutation() {
    // 2 x 2 table [[10, 10], [14, 6]]: Yates-corrected chi-square, as
    // scipy.stats.chi2_contingency([[10, 10], [14, 6]]): expected [[12, 8], [12, 8]],
    // statistic sum (|o - e| - 0.5)^2 / e = 1.5^2 (2/12 + 2/8) = 0.9375.
    let s = one_hot(&[vec![0; 10], vec![1; 10]].concat(), 2);
    let t = one_hot(&[vec![0; 14], vec![1; 6]].concat(), 2);
    let r = ClassMixTest::new().run(s.view(), t.view()).unwrap();
    assert_eq!(r.p_value_method, MixPValueMethod::ChiSquare);
    assert!((r.statistic - 0.9375).abs() < 1e-12);
    assert_eq!(r.source_counts, vec![10, 10]);
    // Small expected counts: a permutation p-value in (0, 1], seeded.
    let s = one_hot(&[0, 0, 1, 1, 2], 3);
    let t = one_hot(&[0, 2, 2, 2], 3);
    let a = ClassMixTest::new()
        .permutations(199)
        .run(s.view(), t.view())
        .unwrap();
    let b = ClassMixTest::new()
        .permutations(199)
        .run(s.view(), t.view())
        .unwrap();
    assert_eq!(a.p_value_method, MixPValueMethod::Permutation);
    assert_eq!(a, b);
    assert!(a.p_value > 0.0 && a.p_value <= 1.0);
    assert_eq!(
        ClassMixTestResult::from_json(&a.to_json().unwrap()).unwrap(),
        a
    );
}

#[test]
fn class_matched_rows_follow_the_requested_mix() {
    let labels: Vec<usize> = (0..100).map(|i| usize::from(i >= 60)).collect(); // 60 / 40
    let rows = class_matched_rows(&labels, &[0.25, 0.75], 3).unwrap();
    // Largest N with 0.25 N <= 60 and 0.75 N <= 40: N = 53.3, so 13 + 40 rows.
    let ones = rows.iter().filter(|&&i| labels[i] == 1).count();
    assert_eq!((rows.len() - ones, ones), (13, 40));
    assert!(class_matched_rows(&labels, &[0.5, 0.6], 3)
        .unwrap_err()
        .to_string()
        .contains("proportions"));
}

#[test]
fn public_types_are_send_and_sync() {
    fn check<T: Send + Sync>() {}
    check::<LabelShift>();
    check::<LabelShiftEstimate>();
    check::<ClassMixTest>();
    check::<ClassMixTestResult>();
}
