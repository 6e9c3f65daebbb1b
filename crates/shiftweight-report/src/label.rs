//! The optional label-shift section of the report: the estimated target class mix with its
//! intervals, how it was estimated, the class weights, the predicted-class mix test and the
//! cautions of label-shift correction (it assumes p(x | y) unchanged).
//!
//! Every number comes from `shiftweight::label` ([`LabelShiftEstimate`],
//! [`ClassMixTestResult`]); this module only arranges them. The section is rendered by the
//! template `templates/label_shift.html`, included by the page when [`crate::Report::label_shift`]
//! is set.

use serde::Serialize;
use shiftweight::label::{
    ClassMixTestResult, LabelShiftEstimate, LabelShiftMethod, MixPValueMethod, LABEL_SHIFT_CAUTION,
    TELLING_APART,
};

use crate::svg::{num, p_value};

/// Element id and heading of the section.
pub const LABEL_SHIFT_SECTION: (&str, &str) =
    ("label-shift", "Label shift: the target's class mix");

/// The template of the section (included by the page's template).
pub const TEMPLATE: &str = include_str!("../templates/label_shift.html");

/// Significance level at which the predicted-class mix test's verdict is stated (common practice).
pub const MIX_TEST_LEVEL: f64 = 0.05;

/// One class of the label-shift table.
#[derive(Debug, Clone, Serialize)]
pub struct ClassShareRow {
    /// Class name.
    pub class: String,
    /// Share of the labelled source rows, p(y).
    pub source_share: f64,
    /// Estimated target share, q(y).
    pub target_share: f64,
    /// Lower end of its interval (absent without an interval).
    pub interval_low: Option<f64>,
    /// Upper end of its interval.
    pub interval_high: Option<f64>,
    /// Class weight w(y) = q(y) / p(y).
    pub class_weight: f64,
}

/// The predicted-class mix test, as reported.
#[derive(Debug, Clone, Serialize)]
pub struct MixTestPart {
    /// Pearson's chi-square statistic.
    pub statistic: f64,
    /// Degrees of freedom.
    pub dof: usize,
    /// The p-value.
    pub p_value: f64,
    /// How it was obtained, in words.
    pub p_method: String,
    /// The level of the verdict.
    pub level: f64,
    /// Whether p <= level.
    pub significant: bool,
    /// The verdict in plain words.
    pub verdict: String,
}

impl MixTestPart {
    /// The test's result, with its verdict at [`MIX_TEST_LEVEL`].
    pub fn from_result(t: &ClassMixTestResult) -> Self {
        let significant = t.p_value <= MIX_TEST_LEVEL;
        let p_method = match t.p_value_method {
            MixPValueMethod::ChiSquare => "chi-square distribution".to_string(),
            MixPValueMethod::Permutation => format!(
                "permutation of the rows ({} permutations; an expected count was small)",
                t.permutations
            ),
        };
        let verdict = if significant {
            format!(
                "The target's predicted classes are mixed differently from the source's (p = {}, \
                 at most {}).",
                p_value(t.p_value),
                num(MIX_TEST_LEVEL)
            )
        } else {
            format!(
                "No change of the predicted-class mix was found (p = {}, level {}).",
                p_value(t.p_value),
                num(MIX_TEST_LEVEL)
            )
        };
        MixTestPart {
            statistic: t.statistic,
            dof: t.dof,
            p_value: t.p_value,
            p_method,
            level: MIX_TEST_LEVEL,
            significant,
            verdict,
        }
    }
}

/// Everything the label-shift section shows.
#[derive(Debug, Clone, Serialize)]
pub struct LabelShiftPart {
    /// `em` or `bbse`.
    pub method: String,
    /// The method in words, with its source.
    pub method_words: String,
    /// Confidence level of the intervals.
    pub level: f64,
    /// How the intervals were obtained.
    pub interval_method: String,
    /// Labelled source rows.
    pub n_source: usize,
    /// Target rows.
    pub n_target: usize,
    /// One row per class, in probability-column order.
    pub rows: Vec<ClassShareRow>,
    /// Condition number of the confusion matrix, when the confusion-matrix estimate exists.
    pub condition_number: Option<f64>,
    /// The predicted-class mix test, when it was run.
    pub mix_test: Option<MixTestPart>,
    /// Warnings of the estimate.
    pub warnings: Vec<String>,
    /// How to tell label shift from covariate shift.
    pub telling_apart: String,
    /// The cautions of label-shift correction.
    pub caution: String,
}

