//! `verify`'s check of the stored fits: each lot's newest fit is recomputed from the
//! records and compared with the stored one. Fits are derived data, outside the audit
//! chain, but reports and alerts rest on them, so an edited row must not pass. A fit made
//! by another engine version or under other settings is counted, not compared: a new
//! version or a changed criterion changes results without anyone tampering.

use serde_json::Value;

use super::error::Result;
use super::lots::{LotState, lot_state};
use crate::audit::{Finding, FitCheck};
use crate::config::Config;
use crate::fit;
use crate::model::calendar::CrossingDates;
use crate::store::{self, Connection};

/// Keys whose value depends on the day of computing, not on the records.
const VOLATILE: [&str; 1] = ["as_of"];

fn strip(v: &mut Value) {
    match v {
        Value::Object(m) => {
            for k in VOLATILE {
                m.remove(k);
            }
            m.values_mut().for_each(strip);
        }
        Value::Array(a) => a.iter_mut().for_each(strip),
        _ => {}
    }
}

/// The first place two JSON values differ, as a path ("forecast.x").
fn first_difference(a: &Value, b: &Value, path: &str) -> Option<String> {
    let here = || {
        if path.is_empty() {
            "(the whole analysis)".to_string()
        } else {
            path.to_string()
        }
    };
    match (a, b) {
        (Value::Object(x), Value::Object(y)) => {
            let keys: std::collections::BTreeSet<&String> = x.keys().chain(y.keys()).collect();
            keys.into_iter().find_map(|k| {
                let p = if path.is_empty() {
                    k.clone()
                } else {
                    format!("{path}.{k}")
                };
                match (x.get(k), y.get(k)) {
                    (Some(u), Some(w)) => first_difference(u, w, &p),
                    _ => Some(p),
                }
            })
        }
        (Value::Array(x), Value::Array(y)) if x.len() == y.len() => x
            .iter()
            .zip(y)
            .enumerate()
            .find_map(|(i, (u, w))| first_difference(u, w, &format!("{path}[{i}]"))),
        _ => (a != b).then(here),
    }
}

fn has_prior(v: &Value) -> bool {
    v.get("pooled").is_some_and(|p| !p.is_null())
}

/// Recompute each lot's newest stored fit made by this engine under these settings.
pub fn check_fits(conn: &Connection, cfg: &Config) -> Result<(FitCheck, Vec<Finding>)> {
    let mut check = FitCheck::default();
    let mut findings = Vec::new();
    let fingerprint = cfg.analysis_fingerprint();
    // One lot's fit in memory at a time: the newest fits of a site's lots are megabytes.
    for lot in store::replay::fitted_lots(conn)? {
        let Some((fit_id, mut f)) = store::replay::newest_fit(conn, &lot)? else {
            continue;
        };
        if f.engine_version != fit::ENGINE_VERSION {
            check.other_engine += 1;
            continue;
        }
        if f.config_sha256.as_deref() != Some(fingerprint.as_str()) {
            check.other_configuration += 1;
            continue;
        }
        if store::lots::newest_seq_of(conn, &f.lot)? != f.after_seq {
            check.stale += 1;
            continue;
        }
        let finding = |stored: String, expected: String| Finding {
            table: "fits".into(),
            row: f.lot.clone(),
            field: "analysis".into(),
            stored,
            expected,
        };
        let (state, streamed) = fresh_state(conn, cfg, &f.lot)?;
        // Read after the recompute: a lot's analysis is megabytes at 200,000 cycles.
        f.analysis = store::replay::fit_analysis(conn, fit_id)?.unwrap_or_default();
        match same_analysis(&f.analysis, state.analysis.as_ref()) {
            Some(true) => {
                check.identical += 1;
                let after = f.after_seq;
                findings.extend(current_checks(conn, &state, after, &fingerprint, streamed)?);
                continue;
            }
            Some(false) => {
                check.family_prior += 1;
                continue;
            }
            None => {}
        }
        let Ok(mut stored) = serde_json::from_str::<Value>(&f.analysis) else {
            check.differing += 1;
            findings.push(finding("unreadable JSON".into(), "an analysis".into()));
            continue;
        };
        let mut fresh = match &state.analysis {
            Some(a) => serde_json::to_value(a).map_err(store::StoreError::from)?,
            None => Value::Null,
        };
        if has_prior(&stored) || has_prior(&fresh) {
            check.family_prior += 1;
            continue;
        }
        strip(&mut stored);
        strip(&mut fresh);
        match first_difference(&stored, &fresh, "") {
            None => check.identical += 1,
            Some(path) => {
                check.differing += 1;
                findings.push(finding(
                    format!("{path} = {}", pick(&stored, &path)),
                    format!("{} (recomputed from the records)", pick(&fresh, &path)),
                ));
            }
        }
        findings.extend(current_checks(
            conn,
            &state,
            f.after_seq,
            &fingerprint,
            streamed,
        )?);
    }
    Ok((check, findings))
}

