use super::*;
use crate::random::rng;
use rand::Rng;
use rand_distr::{Distribution, LogNormal};

const TAG: u64 = 0x6469_6167;

/// Draws from a GPD(shape xi, scale 1) by inversion: x = ((1 - U)^(-xi) - 1) / xi.
fn gpd_draws(xi: f64, n: usize, seed: u64) -> Vec<f64> {
    let mut r = rng(seed ^ TAG);
    (0..n)
        .map(|_| ((1.0 - r.random::<f64>()).powf(-xi) - 1.0) / xi)
        .collect()
}

#[test]
fn ess_equal_single_and_by_hand() {
    // Equal weights give n, the largest possible (common practice).
    assert!((effective_sample_size(&[2.5; 40]).unwrap() - 40.0).abs() < 1e-12);
    // A single non-zero weight gives 1 (Kish 1965 formula).
    let mut w = vec![0.0; 10];
    w[3] = 7.0;
    assert!((effective_sample_size(&w).unwrap() - 1.0).abs() < 1e-15);
    // By hand: (1+2+3+4)^2 / (1+4+9+16) = 100/30 (Kish 1965 formula).
    assert!((effective_sample_size(&[1.0, 2.0, 3.0, 4.0]).unwrap() - 100.0 / 30.0).abs() < 1e-14);
    assert!((ess_fraction(&[1.0, 2.0, 3.0, 4.0]).unwrap() - 100.0 / 120.0).abs() < 1e-14);
    // Huge weights do not overflow the squares.
    assert!((effective_sample_size(&[1e300, 1e300]).unwrap() - 2.0).abs() < 1e-12);
}

#[test]
fn bad_weights_are_named() {
    match effective_sample_size(&[1.0, -1.0]) {
        Err(Error::InvalidWeights { argument, reason }) => {
            assert_eq!(argument, "weights");
            assert!(reason.contains("entry 1"));
        }
        other => panic!("unexpected {other:?}"),
    }
    assert!(matches!(
        diagnose(&[0.0, 0.0], None),
        Err(Error::InvalidWeights { .. })
    ));
    assert!(matches!(
        pareto_k(&[1.0, f64::NAN]),
        Err(Error::InvalidWeights { .. })
    ));
    let names = vec!["a".to_string()];
    let r = diagnose(
        &[1.0, 2.0],
        Some(Groups {
            codes: &[0, 1],
            names: &names,
        }),
    );
    assert!(matches!(r, Err(Error::InvalidParameter { ref name, .. }) if name == "groups"));
    let r = diagnose(
        &[1.0, 2.0],
        Some(Groups {
            codes: &[0],
            names: &names,
        }),
    );
    assert!(matches!(r, Err(Error::LengthMismatch { .. })));
}

#[test]
fn tail_rules_match_the_published_formulas() {
    // M = ceil(min(0.2 S, 3 sqrt S)) and the bound min(0.7, 1 - 1/log10 S)
    // (Vehtari et al. 2024; from memory).
    assert_eq!(tail_size(10_000), 300);
    assert_eq!(tail_size(100), 20);
    assert_eq!(tail_size(25), 5);
    assert!((k_threshold(100) - 0.5).abs() < 1e-15);
    assert!((k_threshold(10_000) - 0.7).abs() < 1e-15);
    assert!((k_threshold(1000) - (1.0 - 1.0 / 3.0)).abs() < 1e-15);
}

#[test]
fn pareto_k_recovers_known_shapes() {
    // Analytic: the exceedances of a GPD over any threshold are GPD with the same shape, so k
    // estimates xi. Tolerance: 3 asymptotic standard errors (1 + xi) / sqrt(M) of the shape
    // estimate (Smith 1985; from memory), M = 300 at n = 10,000.
    for (xi, seed) in [(0.2, 1), (0.5, 2), (0.8, 3), (1.0, 4)] {
        let w = gpd_draws(xi, 10_000, seed);
        let fit = pareto_k(&w).unwrap();
        assert_eq!(fit.tail_size, 300);
        let k = fit.k.unwrap();
        let tol = 3.0 * (1.0 + xi) / 300f64.sqrt();
        assert!((k - xi).abs() < tol, "xi {xi}: k {k}, tolerance {tol}");
    }
}

