//! The entries people make by hand: register, correct, exclude, note, sign-off.

use super::{CmdResult, CorrectArgs, ExcludeArgs, NoteArgs, RegisterArgs, SignoffArgs};
use crate::config::Config;
use crate::model::LotRecord;
use crate::notebook as entries;

/// `turnbook register`.
pub fn register(cfg: &Config, a: &RegisterArgs) -> CmdResult {
    let rec = LotRecord {
        lot: a.lot.clone(),
        catalyst: a.catalyst.clone(),
        metal: a.metal.clone(),
        loading_wt_pct: a.loading,
        charged_mass_g: a.mass,
        received: a.received.clone(),
        supplier_lot: a.supplier_lot.clone(),
        cost: a.cost,
        site: a.site.clone(),
        water_content_wt_pct: a.water_content,
        family: a.family.clone(),
    };
    let r = entries::register(cfg, &rec, a.reason.as_deref())?;
    let verb = if r.changed { "changed" } else { "registered" };
    println!("lot '{}' {verb} (event {})", rec.lot, r.receipt.seq);
    for w in &r.warnings {
        eprintln!("warning: {w}");
    }
    Ok(0)
}

/// `turnbook correct`.
pub fn correct(cfg: &Config, a: &CorrectArgs) -> CmdResult {
    let c = entries::correct(cfg, &a.batch, &a.field, &a.value, &a.reason)?;
    println!(
        "correction recorded as event {}: batch '{}', {} = {} {}",
        c.receipt.seq, a.batch, a.field, c.stored, c.unit
    );
    Ok(0)
}

/// `turnbook exclude`.
pub fn exclude(cfg: &Config, a: &ExcludeArgs) -> CmdResult {
    let r = entries::exclude(cfg, &a.batch, !a.undo, &a.reason)?;
    let what = if a.undo {
        "taken back into the fits"
    } else {
        "excluded from the fits"
    };
    println!("batch '{}' {what} (event {})", a.batch, r.seq);
    Ok(0)
}

/// `turnbook note`.
pub fn note(cfg: &Config, a: &NoteArgs) -> CmdResult {
    let r = entries::note(cfg, a.lot.as_deref(), a.batch.as_deref(), &a.text)?;
    println!("note recorded as event {}", r.seq);
    Ok(0)
}

/// `turnbook signoff`.
pub fn sign_off(cfg: &Config, a: &SignoffArgs) -> CmdResult {
    let s = entries::sign_off(
        cfg,
        &entries::SignOffRequest {
            lot: &a.lot,
            meaning: &a.meaning,
            signer: &a.signer,
            comment: a.comment.as_deref(),
        },
    )?;
    if let Some(r) = &s.review {
        println!(
            "four eyes: rests on the review in event {} as {} (account {})",
            r.seq,
            r.signer_or_unnamed(),
            r.os_user.as_deref().unwrap_or("not recorded")
        );
    }
    println!(
        "lot '{}' signed off as {} by {} (account {}, event {}); it covers the history with SHA-256 {}",
        a.lot, a.meaning, s.signer, s.os_user, s.receipt.seq, s.sha256
    );
    Ok(0)
}
