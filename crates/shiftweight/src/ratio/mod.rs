//! Density-ratio estimation: w(x) = p_target(x) / p_source(x).
//!
//! Every estimator is a plain configuration value implementing [`RatioEstimator`]; fitting
//! validates the inputs, standardises them on the pooled rows, chooses any hyperparameter that was
//! not given by the estimator's own published criterion, and returns a [`FittedRatio`]. A
//! `FittedRatio` scores any number of rows in fixed-size chunks in parallel, records what was chosen
//! and the scores that chose it, and serialises to the versioned model file of [`crate::model`].

pub mod auto;
pub mod classifier;
pub mod kliep;
pub mod kmm;
pub mod lsif;

use crate::data::{Matrix, MatrixView, Standardizer};
use crate::error::{Error, Result};
use crate::kernel;
use crate::par::CHUNK_ROWS;
use crate::table::{Table, TableEncoding, UnseenValues};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

pub use auto::{candidate_words, decision_summary, AutoRatio, SelectionScore, UniformRatio};
pub use classifier::{ratio_from_probabilities, ClassifierRatio, FeatureMap, Features};
pub use kliep::{KLRatio, KliepCv};
pub use kmm::KernelMeanMatching;
pub use lsif::LeastSquaresRatio;

/// Fits a density-ratio model from a source sample and a target sample.
pub trait RatioEstimator {
    /// Fits on `source` (rows the model is trained on) and `target` (rows it will be used on).
    fn fit(&self, source: MatrixView, target: MatrixView) -> Result<FittedRatio>;

    /// Fits on typed tables: the [`TableEncoding`] is fitted on the pooled rows of `source` and
    /// `target` (see [`crate::table`]), both are encoded, the estimator is fitted on the encoded
    /// matrices, and the encoding is stored in the fitted model (which then scores tables by
    /// column name with [`FittedRatio::ratio_table`]). The encoded column names become the
    /// model's feature names.
    fn fit_table(&self, source: &Table, target: &Table) -> Result<FittedRatio> {
        let (encoding, s, t, mut warnings) = crate::table::encode_pair(source, target)?;
        let mut model = self.fit(s.view(), t.view())?;
        model.meta.feature_names = Some(encoding.feature_names());
        warnings.append(&mut model.warnings);
        model.warnings = warnings;
        model.encoding = Some(encoding);
        Ok(model)
    }

    /// The same estimator with the hyperparameters an earlier fit chose held fixed (`chosen` is
    /// that fit's [`Selection::chosen`]), so that a refit on more rows skips the search. The
    /// automatic choice ([`AutoRatio`]) uses it to refit its winner on all rows with the
    /// hyperparameters it chose on the scoring subsample. `None` (the default) when the estimator
    /// searches nothing that `chosen` records; the estimator is then refitted as it is.
    fn with_chosen(&self, _chosen: &BTreeMap<String, f64>) -> Option<BoxedEstimator> {
        None
    }
}

/// A ratio estimator that can be sent across threads, as the automatic choice holds them.
pub type BoxedEstimator = Box<dyn RatioEstimator + Send + Sync>;

/// Rows encoded at a time by [`FittedRatio::ratio_table`] and [`crate::learn::LinearModel::predict_table`],
/// so that memory stays flat in the number of rows.
pub(crate) const TABLE_BLOCK_ROWS: usize = 32 * CHUNK_ROWS;

/// The ratio at the rows of a typed table, and the values the model never saw.
#[derive(Debug, Clone, PartialEq)]
pub struct TableScores {
    /// w(x) at every row, in row order.
    pub weights: Vec<f64>,
    /// Values of the table that never occurred in the rows the model was fitted on (see
    /// [`crate::table::TableEncoding`]), per column and level; their rows are scored anyway.
    pub unseen: Vec<UnseenValues>,
}

/// Rows per cache-sized block when scoring (kernel values of one block stay in L2).
const SCORE_BLOCK: usize = 256;

thread_local! {
    /// Per-thread scoring buffers (standardised rows, kernel block), reused across blocks.
    static SCORE_SCRATCH: std::cell::RefCell<(Vec<f64>, Vec<f64>)> =
        const { std::cell::RefCell::new((Vec::new(), Vec::new())) };
}

