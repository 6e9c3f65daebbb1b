//! Property tests of uLSIF / RuLSIF over random shapes and values.

use proptest::prelude::*;
use shiftweight::{LeastSquaresRatio, Matrix, RatioEstimator};

fn matrix(rows: usize, cols: usize) -> impl Strategy<Value = Matrix> {
    prop::collection::vec(-1e3f64..1e3, rows * cols)
        .prop_map(move |v| Matrix::new(v, rows, cols).unwrap())
}

fn pair() -> impl Strategy<Value = (Matrix, Matrix, Matrix)> {
    (3usize..40, 3usize..40, 1usize..4)
        .prop_flat_map(|(ns, nt, d)| (matrix(ns, d), matrix(nt, d), matrix(7, d)))
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 24, ..ProptestConfig::default() })]

    #[test]
    fn ratios_are_finite_non_negative_and_reproducible(
        (s, t, x) in pair(), alpha in prop_oneof![Just(0.0), 0.0f64..0.9], seed in 0u64..1000,
    ) {
        let est = LeastSquaresRatio::new().n_basis(20).alpha(alpha).seed(seed);
        let a = est.fit(s.view(), t.view()).unwrap();
        let wa = a.ratio(x.view()).unwrap();
        prop_assert!(wa.iter().chain(&a.source_weights).all(|w| w.is_finite() && *w >= 0.0));
        // Same inputs and seed: bitwise-identical weights.
        let b = est.fit(s.view(), t.view()).unwrap();
        prop_assert_eq!(wa.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                        b.ratio(x.view()).unwrap().iter().map(|v| v.to_bits()).collect::<Vec<_>>());
        prop_assert_eq!(&a.source_weights, &b.source_weights);
    }

    #[test]
    fn ratios_do_not_depend_on_units(
        (s, t, x) in pair(), scale in 0.01f64..100.0, shift in -1e3f64..1e3, sigma in 0.3f64..3.0,
    ) {
        // Standardisation on the pooled rows makes the fit invariant to an affine change of units
        // applied to every row (source, target and scored rows alike).
        let est = LeastSquaresRatio::new().n_basis(15).sigma(Some(sigma)).lam(Some(0.1));
        let affine = |m: &Matrix| {
            let v: Vec<f64> = m.as_slice().iter().enumerate()
                .map(|(k, v)| v * scale * (1.0 + (k % m.cols()) as f64) + shift).collect();
            Matrix::new(v, m.rows(), m.cols()).unwrap()
        };
        let w1 = est.fit(s.view(), t.view()).unwrap().ratio(x.view()).unwrap();
        let w2 = est.fit(affine(&s).view(), affine(&t).view()).unwrap().ratio(affine(&x).view()).unwrap();
        for (a, b) in w1.iter().zip(&w2) {
            prop_assert!((a - b).abs() <= 1e-6 * (1.0 + a.abs()), "{} vs {}", a, b);
        }
    }
}