#[test]
fn light_tails_are_good_heavy_tails_unreliable() {
    // Lognormal with sigma 0.25 has all moments: its tail shape is 0 (from memory), so k < 0.5.
    let mut r = rng(5 ^ TAG);
    let d = LogNormal::new(0.0, 0.25).unwrap();
    let w: Vec<f64> = (0..5000).map(|_| d.sample(&mut r)).collect();
    let diag = diagnose(&w, None).unwrap();
    assert!(diag.pareto_k.unwrap() < 0.5);
    assert_eq!(diag.verdict, Verdict::Good);
    // GPD with xi = 1.5: infinite mean, must be unreliable.
    let diag = diagnose(&gpd_draws(1.5, 5000, 6), None).unwrap();
    assert_eq!(diag.verdict, Verdict::Unreliable);
    assert!(!diag.warnings.is_empty());
}

#[test]
fn equal_weights_are_good_and_tiny_samples_unchecked() {
    let d = diagnose(&[1.0; 1000], None).unwrap();
    assert_eq!(d.verdict, Verdict::Good);
    assert!(d.tail.bounded);
    assert_eq!(d.rows_for_half, 500);
    assert!(d.warnings.is_empty(), "{:?}", d.warnings);
    let d = diagnose(&[1.0, 2.0, 3.0], None).unwrap();
    assert_eq!(d.verdict, Verdict::Unreliable);
    assert!(d.pareto_k.is_none());
}

#[test]
fn concentration_and_quantiles_match_a_full_sort() {
    let mut r = rng(7 ^ TAG);
    let d = LogNormal::new(0.0, 1.5).unwrap();
    for n in [1usize, 2, 7, 100, 1001, 70_000] {
        let mut w: Vec<f64> = (0..n).map(|_| d.sample(&mut r)).collect();
        if n > 10 {
            w[3] = 0.0;
        }
        let diag = diagnose(&w, None).unwrap();
        let mut s = w.clone();
        s.sort_by(f64::total_cmp);
        let total: f64 = s.iter().sum();
        // Quantiles: numpy's default linear interpolation on the sorted values.
        for &(l, q) in &diag.quantiles {
            let h = (n - 1) as f64 * l;
            let lo = h.floor() as usize;
            let hi = (lo + 1).min(n - 1);
            let want = s[lo] + (h - lo as f64) * (s[hi] - s[lo]);
            assert!(
                (q - want).abs() <= 1e-12 * want.abs().max(1.0),
                "n {n} level {l}"
            );
        }
        let t = diag.top1_rows;
        let top: f64 = s[n - t..].iter().sum();
        assert!((diag.top1_share - top / total).abs() < 1e-12);
        let mut acc = 0.0;
        let mut k = 0;
        for v in s.iter().rev() {
            acc += v;
            k += 1;
            if acc >= 0.5 * total {
                break;
            }
        }
        assert!(
            diag.rows_for_half.abs_diff(k) <= 1,
            "n {n}: {} vs {k}",
            diag.rows_for_half
        );
        assert_eq!(diag.n_zero, usize::from(n > 10));
        assert!((diag.ess - effective_sample_size(&w).unwrap()).abs() < 1e-9 * diag.ess);
    }
}

#[test]
fn group_ess_finds_a_starved_group() {
    let w: Vec<f64> = (0..200)
        .map(|i| if i < 100 { 1.0 } else { 0.001 })
        .collect();
    let codes: Vec<usize> = (0..200).map(|i| usize::from(i >= 100)).collect();
    let names = vec!["kept".to_string(), "starved".to_string()];
    let d = diagnose(
        &w,
        Some(Groups {
            codes: &codes,
            names: &names,
        }),
    )
    .unwrap();
    assert_eq!(d.groups.len(), 2);
    // Within each group the weights are equal: ESS = group size (common practice).
    assert!((d.groups[0].ess - 100.0).abs() < 1e-9);
    assert!((d.groups[1].ess - 100.0).abs() < 1e-9);
    assert!((d.groups[1].weight_share - 0.1 / 100.1).abs() < 1e-12);
    assert!(d.warnings.iter().any(|m| m.contains("'starved'")));
}