impl LabelShiftPart {
    /// The section of an estimate and, when run, the predicted-class mix test on the same
    /// probabilities.
    pub fn new(est: &LabelShiftEstimate, mix_test: Option<&ClassMixTestResult>) -> Self {
        let names: Vec<String> = match &est.class_names {
            Some(n) => n.clone(),
            None => (0..est.n_classes).map(|j| j.to_string()).collect(),
        };
        let end = |v: &Option<Vec<f64>>, j: usize| v.as_ref().and_then(|v| v.get(j).copied());
        let rows = names
            .into_iter()
            .enumerate()
            .map(|(j, class)| ClassShareRow {
                class,
                source_share: est.source_proportions[j],
                target_share: est.target_proportions[j],
                interval_low: end(&est.interval_low, j),
                interval_high: end(&est.interval_high, j),
                class_weight: est.class_weights[j],
            })
            .collect();
        let method_words = match est.method {
            LabelShiftMethod::Em => "maximum likelihood by EM (Saerens, Latinne & Decaestecker \
                2002) on probabilities calibrated on the source by bias-corrected temperature \
                scaling (Alexandari, Kundaje & Shrikumar 2020)"
                .to_string(),
            LabelShiftMethod::Bbse => {
                "the confusion-matrix method, BBSE (Lipton, Wang & Smola 2018)".to_string()
            }
        };
        LabelShiftPart {
            method: est.method.name().to_string(),
            method_words,
            level: est.level,
            interval_method: est.interval_method.clone(),
            n_source: est.n_source,
            n_target: est.n_target,
            rows,
            condition_number: est.bbse.as_ref().map(|b| b.condition_number),
            mix_test: mix_test.map(MixTestPart::from_result),
            warnings: est.warnings.clone(),
            telling_apart: TELLING_APART.to_string(),
            caution: LABEL_SHIFT_CAUTION.to_string(),
        }
    }

    /// One sentence for the report's summary: the estimated mix and the mix test's verdict.
    pub fn summary(&self) -> String {
        let shares: Vec<String> = self
            .rows
            .iter()
            .map(|r| {
                format!(
                    "{} {} (source {})",
                    r.class,
                    num(r.target_share),
                    num(r.source_share)
                )
            })
            .collect();
        let mut s = format!(
            "Estimated target class mix, assuming only the class mix changed: {}.",
            shares.join(", ")
        );
        if let Some(t) = &self.mix_test {
            s.push(' ');
            s.push_str(&t.verdict);
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Report;
    use shiftweight::label::{ClassMixTest, LabelShift, LabelShiftMethod};
    use shiftweight::Matrix;

    /// One-hot rows: source class 0 predicted 0 in 8 of 10 rows, class 1 predicted 1 in 7 of 10;
    /// target 9 of 20 rows predicted 0, so A = [[0.8, 0.3], [0.2, 0.7]], mu = (0.45, 0.55) and
    /// q = A^{-1} mu = (0.3, 0.7) exactly (the BBSE equation, Lipton, Wang & Smola 2018).
    fn case() -> (Matrix, Vec<usize>, Matrix) {
        let one_hot = |pred: &[usize]| {
            let mut v = vec![0.0; pred.len() * 2];
            for (i, &c) in pred.iter().enumerate() {
                v[i * 2 + c] = 1.0;
            }
            Matrix::new(v, pred.len(), 2).unwrap()
        };
        let labels: Vec<usize> = (0..20).map(|i| usize::from(i >= 10)).collect();
        let pred: Vec<usize> = (0..20)
            .map(|i| usize::from(!(i < 8 || (10..13).contains(&i))))
            .collect();
        let pred_t: Vec<usize> = (0..20).map(|i| usize::from(i >= 9)).collect();
        (one_hot(&pred), labels, one_hot(&pred_t))
    }

    #[test]
    fn section_shows_the_estimate_and_the_test() {
        let (ps, labels, pt) = case();
        let est = LabelShift::new()
            .method(LabelShiftMethod::Bbse)
            .class_names(vec!["no".into(), "yes <&>".into()])
            .fit(ps.view(), &labels, pt.view())
            .unwrap();
        let test = ClassMixTest::new()
            .seed(1)
            .run(ps.view(), pt.view())
            .unwrap();
        let part = LabelShiftPart::new(&est, Some(&test));
        // q = (0.3, 0.7), p = (0.5, 0.5), so w = (0.6, 1.4) (analytic, see `case`).
        assert!((part.rows[0].target_share - 0.3).abs() < 1e-12);
        assert!((part.rows[1].class_weight - 1.4).abs() < 1e-12);
        assert_eq!(part.rows[1].class, "yes <&>");
        assert_eq!(part.mix_test.as_ref().unwrap().p_value, test.p_value);
        let mut r = Report::new("class-mix", 0);
        r.label_shift = Some(part);
        let page = r.to_html();
        // reference: roxmltree, an independent strict XML parser (rejects unbalanced tags)
        let doc = roxmltree::Document::parse_with_options(
            &page,
            roxmltree::ParsingOptions {
                allow_dtd: true,
                ..Default::default()
            },
        )
        .unwrap();
        let section = doc
            .descendants()
            .find(|n| n.attribute("id") == Some(LABEL_SHIFT_SECTION.0))
            .expect("the label-shift section");
        let words: String = section.descendants().filter_map(|t| t.text()).collect();
        assert!(
            words.contains("yes <&>"),
            "class names are escaped, not dropped"
        );
        assert!(words.contains("0.3") && words.contains("1.4"));
        assert!(words.contains("p(x | y)") && words.contains("covariate shift"));
        assert!(words.contains("chi-square"));
        // The navigation links to it, and the summary names the estimated mix.
        assert!(page.contains(&format!("href=\"#{}\"", LABEL_SHIFT_SECTION.0)));
        assert!(r.summary().contains("yes <&> 0.7 (source 0.5)"));
        assert!(r.to_json().contains("\"label_shift\""));
    }

    #[test]
    fn pages_without_it_are_unchanged() {
        let r = Report::new("weigh", 0);
        assert!(!r.to_html().contains(LABEL_SHIFT_SECTION.0));
        assert!(!r.to_json().contains("label_shift"));
    }
}
