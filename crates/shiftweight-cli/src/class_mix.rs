//! `shiftweight class-mix`: label shift from a classifier's probabilities. Reads out-of-fold
//! probabilities of labelled source rows and probabilities of target rows (columns by name),
//! estimates the target class proportions with intervals, tests the predicted-class mix, and
//! writes the proportions and class weights, the estimate as JSON, one class weight per source
//! row, the target's prior-adjusted probabilities and the HTML report's label-shift section.
//! Every file is written to a temporary name and renamed, after everything has been computed.

use crate::io::{self, numeric_rows, ColumnChoice, FileOptions, Format, WeightsWriter};
use crate::progress::Progress;
use crate::read::{read_typed, TypeOverrides, TypedTable};
use crate::report::{label::LabelShiftPart, Report};
use crate::steps::input_facts;
use crate::{exit, Failure, Globals};
use clap::Args;
use shiftweight::label::{
    ClassMixTest, LabelShift, LabelShiftMethod, MixPValueMethod, LABEL_SHIFT_CAUTION, TELLING_APART,
};
use shiftweight::MatrixView;
use std::fmt::Write as _;
use std::path::PathBuf;

/// Arguments of `class-mix`.
#[derive(Debug, Clone, Args)]
#[command(after_help = "Examples:
  shiftweight class-mix --source source_proba.csv --label label --target target_proba.csv \\
      --columns p_no,p_yes --out class_mix.csv
  shiftweight class-mix --source s.parquet --label y --target t.parquet --columns cat,dog,bird \\
      --out class_mix.csv --json class_mix.json --weights class_weights.csv --adjusted adjusted.csv --key id \\
      --report class_mix.html

The label column holds a probability column's name or a class number 0..K-1 (column order).
Cautions: label-shift correction assumes p(x | y) and the classifier's errors do not change; it
does not correct covariate shift; validate on labelled target rows; the rules of your domain come
first.")]
pub struct ClassMixArgs {
    /// Labelled source rows with out-of-fold class probabilities (CSV with a header, or Parquet).
    #[arg(long, value_name = "FILE")]
    pub source: PathBuf,
    /// Target rows with the probabilities of the classifier trained on the source.
    #[arg(long, value_name = "FILE")]
    pub target: PathBuf,
    /// The source column holding each row's class.
    #[arg(long, value_name = "NAME")]
    pub label: String,
    /// Probability columns, one per class in class order, comma-separated (in both files).
    #[arg(long, value_delimiter = ',', value_name = "NAMES", required = true)]
    pub columns: Vec<String>,
    /// A target key column carried verbatim to the --adjusted file.
    #[arg(long, value_name = "NAME")]
    pub key: Option<String>,
    /// Input format (default: by extension; .parquet/.pq is Parquet, anything else CSV).
    #[arg(long, value_enum)]
    pub format: Option<Format>,
    /// CSV field delimiter: one character, or `tab`.
    #[arg(long, default_value = ",", value_parser = crate::args::parse_delimiter)]
    pub delimiter: u8,
    /// Skip rows with a missing probability (the count is reported) instead of stopping; a
    /// skipped source row gets no weight, a skipped target row no adjusted probabilities.
    #[arg(long)]
    pub drop_missing: bool,
    /// Reported estimate: `em` (EM on calibrated probabilities) or `bbse` (confusion matrix).
    #[arg(long, default_value = "em", value_name = "NAME")]
    pub method: String,
    /// Confidence level of the intervals.
    #[arg(long, default_value_t = 0.95, value_name = "P")]
    pub level: f64,
    /// Bootstrap replicates of the EM interval (0 = none, else at least 20).
    #[arg(long, default_value_t = 200, value_name = "N")]
    pub bootstrap: usize,
    /// Where to write the table of class shares, intervals and class weights (CSV).
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Also write the estimate as JSON (readable by the Python package).
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// Also write one class weight per source row (CSV: label,weight), for retraining.
    #[arg(long, value_name = "FILE")]
    pub weights: Option<PathBuf>,
    /// Also write the target's prior-adjusted probabilities (CSV, same column names).
    #[arg(long, value_name = "FILE")]
    pub adjusted: Option<PathBuf>,
    /// Also write the HTML report (its label-shift section: shares, intervals, class weights,
    /// the mix test and the cautions).
    #[arg(long, value_name = "FILE")]
    pub report: Option<PathBuf>,
}

fn bad(message: String) -> Failure {
    Failure {
        code: exit::BAD_INPUT,
        message,
    }
}

