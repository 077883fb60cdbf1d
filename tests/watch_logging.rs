//! Sink errors are logged with structured `path` and `error` fields, and a file name with
//! control characters cannot forge a log line. Own test binary: it installs the global
//! tracing subscriber.

use std::io::Write;
use std::path::Path;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use tokio::sync::watch;
use turnbook::watch::{FileSink, WatchFolder, run};

#[derive(Clone, Default)]
struct Captured(Arc<Mutex<Vec<u8>>>);

impl Write for Captured {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.0.lock().unwrap().extend_from_slice(buf);
        Ok(buf.len())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

impl Captured {
    fn text(&self) -> String {
        String::from_utf8_lossy(&self.0.lock().unwrap()).into_owned()
    }
}

struct Refuses;

impl FileSink for Refuses {
    fn ingest(&self, _folder: &WatchFolder, path: &Path) -> anyhow::Result<()> {
        anyhow::bail!("no profile column in {}", path.display())
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sink_errors_are_logged_with_path_and_error_and_names_are_escaped() {
    let captured = Captured::default();
    let writer = captured.clone();
    tracing_subscriber::fmt()
        .with_ansi(false)
        .with_max_level(tracing::Level::INFO)
        .with_writer(move || writer.clone())
        .init();

    let dir = tempfile::tempdir().unwrap();
    // A name that tries to start a forged log line of its own.
    let name = "run-7\nERROR forged entry.csv";
    std::fs::write(dir.path().join(name), b"1").unwrap();
    let mut folder = WatchFolder::new(dir.path(), "ftir");
    folder.settle = 200;
    let (stop, rx) = watch::channel(false);
    let task = tokio::spawn(run(vec![folder], Arc::new(Refuses), rx));

    let until = Instant::now() + Duration::from_secs(3);
    while !captured.text().contains("file not ingested") {
        assert!(
            Instant::now() < until,
            "no error logged: {}",
            captured.text()
        );
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    stop.send(true).unwrap();
    let stats = task.await.unwrap().unwrap();
    assert_eq!(stats.sink_errors, 1);

    let log = captured.text();
    let line = log
        .lines()
        .find(|l| l.contains("file not ingested"))
        .unwrap();
    assert!(line.contains("ERROR"), "{line}");
    assert!(
        line.contains(r#"path="#) && line.contains(r"run-7\nERROR forged entry.csv"),
        "{line}"
    );
    assert!(line.contains("error=no profile column in"), "{line}");
    assert!(line.contains("profile=\"ftir\""), "{line}");
    assert!(
        !log.lines().any(|l| l.starts_with("ERROR forged")),
        "a file name forged a log line:\n{log}"
    );
}
