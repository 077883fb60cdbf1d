//! Delivery against a real SMTP server on loopback: Python's aiosmtpd, started from the
//! test with tests/smtp_sink.py. Install it with `apt-get install python3-aiosmtpd`
//! (Debian) or `pip install aiosmtpd`; set TURNBOOK_TEST_PYTHON to pick the interpreter.
//! Without it the test is skipped, unless CI is set, where it fails.

mod common;

use std::io::{BufRead, BufReader};
use std::net::TcpListener;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};

use chrono::{DateTime, Duration, Utc};
use mail_parser::MessageParser;
use rusqlite::Connection;
use turnbook::alert::{AlertRules, LotSnapshot, evaluate};
use turnbook::alert::{EvidenceRow, Recipients};
use turnbook::mail::deliver_due;
use turnbook::mail::{MailConfig, Security, TransportKind};
use turnbook::store::outbox::enqueue;

struct Sink {
    child: Child,
}

impl Sink {
    fn start(python: &str, port: u16, out: &Path) -> Result<Sink, String> {
        let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/smtp_sink.py");
        let mut child = Command::new(python)
            .arg(&script)
            .arg(port.to_string())
            .arg(out)
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .spawn()
            .map_err(|e| format!("cannot run {python}: {e}"))?;
        let stdout = child.stdout.take().ok_or("no stdout")?;
        let mut line = String::new();
        BufReader::new(stdout)
            .read_line(&mut line)
            .map_err(|e| e.to_string())?;
        if line.trim() != "ready" {
            let _ = child.kill();
            return Err(format!("SMTP sink did not start (said {line:?})"));
        }
        Ok(Sink { child })
    }

    fn stop(mut self) {
        drop(self.child.stdin.take()); // closing stdin stops the server
        let _ = self.child.wait();
    }
}

