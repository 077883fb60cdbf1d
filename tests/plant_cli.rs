//! Command-line conventions: help text on every option and argument, shell completions
//! and a manual page, the configuration's lookup order, negative numbers as values, and
//! "did you mean" for a mistyped lot.

mod common;

use std::process::Command;

use clap::CommandFactory;

#[test]
fn every_option_and_argument_has_help_text() {
    fn walk(cmd: &clap::Command, path: &str, missing: &mut Vec<String>) {
        for arg in cmd.get_arguments() {
            let id = arg.get_id().as_str();
            if id == "help" || id == "version" {
                continue;
            }
            if arg.get_help().is_none() && arg.get_long_help().is_none() {
                missing.push(format!("{path} {id}"));
            }
        }
        for sub in cmd.get_subcommands() {
            if sub.get_about().is_none() {
                missing.push(format!("{path} {} (the command)", sub.get_name()));
            }
            walk(sub, &format!("{path} {}", sub.get_name()), missing);
        }
    }
    let mut missing = Vec::new();
    walk(&turnbook::cli::Cli::command(), "turnbook", &mut missing);
    assert!(missing.is_empty(), "without help text: {missing:#?}");
}

fn tool(name: &str) -> bool {
    let found = Command::new("sh")
        .args(["-c", &format!("command -v {name}")])
        .output()
        .is_ok_and(|o| o.status.success());
    if !found {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI is set but {name} is missing"
        );
        eprintln!("skipped: {name} is missing");
    }
    found
}

#[test]
fn bash_completions_source_cleanly_and_complete_the_commands() {
    if !tool("bash") {
        return;
    }
    let out = common::run(&["completions", "bash"]);
    assert!(out.status.success(), "{out:?}");
    let tmp = tempfile::tempdir().unwrap();
    let script = tmp.path().join("turnbook.bash");
    std::fs::write(&script, &out.stdout).unwrap();
    let check = Command::new("bash")
        .arg("-c")
        .arg(format!(
            "set -e; source {}; complete -p turnbook; COMP_WORDS=(turnbook exp); COMP_CWORD=1; \
             _turnbook turnbook exp turnbook; echo \"${{COMPREPLY[@]}}\"",
            script.display()
        ))
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&check.stdout);
    assert!(
        check.status.success() && check.stderr.is_empty(),
        "{stdout}{}",
        String::from_utf8_lossy(&check.stderr)
    );
    assert!(stdout.contains("export"), "{stdout}");
}

#[test]
fn the_manual_page_renders_with_man() {
    if !tool("man") {
        return;
    }
    let out = common::run(&["manpage"]);
    assert!(out.status.success(), "{out:?}");
    let tmp = tempfile::tempdir().unwrap();
    let page = tmp.path().join("turnbook.1");
    std::fs::write(&page, &out.stdout).unwrap();
    let man = Command::new("man")
        .arg("-l")
        .arg(&page)
        .env("MANPAGER", "cat")
        .env("MANWIDTH", "100")
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&man.stdout);
    assert!(
        man.status.success(),
        "{}",
        String::from_utf8_lossy(&man.stderr)
    );
    for want in [
        "turnbook",
        "SYNOPSIS",
        "export",
        "--config",
        "TURNBOOK EXPORT",
        "--format",
    ] {
        assert!(
            text.contains(want),
            "{want} not in the rendered page:\n{text}"
        );
    }
}

/// `turnbook ARGS` run in `dir` with TURNBOOK_CONFIG set to `env` (or unset).
fn run_in(
    dir: &std::path::Path,
    env: Option<&std::path::Path>,
    args: &[&str],
) -> std::process::Output {
    let mut c = Command::new(env!("CARGO_BIN_EXE_turnbook"));
    c.current_dir(dir)
        .args(args)
        .env_remove("RUST_LOG")
        .env_remove("TURNBOOK_SMTP_URL");
    match env {
        Some(p) => c.env("TURNBOOK_CONFIG", p),
        None => c.env_remove("TURNBOOK_CONFIG"),
    };
    c.output().unwrap()
}

