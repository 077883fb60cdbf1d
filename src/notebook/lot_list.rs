//! The lot list as `lots --json` prints it: each lot's entry kept printed beside its state
//! (0018) and streamed as stored, or printed from its line where none is usable; and the
//! keeping of those entries (after each stored state, once at the writer's open) and their
//! check by `verify`. Apart from [`super::lots`], which the printing code depends on.

use super::error::Result as NResult;
use super::lots::{LotLine, line_of, today};
use crate::config::Config;
use crate::fit;
use crate::store::{self, Connection, Result};

/// How `lots --json` printed its entries.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct ListedFrom {
    /// Entries streamed as kept printed beside the lots' states.
    pub kept: usize,
    /// Entries printed from a line read or computed now (no usable kept entry).
    pub lines: usize,
}

/// Write `lots --json` to `out`: each lot's entry as kept printed beside its current
/// state, streamed as stored (not parsed), or, for a lot with none usable, its line as
/// [`super::lots::lot_lines`] makes it. The bytes are the same either way.
pub fn write_lots_json<W: std::io::Write>(cfg: &Config, out: W) -> NResult<ListedFrom> {
    let conn = store::open(&cfg.database_path())?;
    store::lots::map_for_listing(&conn)?;
    let fingerprint = cfg.analysis_fingerprint();
    let version = (fit::ENGINE_VERSION, fingerprint.as_str());
    let signoffs = super::signoffs::sign_off_states(&conn)?;
    let today = today(cfg);
    let form = super::export::printed_form();
    // The lots to list: the registered ones and those of the kept entries with cycles,
    // when these account for every cycle; else every name the store holds, looked up.
    let covered = store::lots::printed_cover_cycles(&conn, version, form)?;
    let names: Vec<String> = if covered {
        store::lots::registered_lots(&conn)?.into_iter().collect()
    } else {
        store::lots::lot_names(&conn)?
    };
    let mut names = names.iter().peekable();
    let mut w = super::export::LotsJsonWriter::new(out, &today)?;
    let mut from = ListedFrom::default();
    // A lot with no usable kept entry: its line, printed whole.
    let mut line_entry = |w: &mut super::export::LotsJsonWriter<W>, lot: &str| -> NResult<()> {
        let stored =
            store::lots::current_state_of(&conn, version, store::lots::StatePart::Line, lot)?;
        let mut line = line_of(&conn, cfg, lot, stored.flatten(), &today)?;
        if let Some(s) = signoffs.get(lot) {
            line.signoff = s.clone();
        }
        from.lines += 1;
        Ok(w.line(&line)?)
    };
    // Both in lot order: the kept entries are merged into the names.
    let each = |lot: &str, cycles: i64, head: &str, tail: Option<&str>| -> NResult<()> {
        while let Some(name) = names.next_if(|n| n.as_str() < lot) {
            line_entry(&mut w, name)?;
        }
        let named = names.next_if(|n| n.as_str() == lot).is_some();
        if named || (covered && cycles > 0) {
            w.printed(head, tail, signoffs.get(lot))?;
            from.kept += 1;
        }
        Ok(())
    };
    store::lots::each_printed(&conn, version, form, each)?;
    for name in names {
        line_entry(&mut w, name)?;
    }
    w.finish()?;
    Ok(from)
}

/// Keep the printed entry of a lot's stored line (`line_json`, as the state just stored
/// in `tx` holds it) beside that state. Printed from the line as read back, so that the
/// entry is what the list would print from the stored state; nothing is kept when the
/// line cannot be cut for the read-time parts (the list then prints the line).
pub(crate) fn keep_printed_line(
    tx: &store::Transaction<'_>,
    lot: &str,
    line_json: &str,
) -> Result<()> {
    let Ok(line) = serde_json::from_str::<LotLine>(line_json) else {
        return Ok(());
    };
    let cycles = line.cycles;
    let Some(p) = super::export::printed_line(line) else {
        return Ok(());
    };
    let form = (super::export::printed_form(), cycles);
    store::lots::store_printed(tx, lot, form, (&p.head, p.tail.as_deref()))
}

/// Keep the printed entries of current states that have none by this build's printing
/// code (a store from before they were kept, or printed by another build): once, at the
/// writer's open, in one transaction. Returns how many were kept.
pub fn fill_printed_lines(conn: &mut Connection, cfg: &Config) -> Result<usize> {
    let fingerprint = cfg.analysis_fingerprint();
    let version = (fit::ENGINE_VERSION, fingerprint.as_str());
    let form = super::export::printed_form();
    if store::lots::lines_to_print(conn, version, form)?.is_empty() {
        return Ok(0);
    }
    // Read again under the write lock: a state stored meanwhile keeps its own entry.
    let tx = store::immediate(conn)?;
    let todo = store::lots::lines_to_print(&tx, version, form)?;
    for (lot, line) in &todo {
        keep_printed_line(&tx, lot, line)?;
    }
    tx.commit()?;
    Ok(todo.len())
}

/// The lot's kept printed entry (what `lots --json` prints) against the entry printed
/// from its stored line made after event `after_seq` (which `verify` checks against the
/// records): the first difference is a finding in table `lot_printed`. Entries another
/// build printed, or of another state, are not read by the list and not checked.
pub(crate) fn printed_finding(
    conn: &Connection,
    lot: &str,
    after_seq: i64,
    fingerprint: &str,
) -> Result<Option<crate::audit::Finding>> {
    let key = (fit::ENGINE_VERSION, fingerprint);
    let Some(kept) = store::lots::printed_of(conn, lot)? else {
        return Ok(None);
    };
    let made = (kept.engine_version.as_str(), kept.config_sha256.as_str());
    if kept.form != super::export::printed_form() || made != key {
        return Ok(None);
    }
    let (head, tail) = (kept.head, kept.tail);
    let Some(json) = store::lots::stored_line(conn, lot, after_seq, key)? else {
        return Ok(None);
    };
    let expected = serde_json::from_str::<LotLine>(&json)
        .ok()
        .and_then(super::export::printed_line);
    let (want_head, want_tail) = match &expected {
        Some(p) => (p.head.as_str(), p.tail.as_deref()),
        None => ("", None),
    };
    let differing = [
        ("head", Some(head.as_str()), Some(want_head)),
        ("tail", tail.as_deref(), want_tail),
    ]
    .into_iter()
    .find(|(_, a, b)| a != b);
    Ok(
        differing.map(|(field, stored, want)| crate::audit::Finding {
            table: "lot_printed".into(),
            row: lot.to_string(),
            field: field.into(),
            stored: first_differing_line(stored.unwrap_or("(none)"), want.unwrap_or("(none)")),
            expected: format!(
                "{} (printed from the stored line)",
                first_differing_line(want.unwrap_or("(none)"), stored.unwrap_or("(none)"))
            ),
        }),
    )
}

/// The line of `a` (trimmed) where it first differs from `b`.
fn first_differing_line(a: &str, b: &str) -> String {
    let mut at = a
        .bytes()
        .zip(b.bytes())
        .position(|(x, y)| x != y)
        .unwrap_or(a.len().min(b.len()));
    while !a.is_char_boundary(at) {
        at -= 1;
    }
    let start = a[..at].rfind('\n').map_or(0, |i| i + 1);
    let end = a[at..].find('\n').map_or(a.len(), |i| at + i);
    a[start..end].trim().to_string()
}
