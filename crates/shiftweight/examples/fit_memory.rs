//! Peak memory of a large uLSIF or classifier-ratio fit and of scoring many rows, for
//! `/usr/bin/time -v`.
//!
//! ```text
//! cargo build --release -p shiftweight --example fit_memory
//! /usr/bin/time -v target/release/examples/fit_memory fit 1000000 20000 20
//! /usr/bin/time -v target/release/examples/fit_memory classifier 1000000 20000 20
//! /usr/bin/time -v target/release/examples/fit_memory score 1000000 20
//! /usr/bin/time -v target/release/examples/fit_memory score 4000000 20
//! ```
//!
//! `fit N_SOURCE N_TARGET D` generates seeded Gaussian rows (the target shifted in the first
//! feature), fits uLSIF with LOOCV over the default 5 x 5 grid and 200 centres, and prints the
//! input size and the time taken; compare the input size with "Maximum resident set size".
//! `classifier N_SOURCE N_TARGET D` does the same with `ClassifierRatio` (linear features, l2 = 1,
//! 5-fold cross-fitting).
//! `score N D` fits a small model, then scores N rows streamed in blocks of 65,536 rows read into
//! one reused buffer (as a service reading a file would), so the peak should not grow with N.

use rand_distr::{Distribution, Normal};
use shiftweight::{ClassifierRatio, LeastSquaresRatio, Matrix, RatioEstimator};
use std::time::Instant;

/// A seeded generator (ChaCha8), so that every run draws the same rows.
fn rng(seed: u64) -> rand_chacha::ChaCha8Rng {
    rand::SeedableRng::seed_from_u64(seed)
}

fn gaussian_into(buf: &mut [f64], d: usize, shift: f64, r: &mut impl rand::Rng) {
    let nd = Normal::new(0.0, 1.0).expect("unit normal");
    for (k, v) in buf.iter_mut().enumerate() {
        *v = nd.sample(r) + if k % d == 0 { shift } else { 0.0 };
    }
}

fn gaussian(n: usize, d: usize, shift: f64, seed: u64) -> Matrix {
    let mut buf = vec![0.0; n * d];
    gaussian_into(&mut buf, d, shift, &mut rng(seed));
    Matrix::new(buf, n, d).expect("shape")
}

fn arg(i: usize, default: usize) -> usize {
    std::env::args()
        .nth(i)
        .map(|s| s.parse().expect("a whole number"))
        .unwrap_or(default)
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mode = std::env::args().nth(1).unwrap_or_else(|| "fit".into());
    match mode.as_str() {
        "fit" => {
            let (n_s, n_t, d) = (arg(2, 1_000_000), arg(3, 20_000), arg(4, 20));
            let s = gaussian(n_s, d, 0.0, 1);
            let t = gaussian(n_t, d, 0.5, 2);
            let input_mb = ((n_s + n_t) * d * 8) as f64 / 1e6;
            let start = Instant::now();
            let model = LeastSquaresRatio::new().fit(s.view(), t.view())?;
            println!(
                "fit uLSIF with LOOCV on {n_s}+{n_t} rows x {d}: {:.2} s; input {input_mb:.1} MB; \
                 chosen sigma {:.3}, lam {}",
                start.elapsed().as_secs_f64(),
                model.selection.chosen["sigma"],
                model.selection.chosen["lam"]
            );
        }
        "classifier" => {
            let (n_s, n_t, d) = (arg(2, 1_000_000), arg(3, 20_000), arg(4, 20));
            let s = gaussian(n_s, d, 0.0, 1);
            let t = gaussian(n_t, d, 0.5, 2);
            let input_mb = ((n_s + n_t) * d * 8) as f64 / 1e6;
            let start = Instant::now();
            let model = ClassifierRatio::new()
                .l2(Some(1.0))
                .fit(s.view(), t.view())?;
            let mean_w = model.source_weights.iter().sum::<f64>() / n_s as f64;
            println!(
                "fit ClassifierRatio (linear, 5 folds) on {n_s}+{n_t} rows x {d}: {:.2} s; \
                 input {input_mb:.1} MB; mean source weight {mean_w:.4}",
                start.elapsed().as_secs_f64(),
            );
        }
        "score" => {
            let (n, d) = (arg(2, 1_000_000), arg(3, 20));
            let s = gaussian(5_000, d, 0.0, 1);
            let t = gaussian(5_000, d, 0.5, 2);
            let model = LeastSquaresRatio::new()
                .sigma(Some(3.0))
                .lam(Some(0.1))
                .fit(s.view(), t.view())?;
            let block = 65_536;
            let mut buf = vec![0.0; block * d];
            let mut out = vec![0.0; block];
            let mut r = rng(3);
            let (mut done, mut total) = (0usize, 0.0f64);
            let start = Instant::now();
            while done < n {
                let m = block.min(n - done);
                gaussian_into(&mut buf[..m * d], d, 0.2, &mut r);
                let x = shiftweight::MatrixView::new(&buf[..m * d], m, d)?;
                model.ratio_into(x, &mut out[..m])?;
                total += out[..m].iter().sum::<f64>();
                done += m;
            }
            println!(
                "scored {n} rows x {d} in blocks of {block}: {:.2} s (incl. generating rows); mean weight {:.4}",
                start.elapsed().as_secs_f64(),
                total / n as f64
            );
        }
        other => {
            return Err(format!("unknown mode {other:?}; use fit, classifier or score").into())
        }
    }
    Ok(())
}