/// The stored analysis against the recomputed one, read into the analysis itself (a
/// lot's observed points as numbers, not as a JSON tree: a fit of 200,000 cycles is 8 MB
/// of text). `Some(true)` when identical but for the day of computing, `Some(false)` when
/// either rests on a family prior (not compared), `None` when they differ or the stored
/// text cannot be read so: the JSON comparison then names the first difference.
fn same_analysis(stored: &str, fresh: Option<&fit::LotAnalysis>) -> Option<bool> {
    let stored: Option<fit::LotAnalysis> = serde_json::from_str(stored).ok()?;
    let (Some(mut a), Some(b)) = (stored, fresh) else {
        return None;
    };
    if a.pooled.is_some() || b.pooled.is_some() {
        return Some(false);
    }
    let day = |x: &fit::LotAnalysis| {
        x.forecast
            .as_ref()
            .and_then(|f| f.dates.as_ref())
            .and_then(|d| d.as_of.clone())
    };
    if let Some(f) = a.forecast.as_mut() {
        // The dates are a flattened Option of optional fields: an undated forecast reads
        // back as dates with every field empty (serde), and must compare as undated.
        let empty = |d: &CrossingDates| {
            CrossingDates {
                as_of: None,
                ..d.clone()
            } == CrossingDates::default()
        };
        if f.dates.as_deref().is_some_and(empty) {
            f.dates = None;
        }
        if let Some(d) = f.dates.as_mut() {
            d.as_of = day(b);
        }
    }
    (a == *b).then_some(true)
}

/// The lot's stored line, printed entry and figures against the recomputed state.
fn current_checks(
    conn: &Connection,
    state: &LotState,
    after_seq: i64,
    fingerprint: &str,
    streamed: Option<StreamedCycles>,
) -> Result<Vec<Finding>> {
    let mut findings = Vec::new();
    findings.extend(check_line(conn, state, after_seq, fingerprint)?);
    findings.extend(super::lot_list::printed_finding(
        conn,
        &state.lot,
        after_seq,
        fingerprint,
    )?);
    findings.extend(match streamed {
        Some(cycles) => check_streamed_figures(conn, state, after_seq, cycles)?,
        None => check_figures(conn, state, after_seq)?,
    });
    Ok(findings)
}

/// What a streamed recompute found of the cycles' figures: how many cycles, and the
/// first that differs from its stored row.
struct StreamedCycles {
    count: usize,
    finding: Option<Finding>,
}

/// The lot's state recomputed from the records: held whole, or for a lot of very many
/// cycles streamed ([`super::large_lot`]) with each cycle's figures compared with its
/// stored row as it comes, so that `verify` holds no lot's cycles.
fn fresh_state(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
) -> Result<(LotState, Option<StreamedCycles>)> {
    let mut cycles = StreamedCycles {
        count: 0,
        finding: None,
    };
    let from = super::large_lot::STREAM_FROM;
    let mut compare = |s: &LotState, c: &super::lots::CycleState| {
        cycles.count += 1;
        if cycles.finding.is_some() {
            return Ok(());
        }
        let fresh = super::export::cycle_row(s, c);
        let stored = store::export::stored_cycle_figures(conn, lot, &fresh.batch_id)?;
        cycles.finding = match stored {
            Some(stored) => debug_difference(&stored, &fresh)
                .map(|(field, a, b)| figure_finding("cycle_figures", &fresh.batch_id, field, a, b)),
            None => Some(figure_finding(
                "cycle_figures",
                &fresh.batch_id,
                "row",
                "none".into(),
                "a row".into(),
            )),
        };
        Ok(())
    };
    let mut streamed = super::large_lot::streamed_state(conn, cfg, lot, from, &mut compare)?;
    if streamed.is_none() && store::records::cycle_count_of_lot(conn, lot)? >= from {
        // A lot nobody registered, recomputed the way the recompute streams it.
        streamed = super::lots::pending_state_streamed(conn, cfg, lot, &mut compare)?
            .map(|(state, _)| state);
    }
    Ok(match streamed {
        Some(state) => (state, Some(cycles)),
        None => (lot_state(conn, cfg, lot)?, None),
    })
}

