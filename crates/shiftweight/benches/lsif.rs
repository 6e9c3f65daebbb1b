//! uLSIF: fit with closed-form LOOCV, and scoring many rows.

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use shiftweight::{LeastSquaresRatio, RatioEstimator};

#[path = "config.rs"]
mod config;

fn fit(c: &mut Criterion) {
    let (n, d) = (20_000, 10);
    let s = config::gaussian(n, d, 0.0, 1);
    let t = config::gaussian(n, d, 0.5, 2);
    let mut g = c.benchmark_group("lsif_fit");
    g.bench_function(
        BenchmarkId::new("loocv_5x5_b200", format!("{n}+{n}x{d}")),
        |b| b.iter(|| LeastSquaresRatio::new().fit(s.view(), t.view()).unwrap()),
    );
    g.finish();
}

fn score(c: &mut Criterion) {
    let d = 10;
    let s = config::gaussian(5_000, d, 0.0, 1);
    let t = config::gaussian(5_000, d, 0.5, 2);
    let model = LeastSquaresRatio::new()
        .sigma(Some(3.0))
        .lam(Some(0.1))
        .fit(s.view(), t.view())
        .unwrap();
    let x = config::gaussian(1_000_000, d, 0.2, 3);
    let mut g = c.benchmark_group("lsif_score");
    g.throughput(Throughput::Elements(x.rows() as u64));
    g.bench_function("1e6_rows_b200_d10", |b| {
        b.iter(|| model.ratio(x.view()).unwrap())
    });
    let row = x.row(0).to_vec();
    g.throughput(Throughput::Elements(1));
    g.bench_function("one_row_b200_d10", |b| {
        b.iter(|| model.ratio_one(&row).unwrap())
    });
    g.finish();
}

criterion_group! { name = benches; config = config::slow_config(); targets = fit, score }
criterion_main!(benches);