/// Class index of every label text: a probability column's name or a class number 0..K-1.
fn class_codes(
    labels: &[String],
    row_numbers: &[usize],
    columns: &[String],
    label: &str,
) -> Result<Vec<usize>, Failure> {
    let k = columns.len();
    labels
        .iter()
        .enumerate()
        .map(|(i, text)| {
            let t = text.trim();
            if let Some(j) = columns.iter().position(|c| c == t) {
                return Ok(j);
            }
            match t.parse::<f64>() {
                Ok(v) if v >= 0.0 && v.fract() == 0.0 && (v as usize) < k => Ok(v as usize),
                _ => Err(bad(format!(
                    "data row {} (1-based, header not counted) of the `{label}` column holds {t:?}, which is neither a probability \
                     column name ({}) nor a class number 0 to {}",
                    row_numbers.get(i).copied().unwrap_or(i + 1),
                    columns.join(", "),
                    k - 1
                ))),
            }
        })
        .collect()
}

fn csv_row(cells: &[String]) -> String {
    let quoted: Vec<String> = cells
        .iter()
        .map(|s| {
            if s.contains([',', '"', '\n', '\r']) {
                format!("\"{}\"", s.replace('"', "\"\""))
            } else {
                s.clone()
            }
        })
        .collect();
    quoted.join(",") + "\n"
}

/// Runs `class-mix`.
/// Refuses a Parquet name for an output this step writes as CSV.
fn csv_only(path: &std::path::Path) -> Result<(), Failure> {
    match path
        .extension()
        .and_then(|e| e.to_str())
        .map(|e| e.to_ascii_lowercase())
    {
        Some(e) if e == "parquet" || e == "pq" => Err(bad(format!(
            "`{}`: this output is written as CSV; choose a .csv name",
            path.display()
        ))),
        _ => Ok(()),
    }
}

