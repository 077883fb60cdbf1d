//! The folder watcher against real folders, real file events and a sink that records calls.
//! Settle times are kept short (200–500 ms) so the whole file runs in a few seconds.

use std::fs;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant, SystemTime};

use tokio::sync::watch;
use tokio::task::JoinHandle;
use turnbook::watch::{FileSink, WatchFolder, WatchMode, WatchStats, run, write_slowly};

/// One sink call as seen by the sink.
#[derive(Debug, Clone)]
struct Call {
    path: PathBuf,
    profile: String,
    /// File size when the sink was called: proves the file was complete when offered.
    size: u64,
    started: Instant,
}

/// Records every call; can fail on chosen names and take its time, like a busy database.
#[derive(Default)]
struct Recorder {
    calls: Mutex<Vec<Call>>,
    /// Entries reported as refused: name and reason.
    refused: Mutex<Vec<(String, String)>>,
    fail_on: Vec<String>,
    delay: Duration,
}

impl FileSink for Recorder {
    fn ingest(&self, folder: &WatchFolder, path: &Path) -> anyhow::Result<()> {
        let size = fs::metadata(path)?.len();
        self.calls.lock().unwrap().push(Call {
            path: path.to_path_buf(),
            profile: folder.profile.clone(),
            size,
            started: Instant::now(),
        });
        std::thread::sleep(self.delay);
        let name = path.file_name().and_then(|n| n.to_str()).unwrap_or("");
        if self.fail_on.iter().any(|f| f == name) {
            anyhow::bail!("cannot parse {name}: line 3, column 2: expected a number");
        }
        Ok(())
    }

    fn refuse(&self, _folder: &WatchFolder, path: &Path, reason: &str) -> anyhow::Result<()> {
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        self.refused
            .lock()
            .unwrap()
            .push((name, reason.to_string()));
        Ok(())
    }
}

impl Recorder {
    fn refused(&self) -> Vec<(String, String)> {
        let mut r = self.refused.lock().unwrap().clone();
        r.sort();
        r
    }

    fn calls(&self) -> Vec<Call> {
        self.calls.lock().unwrap().clone()
    }

    fn names(&self) -> Vec<String> {
        self.calls()
            .iter()
            .map(|c| c.path.file_name().unwrap().to_string_lossy().into_owned())
            .collect()
    }

    /// Waits until at least `n` calls were made, or fails the test after `limit`.
    async fn wait_for(&self, n: usize, limit: Duration) {
        let until = Instant::now() + limit;
        while self.calls.lock().unwrap().len() < n {
            assert!(
                Instant::now() < until,
                "expected {n} sink calls within {limit:?}, got {:?}",
                self.names()
            );
            tokio::time::sleep(Duration::from_millis(20)).await;
        }
    }
}

struct Running {
    stop: watch::Sender<bool>,
    task: JoinHandle<anyhow::Result<WatchStats>>,
}

impl Running {
    async fn stop(self) -> WatchStats {
        self.stop.send(true).unwrap();
        tokio::time::timeout(Duration::from_secs(5), self.task)
            .await
            .expect("run() returns within 5 s of shutdown")
            .unwrap()
            .unwrap()
    }
}

fn start(folders: Vec<WatchFolder>, sink: Arc<Recorder>) -> Running {
    let (stop, rx) = watch::channel(false);
    let task = tokio::spawn(run(folders, sink, rx));
    Running { stop, task }
}

fn folder(dir: &Path, settle_ms: u64) -> WatchFolder {
    let mut f = WatchFolder::new(dir, "hplc-line-2");
    f.settle = settle_ms;
    f
}

