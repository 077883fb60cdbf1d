//! Entries people make by hand: a lot's registration, a correction, an exclusion and a
//! note (sign-offs are in `signoffs`). Each is one event of the audit trail, written in
//! one transaction with the rows it changes and the recomputation of the lot it concerns.

use std::collections::BTreeSet;

use super::chain::{Receipt, write_entry};
use super::error::{NotebookError, Result};
use super::recompute::recompute_lots;
use crate::config::Config;
use crate::model::{LotRecord, Payload, Quantity};
use crate::store::{self, Transaction, records};

/// A lot's registration as written: new or a change of an existing one.
#[derive(Debug, Clone, PartialEq)]
pub struct Registered {
    pub receipt: Receipt,
    pub changed: bool,
}

fn lot_of_batch(tx: &Transaction<'_>, batch: &str) -> store::Result<BTreeSet<String>> {
    Ok(records::cycle(tx, batch)?
        .and_then(|c| c.lot)
        .into_iter()
        .collect())
}

/// Register a lot, or change its registration (`reason` required then).
pub fn register(cfg: &Config, rec: &LotRecord, reason: Option<&str>) -> Result<Registered> {
    crate::chem::check_lot(rec).map_err(|p| {
        NotebookError::Usage(
            format!("--{}: expected {}", p.field.key(), p.expected)
                .replace("--charged_mass", "--mass"),
        )
    })?;
    let ((seq, changed), actor) = write_entry(cfg, |tx, actor, at| {
        let exists = records::lot(tx, &rec.lot)?.is_some();
        if exists && reason.is_none() {
            return Err(store::StoreError::Invalid(format!(
                "lot '{}' is already registered; give --reason to change its registration",
                rec.lot
            )));
        }
        let seq = records::register_lot(tx, rec, reason, actor, at)?;
        recompute_lots(tx, cfg, &[rec.lot.clone()].into(), actor)?;
        Ok((seq, exists))
    })?;
    Ok(Registered {
        receipt: Receipt { seq, actor },
        changed,
    })
}

/// A correction as written: the value as stored, in its canonical unit.
#[derive(Debug, Clone, PartialEq)]
pub struct Corrected {
    pub receipt: Receipt,
    pub stored: f64,
    pub unit: &'static str,
}

/// Correct one value of a batch, with the reason. The value is typed with its unit
/// (`60 °C`; a bare number is in the unit `cycles` shows) and passes the same
/// plausibility rule as an export's column; a cycle number must not collide.
pub fn correct(
    cfg: &Config,
    batch: &str,
    field: &str,
    value: &str,
    reason: &str,
) -> Result<Corrected> {
    let (stored, unit) = typed_value(field, value)?;
    let (seq, actor) = write_entry(cfg, |tx, actor, at| {
        let lots = lot_of_batch(tx, batch)?;
        let seq = records::correct(tx, batch, field, stored, reason, actor, at)?;
        recompute_lots(tx, cfg, &lots, actor)?;
        Ok(seq)
    })?;
    Ok(Corrected {
        receipt: Receipt { seq, actor },
        stored,
        unit,
    })
}

/// A typed correction in its canonical unit, or why it cannot be stored.
fn typed_value(field: &str, text: &str) -> Result<(f64, &'static str)> {
    if field == crate::model::cycle::ATTR_CYCLE_NO {
        return match text.trim().parse::<u32>() {
            Ok(n) if n > 0 => Ok((f64::from(n), "")),
            _ => Err(NotebookError::Refused(format!(
                "cycle_no = '{}': expected a whole number of 1 or more",
                text.chars().take(40).collect::<String>()
            ))),
        };
    }
    let q = Quantity::from_key(field).ok_or_else(|| {
        NotebookError::Refused(format!(
            "'{field}' is not a correctable field; expected cycle_no or one of {}",
            Quantity::ALL.map(|q| q.key()).join(", ")
        ))
    })?;
    let v =
        crate::ingest::read_value(q, text).map_err(|p| NotebookError::Refused(p.to_string()))?;
    Ok((v, q.canonical_unit()))
}

/// Exclude a batch from the fits (or take it back in with `exclude` false).
pub fn exclude(cfg: &Config, batch: &str, exclude: bool, reason: &str) -> Result<Receipt> {
    let (seq, actor) = write_entry(cfg, |tx, actor, at| {
        let lots = lot_of_batch(tx, batch)?;
        let seq = records::set_excluded(tx, batch, exclude, reason, actor, at)?;
        recompute_lots(tx, cfg, &lots, actor)?;
        Ok(seq)
    })?;
    Ok(Receipt { seq, actor })
}

/// A free-text note on a lot or a batch.
pub fn note(cfg: &Config, lot: Option<&str>, batch: Option<&str>, text: &str) -> Result<Receipt> {
    let (seq, actor) = write_entry(cfg, |tx, actor, at| {
        if let Some(l) = lot
            && !store::lots::lot_exists(tx, l)?
        {
            return Err(store::StoreError::Invalid(format!(
                "no lot '{l}' is registered and no cycle names it; expected a lot `turnbook lots` lists"
            )));
        }
        if let Some(b) = batch
            && records::cycle(tx, b)?.is_none()
        {
            return Err(store::StoreError::Invalid(format!(
                "no batch '{b}' is recorded; expected a batch `turnbook cycles` lists"
            )));
        }
        let subject = lot.or(batch).unwrap_or_default();
        let p = Payload::Note {
            lot: lot.map(str::to_string),
            batch_id: batch.map(str::to_string),
            text: text.to_string(),
        };
        records::append_event(tx, subject, &p, actor, at)
    })?;
    Ok(Receipt { seq, actor })
}