#[test]
fn clip_tradeoff_is_consistent() {
    let w = gpd_draws(0.7, 3000, 8);
    let t = clip_tradeoff(&w, None).unwrap();
    let last = t.levels.last().unwrap();
    assert_eq!(last.quantile, Some(1.0));
    assert_eq!(last.rows_clipped, 0);
    assert!(last.mean_shift.abs() < 1e-12);
    assert!((last.ess - effective_sample_size(&w).unwrap()).abs() < 1e-6 * last.ess);
    // More clipping never lowers the ESS (d log ESS / dt <= 0; common practice that clipping
    // trades bias for variance).
    for p in t.levels.windows(2) {
        assert!(p[0].ess_fraction >= p[1].ess_fraction - 1e-12);
        assert!(p[0].mean_shift >= p[1].mean_shift - 1e-12);
        assert!(p[0].upper <= p[1].upper + 1e-12);
    }
    let pick = clip_for_ess(&w, 0.8).unwrap();
    assert!(pick.ess_fraction >= 0.8 - 1e-12 && pick.ess_fraction < 0.8 + 1e-6);
    // The picked bound, given to stabilize, gives the same weights' ESS.
    let s = crate::weights::stabilize(
        &w,
        &crate::weights::StabilizeOptions::new().upper(pick.upper),
    )
    .unwrap();
    assert!((ess_fraction(&s.weights).unwrap() - pick.ess_fraction).abs() < 1e-9);
    assert!(matches!(
        clip_for_ess(&w, 1.5),
        Err(Error::InvalidParameter { .. })
    ));
    let mut z = w.clone();
    z[0] = 0.0;
    assert!(clip_for_ess(&z, 1.0).is_err());
    assert!(clip_tradeoff(&w, Some(&[0.0])).is_err());
}

#[test]
fn overlap_from_ratios_and_probabilities() {
    let r = check_overlap(&[1.0, 2.0, 50.0, 100.0], 20.0, 0.01).unwrap();
    assert_eq!(r.n_poorly_covered, 2);
    assert!(r.flagged);
    assert_eq!(r.max_ratio, 100.0);
    assert!((r.median_ratio - 26.0).abs() < 1e-12);
    assert!(r
        .warnings
        .iter()
        .any(|w| w.contains("No weighting fixes missing support")));
    // p = 0.96 with equal sizes: odds 24 > 20 (Bickel et al. 2009 prior correction).
    let r = check_overlap_probabilities(&[0.5, 0.96, 1.0], 100, 100, 20.0, 0.5).unwrap();
    assert_eq!(r.n_poorly_covered, 2);
    assert!(r.flagged);
    assert!(r.max_ratio.is_finite());
    // The prior factor n_source / n_target: p = 0.96 with 10x fewer source rows gives 2.4.
    let r = check_overlap_probabilities(&[0.96], 10, 100, 20.0, 0.01).unwrap();
    assert_eq!(r.n_poorly_covered, 0);
    assert!(check_overlap_probabilities(&[1.2], 1, 1, 20.0, 0.01).is_err());
    assert!(check_overlap(&[1.0], 0.5, 0.01).is_err());
}

#[test]
fn mean_check_matches_statrs_and_the_coverage_identity() {
    use statrs::distribution::{ContinuousCDF, Normal};
    use statrs::statistics::Statistics;
    // reference: statrs Normal::inverse_cdf (the one-sided 99.9% level)
    let z = Normal::standard().inverse_cdf(0.999);
    assert!((MEAN_Z - z).abs() < 1e-9, "{z}");
    // Standard error against statrs' sample standard deviation (n - 1 denominator).
    let mut r = rng(10 ^ TAG);
    let d = LogNormal::new(-0.5, 1.0).unwrap();
    let w: Vec<f64> = (0..777).map(|_| d.sample(&mut r)).collect();
    let c = mean_check(&w).unwrap();
    let sd = (&w).std_dev(); // reference: statrs Statistics::std_dev
    let se = sd / (w.len() as f64).sqrt();
    assert!((c.std_error.unwrap() - se).abs() < 1e-12 * se);
    assert!((c.mean - (&w).mean()).abs() < 1e-12);
    assert!((c.upper_bound.unwrap() - (c.mean + z * se)).abs() < 1e-9);
    // The same at a scale where squares overflow.
    let big: Vec<f64> = w.iter().map(|v| v * 1e300).collect();
    let cb = mean_check(&big).unwrap();
    assert!((cb.std_error.unwrap() / 1e300 - se).abs() < 1e-9 * se);
    assert!(!cb.too_low);
    // Analytic: a target that is a fraction q of the source distribution plus mass where the
    // source has none has ratio exactly q on the source support, and E_source[w] = q
    // (Sugiyama, Suzuki & Kanamori 2012: the ratio integrates to the covered target mass).
    // Uniformly small weights have a bounded tail, so only the mean can flag them.
    let d = diagnose(&[0.3; 400], None).unwrap();
    assert!(d.tail.bounded);
    assert!(d.mean_too_low);
    assert_eq!(d.verdict, Verdict::Unreliable);
    assert!(d.warnings[0].contains("far below 1"), "{:?}", d.warnings);
    // Coverage 0.6 is above the floor 1/2: not flagged.
    let d = diagnose(&[0.6; 400], None).unwrap();
    assert!(!d.mean_too_low);
    assert_eq!(d.verdict, Verdict::Good);
    assert!(d.warnings.is_empty(), "{:?}", d.warnings);
    // One weight: no standard error, nothing flagged by the mean.
    let c = mean_check(&[0.01]).unwrap();
    assert!(c.std_error.is_none() && !c.too_low);
}

