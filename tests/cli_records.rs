//! The record-keeping verbs through the real binary on the demo plant (without its live
//! part): exit statuses, register, correct, exclude, note, sign-off, history, cycles,
//! status, fit, report, tampering found by verify, and markup in names kept inert.

mod common;
use common::run;

use std::path::{Path, PathBuf};
use std::process::Command;

const LOT: &str = "PD-C-2611-A";
const BATCH: &str = "KV4-H-003";

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

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
        assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
        let cfg = dir.join("turnbook.toml").display().to_string();
        Plant {
            _tmp: tmp,
            dir,
            cfg,
        }
    }

    /// Run a verb against this plant and require the exit status.
    fn ok(&self, args: &[&str]) -> String {
        self.expect(0, args)
    }

    fn expect(&self, code: i32, args: &[&str]) -> String {
        let mut all = vec!["--config", self.cfg.as_str()];
        all.extend_from_slice(args);
        let out = run(&all);
        let (so, se) = (text(&out.stdout), text(&out.stderr));
        assert_eq!(
            out.status.code(),
            Some(code),
            "{args:?}\nstdout: {so}\nstderr: {se}"
        );
        assert!(!se.contains("panicked"), "{se}");
        so
    }

    fn json(&self, args: &[&str]) -> serde_json::Value {
        let out = self.ok(args);
        serde_json::from_str(&out).unwrap_or_else(|e| panic!("{args:?}: {e}: {out}"))
    }

    fn db(&self) -> rusqlite::Connection {
        rusqlite::Connection::open(self.dir.join("turnbook.db")).unwrap()
    }
}

/// Sign-offs in a report that cover the history as it stands, and that no longer do.
fn signoff_cells(html: &str) -> (usize, usize) {
    (
        html.matches("\">unchanged: covers the history as it stands<")
            .count(),
        html.matches("\">changed: ").count(),
    )
}

#[test]
fn configuration_and_usage_errors_exit_2_and_name_the_key() {
    let tmp = tempfile::tempdir().unwrap();
    let missing = tmp.path().join("absent.toml");
    let out = run(&["--config", missing.to_str().unwrap(), "status"]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));

    let plant = Plant::new();
    let good = std::fs::read_to_string(&plant.cfg).unwrap();
    let bad = tmp.path().join("bad.toml");
    // An unknown key.
    std::fs::write(&bad, format!("colour_scheme = \"teal\"\n{good}")).unwrap();
    let out = run(&["--config", bad.to_str().unwrap(), "status"]);
    let err = text(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("colour_scheme"), "{err}");
    // A bad value for a known key.
    std::fs::write(
        &bad,
        good.replacen(
            "files_per_transaction = 4000",
            "files_per_transaction = \"many\"",
            1,
        ),
    )
    .unwrap();
    let out = run(&["--config", bad.to_str().unwrap(), "status"]);
    let err = text(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("files_per_transaction"), "{err}");
    // Bad usage: an unknown verb, a missing argument, a bad option value.
    for args in [
        vec!["frobnicate"],
        vec!["--config", plant.cfg.as_str(), "correct", BATCH],
        vec![
            "--config",
            plant.cfg.as_str(),
            "cycles",
            LOT,
            "--format",
            "xml",
        ],
        vec![
            "--config",
            plant.cfg.as_str(),
            "ingest",
            "/nonexistent/exports",
            "--profile",
            "nope",
        ],
    ] {
        let out = run(&args);
        assert_eq!(
            out.status.code(),
            Some(2),
            "{args:?}: {}",
            text(&out.stderr)
        );
    }
    // Everything fine: 0.
    plant.ok(&["status"]);
}

#[test]
fn verify_finds_a_value_changed_behind_turnbooks_back() {
    let plant = Plant::new();
    let out = plant.ok(&["verify"]);
    assert!(out.starts_with("verified:"), "{out}");
    let n = plant
        .db()
        .execute(
            "UPDATE cycles SET conversion = 0.5 WHERE batch_id = ?1",
            [BATCH],
        )
        .unwrap();
    assert_eq!(n, 1);
    let out = plant.expect(1, &["verify"]);
    assert!(out.contains("NOT VERIFIED"), "{out}");
    let finding = out
        .lines()
        .find(|l| l.contains(BATCH))
        .unwrap_or_else(|| panic!("no finding names {BATCH}: {out}"));
    assert!(finding.contains("table cycles"), "{finding}");
    assert!(finding.contains("field conversion"), "{finding}");
    assert!(finding.contains("stored 0.5"), "{finding}");
}