#[test]
fn the_configuration_is_looked_up_in_order_and_a_missing_one_says_where_it_looked() {
    let tmp = tempfile::tempdir().unwrap();
    let plant = tmp.path().join("plant");
    let out = common::run(&["demo", "--dir", plant.to_str().unwrap(), "--no-live"]);
    assert!(out.status.success(), "{out:?}");
    let elsewhere = tmp.path().join("elsewhere");
    std::fs::create_dir(&elsewhere).unwrap();

    // TURNBOOK_CONFIG, from any folder.
    let out = run_in(&elsewhere, Some(&plant.join("turnbook.toml")), &["lots"]);
    assert!(out.status.success(), "{out:?}");
    assert!(String::from_utf8_lossy(&out.stdout).contains("PD-C-2611-A"));
    // ./turnbook.toml when nothing names one.
    let out = run_in(&plant, None, &["lots"]);
    assert!(out.status.success(), "{out:?}");
    // --config wins over TURNBOOK_CONFIG.
    let out = run_in(
        &elsewhere,
        Some(&elsewhere.join("nothing.toml")),
        &[
            "--config",
            plant.join("turnbook.toml").to_str().unwrap(),
            "lots",
        ],
    );
    assert!(out.status.success(), "{out:?}");

    // Nothing anywhere (unless this machine has a system-wide one): exit 2, the places
    // looked in, and what to do.
    if !std::path::Path::new(turnbook::config::SYSTEM_CONFIG).exists() {
        let out = run_in(&elsewhere, None, &["lots"]);
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{err}");
        for want in [
            "TURNBOOK_CONFIG",
            "./turnbook.toml",
            "/etc/turnbook/turnbook.toml",
            "turnbook demo",
            "turnbook.example.toml",
        ] {
            assert!(err.contains(want), "{want} not in {err}");
        }
    }
}

#[test]
fn negative_numbers_are_values_and_a_mistyped_lot_gets_a_suggestion() {
    let tmp = tempfile::tempdir().unwrap();
    let plant = tmp.path().join("plant");
    let out = common::run(&["demo", "--dir", plant.to_str().unwrap(), "--no-live"]);
    assert!(out.status.success(), "{out:?}");
    let cfg = plant.join("turnbook.toml");
    let cfg = cfg.to_str().unwrap();

    // A series falling below zero, with a negative threshold and start value.
    let series = tmp.path().join("s.csv");
    std::fs::write(
        &series,
        "x,y\n1,1.0\n2,0.5\n3,0.0\n4,-0.5\n5,-1.0\n6,-1.5\n",
    )
    .unwrap();
    let out = common::run(&[
        "--config",
        cfg,
        "fit",
        "--series",
        series.to_str().unwrap(),
        "--model",
        "linear",
        "--threshold",
        "-2",
        "--json",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );

    let out = common::run(&["--config", cfg, "cycles", "PD-C-2611-B"]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{err}");
    assert!(err.contains("did you mean 'PD-C-2611-A'"), "{err}");
    let out = common::run(&["--config", cfg, "exclude", "KV4-H-0001", "--reason", "typo"]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{err}");
    assert!(err.contains("did you mean 'KV4-H-001'"), "{err}");
}

#[test]
fn mail_attempts_every_waiting_message_now_whatever_its_backoff() {
    let tmp = tempfile::tempdir().unwrap();
    let plant = tmp.path().join("plant");
    let out = common::run(&["demo", "--dir", plant.to_str().unwrap(), "--no-live"]);
    assert!(out.status.success(), "{out:?}");
    let cfg = plant.join("turnbook.toml");
    // One delivered message made to wait again, and a mail server that is down (a port
    // nobody listens on, taken and released).
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    {
        let conn = rusqlite::Connection::open(plant.join("turnbook.db")).unwrap();
        let n = conn
            .execute(
                "UPDATE alert_outbox SET delivered_at = NULL, next_attempt_at = queued_at
                 WHERE id = (SELECT min(id) FROM alert_outbox)",
                [],
            )
            .unwrap();
        assert_eq!(n, 1);
    }
    let mail = || {
        Command::new(env!("CARGO_BIN_EXE_turnbook"))
            .arg("--config")
            .arg(&cfg)
            .arg("mail")
            .env("TURNBOOK_SMTP_URL", format!("smtp://127.0.0.1:{port}"))
            .env_remove("RUST_LOG")
            .output()
            .unwrap()
    };
    // The first attempt fails and sets a backoff; asking again at once still attempts it.
    for _ in 0..2 {
        let out = mail();
        let stdout = String::from_utf8_lossy(&out.stdout);
        assert_eq!(out.status.code(), Some(1), "{out:?}");
        assert!(stdout.contains("1 attempted"), "{stdout}");
    }
}
