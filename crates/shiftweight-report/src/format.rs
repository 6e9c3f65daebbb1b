//! How the report prints numbers: one rule per kind of number, used by the page, the JSON
//! summary and the command line alike. [`num`] prints a quantity without floating-point noise,
//! [`p_value`] a p-value without false zeros, and an effective sample size goes through the
//! core's [`ess_rows`] / [`ess_words`] (whole rows), so the same weights show the same ESS in
//! the summary, the diagnostics, the clipping table and the messages. O(1) each.

pub use shiftweight::diagnostics::{ess_rows, ess_words};

/// Magnitudes below this print as 0: floating-point noise of sums that are 0 in exact arithmetic
/// (e.g. -1.776e-15 for a mean shift of nothing). No quantity of the report that is meant to be
/// non-zero is this small; p-values have their own format ([`p_value`]).
pub const NOISE: f64 = 1e-12;

/// A number in at most 4 significant digits, switching to exponent notation when very small or
/// large; magnitudes below [`NOISE`] print as `0`.
pub fn num(v: f64) -> String {
    if !v.is_finite() {
        return if v.is_nan() {
            "n/a".into()
        } else if v > 0.0 {
            "infinite".into()
        } else {
            "minus infinite".into()
        };
    }
    let a = v.abs();
    if a < NOISE {
        return "0".into();
    }
    if !(1e-3..1e5).contains(&a) {
        format!("{v:.3e}")
    } else if v == v.trunc() {
        format!("{v:.0}")
    } else if a >= 100.0 {
        format!("{v:.1}")
    } else {
        let digits = if a >= 10.0 {
            2
        } else if a >= 1.0 {
            3
        } else {
            // 4 significant digits below 1.
            (3 - a.log10().floor() as i32).clamp(4, 7) as usize
        };
        let s = format!("{v:.digits$}");
        let s = s.trim_end_matches('0').trim_end_matches('.');
        s.to_string()
    }
}

/// A p-value without false zeros: two significant digits, exponent notation below 0.001, and
/// `< 1e-300` where the double-precision value has underflowed to 0.
pub fn p_value(p: f64) -> String {
    if p.is_nan() {
        "n/a".into()
    } else if p < 1e-300 {
        "< 1e-300".into()
    } else if p < 1e-3 {
        format!("{p:.1e}")
    } else if p < 0.01 {
        format!("{p:.4}")
    } else {
        format!("{p:.3}")
    }
}
