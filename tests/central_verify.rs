//! The central copy as a witness: a site's newest event deleted after shipping is named by
//! the site's `verify`; an event altered at the center is named by `central verify`; a
//! repeated shipment inserts nothing; the company's lots are listed by site.

mod central_support;

use central_support as pg;

fn stdout(out: &std::process::Output) -> String {
    String::from_utf8_lossy(&out.stdout).into_owned()
}

#[test]
fn a_repeat_ships_nothing_and_a_deleted_newest_event_is_named_by_verify() {
    let Some(server) = pg::server() else { return };
    let url = pg::fresh_database(&server, "deleted");
    let root = tempfile::tempdir().unwrap();
    let cfg = pg::site(root.path(), "west", &url, 7);
    pg::exports(&cfg, "west", 0, 20);
    pg::ingest(&cfg);
    let out = pg::turnbook(&cfg, &["note", "--lot", "west-L1", "filter changed"]);
    assert!(out.status.success(), "{out:?}");
    let n = pg::local_events(&cfg);

    let first = pg::turnbook(&cfg, &["ship"]);
    assert!(first.status.success(), "{first:?}");
    assert!(stdout(&first).contains(&format!("{n} event(s) shipped, 0 already there")));
    let again = pg::turnbook(&cfg, &["ship"]);
    assert!(stdout(&again).contains("0 event(s) shipped"), "{again:?}");
    assert_eq!(
        pg::try_count(&url, "SELECT count(*) FROM turnbook.events"),
        Some(n)
    );
    // Every payload names its site, inside what the hash covers.
    assert_eq!(
        pg::try_count(
            &url,
            "SELECT count(*) FROM turnbook.events WHERE body ->> 'site' = 'west'"
        ),
        Some(n)
    );
    let clean = pg::turnbook(&cfg, &["verify"]);
    assert!(clean.status.success(), "{clean:?}");

    // Someone with the file deletes the newest event and rewrites the witness to match.
    let db = root.path().join("west/t.db");
    let conn = rusqlite::Connection::open(&db).unwrap();
    conn.execute_batch(&format!(
        "DROP TRIGGER events_append_only_delete; DELETE FROM events WHERE seq = {n};"
    ))
    .unwrap();
    let head: String = conn
        .query_row(
            "SELECT seq || ':' || hash FROM events ORDER BY seq DESC LIMIT 1",
            [],
            |r| r.get(0),
        )
        .unwrap();
    std::fs::write(root.path().join("west/turnbook.head"), head).unwrap();

    let out = pg::turnbook(&cfg, &["verify"]);
    let text = stdout(&out);
    assert_eq!(out.status.code(), Some(1), "{text}");
    assert!(
        text.contains(&format!("table events, row {n}, field hash (central copy)"))
            && text.contains("no such event")
            && text.contains("note at"),
        "{text}"
    );
    // And nothing more is shipped onto a chain this database no longer continues.
    let refused = pg::turnbook(&cfg, &["ship"]);
    assert_eq!(refused.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&refused.stderr).contains("were deleted here"));
}

#[test]
fn an_event_altered_at_the_center_is_named_and_lots_are_listed_by_site() {
    let Some(server) = pg::server() else { return };
    let url = pg::fresh_database(&server, "altered");
    let root = tempfile::tempdir().unwrap();
    for s in ["alpha", "beta"] {
        let cfg = pg::site(root.path(), s, &url, 100);
        pg::exports(&cfg, s, 0, 12);
        pg::ingest(&cfg);
        assert!(pg::turnbook(&cfg, &["ship"]).status.success());
    }
    let center = pg::center(root.path(), &url, &["alpha", "beta"]);
    let out = pg::turnbook(&center, &["central", "verify"]);
    assert!(out.status.success(), "{}", stdout(&out));
    assert!(stdout(&out).contains("site beta: 12 event(s), chain intact"));

    let lots = pg::turnbook(&center, &["central", "lots", "--json"]);
    let lots: serde_json::Value = serde_json::from_slice(&lots.stdout).unwrap();
    let rows = lots.as_array().unwrap();
    assert_eq!(rows.len(), 6, "{lots}");
    assert!(
        rows.iter()
            .any(|l| l["site"] == "beta" && l["lot"] == "beta-L1" && l["cycles"] == 4)
    );

    // A value changed at the center, the hash left as it was.
    pg::sql(
        &url,
        "UPDATE turnbook.events SET payload = replace(payload, '\"45.5\"', '\"54.5\"')
         WHERE site = 'beta' AND seq = 6",
    );
    let out = pg::turnbook(&center, &["central", "verify"]);
    let text = stdout(&out);
    assert_eq!(out.status.code(), Some(1), "{text}");
    assert!(
        text.contains("NOT VERIFIED: site beta: first broken link at event 6 (file-ingested")
            && text.contains("site alpha: 12 event(s), chain intact"),
        "{text}"
    );
}
