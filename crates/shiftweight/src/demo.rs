//! The invented demo scenario: household electricity use in two towns.
//!
//! A regional supplier fits a model of daily household consumption (kWh) on smart-meter households
//! of a mild coastal town (the source) and wants to use it for an inland town with colder winters,
//! larger and older homes, more electric heating and more oil than gas (the target). The
//! consumption rule is the same in both towns; only the mix of households and weather differs, so
//! this is pure covariate shift. A linear model of the rule is misspecified (heating demand is a
//! product of degree-days, floor area and an insulation factor), so weighting changes the fitted
//! model.
//!
//! # Two views of the same rows
//! - [`DemoData::source_table`] / [`DemoData::target_table`]: the records as the supplier holds
//!   them, a typed table ([`TABLE_FEATURES`]) with the categorical column `heating` (four levels,
//!   [`HEATING_LEVELS`]) and gaps in `home_age_years` (homes missing from the building register:
//!   about 4% of coastal and 8% of inland homes).
//! - [`DemoData::source`] / [`DemoData::target`]: a complete numeric matrix of the same rows
//!   ([`FEATURES`]), with every home's age (as if the register were complete) and the 0/1 column
//!   `electric_heating` (1 for a heat pump or direct electric heating).
//!
//! # Why both views are pure covariate shift
//! Consumption depends on the heating type through its electric share of heating demand (direct
//! electric 1, heat pump 0.35, gas and oil 0.07 for pumps and fans). In the numeric view the
//! electric homes mix heat pumps and direct heating in the same proportion (2 in 5 heat pumps) in
//! both towns, independently of every other feature, and gas and oil homes use the same share, so
//! consumption given the numeric row follows one law in both towns. In the typed view a home whose
//! age is not recorded is one of a group (older conversions and self-built houses) whose ages
//! follow one spread shared by both towns, independent of the other features, so consumption given
//! the recorded row (age missing) also follows one law in both towns. The towns differ only in how
//! often such rows occur; that the inland register misses more homes is itself a shift of the
//! inputs (a changed missing rate), which a per-column test reports.
//!
//! Every number here is invented for the demo. Data are generated from a fixed seed: the main
//! stream draws every numeric feature and the noise, a second stream seeded from the same seed
//! draws the heating subtype and whether the age is recorded.
//!
//! # Complexity
//! O(n) time and memory for n generated rows.

use crate::data::Matrix;
use crate::random::rng;
use crate::table::{Column, Table, MISSING_CODE};
use rand::Rng;
use rand_distr::{Distribution, LogNormal, Normal};

/// Feature names of the numeric matrix, in column order.
pub const FEATURES: [&str; 6] = [
    "outdoor_temp_c",
    "floor_area_m2",
    "occupants",
    "home_age_years",
    "electric_heating",
    "weekend",
];

/// Column names of the typed table, in column order.
pub const TABLE_FEATURES: [&str; 6] = [
    "outdoor_temp_c",
    "floor_area_m2",
    "occupants",
    "home_age_years",
    "heating",
    "weekend",
];

/// Levels of the categorical column `heating`, in level-code order.
pub const HEATING_LEVELS: [&str; 4] = ["gas", "oil", "heat pump", "direct electric"];

/// Electric share of heating demand of each level of [`HEATING_LEVELS`] (invented).
const HEAT_SHARE: [f64; 4] = [0.07, 0.07, 0.35, 1.0];

/// Share of heat pumps among electrically heated homes, the same in both towns.
const HEAT_PUMP_SHARE: f64 = 0.4;

/// One generated data set.
#[derive(Debug, Clone)]
pub struct DemoData {
    /// Feature names of the numeric matrices, in column order.
    pub feature_names: Vec<String>,
    /// Source (coastal town) rows, complete numeric view.
    pub source: Matrix,
    /// Daily consumption (kWh) of the source rows.
    pub y_source: Vec<f64>,
    /// Target (inland town) rows, complete numeric view.
    pub target: Matrix,
    /// Daily consumption of the target rows: unknown in practice; kept only to check estimates.
    pub y_target: Vec<f64>,
    /// Source rows as recorded: typed table with `heating` and gaps in `home_age_years`.
    pub source_table: Table,
    /// Target rows as recorded, same columns.
    pub target_table: Table,
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
    /// Share of oil among homes not heated electrically (the rest use gas).
    oil_share: f64,
    /// Share of homes whose age the building register lacks.
    age_unrecorded: f64,
}

