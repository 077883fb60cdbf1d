//! `verify` checks each sign-off against the history it signed: it still covers the lot's
//! history until an event about the lot comes after it, and then no longer covers it. That
//! is reported apart from the findings (it is the normal course of things, not tampering),
//! by the report, by `turnbook verify` and by `verify --json`.
//!
//! Invented data: one-line exports of an imaginary reactor.

use std::path::Path;
use std::process::Command;

use turnbook::notebook::{self, Listing};

mod common;

fn ingest(cfg: &turnbook::config::Config, path: &Path) {
    let listing = Listing {
        files: vec![path.to_path_buf()],
        refused: Vec::new(),
    };
    let s = notebook::ingest_files(cfg.clone(), &listing, None, |_| {}).unwrap();
    assert_eq!(s.ingested, 1, "{:?}", s.errors);
}

fn verify_cli(root: &Path, json: bool) -> (Option<i32>, String) {
    let mut c = Command::new(common::turnbook_binary());
    c.arg("--config")
        .arg(root.join("turnbook.toml"))
        .arg("verify");
    if json {
        c.arg("--json");
    }
    let out = c.output().unwrap();
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
    )
}

/// A review of LOT-A by the roster's one signer.
fn review(cfg: &turnbook::config::Config) -> turnbook::notebook::Result<notebook::SignedOff> {
    let req = notebook::SignOffRequest {
        lot: "LOT-A",
        meaning: "reviewed",
        signer: "Q. Reviewer",
        comment: None,
    };
    notebook::sign_off(cfg, &req)
}

#[test]
fn a_sign_off_covers_until_a_later_event_concerns_its_lot() {
    let tmp = tempfile::tempdir().unwrap();
    let mut cfg = common::reactor_config(tmp.path(), 10);
    cfg.signers = vec![turnbook::model::signoff::Signer {
        name: "Q. Reviewer".into(),
        accounts: Vec::new(),
    }];
    let dir = tmp.path().join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(dir.join("a.csv"), "Batch,Lot,Conversion\nRD-1,LOT-A,61.5\n").unwrap();
    std::fs::write(dir.join("b.csv"), "Batch,Lot,Conversion\nRD-2,LOT-B,55.0\n").unwrap();
    std::fs::write(dir.join("c.csv"), "Batch,Lot,Conversion\nRD-3,LOT-A,58.0\n").unwrap();
    ingest(&cfg, &dir.join("a.csv"));
    let signed = review(&cfg).unwrap();

    // An event about another lot leaves the sign-off whole.
    ingest(&cfg, &dir.join("b.csv"));
    let r = notebook::verify(&cfg, &[]).unwrap();
    assert!(r.ok(), "{:?}", r.findings);
    assert_eq!(r.signoffs.len(), 1);
    let s = &r.signoffs[0];
    assert_eq!(s.seq, signed.receipt.seq);
    assert_eq!((s.lot.as_str(), s.meaning.as_str()), ("LOT-A", "reviewed"));
    assert!(s.covers, "{s:?}");
    assert_eq!(s.signed_sha256, signed.sha256);
    assert_eq!(s.current_sha256, signed.sha256);
    assert!(s.later_events.is_empty());
    let (code, out) = verify_cli(tmp.path(), false);
    assert_eq!(code, Some(0), "{out}");
    assert!(
        out.contains(&format!(
            "sign-off #{} of lot LOT-A (reviewed): still covers the lot's history",
            s.seq
        )),
        "{out}"
    );

    // A new batch of the lot: the sign-off no longer covers its history, which is not
    // tampering (verify still passes) and names the later event.
    ingest(&cfg, &dir.join("c.csv"));
    let r = notebook::verify(&cfg, &[]).unwrap();
    assert!(r.ok(), "{:?}", r.findings);
    let s = &r.signoffs[0];
    assert!(!s.covers);
    assert_eq!(s.later_events.len(), 1, "{s:?}");
    assert!(s.later_events[0] > s.seq);
    assert_ne!(s.current_sha256, s.signed_sha256);
    let why = s.reason.as_deref().unwrap();
    assert_eq!(
        why,
        format!("1 later event(s) concern the lot (#{})", s.later_events[0])
    );
    let (code, out) = verify_cli(tmp.path(), false);
    assert_eq!(code, Some(0), "{out}");
    assert!(
        out.contains("(reviewed): no longer covers the lot's history: 1 later event(s)"),
        "{out}"
    );
    let (code, out) = verify_cli(tmp.path(), true);
    assert_eq!(code, Some(0), "{out}");
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["signoffs"][0]["covers"], serde_json::json!(false));
    assert_eq!(v["signoffs"][0]["lot"], serde_json::json!("LOT-A"));

    // Signed again, the new sign-off covers; the first still does not.
    review(&cfg).unwrap();
    let r = notebook::verify(&cfg, &[]).unwrap();
    let covers: Vec<bool> = r.signoffs.iter().map(|s| s.covers).collect();
    assert_eq!(covers, vec![false, true]);
}
