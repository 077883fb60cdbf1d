//! The company's views with computed figures: a site's figures (TON, activity, fits,
//! forecasts) reach the central store beside its events, equal the site's own views, and
//! are replaced when the site recomputes a lot; `lot_results`, `cycle_results` and
//! `alerts` in PostgreSQL show them across sites.

mod central_support;

use central_support as pg;
use std::path::Path;

fn local_rows(db: &Path, query: &str) -> Vec<Vec<Option<String>>> {
    let conn = rusqlite::Connection::open(db).unwrap();
    let mut st = conn.prepare(query).unwrap();
    let n = st.column_count();
    st.query_map([], |r| {
        (0..n)
            .map(|i| r.get::<_, Option<String>>(i))
            .collect::<Result<Vec<_>, _>>()
    })
    .unwrap()
    .collect::<Result<_, _>>()
    .unwrap()
}

/// The columns, each as text (PostgreSQL's cast, or SQLite's).
fn as_text(cols: &str, postgres: bool) -> String {
    cols.split(", ")
        .map(|c| {
            if postgres {
                format!("{c}::text")
            } else {
                format!("CAST({c} AS TEXT)")
            }
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// Figures as text at the center and here may differ in the last digits of the decimal
/// form (JSON numbers on the way): compare numbers to 1e-12, anything else exactly.
fn same(a: &Option<String>, b: &Option<String>) -> bool {
    match (a, b) {
        (Some(a), Some(b)) => match (a.parse::<f64>(), b.parse::<f64>()) {
            (Ok(x), Ok(y)) => (x - y).abs() <= 1e-12 * x.abs().max(y.abs()).max(1e-300),
            _ => a == b,
        },
        (a, b) => a == b,
    }
}

#[test]
fn computed_figures_reach_the_center_and_are_replaced_on_recompute() {
    let Some(server) = pg::server() else { return };
    let url = pg::fresh_database(&server, "views");
    let root = tempfile::tempdir().unwrap();
    let plant = root.path().join("plant");
    let demo = std::process::Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .args(["demo", "--dir", plant.to_str().unwrap(), "--no-live"])
        .output()
        .unwrap();
    assert!(demo.status.success(), "{demo:?}");
    let cfg = plant.join("turnbook.toml");
    let mut text = std::fs::read_to_string(&cfg).unwrap();
    text.push_str(&format!(
        "\n[site]\nid = \"south\"\n[central]\nurl = \"{url}\"\n"
    ));
    std::fs::write(&cfg, text).unwrap();
    let db = plant.join("turnbook.db");

    let out = pg::turnbook(&cfg, &["ship", "--json"]);
    assert!(out.status.success(), "{out:?}");
    let report: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let local_lots = local_rows(&db, "SELECT lot FROM lot_figures ORDER BY lot");
    assert!(local_lots.len() >= 3, "{local_lots:?}");
    assert_eq!(report["figures_replaced"], local_lots.len());

    // Each lot as the site's view shows it, and as the center's does.
    let lot_cols = "lot, state, model, latest_activity, cumulative_ton, forecast_status, \
                    crossing_cycle, crossing_date, order_by_date, next_batch_verdict";
    let here = local_rows(
        &db,
        &format!(
            "SELECT {} FROM lot_results ORDER BY lot",
            as_text(lot_cols, false)
        ),
    );
    let there = pg::rows(
        &url,
        &format!(
            "SELECT {} FROM turnbook.lot_results WHERE site = 'south' ORDER BY lot",
            as_text(lot_cols, true)
        ),
    );
    assert_eq!(here.len(), there.len(), "{here:?}\n{there:?}");
    for (h, t) in here.iter().zip(&there) {
        assert!(
            h.iter().zip(t).all(|(a, b)| same(a, b)),
            "site {h:?}\ncenter {t:?}"
        );
    }
    assert!(there.iter().any(|r| r[1].as_deref() == Some("pending")));

    // Every cycle's figures.
    let cyc_cols = "batch_id, ton, cumulative_ton, tof_average_per_h, k_app_per_h, activity, \
                    activity_basis";
    let here = local_rows(
        &db,
        &format!(
            "SELECT {} FROM cycle_results ORDER BY batch_id",
            as_text(cyc_cols, false)
        ),
    );
    let there = pg::rows(
        &url,
        &format!(
            "SELECT {} FROM turnbook.cycle_results ORDER BY batch_id",
            as_text(cyc_cols, true)
        ),
    );
    assert_eq!(here.len(), there.len());
    assert!(here.iter().filter(|r| r[1].is_some()).count() >= 20);
    for (h, t) in here.iter().zip(&there) {
        assert!(
            h.iter().zip(t).all(|(a, b)| same(a, b)),
            "site {h:?}\ncenter {t:?}"
        );
    }

    // Nothing recomputed: nothing replaced.
    let out = pg::turnbook(&cfg, &["ship", "--json"]);
    let again: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(again["figures_replaced"], 0, "{again}");

    // Excluding a cycle recomputes its lot at the site; the next round replaces that lot.
    let (batch, lot) = {
        let r = local_rows(
            &db,
            "SELECT batch_id, lot FROM cycle_figures ORDER BY lot, cycle_no DESC LIMIT 1",
        );
        (r[0][0].clone().unwrap(), r[0][1].clone().unwrap())
    };
    let out = pg::turnbook(&cfg, &["exclude", &batch, "--reason", "stirrer failed"]);
    assert!(out.status.success(), "{out:?}");
    let out = pg::turnbook(&cfg, &["ship", "--json"]);
    let third: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(third["figures_replaced"], 1, "{third}");
    let local_after = local_rows(
        &db,
        &format!("SELECT CAST(after_seq AS TEXT) FROM lot_figures WHERE lot = '{lot}'"),
    );
    let central_after = pg::rows(
        &url,
        &format!("SELECT after_seq::text FROM turnbook.lot_figures WHERE lot = '{lot}'"),
    );
    assert_eq!(local_after, central_after);
    let excluded = pg::rows(
        &url,
        &format!(
            "SELECT excluded::text, flags::text FROM turnbook.cycle_results \
             WHERE batch_id = '{batch}'"
        ),
    );
    assert_eq!(excluded[0][0].as_deref(), Some("true"), "{excluded:?}");
    assert!(
        excluded[0][1].as_deref().unwrap_or("").contains("excluded"),
        "{excluded:?}"
    );

    // Alerts: one row per episode the site queued a message for.
    let local_episodes = local_rows(
        &db,
        "SELECT CAST(count(DISTINCT alert_key || '/' || episode) AS TEXT) FROM alert_outbox \
         WHERE rule <> 'digest'",
    );
    let central_episodes = pg::rows(&url, "SELECT count(*)::text FROM turnbook.alerts");
    assert_eq!(local_episodes, central_episodes);
    assert_ne!(
        central_episodes[0][0].as_deref(),
        Some("0"),
        "the demo raises alerts"
    );
    let digests = pg::rows(
        &url,
        "SELECT count(*)::text FROM turnbook.alerts WHERE rule = 'digest'",
    );
    assert_eq!(digests[0][0].as_deref(), Some("0"));
}