/// Which published method produced a fitted model.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum EstimatorKind {
    /// uLSIF (alpha = 0) or RuLSIF (alpha > 0).
    LeastSquares,
    /// KLIEP.
    Kliep,
    /// Kernel mean matching (transductive).
    KernelMeanMatching,
    /// Probabilistic classifier with class-prior correction.
    Classifier,
    /// Uniform weights (no correction).
    Uniform,
}

impl EstimatorKind {
    /// Short name used in reports and the CLI.
    pub fn name(&self) -> &'static str {
        match self {
            EstimatorKind::LeastSquares => "least_squares",
            EstimatorKind::Kliep => "kliep",
            EstimatorKind::KernelMeanMatching => "kmm",
            EstimatorKind::Classifier => "classifier",
            EstimatorKind::Uniform => "uniform",
        }
    }
}

/// How a fitted model computes the ratio at new rows (on standardised features).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "form", rename_all = "snake_case")]
pub enum RatioForm {
    /// w(x) = sum_l coef_l exp(-||x - c_l||^2 / (2 sigma^2)).
    KernelExpansion {
        /// Kernel width in standardised units.
        sigma: f64,
        /// Basis centres (standardised), one per row.
        centres: Matrix,
        /// Non-negative coefficients, one per centre.
        coef: Vec<f64>,
    },
    /// w(x) = exp(min(intercept + coef' phi(x) + log_prior_ratio, 700)): a logistic classifier of
    /// target-vs-source rows with the class-prior correction (see [`classifier`]).
    LogLinear {
        /// Feature map phi applied to the standardised row.
        map: classifier::FeatureMap,
        /// One coefficient per mapped feature.
        coef: Vec<f64>,
        /// Intercept of the classifier.
        intercept: f64,
        /// ln(n_source / n_target) of the rows the classifier was fitted on.
        log_prior_ratio: f64,
    },
    /// Weights exist only for the source rows the model was fitted on (KMM).
    SourceOnly,
    /// w(x) = 1 everywhere.
    Uniform,
}

/// One row of a hyperparameter-selection table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScoreRow {
    /// Hyperparameter values of this candidate (and facts such as a standard error).
    #[serde(with = "nonfinite::map")]
    pub params: BTreeMap<String, f64>,
    /// Its score (lower is better; infinite for a candidate that failed).
    #[serde(with = "nonfinite::value")]
    pub score: f64,
}

/// JSON has no infinities or NaN: in score tables they are written as the strings "inf", "-inf"
/// and "nan" and read back as the same values (a failed candidate scores +inf).
mod nonfinite {
    use serde::{Deserialize, Deserializer, Serialize, Serializer};

    #[derive(Serialize, Deserialize)]
    #[serde(untagged)]
    enum Num {
        Finite(f64),
        Text(String),
    }

    fn to_num(v: f64) -> Num {
        if v.is_finite() {
            Num::Finite(v)
        } else if v.is_nan() {
            Num::Text("nan".into())
        } else if v > 0.0 {
            Num::Text("inf".into())
        } else {
            Num::Text("-inf".into())
        }
    }

    fn from_num<E: serde::de::Error>(n: Num) -> Result<f64, E> {
        match n {
            Num::Finite(v) => Ok(v),
            Num::Text(t) => match t.as_str() {
                "inf" => Ok(f64::INFINITY),
                "-inf" => Ok(f64::NEG_INFINITY),
                "nan" => Ok(f64::NAN),
                other => Err(E::custom(format!(
                    "expected a number, \"inf\", \"-inf\" or \"nan\", got {other:?}"
                ))),
            },
        }
    }

    pub mod value {
        use super::*;
        pub fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
            to_num(*v).serialize(s)
        }
        pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
            from_num(Num::deserialize(d)?)
        }
    }

    pub mod map {
        use super::*;
        use std::collections::BTreeMap;
        pub fn serialize<S: Serializer>(
            m: &BTreeMap<String, f64>,
            s: S,
        ) -> Result<S::Ok, S::Error> {
            let out: BTreeMap<&String, Num> = m.iter().map(|(k, v)| (k, to_num(*v))).collect();
            out.serialize(s)
        }
        pub fn deserialize<'de, D: Deserializer<'de>>(
            d: D,
        ) -> Result<BTreeMap<String, f64>, D::Error> {
            BTreeMap::<String, Num>::deserialize(d)?
                .into_iter()
                .map(|(k, v)| from_num(v).map(|v| (k, v)))
                .collect()
        }
    }
}