/// Gives the watcher time to install its watches before a test writes files.
async fn warm_up() {
    tokio::time::sleep(Duration::from_millis(300)).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn slowly_written_file_is_offered_once_after_its_last_chunk() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Recorder::default());
    let running = start(vec![folder(dir.path(), 400)], sink.clone());
    warm_up().await;

    let data: Vec<u8> = b"batch;conversion\n"
        .iter()
        .copied()
        .cycle()
        .take(3000)
        .collect();
    let path = dir.path().join("batch-0042.csv");
    let writer_path = path.clone();
    let writer_data = data.clone();
    // 30 chunks over 3 s: a pause of ~100 ms, shorter than the settle time.
    let finished = tokio::task::spawn_blocking(move || {
        write_slowly(&writer_path, &writer_data, 30, Duration::from_secs(3)).unwrap();
        Instant::now()
    })
    .await
    .unwrap();

    sink.wait_for(1, Duration::from_secs(3)).await;
    tokio::time::sleep(Duration::from_millis(1000)).await;
    let calls = sink.calls();
    assert_eq!(calls.len(), 1, "offered once: {calls:?}");
    assert_eq!(calls[0].size, data.len() as u64, "offered complete");
    assert!(
        calls[0].started >= finished,
        "offered only after the last chunk"
    );
    assert_eq!(calls[0].profile, "hplc-line-2");
    let stats = running.stop().await;
    assert_eq!(
        stats,
        WatchStats {
            offered: 1,
            sink_errors: 0
        }
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn close_after_write_does_not_wait_for_the_settle_time() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Recorder::default());
    // A long settle time: only the close-after-write path can offer the file quickly.
    let running = start(vec![folder(dir.path(), 5000)], sink.clone());
    warm_up().await;
    let written = Instant::now();
    fs::write(dir.path().join("icp-17.csv"), b"Pd;0.8\n").unwrap();
    sink.wait_for(1, Duration::from_millis(2500)).await;
    assert!(sink.calls()[0].started - written < Duration::from_millis(2500));
    running.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn poll_mode_picks_up_new_and_growing_files() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Recorder::default());
    let mut f = folder(dir.path(), 300);
    f.mode = WatchMode::Poll;
    f.poll_interval = 1;
    let running = start(vec![f], sink.clone());
    warm_up().await;

    fs::write(dir.path().join("balance-1.txt"), b"12.345 g\n").unwrap();
    sink.wait_for(1, Duration::from_secs(4)).await;

    // 20 chunks over 2 s (~105 ms apart, below the settle time) seen only by scans/timers.
    let path = dir.path().join("balance-2.txt");
    let data = vec![b'7'; 2000];
    let writer_path = path.clone();
    let writer_data = data.clone();
    let finished = tokio::task::spawn_blocking(move || {
        write_slowly(&writer_path, &writer_data, 20, Duration::from_secs(2)).unwrap();
        Instant::now()
    })
    .await
    .unwrap();
    sink.wait_for(2, Duration::from_secs(4)).await;
    tokio::time::sleep(Duration::from_millis(1500)).await;
    let calls = sink.calls();
    assert_eq!(
        sink.names(),
        vec!["balance-1.txt", "balance-2.txt"],
        "{calls:?}"
    );
    assert_eq!(calls[1].size, 2000);
    assert!(calls[1].started >= finished);
    assert_eq!(running.stop().await.offered, 2);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn files_present_at_start_are_offered_oldest_first() {
    let dir = tempfile::tempdir().unwrap();
    fs::create_dir(dir.path().join("week-48")).unwrap();
    let epoch = SystemTime::now() - Duration::from_secs(86_400);
    // Names in the opposite order of their modification times.
    for (name, age_s) in [("a.csv", 10), ("b.csv", 20), ("week-48/c.csv", 30)] {
        let p = dir.path().join(name);
        fs::write(&p, name.as_bytes()).unwrap();
        let file = fs::File::options().write(true).open(&p).unwrap();
        file.set_modified(epoch - Duration::from_secs(age_s))
            .unwrap();
    }
    fs::write(dir.path().join("notes.tmp"), b"x").unwrap();
    let sink = Arc::new(Recorder::default());
    let mut f = folder(dir.path(), 200);
    f.recursive = true;
    let running = start(vec![f], sink.clone());
    sink.wait_for(3, Duration::from_secs(3)).await;
    tokio::time::sleep(Duration::from_millis(500)).await;
    assert_eq!(sink.names(), vec!["c.csv", "b.csv", "a.csv"]);
    assert_eq!(running.stop().await.offered, 3);
}

