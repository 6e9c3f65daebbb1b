//! The steps of a job that come from other parts of the library, each behind one hook, so that
//! `weigh`, `detect` and `demo` call the same code.

use crate::io::Table;
use crate::report::{self, ClipRow, FeatureRow, Part, ShiftPart, WeightsPart};
use crate::{exit, Failure};
use clap::{Args, ValueEnum};
use shiftweight::FittedRatio;

/// Options of the weight stabilisation step.
///
/// MERGE: the stabilisation flags of issue 8 (e.g. a cap or a quantile to clip at) go here.
#[derive(Debug, Clone, Default, Args)]
pub struct StabiliseArgs {}

/// The weights to write, with their report sections.
pub struct WeightsOutcome {
    /// One weight per source row, in source order.
    pub weights: Vec<f64>,
    /// Statistics and diagnostics.
    pub part: WeightsPart,
    /// The clipping trade-off.
    pub clipping: Part<Vec<ClipRow>>,
}

/// HOOK: stabilisation and diagnostics of the fitted source weights.
///
/// MERGE: apply `shiftweight::weights` stabilisation per `opts` here, fill `part.diagnostics`
/// from `shiftweight::diagnostics` (Pareto k, verdict, Kish ESS), and the clipping trade-off.
pub fn finish_weights(
    model: &FittedRatio,
    opts: &StabiliseArgs,
) -> Result<WeightsOutcome, Failure> {
    let _ = opts;
    let weights = model.source_weights.clone();
    let part = report::describe_weights(&weights, "none (raw estimates)");
    Ok(WeightsOutcome {
        weights,
        part,
        clipping: Part::missing("the clipping trade-off is not available in this build"),
    })
}

/// Two-sample test methods accepted by `--method`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum TestMethod {
    /// A classifier told to separate source from target; held-out accuracy, permutation p-value.
    Classifier,
    /// Maximum mean discrepancy with a Gaussian kernel, permutation p-value.
    Mmd,
}

/// Options of the shift test.
#[derive(Debug, Clone, Args)]
pub struct DetectArgs {
    /// Two-sample test.
    #[arg(long, value_enum, default_value_t = TestMethod::Classifier)]
    pub method: TestMethod,
    /// Number of permutations for the p-value.
    #[arg(long, default_value_t = 200)]
    pub permutations: usize,
    /// Significance level: the shift is called significant when p < LEVEL.
    #[arg(long, default_value_t = 0.05)]
    pub level: f64,
}

/// What the shift test found.
// MERGE: built by `run_detection` once `shiftweight::detect` exists.
#[allow(dead_code)]
pub struct DetectOutcome {
    /// The test result.
    pub shift: ShiftPart,
    /// Per-feature shift, most shifted first.
    pub features: Part<Vec<FeatureRow>>,
}

/// HOOK: the shift test and per-feature shift.
///
/// MERGE: call `shiftweight::detect` (the two-sample test with `opts.method`,
/// `opts.permutations`, `seed`, and the per-feature table with `source.names`) here.
pub fn run_detection(
    source: &Table,
    target: &Table,
    opts: &DetectArgs,
    seed: u64,
) -> Result<DetectOutcome, Failure> {
    let _ = (source, target, seed);
    if !(opts.level > 0.0 && opts.level < 1.0) {
        return Err(Failure {
            code: exit::BAD_INPUT,
            message: format!("--level must be in (0, 1), got {}", opts.level),
        });
    }
    Err(Failure {
        code: exit::BAD_INPUT,
        message: "shift detection is not available in this build".into(),
    })
}

/// The exit code of `detect`: [`exit::SHIFT_DETECTED`] when the shift is significant and
/// `--fail-on-shift` was given, 0 otherwise.
pub fn detect_exit_code(significant: bool, fail_on_shift: bool) -> u8 {
    if significant && fail_on_shift {
        exit::SHIFT_DETECTED
    } else {
        0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fail_on_shift_only_when_significant() {
        assert_eq!(detect_exit_code(true, true), exit::SHIFT_DETECTED);
        assert_eq!(detect_exit_code(true, false), 0);
        assert_eq!(detect_exit_code(false, true), 0);
        assert_ne!(exit::SHIFT_DETECTED, exit::BAD_INPUT);
    }
}