#[test]
fn correct_weights_and_stabilised_weights_are_not_flagged_by_the_mean() {
    // Analytic Gaussian pairs: source N(0, 1), target N(mu, 1), w(x) = exp(mu x - mu^2 / 2)
    // (ratio of two normal densities), E_source[w] = 1. Small samples, several seeds.
    for (mu, n) in [(0.3, 50), (0.5, 200), (1.0, 2000)] {
        for seed in 0..5u64 {
            let mut r = rng(seed ^ TAG ^ 0x6d65_616e);
            let w: Vec<f64> = (0..n)
                .map(|_| {
                    let x: f64 = rand_distr::StandardNormal.sample(&mut r);
                    (mu * x - mu * mu / 2.0).exp()
                })
                .collect();
            assert!(
                !mean_check(&w).unwrap().too_low,
                "mu {mu} n {n} seed {seed}"
            );
        }
    }
    // Weights rescaled to mean 1 never trip it, whatever their raw scale.
    let raw: Vec<f64> = (1..=300).map(|i| 1e-6 * i as f64).collect();
    assert!(mean_check(&raw).unwrap().too_low);
    let opts = crate::weights::StabilizeOptions::new().upper_quantile(0.9);
    let st = crate::weights::stabilize(&raw, &opts).unwrap();
    let d = diagnose(&st.weights, None).unwrap();
    assert!(!d.mean_too_low && (d.mean - 1.0).abs() < 1e-12);
}

#[test]
fn diagnosis_json_round_trip() {
    let d = diagnose(&gpd_draws(0.3, 500, 9), None).unwrap();
    let text = d.to_json().unwrap();
    assert!(text.contains("\"verdict\":\"good\"") || text.contains("\"verdict\":\"usable\""));
    assert_eq!(Diagnosis::from_json(&text).unwrap(), d);
    assert!(Diagnosis::from_json("{\"format\":\"other\",\"version\":1,\"model\":{}}").is_err());
}

#[test]
fn ess_prints_in_whole_rows_half_away_from_zero() {
    // Kish ESS of 180 ones and 5 twos: (180 + 10)^2 / (180 + 20) = 180.5 (Kish 1965, by hand).
    let mut w = vec![1.0; 180];
    w.extend([2.0; 5]);
    let ess = effective_sample_size(&w).unwrap();
    assert_eq!(ess, 180.5);
    // Half away from zero (f64::round), not the half-to-even of `{:.0}`, which prints 180.
    assert_eq!(ess_rows(ess), "181");
    assert_eq!(ess_rows(207.4), "207");
    assert_eq!(ess_words(ess, 3000, "rows"), "181 of 3000 rows (6.0%)");
    assert_eq!(
        ess_words(173.2, 3000, "source rows"),
        "173 of 3000 source rows (5.8%)"
    );
    assert_eq!(ess_words(1500.0, 3000, "rows"), "1500 of 3000 rows (50%)");
    assert_eq!(ess_rows(f64::NAN), "n/a");
    // The diagnosis's warning uses the same rule.
    let mut w = vec![0.0; 2815];
    w.extend([1.0; 180]);
    w.extend([2.0; 5]);
    let d = diagnose(&w, None).unwrap();
    assert!(
        d.warnings
            .iter()
            .any(|m| m.contains("is 181 of 3000 rows (6.0%)")),
        "{:?}",
        d.warnings
    );
}
