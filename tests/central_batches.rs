//! One batch's writing at the central store: binary COPY of new events; a batch that meets
//! events held already falls back to the insert that skips them (so a repeat, or a second
//! shipper, inserts each event once); a batch whose turn never comes is rolled back; the
//! payload arrives byte for byte.

mod central_support;

use central_support as pg;
use turnbook::store::central::{self as central, Target};
use turnbook::store::replay::StoredEvent;

fn event(seq: i64) -> StoredEvent {
    StoredEvent {
        seq,
        at: format!("2026-03-01T10:{:02}:00.000Z", seq % 60),
        actor: "tester".into(),
        kind: "note".into(),
        subject: format!("L-{seq}"),
        // Escapes, non-ASCII text and an escaped NUL: the text must come back as it went.
        payload: format!(
            "{{\"kind\":\"note\",\"text\":\"Ümlaut \\\"{seq}\\\" \\u0000 tab\\t\",\"n\":{seq}.50}}"
        ),
        prev_hash: format!("{:064x}", seq - 1),
        hash: format!("{seq:064x}"),
    }
}

fn runtime() -> tokio::runtime::Runtime {
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .unwrap()
}

fn target(url: &str) -> Target {
    Target {
        url: url.to_string(),
        password: None,
        ca_file: None,
    }
}

/// A connection ready to write the site's batches, as a shipper's first one is made.
async fn writer(target: &Target, site: &str) -> tokio_postgres::Client {
    let mut client = central::connect(target).await.unwrap();
    central::prepare(&mut client).await.unwrap();
    central::register_site(&client, site, None).await.unwrap();
    central::prepare_writer(&client).await.unwrap();
    client
}

#[test]
fn copies_new_events_skips_held_ones_and_rolls_back_a_batch_out_of_turn() {
    let Some(server) = pg::server() else { return };
    let url = pg::fresh_database(&server, "batches");
    runtime().block_on(async {
        let target = target(&url);
        let mut client = writer(&target, "t").await;
        let events: Vec<StoredEvent> = (1..=10).map(event).collect();

        let n = central::write_batch(&mut client, "t", &events[..6], async { true }).await;
        assert_eq!(n.unwrap(), Some(6));
        // Events 4..6 are held: the copy fails on them and the fallback adds 7..10 only.
        let n = central::write_batch(&mut client, "t", &events[3..], async { true }).await;
        assert_eq!(n.unwrap(), Some(4));
        let n = central::write_batch(&mut client, "t", &events, async { true }).await;
        assert_eq!(n.unwrap(), Some(0));
        // The batch before never committed: this one is rolled back.
        let more: Vec<StoredEvent> = (11..=12).map(event).collect();
        let n = central::write_batch(&mut client, "t", &more, async { false }).await;
        assert_eq!(n.unwrap(), None);
    });
    let held = pg::rows(
        &url,
        "SELECT seq::text AS n, payload FROM turnbook.events WHERE site = 't' ORDER BY seq",
    );
    assert_eq!(held.len(), 10);
    for (row, e) in held.iter().zip((1..=10).map(event)) {
        assert_eq!(row[0].as_deref(), Some(e.seq.to_string().as_str()));
        assert_eq!(
            row[1].as_deref(),
            Some(e.payload.as_str()),
            "byte-exact payload"
        );
    }
    // The jsonb reading exists for every row (the NUL read as U+FFFD there).
    let parsed = pg::try_count(
        &url,
        "SELECT count(*) FROM turnbook.events WHERE body ->> 'kind' = 'note'",
    );
    assert_eq!(parsed, Some(10));
}

#[test]
fn connections_out_of_range_are_refused_with_the_key_named() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("turnbook.toml");
    for (n, ok) in [(0, false), (1, true), (8, true), (9, false)] {
        std::fs::write(
            &path,
            format!("[central]\nurl = \"postgresql://u@h/db\"\nconnections = {n}\n"),
        )
        .unwrap();
        match turnbook::config::Config::load(&path) {
            Ok(c) => {
                assert!(ok, "connections = {n} accepted");
                assert_eq!(c.central.unwrap().connections, n);
            }
            Err(e) => {
                assert!(!ok, "connections = {n} refused: {e}");
                assert!(e.to_string().contains("central.connections"), "{e}");
            }
        }
    }
}

/// Until a lock on `turnbook.events` is granted to a connection other than the asker's.
async fn wait_for_open_batch(client: &tokio_postgres::Client) {
    for _ in 0..200 {
        let held: i64 = client
            .query_one(
                "SELECT count(*) FROM pg_locks l JOIN pg_class c ON c.oid = l.relation
                 WHERE c.relname = 'events' AND l.mode = 'RowExclusiveLock' AND l.granted
                   AND l.pid <> pg_backend_pid()",
                &[],
            )
            .await
            .unwrap()
            .get(0);
        if held > 0 {
            return;
        }
        tokio::time::sleep(std::time::Duration::from_millis(25)).await;
    }
    panic!("the batch never took its lock on the events table");
}

/// A site connecting while another site's batch is written and waits for its turn does
/// not queue behind that batch (making the schema again would: `CREATE INDEX IF NOT
/// EXISTS` waits for every open insert, and every later insert waits behind it). A store
/// whose record of the schema was lost is made again, and that waits a bounded time.
#[test]
fn connecting_does_not_wait_for_a_batch_in_flight() {
    use std::time::{Duration, Instant};
    let Some(server) = pg::server() else { return };
    let url = pg::fresh_database(&server, "inflight");
    runtime().block_on(async {
        let target = target(&url);
        let mut a = writer(&target, "a").await;
        let (release, turn) = tokio::sync::oneshot::channel::<()>();
        let batch = tokio::spawn(async move {
            let events: Vec<StoredEvent> = (1..=5).map(event).collect();
            let n = central::write_batch(&mut a, "a", &events, async { turn.await.is_ok() }).await;
            (a, n)
        });
        let watcher = central::connect(&target).await.unwrap();
        wait_for_open_batch(&watcher).await;

        let mut b = central::connect(&target).await.unwrap();
        let made = tokio::time::timeout(Duration::from_secs(5), central::prepare(&mut b)).await;
        assert!(
            matches!(made, Ok(Ok(()))),
            "connecting waited for the other site's batch: {made:?}"
        );
        central::register_site(&b, "b", None).await.unwrap();

        // The record of the schema lost: it is made again, which must wait for the open
        // batch, and gives up after its lock timeout rather than holding everyone.
        watcher
            .batch_execute("DELETE FROM turnbook.schema_applied")
            .await
            .unwrap();
        let start = Instant::now();
        let made = tokio::time::timeout(Duration::from_secs(30), central::prepare(&mut b)).await;
        let waited = start.elapsed();
        let Ok(Err(e)) = made else {
            panic!("making the schema beside an open batch: {made:?}")
        };
        assert!(e.to_string().contains("lock timeout"), "{e}");
        assert!(
            waited >= Duration::from_secs(4) && waited < Duration::from_secs(15),
            "{waited:?}"
        );

        let _ = release.send(());
        let (_a, n) = batch.await.unwrap();
        assert_eq!(n.unwrap(), Some(5));
        // With no batch open, it is made again and recorded.
        central::prepare(&mut b).await.unwrap();
    });
    assert_eq!(
        pg::try_count(&url, "SELECT count(*) FROM turnbook.schema_applied"),
        Some(1)
    );
    assert_eq!(
        pg::try_count(
            &url,
            "SELECT count(*) FROM turnbook.events WHERE site = 'a'"
        ),
        Some(5)
    );
}
