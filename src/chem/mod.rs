//! Chemistry of catalyst reuse: TON, TOF, apparent rate constants, activity, Arrhenius
//! normalisation, metal leaching and ICH Q3D limits. Pure functions over plain data.

pub mod elements;

pub use elements::{METALS, molar_mass};
