//! Sign-offs through the application: a signer must be on the configured roster (and sign
//! from an allowed account when the roster lists accounts), the operating-system account
//! is recorded beside the name, and an approval needs an earlier review of the history as
//! it stands by a different signer from a different account (unless the roster declares
//! the account shared). A refusal writes nothing, and `verify` stays clean throughout.
//!
//! Invented data: one-line exports of an imaginary reactor; invented signer names.

use std::path::Path;

use turnbook::config::Config;
use turnbook::model::signoff::{SignOffStatus, Signer};
use turnbook::notebook::{self, Listing, NotebookError, SignOffRequest, SignedOff};

mod common;

const LOT: &str = "LOT-A";

fn signer(name: &str, accounts: &[&str]) -> Signer {
    Signer {
        name: name.to_string(),
        accounts: accounts.iter().map(|a| a.to_string()).collect(),
    }
}

/// A notebook with one batch of LOT-A and the given roster.
fn notebook(root: &Path, roster: Vec<Signer>) -> Config {
    let mut cfg = common::reactor_config(root, 10);
    cfg.signers = roster;
    batch(&cfg, root, 1, 61.5);
    cfg
}

fn batch(cfg: &Config, root: &Path, n: u32, conversion: f64) {
    let dir = root.join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(format!("run{n}.csv"));
    std::fs::write(
        &path,
        format!("Batch,Lot,Conversion\nRD-{n},{LOT},{conversion}\n"),
    )
    .unwrap();
    let listing = Listing {
        files: vec![path],
        refused: Vec::new(),
    };
    let s = notebook::ingest_files(cfg.clone(), &listing, None, |_| {}).unwrap();
    assert_eq!(s.ingested, 1, "{:?}", s.errors);
}

fn sign(cfg: &Config, meaning: &str, name: &str, account: &str) -> Result<SignedOff, String> {
    let req = SignOffRequest {
        lot: LOT,
        meaning,
        signer: name,
        comment: Some("checked against the batch record"),
    };
    notebook::sign_off_from(cfg, &req, account).map_err(|e| match e {
        NotebookError::Refused(m) => m,
        NotebookError::Store(e) => e.to_string(),
        other => panic!("expected a refusal (exit 1), got {other:?}"),
    })
}

/// The number of events, after checking the chain and every record.
fn verified_events(cfg: &Config) -> i64 {
    let r = notebook::verify(cfg, &[]).unwrap();
    assert!(r.ok(), "{:?}", r.findings);
    r.events
}

fn state(cfg: &Config) -> SignOffStatus {
    let s = notebook::sign_off_overview(cfg).unwrap();
    s.get(LOT).map_or(SignOffStatus::None, |s| s.state)
}

#[test]
fn signing_needs_a_name_on_the_roster_and_an_allowed_account() {
    let tmp = tempfile::tempdir().unwrap();
    let mut cfg = notebook(tmp.path(), Vec::new());
    let before = verified_events(&cfg);

    // No roster: refused, saying how to configure one; nothing written.
    let e = sign(&cfg, "reviewed", "M. Ferreira", "mf").unwrap_err();
    assert!(e.contains("no signer roster is configured"), "{e}");
    assert!(e.contains("[[signers]]") && e.contains("--as NAME"), "{e}");
    assert_eq!(verified_events(&cfg), before);

    cfg.signers = vec![
        signer("M. Ferreira", &["mferreira"]),
        signer("J. Lindqvist", &[]),
    ];
    // A name not on the roster: refused, naming the roster.
    let e = sign(&cfg, "reviewed", "Mallory", "mferreira").unwrap_err();
    assert!(e.contains("'Mallory' is not on"), "{e}");
    assert!(e.contains("'M. Ferreira', 'J. Lindqvist'"), "{e}");
    // A rostered name from an account not listed for it: refused.
    let e = sign(&cfg, "reviewed", "M. Ferreira", "jlindqvist").unwrap_err();
    assert!(
        e.contains("'mferreira'") && e.contains("'jlindqvist'"),
        "{e}"
    );
    // An unknown meaning is a usage error.
    let req = SignOffRequest {
        lot: LOT,
        meaning: "signed",
        signer: "M. Ferreira",
        comment: None,
    };
    assert!(matches!(
        notebook::sign_off_from(&cfg, &req, "mferreira"),
        Err(NotebookError::Usage(_))
    ));
    assert_eq!(verified_events(&cfg), before);

    // The right account: the roster's spelling and the account go into the event.
    let s = sign(&cfg, "reviewed", "m.  ferreira", "mferreira").unwrap();
    assert_eq!(
        (s.signer.as_str(), s.os_user.as_str()),
        ("M. Ferreira", "mferreira")
    );
    let h = notebook::history(&cfg, LOT).unwrap();
    let e = h.iter().find(|e| e.seq == s.receipt.seq).unwrap();
    assert_eq!(e.payload["signer"], "M. Ferreira");
    assert_eq!(e.payload["os_user"], "mferreira");
    assert_eq!(e.payload["comment"], "checked against the batch record");
    assert_eq!(e.text.as_deref(), Some("checked against the batch record"));
    // A signer without listed accounts may sign from any.
    sign(&cfg, "rejected", "J. Lindqvist", "anyone").unwrap();
    assert_eq!(verified_events(&cfg), before + 2);
}

