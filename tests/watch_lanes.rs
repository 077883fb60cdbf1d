//! The watcher's lane for large files, against a real folder and a sink that records
//! calls: a small file settling while a large one is still in its sink call is offered at
//! once, on the other lane; on shutdown the sink is told to stop, and the large call ends.
//! Checked by the order of calls, not by wall time (the large call waits for a signal).

use std::fs;
use std::path::Path;
use std::sync::{Arc, Condvar, Mutex};
use std::time::Duration;

use tokio::sync::watch;
use turnbook::watch::{FileSink, WatchFolder, run};

/// Files of at least this size go to the large lane.
const LARGE_FROM: u64 = 1000;

/// Records calls by lane; a large call holds until it is released or told to stop.
#[derive(Default)]
struct Lanes {
    calls: Mutex<Vec<String>>,
    /// Released (true) by the test or by `stopping`.
    release: Mutex<bool>,
    released: Condvar,
    stopping_told: Mutex<bool>,
}

impl Lanes {
    fn record(&self, what: String) {
        self.calls.lock().unwrap().push(what);
    }

    fn calls(&self) -> Vec<String> {
        self.calls.lock().unwrap().clone()
    }

    fn release(&self) {
        *self.release.lock().unwrap() = true;
        self.released.notify_all();
    }

    async fn wait_for(&self, what: &str) {
        for _ in 0..250 {
            if self.calls().iter().any(|c| c == what) {
                return;
            }
            tokio::time::sleep(Duration::from_millis(20)).await;
        }
        panic!(
            "expected the call {what:?} within 5 s; got {:?}",
            self.calls()
        );
    }
}

fn name(path: &Path) -> String {
    path.file_name().unwrap().to_string_lossy().into_owned()
}

impl FileSink for Lanes {
    fn ingest(&self, _folder: &WatchFolder, path: &Path) -> anyhow::Result<()> {
        self.record(format!("small {}", name(path)));
        Ok(())
    }

    fn large_lane_from(&self) -> Option<u64> {
        Some(LARGE_FROM)
    }

    fn ingest_large(&self, _folder: &WatchFolder, path: &Path) -> anyhow::Result<()> {
        self.record(format!("large {} begun", name(path)));
        let mut released = self.release.lock().unwrap();
        while !*released {
            released = self.released.wait(released).unwrap();
        }
        self.record(format!("large {} ended", name(path)));
        Ok(())
    }

    fn stopping(&self) {
        *self.stopping_told.lock().unwrap() = true;
        self.release();
    }
}

fn folder(dir: &Path) -> WatchFolder {
    let mut f = WatchFolder::new(dir, "reactor");
    f.settle = 200;
    f
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_small_file_is_offered_while_a_large_one_is_still_being_stored() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Lanes::default());
    let (stop, rx) = watch::channel(false);
    let task = tokio::spawn(run(vec![folder(dir.path())], sink.clone(), rx));
    tokio::time::sleep(Duration::from_millis(300)).await;

    fs::write(dir.path().join("export-large.csv"), vec![b'7'; 5000]).unwrap();
    sink.wait_for("large export-large.csv begun").await;
    fs::write(dir.path().join("export-small.csv"), b"B-1,L-1,40.0\n").unwrap();
    sink.wait_for("small export-small.csv").await;
    // A second small file, still while the large call holds.
    fs::write(dir.path().join("export-small-2.csv"), b"B-2,L-1,39.5\n").unwrap();
    sink.wait_for("small export-small-2.csv").await;
    assert_eq!(
        sink.calls(),
        [
            "large export-large.csv begun",
            "small export-small.csv",
            "small export-small-2.csv"
        ]
    );
    sink.release();
    sink.wait_for("large export-large.csv ended").await;

    stop.send(true).unwrap();
    let stats = tokio::time::timeout(Duration::from_secs(5), task)
        .await
        .expect("run() returns within 5 s of shutdown")
        .unwrap()
        .unwrap();
    assert_eq!(stats.offered, 3);
    assert_eq!(stats.sink_errors, 0);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn on_shutdown_the_large_lane_is_told_to_stop() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Lanes::default());
    let (stop, rx) = watch::channel(false);
    let task = tokio::spawn(run(vec![folder(dir.path())], sink.clone(), rx));
    tokio::time::sleep(Duration::from_millis(300)).await;

    fs::write(dir.path().join("export-large.csv"), vec![b'7'; 5000]).unwrap();
    sink.wait_for("large export-large.csv begun").await;
    // The large call holds until the sink is told the watcher stops.
    stop.send(true).unwrap();
    let stats = tokio::time::timeout(Duration::from_secs(5), task)
        .await
        .expect("run() returns within 5 s of shutdown")
        .unwrap()
        .unwrap();
    assert!(*sink.stopping_told.lock().unwrap());
    assert_eq!(
        sink.calls(),
        [
            "large export-large.csv begun",
            "large export-large.csv ended"
        ]
    );
    assert_eq!(stats.offered, 1);
}
