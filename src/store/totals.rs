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
        if !self.minutes.is_empty() {
            let mut minute = tx.prepare_cached(
                "INSERT INTO ingested_by_minute(minute, n) VALUES (?1, ?2)
                 ON CONFLICT (minute) DO UPDATE SET n = n + excluded.n",
            )?;
            for (m, by) in self.minutes.drain() {
                minute.execute(rusqlite::params![m, by])?;
            }
        }
        if !self.lots.is_empty() {
            let mut lot = tx.prepare_cached(
                "INSERT INTO lot_cycle_counts(lot, n) VALUES (?1, ?2)
                 ON CONFLICT (lot) DO UPDATE SET n = n + excluded.n",
            )?;
            let mut emptied =
                tx.prepare_cached("DELETE FROM lot_cycle_counts WHERE lot = ?1 AND n = 0")?;
            for (name, by) in self.lots.drain() {
                if by == 0 {
                    continue;
                }
                if by < 0 {
                    // A lot keeps its row while it has cycles; the insert cannot be what
                    // runs here, since the lot had the cycle it loses.
                    tx.prepare_cached("UPDATE lot_cycle_counts SET n = n + ?2 WHERE lot = ?1")?
                        .execute(rusqlite::params![name, by])?;
                    emptied.execute([&name])?;
                } else {
                    lot.execute(rusqlite::params![name, by])?;
                }
            }
        }
        Ok(())
    }
}
