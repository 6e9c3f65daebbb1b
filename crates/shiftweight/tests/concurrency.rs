//! Many OS threads fitting and scoring at once (as inside a multi-threaded service): every thread
//! gets exactly the result that a lone sequential run gets, and nothing deadlocks. The estimators
//! run their own parallel loops on the shared rayon pool while the caller threads compete for it.

mod common;

use common::gaussian;
use shiftweight::{
    diagnose, ClassifierRatio, FittedRatio, KLRatio, LeastSquaresRatio, Matrix, RatioEstimator,
};
use std::sync::{Arc, Barrier};

const THREADS: usize = 8;
const ROUNDS: usize = 2;

fn data(seed: u64) -> (Matrix, Matrix, Matrix) {
    (
        gaussian(200, &[0.0, 0.0], 1.0, seed),
        gaussian(150, &[0.5, 0.0], 1.0, seed + 1),
        gaussian(2_000, &[0.2, 0.1], 1.2, seed + 2),
    )
}

/// One unit of work: fit three kinds of estimator, score new rows, diagnose the weights.
fn work(s: &Matrix, t: &Matrix, x: &Matrix) -> Vec<Vec<f64>> {
    let fits: Vec<FittedRatio> = vec![
        LeastSquaresRatio::new()
            .n_basis(50)
            .fit(s.view(), t.view())
            .unwrap(),
        ClassifierRatio::new().fit(s.view(), t.view()).unwrap(),
        KLRatio::new().n_basis(20).fit(s.view(), t.view()).unwrap(),
    ];
    let mut out = Vec::new();
    for f in &fits {
        out.push(f.source_weights.clone());
        let r = f.ratio(x.view()).unwrap();
        let d = diagnose(&r, None).unwrap();
        out.push(vec![d.ess, d.pareto_k.unwrap_or(-1.0)]);
        out.push(r);
    }
    out
}

#[test]
fn many_threads_fit_and_score_at_once_and_match_a_lone_run() {
    let cases: Vec<(Matrix, Matrix, Matrix)> = (0..THREADS as u64).map(|i| data(10 * i)).collect();
    // Expected results, computed one at a time before any concurrency.
    let expected: Vec<Vec<Vec<f64>>> = cases.iter().map(|(s, t, x)| work(s, t, x)).collect();
    let cases = Arc::new(cases);
    let expected = Arc::new(expected);
    let barrier = Arc::new(Barrier::new(THREADS));
    let handles: Vec<_> = (0..THREADS)
        .map(|i| {
            let (cases, expected, barrier) = (cases.clone(), expected.clone(), barrier.clone());
            std::thread::spawn(move || {
                for round in 0..ROUNDS {
                    barrier.wait(); // every thread starts each round together
                    let (s, t, x) = &cases[(i + round) % THREADS];
                    let got = work(s, t, x);
                    assert_eq!(
                        got,
                        expected[(i + round) % THREADS],
                        "thread {i}, round {round}: result differs from the lone run"
                    );
                }
            })
        })
        .collect();
    for h in handles {
        h.join().expect("a worker thread panicked");
    }
}

#[test]
fn one_fitted_model_is_shared_by_many_scoring_threads() {
    let (s, t, x) = data(99);
    let model = Arc::new(
        LeastSquaresRatio::new()
            .n_basis(100)
            .fit(s.view(), t.view())
            .unwrap(),
    );
    let expected = Arc::new(model.ratio(x.view()).unwrap());
    let x = Arc::new(x);
    let handles: Vec<_> = (0..THREADS)
        .map(|_| {
            let (model, expected, x) = (model.clone(), expected.clone(), x.clone());
            std::thread::spawn(move || {
                for _ in 0..20 {
                    assert_eq!(*model.ratio(x.view()).unwrap(), *expected);
                }
            })
        })
        .collect();
    for h in handles {
        h.join().expect("a scoring thread panicked");
    }
}
