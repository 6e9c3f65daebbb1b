//! [`WeightedRidge`]: weighted least squares with a ridge penalty, in closed form.

use super::{validate_weights, LinearKind, LinearModel};
use crate::data::MatrixView;
use crate::error::{Error, Result};
use crate::par;
use faer::prelude::*;
use faer::{Mat, Side};

/// Importance-weighted ridge regression. See the module docs for the objective.
#[derive(Debug, Clone, PartialEq)]
pub struct WeightedRidge {
    /// Penalty strength a >= 0 (default 1.0; sklearn's Ridge(alpha = a)).
    pub l2: f64,
}

impl Default for WeightedRidge {
    fn default() -> Self {
        Self { l2: 1.0 }
    }
}

impl WeightedRidge {
    /// Defaults: l2 = 1.
    pub fn new() -> Self {
        Self::default()
    }
    /// Penalty strength (>= 0).
    pub fn l2(mut self, l2: f64) -> Self {
        self.l2 = l2;
        self
    }

    /// Fits on rows `x`, targets `y`, optional non-negative weights.
    pub fn fit(
        &self,
        x: MatrixView,
        y: &[f64],
        sample_weight: Option<&[f64]>,
    ) -> Result<LinearModel> {
        if !(self.l2.is_finite() && self.l2 >= 0.0) {
            return Err(Error::param(
                "l2",
                format!("must be finite and >= 0, got {}", self.l2),
            ));
        }
        x.validate("X", 1)?;
        if y.len() != x.rows() {
            return Err(Error::LengthMismatch {
                argument: "y".into(),
                expected: x.rows(),
                found: y.len(),
            });
        }
        if let Some(i) = y.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite {
                argument: "y".into(),
                row: i,
                column: 0,
                value: y[i],
            });
        }
        let ones;
        let w = match sample_weight {
            Some(w) => {
                validate_weights(w, x.rows(), "sample_weight")?;
                w
            }
            None => {
                ones = vec![1.0; x.rows()];
                &ones
            }
        };
        let d = x.cols();
        let wsum: f64 = w.iter().sum();
        let mut xm = vec![0.0; d];
        let mut ym = 0.0;
        for i in 0..x.rows() {
            for (a, v) in xm.iter_mut().zip(x.row(i)) {
                *a += w[i] * v;
            }
            ym += w[i] * y[i];
        }
        xm.iter_mut().for_each(|v| *v /= wsum);
        ym /= wsum;
        let (gram, xty) = par::reduce_chunks(
            x.rows(),
            (vec![0.0; d * d], vec![0.0; d]),
            |s, e| {
                let m = e - s;
                let mut zc = vec![0.0; m * d];
                let mut xty = vec![0.0; d];
                for (r, i) in (s..e).enumerate() {
                    let sw = w[i].sqrt();
                    let yc = y[i] - ym;
                    for j in 0..d {
                        let c = x.row(i)[j] - xm[j];
                        zc[r * d + j] = sw * c;
                        xty[j] += w[i] * c * yc;
                    }
                }
                let zm = MatRef::from_row_major_slice(&zc, m, d);
                let mut h = Mat::<f64>::zeros(d, d);
                faer::linalg::matmul::matmul(
                    h.as_mut(),
                    faer::Accum::Replace,
                    zm.transpose(),
                    zm,
                    1.0,
                    Par::Seq,
                );
                (
                    (0..d * d).map(|k| h[(k / d, k % d)]).collect::<Vec<f64>>(),
                    xty,
                )
            },
            |acc, part| {
                par::add_into(&mut acc.0, &part.0);
                par::add_into(&mut acc.1, &part.1);
            },
        );
        // Squares of values near 1e155 and beyond overflow: that is the input's scale, not a
        // numerical failure of the solver, so it is reported as such.
        if let Some(k) = gram.iter().chain(&xty).position(|v| !v.is_finite()) {
            let j = if k < d * d { k / d } else { k - d * d };
            return Err(Error::param(
                "X",
                format!(
                    "column {j} (or `y`) is so large in magnitude that weighted sums of squares \
                     overflow; rescale it (e.g. to other units) before fitting"
                ),
            ));
        }
        let mut h = Mat::<f64>::from_fn(d, d, |i, j| gram[i * d + j]);
        for j in 0..d {
            h[(j, j)] += self.l2;
        }
        let llt = h.llt(Side::Lower).map_err(|e| Error::Numerical {
            context: "weighted ridge solve".into(),
            reason: format!("{e:?}; the features are collinear, use l2 > 0"),
        })?;
        let sol = llt.solve(Mat::<f64>::from_fn(d, 1, |i, _| xty[i]));
        let coef: Vec<f64> = (0..d).map(|j| sol[(j, 0)]).collect();
        let intercept = ym - coef.iter().zip(&xm).map(|(a, b)| a * b).sum::<f64>();
        Ok(LinearModel {
            kind: LinearKind::Ridge,
            coef,
            intercept,
            l2: self.l2,
            n_iter: 0,
            encoding: None,
            warnings: Vec::new(),
        })
    }
}
