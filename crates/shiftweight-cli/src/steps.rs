//! The steps of a job that come from other parts of the library, each behind one hook, so that
//! `weigh`, `detect` and `demo` call the same code.

use crate::io::Table;
use crate::read::TypedTable;
use crate::report::{
    self, ClipRow, FeaturesPart, InputFacts, Part, ShiftOptions, ShiftPart, TestKind, WeightsPart,
};
use crate::{exit, Failure};
use clap::{Args, ValueEnum};
use shiftweight::weights::{stabilize, StabilizeOptions};
use shiftweight::FittedRatio;

/// Options of the weight stabilisation step (`shiftweight::weights::stabilize`). Steps apply in
/// the library's documented order: flatten (--power), Pareto smoothing (--smooth), clip at a
/// quantile (--clip-quantile), then bounds, truncation and normalisation to mean 1.
#[derive(Debug, Clone, Default, Args)]
pub struct StabiliseArgs {
    /// Clip weights above this quantile of the weights (e.g. 0.99).
    #[arg(long, value_name = "Q")]
    pub clip_quantile: Option<f64>,
    /// Upper bound on the (normalised) weights.
    #[arg(long, value_name = "U")]
    pub upper: Option<f64>,
    /// Lower bound on the (normalised) weights.
    #[arg(long, value_name = "L")]
    pub lower: Option<f64>,
    /// Truncate at sqrt(n) times the mean weight (Ionides 2008).
    #[arg(long)]
    pub truncate: bool,
    /// Flatten: w^POWER with POWER in [0, 1] (Shimodaira 2000).
    #[arg(long, value_name = "POWER")]
    pub power: Option<f64>,
    /// Pareto-smooth the largest weights (PSIS, Vehtari et al. 2024).
    #[arg(long)]
    pub smooth: bool,
    /// Keep the raw scale instead of normalising to mean 1 over the source rows.
    #[arg(long)]
    pub no_normalize: bool,
}

impl StabiliseArgs {
    fn options(&self) -> Option<StabilizeOptions> {
        let any = self.clip_quantile.is_some()
            || self.upper.is_some()
            || self.lower.is_some()
            || self.truncate
            || self.power.is_some()
            || self.smooth
            || self.no_normalize;
        if !any {
            return None;
        }
        let mut o = StabilizeOptions::new()
            .truncate(self.truncate)
            .smooth(self.smooth)
            .normalize(!self.no_normalize);
        if let Some(q) = self.clip_quantile {
            o = o.upper_quantile(q);
        }
        if let Some(u) = self.upper {
            o = o.upper(u);
        }
        if let Some(l) = self.lower {
            o = o.lower(l);
        }
        if let Some(p) = self.power {
            o = o.power(p);
        }
        Some(o)
    }
}

/// The weights to write, with their report sections.
pub struct WeightsOutcome {
    /// One weight per source row, in source order.
    pub weights: Vec<f64>,
    /// Statistics and diagnostics.
    pub part: WeightsPart,
    /// The clipping trade-off.
    pub clipping: Part<Vec<ClipRow>>,
}

/// Stabilisation (when any option is given) and diagnostics of the fitted source weights.
pub fn finish_weights(
    model: &FittedRatio,
    opts: &StabiliseArgs,
) -> Result<WeightsOutcome, Failure> {
    let (weights, described) = match opts.options() {
        None => (
            model.source_weights.clone(),
            match model.cap {
                Some(c) => format!(
                    "capped at {:.3} times the mean weight, keeping the raw mean {:.3} (chosen with the estimator)",
                    c.upper, c.mass
                ),
                None => "none (raw estimates)".to_string(),
            },
        ),
        Some(o) => {
            let st = stabilize(&model.source_weights, &o)?;
            let steps: Vec<String> = st
                .report
                .steps
                .iter()
                .map(|r| format!("{} ({} rows changed)", r.step, r.rows_changed))
                .collect();
            (
                st.weights,
                if steps.is_empty() {
                    "none needed".into()
                } else {
                    steps.join("; ")
                },
            )
        }
    };
    let (part, clipping) = report::weight_sections(&model.source_weights, &weights, &described);
    Ok(WeightsOutcome {
        weights,
        part,
        clipping,
    })
}

/// Facts of one input table read from `path`.
pub fn input_facts(role: &str, path: &std::path::Path, table: &TypedTable) -> InputFacts {
    InputFacts::of(role, path, table.rows, table.rows_dropped)
}

/// Two-sample test methods accepted by `--method`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum TestMethod {
    /// A classifier told to separate source from target; statistic: its out-of-fold AUC;
    /// p-value by permutation up to 5,000 pooled rows, above that the AUC of a held-out half
    /// with the normal approximation of the Mann-Whitney U.
    Classifier,
    /// Maximum mean discrepancy with a Gaussian kernel; p-value by permutation (above 5,000
    /// pooled rows, by relabelling within blocks of the block estimator).
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
    /// Significance level: the shift is called significant when p <= LEVEL.
    #[arg(long, default_value_t = 0.05)]
    pub level: f64,
}

/// What the shift test found.
pub struct DetectOutcome {
    /// The test result.
    pub shift: ShiftPart,
    /// Per-feature shift, most shifted first.
    pub features: Part<FeaturesPart>,
}

impl DetectArgs {
    /// The report crate's options of the same test.
    pub fn shift_options(&self) -> Result<ShiftOptions, Failure> {
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(Failure {
                code: exit::BAD_INPUT,
                message: format!("--level must be in (0, 1), got {}", self.level),
            });
        }
        Ok(ShiftOptions {
            test: match self.method {
                TestMethod::Classifier => TestKind::Classifier,
                TestMethod::Mmd => TestKind::Mmd,
            },
            permutations: self.permutations,
            level: self.level,
        })
    }
}

/// The shift test (classifier two-sample test or MMD) and the per-feature table.
pub fn run_detection(
    source: &Table,
    target: &Table,
    opts: &DetectArgs,
    seed: u64,
) -> Result<DetectOutcome, Failure> {
    let o = opts.shift_options()?;
    let (s, t) = (source.view("source")?, target.view("target")?);
    let (shift, features) = report::shift_sections(s, t, &source.names, &o, seed)?;
    Ok(DetectOutcome { shift, features })
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
