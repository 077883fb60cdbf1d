//! The totals the views read instead of counting rows (migration 0020): files by outcome,
//! ingested files per minute, cycles, cycles without a lot, conflicting values, and
//! cycles per lot. The writers of `source_files` and `cycles` (all in `records`) note
//! each row they write in a [`Tally`] and add it in the same transaction, so the totals
//! change exactly when the rows do. A row changed by anything else (an edit outside
//! turnbook) leaves them off, and a full `verify` recounts them
//! ([`super::queries::kept_totals_disagreeing`]).
//!
//! Triggers would follow every writer, but a statement that fires triggers keeps a
//! statement journal of each page it changes; with 16 KB pages that made a backfill half
//! again as long.

use std::collections::HashMap;

use rusqlite::Transaction;

use super::Result;

/// The changes to the kept totals of one unit of work, not yet written.
#[derive(Debug, Default)]
pub(crate) struct Tally {
    totals: HashMap<&'static str, i64>,
    /// Ingested files by the minute of their `seen_at`.
    minutes: HashMap<String, i64>,
    /// Cycles by lot.
    lots: HashMap<String, i64>,
}

/// What of a cycle row the totals follow: its lot and its count of conflicting values.
pub(crate) type CycleCounted<'a> = (Option<&'a str>, i64);

impl Tally {
    fn add(&mut self, name: &'static str, by: i64) {
        if by != 0 {
            *self.totals.entry(name).or_default() += by;
        }
    }

    /// A `source_files` row written with `outcome` at `seen_at`.
    pub(crate) fn file(&mut self, outcome: &str, seen_at: &str) {
        match outcome {
            "ingested" => {
                self.add("files-ingested", 1);
                let minute: String = seen_at.chars().take(16).collect();
                *self.minutes.entry(minute).or_default() += 1;
            }
            "rejected" => self.add("files-rejected", 1),
            "duplicate" => self.add("files-duplicate", 1),
            _ => {}
        }
    }

    /// A cycle row written as `after` where the row it replaces (if any) was `before`.
    pub(crate) fn cycle(&mut self, before: Option<CycleCounted<'_>>, after: CycleCounted<'_>) {
        let (old_lot, old_conflicts) = before.unwrap_or((None, 0));
        self.add("cycles", i64::from(before.is_none()));
        let lotless = |b: Option<&str>| i64::from(b.is_none());
        self.add(
            "cycles-without-lot",
            lotless(after.0) - before.map_or(0, |b| lotless(b.0)),
        );
        self.add("conflicts", after.1 - old_conflicts);
        if before.is_some() && old_lot == after.0 {
            return;
        }
        if let (Some(_), Some(lot)) = (before, old_lot) {
            *self.lots.entry(lot.to_string()).or_default() -= 1;
        }
        if let Some(lot) = after.0 {
            *self.lots.entry(lot.to_string()).or_default() += 1;
        }
    }

    /// Add the changes to the kept totals in `tx` and start again from none.
    pub(crate) fn write(&mut self, tx: &Transaction<'_>) -> Result<()> {
        if !self.totals.is_empty() {
            let mut total =
                tx.prepare_cached("UPDATE kept_totals SET n = n + ?2 WHERE name = ?1")?;
            for (name, by) in self.totals.drain() {
                total.execute(rusqlite::params![name, by])?;
            }
        }
        add_each(tx, "ingested_by_minute", "minute", self.minutes.drain())?;
        // A lot that loses cycles keeps its row while it has any; it had the cycle it loses,
        // so its row exists.
        let (gained, lost): (Vec<_>, Vec<_>) = self
            .lots
            .drain()
            .filter(|e| e.1 != 0)
            .partition(|e| e.1 > 0);
        add_each(tx, "lot_cycle_counts", "lot", gained.into_iter())?;
        for (lot, by) in lost {
            tx.prepare_cached("UPDATE lot_cycle_counts SET n = n + ?2 WHERE lot = ?1")?
                .execute(rusqlite::params![lot, by])?;
            tx.prepare_cached("DELETE FROM lot_cycle_counts WHERE lot = ?1 AND n = 0")?
                .execute([&lot])?;
        }
        Ok(())
    }
}

/// Add each (key, count) to the count of its row in `table` (keyed by `key`), making the
/// row where there is none.
fn add_each(
    tx: &Transaction<'_>,
    table: &str,
    key: &str,
    entries: impl Iterator<Item = (String, i64)>,
) -> Result<()> {
    let mut stmt = tx.prepare_cached(&format!(
        "INSERT INTO {table}({key}, n) VALUES (?1, ?2)
         ON CONFLICT ({key}) DO UPDATE SET n = n + excluded.n"
    ))?;
    for (k, by) in entries {
        stmt.execute(rusqlite::params![k, by])?;
    }
    Ok(())
}
