//! Shipping rate of a backlog of events into PostgreSQL, and the central verify rate.
//!
//! `TURNBOOK_BENCH_PG=postgresql://postgres@127.0.0.1:PORT/postgres cargo bench --bench
//! central` (TURNBOOK_TEST_PG is taken when TURNBOOK_BENCH_PG is not set;
//! TURNBOOK_BENCH_CONNECTIONS and TURNBOOK_BENCH_BATCH set `[central] connections` and
//! `batch_events`). The backlog
//! (TURNBOOK_BENCH_EVENTS events, default 1,000,000) is written into a new site database
//! as the backfill writes it: one `file-ingested` event per one-line export file, keyed
//! chain, site stamp, 10,000 events a transaction. Then `ship` copies it into a new central
//! database and `central verify` recomputes every link with the site's key.

use std::time::Instant;

use turnbook::model::Payload;
use turnbook::model::chain::ChainKey;
use turnbook::model::event::{FileRow, MeasurementRow};

fn main() {
    let Some(server) = std::env::var("TURNBOOK_BENCH_PG")
        .or_else(|_| std::env::var("TURNBOOK_TEST_PG"))
        .ok()
    else {
        eprintln!("central bench: set TURNBOOK_BENCH_PG to a PostgreSQL URL; not run");
        return;
    };
    let events: i64 = std::env::var("TURNBOOK_BENCH_EVENTS")
        .ok()
        .and_then(|n| n.parse().ok())
        .unwrap_or(1_000_000);
    let dir = tempfile::tempdir().expect("a temporary folder");
    let db_name = format!("tb_bench_{}", std::process::id());
    admin(&server, &format!("CREATE DATABASE {db_name}"));
    let (base, _) = server.rsplit_once('/').expect("a URL ending in /DBNAME");
    let url = format!("{base}/{db_name}");
    // Connections a round writes over (the default, 2, when not set).
    let mut connections = std::env::var("TURNBOOK_BENCH_CONNECTIONS")
        .ok()
        .map(|n| format!("connections = {n}\n"))
        .unwrap_or_default();
    // Events per batch (the default, 5,000, when not set).
    if let Ok(n) = std::env::var("TURNBOOK_BENCH_BATCH") {
        connections.push_str(&format!("batch_events = {n}\n"));
    }
    let key_path = dir.path().join("site.key");
    let cfg_path = dir.path().join("turnbook.toml");
    std::fs::write(
        &cfg_path,
        format!(
            "database = \"t.db\"\n[site]\nid = \"bench\"\n[central]\nurl = \"{url}\"\n\
             {connections}[central.site_keys]\nbench = \"{}\"\n",
            key_path.display()
        ),
    )
    .expect("the configuration written");
    let cfg = turnbook::config::Config::load(&cfg_path).expect("the configuration");
    let key = turnbook::audit::key::create(&key_path).expect("a key");

    let t = Instant::now();
    let bytes = write_backlog(&cfg, key, events);
    println!(
        "backlog: {events} events ({:.0} payload bytes each) written in {:.1} s",
        bytes as f64 / events as f64,
        t.elapsed().as_secs_f64()
    );

    println!("load average before shipping: {}", load());
    let t = Instant::now();
    let r = turnbook::notebook::ship_now(&cfg).expect("shipped");
    let s = t.elapsed().as_secs_f64();
    assert_eq!(r.shipped, events as u64);
    println!(
        "ship: {} events in {s:.1} s = {:.0} events/s",
        r.shipped,
        r.shipped as f64 / s
    );

    println!("load average after shipping: {}", load());
    let t = Instant::now();
    let again = turnbook::notebook::ship_now(&cfg).expect("shipped again");
    println!(
        "ship again (nothing new): {} events in {:.3} s",
        again.shipped,
        t.elapsed().as_secs_f64()
    );

    let t = Instant::now();
    let v = turnbook::notebook::verify_central(&cfg).expect("verified");
    let s = t.elapsed().as_secs_f64();
    assert!(v.ok(), "{v:?}");
    let site = &v.sites[0];
    assert_eq!(site.links_checked, events);
    println!(
        "central verify: {} events, {} links recomputed (keyed), in {s:.1} s = {:.0} events/s",
        site.events,
        site.links_checked,
        site.events as f64 / s
    );
    admin(&server, &format!("DROP DATABASE {db_name} WITH (FORCE)"));
}

/// Write `n` events as a backfill of one-line exports would; the payload bytes in all.
fn write_backlog(cfg: &turnbook::config::Config, key: ChainKey, n: i64) -> usize {
    let mut conn = turnbook::store::open(&cfg.database_path()).expect("the database");
    turnbook::store::site::use_site(&conn, "bench");
    {
        let tx = turnbook::store::immediate(&mut conn).expect("a transaction");
        turnbook::store::events::start_keying(&tx, &key, "2026-01-01T00:00:00.000Z", "bench")
            .expect("keyed");
        tx.commit().expect("committed");
    }
    turnbook::store::events::use_key(&conn, key);
    let mut bytes = 0;
    let mut i = 0;
    while i < n {
        let tx = turnbook::store::immediate(&mut conn).expect("a transaction");
        for _ in 0..10_000.min(n - i) {
            i += 1;
            let p = one_file(i);
            bytes += turnbook::model::chain::canonical(&p).map_or(0, |b| b.len());
            turnbook::store::events::append(&tx, &stamp(i), "bench", &format!("x{i}.csv"), &p)
                .expect("appended");
        }
        tx.commit().expect("committed");
    }
    bytes
}

fn stamp(i: i64) -> String {
    format!(
        "2026-{:02}-{:02}T{:02}:{:02}:00.000Z",
        1 + i % 12,
        1 + i % 28,
        i % 24,
        i % 60
    )
}

/// The event of a one-line export: its file row and its five values.
fn one_file(i: i64) -> Payload {
    let batch = format!("B-{i:07}");
    let row = |j: i64, q: &'static str, v: Option<f64>, text: Option<String>| MeasurementRow {
        id: i * 5 + j,
        batch_id: batch.clone(),
        quantity: q.into(),
        value: v,
        text,
        kind: "observed".into(),
        source_file_id: Some(i),
        line: Some(2),
        col: Some(j + 1),
        raw: Some(format!("{}", 40 + i % 50)),
    };
    Payload::FileIngested {
        file: FileRow {
            id: i,
            sha256: format!("{:064x}", i * 7919),
            path: format!("/plant/exports/reactor-2/x{i:07}.csv"),
            size: 96,
            mtime: Some(stamp(i)),
            profile: Some("reactor".into()),
            site: None,
            seen_at: stamp(i),
            outcome: "ingested".into(),
            error: None,
            rows_new: 5,
            rows_known: 0,
            rows_conflict: 0,
            quarantined: None,
        },
        measurements: vec![
            row(0, "lot", None, Some(format!("L-{}", i % 300))),
            row(1, "cycle_no", Some((i / 300) as f64), None),
            row(2, "started_at", None, Some(stamp(i))),
            row(3, "conversion", Some(0.4 + (i % 50) as f64 / 100.0), None),
            row(4, "temperature_c", Some(60.0 + (i % 7) as f64), None),
        ],
        lots: Vec::new(),
    }
}

/// The 1, 5 and 15 minute load averages.
fn load() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|l| l.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_default()
}

fn admin(url: &str, statement: &str) {
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .expect("a runtime");
    rt.block_on(async {
        let (client, conn) = tokio_postgres::connect(url, tokio_postgres::NoTls)
            .await
            .expect("the bench server");
        tokio::spawn(conn);
        client.batch_execute(statement).await.expect(statement);
    });
}