#[cfg(unix)]
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn ignored_names_and_links_leaving_the_folder_are_not_offered() {
    use std::os::unix::fs::symlink;
    let outside = tempfile::tempdir().unwrap();
    let dir = tempfile::tempdir().unwrap();
    fs::write(outside.path().join("payroll.csv"), b"secret").unwrap();
    // Present at start ...
    fs::write(dir.path().join("run-1.csv"), b"1").unwrap();
    fs::write(dir.path().join("run-1.csv.part"), b"1").unwrap();
    symlink(
        outside.path().join("payroll.csv"),
        dir.path().join("escape-1.csv"),
    )
    .unwrap();
    let sink = Arc::new(Recorder::default());
    let running = start(vec![folder(dir.path(), 200)], sink.clone());
    warm_up().await;
    // ... and arriving while running.
    for name in [
        "~lock.csv",
        ".sync-state",
        "RUN-2.TMP",
        "editor.csv.swp",
        "backup.csv~",
    ] {
        fs::write(dir.path().join(name), b"x").unwrap();
    }
    symlink(
        outside.path().join("payroll.csv"),
        dir.path().join("escape-2.csv"),
    )
    .unwrap();
    // A link inside the folder resolves to run-1.csv: link and target are one file.
    symlink(dir.path().join("run-1.csv"), dir.path().join("alias.csv")).unwrap();
    fs::write(dir.path().join("run-3.csv"), b"3").unwrap();

    sink.wait_for(2, Duration::from_secs(3)).await;
    tokio::time::sleep(Duration::from_millis(800)).await;
    let mut names = sink.names();
    names.sort();
    assert_eq!(names, vec!["run-1.csv", "run-3.csv"], "{:?}", sink.calls());
    // The links leading out are not offered, but each is reported once, with where it leads.
    let refused = sink.refused();
    let refused_names: Vec<&str> = refused.iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(
        refused_names,
        vec!["escape-1.csv", "escape-2.csv"],
        "{refused:?}"
    );
    for (_, reason) in &refused {
        assert!(reason.contains("payroll.csv"), "{reason}");
        assert!(reason.contains("outside the folder"), "{reason}");
    }
    running.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_polled_folder_reports_a_pipe_and_a_link_to_a_folder_once() {
    use std::os::unix::fs::symlink;
    let dir = tempfile::tempdir().unwrap();
    fs::create_dir(dir.path().join("archive")).unwrap();
    symlink(dir.path().join("archive"), dir.path().join("archive-link")).unwrap();
    let status = std::process::Command::new("mkfifo")
        .arg(dir.path().join("pipe.csv"))
        .status()
        .unwrap();
    assert!(status.success());
    let inner = dir.path().join("archive").join("kept.csv");
    fs::write(&inner, b"1").unwrap();
    symlink(&inner, dir.path().join("alias-of-kept.csv")).unwrap();
    let mut f = folder(dir.path(), 100);
    f.mode = WatchMode::Poll;
    f.poll_interval = 1;
    let sink = Arc::new(Recorder::default());
    let running = start(vec![f], sink.clone());
    sink.wait_for(1, Duration::from_secs(3)).await;
    // Three scans see the same entries: each is reported once.
    tokio::time::sleep(Duration::from_millis(2300)).await;
    assert_eq!(
        sink.names(),
        vec!["alias-of-kept.csv"],
        "a link inside is followed"
    );
    let refused = sink.refused();
    assert_eq!(refused.len(), 2, "{refused:?}");
    assert_eq!(refused[0].0, "archive-link");
    assert!(refused[0].1.contains("link to a folder"), "{refused:?}");
    assert_eq!(refused[1].0, "pipe.csv");
    assert!(
        refused[1].1.starts_with("a named pipe (FIFO)"),
        "{refused:?}"
    );
    running.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_refused_file_does_not_stop_the_next_one() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Recorder {
        fail_on: vec!["garbled.csv".into()],
        ..Recorder::default()
    });
    let running = start(vec![folder(dir.path(), 200)], sink.clone());
    warm_up().await;
    fs::write(dir.path().join("garbled.csv"), b"\xff\xfe;;").unwrap();
    sink.wait_for(1, Duration::from_secs(3)).await;
    fs::write(dir.path().join("good.csv"), b"batch;1\n").unwrap();
    sink.wait_for(2, Duration::from_secs(3)).await;
    tokio::time::sleep(Duration::from_millis(500)).await;
    assert_eq!(sink.names(), vec!["garbled.csv", "good.csv"]);
    let stats = running.stop().await;
    assert_eq!(
        stats,
        WatchStats {
            offered: 2,
            sink_errors: 1
        }
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn shutdown_lets_the_current_call_finish_and_takes_no_new_file() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Recorder {
        delay: Duration::from_secs(1),
        ..Recorder::default()
    });
    let running = start(vec![folder(dir.path(), 200)], sink.clone());
    warm_up().await;
    fs::write(dir.path().join("first.csv"), b"1").unwrap();
    fs::write(dir.path().join("second.csv"), b"2").unwrap();
    sink.wait_for(1, Duration::from_secs(3)).await;
    let asked = Instant::now();
    let stats = running.stop().await;
    let took = asked.elapsed();
    assert!(took < Duration::from_secs(5), "{took:?}");
    // The call in progress was allowed to finish and is counted ...
    assert_eq!(stats.offered, 1);
    assert!(
        took >= Duration::from_millis(500),
        "returned before the call ended: {took:?}"
    );
    // ... and the queued file was not started.
    tokio::time::sleep(Duration::from_millis(1200)).await;
    assert_eq!(sink.names(), vec!["first.csv"]);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn renames_into_the_folder_count_as_new_files() {
    let staging = tempfile::tempdir_in(std::env::temp_dir()).unwrap();
    let dir = tempfile::tempdir_in(std::env::temp_dir()).unwrap();
    let sink = Arc::new(Recorder::default());
    let running = start(vec![folder(dir.path(), 400)], sink.clone());
    warm_up().await;
    // Written elsewhere, then moved in.
    fs::write(staging.path().join("gc-5.csv"), vec![b'g'; 500]).unwrap();
    fs::rename(staging.path().join("gc-5.csv"), dir.path().join("gc-5.csv")).unwrap();
    // Written under an ignored name, then renamed into place.
    let part = dir.path().join("gc-6.csv.part");
    let writer_part = part.clone();
    tokio::task::spawn_blocking(move || {
        write_slowly(&writer_part, &[b'h'; 800], 5, Duration::from_millis(500)).unwrap()
    })
    .await
    .unwrap();
    fs::rename(&part, dir.path().join("gc-6.csv")).unwrap();
    sink.wait_for(2, Duration::from_secs(3)).await;
    tokio::time::sleep(Duration::from_millis(600)).await;
    let calls = sink.calls();
    assert_eq!(sink.names(), vec!["gc-5.csv", "gc-6.csv"], "{calls:?}");
    assert_eq!((calls[0].size, calls[1].size), (500, 800));
    running.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn new_subfolders_are_watched_in_recursive_mode() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Recorder::default());
    let mut f = folder(dir.path(), 200);
    f.recursive = true;
    let running = start(vec![f], sink.clone());
    warm_up().await;
    let sub = dir.path().join("2026-12-01");
    fs::create_dir(&sub).unwrap();
    // No pause: the file may land before the new folder has its own watch.
    fs::write(sub.join("xrf-1.csv"), b"Pt;12\n").unwrap();
    sink.wait_for(1, Duration::from_secs(3)).await;
    fs::write(sub.join("xrf-2.csv"), b"Pt;11\n").unwrap();
    sink.wait_for(2, Duration::from_secs(3)).await;
    tokio::time::sleep(Duration::from_millis(500)).await;
    assert_eq!(sink.names(), vec!["xrf-1.csv", "xrf-2.csv"]);
    running.stop().await;
}

