//! Speed of shift detection at the sizes named in the detection issue:
//! the MMD permutation test at 2,000 + 2,000 rows with 1,000 permutations, the classifier test at
//! 500,000 + 500,000 rows with 20 features (held-out route), and feature_shift on 1,000,000 pooled
//! rows with 50 features. Seeded data; run with `cargo bench -p shiftweight --bench detect` (one
//! bench: add its name as a filter; shorter runs: `-- --measurement-time 5 --warm-up-time 1`).

use criterion::{criterion_group, criterion_main, Criterion};
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use shiftweight::{ClassifierShiftTest, FeatureShift, MatrixView, MmdShiftTest};
use std::hint::black_box;
use std::time::Duration;

/// Seeded Gaussian rows; column 0 shifted by `shift`.
fn rows(n: usize, d: usize, shift: f64, seed: u64) -> Vec<f64> {
    let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    (0..n * d)
        .map(|k| {
            let v: f64 = StandardNormal.sample(&mut r);
            v + if k % d == 0 { shift } else { 0.0 }
        })
        .collect()
}

/// One configuration for every detection bench: few samples, these are seconds-long runs.
fn config() -> Criterion {
    Criterion::default()
        .sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(10))
}

fn mmd_permutation(c: &mut Criterion) {
    let (n, d) = (2_000, 5);
    let s = rows(n, d, 0.0, 1);
    let t = rows(n, d, 0.1, 2);
    let test = MmdShiftTest::new().permutations(1_000);
    c.bench_function("mmd_permutation_2000+2000_d5_perm1000", |b| {
        b.iter(|| {
            black_box(
                test.run(
                    MatrixView::new(&s, n, d).unwrap(),
                    MatrixView::new(&t, n, d).unwrap(),
                )
                .unwrap(),
            )
        })
    });
}

fn classifier_large(c: &mut Criterion) {
    let (n, d) = (500_000, 20);
    let s = rows(n, d, 0.0, 3);
    let t = rows(n, d, 0.02, 4);
    let test = ClassifierShiftTest::new();
    c.bench_function("classifier_500000+500000_d20", |b| {
        b.iter(|| {
            black_box(
                test.run(
                    MatrixView::new(&s, n, d).unwrap(),
                    MatrixView::new(&t, n, d).unwrap(),
                )
                .unwrap(),
            )
        })
    });
}

fn feature_shift_large(c: &mut Criterion) {
    let (n, d) = (500_000, 50);
    let s = rows(n, d, 0.0, 5);
    let t = rows(n, d, 0.05, 6);
    let fs = FeatureShift::new();
    c.bench_function("feature_shift_500000+500000_d50", |b| {
        b.iter(|| {
            black_box(
                fs.run(
                    MatrixView::new(&s, n, d).unwrap(),
                    MatrixView::new(&t, n, d).unwrap(),
                    None,
                )
                .unwrap(),
            )
        })
    });
}

criterion_group! {
    name = detect;
    config = config();
    targets = mmd_permutation, classifier_large, feature_shift_large
}
criterion_main!(detect);
