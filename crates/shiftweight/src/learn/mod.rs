//! Importance-weighted linear models (Shimodaira 2000): weighted empirical risk minimisation.
//!
//! - [`WeightedLogistic`] minimises `sum_i w_i logloss_i + (l2/2) |beta|^2` with the intercept
//!   unpenalised: scikit-learn's `LogisticRegression(C = 1/l2)` with `sample_weight`. Binary labels
//!   {0, 1}. Solved by Newton's method with backtracking on internally standardised columns (the
//!   penalty is transformed so the solution is that of the raw problem). Each iteration is O(n p^2)
//!   accumulated over row chunks in parallel, plus O(p^3), except chord steps near the solution
//!   (the last Hessian reused), which are O(n p); memory O(p^2) beyond the input, plus a copy of
//!   the 50,000-row start subsample on inputs of 400,000 rows or more.
//! - [`WeightedRidge`] minimises `sum_i w_i (y_i - x_i beta - b)^2 + l2 |beta|^2`: scikit-learn's
//!   `Ridge(alpha = l2)` with `sample_weight`. One pass, O(n p^2 + p^3).
//!
//! Both also fit on typed tables ([`WeightedRidge::fit_table`], [`WeightedLogistic::fit_table`]):
//! the encoding of [`crate::table`] (numeric columns standardised with a missing indicator when
//! needed, categorical columns one-hot) is fitted on the training rows alone
//! ([`TableEncoding::fit_rows`]), the model is fitted on the encoded matrix, and the encoding is
//! stored in the model, which then predicts on tables by column name
//! ([`LinearModel::predict_table`]). The coefficients and the penalty then act on the encoded
//! columns ([`LinearModel::feature_names`]).
//!
//! Fitted models are [`LinearModel`] values that serialise to the model file format
//! `shiftweight.linear-model`, so a service can train or load and predict without Python:
//!
//! ```
//! use shiftweight::learn::{LinearModel, WeightedLogistic};
//! use shiftweight::MatrixView;
//! // Six rows, one feature; the importance weights stress the right-hand rows.
//! let x = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0];
//! let y = [0.0, 0.0, 1.0, 0.0, 1.0, 1.0];
//! let w = [0.5, 0.5, 1.0, 1.0, 2.0, 2.0];
//! let model = WeightedLogistic::new().l2(1.0).fit(MatrixView::new(&x, 6, 1)?, &y, Some(&w))?;
//! let text = model.to_json()?; // write it to a file; a service reads it back
//! let loaded = LinearModel::from_json(&text)?;
//! let new_rows = MatrixView::new(&[0.5, 4.5], 2, 1)?;
//! let p = loaded.predict_proba(new_rows)?;
//! assert!(p[1] > p[0]);
//! assert_eq!(loaded.predict(new_rows)?, model.predict(new_rows)?);
//! # Ok::<(), shiftweight::Error>(())
//! ```

pub use crate::data::validate_weights;
mod logistic;
mod ridge;
mod table;
#[cfg(test)]
mod tests;

pub use logistic::WeightedLogistic;
pub(crate) use logistic::{fit_logistic_unchecked, fit_logistic_warm};
pub use ridge::WeightedRidge;
pub use table::TablePredictions;

use crate::data::MatrixView;
use crate::error::{Error, Result};
use crate::model;
use crate::table::TableEncoding;

use serde::{Deserialize, Serialize};

/// Format tag of linear-model files.
pub const LINEAR_MODEL_FORMAT: &str = "shiftweight.linear-model";
/// Version written for a model fitted on a typed table (2: adds the table encoding); a model
/// fitted on a matrix is written at version 1, readable by every release.
pub const LINEAR_MODEL_VERSION: u64 = 2;
/// Versions of linear-model files this library reads.
pub const LINEAR_MODEL_VERSIONS_READ: [u64; 2] = [1, 2];

/// Which loss a linear model was fitted with.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum LinearKind {
    /// Binary logistic regression.
    Logistic,
    /// Least squares with a ridge penalty.
    Ridge,
}

