//! Scoring inside a Rust service: load a model file once, then score rows one at a time.
//!
//! ```text
//! cargo run --release -p shiftweight --example score_rows -- MODEL.json < rows.csv
//! cargo run --release -p shiftweight --example score_rows            # fits a demo model first
//! ```
//!
//! Each input line holds one row of comma-separated feature values; each output line the weight.
//! Without a model path, a model is fitted on the invented demo scenario, saved to a temporary
//! file, loaded back, and a few demo rows are scored, so the example runs on its own.

use shiftweight::{FittedRatio, LeastSquaresRatio, RatioEstimator};
use std::io::{BufRead, Write};
use std::time::Instant;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let model = match std::env::args().nth(1) {
        Some(path) => FittedRatio::from_json(&std::fs::read_to_string(&path)?)?,
        None => {
            let d = shiftweight::demo::electricity(2000, 1000, 0);
            let fitted = LeastSquaresRatio::new().fit(d.source.view(), d.target.view())?;
            let path = std::env::temp_dir().join("shiftweight-example-model.json");
            std::fs::write(&path, fitted.to_json()?)?;
            let loaded = FittedRatio::from_json(&std::fs::read_to_string(&path)?)?;
            let start = Instant::now();
            let n = 10_000;
            let mut acc = 0.0;
            for i in 0..n {
                acc += loaded.ratio_one(d.target.row(i % d.target.rows()))?;
            }
            let per_row = start.elapsed().as_secs_f64() / n as f64;
            println!("model file: {}", path.display());
            println!(
                "scored {n} rows one at a time: {:.2} microseconds per row (mean weight {:.3})",
                per_row * 1e6,
                acc / n as f64
            );
            return Ok(());
        }
    };
    let stdin = std::io::stdin();
    let mut out = std::io::BufWriter::new(std::io::stdout().lock());
    let mut row = Vec::with_capacity(model.n_features());
    for (k, line) in stdin.lock().lines().enumerate() {
        let line = line?;
        if line.trim().is_empty() {
            continue;
        }
        row.clear();
        for (j, field) in line.split(',').enumerate() {
            row.push(
                field
                    .trim()
                    .parse::<f64>()
                    .map_err(|e| format!("line {}, field {}: {e}", k + 1, j + 1))?,
            );
        }
        writeln!(out, "{}", model.ratio_one(&row)?)?;
    }
    Ok(())
}