#[tokio::test]
async fn unusable_configuration_is_refused_at_start() {
    let dir = tempfile::tempdir().unwrap();
    let sink: Arc<Recorder> = Arc::new(Recorder::default());
    let (_tx, rx) = watch::channel(false);

    let missing = vec![folder(&dir.path().join("not-mounted"), 500)];
    let err = run(missing, sink.clone(), rx.clone()).await.unwrap_err();
    assert!(err.to_string().starts_with("folders[0].path:"), "{err}");

    let mut outer = folder(dir.path(), 500);
    outer.recursive = true;
    fs::create_dir(dir.path().join("inner")).unwrap();
    let inner = folder(&dir.path().join("inner"), 500);
    let err = run(vec![outer, inner], sink.clone(), rx.clone())
        .await
        .unwrap_err();
    assert!(err.to_string().contains("overlap"), "{err}");

    let mut bad = folder(dir.path(), 500);
    bad.poll_interval = 0;
    let err = run(vec![bad], sink.clone(), rx).await.unwrap_err();
    assert!(
        err.to_string().starts_with("folders[0].poll_interval:"),
        "{err}"
    );
    assert!(sink.calls().is_empty());
}

#[tokio::test]
async fn already_true_shutdown_returns_at_once() {
    let dir = tempfile::tempdir().unwrap();
    fs::write(dir.path().join("old.csv"), b"1").unwrap();
    let sink = Arc::new(Recorder::default());
    let (_tx, rx) = watch::channel(true);
    let stats = tokio::time::timeout(
        Duration::from_secs(5),
        run(vec![folder(dir.path(), 200)], sink.clone(), rx),
    )
    .await
    .unwrap()
    .unwrap();
    assert_eq!(stats, WatchStats::default());
    assert!(sink.calls().is_empty());
}

