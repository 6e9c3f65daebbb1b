//! Validated row-major matrices and the standardiser.
//!
//! Every estimator standardises features with a [`Standardizer`] fitted on the pooled source and
//! target rows, so kernel widths are in standard-deviation units and results do not depend on the
//! units of measurement. The standardiser is stored in the fitted model.

use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};

/// A borrowed, row-major matrix of `f64`: `rows` rows of `cols` values each.
#[derive(Debug, Clone, Copy)]
pub struct MatrixView<'a> {
    data: &'a [f64],
    rows: usize,
    cols: usize,
}

impl<'a> MatrixView<'a> {
    /// Wraps a row-major buffer. Fails when `data.len() != rows * cols`.
    pub fn new(data: &'a [f64], rows: usize, cols: usize) -> Result<Self> {
        Self::named(data, rows, cols, "matrix")
    }

    /// As [`MatrixView::new`], naming the argument in the error.
    pub fn named(data: &'a [f64], rows: usize, cols: usize, argument: &str) -> Result<Self> {
        if rows.checked_mul(cols) != Some(data.len()) {
            return Err(Error::ShapeMismatch {
                argument: argument.to_string(),
                len: data.len(),
                rows,
                cols,
            });
        }
        Ok(Self { data, rows, cols })
    }

    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.rows
    }
    /// Number of columns (features).
    pub fn cols(&self) -> usize {
        self.cols
    }
    /// The underlying row-major buffer.
    pub fn as_slice(&self) -> &'a [f64] {
        self.data
    }
    /// Row `i` as a slice.
    pub fn row(&self, i: usize) -> &'a [f64] {
        &self.data[i * self.cols..(i + 1) * self.cols]
    }
    /// Rows `start..end` as a view.
    pub fn slice_rows(&self, start: usize, end: usize) -> MatrixView<'a> {
        MatrixView {
            data: &self.data[start * self.cols..end * self.cols],
            rows: end - start,
            cols: self.cols,
        }
    }
    /// Copies the rows with the given indices into a new matrix.
    pub fn select_rows(&self, idx: &[usize]) -> Matrix {
        let mut data = Vec::with_capacity(idx.len() * self.cols);
        for &i in idx {
            data.extend_from_slice(self.row(i));
        }
        Matrix {
            data,
            rows: idx.len(),
            cols: self.cols,
        }
    }
    /// Copies into an owned matrix.
    pub fn to_owned(&self) -> Matrix {
        Matrix {
            data: self.data.to_vec(),
            rows: self.rows,
            cols: self.cols,
        }
    }

    /// Checks the matrix for use as `argument`: at least `min_rows` rows, at least one column,
    /// every value finite. Errors name the argument and the first offending row and column.
    pub fn validate(&self, argument: &str, min_rows: usize) -> Result<()> {
        self.validate_shape(argument, min_rows)?;
        if let Some(pos) = self.data.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite {
                argument: argument.to_string(),
                row: pos / self.cols,
                column: pos % self.cols,
                value: self.data[pos],
            });
        }
        Ok(())
    }

    /// The shape half of [`MatrixView::validate`] (at least `min_rows` rows, at least one column)
    /// without the pass over the values, for callers that check the values later themselves.
    pub fn validate_shape(&self, argument: &str, min_rows: usize) -> Result<()> {
        if self.cols == 0 {
            return Err(Error::NoFeatures {
                argument: argument.to_string(),
            });
        }
        if self.rows < min_rows {
            return Err(Error::TooFewRows {
                argument: argument.to_string(),
                found: self.rows,
                required: min_rows,
            });
        }
        Ok(())
    }

    /// Checks that this matrix has `expected` columns.
    pub fn expect_cols(&self, argument: &str, expected: usize) -> Result<()> {
        if self.cols != expected {
            return Err(Error::FeatureCountMismatch {
                argument: argument.to_string(),
                expected,
                found: self.cols,
            });
        }
        Ok(())
    }
}

/// An owned row-major matrix of `f64`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Matrix {
    data: Vec<f64>,
    rows: usize,
    cols: usize,
}

