//! The weighted learners on typed tables: the encoding of [`crate::table`] fitted on the training
//! rows alone ([`TableEncoding::fit_rows`]), stored in the fitted [`LinearModel`], and applied by
//! column name when predicting.
//!
//! Fitting costs one pass over each column for the encoding (O(n) per column) and the encoded
//! matrix (n x w for w encoded columns) on top of the solver's own cost. Predicting encodes the
//! rows in blocks, so memory beyond the output is flat in the number of rows.

use super::{sigmoid, LinearKind, LinearModel, WeightedLogistic, WeightedRidge};
use crate::error::{Error, Result};
use crate::ratio::TABLE_BLOCK_ROWS;
use crate::table::{ColumnKind, Table, TableEncoding, UnseenValues};

/// Values computed at the rows of a typed table, with the values the model never saw.
#[derive(Debug, Clone, PartialEq)]
pub struct TablePredictions {
    /// One value per row, in row order.
    pub values: Vec<f64>,
    /// Values of the table that never occurred in the training rows, per column and level
    /// (encoded as [`crate::table`] documents: 0 in every column of that level's block, or the
    /// fill value for a missing number); empty when there are none.
    pub unseen: Vec<UnseenValues>,
}

/// Fits the encoding on `x`, encodes it and fits `fit` on the encoded matrix; the model keeps
/// the encoding and its warnings.
fn fit_encoded(
    x: &Table,
    fit: impl FnOnce(crate::data::MatrixView) -> Result<LinearModel>,
) -> Result<LinearModel> {
    let (encoding, warnings) = TableEncoding::fit_rows(x)?;
    let z = encoding.encode(x, "X")?.matrix;
    let mut model = fit(z.view())?;
    model.encoding = Some(encoding);
    model.warnings = warnings;
    Ok(model)
}

impl WeightedRidge {
    /// Fits on the typed table `x` (see the module documentation of [`crate::learn`]): the
    /// encoding is fitted on the rows of `x`, the ridge problem is solved on the encoded columns,
    /// and the model keeps the encoding to predict on tables by column name.
    pub fn fit_table(
        &self,
        x: &Table,
        y: &[f64],
        sample_weight: Option<&[f64]>,
    ) -> Result<LinearModel> {
        fit_encoded(x, |z| self.fit(z, y, sample_weight))
    }
}

impl WeightedLogistic {
    /// Fits on the typed table `x` (labels `y` in {0, 1}), as [`WeightedRidge::fit_table`] does.
    pub fn fit_table(
        &self,
        x: &Table,
        y: &[f64],
        sample_weight: Option<&[f64]>,
    ) -> Result<LinearModel> {
        fit_encoded(x, |z| self.fit(z, y, sample_weight))
    }
}

impl LinearModel {
    /// Names of the columns the coefficients belong to: the encoded columns (`x`,
    /// `x (missing)`, `c=level`, ...) for a model fitted on a table, `None` for one fitted on a
    /// matrix.
    pub fn feature_names(&self) -> Option<Vec<String>> {
        self.encoding.as_ref().map(TableEncoding::feature_names)
    }

    /// The table columns a model fitted on a table reads, with their types (by name, in any
    /// order); `None` for a model fitted on a matrix.
    pub fn schema(&self) -> Option<Vec<(&str, ColumnKind)>> {
        self.encoding.as_ref().map(TableEncoding::schema)
    }

    /// Linear predictor at every row of the typed table `x`, for a model fitted on a table: the
    /// columns are found by name (any order; extra columns ignored; a missing column is an error
    /// naming it) and encoded with the stored encoding; levels or missing values never seen in
    /// the training rows are encoded as [`crate::table`] documents and counted in
    /// [`TablePredictions::unseen`].
    pub fn decision_function_table(&self, x: &Table) -> Result<TablePredictions> {
        let enc = self.encoding.as_ref().ok_or_else(|| {
            Error::Unsupported(
                "this linear model was fitted on a numeric matrix and has no table encoding; \
                 predict on a matrix, or refit it on a table"
                    .into(),
            )
        })?;
        let mut values = vec![0.0; x.rows()];
        let unseen = enc.encode_in_blocks(x, "X", TABLE_BLOCK_ROWS, |start, end, z| {
            let eta = self.decision_function(z)?;
            values[start..end].copy_from_slice(&eta);
            Ok(())
        })?;
        Ok(TablePredictions { values, unseen })
    }

    /// [`LinearModel::predict`] at every row of a typed table (see
    /// [`LinearModel::decision_function_table`]).
    pub fn predict_table(&self, x: &Table) -> Result<TablePredictions> {
        let mut p = self.decision_function_table(x)?;
        if self.kind == LinearKind::Logistic {
            p.values
                .iter_mut()
                .for_each(|e| *e = if *e > 0.0 { 1.0 } else { 0.0 });
        }
        Ok(p)
    }

    /// [`LinearModel::predict_proba`] at every row of a typed table (see
    /// [`LinearModel::decision_function_table`]).
    pub fn predict_proba_table(&self, x: &Table) -> Result<TablePredictions> {
        if self.kind != LinearKind::Logistic {
            return Err(Error::Unsupported(
                "predict_proba is defined for logistic models only".into(),
            ));
        }
        let mut p = self.decision_function_table(x)?;
        p.values.iter_mut().for_each(|e| *e = sigmoid(*e));
        Ok(p)
    }
}