const COAST: Town = Town {
    temp_mean: 12.0,
    temp_sd: 3.5,
    area_median: 85.0,
    occupant_probs: [0.30, 0.34, 0.16, 0.14, 0.06],
    age_mean: 28.0,
    age_sd: 14.0,
    electric_share: 0.22,
    oil_share: 0.20,
    age_unrecorded: 0.04,
};

const INLAND: Town = Town {
    temp_mean: 6.5,
    temp_sd: 4.5,
    area_median: 115.0,
    occupant_probs: [0.18, 0.30, 0.20, 0.20, 0.12],
    age_mean: 48.0,
    age_sd: 18.0,
    electric_share: 0.50,
    oil_share: 0.55,
    age_unrecorded: 0.08,
};

/// Mean and standard deviation of the ages of homes missing from the register, both towns.
const UNRECORDED_AGE: (f64, f64) = (60.0, 20.0);

/// The consumption rule shared by both towns (kWh per day), without noise. `heating` is an index
/// into [`HEATING_LEVELS`].
pub fn consumption(
    temp: f64,
    area: f64,
    occupants: f64,
    age: f64,
    heating: usize,
    weekend: f64,
) -> f64 {
    let degree_days = (15.5 - temp).max(0.0);
    let insulation = 0.0011 * (1.0 + age / 45.0);
    let heating_kwh = degree_days * area * insulation * HEAT_SHARE[heating];
    let base = 2.4 + 1.6 * occupants + 0.012 * area + 0.8 * weekend;
    heating_kwh + base
}

/// Rows of one town: numeric matrix, consumption, and the typed table's `home_age_years` (NaN
/// when unrecorded) and `heating` codes.
struct TownRows {
    matrix: Matrix,
    y: Vec<f64>,
    recorded_age: Vec<f64>,
    heating: Vec<u32>,
}

fn draw_town(town: &Town, n: usize, r: &mut impl Rng, r2: &mut impl Rng) -> TownRows {
    let temp = Normal::new(town.temp_mean, town.temp_sd).expect("valid normal");
    let area = LogNormal::new(town.area_median.ln(), 0.28).expect("valid lognormal");
    let age = Normal::new(town.age_mean, town.age_sd).expect("valid normal");
    let unrecorded_age = Normal::new(UNRECORDED_AGE.0, UNRECORDED_AGE.1).expect("valid normal");
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let mut data = Vec::with_capacity(n * FEATURES.len());
    let mut y = Vec::with_capacity(n);
    let mut recorded_age = Vec::with_capacity(n);
    let mut heating = Vec::with_capacity(n);
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
        let t = (temp.sample(r) * 10.0).round() / 10.0;
        let a = (area.sample(r).clamp(25.0, 400.0)).round();
        let town_age = age.sample(r).clamp(0.0, 120.0).round();
        let electric = r.random::<f64>() < town.electric_share;
        let weekend = if r.random::<f64>() < 2.0 / 7.0 {
            1.0
        } else {
            0.0
        };
        // The second stream: heating subtype, then whether the register has the age.
        let sub: f64 = r2.random();
        let h = match (electric, sub) {
            (true, s) if s < HEAT_PUMP_SHARE => 2,
            (true, _) => 3,
            (false, s) if s < town.oil_share => 1,
            (false, _) => 0,
        };
        let missing_age = r2.random::<f64>() < town.age_unrecorded;
        let home_age = if missing_age {
            unrecorded_age.sample(r2).clamp(0.0, 120.0).round()
        } else {
            town_age
        };
        let row = [
            t,
            a,
            occ,
            home_age,
            if electric { 1.0 } else { 0.0 },
            weekend,
        ];
        let mean = consumption(t, a, occ, home_age, h, weekend);
        y.push((mean + (0.8 + 0.06 * mean) * noise.sample(r)).max(0.1));
        data.extend_from_slice(&row);
        recorded_age.push(if missing_age { f64::NAN } else { home_age });
        heating.push(h as u32);
    }
    TownRows {
        matrix: Matrix::new(data, n, FEATURES.len()).expect("shape"),
        y,
        recorded_age,
        heating,
    }
}

