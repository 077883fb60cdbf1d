//! Deciding when a file has stopped changing. Pure: the caller supplies the clock and the
//! file's stamp, so every rule here is testable without a file system or a timer.
//!
//! A file is settled when either
//! - a close-after-write was seen and the stamp is unchanged at a short re-check, or
//! - the stamp (size and modification time) stayed unchanged for the folder's settle time.
//!
//! Any change of stamp restarts the wait, so a file that keeps growing keeps waiting.

use std::collections::HashMap;
use std::hash::Hash;
use std::time::{Duration, Instant, SystemTime};

/// What identifies one version of a file without reading it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Stamp {
    /// Size in bytes.
    pub size: u64,
    /// Last modification time, when the file system reports one.
    pub modified: Option<SystemTime>,
}

/// What was learnt about a file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Signal {
    /// The file exists with this stamp (created, written, found by a scan).
    Seen,
    /// The writer closed it, or it was renamed into place: likely complete.
    Closed,
}

/// Result of re-checking a file whose check time has come.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Verdict<V> {
    /// Unchanged since the last look: ready to be read.
    Settled(V, Stamp),
    /// Still changing; the wait starts again.
    Waiting,
    /// The file disappeared (or was never tracked); it is forgotten.
    Gone,
}

/// Re-check delay after a close-after-write: long enough for a writer that closes and
/// reopens to show itself, short enough to keep latency low (common practice).
pub const CLOSE_RECHECK: Duration = Duration::from_millis(100);

#[derive(Debug)]
struct Pending<V> {
    seq: u64,
    value: V,
    stamp: Stamp,
    stable_since: Instant,
    closed_at: Option<Instant>,
    settle: Duration,
}

impl<V> Pending<V> {
    fn check_at(&self) -> Instant {
        let quiet = self.stable_since + self.settle;
        match self.closed_at {
            Some(closed) => quiet.min(closed + CLOSE_RECHECK.min(self.settle)),
            None => quiet,
        }
    }
}

/// Files that were seen but are not yet known to be complete.
#[derive(Debug)]
pub struct SettleTracker<K, V> {
    pending: HashMap<K, Pending<V>>,
    next_seq: u64,
}

impl<K: Eq + Hash + Clone, V> Default for SettleTracker<K, V> {
    fn default() -> Self {
        Self {
            pending: HashMap::new(),
            next_seq: 0,
        }
    }
}

impl<K: Eq + Hash + Clone, V> SettleTracker<K, V> {
    /// An empty tracker.
    pub fn new() -> Self {
        Self::default()
    }

    /// Records a sighting of `key` at `now`. A new file or a changed stamp restarts the
    /// quiet period; `value` (e.g. the path as observed) replaces the stored one.
    pub fn note(
        &mut self,
        key: K,
        value: V,
        stamp: Stamp,
        signal: Signal,
        settle: Duration,
        now: Instant,
    ) {
        let closed_at = (signal == Signal::Closed).then_some(now);
        match self.pending.get_mut(&key) {
            Some(p) => {
                p.value = value;
                p.settle = settle;
                if p.stamp != stamp {
                    p.stamp = stamp;
                    p.stable_since = now;
                    p.closed_at = None;
                }
                if closed_at.is_some() {
                    p.closed_at = closed_at;
                }
            }
            None => {
                let seq = self.next_seq;
                self.next_seq += 1;
                self.pending.insert(
                    key,
                    Pending {
                        seq,
                        value,
                        stamp,
                        stable_since: now,
                        closed_at,
                        settle,
                    },
                );
            }
        }
    }

    /// When the next re-check is due; `None` when nothing is settling, so an idle watcher
    /// needs no timer at all.
    pub fn next_deadline(&self) -> Option<Instant> {
        self.pending.values().map(Pending::check_at).min()
    }

    /// Keys whose re-check is due at `now`, oldest sighting first (arrival order).
    pub fn due(&self, now: Instant) -> Vec<K> {
        let mut due: Vec<(u64, &K)> = self
            .pending
            .iter()
            .filter(|(_, p)| p.check_at() <= now)
            .map(|(k, p)| (p.seq, k))
            .collect();
        due.sort_unstable_by_key(|(seq, _)| *seq);
        due.into_iter().map(|(_, k)| k.clone()).collect()
    }

    /// The stored value of a tracked key (what the caller needs to re-check it).
    pub fn value(&self, key: &K) -> Option<&V> {
        self.pending.get(key).map(|p| &p.value)
    }