#[test]
fn approval_needs_a_review_of_the_current_history_by_someone_else() {
    let tmp = tempfile::tempdir().unwrap();
    let cfg = notebook(
        tmp.path(),
        vec![signer("M. Ferreira", &[]), signer("J. Lindqvist", &[])],
    );
    let start = verified_events(&cfg);
    assert_eq!(state(&cfg), SignOffStatus::None);

    // No review yet.
    let e = sign(&cfg, "approved", "J. Lindqvist", "jl").unwrap_err();
    assert!(
        e.contains("cannot be approved") && e.contains("there is none"),
        "{e}"
    );

    let review = sign(&cfg, "reviewed", "M. Ferreira", "mf").unwrap();
    assert_eq!(state(&cfg), SignOffStatus::Reviewed);
    // The reviewer approving from another account: the same signer, refused.
    let e = sign(&cfg, "approved", "M. Ferreira", "mf-laptop").unwrap_err();
    assert!(e.contains("who cannot also approve it"), "{e}");
    // Another name typed from the reviewer's account (one account reviewing and
    // approving moments apart): refused.
    let e = sign(&cfg, "approved", "J. Lindqvist", "mf").unwrap_err();
    assert!(e.contains("same operating-system account 'mf'"), "{e}");
    assert_eq!(verified_events(&cfg), start + 1, "refusals write nothing");

    // A second signer from their own account.
    let ok = sign(&cfg, "approved", "J. Lindqvist", "jl").unwrap();
    assert_eq!(ok.review.as_ref().map(|r| r.seq), Some(review.receipt.seq));
    assert_eq!(state(&cfg), SignOffStatus::Approved);
    let r = notebook::verify(&cfg, &[]).unwrap();
    assert!(r.ok() && r.signoffs.iter().all(|s| s.covers), "{r:?}");

    // New data: the approval no longer covers the history; the old review does not count.
    batch(&cfg, tmp.path(), 2, 58.0);
    assert_eq!(state(&cfg), SignOffStatus::Stale);
    let e = sign(&cfg, "approved", "J. Lindqvist", "jl").unwrap_err();
    assert!(
        e.contains(&format!("the review in event {}", review.receipt.seq)),
        "{e}"
    );
    sign(&cfg, "reviewed", "M. Ferreira", "mf").unwrap();
    assert_eq!(state(&cfg), SignOffStatus::Reviewed);
    sign(&cfg, "approved", "J. Lindqvist", "jl").unwrap();
    assert_eq!(state(&cfg), SignOffStatus::Approved);
    verified_events(&cfg);
}

#[test]
fn an_account_both_signers_list_is_shared_by_declaration() {
    let tmp = tempfile::tempdir().unwrap();
    let cfg = notebook(
        tmp.path(),
        vec![
            signer("M. Ferreira", &["mf", "lab-pc"]),
            signer("J. Lindqvist", &["jl", "lab-pc"]),
        ],
    );
    sign(&cfg, "reviewed", "M. Ferreira", "lab-pc").unwrap();
    let s = sign(&cfg, "approved", "J. Lindqvist", "lab-pc").unwrap();
    assert_eq!(s.os_user, "lab-pc");
    assert_eq!(state(&cfg), SignOffStatus::Approved);
    verified_events(&cfg);
}

#[test]
fn the_roster_is_checked_when_the_configuration_loads() {
    let load = |roster: &str| {
        Config::from_toml(roster, Path::new("t.toml"), Path::new("."))
            .map(|c| c.signers.len())
            .map_err(|e| e.to_string())
    };
    let two = "[[signers]]\nname = \"M. Ferreira\"\naccounts = [\"mf\"]\n\
               [[signers]]\nname = \"J. Lindqvist\"\n";
    assert_eq!(load(two), Ok(2));
    let e = load("[[signers]]\nname = \"M. Ferreira\"\n[[signers]]\nname = \"m.  ferreira\"\n")
        .unwrap_err();
    assert!(
        e.contains("signers[1].name") && e.contains("already signers[0]"),
        "{e}"
    );
    let e = load("[[signers]]\nname = \"  \"\n").unwrap_err();
    assert!(e.contains("signers[0].name"), "{e}");
    let e = load("[[signers]]\nname = \"A\"\naccounts = [\"two words\"]\n").unwrap_err();
    assert!(
        e.contains("signers[0].accounts") && e.contains("'two words'"),
        "{e}"
    );
    let e = load("[[signers]]\nname = \"A\"\nrole = \"QA\"\n").unwrap_err();
    assert!(e.contains("role"), "{e}");
}
