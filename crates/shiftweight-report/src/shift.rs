//! The "Is there a shift?" section: the two-sample test the report runs ([`ShiftOptions`]), its
//! statistic named and its p-value explained ([`ShiftPart`]), and the per-feature table beside it
//! ([`shift_sections`]). Cost: that of the test and of the feature table (`shiftweight::detect`).

use crate::format::p_value;
use crate::{FeaturesPart, Part};
use serde::Serialize;
use shiftweight::detect::{PValueMethod, ShiftDetails};
use shiftweight::{ClassifierShiftTest, FeatureShift, MatrixView, MmdShiftTest, ShiftTestResult};

/// Shift-test result, with its statistic named and its p-value explained.
#[derive(Debug, Clone, Serialize)]
pub struct ShiftPart {
    /// Test method (`classifier` or `mmd`).
    pub method: String,
    /// The test in plain words.
    pub test: String,
    /// Name of the statistic (`AUC` or `MMD^2`).
    pub statistic_name: String,
    /// Test statistic.
    pub statistic: f64,
    /// 95% confidence interval of the statistic (the AUC's, by DeLong's standard error).
    pub interval: Option<(f64, f64)>,
    /// Gaussian kernel width in standardised units (MMD).
    pub kernel_width: Option<f64>,
    /// p-value.
    pub p_value: f64,
    /// How the p-value was obtained, in plain words.
    pub p_method: String,
    /// Permutations used (0 when the p-value is not a permutation p-value).
    pub permutations: usize,
    /// Smallest p-value the permutations can give, 1/(B+1) (permutation p-values only).
    pub p_floor: Option<f64>,
    /// Significance level used for the verdict.
    pub level: f64,
    /// True when p_value <= level (a valid p-value is at most the level with probability at most
    /// the level under no shift, so the test keeps its size; Lehmann & Romano 2005, 3.3).
    pub significant: bool,
    /// Notes of the test (e.g. why an approximation was used).
    pub notes: Vec<String>,
}

impl ShiftPart {
    /// The report section of a shift test at significance level `level`.
    pub fn from_test(r: &ShiftTestResult, level: f64) -> Self {
        let (test, statistic_name, interval, kernel_width) = match &r.details {
            ShiftDetails::Classifier {
                auc_ci_low,
                auc_ci_high,
                classifier,
                ..
            } => (
                format!("classifier two-sample test ({classifier}), statistic the out-of-fold AUC of telling target rows from source rows (0.5: indistinguishable, 1: fully separable)"),
                "AUC".to_string(),
                Some((*auc_ci_low, *auc_ci_high)),
                None,
            ),
            ShiftDetails::Mmd {
                sigma, estimator, ..
            } => (
                format!("kernel two-sample test, {estimator} estimate of the squared maximum mean discrepancy with a Gaussian kernel (0: same distribution)"),
                "MMD^2".to_string(),
                None,
                Some(*sigma),
            ),
        };
        let (p_method, p_floor) = match r.p_value_method {
            PValueMethod::Permutation => (
                format!("permutation test with {} relabellings of the rows, each refitted: p = (1 + number at least as extreme) / ({} + 1)", r.permutations, r.permutations),
                Some(1.0 / (r.permutations as f64 + 1.0)),
            ),
            PValueMethod::BlockPermutation => (
                format!("{} relabellings of the rows within each block of the block estimator: p = (1 + number at least as extreme) / ({} + 1)", r.permutations, r.permutations),
                Some(1.0 / (r.permutations as f64 + 1.0)),
            ),
            PValueMethod::HeldOutNormal => (
                "classifier fitted on one half of the rows, AUC of the other half referred to the normal approximation of the Mann-Whitney U statistic (used above 5,000 pooled rows)".to_string(),
                None,
            ),
        };
        ShiftPart {
            method: r.method.clone(),
            test,
            statistic_name,
            statistic: r.statistic,
            interval,
            kernel_width,
            p_value: r.p_value,
            p_method,
            permutations: r.permutations,
            p_floor,
            level,
            significant: r.p_value <= level,
            notes: r.notes.clone(),
        }
    }

    /// The p-value as printed: `p <= 1/(B+1)` at the permutation floor, else its value.
    pub fn p_text(&self) -> String {
        match self.p_floor {
            Some(f) if self.p_value <= f * (1.0 + 1e-9) => format!(
                "p <= {} (the smallest p-value {} permutations can give)",
                p_value(f),
                self.permutations
            ),
            _ => format!("p = {}", p_value(self.p_value)),
        }
    }
}

/// Which two-sample test the report runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TestKind {
    /// Classifier two-sample test (out-of-fold AUC).
    Classifier,
    /// Kernel two-sample test (MMD^2).
    Mmd,
}

/// Options of the shift test of a report.
#[derive(Debug, Clone, Copy)]
pub struct ShiftOptions {
    /// The test.
    pub test: TestKind,
    /// Permutations of its p-value.
    pub permutations: usize,
    /// Significance level of the verdict, in (0, 1).
    pub level: f64,
}

impl Default for ShiftOptions {
    fn default() -> Self {
        ShiftOptions {
            test: TestKind::Classifier,
            permutations: 200,
            level: 0.05,
        }
    }
}

/// Runs the two-sample test of `opts` on `source` and `target` (the level is checked here).
pub(crate) fn run_test(
    source: MatrixView,
    target: MatrixView,
    opts: &ShiftOptions,
    seed: u64,
) -> shiftweight::Result<ShiftTestResult> {
    if !(opts.level > 0.0 && opts.level < 1.0) {
        return Err(shiftweight::Error::param(
            "level",
            format!("must be in (0, 1), got {}", opts.level),
        ));
    }
    match opts.test {
        TestKind::Classifier => ClassifierShiftTest::new()
            .permutations(opts.permutations)
            .seed(seed)
            .run(source, target),
        TestKind::Mmd => MmdShiftTest::new()
            .permutations(opts.permutations)
            .seed(seed)
            .run(source, target),
    }
}

/// Runs the shift test and the per-feature table on `source` and `target` and returns their
/// sections (a failed feature table becomes a missing section; a failed test is an error).
pub fn shift_sections(
    source: MatrixView,
    target: MatrixView,
    names: &[String],
    opts: &ShiftOptions,
    seed: u64,
) -> shiftweight::Result<(ShiftPart, Part<FeaturesPart>)> {
    let result = run_test(source, target, opts, seed)?;
    let features = match FeatureShift::new()
        .seed(seed)
        .run(source, target, Some(names))
    {
        Ok(t) => Part::Available(FeaturesPart::from_table(&t, &source, &target)),
        Err(e) => Part::missing(format!("per-feature shift failed: {e}")),
    };
    Ok((ShiftPart::from_test(&result, opts.level), features))
}
