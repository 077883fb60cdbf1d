//! Alerts people act on, through the real binary on the demo plant (without its live
//! part): severities follow the evidence table, subjects say what and by when, an alert
//! can be acknowledged and closed with the act in the audit trail, and a file notice
//! closes itself when the repaired file is ingested.

mod common;
use common::run;

use std::path::PathBuf;

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

    fn expect(&self, code: i32, args: &[&str]) -> String {
        let mut all = vec!["--config", self.cfg.as_str()];
        all.extend_from_slice(args);
        let out = run(&all);
        let so = String::from_utf8_lossy(&out.stdout).into_owned();
        let se = String::from_utf8_lossy(&out.stderr).into_owned();
        assert_eq!(out.status.code(), Some(code), "{args:?}\n{so}\n{se}");
        assert!(!se.contains("panicked"), "{se}");
        so + &se
    }

    fn alerts(&self, all: bool) -> Vec<serde_json::Value> {
        let mut args = vec!["alerts", "--json"];
        if all {
            args.push("--all");
        }
        let out = self.expect(0, &args);
        serde_json::from_str::<serde_json::Value>(&out)
            .unwrap()
            .as_array()
            .unwrap()
            .clone()
    }

    fn outbox(&self) -> Vec<(String, String, i64, String, String)> {
        let db = rusqlite::Connection::open(self.dir.join("turnbook.db")).unwrap();
        let mut st = db
            .prepare(
                "SELECT rule, lot, severity, subject, body_text FROM alert_outbox \
                 WHERE rule <> 'digest' ORDER BY id",
            )
            .unwrap();
        st.query_map([], |r| {
            Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?, r.get(4)?))
        })
        .unwrap()
        .map(Result::unwrap)
        .collect()
    }
}

#[test]
fn demo_outbox_follows_the_severity_table_and_subjects_carry_dates() {
    let p = Plant::new();
    let out = p.outbox();
    // The Pt lot's poisoning (a detected step): critical, to chemists and managers.
    let step: Vec<_> = out.iter().filter(|m| m.0 == "abrupt-loss").collect();
    assert_eq!(step.len(), 1, "{out:?}");
    assert_eq!((step[0].1.as_str(), step[0].2), ("PT-AL-2610-B", 3));
    assert!(
        step[0].4.starts_with("What to do: Hold the lot"),
        "{}",
        step[0].4
    );
    // ... linking the lot's page and printable report in the web view the demo serves.
    assert!(
        step[0]
            .4
            .contains("printable report: http://127.0.0.1:8470/lots/PT-AL-2610-B"),
        "{}",
        step[0].4
    );
    // ... with the hints on why: the batch was charged from a feed drum no earlier batch
    // used (the demo's poison came with it), and leaching explains almost none of it.
    assert!(
        step[0].4.contains("Why it may have dropped")
            && step[0]
                .4
                .contains("Cycle 10 was charged from feed lot AC-1004")
            && step[0].4.contains("Metal loss explains at most"),
        "{}",
        step[0].4
    );
    // The deactivating Pd lot: a warning with an order-by date, 28 days (its catalyst's
    // lead time in the demo configuration) before the interval's early end.
    let pd: Vec<_> = out
        .iter()
        .filter(|m| m.0 == "replacement-forecast" && m.1 == "PD-C-2611-A")
        .collect();
    assert_eq!(pd.len(), 1, "{out:?}");
    assert_eq!((pd[0].1.as_str(), pd[0].2), ("PD-C-2611-A", 2));
    assert!(
        pd[0].3.contains("PD-C-2611-A: order replacement ")
            && pd[0].3.contains("criterion expected 20"),
        "{}",
        pd[0].3
    );
    assert!(pd[0].4.contains("28 days' lead time"), "{}", pd[0].4);
    // Every message the demo wrote parses with a standard mail parser, and its subject
    // carries no product name (the digest's included).
    let mut parsed = 0;
    for e in std::fs::read_dir(p.dir.join("outbox")).unwrap() {
        let path = e.unwrap().path();
        if path.extension().is_some_and(|x| x == "eml") {
            let raw = std::fs::read(&path).unwrap();
            let msg = mail_parser::MessageParser::default()
                .parse(&raw)
                .expect("a parseable message");
            let subject = msg.subject().unwrap_or_default();
            assert!(!subject.to_lowercase().contains("turnbook"), "{subject}");
            assert!(msg.body_text(0).is_some() && msg.body_html(0).is_some());
            parsed += 1;
        }
    }
    // Three alerts (the Pt step; the Pd lot's forecast; the young Pd lot's forecast with
    // its family's prior) and the digest.
    assert_eq!(parsed, 4, "three alerts and the digest");
    // Nothing critical rests on a forecast, and no subject names the product.
    for m in &out {
        assert!(m.0 != "replacement-forecast" || m.2 < 3, "{m:?}");
        assert!(!m.3.to_lowercase().contains("turnbook"), "{}", m.3);
    }
}