pub fn run(args: ClassMixArgs, g: &Globals) -> Result<u8, Failure> {
    if args.columns.len() < 2 {
        return Err(bad(format!(
            "--columns needs one probability column per class (at least 2), got {}",
            args.columns.len()
        )));
    }
    // The class table and the adjusted probabilities are written as CSV text (the per-row
    // weights follow the extension, like `weigh`'s).
    for p in std::iter::once(&args.out).chain(&args.adjusted) {
        csv_only(p)?;
    }
    let method = LabelShiftMethod::parse(&args.method)?;
    let progress = Progress::new(g.quiet);
    let opts = FileOptions {
        format: args.format,
        delimiter: args.delimiter,
        drop_missing: args.drop_missing,
    };
    // Probability columns are read as numbers whatever their text: a value that is not a number
    // is an error naming the file, the row and the column.
    let types = TypeOverrides {
        numeric: args.columns.clone(),
        categorical: Vec::new(),
    };
    let read = |path: &std::path::Path, key: Option<String>| -> Result<TypedTable, Failure> {
        let choice = ColumnChoice {
            columns: Some(args.columns.clone()),
            exclude: Vec::new(),
            key,
        };
        read_typed(path, &opts, &choice, &types)
    };
    let source = {
        let _s = progress.step("reading source probabilities");
        read(&args.source, Some(args.label.clone()))?
    };
    let target = {
        let _s = progress.step("reading target probabilities");
        read(&args.target, args.key.clone())?
    };
    let labels = class_codes(
        source.keys.as_deref().unwrap_or_default(),
        &source.row_numbers,
        &args.columns,
        &args.label,
    )?;
    let k = args.columns.len();
    let s_values = numeric_rows(
        &args.source,
        &args.columns,
        &source.values,
        &source.row_numbers,
    )?;
    let t_values = numeric_rows(
        &args.target,
        &args.columns,
        &target.values,
        &target.row_numbers,
    )?;
    let ps = MatrixView::named(&s_values, source.rows, k, "source_probabilities")?;
    let pt = MatrixView::named(&t_values, target.rows, k, "target_probabilities")?;
    let estimate = {
        let _s = progress.step("estimating the target class mix");
        LabelShift::new()
            .method(method)
            .level(args.level)
            .bootstrap(args.bootstrap)
            .seed(g.seed)
            .class_names(args.columns.clone())
            .fit(ps, &labels, pt)?
    };
    let test = ClassMixTest::new().seed(g.seed).run(ps, pt)?;
    let adjusted = match &args.adjusted {
        Some(_) => Some(estimate.adjust(pt)?),
        None => None,
    };
    let row_weights = estimate.sample_weights(&labels)?;

    // Everything is computed; now write, each file atomically.
    let mut table = csv_row(&[
        "class".into(),
        "source_share".into(),
        "target_share".into(),
        "interval_low".into(),
        "interval_high".into(),
        "class_weight".into(),
    ]);
    for (j, name) in args.columns.iter().enumerate() {
        let end = |v: &Option<Vec<f64>>| v.as_ref().map_or(String::new(), |v| v[j].to_string());
        table.push_str(&csv_row(&[
            name.clone(),
            estimate.source_proportions[j].to_string(),
            estimate.target_proportions[j].to_string(),
            end(&estimate.interval_low),
            end(&estimate.interval_high),
            estimate.class_weights[j].to_string(),
        ]));
    }
    io::write_text(&args.out, &table)?;
    if let Some(p) = &args.json {
        io::write_text(p, &estimate.to_json()?)?;
    }
    if let Some(p) = &args.report {
        let mut report = Report::new("class-mix", g.seed);
        report.inputs = vec![
            input_facts("source probabilities", &args.source, &source),
            input_facts("target probabilities", &args.target, &target),
        ];
        report.features_used = args.columns.clone();
        report.label_shift = Some(LabelShiftPart::new(&estimate, Some(&test)));
        io::write_text(p, &report.to_html())?;
    }
    if let Some(p) = &args.weights {
        let mut w = WeightsWriter::create(p, Some(args.label.as_str()))?;
        w.write(&row_weights, source.keys.as_deref())?;
        w.commit()?;
    }
    if let (Some(p), Some(m)) = (&args.adjusted, &adjusted) {
        let mut text = String::new();
        let mut head = Vec::new();
        if let Some(k) = &args.key {
            head.push(k.clone());
        }
        head.extend(args.columns.iter().cloned());
        text.push_str(&csv_row(&head));
        for i in 0..m.rows() {
            let mut cells = Vec::with_capacity(head.len());
            if let Some(keys) = &target.keys {
                cells.push(keys[i].clone());
            }
            cells.extend(m.row(i).iter().map(|v| v.to_string()));
            text.push_str(&csv_row(&cells));
        }
        io::write_text(p, &text)?;
    }

    // Warnings are printed even with --quiet: they say when the estimate cannot be trusted.
    for w in &estimate.warnings {
        eprintln!("warning: {w}");
    }
    if !g.quiet {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "target class mix ({}; {} source rows, {} target rows; {}% intervals by {}):",
            match method {
                LabelShiftMethod::Em => "EM on calibrated probabilities",
                LabelShiftMethod::Bbse => "confusion-matrix method",
            },
            estimate.n_source,
            estimate.n_target,
            100.0 * estimate.level,
            estimate.interval_method
        );
        for (j, name) in args.columns.iter().enumerate() {
            let interval = match (&estimate.interval_low, &estimate.interval_high) {
                (Some(lo), Some(hi)) => format!(" ({:.3} to {:.3})", lo[j], hi[j]),
                _ => String::new(),
            };
            let _ = writeln!(
                s,
                "  {name}: source {:.3}, target {:.3}{interval}, class weight {:.3}",
                estimate.source_proportions[j],
                estimate.target_proportions[j],
                estimate.class_weights[j]
            );
        }
        let p_text = if test.p_value >= 1e-4 {
            format!("{:.4}", test.p_value)
        } else {
            format!("{:.1e}", test.p_value)
        };
        let _ = writeln!(
            s,
            "predicted-class mix test: p = {p_text} ({}, {} degree(s) of freedom); a small p means \
             the target's predicted classes are mixed differently from the source's",
            match test.p_value_method {
                MixPValueMethod::ChiSquare => "chi-square test",
                MixPValueMethod::Permutation => "chi-square statistic, permutation p-value",
            },
            test.dof
        );
        if source.rows_dropped + target.rows_dropped > 0 {
            let _ = writeln!(
                s,
                "dropped {} source and {} target rows with a missing probability",
                source.rows_dropped, target.rows_dropped
            );
        }
        let _ = writeln!(s, "how to read it: {TELLING_APART}");
        let _ = writeln!(s, "caution: {LABEL_SHIFT_CAUTION}");
        print!("{s}");
    }
    Ok(0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_by_name_or_number() {
        let cols = vec!["no".to_string(), "yes".to_string()];
        let labels: Vec<String> = ["yes", "0", " no ", "1.0"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        assert_eq!(
            class_codes(&labels, &[1, 2, 3, 4], &cols, "y").ok(),
            Some(vec![1, 0, 0, 1])
        );
        let e = class_codes(&["maybe".to_string()], &[7], &cols, "y")
            .err()
            .unwrap();
        assert!(e.message.contains("`y`") && e.message.contains("maybe"));
        assert!(e.message.contains("data row 7"));
        assert!(class_codes(&["2".to_string()], &[1], &cols, "y").is_err());
    }
}
