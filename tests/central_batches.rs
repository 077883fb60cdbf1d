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

#[test]
fn copies_new_events_skips_held_ones_and_rolls_back_a_batch_out_of_turn() {
    let Some(server) = pg::server() else { return };
    let url = pg::fresh_database(&server, "batches");
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .unwrap();
    rt.block_on(async {
        let target = Target {
            url: url.clone(),
            password: None,
            ca_file: None,
        };
        let mut client = central::connect(&target).await.unwrap();
        central::prepare(&mut client).await.unwrap();
        central::register_site(&client, "t", None).await.unwrap();
        central::prepare_writer(&client).await.unwrap();
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