/// [`check_figures`] for a streamed lot: its own figures, then the count of its cycles'
/// rows and the first cycle that differed.
fn check_streamed_figures(
    conn: &Connection,
    state: &LotState,
    after_seq: i64,
    cycles: StreamedCycles,
) -> Result<Option<Finding>> {
    let Some(lot) = store::export::stored_lot_figures(conn, &state.lot, after_seq)? else {
        return Ok(None);
    };
    let (fresh_lot, _) = super::export::figures_of(state);
    if let Some((field, stored, expected)) = debug_difference(&lot, &fresh_lot) {
        return Ok(Some(figure_finding(
            "lot_figures",
            &state.lot,
            field,
            stored,
            expected,
        )));
    }
    let stored = store::export::cycle_figures_count(conn, &state.lot)?;
    if stored != cycles.count {
        return Ok(Some(figure_finding(
            "cycle_figures",
            &state.lot,
            "rows",
            stored.to_string(),
            cycles.count.to_string(),
        )));
    }
    Ok(cycles.finding)
}

/// The lot's stored `lots` line (what `lots`, `status` and the digest show without
/// recomputing) against the line recomputed from the records; a difference is a finding
/// in table `lot_states`.
fn check_line(
    conn: &Connection,
    state: &super::lots::LotState,
    after_seq: i64,
    fingerprint: &str,
) -> Result<Option<Finding>> {
    let key = (fit::ENGINE_VERSION, fingerprint);
    let Some(json) = store::lots::stored_line(conn, &state.lot, after_seq, key)? else {
        return Ok(None);
    };
    let mut stored = serde_json::from_str::<Value>(&json).unwrap_or(Value::Null);
    let mut fresh =
        serde_json::to_value(super::lots::lot_line(state)).map_err(store::StoreError::from)?;
    strip(&mut stored);
    strip(&mut fresh);
    Ok(first_difference(&stored, &fresh, "").map(|path| Finding {
        table: "lot_states".into(),
        row: state.lot.clone(),
        field: "line".into(),
        stored: format!("{path} = {}", pick(&stored, &path)),
        expected: format!("{} (recomputed from the records)", pick(&fresh, &path)),
    }))
}

/// The lot's figures in `lot_figures` and `cycle_figures` (what the SQL views show)
/// against the figures recomputed from the records: the first difference is a finding.
fn check_figures(
    conn: &Connection,
    state: &super::lots::LotState,
    after_seq: i64,
) -> Result<Option<Finding>> {
    let Some((lot, mut cycles)) = store::export::stored_figures(conn, &state.lot, after_seq)?
    else {
        return Ok(None);
    };
    let (fresh_lot, mut fresh_cycles) = super::export::figures_of(state);
    let key = |c: &store::export::CycleFigures| (c.cycle_no, c.batch_id.clone());
    cycles.sort_by_key(key);
    fresh_cycles.sort_by_key(key);
    if let Some((field, stored, expected)) = debug_difference(&lot, &fresh_lot) {
        return Ok(Some(figure_finding(
            "lot_figures",
            &state.lot,
            field,
            stored,
            expected,
        )));
    }
    if cycles.len() != fresh_cycles.len() {
        let (n, m) = (cycles.len(), fresh_cycles.len());
        return Ok(Some(figure_finding(
            "cycle_figures",
            &state.lot,
            "rows",
            n.to_string(),
            m.to_string(),
        )));
    }
    for (c, f) in cycles.iter().zip(&fresh_cycles) {
        if let Some((field, stored, expected)) = debug_difference(c, f) {
            return Ok(Some(figure_finding(
                "cycle_figures",
                &c.batch_id,
                field,
                stored,
                expected,
            )));
        }
    }
    Ok(None)
}

