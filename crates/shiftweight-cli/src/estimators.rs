//! The one place where an `--estimator` name becomes a density-ratio estimator.

use crate::{exit, Failure};
use clap::{Args, ValueEnum};
use shiftweight::{
    AutoRatio, ClassifierRatio, KLRatio, KernelMeanMatching, LeastSquaresRatio, RatioEstimator,
};

/// Estimator names accepted by `--estimator`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum EstimatorName {
    /// Choose among the available estimators by their held-out scores.
    Auto,
    /// uLSIF: unconstrained least-squares importance fitting (Kanamori et al. 2009).
    Lsif,
    /// RuLSIF: relative ratio, bounded by 1/alpha (Yamada et al. 2013).
    Rulsif,
    /// KLIEP: Kullback-Leibler importance estimation (Sugiyama et al. 2008).
    Kliep,
    /// KMM: kernel mean matching (Huang et al. 2007); weights for the source rows only.
    Kmm,
    /// A probabilistic classifier of source vs target, with class-prior correction.
    Classifier,
}

/// Estimator options shared by `weigh` (and later any command that fits weights).
#[derive(Debug, Clone, Args)]
pub struct EstimatorArgs {
    /// Density-ratio estimator.
    #[arg(long, value_enum, default_value_t = EstimatorName::Auto)]
    pub estimator: EstimatorName,
    /// Kernel width in standardised units (default: chosen by the estimator's own criterion).
    #[arg(long)]
    pub sigma: Option<f64>,
    /// Ridge strength (lsif/rulsif; default: chosen by leave-one-out cross-validation).
    #[arg(long)]
    pub lambda: Option<f64>,
    /// Number of kernel centres drawn from the target rows (lsif, rulsif, kliep).
    #[arg(long, default_value_t = LeastSquaresRatio::default().n_basis)]
    pub n_basis: usize,
    /// RuLSIF mixing alpha in (0, 1): the relative ratio is bounded by 1/alpha.
    #[arg(long, help = format!(
        "RuLSIF mixing alpha in (0, 1): the relative ratio is bounded by 1/alpha [default: {}]",
        LeastSquaresRatio::RULSIF_ALPHA
    ))]
    pub alpha: Option<f64>,
}

/// A boxed estimator that can be fitted from any thread.
pub type BoxedEstimator = Box<dyn RatioEstimator + Send + Sync>;

/// Maps the `--estimator` choice and its options to an estimator. Options are checked here, so a
/// bad value fails before any file is read further.
/// `auto` chooses among uniform weights, uLSIF, RuLSIF, KLIEP and the classifier (linear,
/// quadratic and Fourier features, data-chosen penalty), each with the cap on its weights, by the
/// held-out criterion of `shiftweight::ratio::auto`; the classifier here chooses its penalty by
/// out-of-fold log-loss.
pub fn build_estimator(args: &EstimatorArgs, seed: u64) -> Result<BoxedEstimator, Failure> {
    let least_squares = |alpha: f64| -> Result<BoxedEstimator, Failure> {
        let e = LeastSquaresRatio::new()
            .sigma(args.sigma)
            .lam(args.lambda)
            .n_basis(args.n_basis)
            .alpha(alpha)
            .seed(seed);
        e.check()?;
        Ok(Box::new(e))
    };
    match args.estimator {
        EstimatorName::Lsif => {
            if args.alpha.is_some() {
                return Err(Failure {
                    code: exit::BAD_INPUT,
                    message:
                        "--alpha applies to --estimator rulsif only (lsif is the alpha = 0 case)"
                            .into(),
                });
            }
            least_squares(0.0)
        }
        EstimatorName::Rulsif => {
            let alpha = args.alpha.unwrap_or(LeastSquaresRatio::RULSIF_ALPHA);
            if !(alpha > 0.0 && alpha < 1.0) {
                return Err(Failure {
                    code: exit::BAD_INPUT,
                    message: format!("--alpha must be in (0, 1) for rulsif, got {alpha}"),
                });
            }
            least_squares(alpha)
        }
        EstimatorName::Auto => Ok(Box::new(AutoRatio::new().seed(seed))),
        EstimatorName::Kliep => {
            let e = KLRatio::new()
                .sigma(args.sigma)
                .n_basis(args.n_basis)
                .seed(seed);
            e.check()?;
            Ok(Box::new(e))
        }
        EstimatorName::Kmm => {
            let e = KernelMeanMatching::new().sigma(args.sigma).seed(seed);
            e.check()?;
            Ok(Box::new(e))
        }
        EstimatorName::Classifier => Ok(Box::new(ClassifierRatio::new().l2(None).seed(seed))),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_centre_count_serves_every_kernel_estimator() {
        // `--n-basis` takes uLSIF's default and passes it to KLIEP too: their defaults must agree
        // for the option's default to be each estimator's own.
        assert_eq!(
            LeastSquaresRatio::default().n_basis,
            KLRatio::default().n_basis
        );
    }

    #[test]
    fn method_help_states_the_core_row_limits() {
        // The `--method` help text (steps.rs) names 5,000 pooled rows as the switch to the large
        // route of both tests; it must change with the core defaults.
        assert_eq!(
            shiftweight::ClassifierShiftTest::default().max_permutation_rows,
            5_000
        );
        assert_eq!(shiftweight::MmdShiftTest::default().max_kernel_rows, 5_000);
    }
}
