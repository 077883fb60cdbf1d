//! Standard atomic weights of the catalyst metals.

/// The metals turnbook knows, by element symbol.
pub const METALS: [&str; 13] = [
    "Pd", "Pt", "Rh", "Ru", "Ir", "Os", "Ni", "Co", "Cu", "Fe", "Au", "Ag", "Re",
];

/// Molar mass in g/mol from the IUPAC (CIAAW) standard atomic weights, abridged/
/// conventional values. Recalled from memory: to be checked against the current IUPAC
/// table of standard atomic weights before release.
pub fn molar_mass(symbol: &str) -> Option<f64> {
    Some(match symbol {
        "Pd" => 106.42,
        "Pt" => 195.084,
        "Rh" => 102.905_49,
        "Ru" => 101.07,
        "Ir" => 192.217,
        "Os" => 190.23,
        "Ni" => 58.6934,
        "Co" => 58.933_194,
        "Cu" => 63.546,
        "Fe" => 55.845,
        "Au" => 196.966_570,
        "Ag" => 107.8682,
        "Re" => 186.207,
        _ => return None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_listed_metal_has_a_mass_and_nothing_else_does() {
        for m in METALS {
            let mm = molar_mass(m).unwrap_or(0.0);
            assert!(mm > 50.0 && mm < 200.0, "{m}");
        }
        assert_eq!(molar_mass("pd"), None);
        assert_eq!(molar_mass("Xx"), None);
    }
}