impl Matrix {
    /// Builds from a row-major buffer. Fails when `data.len() != rows * cols`.
    pub fn new(data: Vec<f64>, rows: usize, cols: usize) -> Result<Self> {
        MatrixView::new(&data, rows, cols)?;
        Ok(Self { data, rows, cols })
    }
    /// Builds from rows of equal length.
    pub fn from_rows(rows: &[Vec<f64>]) -> Result<Self> {
        let cols = rows.first().map_or(0, |r| r.len());
        let mut data = Vec::with_capacity(rows.len() * cols);
        for (i, r) in rows.iter().enumerate() {
            if r.len() != cols {
                return Err(Error::LengthMismatch {
                    argument: format!("row {i}"),
                    expected: cols,
                    found: r.len(),
                });
            }
            data.extend_from_slice(r);
        }
        Ok(Self {
            data,
            rows: rows.len(),
            cols,
        })
    }
    /// A borrowed view.
    pub fn view(&self) -> MatrixView<'_> {
        MatrixView {
            data: &self.data,
            rows: self.rows,
            cols: self.cols,
        }
    }
    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.rows
    }
    /// Number of columns.
    pub fn cols(&self) -> usize {
        self.cols
    }
    /// Row `i`.
    pub fn row(&self, i: usize) -> &[f64] {
        &self.data[i * self.cols..(i + 1) * self.cols]
    }
    /// The row-major buffer.
    pub fn as_slice(&self) -> &[f64] {
        &self.data
    }
    /// Consumes into the row-major buffer.
    pub fn into_vec(self) -> Vec<f64> {
        self.data
    }
    /// Checks the declared shape against the buffer (used after deserialisation, so a mismatch
    /// is a model-file error: the document declares a shape its data does not have).
    pub(crate) fn check_shape(&self, argument: &str) -> Result<()> {
        MatrixView::named(&self.data, self.rows, self.cols, argument)
            .map(|_| ())
            .map_err(|e| Error::ModelFile(e.to_string()))
    }
}

/// Validates a source/target pair: both finite, same width, enough rows.
pub fn validate_pair(source: &MatrixView, target: &MatrixView, min_rows: usize) -> Result<()> {
    source.validate("source", min_rows)?;
    target.validate("target", min_rows)?;
    target.expect_cols("target", source.cols())?;
    Ok(())
}

/// Checks weights: right length, finite, non-negative, not all zero. Errors name the argument and
/// the first bad entry.
pub fn validate_weights(w: &[f64], n: usize, argument: &str) -> Result<()> {
    if w.len() != n {
        return Err(Error::LengthMismatch {
            argument: argument.into(),
            expected: n,
            found: w.len(),
        });
    }
    if let Some(i) = w.iter().position(|v| !v.is_finite() || *v < 0.0) {
        return Err(Error::InvalidWeights {
            argument: argument.into(),
            reason: format!("entry {i} is {} (weights must be finite and >= 0)", w[i]),
        });
    }
    if w.iter().all(|v| *v == 0.0) {
        return Err(Error::InvalidWeights {
            argument: argument.into(),
            reason: "all weights are zero".into(),
        });
    }
    Ok(())
}

/// Rejects fewer than two cross-validation folds, naming `folds`.
pub(crate) fn check_folds(folds: usize) -> Result<()> {
    if folds < 2 {
        return Err(Error::param(
            "folds",
            format!("must be at least 2, got {folds}"),
        ));
    }
    Ok(())
}

/// Assigns each of `n` rows to one of `k` folds of (nearly) equal size in a seeded random order.
/// Returns the fold index of every row. Errors when k < 2 or k > n.
pub fn kfold_assignment(n: usize, k: usize, seed: u64) -> Result<Vec<usize>> {
    use rand::seq::SliceRandom;
    check_folds(k)?;
    if k > n {
        return Err(Error::param(
            "folds",
            format!("{k} folds need at least {k} rows, got {n}"),
        ));
    }
    let mut order: Vec<usize> = (0..n).collect();
    order.shuffle(&mut crate::random::rng(seed ^ 0x0066_6f6c_6473));
    let mut fold = vec![0; n];
    for (pos, &i) in order.iter().enumerate() {
        fold[i] = pos % k;
    }
    Ok(fold)
}

/// As [`kfold_assignment`], but stratified by class: the rows of each class (`labels`, codes
/// 0..) are shuffled (seeded) and dealt to the folds in turn, continuing from where the previous
/// class stopped, so every fold holds each class's share up to one row and fold sizes differ by at
/// most one. Errors when k < 2 or k > n.
pub fn stratified_kfold_assignment(labels: &[usize], k: usize, seed: u64) -> Result<Vec<usize>> {
    use rand::seq::SliceRandom;
    check_folds(k)?;
    let n = labels.len();
    if k > n {
        return Err(Error::param(
            "folds",
            format!("{k} folds need at least {k} rows, got {n}"),
        ));
    }
    let classes = labels.iter().max().map_or(0, |m| m + 1);
    let mut by_class: Vec<Vec<usize>> = vec![Vec::new(); classes];
    for (i, &y) in labels.iter().enumerate() {
        by_class[y].push(i);
    }
    let mut r = crate::random::rng(seed ^ 0x0066_6f6c_6473);
    let mut fold = vec![0; n];
    let mut next = 0;
    for rows in by_class.iter_mut() {
        rows.shuffle(&mut r);
        for &i in rows.iter() {
            fold[i] = next % k;
            next += 1;
        }
    }
    Ok(fold)
}