/// What was chosen from the data, by which criterion, and the scores that chose it.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct Selection {
    /// Name of the selection criterion (lower is better).
    pub criterion: String,
    /// The chosen hyperparameters, including those given by the user.
    pub chosen: BTreeMap<String, f64>,
    /// Every candidate scored, in the order they were tried.
    pub table: Vec<ScoreRow>,
    /// When the table compares named candidate estimators ([`AutoRatio`]): the name of each row's
    /// candidate, in table order (empty otherwise).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub labels: Vec<String>,
    /// When the table compares named candidate estimators: the name of the chosen one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub candidate: Option<String>,
}

/// Facts about the fit, kept for audit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitMeta {
    /// Source rows fitted on.
    pub n_source: usize,
    /// Target rows fitted on.
    pub n_target: usize,
    /// Number of features.
    pub n_features: usize,
    /// Seed of every random choice.
    pub seed: u64,
    /// Version of this library that fitted the model.
    pub library_version: String,
    /// Feature names, when the caller supplied them.
    #[serde(default)]
    pub feature_names: Option<Vec<String>>,
}

/// A fitted density-ratio model. `Send + Sync`: one instance can score from many threads.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FittedRatio {
    /// The method that produced it.
    pub kind: EstimatorKind,
    /// Standardiser fitted on the pooled rows.
    pub standardizer: Standardizer,
    /// How the ratio is computed at new rows.
    pub form: RatioForm,
    /// Weights of the source rows used for fitting, in their order.
    pub source_weights: Vec<f64>,
    /// Hyperparameter selection record.
    pub selection: Selection,
    /// Fit metadata.
    pub meta: FitMeta,
    /// Plain-language warnings raised during the fit (e.g. constant columns).
    #[serde(default)]
    pub warnings: Vec<String>,
    /// The typed-table encoding when the model was fitted on tables ([`RatioEstimator::fit_table`]);
    /// absent for models fitted on matrices (and in every version-1 model file).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub encoding: Option<TableEncoding>,
    /// A cap applied on top of the estimate, chosen with it by the automatic choice
    /// ([`AutoRatio`]): [`FittedRatio::ratio`] and `source_weights` give the capped weights,
    /// [`FittedRatio::raw_ratio`] the estimate before it. None for a plain estimator.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cap: Option<WeightCap>,
}

/// Stabilisation that goes with a fitted ratio: the weight handed over is
/// `mass * min(scale * w, upper)`, w the raw estimate. `scale` makes `min(scale * w, upper)`
/// average exactly 1 over the source rows (the normalisation of [`crate::weights::stabilize`]
/// with an upper bound); `mass` is the mean of the raw source weights, so the cap moves weight
/// between source rows without changing its total. That total is evidence in itself: the true
/// ratio averages P_target(p_source > 0) over the source (Sugiyama, Suzuki & Kanamori 2012,
/// *Density Ratio Estimation in Machine Learning*, ch. 1), so a raw estimate that puts little mass
/// on the source rows (a target the source does not cover) still says so after the cap, and
/// [`crate::diagnostics::diagnose`]'s mean check still sees it.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct WeightCap {
    /// Factor applied to the raw estimate before capping.
    pub scale: f64,
    /// Largest weight on the mean-1 scale of the capped source weights.
    pub upper: f64,
    /// Mean of the raw source weights, multiplied back after the cap (1 in files written before
    /// this field existed).
    #[serde(default = "unit_mass")]
    pub mass: f64,
}

fn unit_mass() -> f64 {
    1.0
}

impl WeightCap {
    /// The capped weight of a raw estimate.
    pub fn apply(&self, w: f64) -> f64 {
        self.mass * (self.scale * w).min(self.upper)
    }
}

/// Format tag of ratio-model files (inside the envelope of [`crate::model`]).
pub const RATIO_MODEL_FORMAT: &str = "shiftweight.ratio-model";
/// Version of the ratio-model files this library writes (2: adds the optional table encoding).
pub const RATIO_MODEL_VERSION: u64 = 2;
/// Versions of ratio-model files this library reads.
pub const RATIO_MODEL_VERSIONS_READ: [u64; 2] = [1, 2];

impl FittedRatio {
    /// The model file document (see [`crate::model`]), at [`RATIO_MODEL_VERSION`].
    pub fn to_json(&self) -> Result<String> {
        crate::model::to_json_versioned(RATIO_MODEL_FORMAT, RATIO_MODEL_VERSION, self)
    }

