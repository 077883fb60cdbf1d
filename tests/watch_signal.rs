//! SIGTERM stops the watcher. Alone in its own test binary (its own process), because the
//! signal goes to the whole process.

#![cfg(unix)]

use std::sync::Arc;
use std::time::Duration;

use turnbook::watch::{FileSink, WatchFolder, run, shutdown_receiver};

struct NoSink;

impl FileSink for NoSink {
    fn ingest(&self, _folder: &WatchFolder, _path: &std::path::Path) -> anyhow::Result<()> {
        Ok(())
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sigterm_turns_the_receiver_true_and_stops_run() {
    let dir = tempfile::tempdir().unwrap();
    let mut folder = WatchFolder::new(dir.path(), "demo");
    folder.settle = 200;
    let mut rx = shutdown_receiver();
    assert!(!*rx.borrow());
    let watcher = tokio::spawn(run(vec![folder], Arc::new(NoSink), rx.clone()));
    tokio::time::sleep(Duration::from_millis(200)).await;
    assert!(!watcher.is_finished(), "runs until told to stop");

    let status = std::process::Command::new("kill")
        .args(["-TERM", &std::process::id().to_string()])
        .status()
        .unwrap();
    assert!(status.success());

    tokio::time::timeout(Duration::from_secs(2), rx.wait_for(|stop| *stop))
        .await
        .expect("receiver turns true after SIGTERM")
        .unwrap();
    let stats = tokio::time::timeout(Duration::from_secs(5), watcher)
        .await
        .expect("run() returns within 5 s")
        .unwrap()
        .unwrap();
    assert_eq!(stats.offered, 0);
}
