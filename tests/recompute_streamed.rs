//! A registered lot of very many cycles is recomputed by streaming its cycles from the
//! store (two passes, one cycle in memory at a time) instead of holding them all. What that
//! recompute stores — the fit, the lot's line, its alert snapshot, its figures and every
//! cycle's — must be what the held state gives. Both are computed here for every lot of
//! the demonstration plant (a step with its hints, metal in the product, feed lots, several
//! instruments per batch), the streamed one forced at any size, also after a cycle is
//! excluded.

mod common;
use common::run;

fn lots(cfg: &turnbook::config::Config) -> Vec<String> {
    let conn = rusqlite::Connection::open(cfg.database_path()).unwrap();
    let mut stmt = conn.prepare("SELECT lot FROM lots ORDER BY lot").unwrap();
    stmt.query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
}

fn compare_every_lot(cfg: &turnbook::config::Config) -> usize {
    let mut compared = 0;
    for lot in lots(cfg) {
        let held = turnbook::notebook::recomputed_outputs(cfg, &lot, false).unwrap();
        let streamed = turnbook::notebook::recomputed_outputs(cfg, &lot, true).unwrap();
        let (Some(held), Some(streamed)) = (held, streamed) else {
            continue;
        };
        for (h, s) in held.lines().zip(streamed.lines()) {
            assert_eq!(h, s, "lot {lot}: the streamed recompute differs");
        }
        assert_eq!(held, streamed, "lot {lot}");
        compared += 1;
    }
    compared
}

#[test]
fn the_streamed_recompute_stores_what_the_held_state_gives() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("plant");
    let out = run(&["demo", "--dir", dir.to_str().unwrap(), "--no-live"]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let toml = dir.join("turnbook.toml");
    let cfg = turnbook::config::Config::load(&toml).unwrap();
    assert!(
        compare_every_lot(&cfg) >= 3,
        "the demo registers three lots or more"
    );
    // The Pt lot's step shows hints; the held and streamed states must give the same ones.
    let held = turnbook::notebook::recomputed_outputs(&cfg, "PT-AL-2610-B", false).unwrap();
    assert!(held.is_some_and(|h| h.contains("\"hints\"")));

    // An excluded cycle leaves the series but stays in the totals.
    let batch = {
        let conn = rusqlite::Connection::open(cfg.database_path()).unwrap();
        conn.query_row(
            "SELECT batch_id FROM cycles WHERE lot = 'PD-C-2611-A' ORDER BY cycle_no LIMIT 1 OFFSET 3",
            [],
            |r| r.get::<_, String>(0),
        )
        .unwrap()
    };
    let out = run(&[
        "--config",
        toml.to_str().unwrap(),
        "exclude",
        &batch,
        "--reason",
        "feed drum contaminated (a test)",
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(compare_every_lot(&cfg) >= 3);
}