fn figure_finding(
    table: &str,
    row: &str,
    field: impl Into<String>,
    stored: String,
    expected: String,
) -> Finding {
    Finding {
        table: table.into(),
        row: row.into(),
        field: field.into(),
        stored,
        expected: format!("{expected} (recomputed from the records)"),
    }
}

/// The first field whose value differs between two records of one type, read from their
/// Debug forms ("name: value" pairs in declaration order).
fn debug_difference<T: std::fmt::Debug + PartialEq>(
    a: &T,
    b: &T,
) -> Option<(String, String, String)> {
    if a == b {
        return None;
    }
    let (da, db) = (format!("{a:#?}"), format!("{b:#?}"));
    let mut field = "record";
    for (x, y) in da.lines().zip(db.lines()) {
        // Pretty Debug puts each field at four spaces: "    name: value" (a value such
        // as Some(..) continues on deeper lines).
        if let Some((name, _)) = x.strip_prefix("    ").and_then(|l| l.split_once(": "))
            && !name.starts_with(' ')
        {
            field = name;
        }
        if x != y {
            let value = |l: &str| {
                let l = l.trim().trim_end_matches(',');
                l.split_once(": ").map_or(l, |p| p.1).to_string()
            };
            return Some((field.to_string(), value(x), value(y)));
        }
    }
    Some((field.to_string(), da, db))
}

/// The value at a path such as `forecast.x` or `ranking[2].rss`, shortened for a line.
fn pick(v: &Value, path: &str) -> String {
    let mut cur = v;
    for part in path.split('.') {
        let (name, index) = match part.split_once('[') {
            Some((n, rest)) => (n, rest.trim_end_matches(']').parse::<usize>().ok()),
            None => (part, None),
        };
        if !name.is_empty() {
            match cur.get(name) {
                Some(x) => cur = x,
                None => return "(absent)".into(),
            }
        }
        if let Some(i) = index {
            match cur.get(i) {
                Some(x) => cur = x,
                None => return "(absent)".into(),
            }
        }
    }
    let s = cur.to_string();
    if s.chars().count() > 80 {
        format!("{}…", s.chars().take(80).collect::<String>())
    } else {
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn differences_are_found_by_path_and_volatile_keys_ignored() {
        let mut a: Value =
            serde_json::json!({"forecast": {"x": 16.4, "as_of": "2026-12-01"}, "n": [1, 2]});
        let mut b: Value =
            serde_json::json!({"forecast": {"x": 16.4, "as_of": "2026-12-02"}, "n": [1, 2]});
        strip(&mut a);
        strip(&mut b);
        assert_eq!(first_difference(&a, &b, ""), None);
        let c: Value = serde_json::json!({"forecast": {"x": 17.0}, "n": [1, 2]});
        assert_eq!(first_difference(&a, &c, "").as_deref(), Some("forecast.x"));
        assert_eq!(pick(&c, "forecast.x"), "17.0");
        let d: Value = serde_json::json!({"forecast": {"x": 16.4}, "n": [1, 3]});
        assert_eq!(first_difference(&a, &d, "").as_deref(), Some("n[1]"));
        assert_eq!(pick(&d, "n[1]"), "3");
    }

    #[test]
    fn an_undated_forecast_compares_as_read_back() {
        // A flat lot: its forecast carries no dates. Read back from its stored JSON, it
        // must compare equal in the analysis itself, not fall back to a JSON tree.
        let x: Vec<f64> = (1..=12).map(f64::from).collect();
        let y: Vec<f64> = x.iter().map(|c| 1.0 + 0.004 * (c * 1.7).sin()).collect();
        let series = fit::LotSeries {
            x,
            y,
            ..Default::default()
        };
        let fresh = fit::analyse(&series, &fit::AnalysisOptions::default());
        let forecast = fresh.forecast.as_ref().expect("a forecast");
        assert!(forecast.dates.is_none());
        let stored = serde_json::to_string(&fresh).expect("serialisable");
        assert_eq!(same_analysis(&stored, Some(&fresh)), Some(true));
        let mut other = fresh.clone();
        other.n_fitted += 1;
        assert_eq!(same_analysis(&stored, Some(&other)), None);
    }
}