    /// Compares the stamp found at a re-check (`None`: the file is gone) with the last one.
    /// Only an unchanged stamp at or after the check time settles the file.
    pub fn confirm(&mut self, key: &K, found: Option<Stamp>, now: Instant) -> Verdict<V> {
        let Some(p) = self.pending.get_mut(key) else {
            return Verdict::Gone;
        };
        match found {
            None => {
                self.pending.remove(key);
                Verdict::Gone
            }
            Some(stamp) if stamp == p.stamp && now >= p.check_at() => {
                match self.pending.remove(key) {
                    Some(p) => Verdict::Settled(p.value, stamp),
                    None => Verdict::Gone,
                }
            }
            Some(stamp) => {
                if stamp != p.stamp {
                    p.stamp = stamp;
                    p.stable_since = now;
                    p.closed_at = None;
                }
                Verdict::Waiting
            }
        }
    }

    /// Stops tracking a key.
    pub fn forget(&mut self, key: &K) {
        self.pending.remove(key);
    }

    /// Number of files still settling.
    pub fn len(&self) -> usize {
        self.pending.len()
    }

    /// True when nothing is settling.
    pub fn is_empty(&self) -> bool {
        self.pending.is_empty()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const SETTLE: Duration = Duration::from_millis(2000);

    fn stamp(size: u64, secs: u64) -> Stamp {
        Stamp {
            size,
            modified: Some(SystemTime::UNIX_EPOCH + Duration::from_secs(secs)),
        }
    }

    fn ms(t0: Instant, ms: u64) -> Instant {
        t0 + Duration::from_millis(ms)
    }

    #[test]
    fn idle_tracker_needs_no_timer() {
        let t: SettleTracker<&str, ()> = SettleTracker::new();
        assert_eq!(t.next_deadline(), None);
        assert!(t.due(Instant::now()).is_empty());
    }

    #[test]
    fn quiet_file_settles_after_settle_time() {
        let t0 = Instant::now();
        let mut t = SettleTracker::new();
        t.note("a", 1, stamp(10, 1), Signal::Seen, SETTLE, t0);
        assert_eq!(t.next_deadline(), Some(ms(t0, 2000)));
        assert!(t.due(ms(t0, 1999)).is_empty());
        assert_eq!(t.due(ms(t0, 2000)), vec!["a"]);
        assert_eq!(
            t.confirm(&"a", Some(stamp(10, 1)), ms(t0, 2000)),
            Verdict::Settled(1, stamp(10, 1))
        );
        assert!(t.is_empty());
    }

    #[test]
    fn growing_file_keeps_waiting() {
        let t0 = Instant::now();
        let mut t = SettleTracker::new();
        t.note("a", (), stamp(10, 1), Signal::Seen, SETTLE, t0);
        // at the check it has grown: wait again from now
        assert_eq!(
            t.confirm(&"a", Some(stamp(20, 2)), ms(t0, 2000)),
            Verdict::Waiting
        );
        assert_eq!(t.next_deadline(), Some(ms(t0, 4000)));
        // a write event in between also restarts the wait
        t.note("a", (), stamp(30, 3), Signal::Seen, SETTLE, ms(t0, 3000));
        assert_eq!(t.next_deadline(), Some(ms(t0, 5000)));
        assert!(t.due(ms(t0, 4500)).is_empty());
        assert!(matches!(
            t.confirm(&"a", Some(stamp(30, 3)), ms(t0, 5000)),
            Verdict::Settled(..)
        ));
    }

    #[test]
    fn close_after_write_needs_only_a_short_recheck() {
        let t0 = Instant::now();
        let mut t = SettleTracker::new();
        t.note("a", (), stamp(5, 1), Signal::Seen, SETTLE, t0);
        t.note("a", (), stamp(9, 2), Signal::Closed, SETTLE, ms(t0, 500));
        assert_eq!(t.next_deadline(), Some(ms(t0, 500) + CLOSE_RECHECK));
        assert!(matches!(
            t.confirm(&"a", Some(stamp(9, 2)), ms(t0, 600)),
            Verdict::Settled(..)
        ));
    }

    #[test]
    fn write_after_close_cancels_the_short_path() {
        let t0 = Instant::now();
        let mut t = SettleTracker::new();
        t.note("a", (), stamp(5, 1), Signal::Closed, SETTLE, t0);
        // reopened and appended before the re-check
        assert_eq!(
            t.confirm(&"a", Some(stamp(8, 2)), ms(t0, 100)),
            Verdict::Waiting
        );
        assert_eq!(t.next_deadline(), Some(ms(t0, 2100)));
    }

    #[test]
    fn early_confirm_does_not_settle() {
        let t0 = Instant::now();
        let mut t = SettleTracker::new();
        t.note("a", (), stamp(5, 1), Signal::Seen, SETTLE, t0);
        assert_eq!(
            t.confirm(&"a", Some(stamp(5, 1)), ms(t0, 10)),
            Verdict::Waiting
        );
        assert_eq!(t.len(), 1);
    }

    #[test]
    fn vanished_and_unknown_files_are_gone() {
        let t0 = Instant::now();
        let mut t = SettleTracker::new();
        t.note("a", (), stamp(5, 1), Signal::Seen, SETTLE, t0);
        assert_eq!(t.confirm(&"a", None, ms(t0, 2000)), Verdict::Gone);
        assert_eq!(
            t.confirm(&"b", Some(stamp(5, 1)), ms(t0, 2000)),
            Verdict::Gone
        );
        assert!(t.is_empty());
    }

    #[test]
    fn due_keys_come_in_arrival_order() {
        let t0 = Instant::now();
        let mut t = SettleTracker::new();
        for (i, k) in ["c", "a", "d", "b"].into_iter().enumerate() {
            t.note(k, (), stamp(1, 1), Signal::Seen, SETTLE, ms(t0, i as u64));
        }
        // a repeated sighting does not move a file to the back
        t.note("c", (), stamp(1, 1), Signal::Seen, SETTLE, ms(t0, 50));
        assert_eq!(t.due(ms(t0, 3000)), vec!["c", "a", "d", "b"]);
    }

    #[test]
    fn repeated_identical_sightings_do_not_postpone() {
        let t0 = Instant::now();
        let mut t = SettleTracker::new();
        t.note("a", (), stamp(1, 1), Signal::Seen, SETTLE, t0);
        t.note("a", (), stamp(1, 1), Signal::Seen, SETTLE, ms(t0, 1500));
        assert_eq!(t.next_deadline(), Some(ms(t0, 2000)));
    }

    proptest::proptest! {
        /// Safety: whatever the writer's rhythm, a version is settled only if it was
        /// unchanged over the whole settle time before (no close event involved).
        /// Liveness: the last version settles exactly one settle time after it was written.
        #[test]
        fn settles_only_what_stood_still(gaps in proptest::collection::vec(0u64..6000, 1..40)) {
            let t0 = Instant::now();
            let mut tracker = SettleTracker::new();
            let mut changes: Vec<(Instant, Stamp)> = Vec::new();
            let mut at = t0;
            for (i, gap) in gaps.iter().enumerate() {
                at += Duration::from_millis(*gap);
                changes.push((at, stamp(i as u64 + 1, i as u64 + 1)));
            }
            let current = |now: Instant, changes: &[(Instant, Stamp)]| {
                changes.iter().rev().find(|(t, _)| *t <= now).map(|(_, s)| *s)
            };
            let mut settled: Vec<(Instant, Stamp)> = Vec::new();
            let mut next = 0;
            loop {
                let event_at = changes.get(next).map(|(t, _)| *t);
                match (tracker.next_deadline(), event_at) {
                    (Some(d), e) if e.is_none_or(|e| d < e) => {
                        let found = current(d, &changes);
                        if let Verdict::Settled((), s) = tracker.confirm(&"f", found, d) {
                            settled.push((d, s));
                        }
                    }
                    (_, Some(e)) => {
                        let (_, s) = changes[next];
                        tracker.note("f", (), s, Signal::Seen, SETTLE, e);
                        next += 1;
                    }
                    (None, None) => break,
                    (Some(_), None) => unreachable!("covered by the first arm"),
                }
            }
            for (when, s) in &settled {
                let written = changes.iter().find(|(_, c)| c == s).map(|(t, _)| *t);
                let written = written.expect("a settled stamp was written");
                proptest::prop_assert!(*when >= written + SETTLE);
                let later = changes.iter().any(|(t, c)| c != s && *t > written && *t <= *when);
                proptest::prop_assert!(!later, "settled a version that had changed");
            }
            let (last_at, last) = *changes.last().expect("at least one change");
            proptest::prop_assert_eq!(settled.last().copied(), Some((last_at + SETTLE, last)));
        }
    }
}
