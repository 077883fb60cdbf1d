//! Values an export may hold but no instrument wrote: a date outside the plausible window,
//! a five-digit or signed year, a byte-order mark inside the text, and a number whose full
//! expansion would flood a message. Each refusal names the value and the rule.

use chrono::NaiveDate;
use turnbook::ingest::{ParseCache, ParseError, ParsedFile, Profile, parse};

fn profile(extra: &str) -> Profile {
    let toml = format!(
        r#"
kind = "cycles"
{extra}
columns.batch_id = {{ header = "Batch" }}
columns.started_at = {{ header = "Start" }}
columns.conversion = {{ header = "Conv", unit = "%" }}
"#
    );
    match Profile::from_toml(&toml) {
        Ok(p) => p,
        Err(e) => panic!("test profile invalid: {e}"),
    }
}

/// The present time the tests judge at, passed in as data.
fn now() -> chrono::NaiveDateTime {
    NaiveDate::from_ymd_opt(2026, 6, 15)
        .and_then(|d| d.and_hms_opt(12, 0, 0))
        .unwrap()
}

fn read_at(text: &str, p: &Profile) -> Result<ParsedFile, ParseError> {
    let mut cache = ParseCache::new();
    cache.set_now(now());
    cache.parse_valid(text.as_bytes(), p)
}

fn refused(text: &str, p: &Profile) -> ParseError {
    match read_at(text, p) {
        Ok(f) => panic!("expected a refusal, parsed {f:?}"),
        Err(e) => e,
    }
}

#[test]
fn a_date_far_ahead_is_refused_naming_the_value_and_the_window() {
    let p = profile("");
    let e = refused("Batch,Start,Conv\nB1,9999-12-31T00:00:00,50\n", &p);
    assert_eq!((e.line, e.column), (Some(2), Some(2)));
    assert!(e.found.contains("9999-12-31T00:00:00"), "{e}");
    assert!(
        e.expected.contains(
            "plausible window from 1990-01-01T00:00:00 to 2026-06-16T12:00:00 \
             (earliest_date to latest_days_ahead = 1 day(s) after the present time)"
        ),
        "{e}"
    );
    // One day ahead is inside the window (an instrument clock a little fast); a second
    // past it is not.
    assert!(read_at("Batch,Start,Conv\nB1,2026-06-16T12:00:00,50\n", &p).is_ok());
    assert!(read_at("Batch,Start,Conv\nB1,2026-06-16T12:00:01,50\n", &p).is_err());
}

#[test]
fn a_date_before_the_earliest_is_refused_and_the_window_is_configurable() {
    let e = refused(
        "Batch,Start,Conv\nB1,1989-12-31T23:59:59,50\n",
        &profile(""),
    );
    assert!(e.found.contains("1989-12-31T23:59:59"), "{e}");
    assert!(e.expected.contains("from 1990-01-01T00:00:00"), "{e}");
    // A profile for archived data reaches back further, and allows a week ahead.
    let wide = profile("earliest_date = \"1980-01-01\"\nlatest_days_ahead = 7");
    assert!(read_at("Batch,Start,Conv\nB1,1989-12-31T23:59:59,50\n", &wide).is_ok());
    assert!(read_at("Batch,Start,Conv\nB1,2026-06-22T00:00:00,50\n", &wide).is_ok());
    let e = refused("Batch,Start,Conv\nB1,2026-06-23T00:00:00,50\n", &wide);
    assert!(e.expected.contains("to 2026-06-22T12:00:00"), "{e}");
    // Without a present time only the earliest date bounds the window.
    assert!(
        parse(
            b"Batch,Start,Conv\nB1,2100-01-01T00:00:00,50\n",
            &profile("")
        )
        .is_ok()
    );
    assert!(
        parse(
            b"Batch,Start,Conv\nB1,1970-01-01T00:00:00,50\n",
            &profile("")
        )
        .is_err()
    );
}

#[test]
fn a_five_digit_or_signed_year_is_refused() {
    // Refused even where the window would allow it: the year rule stands on its own.
    let p = profile("earliest_date = \"1000-01-01\"\nlatest_days_ahead = 3660");
    for cell in [
        "+12026-01-05T10:00:00",
        "+2026-01-05T10:00:00",
        "-2026-01-05T10:00:00",
    ] {
        let e = refused(&format!("Batch,Start,Conv\nB1,{cell},50\n"), &p);
        assert!(e.found.contains(cell), "{cell}: {e}");
        assert_eq!(
            e.expected, "a date with a four-digit year and no sign",
            "{cell}"
        );
    }
}

