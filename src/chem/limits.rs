//! ICH Q3D permitted daily exposures for the catalyst metals and option 1 limits.
//!
//! EVERY VALUE below is recalled from memory, ICH Q3D(R2), Table A.2.1; verify against
//! the guideline before use. The (R2) corrections (Ag parenteral 15, Au 300/300/3,
//! Ni inhalation 6 µg/day) were cross-checked against a published summary of the
//! revision only. The configuration can override each value ([`PdeTable::set`]).

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

/// Route of administration of the drug product.
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Default, Serialize, Deserialize,
)]
#[serde(rename_all = "lowercase")]
pub enum Route {
    #[default]
    Oral,
    Parenteral,
    Inhalation,
}

/// Permitted daily exposures, µg/day, by route.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Pde {
    pub oral: f64,
    pub parenteral: f64,
    pub inhalation: f64,
}

impl Pde {
    pub fn for_route(&self, route: Route) -> f64 {
        match route {
            Route::Oral => self.oral,
            Route::Parenteral => self.parenteral,
            Route::Inhalation => self.inhalation,
        }
    }
}

/// Daily dose assumed by ICH Q3D option 1, grams of drug product per day.
pub const OPTION1_DAILY_DOSE_G: f64 = 10.0;

/// ICH Q3D(R2) PDE of a catalyst metal, µg/day (recalled from memory, ICH Q3D(R2);
/// verify against the guideline). Fe and Re have no PDE in Q3D: `None`, so a site must
/// set its own limit in the configuration.
pub fn ich_q3d_pde(symbol: &str) -> Option<Pde> {
    let (oral, parenteral, inhalation) = match symbol {
        // Class 2B platinum-group metals (recalled from memory, ICH Q3D(R2); verify).
        "Pd" | "Pt" | "Rh" | "Ru" | "Ir" | "Os" => (100.0, 10.0, 1.0),
        // Class 3 (recalled from memory, ICH Q3D(R2); verify).
        "Ni" => (200.0, 20.0, 6.0),
        // Class 2A (recalled from memory, ICH Q3D(R2); verify).
        "Co" => (50.0, 5.0, 3.0),
        // Class 3 (recalled from memory, ICH Q3D(R2); verify).
        "Cu" => (3000.0, 300.0, 30.0),
        // Class 2B (recalled from memory, ICH Q3D(R2); verify).
        "Au" => (300.0, 300.0, 3.0),
        // Class 2B (recalled from memory, ICH Q3D(R2); verify).
        "Ag" => (150.0, 15.0, 7.0),
        _ => return None,
    };
    Some(Pde {
        oral,
        parenteral,
        inhalation,
    })
}

/// Concentration limit in µg/g for a PDE and a daily dose: PDE / dose (ICH Q3D, option 2a
/// form; option 1 when the dose is 10 g/day).
pub fn concentration_limit_ug_per_g(pde_ug_per_day: f64, daily_dose_g: f64) -> Option<f64> {
    let pde_ok = pde_ug_per_day.is_finite() && pde_ug_per_day >= 0.0;
    let dose_ok = daily_dose_g.is_finite() && daily_dose_g > 0.0;
    if !(pde_ok && dose_ok) {
        return None;
    }
    Some(pde_ug_per_day / daily_dose_g)
}

/// ICH Q3D option 1 concentration limit: PDE / 10 g daily dose, µg/g.
pub fn option1_limit_ug_per_g(pde_ug_per_day: f64) -> Option<f64> {
    concentration_limit_ug_per_g(pde_ug_per_day, OPTION1_DAILY_DOSE_G)
}

/// The PDEs in force at a site: the ICH defaults with configured overrides.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PdeTable {
    entries: BTreeMap<String, Pde>,
}

impl PdeTable {
    /// The recalled ICH Q3D(R2) values for every catalyst metal that has one.
    pub fn ich_q3d() -> PdeTable {
        let entries = super::METALS
            .iter()
            .filter_map(|m| ich_q3d_pde(m).map(|p| ((*m).to_owned(), p)))
            .collect();
        PdeTable { entries }
    }

    /// Override (or add) one element's PDEs, e.g. from the configuration.
    pub fn set(&mut self, symbol: &str, pde: Pde) {
        self.entries.insert(symbol.to_owned(), pde);
    }

    pub fn get(&self, symbol: &str) -> Option<Pde> {
        self.entries.get(symbol).copied()
    }

    /// Option 1 limit for an element and route, µg/g.
    pub fn option1_limit(&self, symbol: &str, route: Route) -> Option<f64> {
        option1_limit_ug_per_g(self.get(symbol)?.for_route(route))
    }
}