    /// Loads a model file document of any version in [`RATIO_MODEL_VERSIONS_READ`], rejecting
    /// other formats, versions and inconsistent models.
    pub fn from_json(text: &str) -> Result<Self> {
        let m: FittedRatio = crate::model::from_json_versioned(
            RATIO_MODEL_FORMAT,
            &RATIO_MODEL_VERSIONS_READ,
            text,
        )?;
        m.check()?;
        Ok(m)
    }

    /// The ratio at every row of a typed table, with the counts of values the model never saw.
    ///
    /// A model fitted on tables finds its columns by name (any order; extra columns ignored; a
    /// missing column is an error naming it) and encodes them with its stored encoding; rows
    /// with a level or a missing value never seen when fitting are scored as the encoding
    /// documents and counted in [`TableScores::unseen`]. A model fitted on a matrix takes the
    /// columns named by its feature names (or, without names, the table's columns in order),
    /// which must be numeric without missing values. Rows are encoded in blocks, so memory beyond
    /// the output is flat in the number of rows.
    pub fn ratio_table(&self, table: &Table) -> Result<TableScores> {
        let n = table.rows();
        let mut weights = vec![0.0; n];
        let mut unseen: Vec<UnseenValues> = Vec::new();
        match &self.encoding {
            Some(enc) => {
                unseen = enc.encode_in_blocks(table, "X", TABLE_BLOCK_ROWS, |start, end, x| {
                    self.ratio_into(x, &mut weights[start..end])
                })?;
            }
            None => {
                let d = self.n_features();
                let columns: Vec<&crate::table::Column> = match &self.meta.feature_names {
                    Some(names) => names
                        .iter()
                        .map(|nm| {
                            table.column(nm).ok_or_else(|| Error::MissingColumn {
                                argument: "X".into(),
                                column: nm.clone(),
                            })
                        })
                        .collect::<Result<_>>()?,
                    None => {
                        if table.n_columns() != d {
                            return Err(Error::FeatureCountMismatch {
                                argument: "X".into(),
                                expected: d,
                                found: table.n_columns(),
                            });
                        }
                        table.columns().iter().collect()
                    }
                };
                let mut x = vec![0.0; n * d];
                for (j, c) in columns.iter().enumerate() {
                    match c.data() {
                        crate::table::ColumnData::Numeric(v) => {
                            for (i, val) in v.iter().enumerate() {
                                x[i * d + j] = *val;
                            }
                        }
                        crate::table::ColumnData::Categorical { .. } => {
                            return Err(Error::BadColumn {
                                column: c.name().to_string(),
                                reason:
                                    "is categorical, but this model was fitted on a numeric matrix \
                                         without a table encoding; refit it on a table"
                                        .into(),
                            })
                        }
                    }
                }
                self.ratio_into(MatrixView::named(&x, n, d, "X")?, &mut weights)?;
            }
        }
        Ok(TableScores { weights, unseen })
    }

    /// Number of features the model expects.
    pub fn n_features(&self) -> usize {
        self.standardizer.n_features()
    }

    /// The ratio w(x) at every row of `x`, in row order.
    ///
    /// Rows are processed in blocks of [`CHUNK_ROWS`] in parallel; memory beyond the output is
    /// O(threads * CHUNK_ROWS * n_basis), independent of the number of rows. The block size does
    /// not depend on the thread count, so the output is bitwise identical for any thread count.
    pub fn ratio(&self, x: MatrixView) -> Result<Vec<f64>> {
        let mut out = vec![0.0; x.rows()];
        self.ratio_into(x, &mut out)?;
        Ok(out)
    }

    /// As [`FittedRatio::ratio`], writing into a caller-provided buffer of length `x.rows()`.
    pub fn ratio_into(&self, x: MatrixView, out: &mut [f64]) -> Result<()> {
        self.raw_ratio_into(x, out)?;
        if let Some(cap) = &self.cap {
            out.par_iter_mut().for_each(|w| *w = cap.apply(*w));
        }
        Ok(())
    }

    /// The estimate before the cap of [`FittedRatio::cap`] (the same as [`FittedRatio::ratio`]
    /// when there is none), for analysis.
    pub fn raw_ratio(&self, x: MatrixView) -> Result<Vec<f64>> {
        let mut out = vec![0.0; x.rows()];
        self.raw_ratio_into(x, &mut out)?;
        Ok(out)
    }

