//! The invented demo scenario: household electricity use in two towns.
//!
//! A regional supplier fits a model of daily household consumption (kWh) on smart-meter households
//! of a mild coastal town (the source) and wants to use it for an inland town with colder winters,
//! larger and older homes and more electric heating (the target). The consumption rule is the same
//! in both towns; only the mix of households and weather differs, so this is pure covariate shift.
//! A linear model of the rule is misspecified (heating demand is a product of degree-days, floor
//! area and an insulation factor), so weighting changes the fitted model.
//!
//! Every number here is invented for the demo. Data are generated from a fixed seed.

use crate::data::Matrix;
use crate::random::rng;
use rand::Rng;
use rand_distr::{Distribution, LogNormal, Normal};

/// Feature names, in column order.
pub const FEATURES: [&str; 6] = [
    "outdoor_temp_c",
    "floor_area_m2",
    "occupants",
    "home_age_years",
    "electric_heating",
    "weekend",
];

/// One generated data set.
#[derive(Debug, Clone)]
pub struct DemoData {
    /// Feature names, in column order.
    pub feature_names: Vec<String>,
    /// Source (coastal town) rows.
    pub source: Matrix,
    /// Daily consumption (kWh) of the source rows.
    pub y_source: Vec<f64>,
    /// Target (inland town) rows.
    pub target: Matrix,
    /// Daily consumption of the target rows: unknown in practice; kept only to check estimates.
    pub y_target: Vec<f64>,
}

/// Town profile: the household and weather mix.
struct Town {
    temp_mean: f64,
    temp_sd: f64,
    area_median: f64,
    occupant_probs: [f64; 5],
    age_mean: f64,
    age_sd: f64,
    electric_share: f64,
}

const COAST: Town = Town {
    temp_mean: 12.0,
    temp_sd: 3.5,
    area_median: 85.0,
    occupant_probs: [0.30, 0.34, 0.16, 0.14, 0.06],
    age_mean: 28.0,
    age_sd: 14.0,
    electric_share: 0.22,
};

const INLAND: Town = Town {
    temp_mean: 6.5,
    temp_sd: 4.5,
    area_median: 115.0,
    occupant_probs: [0.18, 0.30, 0.20, 0.20, 0.12],
    age_mean: 48.0,
    age_sd: 18.0,
    electric_share: 0.50,
};

/// The consumption rule shared by both towns (kWh per day), without noise.
pub fn consumption(row: &[f64]) -> f64 {
    let (temp, area, occ, age, electric, weekend) =
        (row[0], row[1], row[2], row[3], row[4], row[5]);
    let degree_days = (15.5 - temp).max(0.0);
    let insulation = 0.0011 * (1.0 + age / 45.0);
    let heat_share = if electric > 0.5 { 1.0 } else { 0.07 };
    let heating = degree_days * area * insulation * heat_share;
    let base = 2.4 + 1.6 * occ + 0.012 * area + 0.8 * weekend;
    heating + base
}

fn draw_town(town: &Town, n: usize, r: &mut impl Rng) -> (Matrix, Vec<f64>) {
    let temp = Normal::new(town.temp_mean, town.temp_sd).expect("valid normal");
    let area = LogNormal::new(town.area_median.ln(), 0.28).expect("valid lognormal");
    let age = Normal::new(town.age_mean, town.age_sd).expect("valid normal");
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let mut data = Vec::with_capacity(n * FEATURES.len());
    let mut y = Vec::with_capacity(n);
    for _ in 0..n {
        let u: f64 = r.random();
        let mut acc = 0.0;
        let mut occ = 5.0;
        for (k, p) in town.occupant_probs.iter().enumerate() {
            acc += p;
            if u < acc {
                occ = (k + 1) as f64;
                break;
            }
        }
        let row = [
            (temp.sample(r) * 10.0).round() / 10.0,
            (area.sample(r).clamp(25.0, 400.0)).round(),
            occ,
            age.sample(r).clamp(0.0, 120.0).round(),
            if r.random::<f64>() < town.electric_share {
                1.0
            } else {
                0.0
            },
            if r.random::<f64>() < 2.0 / 7.0 {
                1.0
            } else {
                0.0
            },
        ];
        let mean = consumption(&row);
        y.push((mean + (0.8 + 0.06 * mean) * noise.sample(r)).max(0.1));
        data.extend_from_slice(&row);
    }
    (Matrix::new(data, n, FEATURES.len()).expect("shape"), y)
}

/// Generates the scenario: `n_source` coastal and `n_target` inland household-days.
pub fn electricity(n_source: usize, n_target: usize, seed: u64) -> DemoData {
    let mut r = rng(seed);
    let (source, y_source) = draw_town(&COAST, n_source, &mut r);
    let (target, y_target) = draw_town(&INLAND, n_target, &mut r);
    DemoData {
        feature_names: FEATURES.iter().map(|s| s.to_string()).collect(),
        source,
        y_source,
        target,
        y_target,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn demo_is_seeded_and_shifted() {
        let a = electricity(500, 400, 7);
        let b = electricity(500, 400, 7);
        assert_eq!(a.source, b.source);
        assert_eq!(a.y_target, b.y_target);
        let mean = |m: &Matrix, j: usize| {
            (0..m.rows()).map(|i| m.row(i)[j]).sum::<f64>() / m.rows() as f64
        };
        assert!(
            mean(&a.target, 0) < mean(&a.source, 0) - 3.0,
            "target is colder"
        );
        assert!(
            mean(&a.target, 1) > mean(&a.source, 1) + 15.0,
            "target homes are larger"
        );
    }
}
