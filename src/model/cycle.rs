//! The current view of a cycle, derived from its append-only measurements. Pure: the store
//! uses it to keep `cycles` up to date and `verify` uses it to recompute that table.

use serde::{Deserialize, Serialize};

use crate::model::Quantity;
use crate::model::event::MeasurementRow;

/// One row of `cycles`.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct CycleView {
    pub batch_id: String,
    pub lot: Option<String>,
    pub cycle_no: Option<i64>,
    pub started_at: Option<String>,
    /// Values by quantity, canonical units, in [`Quantity::ALL`] order.
    pub values: [Option<f64>; 11],
    /// Conflicting values not yet settled by a correction.
    pub conflicts: i64,
    pub excluded: bool,
    pub first_seq: i64,
}

impl CycleView {
    pub fn get(&self, q: Quantity) -> Option<f64> {
        Quantity::ALL
            .iter()
            .position(|x| *x == q)
            .and_then(|i| self.values[i])
    }
}

/// The database column of each quantity in `cycles`, in [`Quantity::ALL`] order.
pub const CYCLE_COLUMNS: [&str; 11] = [
    "duration_s",
    "temperature_k",
    "substrate_mol",
    "catalyst_mass_g",
    "metal_charged_mol",
    "conversion",
    "selectivity",
    "yield",
    "product_mass_g",
    "metal_in_product_ug_g",
    "catalyst_recovered_g",
];

/// Quantity keys for the batch attributes that are text or integers.
pub const ATTR_LOT: &str = "lot";
pub const ATTR_CYCLE_NO: &str = "cycle_no";
pub const ATTR_STARTED_AT: &str = "started_at";
/// The substrate or feed lot a batch was charged from: kept with the batch's measurements
/// (with its file and line), not in the cycle view.
pub const ATTR_FEED_LOT: &str = "feed_lot";

/// The current value of one quantity among a batch's measurements (ordered by id): the
/// latest correction if any, else the first observation. Returns the row.
pub fn current<'a>(rows: &'a [MeasurementRow], quantity: &str) -> Option<&'a MeasurementRow> {
    rows.iter()
        .rfind(|m| m.quantity == quantity && m.kind == "correction")
        .or_else(|| {
            rows.iter()
                .find(|m| m.quantity == quantity && m.kind == "observed")
        })
}

/// Derive the cycle row from all measurements of one batch, ordered by id.
pub fn derive_cycle(
    batch_id: &str,
    rows: &[MeasurementRow],
    excluded: bool,
    first_seq: i64,
) -> CycleView {
    let mut v = CycleView {
        batch_id: batch_id.to_string(),
        excluded,
        first_seq,
        ..Default::default()
    };
    v.lot = current(rows, ATTR_LOT).and_then(|m| m.text.clone());
    v.cycle_no = current(rows, ATTR_CYCLE_NO).and_then(|m| m.value.map(|x| x as i64));
    v.started_at = current(rows, ATTR_STARTED_AT).and_then(|m| m.text.clone());
    for (i, q) in Quantity::ALL.iter().enumerate() {
        v.values[i] = current(rows, q.key()).and_then(|m| m.value);
    }
    // A conflict is settled by a later correction of the same quantity.
    v.conflicts = rows
        .iter()
        .filter(|m| m.kind == "conflict")
        .filter(|c| {
            !rows
                .iter()
                .any(|m| m.kind == "correction" && m.quantity == c.quantity && m.id > c.id)
        })
        .count() as i64;
    v
}

/// Two stored values are the same reading when they agree to 1e-12 relative (text
/// round-trips through f64 exactly, so this only absorbs unit-conversion noise).
pub fn same_value(a: f64, b: f64) -> bool {
    a == b || (a - b).abs() <= 1e-12 * a.abs().max(b.abs())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn m(id: i64, q: &'static str, v: f64, kind: &'static str) -> MeasurementRow {
        MeasurementRow {
            id,
            batch_id: "B1".into(),
            quantity: q.into(),
            value: Some(v),
            text: None,
            kind: kind.into(),
            source_file_id: Some(1),
            line: Some(2),
            col: Some(3),
            raw: None,
        }
    }

    #[test]
    fn first_observation_wins_until_corrected() {
        let rows = vec![
            m(1, "conversion", 0.9, "observed"),
            m(2, "conversion", 0.8, "conflict"),
        ];
        let v = derive_cycle("B1", &rows, false, 1);
        assert_eq!(v.get(Quantity::Conversion), Some(0.9));
        assert_eq!(v.conflicts, 1);
        let mut rows = rows;
        rows.push(m(3, "conversion", 0.85, "correction"));
        let v = derive_cycle("B1", &rows, false, 1);
        assert_eq!(v.get(Quantity::Conversion), Some(0.85));
        assert_eq!(v.conflicts, 0);
    }
}