/// Per-feature centring and scaling, fitted on the pooled source and target rows.
///
/// A column that is constant in the pooled data carries no information about the shift; it keeps
/// scale 1 (so it contributes nothing to distances) and is listed in `constant_columns`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Standardizer {
    /// Pooled mean of each column.
    pub mean: Vec<f64>,
    /// Pooled standard deviation of each column (1 for constant columns).
    pub scale: Vec<f64>,
    /// Indices of columns that were constant in the pooled data.
    pub constant_columns: Vec<usize>,
}

impl Standardizer {
    /// Fits on the union of the given matrices (all must have the same width).
    /// Each fixed row chunk (in parallel, `crate::par::reduce_chunks`, so the result is the same
    /// for any thread count) gets its mean and sum of squared deviations by two passes over the
    /// chunk while it is in cache; the chunks are merged with the pairwise update of Chan, Golub
    /// and LeVeque (1979). Two passes over the data in all (the first finds each column's largest
    /// magnitude). O(n d).
    ///
    /// Columns of extreme magnitude (largest |value| above 2^500 or below 2^-500, e.g. 1e300 or
    /// 1e-300) are first divided by a power of two, which is exact, so that sums and squares
    /// neither overflow nor underflow; ordinary columns are computed without any rescaling.
    pub fn fit(parts: &[MatrixView]) -> Self {
        let d = parts.first().map_or(0, |p| p.cols());
        let n: usize = parts.iter().map(|p| p.rows()).sum();
        let mut max_abs = vec![0.0f64; d];
        for p in parts {
            max_abs = crate::par::reduce_chunks(
                p.rows(),
                max_abs,
                |s, e| {
                    let mut m = vec![0.0f64; d];
                    for i in s..e {
                        for (a, v) in m.iter_mut().zip(p.row(i)) {
                            *a = a.max(v.abs());
                        }
                    }
                    m
                },
                |acc, m| {
                    for (a, v) in acc.iter_mut().zip(&m) {
                        *a = a.max(*v);
                    }
                },
            );
        }
        // Power-of-two divisor per column (1 for ordinary magnitudes); dividing by it and
        // multiplying by its reciprocal (also a power of two) give the same, exact, result.
        let unit: Vec<f64> = max_abs
            .iter()
            .map(|&a| {
                if a.is_finite() && a > 0.0 && !(2f64.powi(-500)..=2f64.powi(500)).contains(&a) {
                    2f64.powi(a.log2().floor() as i32)
                } else {
                    1.0
                }
            })
            .collect();
        let inv_unit: Vec<f64> = unit.iter().map(|u| 1.0 / u).collect();
        // (rows, mean, sum of squared deviations) of the scaled values, merged chunk by chunk.
        let mut stats = (0usize, vec![0.0; d], vec![0.0; d]);
        for p in parts {
            stats = crate::par::reduce_chunks(
                p.rows(),
                stats,
                |s, e| {
                    let mut mean = vec![0.0; d];
                    for i in s..e {
                        for ((m, v), u) in mean.iter_mut().zip(p.row(i)).zip(&inv_unit) {
                            *m += v * u;
                        }
                    }
                    let k = (e - s) as f64;
                    mean.iter_mut().for_each(|m| *m /= k);
                    let mut m2 = vec![0.0; d];
                    for i in s..e {
                        for (((q, v), m), u) in
                            m2.iter_mut().zip(p.row(i)).zip(&mean).zip(&inv_unit)
                        {
                            let c = v * u - m;
                            *q += c * c;
                        }
                    }
                    (e - s, mean, m2)
                },
                |acc, (nb, mb, qb)| {
                    let na = acc.0;
                    let tot = (na + nb) as f64;
                    let (fa, fb) = (na as f64, nb as f64);
                    for j in 0..d {
                        let delta = mb[j] - acc.1[j];
                        acc.1[j] += delta * (fb / tot);
                        acc.2[j] += qb[j] + delta * delta * (fa * fb / tot);
                    }
                    acc.0 = na + nb;
                },
            );
        }
        let (mean, var) = (stats.1, stats.2);
        let mut constant_columns = Vec::new();
        let scale = var
            .iter()
            .zip(&mean)
            .zip(&unit)
            .enumerate()
            .map(|(j, ((s, m), u))| {
                let sd = (s / (n.max(2) - 1) as f64).sqrt();
                // A column is constant when its spread is negligible relative to its magnitude.
                if !sd.is_finite() || sd <= 1e-12 * m.abs().max(1e-300) || !(sd * u).is_finite() {
                    constant_columns.push(j);
                    1.0
                } else {
                    sd * u
                }
            })
            .collect();
        let mean = mean.iter().zip(&unit).map(|(m, u)| m * u).collect();
        Self {
            mean,
            scale,
            constant_columns,
        }
    }

