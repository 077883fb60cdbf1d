//! Every way a value enters passes the same checks: a correction typed with its unit, a
//! correction an export would be refused for, a cycle number that collides, a note on
//! nothing, a report of an event that does not exist. Through the real binary on the demo
//! plant (without its live part).

mod common;
use common::run;

use std::path::PathBuf;

const LOT: &str = "PD-C-2611-A";
const BATCH: &str = "KV4-H-005";

struct Plant {
    _tmp: tempfile::TempDir,
    dir: PathBuf,
    cfg: String,
}

impl Plant {
    fn new() -> Plant {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path().join("plant");
        let out = run(&["demo", "--dir", dir.to_str().unwrap(), "--no-live"]);
        assert_eq!(
            out.status.code(),
            Some(0),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let cfg = dir.join("turnbook.toml").display().to_string();
        Plant {
            _tmp: tmp,
            dir,
            cfg,
        }
    }

    /// Run a verb, require the exit status, return (stdout, stderr).
    fn expect(&self, code: i32, args: &[&str]) -> (String, String) {
        let mut all = vec!["--config", self.cfg.as_str()];
        all.extend_from_slice(args);
        let out = run(&all);
        let so = String::from_utf8_lossy(&out.stdout).into_owned();
        let se = String::from_utf8_lossy(&out.stderr).into_owned();
        assert_eq!(out.status.code(), Some(code), "{args:?}\n{so}\n{se}");
        assert!(!se.contains("panicked"), "{se}");
        (so, se)
    }

    fn events(&self) -> i64 {
        let db = rusqlite::Connection::open(self.dir.join("turnbook.db")).unwrap();
        db.query_row("SELECT COUNT(*) FROM events", [], |r| r.get(0))
            .unwrap()
    }

    fn outbox(&self) -> i64 {
        let db = rusqlite::Connection::open(self.dir.join("turnbook.db")).unwrap();
        db.query_row("SELECT COUNT(*) FROM alert_outbox", [], |r| r.get(0))
            .unwrap()
    }

    fn temperature_k(&self) -> f64 {
        let db = rusqlite::Connection::open(self.dir.join("turnbook.db")).unwrap();
        db.query_row(
            "SELECT temperature_k FROM cycles WHERE batch_id = ?1",
            [BATCH],
            |r| r.get(0),
        )
        .unwrap()
    }
}

#[test]
fn an_implausible_correction_is_refused_and_changes_nothing() {
    let plant = Plant::new();
    let (events, outbox, t) = (plant.events(), plant.outbox(), plant.temperature_k());
    // 60 K is what a bare "60" used to mean; an export with it is refused, and so is this.
    let (_, err) = plant.expect(
        1,
        &["correct", BATCH, "temperature", "60 K", "--reason", "typo"],
    );
    assert!(err.contains("temperature") && err.contains("60 K"), "{err}");
    assert!(err.contains("between 150 K and 800 K"), "{err}");
    let (_, err) = plant.expect(
        1,
        &["correct", BATCH, "selectivity", "-0.5", "--reason", "x"],
    );
    assert!(err.contains("between 0 and 1"), "{err}");
    let (_, err) = plant.expect(
        1,
        &["correct", BATCH, "product_mass", "3 °C", "--reason", "x"],
    );
    assert!(err.contains("one of mg, g, kg"), "{err}");
    assert_eq!(
        plant.events(),
        events,
        "a refused correction writes no event"
    );
    assert_eq!(plant.outbox(), outbox, "and queues no mail");
    assert_eq!(plant.temperature_k(), t);
    plant.expect(0, &["verify"]);
}

#[test]
fn a_correction_with_its_unit_is_stored_in_the_canonical_one() {
    let plant = Plant::new();
    let (out, _) = plant.expect(
        0,
        &[
            "correct",
            BATCH,
            "temperature",
            "60 °C",
            "--reason",
            "thermocouple",
        ],
    );
    assert!(out.contains("333.15 K"), "{out}");
    assert!((plant.temperature_k() - 333.15).abs() < 1e-9);
    // A bare number is in the unit `cycles` shows, °C for temperature.
    plant.expect(
        0,
        &["correct", BATCH, "temperature", "61", "--reason", "re-read"],
    );
    assert!((plant.temperature_k() - 334.15).abs() < 1e-9);
    plant.expect(0, &["verify"]);
}

#[test]
fn a_cycle_number_another_batch_has_is_refused() {
    let plant = Plant::new();
    let events = plant.events();
    let (_, err) = plant.expect(1, &["correct", BATCH, "cycle_no", "3", "--reason", "x"]);
    assert!(
        err.contains("KV4-H-003") && err.contains("cycle 3"),
        "{err}"
    );
    let (_, err) = plant.expect(1, &["correct", BATCH, "cycle_no", "2.5", "--reason", "x"]);
    assert!(err.contains("whole number"), "{err}");
    assert_eq!(plant.events(), events);
}

#[test]
fn notes_and_reports_on_nothing_are_refused() {
    let plant = Plant::new();
    let (_, err) = plant.expect(1, &["note", "--lot", "NOPE", "hello"]);
    assert!(err.contains("NOPE"), "{err}");
    let (_, err) = plant.expect(1, &["note", "--batch", "NOPE-1", "hello"]);
    assert!(err.contains("NOPE-1"), "{err}");
    plant.expect(0, &["note", "--lot", LOT, "filter cake looked grey"]);
    let out = plant.dir.join("r.html");
    let (_, err) = plant.expect(
        1,
        &[
            "report",
            LOT,
            "--as-of",
            "99999",
            "--out",
            out.to_str().unwrap(),
        ],
    );
    assert!(err.contains("99999"), "{err}");
    assert!(!out.exists());
}
