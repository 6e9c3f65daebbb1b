//! `ndarray` interoperability (cargo feature `ndarray`): pass `ArrayView2<f64>` matrices to the
//! estimators and get `Array1<f64>` weights back, without copying the data.
//!
//! The crate's own matrices are row-major buffers ([`MatrixView`]). An `ndarray` view in standard
//! layout (row-major and contiguous, what `Array2::zeros((n, d))`, `from_shape_vec` and
//! `.view()` of those give) is the same memory, so [`MatrixView::from_ndarray`] only borrows it:
//! O(1), no copy. A view in another layout (a transpose, a column-major array, a strided slice)
//! is refused with an error naming the argument; convert it explicitly with
//! `a.as_standard_layout()`, which copies once. Results come back as owned arrays built from the
//! output vectors without copying them ([`Array1::from_vec`]).
//!
//! ```
//! # #[cfg(feature = "ndarray")] {
//! use ndarray::Array2;
//! use shiftweight::ndarray_views::fit_ndarray;
//! use shiftweight::LeastSquaresRatio;
//!
//! let source = Array2::from_shape_fn((200, 1), |(i, _)| i as f64 / 100.0 - 1.0); // around 0
//! let target = Array2::from_shape_fn((200, 1), |(i, _)| i as f64 / 100.0);       // around 1
//! let model = fit_ndarray(&LeastSquaresRatio::new().n_basis(50), source.view(), target.view())?;
//! let w = model.ratio_ndarray(ndarray::array![[-0.9], [0.9]].view())?; // Array1<f64>
//! assert!(w[1] > w[0]);
//! # }
//! # Ok::<(), shiftweight::Error>(())
//! ```

use crate::data::MatrixView;
use crate::error::{Error, Result};
use crate::ratio::{FittedRatio, RatioEstimator};
use ndarray::{Array1, ArrayView1, ArrayView2};

impl<'a> MatrixView<'a> {
    /// Borrows a standard-layout (row-major, contiguous) `ndarray` view as a [`MatrixView`]
    /// without copying. Any other layout is an error naming `argument`.
    pub fn from_ndarray(a: ArrayView2<'a, f64>, argument: &str) -> Result<Self> {
        let (rows, cols) = a.dim();
        match a.to_slice() {
            Some(data) => MatrixView::named(data, rows, cols, argument),
            None => Err(Error::param(
                argument,
                format!(
                    "the {rows} x {cols} array is not in row-major contiguous (standard) layout; \
                     pass `.as_standard_layout()` of it (that copies it once)"
                ),
            )),
        }
    }

    /// The same memory as an `ndarray` view of shape (rows, cols); O(1), no copy.
    pub fn to_ndarray(&self) -> ArrayView2<'a, f64> {
        ArrayView2::from_shape((self.rows(), self.cols()), self.as_slice())
            .expect("a MatrixView's buffer holds exactly rows x cols values")
    }
}

impl<'a> TryFrom<ArrayView2<'a, f64>> for MatrixView<'a> {
    type Error = Error;

    /// As [`MatrixView::from_ndarray`] with the argument named `matrix`.
    fn try_from(a: ArrayView2<'a, f64>) -> Result<Self> {
        MatrixView::from_ndarray(a, "matrix")
    }
}

/// Fits any estimator on two standard-layout `ndarray` views (`source`, `target`), borrowing
/// them without copying. Errors name `source` or `target`.
pub fn fit_ndarray<E: RatioEstimator + ?Sized>(
    estimator: &E,
    source: ArrayView2<'_, f64>,
    target: ArrayView2<'_, f64>,
) -> Result<FittedRatio> {
    estimator.fit(
        MatrixView::from_ndarray(source, "source")?,
        MatrixView::from_ndarray(target, "target")?,
    )
}

impl FittedRatio {
    /// [`FittedRatio::ratio`] over a standard-layout `ndarray` view `x` (named `X` in errors),
    /// returned as an `Array1` that owns the output vector (no copy).
    pub fn ratio_ndarray(&self, x: ArrayView2<'_, f64>) -> Result<Array1<f64>> {
        Ok(Array1::from_vec(
            self.ratio(MatrixView::from_ndarray(x, "X")?)?,
        ))
    }

