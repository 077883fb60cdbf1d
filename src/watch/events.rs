//! Turning operating-system file events into sightings for the settle tracker.

use std::path::PathBuf;

use notify::event::{AccessKind, AccessMode, EventKind, ModifyKind, RenameMode};

use super::settle::Signal;

/// What one event means for us: paths to look at, and whether the folder must be rescanned
/// because the kernel dropped events (inotify queue overflow).
#[derive(Debug, Default, PartialEq, Eq)]
pub(crate) struct Meaning {
    pub look_at: Vec<(PathBuf, Signal)>,
    /// Paths that newly appeared (created or renamed in). If one is a directory, its
    /// contents must be scanned: files may land in it before its own watch is in place.
    pub arrived: Vec<PathBuf>,
    pub rescan: bool,
}

/// Classifies an event. Pure, so the mapping is tested without a kernel.
///
/// - create, data or metadata change: look at the path (it may still be growing);
/// - close after write: the writer is done, a short re-check suffices;
/// - rename into place: the file was written elsewhere and is complete, like a close;
/// - rename away, removal, reads: nothing to do (a tracked file that vanished is noticed
///   at its re-check).
pub(crate) fn classify(event: &notify::Event) -> Meaning {
    let mut meaning = Meaning {
        rescan: event.need_rescan(),
        ..Meaning::default()
    };
    let all = |signal: Signal| event.paths.iter().map(move |p| (p.clone(), signal));
    if matches!(
        event.kind,
        EventKind::Create(_)
            | EventKind::Modify(ModifyKind::Name(RenameMode::To | RenameMode::Both))
    ) {
        meaning.arrived.extend(event.paths.last().cloned());
    }
    match event.kind {
        EventKind::Create(_)
        | EventKind::Modify(ModifyKind::Data(_))
        | EventKind::Modify(ModifyKind::Metadata(_))
        | EventKind::Modify(ModifyKind::Any)
        | EventKind::Modify(ModifyKind::Other) => meaning.look_at.extend(all(Signal::Seen)),
        EventKind::Access(AccessKind::Close(AccessMode::Write)) => {
            meaning.look_at.extend(all(Signal::Closed))
        }
        EventKind::Modify(ModifyKind::Name(mode)) => match mode {
            RenameMode::From => {}
            RenameMode::To => meaning.look_at.extend(all(Signal::Closed)),
            RenameMode::Both => {
                if let Some(target) = event.paths.last() {
                    meaning.look_at.push((target.clone(), Signal::Closed));
                }
            }
            // Direction unknown: look at every path; one that is gone is skipped.
            RenameMode::Any | RenameMode::Other => meaning.look_at.extend(all(Signal::Seen)),
        },
        EventKind::Any | EventKind::Other => meaning.look_at.extend(all(Signal::Seen)),
        EventKind::Access(_) | EventKind::Remove(_) => {}
    }
    meaning
}

#[cfg(test)]
mod tests {
    use super::*;
    use notify::Event;
    use notify::event::{CreateKind, DataChange, Flag, RemoveKind};

    fn ev(kind: EventKind, paths: &[&str]) -> Event {
        paths
            .iter()
            .fold(Event::new(kind), |e, p| e.add_path(PathBuf::from(p)))
    }

    #[test]
    fn writes_and_creates_are_sightings() {
        let m = classify(&ev(EventKind::Create(CreateKind::File), &["/r/a.csv"]));
        assert_eq!(m.look_at, vec![(PathBuf::from("/r/a.csv"), Signal::Seen)]);
        assert_eq!(m.arrived, vec![PathBuf::from("/r/a.csv")]);
        let m = classify(&ev(
            EventKind::Modify(ModifyKind::Data(DataChange::Any)),
            &["/r/a.csv"],
        ));
        assert_eq!(m.look_at[0].1, Signal::Seen);
        assert!(m.arrived.is_empty());
        assert!(!m.rescan);
    }

    #[test]
    fn close_after_write_and_rename_in_are_closes() {
        let m = classify(&ev(
            EventKind::Access(AccessKind::Close(AccessMode::Write)),
            &["/r/a.csv"],
        ));
        assert_eq!(m.look_at, vec![(PathBuf::from("/r/a.csv"), Signal::Closed)]);
        let m = classify(&ev(
            EventKind::Modify(ModifyKind::Name(RenameMode::Both)),
            &["/r/a.part", "/r/a.csv"],
        ));
        assert_eq!(m.look_at, vec![(PathBuf::from("/r/a.csv"), Signal::Closed)]);
        let m = classify(&ev(
            EventKind::Modify(ModifyKind::Name(RenameMode::To)),
            &["/r/b.csv"],
        ));
        assert_eq!(m.look_at, vec![(PathBuf::from("/r/b.csv"), Signal::Closed)]);
    }

    #[test]
    fn reads_removals_and_renames_away_are_ignored() {
        for kind in [
            EventKind::Access(AccessKind::Close(AccessMode::Read)),
            EventKind::Access(AccessKind::Open(AccessMode::Any)),
            EventKind::Remove(RemoveKind::File),
            EventKind::Modify(ModifyKind::Name(RenameMode::From)),
        ] {
            assert!(
                classify(&ev(kind, &["/r/a.csv"])).look_at.is_empty(),
                "{kind:?}"
            );
        }
    }

    #[test]
    fn overflow_asks_for_a_rescan() {
        let e = Event::new(EventKind::Other).set_flag(Flag::Rescan);
        assert!(classify(&e).rescan);
    }
}
