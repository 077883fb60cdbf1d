//! The one set of rules a lot's registration must meet, whichever way it enters: the
//! `register` command, a lot sheet, or a change of registration.

use crate::model::LotRecord;

use super::elements::{METALS, molar_mass};

/// A field of a lot's registration.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LotField {
    Metal,
    Loading,
    ChargedMass,
    Received,
    Cost,
    WaterContent,
    Family,
}

impl LotField {
    /// The field's key, as lot sheet profiles and the command line name it.
    pub fn key(self) -> &'static str {
        match self {
            LotField::Metal => "metal",
            LotField::Loading => "loading",
            LotField::ChargedMass => "charged_mass",
            LotField::Received => "received",
            LotField::Cost => "cost",
            LotField::WaterContent => "water_content",
            LotField::Family => "family",
        }
    }
}

/// A registration that breaks a rule: which field, and what was expected.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{}: expected {expected}", field.key())]
pub struct LotProblem {
    pub field: LotField,
    pub expected: String,
}

/// The longest family name accepted.
pub const MAX_FAMILY_CHARS: usize = 100;

/// Check a registration against the rules every lot must meet.
pub fn check_lot(rec: &LotRecord) -> Result<(), LotProblem> {
    let fail = |field, expected: String| Err(LotProblem { field, expected });
    if molar_mass(&rec.metal).is_none() {
        return fail(
            LotField::Metal,
            format!("a catalyst metal symbol, one of {}", METALS.join(", ")),
        );
    }
    if !(rec.loading_wt_pct > 0.0 && rec.loading_wt_pct <= 100.0) {
        return fail(
            LotField::Loading,
            "a metal loading above 0 and at most 100 wt %".into(),
        );
    }
    if !(rec.charged_mass_g.is_finite() && rec.charged_mass_g > 0.0) {
        return fail(
            LotField::ChargedMass,
            "a charged catalyst mass greater than 0 g".into(),
        );
    }
    if let Some(d) = &rec.received
        && chrono::NaiveDate::parse_from_str(d, "%Y-%m-%d").is_err()
    {
        return fail(LotField::Received, "a date YYYY-MM-DD".into());
    }
    if rec.cost.is_some_and(|c| !(c.is_finite() && c >= 0.0)) {
        return fail(LotField::Cost, "a cost of 0 or more".into());
    }
    if rec
        .water_content_wt_pct
        .is_some_and(|w| !(w.is_finite() && (0.0..100.0).contains(&w)))
    {
        return fail(
            LotField::WaterContent,
            "a water content of at least 0 and below 100 wt %".into(),
        );
    }
    if rec
        .family
        .as_deref()
        .is_some_and(|f| f.trim().is_empty() || f.chars().count() > MAX_FAMILY_CHARS)
    {
        return fail(
            LotField::Family,
            format!("a family name, not blank, of at most {MAX_FAMILY_CHARS} characters"),
        );
    }
    Ok(())
}

/// True when a catalyst description says the catalyst is charged wet: a word "wet" or
/// "paste" in it, in any case ("50 % water-wet paste", "Pd/C, WET").
pub fn described_wet(catalyst: &str) -> bool {
    catalyst
        .split(|c: char| !c.is_alphabetic())
        .any(|w| w.eq_ignore_ascii_case("wet") || w.eq_ignore_ascii_case("paste"))
}

/// What a registration should be warned about, though it is accepted: one line each.
pub fn lot_warnings(rec: &LotRecord) -> Vec<String> {
    let mut out = Vec::new();
    if rec.water_content_wt_pct.is_none() && described_wet(&rec.catalyst) {
        out.push(format!(
            "lot '{}': the catalyst is described as wet or paste (\"{}\") but no water content \
             is registered, so its metal is computed on the mass as weighed: if that mass is \
             wet, metal is overstated and TON and TOF understated; register the water content \
             (wt %)",
            rec.lot, rec.catalyst
        ));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lot() -> LotRecord {
        LotRecord {
            lot: "L".into(),
            catalyst: "5 % Pd/C".into(),
            metal: "Pd".into(),
            loading_wt_pct: 5.0,
            charged_mass_g: 10.0,
            received: Some("2026-11-02".into()),
            supplier_lot: None,
            cost: Some(100.0),
            site: None,
            water_content_wt_pct: None,
            family: None,
        }
    }

    #[test]
    fn each_rule_names_its_field() {
        assert_eq!(check_lot(&lot()), Ok(()));
        type Spoil = fn(&mut LotRecord);
        let cases: [(Spoil, LotField); 8] = [
            (|l| l.metal = "Xx".into(), LotField::Metal),
            (|l| l.loading_wt_pct = 0.0, LotField::Loading),
            (|l| l.charged_mass_g = f64::NAN, LotField::ChargedMass),
            (
                |l| l.received = Some("02/11/2026".into()),
                LotField::Received,
            ),
            (|l| l.cost = Some(-1.0), LotField::Cost),
            (
                |l| l.water_content_wt_pct = Some(100.0),
                LotField::WaterContent,
            ),
            (
                |l| l.water_content_wt_pct = Some(f64::NAN),
                LotField::WaterContent,
            ),
            (|l| l.family = Some("  ".into()), LotField::Family),
        ];
        for (spoil, field) in cases {
            let mut l = lot();
            spoil(&mut l);
            assert_eq!(check_lot(&l).map_err(|p| p.field), Err(field));
        }
        let mut l = lot();
        l.water_content_wt_pct = Some(0.0);
        assert_eq!(check_lot(&l), Ok(()));
    }

    #[test]
    fn wet_descriptions_warn_without_water_content() {
        for wet in [
            "5 % Pd/C (50 % water-wet paste)",
            "Pd/C WET",
            "Raney Ni paste",
        ] {
            assert!(described_wet(wet), "{wet}");
        }
        for dry in ["5 % Pd/C", "Pt/Al2O3 spheres", "Pd on carbon, between lots"] {
            assert!(!described_wet(dry), "{dry}");
        }
        let mut l = lot();
        l.catalyst = "5 % Pd/C (50 % water-wet paste)".into();
        assert_eq!(lot_warnings(&l).len(), 1);
        l.water_content_wt_pct = Some(50.0);
        assert!(lot_warnings(&l).is_empty());
    }
}