    fn raw_ratio_into(&self, x: MatrixView, out: &mut [f64]) -> Result<()> {
        x.expect_cols("X", self.n_features())?;
        if out.len() != x.rows() {
            return Err(Error::LengthMismatch {
                argument: "out".into(),
                expected: x.rows(),
                found: out.len(),
            });
        }
        x.validate("X", 0)?;
        match &self.form {
            RatioForm::Uniform => {
                out.fill(1.0);
                Ok(())
            }
            RatioForm::SourceOnly => Err(Error::Unsupported(format!(
                "{} weights exist only for the {} source rows it was fitted on (it is transductive): \
                 use the fitted source weights (`source_weights_` in Python, `source_weights` in Rust), \
                 or an estimator that scores new rows (KLIEP, uLSIF)",
                self.kind.name(),
                self.meta.n_source
            ))),
            RatioForm::KernelExpansion {
                sigma,
                centres,
                coef,
            } => {
                let c_sq = kernel::row_sq_norms(centres.view());
                let (b, d) = (centres.rows(), x.cols());
                out.par_chunks_mut(CHUNK_ROWS)
                    .enumerate()
                    .for_each(|(k, out_chunk)| {
                        let start = k * CHUNK_ROWS;
                        SCORE_SCRATCH.with(|cell| {
                            // Sub-blocks small enough that the kernel values stay in cache between
                            // the distance product, the exponentials and the weighted sum; the
                            // buffers are per thread and reused, so no block allocates.
                            let mut scratch = cell.borrow_mut();
                            let (z, kb) = &mut *scratch;
                            z.resize(SCORE_BLOCK * d, 0.0);
                            kb.resize(SCORE_BLOCK * b, 0.0);
                            for (s, out_block) in out_chunk.chunks_mut(SCORE_BLOCK).enumerate() {
                                let m = out_block.len();
                                let first = start + s * SCORE_BLOCK;
                                for i in 0..m {
                                    self.standardizer.transform_row(
                                        x.row(first + i),
                                        &mut z[i * d..(i + 1) * d],
                                    );
                                }
                                let zv = MatrixView::new(&z[..m * d], m, d).expect("block shape");
                                let kb = &mut kb[..m * b];
                                kernel::kernel_block_into(zv, centres.view(), &c_sq, *sigma, kb);
                                // The weighted sums of every row as one matrix-vector product.
                                faer::linalg::matmul::matmul(
                                    faer::MatMut::from_column_major_slice_mut(out_block, m, 1),
                                    faer::Accum::Replace,
                                    faer::MatRef::from_row_major_slice(kb, m, b),
                                    faer::MatRef::from_column_major_slice(coef, b, 1),
                                    1.0,
                                    faer::Par::Seq,
                                );
                                out_block.iter_mut().for_each(|o| *o = o.max(0.0));
                            }
                        });
                    });
                Ok(())
            }
            RatioForm::LogLinear { map, coef, intercept, log_prior_ratio } => {
                let p = coef.len();
                out.par_chunks_mut(CHUNK_ROWS)
                    .enumerate()
                    .for_each(|(k, out_chunk)| {
                        let start = k * CHUNK_ROWS;
                        let mut z = vec![0.0; x.cols()];
                        let mut phi = vec![0.0; p];
                        for (i, o) in out_chunk.iter_mut().enumerate() {
                            self.standardizer.transform_row(x.row(start + i), &mut z);
                            map.map_into(&z, &mut phi);
                            let eta = intercept + phi.iter().zip(coef).map(|(a, c)| a * c).sum::<f64>();
                            *o = classifier::weight_from_logit(eta, *log_prior_ratio);
                        }
                    });
                Ok(())
            }
        }
    }

    /// The ratio at a single row, without allocation beyond a small buffer; for services that
    /// score one request at a time. O(b d).
    pub fn ratio_one(&self, row: &[f64]) -> Result<f64> {
        let x = MatrixView::named(row, 1, row.len(), "row")?;
        x.expect_cols("row", self.n_features())?;
        x.validate("row", 1)?;
        match &self.form {
            RatioForm::KernelExpansion {
                sigma,
                centres,
                coef,
            } => {
                let mut z = [0.0f64; 64];
                let mut zv;
                let zs: &mut [f64] = if row.len() <= 64 {
                    &mut z[..row.len()]
                } else {
                    zv = vec![0.0; row.len()];
                    &mut zv
                };
                self.standardizer.transform_row(row, zs);
                let g = -0.5 / (sigma * sigma);
                let d = zs.len();
                let mut acc = 0.0;
                for (c, centre) in coef.iter().zip(centres.as_slice().chunks_exact(d)) {
                    if *c == 0.0 {
                        continue;
                    }
                    let sq: f64 = zs.iter().zip(centre).map(|(a, b)| (a - b) * (a - b)).sum();
                    acc += c * kernel::exp_nonpositive(sq * g);
                }
                let w = acc.max(0.0);
                Ok(self.cap.map_or(w, |c| c.apply(w)))
            }
            _ => Ok(self.ratio(x)?[0]),
        }
    }