/// The typed table of one town's rows.
fn typed(rows: &TownRows) -> Table {
    let m = &rows.matrix;
    let col = |j: usize| (0..m.rows()).map(|i| m.row(i)[j]).collect::<Vec<f64>>();
    let numeric = |name: &str, v: Vec<f64>| Column::numeric(name, v).expect("finite values");
    debug_assert!(rows.heating.iter().all(|&c| c != MISSING_CODE));
    Table::new(vec![
        numeric(TABLE_FEATURES[0], col(0)),
        numeric(TABLE_FEATURES[1], col(1)),
        numeric(TABLE_FEATURES[2], col(2)),
        numeric(TABLE_FEATURES[3], rows.recorded_age.clone()),
        Column::categorical(
            TABLE_FEATURES[4],
            HEATING_LEVELS.iter().map(|s| s.to_string()).collect(),
            rows.heating.clone(),
        )
        .expect("codes in range"),
        numeric(TABLE_FEATURES[5], col(5)),
    ])
    .expect("columns of one length")
}

/// Generates the scenario: `n_source` coastal and `n_target` inland household-days.
pub fn electricity(n_source: usize, n_target: usize, seed: u64) -> DemoData {
    let mut r = rng(seed);
    let mut r2 = rng(seed ^ 0x5EED_DE70_0000_0002);
    let s = draw_town(&COAST, n_source, &mut r, &mut r2);
    let t = draw_town(&INLAND, n_target, &mut r, &mut r2);
    DemoData {
        feature_names: FEATURES.iter().map(|s| s.to_string()).collect(),
        source_table: typed(&s),
        target_table: typed(&t),
        source: s.matrix,
        y_source: s.y,
        target: t.matrix,
        y_target: t.y,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::table::ColumnData;

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

    /// The typed table and the numeric matrix hold the same rows: `electric_heating` is 1 exactly
    /// for the electric levels, and every recorded age equals the matrix's.
    #[test]
    fn typed_table_matches_the_numeric_rows() {
        let d = electricity(400, 300, 3);
        for (m, t) in [(&d.source, &d.source_table), (&d.target, &d.target_table)] {
            assert_eq!(t.rows(), m.rows());
            assert_eq!(t.names(), TABLE_FEATURES.to_vec());
            let heating = t.column("heating").unwrap();
            let age = t.column("home_age_years").unwrap();
            for i in 0..m.rows() {
                let electric = matches!(heating.level(i), Some("heat pump" | "direct electric"));
                assert_eq!(m.row(i)[4] == 1.0, electric, "row {i}");
                if !age.is_missing(i) {
                    let ColumnData::Numeric(v) = age.data() else {
                        panic!("age is numeric")
                    };
                    assert_eq!(v[i], m.row(i)[3], "row {i}");
                }
            }
        }
    }

    /// Level shares and missing rates against the design values of the town profiles, within
    /// 4 binomial standard deviations sqrt(p (1 - p) / n) (analytic).
    #[test]
    fn shares_follow_the_town_profiles() {
        let n = 20_000;
        let d = electricity(n, n, 5);
        let within = |count: usize, p: f64, what: &str| {
            let share = count as f64 / n as f64;
            let sd = (p * (1.0 - p) / n as f64).sqrt();
            assert!((share - p).abs() < 4.0 * sd, "{what}: {share} vs {p}");
        };
        for (t, town) in [(&d.source_table, &COAST), (&d.target_table, &INLAND)] {
            let heating = t.column("heating").unwrap();
            let count = |l: &str| (0..n).filter(|&i| heating.level(i) == Some(l)).count();
            let e = town.electric_share;
            within(count("heat pump"), e * HEAT_PUMP_SHARE, "heat pump");
            within(
                count("direct electric"),
                e * (1.0 - HEAT_PUMP_SHARE),
                "direct",
            );
            within(count("oil"), (1.0 - e) * town.oil_share, "oil");
            within(
                t.column("home_age_years").unwrap().n_missing(),
                town.age_unrecorded,
                "unrecorded age",
            );
        }
    }
}
