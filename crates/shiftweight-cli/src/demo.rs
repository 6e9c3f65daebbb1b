//! `shiftweight demo`: the whole job on the invented electricity scenario.

use crate::Failure;
use clap::Args;
use shiftweight::learn::WeightedRidge;
use shiftweight::{LeastSquaresRatio, RatioEstimator};

#[derive(Args)]
pub struct DemoArgs {
    /// Seed of the generated data and of every random choice.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Source (coastal town) rows to generate.
    #[arg(long, default_value_t = 3000)]
    n_source: usize,
    /// Target (inland town) rows to generate.
    #[arg(long, default_value_t = 1500)]
    n_target: usize,
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

pub fn run(args: DemoArgs, quiet: bool) -> Result<(), Failure> {
    let data = shiftweight::demo::electricity(args.n_source, args.n_target, args.seed);
    let (s, t) = (data.source.view(), data.target.view());
    let model = LeastSquaresRatio::new().seed(args.seed).fit(s, t)?;
    let w = &model.source_weights;
    let wmean = mean(w);
    let ess = w.iter().sum::<f64>().powi(2) / w.iter().map(|v| v * v).sum::<f64>();
    let plain = WeightedRidge::new().l2(1e-6).fit(s, &data.y_source, None)?;
    let weighted = WeightedRidge::new()
        .l2(1e-6)
        .fit(s, &data.y_source, Some(w))?;
    let mse = |m: &shiftweight::learn::LinearModel| -> Result<f64, Failure> {
        let p = m.predict(t)?;
        Ok(mean(
            &p.iter()
                .zip(&data.y_target)
                .map(|(a, b)| (a - b) * (a - b))
                .collect::<Vec<_>>(),
        ))
    };
    let (e_plain, e_weighted) = (mse(&plain)?, mse(&weighted)?);
    if !quiet {
        println!("shiftweight demo: household electricity use, coastal town (source) -> inland town (target)");
        println!(
            "  rows: {} source, {} target, features: {}",
            s.rows(),
            t.rows(),
            data.feature_names.join(", ")
        );
        let c = &model.selection.chosen;
        println!(
            "  estimator: uLSIF, sigma = {:.3}, lambda = {} (chosen by leave-one-out CV over {} candidates)",
            c["sigma"],
            c["lam"],
            model.selection.table.len()
        );
        println!(
            "  source weights: mean {:.3}, max {:.2}, effective sample size {:.0} of {} ({:.0}%)",
            wmean,
            w.iter().cloned().fold(0.0, f64::max),
            ess,
            w.len(),
            100.0 * ess / w.len() as f64
        );
        println!("  linear model of daily kWh, error on the target town (labels known only in this demo):");
        println!("    unweighted fit: mean squared error {e_plain:.2}");
        println!("    weighted fit:   mean squared error {e_weighted:.2}");
        println!("  Caution: weighting corrects covariate shift only; it needs overlap between the towns,");
        println!("  and must be validated on labelled target data before decisions rely on it.");
    }
    Ok(())
}