    /// Checks internal consistency after loading from a file.
    pub(crate) fn check(&self) -> Result<()> {
        self.standardizer.check()?;
        let form_fits_kind = matches!(
            (self.kind, &self.form),
            (
                EstimatorKind::LeastSquares | EstimatorKind::Kliep,
                RatioForm::KernelExpansion { .. }
            ) | (EstimatorKind::KernelMeanMatching, RatioForm::SourceOnly)
                | (EstimatorKind::Classifier, RatioForm::LogLinear { .. })
                | (EstimatorKind::Uniform, RatioForm::Uniform)
        );
        if !form_fits_kind {
            return Err(Error::ModelFile(format!(
                "estimator kind {} does not match the model's form",
                self.kind.name()
            )));
        }
        let d = self.n_features();
        if d == 0 {
            return Err(Error::ModelFile("model has no features".into()));
        }
        if self.meta.n_features != d {
            return Err(Error::ModelFile(format!(
                "metadata says {} features but the standardizer has {d}",
                self.meta.n_features
            )));
        }
        if let Some(names) = &self.meta.feature_names {
            if names.len() != d {
                return Err(Error::ModelFile(format!(
                    "{} feature names for {d} features",
                    names.len()
                )));
            }
        }
        if self.source_weights.len() != self.meta.n_source {
            return Err(Error::ModelFile(format!(
                "{} source weights for {} source rows",
                self.source_weights.len(),
                self.meta.n_source
            )));
        }
        if self
            .source_weights
            .iter()
            .any(|w| !w.is_finite() || *w < 0.0)
        {
            return Err(Error::ModelFile(
                "source weights must be finite and non-negative".into(),
            ));
        }
        match &self.form {
            RatioForm::KernelExpansion {
                sigma,
                centres,
                coef,
            } => {
                centres.check_shape("centres")?;
                if centres.cols() != d {
                    return Err(Error::ModelFile(format!(
                        "centres have {} columns but the model has {d} features",
                        centres.cols()
                    )));
                }
                if coef.len() != centres.rows() {
                    return Err(Error::ModelFile(format!(
                        "{} coefficients for {} centres",
                        coef.len(),
                        centres.rows()
                    )));
                }
                if !(sigma.is_finite() && *sigma > 0.0) {
                    return Err(Error::ModelFile(format!("kernel width {sigma} is not > 0")));
                }
                if coef
                    .iter()
                    .chain(centres.as_slice())
                    .any(|v| !v.is_finite())
                {
                    return Err(Error::ModelFile("non-finite centre or coefficient".into()));
                }
            }
            RatioForm::LogLinear {
                map,
                coef,
                intercept,
                log_prior_ratio,
            } => {
                map.check(d)?;
                if coef.len() != map.dim(d) {
                    return Err(Error::ModelFile(format!(
                        "{} coefficients for {} mapped features ({} map of {d} features)",
                        coef.len(),
                        map.dim(d),
                        map.name()
                    )));
                }
                if coef
                    .iter()
                    .chain([intercept, log_prior_ratio])
                    .any(|v| !v.is_finite())
                {
                    return Err(Error::ModelFile(
                        "non-finite classifier coefficient, intercept or prior".into(),
                    ));
                }
            }
            RatioForm::SourceOnly | RatioForm::Uniform => {}
        }
        if let Some(enc) = &self.encoding {
            enc.check()?;
            if enc.width() != d {
                return Err(Error::ModelFile(format!(
                    "the table encoding gives {} columns but the model has {d} features",
                    enc.width()
                )));
            }
            if let Some(names) = &self.meta.feature_names {
                if *names != enc.feature_names() {
                    return Err(Error::ModelFile(
                        "feature names differ from the table encoding's column names".into(),
                    ));
                }
            }
        }
        if let Some(c) = &self.cap {
            if !(c.scale.is_finite()
                && c.scale > 0.0
                && c.upper.is_finite()
                && c.upper >= 1.0
                && c.mass.is_finite()
                && c.mass > 0.0)
            {
                return Err(Error::ModelFile(format!(
                    "weight cap needs a finite scale > 0, an upper bound >= 1 and a finite mass > 0, \
                     got scale {}, upper {} and mass {}",
                    c.scale, c.upper, c.mass
                )));
            }
        }
        if let (Some(c), false) = (&self.selection.candidate, self.selection.labels.is_empty()) {
            if !self.selection.labels.contains(c) {
                return Err(Error::ModelFile(format!(
                    "chosen candidate {c:?} is not in the score table"
                )));
            }
        }
        Ok(())
    }
}