    /// The fitted source weights as an `ndarray` view of the model's own vector (no copy).
    pub fn source_weights_ndarray(&self) -> ArrayView1<'_, f64> {
        ArrayView1::from(self.source_weights.as_slice())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{KLRatio, LeastSquaresRatio};
    use ndarray::{Array2, ShapeBuilder};
    use rand_distr::{Distribution, StandardNormal};

    fn gaussian_rows(n: usize, d: usize, shift: f64, seed: u64) -> Array2<f64> {
        let mut r = crate::random::rng(seed);
        Array2::from_shape_fn((n, d), |_| {
            shift + <StandardNormal as Distribution<f64>>::sample(&StandardNormal, &mut r)
        })
    }

    #[test]
    fn views_borrow_the_same_memory_both_ways() {
        let a = gaussian_rows(7, 3, 0.0, 1);
        let m = MatrixView::from_ndarray(a.view(), "source").unwrap();
        assert_eq!((m.rows(), m.cols()), (7, 3));
        assert_eq!(m.as_slice().as_ptr(), a.as_ptr());
        let back = m.to_ndarray();
        assert_eq!(back.as_ptr(), a.as_ptr());
        assert_eq!(back, a.view());
        let via_try: MatrixView = a.view().try_into().unwrap();
        assert_eq!(via_try.as_slice().as_ptr(), a.as_ptr());
    }

    #[test]
    fn other_layouts_are_refused_naming_the_argument() {
        let a = gaussian_rows(6, 2, 0.0, 2);
        let err = MatrixView::from_ndarray(a.t(), "target").unwrap_err();
        assert!(err.to_string().contains("`target`"), "{err}");
        assert!(err.to_string().contains("as_standard_layout"), "{err}");
        let fortran = Array2::<f64>::zeros((4, 3).f());
        assert!(MatrixView::from_ndarray(fortran.view(), "X").is_err());
        // A standard-layout copy of the same values is accepted and holds the transpose.
        let copied = a.t().as_standard_layout().into_owned();
        let m = MatrixView::from_ndarray(copied.view(), "target").unwrap();
        assert_eq!(
            m.row(1),
            &[
                a[[0, 1]],
                a[[1, 1]],
                a[[2, 1]],
                a[[3, 1]],
                a[[4, 1]],
                a[[5, 1]]
            ]
        );
    }

    #[test]
    fn fit_and_score_equal_the_slice_interface_bitwise() {
        let (s, t) = (gaussian_rows(150, 2, 0.0, 3), gaussian_rows(120, 2, 0.7, 4));
        let x = gaussian_rows(40, 2, 0.3, 5);
        let est = LeastSquaresRatio::new().n_basis(30);
        let by_views = fit_ndarray(&est, s.view(), t.view()).unwrap();
        let by_slices = est
            .fit(
                MatrixView::new(s.as_slice().unwrap(), 150, 2).unwrap(),
                MatrixView::new(t.as_slice().unwrap(), 120, 2).unwrap(),
            )
            .unwrap();
        assert_eq!(by_views, by_slices);
        let w = by_views.ratio_ndarray(x.view()).unwrap();
        let want = by_slices
            .ratio(MatrixView::new(x.as_slice().unwrap(), 40, 2).unwrap())
            .unwrap();
        assert_eq!(w.to_vec(), want);
        assert_eq!(by_views.source_weights_ndarray().len(), 150);
        assert_eq!(
            by_views.source_weights_ndarray().as_ptr(),
            by_views.source_weights.as_ptr()
        );
        // Any estimator goes through the same door (a trait object too).
        let kliep: &dyn RatioEstimator = &KLRatio::new().n_basis(20);
        assert!(fit_ndarray(kliep, s.view(), t.view()).is_ok());
    }

    #[test]
    fn shape_errors_name_the_argument() {
        let model = fit_ndarray(
            &LeastSquaresRatio::new().n_basis(20),
            gaussian_rows(60, 2, 0.0, 6).view(),
            gaussian_rows(60, 2, 0.5, 7).view(),
        )
        .unwrap();
        let err = model
            .ratio_ndarray(gaussian_rows(5, 3, 0.0, 8).view())
            .unwrap_err();
        assert!(err.to_string().contains("`X`"), "{err}");
        let err = fit_ndarray(
            &LeastSquaresRatio::new(),
            gaussian_rows(60, 2, 0.0, 9).t(),
            gaussian_rows(60, 2, 0.0, 10).view(),
        )
        .unwrap_err();
        assert!(err.to_string().contains("`source`"), "{err}");
    }
}