/// Panics on one file name, records every call.
struct Panicky(Recorder);

impl FileSink for Panicky {
    fn ingest(&self, folder: &WatchFolder, path: &Path) -> anyhow::Result<()> {
        self.0.ingest(folder, path)?;
        if path.ends_with("crash.csv") {
            panic!("parser bug");
        }
        Ok(())
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_panicking_sink_call_counts_as_an_error_and_the_next_file_is_offered() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Panicky(Recorder::default()));
    let (stop, rx) = watch::channel(false);
    let task = tokio::spawn(run(vec![folder(dir.path(), 200)], sink.clone(), rx));
    warm_up().await;
    fs::write(dir.path().join("crash.csv"), b"1").unwrap();
    sink.0.wait_for(1, Duration::from_secs(3)).await;
    fs::write(dir.path().join("fine.csv"), b"2").unwrap();
    sink.0.wait_for(2, Duration::from_secs(3)).await;
    stop.send(true).unwrap();
    let stats = task.await.unwrap().unwrap();
    assert_eq!(sink.0.names(), vec!["crash.csv", "fine.csv"]);
    assert_eq!(
        stats,
        WatchStats {
            offered: 2,
            sink_errors: 1
        }
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_file_changed_after_its_offer_is_offered_again() {
    let dir = tempfile::tempdir().unwrap();
    let sink = Arc::new(Recorder::default());
    let running = start(vec![folder(dir.path(), 200)], sink.clone());
    warm_up().await;
    let path = dir.path().join("sequence.csv");
    fs::write(&path, b"batch;1\n").unwrap();
    sink.wait_for(1, Duration::from_secs(3)).await;
    // The instrument appends the next batch to the same export.
    let mut file = fs::OpenOptions::new().append(true).open(&path).unwrap();
    std::io::Write::write_all(&mut file, b"batch;2\n").unwrap();
    drop(file);
    sink.wait_for(2, Duration::from_secs(3)).await;
    tokio::time::sleep(Duration::from_millis(500)).await;
    let sizes: Vec<u64> = sink.calls().iter().map(|c| c.size).collect();
    assert_eq!(sizes, vec![8, 16]);
    running.stop().await;
}