/// Fits the standardiser on the pooled rows and returns it with the standardised copies and
/// plain-language warnings about constant columns.
pub(crate) fn standardise_pair(
    source: MatrixView,
    target: MatrixView,
) -> (Standardizer, Matrix, Matrix, Vec<String>) {
    let (st, warnings) = fit_standardizer(source, target);
    let zs = st.transform(&source);
    let zt = st.transform(&target);
    (st, zs, zt, warnings)
}

/// The pooled standardiser of a source and a target, with a warning per constant column.
pub(crate) fn fit_standardizer(
    source: MatrixView,
    target: MatrixView,
) -> (Standardizer, Vec<String>) {
    let st = Standardizer::fit(&[source, target]);
    let warnings = st
        .constant_columns
        .iter()
        .map(|j| format!("column {j} is constant in source and target; it carries no information about the shift"))
        .collect();
    (st, warnings)
}

/// Metadata for a fit.
pub(crate) fn fit_meta(source: &MatrixView, target: &MatrixView, seed: u64) -> FitMeta {
    FitMeta {
        n_source: source.rows(),
        n_target: target.rows(),
        n_features: source.cols(),
        seed,
        library_version: env!("CARGO_PKG_VERSION").to_string(),
        feature_names: None,
    }
}

/// A parameter map from pairs.
pub(crate) fn params<const N: usize>(pairs: [(&str, f64); N]) -> BTreeMap<String, f64> {
    pairs.iter().map(|(k, v)| (k.to_string(), *v)).collect()
}

/// Rejects an empty candidate grid or one with a value that is not finite and > 0 (>= 0 when
/// `allow_zero`), naming the option.
pub(crate) fn check_grid(name: &str, values: &[f64], allow_zero: bool) -> Result<()> {
    let ok = |v: &f64| v.is_finite() && (*v > 0.0 || (allow_zero && *v == 0.0));
    if values.is_empty() || !values.iter().all(ok) {
        let bound = if allow_zero { ">= 0" } else { "> 0" };
        return Err(Error::param(
            name,
            format!("must be a non-empty list of finite values {bound}"),
        ));
    }
    Ok(())
}

/// The default configuration of every estimator, keyed by the kind name the bindings use
/// (`least_squares`, `kliep`, `kmm`, `classifier`, `auto`), each a JSON object of its parameters
/// (unset options are `null`), plus `rulsif_alpha` ([`LeastSquaresRatio::RULSIF_ALPHA`]).
/// Serialised from each estimator's `Default`, so it cannot drift from it: the Python
/// constructors and the command line are tested against it.
pub fn estimator_defaults() -> serde_json::Value {
    let auto = AutoRatio::default();
    let value = |v: std::result::Result<serde_json::Value, serde_json::Error>| {
        v.expect("estimator configurations hold only numbers, lists and names")
    };
    serde_json::json!({
        "least_squares": value(serde_json::to_value(LeastSquaresRatio::default())),
        "kliep": value(serde_json::to_value(KLRatio::default())),
        "kmm": value(serde_json::to_value(KernelMeanMatching::default())),
        "classifier": value(serde_json::to_value(ClassifierRatio::default())),
        "auto": {
            "folds": auto.folds,
            "seed": auto.seed,
            "se_margin": auto.se_margin,
            "score": auto.score.name(),
            "prefer_stable": auto.prefer_stable,
            "tail_k": auto.tail_k,
            "max_rows": auto.max_rows,
        },
        "rulsif_alpha": LeastSquaresRatio::RULSIF_ALPHA,
    })
}
