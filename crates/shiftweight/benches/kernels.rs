//! Hot paths below the estimators: kernel evaluation, Gram accumulation next to a plain faer dense
//! product of the same shape, and the b x b solves of uLSIF.
//!
//! The Gram figure to report is `gram/accumulate_chunked` over `gram/faer_dense_matmul`: both
//! form K'K for the same n x b matrix K (already evaluated); the first is the library's path
//! (symmetric rank-k updates over fixed row chunks, folded in order), the second one faer product
//! of the whole shape using every thread. Run with RAYON_NUM_THREADS=1 and =2 for thread scaling.
//! Room is left for the other estimators' loops (e.g. the MMD permutation product).

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use faer::linalg::matmul::matmul;
use faer::prelude::*;
use faer::{Accum, Mat, Side};
use shiftweight::bench_internals as kernel;

#[path = "config.rs"]
mod config;

fn kernel_eval(c: &mut Criterion) {
    let (m, b, d) = (shiftweight::CHUNK_ROWS, 200, 10);
    let x = config::gaussian(m, d, 0.0, 1);
    let cen = config::gaussian(b, d, 0.0, 2);
    let c_sq = kernel::row_sq_norms(cen.view());
    let mut out = vec![0.0; m * b];
    let mut g = c.benchmark_group("kernel");
    g.throughput(Throughput::Elements((m * b) as u64));
    g.bench_function("block_2048x200_d10", |bn| {
        bn.iter(|| kernel::kernel_block_into(x.view(), cen.view(), &c_sq, 1.5, &mut out))
    });
    let sq: Vec<f64> = (0..m * b).map(|i| (i % 997) as f64 * 0.01).collect();
    g.bench_function("exp_only_2048x200", |bn| {
        bn.iter(|| kernel::gaussian_from(&sq, 1.5, &mut out))
    });
    g.bench_function("std_exp_2048x200", |bn| {
        bn.iter(|| {
            for (o, v) in out.iter_mut().zip(&sq) {
                *o = (*v * (-0.5 / 2.25)).exp();
            }
        })
    });
    g.finish();
}

fn gram(c: &mut Criterion) {
    let (n, b) = (20_000, 200);
    let k: Vec<f64> = config::gaussian(n, b, 0.0, 3).into_vec();
    let mut g = c.benchmark_group("gram");
    g.throughput(Throughput::Elements(n as u64));
    g.bench_function("accumulate_chunked_20000x200", |bn| {
        bn.iter(|| kernel::gram_of_rows(&k, n, b))
    });
    let km = MatRef::from_row_major_slice(&k, n, b);
    let mut dst = Mat::<f64>::zeros(b, b);
    g.bench_function("faer_dense_matmul_20000x200", |bn| {
        bn.iter(|| {
            matmul(
                dst.as_mut(),
                Accum::Replace,
                km.transpose(),
                km,
                1.0,
                faer::get_global_parallelism(),
            )
        })
    });
    g.finish();
}

fn solves(c: &mut Criterion) {
    let b = 200;
    let k: Vec<f64> = config::gaussian(4 * b, b, 0.0, 4).into_vec();
    let mut h = kernel::gram_of_rows(&k, 4 * b, b);
    for j in 0..b {
        h[(j, j)] += 1e-3;
    }
    let rhs = Mat::<f64>::from_fn(b, 1, |i, _| 1.0 + i as f64 * 1e-3);
    let mut g = c.benchmark_group("solve");
    g.bench_function("cholesky_solve_b200", |bn| {
        bn.iter(|| h.llt(Side::Lower).unwrap().solve(&rhs))
    });
    g.bench_function("eigendecomposition_b200", |bn| {
        bn.iter(|| h.self_adjoint_eigen(Side::Lower).unwrap())
    });
    g.finish();
}

criterion_group! { name = benches; config = config::fast_config(); targets = kernel_eval, gram, solves }
criterion_main!(benches);
