//! A real PostgreSQL for the central-store tests: the server named by TURNBOOK_TEST_PG
//! (a URL to a database the tests may create databases from), and, for the tests that kill
//! and restart it, its data folder in TURNBOOK_TEST_PG_DATA. `.ci/run` starts one on
//! loopback. Without TURNBOOK_TEST_PG the tests say why and pass, unless CI is set.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
pub mod tls;

use std::process::{Command, Output};
use std::time::{Duration, Instant};

/// The test server, or None (with the reason printed) when none is configured outside CI.
pub fn server() -> Option<String> {
    match std::env::var("TURNBOOK_TEST_PG") {
        Ok(url) if !url.trim().is_empty() => Some(url),
        _ => {
            let ci = std::env::var("CI").is_ok_and(|v| v == "true" || v == "1");
            assert!(
                !ci,
                "CI is set but TURNBOOK_TEST_PG is not: .ci/run must start PostgreSQL"
            );
            eprintln!(
                "skipped: set TURNBOOK_TEST_PG to a PostgreSQL URL (see .ci/run) to run the \
                 central-store tests"
            );
            None
        }
    }
}

fn runtime() -> tokio::runtime::Runtime {
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .unwrap()
}

/// Run SQL statements on the database at `url`.
pub fn sql(url: &str, statements: &str) {
    runtime().block_on(async {
        let (client, conn) = tokio_postgres::connect(url, tokio_postgres::NoTls)
            .await
            .unwrap();
        tokio::spawn(conn);
        client.batch_execute(statements).await.unwrap();
    });
}

/// The first column of every row of `query` (cast to text by the caller) at `url`.
pub fn column(url: &str, query: &str) -> Vec<Option<String>> {
    runtime().block_on(async {
        let (client, conn) = tokio_postgres::connect(url, tokio_postgres::NoTls)
            .await
            .unwrap();
        tokio::spawn(conn);
        let rows = client.query(query, &[]).await.unwrap();
        rows.iter().map(|r| r.get(0)).collect()
    })
}

/// The first column of `query`'s one row, as an integer; None while the server is away.
pub fn try_count(url: &str, query: &str) -> Option<i64> {
    runtime().block_on(async {
        let (client, conn) = tokio_postgres::connect(url, tokio_postgres::NoTls)
            .await
            .ok()?;
        tokio::spawn(conn);
        client.query_one(query, &[]).await.ok().map(|r| r.get(0))
    })
}

/// A new, empty database on the test server for one test; its URL.
pub fn fresh_database(server: &str, name: &str) -> String {
    let db = format!("tb_{name}_{}", std::process::id());
    sql(
        server,
        &format!("DROP DATABASE IF EXISTS {db} WITH (FORCE)"),
    );
    sql(server, &format!("CREATE DATABASE {db}"));
    let (base, _) = server.rsplit_once('/').expect("a URL ending in /DBNAME");
    format!("{base}/{db}")
}

/// The reactor profile of the tests: one-line exports of batch, lot and conversion.
const PROFILE: &str = r#"
[profiles.reactor]
kind = "cycles"
delimiter = ","
decimal = "."
encoding = "utf-8"
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.conversion = { header = "Conversion", unit = "%" }

[[folders]]
path = "exports"
profile = "reactor"
"#;

/// A site's folder under `root`: configuration (site id, central store, small batches so
/// that shipping takes a while), an export folder. Returns the configuration's path.
pub fn site(root: &Path, id: &str, url: &str, batch: usize) -> PathBuf {
    let dir = root.join(id);
    std::fs::create_dir_all(dir.join("exports")).unwrap();
    let text = format!(
        "database = \"t.db\"\nquarantine = \"quarantine\"\ntime_zone = \"Europe/Berlin\"\n\
         [site]\nid = \"{id}\"\n[central]\nurl = \"{url}\"\nbatch_events = {batch}\n\
         interval_seconds = 1\n{PROFILE}"
    );
    let path = dir.join("turnbook.toml");
    std::fs::write(&path, text).unwrap();
    path
}

/// The center's configuration: the store and each site's key file.
pub fn center(root: &Path, url: &str, sites: &[&str]) -> PathBuf {
    let dir = root.join("center");
    std::fs::create_dir_all(&dir).unwrap();
    let keys: Vec<String> = sites
        .iter()
        .map(|s| format!("{s} = \"{}\"", root.join(s).join("turnbook.key").display()))
        .collect();
    let text = format!(
        "[central]\nurl = \"{url}\"\n[central.site_keys]\n{}\n",
        keys.join("\n")
    );
    let path = dir.join("turnbook.toml");
    std::fs::write(&path, text).unwrap();
    path
}