#[test]
fn a_byte_order_mark_inside_the_text_is_refused() {
    let p = profile("");
    // At the very start it is dropped.
    let ok = read_at("\u{FEFF}Batch,Start,Conv\nB1,2026-01-05T10:00:00,50\n", &p).unwrap();
    let ParsedFile::Cycles(rows) = ok else {
        panic!("a cycles profile gives cycles");
    };
    assert_eq!(rows[0].batch_id, "B1");
    // In front of a batch id it would make an invisible second batch: refused, located.
    let e = refused(
        "Batch,Start,Conv\nB1,2026-01-05T10:00:00,50\n\u{FEFF}B1,2026-01-05T11:00:00,51\n",
        &p,
    );
    assert_eq!((e.line, e.column), (Some(3), Some(1)));
    assert!(
        e.expected
            .contains("a byte-order mark (U+FEFF) only at the very start"),
        "{e}"
    );
    assert!(e.found.contains("line 3, column 1"), "{e}");
    // The same inside UTF-16 text.
    let mut utf16 = vec![0xFF, 0xFE];
    for u in "Batch,Start,Conv\nB1\u{FEFF},2026-01-05T10:00:00,50\n".encode_utf16() {
        utf16.extend_from_slice(&u.to_le_bytes());
    }
    let p16 = profile("encoding = \"utf-16le\"");
    let e = parse(&utf16, &p16).unwrap_err();
    assert_eq!((e.line, e.column), (Some(2), Some(3)));
}

#[test]
fn a_huge_number_is_shown_short_in_the_message() {
    let e = refused(
        "Batch,Start,Conv\nB1,2026-01-05T10:00:00,1e308\n",
        &profile(""),
    );
    let message = e.to_string();
    assert!(
        message.contains("\"1e308\" % (1e306 fraction)"),
        "{message}"
    );
    assert!(
        message.len() < 300,
        "{} characters: {message}",
        message.len()
    );
    assert!(!message.contains("00000000000000000"), "{message}");
    // A long raw cell is cut, not printed whole.
    let long = format!("1{}", "0".repeat(400));
    let e = refused(
        &format!("Batch,Start,Conv\nB1,2026-01-05T10:00:00,{long}\n"),
        &profile(""),
    );
    assert!(e.to_string().len() < 300, "{e}");
}

#[test]
fn ingestion_judges_dates_at_the_present_time() {
    let tmp = tempfile::tempdir().unwrap();
    let text = r#"
database = "t.db"
quarantine = "quarantine"

[profiles.timed]
kind = "cycles"
columns.batch_id = { header = "Batch" }
columns.started_at = { header = "Start" }
columns.conversion = { header = "Conv", unit = "%" }

[[folders]]
path = "exports"
profile = "timed"
"#;
    std::fs::write(tmp.path().join("turnbook.toml"), text).unwrap();
    let cfg = turnbook::config::Config::load(&tmp.path().join("turnbook.toml")).unwrap();
    let dir = tmp.path().join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    let ahead = chrono::Utc::now().naive_utc() + chrono::TimeDelta::days(3);
    let today = chrono::Utc::now().naive_utc() - chrono::TimeDelta::hours(1);
    let fmt = "%Y-%m-%dT%H:%M:%S";
    std::fs::write(
        dir.join("ahead.csv"),
        format!("Batch,Start,Conv\nB1,{},50\n", ahead.format(fmt)),
    )
    .unwrap();
    std::fs::write(
        dir.join("today.csv"),
        format!("Batch,Start,Conv\nB2,{},50\n", today.format(fmt)),
    )
    .unwrap();
    let mut ing = turnbook::notebook::Ingestor::open(cfg).unwrap();
    let mut errors = Vec::new();
    let s = ing
        .ingest_paths(&[dir.join("ahead.csv"), dir.join("today.csv")], |o| {
            if let turnbook::notebook::FileOutcome::Rejected { error, .. } = o {
                errors.push(error.clone());
            }
        })
        .unwrap();
    assert_eq!((s.ingested, s.rejected), (1, 1), "{errors:?}");
    assert!(
        errors[0].contains(&ahead.format(fmt).to_string()),
        "{errors:?}"
    );
    assert!(errors[0].contains("plausible window"), "{errors:?}");
}