/// A fitted (weighted) linear model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LinearModel {
    /// Loss it was fitted with.
    pub kind: LinearKind,
    /// Coefficients on the raw features.
    pub coef: Vec<f64>,
    /// Intercept.
    pub intercept: f64,
    /// Penalty strength used.
    pub l2: f64,
    /// Newton iterations used (0 for ridge).
    pub n_iter: usize,
    /// The typed-table encoding when the model was fitted on a table (the coefficients are then
    /// those of its encoded columns); absent for models fitted on matrices.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub encoding: Option<TableEncoding>,
    /// Plain-language warnings raised by the encoding when fitting on a table (for instance rare
    /// levels pooled).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub warnings: Vec<String>,
}

impl LinearModel {
    /// Linear predictor x.beta + b for every row.
    pub fn decision_function(&self, x: MatrixView) -> Result<Vec<f64>> {
        x.expect_cols("X", self.coef.len())?;
        x.validate("X", 0)?;
        Ok((0..x.rows())
            .map(|i| {
                x.row(i)
                    .iter()
                    .zip(&self.coef)
                    .map(|(a, b)| a * b)
                    .sum::<f64>()
                    + self.intercept
            })
            .collect())
    }
    /// Ridge: fitted values. Logistic: predicted class (0 or 1).
    pub fn predict(&self, x: MatrixView) -> Result<Vec<f64>> {
        let eta = self.decision_function(x)?;
        Ok(match self.kind {
            LinearKind::Ridge => eta,
            LinearKind::Logistic => eta
                .into_iter()
                .map(|e| if e > 0.0 { 1.0 } else { 0.0 })
                .collect(),
        })
    }
    /// Logistic: probability of class 1 for every row.
    pub fn predict_proba(&self, x: MatrixView) -> Result<Vec<f64>> {
        if self.kind != LinearKind::Logistic {
            return Err(Error::Unsupported(
                "predict_proba is defined for logistic models only".into(),
            ));
        }
        Ok(self
            .decision_function(x)?
            .into_iter()
            .map(sigmoid)
            .collect())
    }
    /// The model file document: version 1 for a model fitted on a matrix, version
    /// [`LINEAR_MODEL_VERSION`] (with the encoding) for one fitted on a table.
    pub fn to_json(&self) -> Result<String> {
        let version = if self.encoding.is_some() {
            LINEAR_MODEL_VERSION
        } else {
            model::MODEL_VERSION
        };
        model::to_json_versioned(LINEAR_MODEL_FORMAT, version, self)
    }
    /// Loads a linear model document of any version in [`LINEAR_MODEL_VERSIONS_READ`], rejecting
    /// other formats and versions, non-finite coefficients and an encoding whose width differs
    /// from the number of coefficients.
    pub fn from_json(text: &str) -> Result<Self> {
        let m: LinearModel =
            model::from_json_versioned(LINEAR_MODEL_FORMAT, &LINEAR_MODEL_VERSIONS_READ, text)?;
        if m.coef.is_empty() || m.coef.iter().any(|v| !v.is_finite()) || !m.intercept.is_finite() {
            return Err(Error::ModelFile(
                "linear model has no or non-finite coefficients".into(),
            ));
        }
        if let Some(enc) = &m.encoding {
            enc.check()?;
            if enc.width() != m.coef.len() {
                return Err(Error::ModelFile(format!(
                    "the table encoding gives {} columns but the linear model has {} coefficients",
                    enc.width(),
                    m.coef.len()
                )));
            }
        }
        Ok(m)
    }
}

/// Logistic function, stable for large |t|.
#[inline]
pub fn sigmoid(t: f64) -> f64 {
    if t >= 0.0 {
        1.0 / (1.0 + (-t).exp())
    } else {
        let e = t.exp();
        e / (1.0 + e)
    }
}

/// log(1 + exp(t)), stable for large |t|.
#[inline]
pub fn log1pexp(t: f64) -> f64 {
    if t > 0.0 {
        t + (-t).exp().ln_1p()
    } else {
        t.exp().ln_1p()
    }
}