#[test]
fn acknowledge_and_close_are_recorded_and_verify_stays_clean() {
    let p = Plant::new();
    let open = p.alerts(false);
    let step = open
        .iter()
        .find(|a| a["kind"] == "abrupt-loss")
        .expect("abrupt-loss listed");
    assert_eq!(step["state"], "open");
    assert_eq!(step["severity"], "critical");
    assert_eq!(step["lot"], "PT-AL-2610-B");
    assert!(step["since"].as_str().unwrap().ends_with('Z'));
    let id = step["id"].as_i64().unwrap().to_string();

    p.expect(
        0,
        &["ack", &id, "--reason", "feed drum 7 held; investigating"],
    );
    let a = p.alerts(false);
    let s = a.iter().find(|x| x["kind"] == "abrupt-loss").unwrap();
    assert_eq!(s["state"], "acknowledged");
    assert_eq!(s["actions"][0]["reason"], "feed drum 7 held; investigating");

    p.expect(
        0,
        &["close", &id, "--reason", "drum 7 returned to supplier"],
    );
    assert!(
        p.alerts(false).iter().all(|x| x["kind"] != "abrupt-loss"),
        "closed alerts leave the default list"
    );
    let all = p.alerts(true);
    let s = all.iter().find(|x| x["kind"] == "abrupt-loss").unwrap();
    assert_eq!(s["state"], "closed");
    // Closing twice, an empty reason and an unknown alert are refused with a sentence.
    let again = p.expect(1, &["close", &id, "--reason", "again"]);
    assert!(again.contains("already closed"), "{again}");
    let none = p.expect(1, &["ack", "9999", "--reason", "x"]);
    assert!(none.contains("no alert '9999'"), "{none}");
    p.expect(2, &["ack", &id, "--reason", " "]);

    let history = p.expect(0, &["history", "PT-AL-2610-B"]);
    assert!(history.contains("alert-action"), "{history}");
    assert!(history.contains("drum 7 returned to supplier"), "{history}");
    let v = p.expect(0, &["verify"]);
    assert!(v.contains("chain intact"), "{v}");
}

#[test]
fn a_file_notice_closes_when_the_repaired_file_is_ingested() {
    let p = Plant::new();
    let file = p.dir.join("exports/hplc/KV4-H-099.csv");
    let head = "Sample report export,KV4 HPLC-2\nMethod,RED-ASSAY-v3\n\
                Batch,Catalyst lot,Cycle,Started,Reaction time (min),Temperature (degC),\
                Conversion (%),Selectivity (%)\n";
    std::fs::write(
        &file,
        format!("{head}KV4-H-099,PD-C-2611-A,15,2026-11-20T08:30:00,120,60.5,n.d.,97.9\n"),
    )
    .unwrap();
    // A rejected file makes `ingest` exit 1; the file is kept aside with a notice.
    p.expect(1, &["ingest", file.to_str().unwrap()]);
    let notice = p
        .alerts(false)
        .into_iter()
        .find(|a| a["kind"] == "quarantine")
        .expect("file notice listed");
    assert_eq!(notice["state"], "open");
    assert!(notice["lot"].is_null(), "{notice}");

    std::fs::write(
        &file,
        format!("{head}KV4-H-099,PD-C-2611-A,15,2026-11-20T08:30:00,120,60.5,52.10,97.9\n"),
    )
    .unwrap();
    p.expect(0, &["ingest", file.to_str().unwrap()]);
    assert!(p.alerts(false).iter().all(|a| a["kind"] != "quarantine"));
    let all = p.alerts(true);
    let closed = all.iter().find(|a| a["kind"] == "quarantine").unwrap();
    assert_eq!(closed["state"], "cleared");
    let cleared: Vec<_> = p
        .outbox()
        .into_iter()
        .filter(|m| m.0 == "quarantine" && m.3.starts_with("[cleared]"))
        .collect();
    assert_eq!(cleared.len(), 1);
    assert!(cleared[0].4.contains("was ingested"), "{}", cleared[0].4);
    p.expect(0, &["verify"]);
}

#[test]
fn a_clearing_names_the_entry_that_cleared_it() {
    let p = Plant::new();
    p.expect(
        0,
        &[
            "exclude",
            "KV4-K-010",
            "--reason",
            "feed drum 7 contaminated; batch not representative",
        ],
    );
    let cleared: Vec<_> = p
        .outbox()
        .into_iter()
        .filter(|m| m.0 == "abrupt-loss" && m.3.starts_with("[cleared]"))
        .collect();
    assert_eq!(cleared.len(), 1, "{:?}", p.outbox());
    let body = &cleared[0].4;
    assert!(
        body.contains("the exclusion of batch KV4-K-010 by ")
            && body.contains("reason: feed drum 7 contaminated"),
        "{body}"
    );
    p.expect(0, &["verify"]);
}
