//! Three sites' services ship into one PostgreSQL while it is SIGKILLed mid-stream and
//! restarted; the sites keep ingesting while it is away; in the end every event of every
//! site is there exactly once and the central verify is clean.

mod central_support;

use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use central_support as pg;

const SITES: [&str; 3] = ["north", "south", "east"];
const BACKLOG: usize = 1000;
const WHILE_DOWN: usize = 200;

fn start_service(config: &std::path::Path) -> Child {
    Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .arg("--config")
        .arg(config)
        .arg("watch")
        .env_remove("TURNBOOK_CENTRAL_URL")
        .env_remove("TURNBOOK_SMTP_URL")
        .env("RUST_LOG", "warn,turnbook=info")
        .stdout(Stdio::null())
        .stderr(std::fs::File::create(config.with_extension("log")).unwrap())
        .spawn()
        .unwrap()
}

fn central_total(url: &str) -> Option<i64> {
    pg::try_count(url, "SELECT count(*) FROM turnbook.events")
}

#[test]
fn three_sites_ship_through_a_server_killed_mid_stream() {
    let Some(server) = pg::server() else { return };
    let Some(control) = pg::Control::from_env() else {
        assert!(
            std::env::var("CI").is_err(),
            "CI must set TURNBOOK_TEST_PG_DATA for the restart test"
        );
        eprintln!("skipped: TURNBOOK_TEST_PG_DATA (the server's data folder) is not set");
        return;
    };
    let url = pg::fresh_database(&server, "ship");
    let root = tempfile::tempdir().unwrap();
    let configs: Vec<_> = SITES
        .iter()
        .map(|s| pg::site(root.path(), s, &url, 10))
        .collect();
    for (c, s) in configs.iter().zip(SITES) {
        pg::exports(c, s, 0, BACKLOG);
        pg::ingest(c);
    }
    let local: Vec<i64> = configs.iter().map(|c| pg::local_events(c)).collect();
    let backlog: i64 = local.iter().sum();
    let mut services: Vec<Child> = configs.iter().map(|c| start_service(c)).collect();

    // Kill the server once shipping is under way, before it is done.
    let start = Instant::now();
    let at_kill = loop {
        let n = central_total(&url).unwrap_or(0);
        if n > 0 || start.elapsed() > Duration::from_secs(30) {
            break n;
        }
        std::thread::sleep(Duration::from_millis(10));
    };
    control.kill();
    eprintln!("killed at {:?}: {at_kill} shipped", start.elapsed());
    assert!(
        at_kill > 0 && at_kill < backlog,
        "the kill was to come mid-stream: {at_kill} of {backlog} shipped"
    );
    let down = Instant::now();

    // The sites go on ingesting while the server is away.
    for (c, s) in configs.iter().zip(SITES) {
        pg::exports(c, s, BACKLOG, BACKLOG + WHILE_DOWN);
    }
    let grown = pg::wait_for(Duration::from_secs(30), || {
        configs
            .iter()
            .zip(&local)
            .all(|(c, n)| pg::local_events(c) >= n + WHILE_DOWN as i64)
    });
    eprintln!("grown after {:?}", down.elapsed());
    assert!(grown, "ingestion stalled while the central server was down");
    assert!(central_total(&url).is_none(), "the server was to be down");
    std::thread::sleep(Duration::from_secs(5).saturating_sub(down.elapsed()));
    control.start();
    eprintln!("restarted after {:?}", down.elapsed());

    let local: Vec<i64> = configs.iter().map(|c| pg::local_events(c)).collect();
    let want: i64 = local.iter().sum();
    let caught_up = pg::wait_for(Duration::from_secs(45), || {
        central_total(&url) == Some(want)
    });
    eprintln!("caught up {caught_up} after {:?}", down.elapsed());
    for s in &mut services {
        unsafe { libc::kill(s.id() as i32, libc::SIGTERM) };
    }
    for s in &mut services {
        assert!(s.wait().unwrap().success());
    }
    if !caught_up {
        for c in &configs {
            let log = std::fs::read_to_string(c.with_extension("log")).unwrap_or_default();
            let tail: Vec<&str> = log.lines().rev().take(30).collect();
            eprintln!("--- {}:", c.display());
            for line in tail.iter().rev() {
                eprintln!("{line}");
            }
        }
    }
    assert!(
        caught_up,
        "central holds {:?} events, the sites {want}",
        central_total(&url)
    );
    for (c, s) in configs.iter().zip(SITES) {
        let q = format!(
            "SELECT (count(*) * 1000000 + count(DISTINCT seq) * 1000 + (max(seq) = count(*))::int)::bigint
             FROM turnbook.events WHERE site = '{s}'"
        );
        let n = pg::local_events(c);
        assert_eq!(
            pg::try_count(&url, &q),
            Some(n * 1_000_000 + n * 1000 + 1),
            "site {s}: every event once, numbered 1..{n}"
        );
    }
    eprintln!("stopped after {:?}", down.elapsed());
    let center = pg::center(root.path(), &url, &SITES);
    let out = pg::turnbook(&center, &["central", "verify"]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{text}\n{out:?}");
    for (s, n) in SITES.iter().zip(&local) {
        assert!(
            text.contains(&format!("site {s}: {n} event(s), chain intact")),
            "{text}"
        );
    }
    assert!(!text.contains("NOT"), "{text}");
}