impl Drop for Sink {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

/// Messages received by the server: (envelope recipients, raw message).
fn received(out: &Path) -> Vec<(Vec<String>, Vec<u8>)> {
    let mut v = Vec::new();
    for e in std::fs::read_dir(out).unwrap() {
        let p = e.unwrap().path();
        if p.extension().is_some_and(|x| x == "eml") {
            let env: serde_json::Value =
                serde_json::from_slice(&std::fs::read(p.with_extension("json")).unwrap()).unwrap();
            let to = env["to"]
                .as_array()
                .unwrap()
                .iter()
                .map(|x| x.as_str().unwrap().to_string())
                .collect();
            v.push((to, std::fs::read(&p).unwrap()));
        }
    }
    v
}

fn snap(lot: &str) -> LotSnapshot {
    LotSnapshot {
        lot: lot.into(),
        catalyst: "immobilised lipase".into(),
        metal: "-".into(),
        site: "South".into(),
        cycles_done: 9,
        latest_activity: Some(0.41),
        criterion: 0.5,
        forecast: None,
        next_batch: None,
        abrupt: None,
        metal_in_product: None,
        metal_loss_fraction: None,
        economic_cycle: None,
        quarantined: vec![],
        evidence: vec![EvidenceRow {
            cycle: 9,
            value: 0.41,
            source_file: "gc/run9.csv".into(),
            sha256: "ab".repeat(32),
        }],
    }
}

fn queue(db: &Path, lots: &[&str], now: &str) {
    let rules = AlertRules {
        recipients: Recipients {
            chemists: vec!["chem@example.org".into()],
            managers: vec!["boss@example.org".into()],
            qa: vec![],
        },
        ..AlertRules::default()
    };
    let mut conn = Connection::open(db).unwrap();
    let tx = conn.transaction().unwrap();
    for lot in lots {
        enqueue(&tx, &evaluate(&snap(lot), &rules), now).unwrap();
    }
    tx.commit().unwrap();
}

fn t(s: &str) -> DateTime<Utc> {
    DateTime::parse_from_rfc3339(s).unwrap().with_timezone(&Utc)
}

#[tokio::test]
async fn delivers_through_a_real_server_waits_while_down_and_never_twice() {
    if std::env::var_os("TURNBOOK_SMTP_URL").is_some() {
        eprintln!("skipped: TURNBOOK_SMTP_URL is set and would override the test server");
        return;
    }
    let Some(python) = common::python_with_aiosmtpd() else {
        let msg =
            "aiosmtpd not available (apt-get install python3-aiosmtpd or pip install aiosmtpd)";
        assert!(std::env::var_os("CI").is_none(), "{msg}");
        eprintln!("skipped: {msg}");
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let db: PathBuf = dir.path().join("t.db");
    // The whole schema: every outbox change is also an event of the chain.
    drop(turnbook::store::open(&db).unwrap());
    let out = dir.path().join("received");
    let port = free_port();
    let cfg = MailConfig {
        transport: TransportKind::Smtp,
        host: Some("127.0.0.1".into()),
        port: Some(port),
        security: Security::Plain,
        from: "turnbook@plant.example.org".into(),
        timeout_seconds: 5,
        ..MailConfig::default()
    };

    // 1. server up: messages arrive with the right envelope, subject and body
    let sink = Sink::start(&python, port, &out).unwrap_or_else(|e| panic!("{e}"));
    queue(
        &db,
        &["LIP-1", "LIP-2\r\nX-Injected: 1 Ünïcode <b>"],
        "2026-12-01T08:00:00Z",
    );
    let r = deliver_due(&db, &cfg, t("2026-12-01T08:00:01Z"))
        .await
        .unwrap();
    assert_eq!((r.attempted, r.delivered, r.failed), (2, 2, 0));
    let got = received(&out);
    assert_eq!(got.len(), 2);
    let mut subjects = Vec::new();
    for (to, raw) in &got {
        assert_eq!(to, &vec!["chem@example.org", "boss@example.org"]);
        let m = MessageParser::default().parse(raw).unwrap();
        assert!(m.headers().iter().all(|h| h.name() != "X-Injected"));
        assert!(
            m.body_text(0)
                .unwrap()
                .contains("Newest activity 0.41 at cycle 9")
        );
        assert!(m.body_html(0).unwrap().contains("pyrophoric"));
        subjects.push(m.subject().unwrap().to_string());
    }
    subjects.sort();
    assert_eq!(
        subjects,
        vec![
            "[critical] LIP-1: activity 0.41 below the replacement criterion at cycle 9",
            "[critical] LIP-2 X-Injected: 1 Ünïcode <b>: activity 0.41 below the replacement \
             criterion at cycle 9",
        ]
    );
    let conn = Connection::open(&db).unwrap();
    let reply: String = conn
        .query_row(
            "SELECT server_reply FROM alert_outbox WHERE id = 1",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert!(reply.starts_with("250 2.0.0 stored as"), "{reply}");

    // 2. server down: new alerts wait, attempts and errors are recorded, backoff holds
    sink.stop();
    queue(&db, &["LIP-3", "LIP-4", "LIP-5"], "2026-12-01T09:00:00Z");
    let down = t("2026-12-01T09:00:01Z");
    let r = deliver_due(&db, &cfg, down).await.unwrap();
    assert_eq!((r.attempted, r.delivered, r.failed), (3, 0, 3));
    let rows: Vec<(i64, String, Option<String>)> = conn
        .prepare(
            "SELECT attempts, next_attempt_at, last_error FROM alert_outbox \
             WHERE delivered_at IS NULL ORDER BY id",
        )
        .unwrap()
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .unwrap()
        .map(Result::unwrap)
        .collect();
    assert_eq!(rows.len(), 3);
    for (attempts, next, err) in &rows {
        assert_eq!(*attempts, 1);
        assert_eq!(next, "2026-12-01T09:00:31.000Z");
        assert!(err.is_some());
    }
    // not due yet: nothing attempted
    let r = deliver_due(&db, &cfg, down + Duration::seconds(10))
        .await
        .unwrap();
    assert_eq!(r.attempted, 0);
    // second failure doubles the wait
    let r = deliver_due(&db, &cfg, down + Duration::seconds(30))
        .await
        .unwrap();
    assert_eq!(r.failed, 3);
    let (attempts, next): (i64, String) = conn
        .query_row(
            "SELECT attempts, next_attempt_at FROM alert_outbox WHERE id = 3",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!((attempts, next.as_str()), (2, "2026-12-01T09:01:31.000Z"));

    // 3. server back: each waiting alert delivered exactly once, counted at the server
    let sink = Sink::start(&python, port, &out).unwrap_or_else(|e| panic!("{e}"));
    let later = down + Duration::minutes(5);
    let r = deliver_due(&db, &cfg, later).await.unwrap();
    assert_eq!((r.attempted, r.delivered, r.failed), (3, 3, 0));
    for k in 1..=3 {
        let r = deliver_due(&db, &cfg, later + Duration::hours(k))
            .await
            .unwrap();
        assert_eq!(r.attempted, 0);
    }
    // the same conditions evaluated again queue nothing new
    queue(&db, &["LIP-1", "LIP-3"], "2026-12-01T12:00:00Z");
    let r = deliver_due(&db, &cfg, later + Duration::hours(4))
        .await
        .unwrap();
    assert_eq!(r.attempted, 0);
    sink.stop();

    let got = received(&out);
    assert_eq!(got.len(), 5);
    let mut ids: Vec<String> = got
        .iter()
        .map(|(_, raw)| {
            MessageParser::default()
                .parse(raw)
                .unwrap()
                .message_id()
                .unwrap()
                .to_string()
        })
        .collect();
    ids.sort();
    ids.dedup();
    assert_eq!(ids.len(), 5, "every message delivered once");
    let delivered: i64 = conn
        .query_row(
            "SELECT count(*) FROM alert_outbox WHERE delivered_at IS NOT NULL",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(delivered, 5);

    // Every queueing, failure and delivery is an event: the outbox replays exactly, and a
    // delivery forged on a row the events say failed is named.
    let kinds: Vec<(String, i64)> = conn
        .prepare("SELECT kind, COUNT(*) FROM events GROUP BY kind ORDER BY kind")
        .unwrap()
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
        .unwrap()
        .map(Result::unwrap)
        .collect();
    assert_eq!(
        kinds,
        vec![
            ("alert-queued".to_string(), 5),
            ("mail-outcome".to_string(), 11),
            ("outbox-chained".to_string(), 1),
        ]
    );
    let v = turnbook::audit::verify(&conn).unwrap();
    assert!(v.ok(), "{:?}", v.findings);
    conn.execute("UPDATE alert_outbox SET attempts = 1 WHERE id = 3", [])
        .unwrap();
    let v = turnbook::audit::verify(&conn).unwrap();
    assert_eq!(v.findings.len(), 1, "{:?}", v.findings);
    let f = &v.findings[0];
    assert_eq!(
        (
            f.table.as_str(),
            f.row.as_str(),
            f.field.as_str(),
            f.stored.as_str(),
            f.expected.as_str()
        ),
        ("alert_outbox", "3", "attempts", "1", "3")
    );
}
