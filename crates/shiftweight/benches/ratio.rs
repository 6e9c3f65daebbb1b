//! KLIEP and KMM: the solves behind `KLRatio` and `KernelMeanMatching`.
//!
//! - `kliep_fit/narrow_width`: one KLIEP fit at a narrow fixed width, where the QP subproblems
//!   free and fix many columns (the case the updated Cholesky factor and the whole-block Hessian
//!   are for).
//! - `kliep_fit/cv_7_widths_5_folds`: the default fit (likelihood CV over seven widths, five
//!   folds, then the final fit), at compare.py's 5,000 + 5,000 x 10 size.
//! - `kmm_solve/exact_2000+2000_d10`: one KMM quadratic program over 2,000 source rows (no blocks)
//!   at a fixed width and ridge, the KMM size.

use criterion::{criterion_group, criterion_main, Criterion};
use shiftweight::{KLRatio, KernelMeanMatching, RatioEstimator};

#[path = "config.rs"]
mod config;

fn kliep(c: &mut Criterion) {
    let mut g = c.benchmark_group("kliep_fit");
    let s = config::gaussian(3_000, 6, 0.0, 11);
    let t = config::gaussian(3_000, 6, 0.7, 12);
    g.bench_function("narrow_width_3000+3000x6_b200", |b| {
        b.iter(|| {
            KLRatio::new()
                .sigma(Some(0.4))
                .fit(s.view(), t.view())
                .unwrap()
        })
    });
    let s = config::gaussian(5_000, 10, 0.0, 13);
    let t = config::gaussian(5_000, 10, 0.5, 14);
    g.bench_function("cv_7_widths_5_folds_5000+5000x10_b200", |b| {
        b.iter(|| KLRatio::new().fit(s.view(), t.view()).unwrap())
    });
    g.finish();
}

fn kmm(c: &mut Criterion) {
    let s = config::gaussian(2_000, 10, 0.0, 15);
    let t = config::gaussian(2_000, 10, 0.5, 16);
    let mut g = c.benchmark_group("kmm_solve");
    g.bench_function("exact_2000+2000_d10", |b| {
        b.iter(|| {
            KernelMeanMatching::new()
                .sigma(Some(3.0))
                .ridge(Some(0.1))
                .block_rows(2_000)
                .fit(s.view(), t.view())
                .unwrap()
        })
    });
    g.finish();
}

criterion_group! { name = benches; config = config::slow_config(); targets = kliep, kmm }
criterion_main!(benches);
