//! TLS to the central store: a private PostgreSQL that accepts only encrypted connections
//! (its certificate signed by a test authority made with `openssl`); a site ships over
//! `sslmode=require` with that authority as `[central] ca_file`, and `central verify` and
//! the site's `verify` read over TLS; a plain connection is refused with the server's
//! reason, and a server certificate from an authority not configured is refused by the
//! client.

mod central_support;

use central_support as pg;
use std::path::Path;

/// The configuration at `config` with `line` added to its `[central]` section.
fn with_central_line(config: &Path, line: &str) {
    let text = std::fs::read_to_string(config).unwrap();
    std::fs::write(
        config,
        text.replacen("[central]\n", &format!("[central]\n{line}\n"), 1),
    )
    .unwrap();
}

fn text(out: &std::process::Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    )
}

#[test]
fn shipping_over_tls_works_and_plain_or_unknown_servers_are_refused() {
    // Run where the other central-store tests run (CI starts PostgreSQL for them).
    if pg::server().is_none() {
        return;
    }
    let server = pg::tls::TlsServer::start();
    let base = format!("postgresql://postgres@127.0.0.1:{}/postgres", server.port);
    let ca = format!("ca_file = \"{}\"", server.ca_file().display());
    let root = tempfile::tempdir().unwrap();

    let cfg = pg::site(root.path(), "east", &format!("{base}?sslmode=require"), 10);
    with_central_line(&cfg, &ca);
    pg::exports(&cfg, "east", 0, 25);
    pg::ingest(&cfg);
    let n = pg::local_events(&cfg);
    let shipped = pg::turnbook(&cfg, &["ship"]);
    assert!(shipped.status.success(), "{shipped:?}");
    assert!(
        text(&shipped).contains(&format!("{n} event(s) shipped")),
        "{}",
        text(&shipped)
    );
    let verify = pg::turnbook(&cfg, &["verify"]);
    assert!(verify.status.success(), "{}", text(&verify));

    let center = pg::center(root.path(), &format!("{base}?sslmode=require"), &["east"]);
    with_central_line(&center, &ca);
    let checked = pg::turnbook(&center, &["central", "verify", "--json"]);
    assert!(checked.status.success(), "{}", text(&checked));
    let report: serde_json::Value = serde_json::from_slice(&checked.stdout).unwrap();
    assert_eq!(report["sites"][0]["site"], "east");
    assert_eq!(report["sites"][0]["events"], n);

    // The same server without TLS: the server refuses, and says why.
    let plain = pg::site(root.path(), "plain", &base, 10);
    pg::exports(&plain, "plain", 0, 2);
    pg::ingest(&plain);
    let refused = pg::turnbook(&plain, &["ship"]);
    assert!(!refused.status.success(), "{}", text(&refused));
    assert!(
        text(&refused).contains("no encryption"),
        "a plain connection should be refused for want of encryption: {}",
        text(&refused)
    );

    // TLS, but the server's certificate is not from the configured authority.
    let other = pg::site(root.path(), "other", &format!("{base}?sslmode=require"), 10);
    pg::tls::make_ca(root.path(), "stranger");
    with_central_line(
        &other,
        &format!(
            "ca_file = \"{}\"",
            root.path().join("stranger.pem").display()
        ),
    );
    pg::exports(&other, "other", 0, 2);
    pg::ingest(&other);
    let unknown = pg::turnbook(&other, &["ship"]);
    assert!(!unknown.status.success(), "{}", text(&unknown));
    assert!(
        text(&unknown).to_lowercase().contains("certificate"),
        "an unknown server certificate should be named: {}",
        text(&unknown)
    );
}
