//! The quantities a cycle record holds, each in one canonical unit.

use serde::{Deserialize, Serialize};

/// A quantity a cycle record can hold. Each is stored in one canonical unit, named by
/// [`Quantity::canonical_unit`]; the parser converts from the profile's unit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Quantity {
    /// Reaction time, seconds.
    Duration,
    /// Reaction temperature, kelvin.
    Temperature,
    /// Limiting substrate charged, mol.
    Substrate,
    /// Catalyst charged, grams (metal from the lot's loading).
    CatalystMass,
    /// Metal charged, mol, when an instrument reports it directly.
    MetalCharged,
    /// Conversion of the limiting substrate, fraction 0..1.
    Conversion,
    /// Selectivity to the product, fraction 0..1.
    Selectivity,
    /// Yield of product, fraction 0..1.
    Yield,
    /// Isolated product mass, grams.
    ProductMass,
    /// Metal found in the product, µg/g (= mg/kg = ppm by mass).
    MetalInProduct,
    /// Catalyst mass recovered after filtration, grams.
    CatalystRecovered,
}

impl Quantity {
    /// Every quantity, in storage order.
    pub const ALL: [Quantity; 11] = [
        Quantity::Duration,
        Quantity::Temperature,
        Quantity::Substrate,
        Quantity::CatalystMass,
        Quantity::MetalCharged,
        Quantity::Conversion,
        Quantity::Selectivity,
        Quantity::Yield,
        Quantity::ProductMass,
        Quantity::MetalInProduct,
        Quantity::CatalystRecovered,
    ];

    /// The name used in configuration keys, database rows and JSON.
    pub fn key(self) -> &'static str {
        match self {
            Quantity::Duration => "duration",
            Quantity::Temperature => "temperature",
            Quantity::Substrate => "substrate",
            Quantity::CatalystMass => "catalyst_mass",
            Quantity::MetalCharged => "metal_charged",
            Quantity::Conversion => "conversion",
            Quantity::Selectivity => "selectivity",
            Quantity::Yield => "yield",
            Quantity::ProductMass => "product_mass",
            Quantity::MetalInProduct => "metal_in_product",
            Quantity::CatalystRecovered => "catalyst_recovered",
        }
    }

    /// Parse a configuration key back into a quantity.
    pub fn from_key(key: &str) -> Option<Quantity> {
        Quantity::ALL.into_iter().find(|q| q.key() == key)
    }

    /// The canonical unit values are stored in.
    pub fn canonical_unit(self) -> &'static str {
        match self {
            Quantity::Duration => "s",
            Quantity::Temperature => "K",
            Quantity::Substrate | Quantity::MetalCharged => "mol",
            Quantity::CatalystMass | Quantity::ProductMass | Quantity::CatalystRecovered => "g",
            Quantity::Conversion | Quantity::Selectivity | Quantity::Yield => "fraction",
            Quantity::MetalInProduct => "ug/g",
        }
    }
}
