//! Sign-offs through the real binary on the demo plant (without its live part): the
//! roster refuses unknown names and works only when configured, four eyes refuses one
//! account approving what it reviewed, and the sign-off state shows in `lots` (column and
//! `--json`), `status` (counts), the lot's HTML report (state, signers, accounts,
//! comments, later events) and `history` (comments and notes, text and `--json`), with
//! `verify` clean throughout.

mod common;
use common::run;

use std::path::PathBuf;

const LOT: &str = "PD-C-2611-A";

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
        assert!(
            text(&out.stdout).contains("PD-C-2611-A reviewed as M. Ferreira"),
            "{}",
            text(&out.stdout)
        );
        let cfg = dir.join("turnbook.toml").display().to_string();
        Plant {
            _tmp: tmp,
            dir,
            cfg,
        }
    }

    /// Run a verb; require the exit status; return stdout and stderr.
    fn expect(&self, code: i32, args: &[&str]) -> (String, String) {
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
        (so, se)
    }

    fn ok(&self, args: &[&str]) -> String {
        self.expect(0, args).0
    }

    fn json(&self, args: &[&str]) -> serde_json::Value {
        let out = self.ok(args);
        serde_json::from_str(&out).unwrap_or_else(|e| panic!("{args:?}: {e}: {out}"))
    }

    fn edit_config(&self, f: impl Fn(&str) -> String) {
        let text = std::fs::read_to_string(&self.cfg).unwrap();
        std::fs::write(&self.cfg, f(&text)).unwrap();
    }

    fn lot_signoff(&self, lot: &str) -> serde_json::Value {
        let lots = self.json(&["lots", "--json"]);
        lots.as_array()
            .unwrap()
            .iter()
            .find(|l| l["lot"] == lot)
            .unwrap_or_else(|| panic!("no {lot} in {lots}"))["signoff"]
            .clone()
    }

    fn report(&self, name: &str) -> String {
        let path = self.dir.join(name);
        self.ok(&["report", LOT, "--out", path.to_str().unwrap()]);
        std::fs::read_to_string(path).unwrap()
    }

    fn verify_clean(&self) -> String {
        self.ok(&["verify"])
    }
}

