//! Entries people make by hand: a lot's registration, a correction, an exclusion, a note
//! and a sign-off. Each is one event of the audit trail, written in one transaction with
//! the rows it changes and the recomputation of the lot it concerns.

use std::collections::BTreeSet;

use super::error::{NotebookError, Result};
use super::recompute::{recompute_lots, recompute_lots_because};
use super::signoffs::{lot_fingerprint, lot_marks};
use crate::config::Config;
use crate::model::signoff::{self, Meaning, SignOffMark};
use crate::model::time::now_utc;
use crate::model::{LotRecord, Payload, Quantity};
use crate::store::{self, Transaction, records};

/// What an entry wrote: the event's sequence number and who made it.
#[derive(Debug, Clone, PartialEq)]
pub struct Receipt {
    pub seq: i64,
    pub actor: String,
}

/// A lot's registration as written: new or a change of an existing one.
#[derive(Debug, Clone, PartialEq)]
pub struct Registered {
    pub receipt: Receipt,
    pub changed: bool,
    /// What the registration should be warned about, though it was accepted (a wet or
    /// paste catalyst without a water content).
    pub warnings: Vec<String>,
}

/// A sign-off as written, with what it covers.
#[derive(Debug, Clone, PartialEq)]
pub struct SignedOff {
    pub receipt: Receipt,
    pub covers: String,
    pub sha256: String,
    /// The roster name as the roster spells it.
    pub signer: String,
    /// The operating-system account recorded.
    pub os_user: String,
    /// For an approval: the review it rests on (four eyes).
    pub review: Option<SignOffMark>,
}

/// What a sign-off asks for: the lot, what it means, the roster name and a comment.
#[derive(Debug, Clone, Copy)]
pub struct SignOffRequest<'a> {
    pub lot: &'a str,
    /// "reviewed", "approved" or "rejected".
    pub meaning: &'a str,
    /// The roster name to sign as (`--as`).
    pub signer: &'a str,
    pub comment: Option<&'a str>,
}

/// Open the database and run one entry in an immediate transaction.
fn write_entry<T>(
    cfg: &Config,
    work: impl FnOnce(&Transaction<'_>, &str, &str) -> store::Result<T>,
) -> Result<(T, String)> {
    let mut conn = super::chain::open_writer(cfg)?;
    let actor = crate::audit::actor(cfg.actor.as_deref());
    let at = now_utc();
    let tx = store::immediate(&mut conn)?;
    let out = work(&tx, &actor, &at)?;
    tx.commit().map_err(store::StoreError::from)?;
    super::chain::publish_head(cfg, &conn)?;
    Ok((out, actor))
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
                .replace("--charged_mass", "--mass")
                .replace("--water_content", "--water-content"),
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
        warnings: crate::chem::lot_warnings(rec),
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
        let cause = format!(
            "event #{seq}, a correction of {field} of batch {batch} by {actor}, reason: {reason}"
        );
        recompute_lots_because(tx, cfg, &lots, &cause)?;
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
        let cause = format!(
            "event #{seq}, {} batch {batch} by {actor}, reason: {reason}",
            if exclude {
                "the exclusion of"
            } else {
                "taking back in"
            }
        );
        recompute_lots_because(tx, cfg, &lots, &cause)?;
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

/// Sign off a lot's history as it stands, as a signer of the configured roster; this
/// process's operating-system account ([`crate::audit::os_account`]) is recorded with the
/// name. An approval needs an earlier review of the same history by another signer
/// ([`signoff::four_eyes`]).
pub fn sign_off(cfg: &Config, req: &SignOffRequest<'_>) -> Result<SignedOff> {
    sign_off_from(cfg, req, &crate::audit::os_account())
}

/// Sign off as [`sign_off`] does, with the operating-system account given by the caller
/// (a front end that knows its user another way; tests).
pub fn sign_off_from(cfg: &Config, req: &SignOffRequest<'_>, account: &str) -> Result<SignedOff> {
    let meaning = Meaning::parse(req.meaning).ok_or_else(|| {
        NotebookError::Usage(format!(
            "--meaning {}: expected reviewed, approved or rejected",
            req.meaning
        ))
    })?;
    let signer = signoff::check_signer(&cfg.signers, req.signer, account)
        .map_err(|e| {
            NotebookError::Refused(format!("{e} (configuration {})", cfg.source.display()))
        })?
        .name
        .clone();
    let lot = req.lot;
    let ((seq, covers, sha256, review), actor) = write_entry(cfg, |tx, actor, at| {
        let (what, sha) = lot_fingerprint(tx, lot)?;
        let review = if meaning == Meaning::Approved {
            let marks = lot_marks(tx, lot)?;
            let r =
                signoff::four_eyes(&marks, &sha, &cfg.signers, &signer, account).map_err(|e| {
                    store::StoreError::Invalid(format!("lot '{lot}' cannot be approved: {e}"))
                })?;
            Some(r.clone())
        } else {
            None
        };
        let p = Payload::SignOff {
            lot: lot.to_string(),
            meaning: meaning.as_str().to_string(),
            signed_sha256: sha.clone(),
            what: what.clone(),
            comment: req.comment.map(str::to_string),
            signer: Some(signer.clone()),
            os_user: Some(account.to_string()),
        };
        let seq = records::append_event(tx, lot, &p, actor, at)?;
        Ok((seq, what, sha, review))
    })?;
    Ok(SignedOff {
        receipt: Receipt { seq, actor },
        covers,
        sha256,
        signer,
        os_user: account.to_string(),
        review,
    })
}

/// What a person can do with an alert.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AlertAct {
    /// "Seen, someone is on it": the alert stays listed, marked acknowledged.
    Acknowledge,
    /// "Dealt with": the current episode is closed; if the condition clears and comes back,
    /// that is a new episode and a new alert.
    Close,
}

impl AlertAct {
    pub fn word(self) -> &'static str {
        match self {
            AlertAct::Acknowledge => "acknowledged",
            AlertAct::Close => "closed",
        }
    }
}

/// Record who acknowledged or closed an alert (by its id or key), when and why, as an
/// event in the audit trail. A cleared alert cannot be acted on; a closed one cannot be
/// acknowledged or closed again.
pub fn act_on_alert(cfg: &Config, id_or_key: &str, act: AlertAct, reason: &str) -> Result<Receipt> {
    if reason.trim().is_empty() {
        return Err(NotebookError::Usage(
            "--reason: expected a sentence saying why".into(),
        ));
    }
    let (seq, actor) = write_entry(cfg, |tx, actor, at| {
        let Some(c) = store::outbox::condition(tx, id_or_key)? else {
            return Err(store::StoreError::Invalid(format!(
                "no alert '{id_or_key}'; expected an id or key that `turnbook alerts --all` lists"
            )));
        };
        if c.state == crate::alert::AlertState::Cleared {
            return Err(store::StoreError::Invalid(format!(
                "alert {} ({}) is already cleared: its condition no longer holds",
                c.id, c.key
            )));
        }
        let done = store::outbox::actions(tx)?
            .into_iter()
            .any(|a| a.alert_key == c.key && a.episode == c.episode && a.action == "closed");
        if done {
            return Err(store::StoreError::Invalid(format!(
                "alert {} ({}) is already closed",
                c.id, c.key
            )));
        }
        let p = Payload::AlertAction {
            alert_key: c.key.clone(),
            episode: c.episode,
            action: act.word().to_string(),
            reason: reason.trim().to_string(),
        };
        records::append_event(tx, &c.lot, &p, actor, at)
    })?;
    Ok(Receipt { seq, actor })
}
