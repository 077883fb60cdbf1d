//! (module under construction)

/// Placeholder until chemistry lands.
pub fn molar_mass(_s: &str) -> Option<f64> { Some(1.0) }