    /// Number of features.
    pub fn n_features(&self) -> usize {
        self.mean.len()
    }

    /// Standardises one row into `out`.
    #[inline]
    pub fn transform_row(&self, row: &[f64], out: &mut [f64]) {
        for (((o, v), m), s) in out.iter_mut().zip(row).zip(&self.mean).zip(&self.scale) {
            *o = (v - m) / s;
        }
    }

    /// Standardises a whole matrix (row chunks in parallel).
    pub fn transform(&self, x: &MatrixView) -> Matrix {
        let d = x.cols();
        let mut data = vec![0.0; x.rows() * d];
        self.transform_into(x, &mut data);
        Matrix {
            data,
            rows: x.rows(),
            cols: d,
        }
    }

    /// Standardises a whole matrix into `out` (row-major, `x.rows() * x.cols()` values; row
    /// chunks in parallel), for callers that pool several matrices in one buffer.
    ///
    /// # Panics
    /// If `out` has the wrong length.
    pub fn transform_into(&self, x: &MatrixView, out: &mut [f64]) {
        use rayon::prelude::*;
        let d = x.cols();
        assert_eq!(out.len(), x.rows() * d, "transform_into: output length");
        if d == 0 {
            return;
        }
        let rows = crate::par::CHUNK_ROWS;
        out.par_chunks_mut(rows * d)
            .enumerate()
            .for_each(|(k, chunk)| {
                for (r, o) in chunk.chunks_exact_mut(d).enumerate() {
                    self.transform_row(x.row(k * rows + r), o);
                }
            });
    }

    pub(crate) fn check(&self) -> Result<()> {
        if self.mean.len() != self.scale.len() {
            return Err(Error::ModelFile(
                "standardizer mean and scale lengths differ".into(),
            ));
        }
        if self.mean.iter().chain(&self.scale).any(|v| !v.is_finite())
            || self.scale.iter().any(|s| *s <= 0.0)
        {
            return Err(Error::ModelFile(
                "standardizer holds non-finite or non-positive values".into(),
            ));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn validate_names_first_bad_cell() {
        let data = [1.0, 2.0, 3.0, f64::NAN, 5.0, 6.0];
        let v = MatrixView::new(&data, 3, 2).unwrap();
        match v.validate("source", 2) {
            Err(Error::NonFinite { row, column, .. }) => assert_eq!((row, column), (1, 1)),
            other => panic!("unexpected {other:?}"),
        }
    }

    #[test]
    fn kfold_is_balanced_and_seeded() {
        let f = kfold_assignment(10, 3, 1).unwrap();
        let counts: Vec<usize> = (0..3)
            .map(|k| f.iter().filter(|v| **v == k).count())
            .collect();
        assert_eq!(counts, vec![4, 3, 3]);
        assert_eq!(f, kfold_assignment(10, 3, 1).unwrap());
        assert!(kfold_assignment(3, 4, 0).is_err());
        assert!(kfold_assignment(3, 1, 0).is_err());
    }

    #[test]
    fn shape_mismatch_is_error() {
        assert!(MatrixView::new(&[1.0, 2.0, 3.0], 2, 2).is_err());
    }

    #[test]
    fn standardizer_handles_extreme_magnitudes() {
        // Scaling a column by a power of two scales its mean and sd by the same factor exactly
        // (IEEE 754 multiplication by 2^k is exact away from overflow and subnormals).
        let base = [1.0, 2.0, 3.0, 4.0];
        for k in [-1000, -600, 600, 1000] {
            let f = 2f64.powi(k);
            let x: Vec<f64> = base.iter().map(|v| v * f).collect();
            let s = Standardizer::fit(&[MatrixView::new(&x, 4, 1).unwrap()]);
            assert!(s.constant_columns.is_empty(), "2^{k}");
            assert_eq!(s.mean[0], 2.5 * f, "2^{k}");
            assert!(
                (s.scale[0] / f - (5.0f64 / 3.0).sqrt()).abs() < 1e-15,
                "2^{k}"
            );
        }
    }

    #[test]
    fn standardizer_pooled_moments() {
        // Hand-worked: pooled column 0 = {1,2,3,4}: mean 2.5, sample sd sqrt(5/3).
        let a = [1.0, 7.0, 2.0, 7.0];
        let b = [3.0, 7.0, 4.0, 7.0];
        let s = Standardizer::fit(&[
            MatrixView::new(&a, 2, 2).unwrap(),
            MatrixView::new(&b, 2, 2).unwrap(),
        ]);
        assert!((s.mean[0] - 2.5).abs() < 1e-15);
        assert!((s.scale[0] - (5.0f64 / 3.0).sqrt()).abs() < 1e-15);
        assert_eq!(s.constant_columns, vec![1]);
        assert_eq!(s.scale[1], 1.0);
    }
}
