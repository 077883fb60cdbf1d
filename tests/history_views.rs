//! Earlier views: a lot's cycles as they stood after any event are rebuilt from the
//! append-only history, and a correction leaves the earlier value visible.

use std::path::Path;

use turnbook::config::Config;
use turnbook::ingest::{CycleRow, LotRow, MeasuredValue, ParsedFile};
use turnbook::model::Quantity;
use turnbook::notebook as lots;
use turnbook::store::{self, records};

fn facts(name: &str) -> records::FileFacts {
    records::FileFacts {
        path: format!("/exports/{name}"),
        sha256: format!("{:0>64}", name.len()),
        size: 10,
        mtime: None,
        profile: Some("p".into()),
        site: None,
        seen_at: "2026-01-01T00:00:00.000Z".into(),
    }
}

fn value(q: Quantity, v: f64) -> MeasuredValue {
    MeasuredValue {
        quantity: q,
        value: v,
        column: 2,
        raw: v.to_string(),
    }
}

fn cycle(n: u32, conv: f64) -> CycleRow {
    CycleRow {
        line: u64::from(n) + 1,
        batch_id: format!("B{n}"),
        lot: Some("L1".into()),
        cycle_no: Some(n),
        started_at: None,
        feed_lot: None,
        values: vec![
            value(Quantity::Conversion, conv),
            value(Quantity::Duration, 3600.0),
            value(Quantity::Substrate, 1.0),
            value(Quantity::Selectivity, 1.0),
        ],
    }
}

#[test]
fn a_lot_as_it_stood_before_a_correction() {
    let cfg = Config::from_toml("", Path::new("test.toml"), Path::new(".")).unwrap();
    let mut conn = store::open_in_memory().unwrap();
    let tx = conn.transaction().unwrap();
    let lot = LotRow {
        line: 2,
        record: turnbook::model::LotRecord {
            lot: "L1".into(),
            catalyst: "5 % Pd/C".into(),
            metal: "Pd".into(),
            loading_wt_pct: 5.0,
            charged_mass_g: 10.0,
            received: None,
            supplier_lot: None,
            cost: None,
            site: None,
            water_content_wt_pct: None,
            family: None,
        },
    };
    records::record_parsed(&tx, &facts("lots"), &ParsedFile::Lots(vec![lot]), "qa").unwrap();
    let cycles = ParsedFile::Cycles(
        (1..=4)
            .map(|n| cycle(n, 0.9 - 0.05 * f64::from(n)))
            .collect(),
    );
    let stored = records::record_parsed(&tx, &facts("cycles"), &cycles, "qa").unwrap();
    let before = stored.event_seq;
    let seq = records::correct(
        &tx,
        "B2",
        "conversion",
        0.5,
        "peak re-integrated",
        "qa",
        "2026-01-02T00:00:00.000Z",
    )
    .unwrap();
    tx.commit().unwrap();
    assert!(seq > before);

    let now = lots::lot_state(&conn, &cfg, "L1").unwrap();
    let then = lots::lot_state_as_of(&conn, &cfg, "L1", Some(before)).unwrap();
    let conv = |s: &lots::LotState, n: usize| s.cycles[n].view.get(Quantity::Conversion);
    assert_eq!(conv(&now, 1), Some(0.5));
    assert_eq!(conv(&then, 1), Some(0.8));
    assert_eq!(now.cycles.len(), 4);
    assert_eq!(then.cycles.len(), 4);
    // k_app = −ln(1 − X)/t: with X = 0.5 at 1 h, ln 2 per hour (definition of k_app).
    let k = now.cycles[1]
        .metrics
        .as_ref()
        .and_then(|m| m.k_app_per_h)
        .unwrap();
    assert!((k - std::f64::consts::LN_2).abs() < 1e-12, "{k}");
    // Before any cycle was stored, the lot had a registration and no cycles.
    let first = lots::lot_state_as_of(&conn, &cfg, "L1", Some(1)).unwrap();
    assert!(first.record.is_some());
    assert!(first.cycles.is_empty());
}