#[test]
fn record_verbs_keep_history_and_signoffs_honest() {
    let plant = Plant::new();

    // register: a new lot appears in `lots`, a second identical registration is refused.
    let out = plant.ok(&[
        "register",
        "RH-X-0001",
        "--catalyst",
        "0.5 % Rh/C",
        "--metal",
        "Rh",
        "--loading",
        "0.5",
        "--mass",
        "4.0",
        "--received",
        "2026-11-02",
    ]);
    assert!(out.contains("lot 'RH-X-0001' registered"), "{out}");
    let lots = plant.json(&["lots", "--json"]);
    let rh = lots
        .as_array()
        .unwrap()
        .iter()
        .find(|l| l["lot"] == "RH-X-0001");
    assert_eq!(rh.unwrap()["metal"], "Rh");
    plant.expect(
        1,
        &[
            "register",
            "RH-X-0001",
            "--catalyst",
            "0.5 % Rh/C",
            "--metal",
            "Rh",
            "--loading",
            "0.5",
            "--mass",
            "4.0",
        ],
    );
    plant.expect(
        2,
        &[
            "register",
            "BAD-METAL",
            "--catalyst",
            "x",
            "--metal",
            "Xx",
            "--loading",
            "1",
            "--mass",
            "1",
        ],
    );

    // status --json carries the ingestion keys.
    let st = plant.json(&["status", "--json"]);
    let files = st["files_ingested"].as_u64().unwrap();
    assert!(files >= 50, "{st}");
    assert_eq!(st["files_quarantined"].as_u64(), Some(0));
    assert!(st["last_ingest_at"].as_str().unwrap().contains('T'), "{st}");

    // A sign-off now, then a correction: the sign-off no longer covers the history.
    let out = plant.ok(&[
        "signoff",
        LOT,
        "--meaning",
        "reviewed",
        "--comment",
        "first look",
        "--as",
        "J. Lindqvist",
    ]);
    let signed: String = out
        .split("SHA-256 ")
        .nth(1)
        .unwrap_or_else(|| panic!("{out}"))
        .trim()
        .to_string();
    assert_eq!(signed.len(), 64, "{out}");
    let html_path = plant.dir.join("before.html");
    plant.ok(&["report", LOT, "--out", html_path.to_str().unwrap()]);
    let html = std::fs::read_to_string(&html_path).unwrap();
    assert!(html.contains(&signed));
    // The demo's own review and this one.
    assert_eq!(signoff_cells(&html), (2, 0));

    let old: f64 = plant
        .db()
        .query_row(
            "SELECT conversion FROM cycles WHERE batch_id = ?1",
            [BATCH],
            |r| r.get(0),
        )
        .unwrap();
    let out = plant.ok(&[
        "correct",
        BATCH,
        "conversion",
        "0.8125",
        "--reason",
        "peak re-integrated",
    ]);
    assert!(out.contains("correction recorded"), "{out}");
    let history = plant.ok(&["history", LOT]);
    let line = history
        .lines()
        .find(|l| l.contains("correction"))
        .unwrap_or_else(|| panic!("{history}"));
    assert!(line.contains("0.8125"), "{line}");
    assert!(
        line.contains(&format!("was {old}")),
        "old value {old} not in: {line}"
    );
    assert!(line.contains("peak re-integrated"), "{line}");
    let hist = plant.json(&["history", LOT, "--json"]);
    let kinds: Vec<&str> = hist
        .as_array()
        .unwrap()
        .iter()
        .map(|e| e["kind"].as_str().unwrap())
        .collect();
    assert!(
        kinds.contains(&"sign-off") && kinds.contains(&"correction"),
        "{kinds:?}"
    );
    // The superseded value stays in the measurements.
    let kept: i64 = plant
        .db()
        .query_row(
            "SELECT COUNT(*) FROM measurements WHERE batch_id = ?1 AND quantity = 'conversion' AND value = ?2",
            rusqlite::params![BATCH, old],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(kept, 1);
    plant.ok(&["verify"]);

    let after = plant.dir.join("after.html");
    let csv = plant.dir.join("after.csv");
    plant.ok(&[
        "report",
        LOT,
        "--out",
        after.to_str().unwrap(),
        "--csv",
        csv.to_str().unwrap(),
    ]);
    let html = std::fs::read_to_string(&after).unwrap();
    assert_eq!(
        signoff_cells(&html),
        (0, 2),
        "the old sign-offs must not cover the corrected record"
    );
    let csv = std::fs::read_to_string(&csv).unwrap();
    let row = csv.lines().find(|l| l.contains(BATCH)).unwrap();
    assert!(row.contains("0.8125"), "{row}");
    // A fresh sign-off covers it again.
    plant.ok(&[
        "signoff",
        LOT,
        "--meaning",
        "reviewed",
        "--as",
        "M. Ferreira",
    ]);
    plant.ok(&["report", LOT, "--out", after.to_str().unwrap()]);
    assert_eq!(
        signoff_cells(&std::fs::read_to_string(&after).unwrap()),
        (1, 2)
    );

    // exclude and note are events of the lot's history.
    let out = plant.ok(&["exclude", "KV4-H-005", "--reason", "stirrer failed"]);
    assert!(out.contains("excluded from the fits"), "{out}");
    plant.ok(&["note", "--lot", LOT, "filter cake looked grey"]);
    let history = plant.ok(&["history", LOT]);
    assert!(history.contains("stirrer failed"), "{history}");
    assert!(history.contains("filter cake looked grey"), "{history}");
    let excluded: bool = plant
        .db()
        .query_row(
            "SELECT excluded FROM cycles WHERE batch_id = 'KV4-H-005'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert!(excluded);

    // cycles in csv and json agree with each other and with the database.
    let csv = plant.ok(&["cycles", LOT, "--format", "csv"]);
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let conv_col = header.iter().position(|h| *h == "conversion").unwrap();
    let rows: Vec<&str> = lines.collect();
    let json = plant.json(&["cycles", LOT, "--format", "json"]);
    let jrows = json["cycles"].as_array().unwrap();
    assert_eq!(rows.len(), jrows.len());
    let n_db: i64 = plant
        .db()
        .query_row("SELECT COUNT(*) FROM cycles WHERE lot = ?1", [LOT], |r| {
            r.get(0)
        })
        .unwrap();
    assert_eq!(rows.len() as i64, n_db);
    let j3 = jrows.iter().find(|c| c["batch_id"] == BATCH).unwrap();
    assert_eq!(j3["conversion"].as_f64(), Some(0.8125));
    let c3 = rows.iter().find(|r| r.contains(BATCH)).unwrap();
    assert_eq!(c3.split(',').nth(conv_col), Some("0.8125"));

    // fit LOT --json: the excluded cycle is left out, a model is chosen.
    let fit = plant.json(&["fit", LOT, "--json"]);
    assert_eq!(fit["lot"], LOT);
    assert!(fit["model"].is_string() && fit["converged"].is_boolean());
    assert!(fit["forecast"].is_object());
    // The excluded cycle (number 5) is neither fitted nor among the observed points.
    assert_eq!(fit["n_points"].as_i64(), Some(n_db - 1));
    let xs: Vec<f64> = fit["observed"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p[0].as_f64().unwrap())
        .collect();
    assert_eq!(xs.len() as i64, n_db - 1);
    assert!(!xs.contains(&5.0), "{xs:?}");
    plant.ok(&["verify"]);
}

#[test]
fn fit_of_a_series_reports_every_key_and_the_forecast() {
    let tmp = tempfile::tempdir().unwrap();
    let series = tmp.path().join("series.csv");
    // Invented activities decaying as exp(-0.1 x), rounded to 4 places.
    let mut s = String::from("cycle,activity\n");
    for x in 1..=8 {
        s.push_str(&format!("{x},{:.4}\n", (-0.1 * f64::from(x)).exp()));
    }
    std::fs::write(&series, s).unwrap();
    let out = run(&[
        "fit",
        "--series",
        series.to_str().unwrap(),
        "--model",
        "first-order",
        "--threshold",
        "0.5",
        "--json",
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    for k in [
        "model",
        "n",
        "params",
        "std_errors",
        "rss",
        "dof",
        "aicc",
        "converged",
        "forecast",
    ] {
        assert!(v.get(k).is_some(), "key {k} missing: {v}");
    }
    assert_eq!(v["model"], "first-order");
    assert_eq!(v["n"], 8);
    assert_eq!(v["dof"], 6);
    assert_eq!(v["converged"], true);
    // y = a0 exp(-kd x) with a0 = 1, kd = 0.1 crosses 0.5 at x = ln 2 / 0.1 = 6.93.
    let kd = v["params"]["kd"].as_f64().unwrap();
    assert!((kd - 0.1).abs() < 1e-3, "kd {kd}");
    let f = &v["forecast"];
    let (x, lo, hi) = (
        f["x"].as_f64().unwrap(),
        f["lower"].as_f64().unwrap(),
        f["upper"].as_f64().unwrap(),
    );
    assert!((x - 10.0 * std::f64::consts::LN_2).abs() < 0.05, "x {x}");
    assert!(lo <= x && x <= hi, "{lo} {x} {hi}");
    // A series file that does not exist is a failure, not a panic.
    let out = run(&[
        "fit",
        "--series",
        "/nonexistent.csv",
        "--model",
        "first-order",
        "--json",
    ]);
    assert_ne!(out.status.code(), Some(0));
    assert!(!text(&out.stderr).contains("panicked"));
}

fn raw_tag_free(html: &Path) {
    let s = std::fs::read_to_string(html).unwrap();
    assert!(
        !s.contains("<script>alert(1)</script>"),
        "{}",
        html.display()
    );
    assert!(
        !s.to_lowercase().contains("<script>alert"),
        "{}",
        html.display()
    );
}

#[test]
fn markup_in_a_lot_name_and_an_export_file_name_stays_text() {
    let plant = Plant::new();
    let evil = "<script>alert(1)</script>";
    plant.ok(&[
        "register",
        evil,
        "--catalyst",
        "5 % Pd/C",
        "--metal",
        "Pd",
        "--loading",
        "5",
        "--mass",
        "2",
    ]);
    // An export whose file name and lot cell carry the tag.
    let hplc = plant.dir.join("exports").join("hplc");
    let file = hplc.join(format!("{evil}.csv").replace('/', "%2F"));
    std::fs::write(
        &file,
        format!(
            "Sample report export,KV4 HPLC-2\nMethod,RED-ASSAY-v3\n\
             Batch,Catalyst lot,Cycle,Started,Reaction time (min),Temperature (degC),Conversion (%),Selectivity (%)\n\
             XSS-1,{evil},1,2026-11-05T08:30:00,120,60.0,90.00,98.00\n"
        ),
    )
    .unwrap();
    let out = plant.ok(&["ingest", file.to_str().unwrap()]);
    assert!(out.contains("1 ingested"), "{out}");
    let lots = plant.json(&["lots", "--json"]);
    let l = lots
        .as_array()
        .unwrap()
        .iter()
        .find(|l| l["lot"] == evil)
        .unwrap();
    assert_eq!(l["cycles"], 1);
    let html = plant.dir.join("evil.html");
    plant.ok(&["report", evil, "--out", html.to_str().unwrap()]);
    raw_tag_free(&html);
    let s = std::fs::read_to_string(&html).unwrap();
    assert!(
        s.contains("&lt;script&gt;"),
        "the name should appear, escaped"
    );
    let site = plant.dir.join("site.html");
    plant.ok(&["report", "--site", "--out", site.to_str().unwrap()]);
    raw_tag_free(&site);
}

/// A path named on the command line is followed when it is a link, and one that is
/// neither a folder nor a regular file is refused by name (exit 1), never left out without
/// a word.
#[cfg(unix)]
#[test]
fn ingest_follows_a_named_link_and_refuses_a_named_pipe() {
    let plant = Plant::new();
    let export = plant.dir.join("exports/balance/KV4-H-001.txt");
    assert!(export.is_file());
    let link = plant.dir.join("link-to-export.txt");
    std::os::unix::fs::symlink(&export, &link).unwrap();
    let out = plant.ok(&["ingest", link.to_str().unwrap()]);
    assert!(out.contains("1 files: 0 ingested, 1 duplicates"), "{out}");

    let pipe = plant.dir.join("pipe.csv");
    let made = Command::new("mkfifo").arg(&pipe).status().unwrap();
    assert!(made.success());
    let mut all = vec!["--config", plant.cfg.as_str(), "ingest"];
    all.push(pipe.to_str().unwrap());
    let out = run(&all);
    let err = text(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{err}");
    assert!(
        err.contains("pipe.csv") && err.contains("not a regular file"),
        "{err}"
    );
    assert!(text(&out.stdout).contains("1 files: 0 ingested, 0 duplicates, 1 rejected"));
}

#[test]
fn lots_say_whether_the_next_batch_is_safe() {
    let plant = Plant::new();
    let lots = plant.json(&["lots", "--json"]);
    let pd = lots
        .as_array()
        .unwrap()
        .iter()
        .find(|l| l["lot"] == LOT)
        .unwrap();
    let next = &pd["next_cycle"];
    assert_eq!(next["x"].as_f64(), Some(15.0), "{pd}");
    let (lo, p, hi) = (
        next["lower"].as_f64().unwrap(),
        next["predicted"].as_f64().unwrap(),
        next["upper"].as_f64().unwrap(),
    );
    assert!(lo < p && p < hi, "{next}");
    let verdict = next["verdict"].as_str().unwrap();
    let threshold = next["threshold"].as_f64().unwrap();
    // The verdict follows from the interval and the criterion.
    let expected = if lo > threshold {
        "ok"
    } else if p < threshold {
        "below"
    } else {
        "marginal"
    };
    assert_eq!(verdict, expected, "{next}");
    let table = plant.ok(&["lots"]);
    assert!(table.contains(&format!("next batch {verdict}")), "{table}");
}