/// Write export files `from..to` of a site (each a new batch of one of three lots).
pub fn exports(config: &Path, site: &str, from: usize, to: usize) {
    let dir = config.parent().unwrap().join("exports");
    for i in from..to {
        let text = format!(
            "Batch,Lot,Conversion\n{site}-B{i:05},{site}-L{},{}.5\n",
            i % 3,
            40 + i % 50
        );
        std::fs::write(dir.join(format!("x{i:05}.csv")), text).unwrap();
    }
}

/// Run the built binary with `args` (the caller's central URL and log filter removed).
pub fn turnbook(config: &Path, args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .arg("--config")
        .arg(config)
        .args(args)
        .env_remove("TURNBOOK_CENTRAL_URL")
        .env_remove("TURNBOOK_CENTRAL_PASSWORD")
        .env_remove("TURNBOOK_SMTP_URL")
        .env_remove("RUST_LOG")
        .output()
        .unwrap()
}

/// Ingest every export of the site (a backfill); panics when it fails.
pub fn ingest(config: &Path) {
    let dir = config.parent().unwrap().join("exports");
    let out = turnbook(config, &["ingest", dir.to_str().unwrap()]);
    assert!(out.status.success(), "{out:?}");
}

/// Events in a site's database.
pub fn local_events(config: &Path) -> i64 {
    let db = config.parent().unwrap().join("t.db");
    let conn = rusqlite::Connection::open(db).unwrap();
    conn.query_row("SELECT count(*) FROM events", [], |r| r.get(0))
        .unwrap()
}

/// Wait up to `limit` for `done`, polling.
pub fn wait_for(limit: Duration, mut done: impl FnMut() -> bool) -> bool {
    let start = Instant::now();
    while start.elapsed() < limit {
        if done() {
            return true;
        }
        std::thread::sleep(Duration::from_millis(100));
    }
    done()
}

/// The test server's data folder and control, for killing and restarting it.
pub struct Control {
    data: PathBuf,
    pg_ctl: PathBuf,
}

impl Control {
    /// From TURNBOOK_TEST_PG_DATA and the PostgreSQL binaries (TURNBOOK_TEST_PG_BIN, else
    /// Debian's newest under /usr/lib/postgresql).
    pub fn from_env() -> Option<Control> {
        let data = PathBuf::from(std::env::var_os("TURNBOOK_TEST_PG_DATA")?);
        let bin = match std::env::var_os("TURNBOOK_TEST_PG_BIN") {
            Some(b) => PathBuf::from(b),
            None => {
                let mut versions: Vec<PathBuf> = std::fs::read_dir("/usr/lib/postgresql")
                    .ok()?
                    .filter_map(|e| e.ok().map(|e| e.path().join("bin")))
                    .collect();
                versions.sort();
                versions.pop()?
            }
        };
        Some(Control {
            data,
            pg_ctl: bin.join("pg_ctl"),
        })
    }

    /// SIGKILL the postmaster (its children end when they see it gone).
    pub fn kill(&self) {
        let pidfile = std::fs::read_to_string(self.data.join("postmaster.pid")).unwrap();
        let pid: i32 = pidfile.lines().next().unwrap().trim().parse().unwrap();
        let rc = unsafe { libc::kill(pid, libc::SIGKILL) };
        assert_eq!(rc, 0, "cannot SIGKILL the server {pid}");
    }

    /// Start the server again (crash recovery), as the data folder's owner when root.
    pub fn start(&self) {
        use std::os::unix::fs::MetadataExt;
        let owner = std::fs::metadata(&self.data).unwrap().uid();
        let log = self.data.with_extension("restart.log");
        for _ in 0..30 {
            let mut cmd = if unsafe { libc::geteuid() } == 0 && owner != 0 {
                let mut c = Command::new("setpriv");
                let gid = std::fs::metadata(&self.data).unwrap().gid();
                c.args([
                    format!("--reuid={owner}"),
                    format!("--regid={gid}"),
                    "--clear-groups".into(),
                ])
                .arg(&self.pg_ctl);
                c
            } else {
                Command::new(&self.pg_ctl)
            };
            let out = cmd
                .arg("-D")
                .arg(&self.data)
                .arg("-l")
                .arg(&log)
                .args(["-w", "-t", "30", "start"])
                .output()
                .unwrap();
            if out.status.success() {
                return;
            }
            // The killed server's children may still hold its shared memory for a moment.
            std::thread::sleep(Duration::from_millis(500));
        }
        panic!("the test server did not start again; see {}", log.display());
    }
}

/// Every row of `query` at `url`, each column cast to text by the caller.
pub fn rows(url: &str, query: &str) -> Vec<Vec<Option<String>>> {
    runtime().block_on(async {
        let (client, conn) = tokio_postgres::connect(url, tokio_postgres::NoTls)
            .await
            .unwrap();
        tokio::spawn(conn);
        let rows = client.query(query, &[]).await.unwrap();
        rows.iter()
            .map(|r| (0..r.len()).map(|i| r.get(i)).collect())
            .collect()
    })
}