#[test]
fn sign_off_state_shows_in_lots_status_report_and_history() {
    let plant = Plant::new();

    // The demo reviews its Pd lot: `lots` shows it, as a column and in --json.
    let s = plant.lot_signoff(LOT);
    assert_eq!(s["state"], "reviewed", "{s}");
    assert_eq!(s["by"]["signer"], "M. Ferreira", "{s}");
    assert!(
        s["by"]["os_user"].as_str().is_some_and(|u| !u.is_empty()),
        "{s}"
    );
    assert!(
        s["by"]["comment"]
            .as_str()
            .unwrap()
            .contains("batch records"),
        "{s}"
    );
    assert_eq!(plant.lot_signoff("PT-AL-2610-B")["state"], "none");
    let table = plant.ok(&["lots"]);
    assert!(
        table.lines().next().unwrap().contains("sign-off"),
        "{table}"
    );
    let row = table.lines().find(|l| l.starts_with(LOT)).unwrap();
    assert!(row.contains(" reviewed "), "{row}");
    let st = plant.json(&["status", "--json"]);
    assert_eq!(st["signoffs"]["reviewed"], 1, "{st}");
    assert_eq!(st["signoffs"]["none"], 3, "{st}");
    let st = plant.ok(&["status"]);
    assert!(st.contains("0 approved, 1 reviewed (approval due)"), "{st}");

    // The demo's roster lists no accounts: a second name from the reviewer's own account
    // is refused (one account reviewing and approving), and so is the reviewer's name.
    let (_, err) = plant.expect(
        1,
        &[
            "signoff",
            LOT,
            "--meaning",
            "approved",
            "--as",
            "J. Lindqvist",
        ],
    );
    assert!(err.contains("same operating-system account"), "{err}");
    let (_, err) = plant.expect(
        1,
        &[
            "signoff",
            LOT,
            "--meaning",
            "approved",
            "--as",
            "M. Ferreira",
        ],
    );
    assert!(err.contains("who cannot also approve it"), "{err}");
    let (_, err) = plant.expect(1, &["signoff", LOT, "--meaning", "reviewed", "--as", "Eve"]);
    assert!(
        err.contains("'Eve' is not on the configuration's signer roster"),
        "{err}"
    );
    assert!(err.contains("'M. Ferreira', 'J. Lindqvist'"), "{err}");
    assert_eq!(plant.lot_signoff(LOT)["state"], "reviewed");

    // Declared shared (both signers list this account), the approval passes.
    let account = turnbook::audit::os_account();
    plant.edit_config(|t| {
        t.replace(
            "# accounts = [\"mferreira\"]",
            &format!("accounts = [\"mferreira\", \"{account}\"]"),
        )
        .replace(
            "# accounts = [\"jlindqvist\"]",
            &format!("accounts = [\"jlindqvist\", \"{account}\"]"),
        )
    });
    let out = plant.ok(&[
        "signoff",
        LOT,
        "--meaning",
        "approved",
        "--as",
        "J. Lindqvist",
        "--comment",
        "Released for the next campaign <b>as is</b>.",
    ]);
    assert!(
        out.contains("four eyes: rests on the review in event"),
        "{out}"
    );
    assert!(
        out.contains(&format!("by J. Lindqvist (account {account}")),
        "{out}"
    );
    assert_eq!(plant.lot_signoff(LOT)["state"], "approved");
    assert_eq!(plant.json(&["status", "--json"])["signoffs"]["approved"], 1);
    let html = plant.report("approved.html");
    assert!(
        html.contains("data-state=\"approved\""),
        "state box missing"
    );
    assert!(html.contains("Approved as J. Lindqvist"), "summary missing");
    assert!(html.contains("M. Ferreira") && html.contains(&account));
    assert!(html.contains("Released for the next campaign &lt;b&gt;as is&lt;/b&gt;."));
    assert!(!html.contains("<b>as is</b>"), "a comment must be escaped");
    assert_eq!(
        html.matches(">unchanged: covers the history as it stands<")
            .count(),
        2
    );
    plant.verify_clean();

    // A note on the lot is an event of its history: the approval goes stale.
    plant.ok(&[
        "note",
        "--lot",
        LOT,
        "Filter cake looked grey at discharge.",
    ]);
    let s = plant.lot_signoff(LOT);
    assert_eq!(s["state"], "stale", "{s}");
    assert_eq!(s["by"]["meaning"], "approved", "{s}");
    assert!(
        plant
            .ok(&["lots"])
            .lines()
            .any(|l| l.starts_with(LOT) && l.contains(" stale "))
    );
    assert_eq!(plant.json(&["status", "--json"])["signoffs"]["stale"], 1);
    let html = plant.report("stale.html");
    assert!(html.contains("data-state=\"stale\""));
    assert!(html.contains("A new review is due."));
    assert_eq!(
        html.matches(">changed: 1 later event (#").count(),
        2,
        "{html}"
    );
    let notes = &html[html.find("<section id=\"notes\">").unwrap()..];
    assert!(notes.contains("Filter cake looked grey at discharge."));
    assert!(notes.contains(&format!("lot {LOT}")));
    let out = plant.verify_clean();
    assert!(out.contains("(approved): no longer covers"), "{out}");

    // history: comments and notes, as text and in --json.
    let h = plant.ok(&["history", LOT]);
    let line = h
        .lines()
        .find(|l| l.contains("approved as J. Lindqvist"))
        .unwrap();
    assert!(
        line.contains("comment: Released for the next campaign"),
        "{line}"
    );
    assert!(line.contains(&format!("(account {account})")), "{line}");
    assert!(
        h.contains("on lot PD-C-2611-A: Filter cake looked grey"),
        "{h}"
    );
    let hj = plant.json(&["history", LOT, "--json"]);
    let texts: Vec<&str> = hj
        .as_array()
        .unwrap()
        .iter()
        .filter_map(|e| e["text"].as_str())
        .collect();
    assert!(
        texts.iter().any(|t| t.starts_with("Released for")),
        "{texts:?}"
    );
    assert!(
        texts.iter().any(|t| t.starts_with("Filter cake")),
        "{texts:?}"
    );
    assert!(
        texts.iter().any(|t| t.contains("batch records")),
        "{texts:?}"
    );
    // The demo's note on the Pt lot's batch is in that lot's history and report.
    let h = plant.ok(&["history", "PT-AL-2610-B"]);
    assert!(h.contains("on batch KV4-K-010: Feed drum changed"), "{h}");

    // Without a roster, signing is refused with how to set one; nothing is written.
    plant.edit_config(|t| t[..t.find("[[signers]]").unwrap()].to_string());
    let (_, err) = plant.expect(
        1,
        &[
            "signoff",
            LOT,
            "--meaning",
            "reviewed",
            "--as",
            "M. Ferreira",
        ],
    );
    assert!(err.contains("no signer roster is configured"), "{err}");
    assert!(err.contains("[[signers]]"), "{err}");
    assert_eq!(plant.lot_signoff(LOT)["state"], "stale");
    plant.verify_clean();
}
