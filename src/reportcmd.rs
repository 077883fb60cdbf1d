//! `turnbook report`: fill the report's plain data from the store, the fit and the audit
//! chain, and write the self-contained HTML (and CSV) files.

use std::path::Path;

use rusqlite::Connection;

use crate::analysis::{LotState, lot_state};
use crate::commands::{CmdResult, Failure};
use crate::config::Config;
use crate::fit;
use crate::ingest::Quantity;
use crate::report::{self, LotReport};
use crate::store;

fn report_forecast(f: &fit::Forecast) -> report::Forecast {
    report::Forecast {
        status: match f.status {
            fit::ForecastStatus::Ahead => report::ForecastStatus::Crosses,
            fit::ForecastStatus::UnboundedInterval => report::ForecastStatus::CrossesUnbounded,
            fit::ForecastStatus::ReachedAlready => report::ForecastStatus::AlreadyCrossed,
            fit::ForecastStatus::NotReached
            | fit::ForecastStatus::NoSignificantTrend
            | fit::ForecastStatus::Withheld => report::ForecastStatus::NeverCrosses,
        },
        x: f.x,
        lower: f.lower,
        upper: f.upper,
        confidence: f.confidence,
    }
}

fn fit_summary(cfg: &Config, a: &fit::LotAnalysis) -> Option<report::FitSummary> {
    let f = a.fit.as_ref()?;
    let t = fit::forecast::t_quantile(cfg.fitting.confidence, f.dof);
    let params = f
        .param_names
        .iter()
        .enumerate()
        .map(|(j, name)| {
            let se = f.std_errors.as_ref().and_then(|s| s.get(j).copied());
            let half = se.zip(t).map(|(s, t)| s * t);
            report::ParamLine {
                name: name.clone(),
                value: f.params[j],
                lower: half.map(|h| f.params[j] - h),
                upper: half.map(|h| f.params[j] + h),
            }
        })
        .collect();
    let plot = a.plot.as_ref();
    let curve = plot
        .map(|p| {
            p.x.iter()
                .zip(&p.fit)
                .filter_map(|(x, y)| y.map(|y| report::CurvePoint { x: *x, y }))
                .collect()
        })
        .unwrap_or_default();
    let band = plot
        .map(|p| {
            p.x.iter()
                .zip(p.lower.iter().zip(&p.upper))
                .filter_map(|(x, (lo, hi))| {
                    Some(report::BandPoint {
                        x: *x,
                        lower: (*lo)?,
                        upper: (*hi)?,
                    })
                })
                .collect()
        })
        .unwrap_or_default();
    Some(report::FitSummary {
        model_id: f.model.id().to_string(),
        x_label: if cfg.fitting.axis == "hours" {
            "time on stream (h)".into()
        } else {
            "cycle".into()
        },
        y_label: if cfg.fitting.measure == "ton" {
            "TON per cycle".into()
        } else {
            "activity (relative to cycle 1)".into()
        },
        params,
        level: cfg.fitting.confidence,
        observed: a
            .observed
            .iter()
            .map(|&(x, y, censored)| report::ObservedPoint { x, y, censored })
            .collect(),
        curve,
        band,
        threshold: a
            .forecast
            .as_ref()
            .and_then(|f| f.threshold)
            .or(plot.and_then(|p| p.threshold)),
        forecast: a.forecast.as_ref().map(report_forecast),
    })
}

fn alerts_of(conn: &Connection, lot: &str) -> store::Result<Vec<report::AlertLine>> {
    let mut stmt = conn.prepare(
        "SELECT o.queued_at, o.rule, o.subject, COALESCE(c.state, o.state) != 'cleared'
         FROM alert_outbox o LEFT JOIN alert_condition c ON c.alert_key = o.alert_key
         WHERE o.lot = ?1 ORDER BY o.id",
    )?;
    let rows = stmt
        .query_map([lot], |r| {
            Ok(report::AlertLine {
                raised_at: r.get(0)?,
                rule: r.get(1)?,
                subject: r.get(2)?,
                open: r.get(3)?,
            })
        })?
        .collect::<Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// Fill a lot report.
pub fn build(conn: &Connection, cfg: &Config, state: &LotState) -> Result<LotReport, Failure> {
    let history = crate::views::lot_history(conn, &state.lot)?;
    let current = crate::views::lot_fingerprint(conn, &state.lot)
        .ok()
        .map(|f| f.1);
    let mut corrections = Vec::new();
    let mut signoffs = Vec::new();
    let mut corrected_batches = Vec::new();
    for e in &history {
        let p = &e.payload;
        match e.kind.as_str() {
            "correction" => {
                let m = &p["measurement"];
                let batch = m["batch_id"].as_str().unwrap_or("").to_string();
                corrections.push(report::CorrectionLine {
                    at: e.at.clone(),
                    who: e.actor.clone(),
                    field: format!("{} of batch {batch}", m["quantity"].as_str().unwrap_or("?")),
                    old: p["previous"].to_string(),
                    new: m["value"].to_string(),
                    why: p["reason"].as_str().unwrap_or("").to_string(),
                });
                corrected_batches.push(batch);
            }
            "exclusion" => corrections.push(report::CorrectionLine {
                at: e.at.clone(),
                who: e.actor.clone(),
                field: format!(
                    "batch {} excluded from fits",
                    p["batch_id"].as_str().unwrap_or("?")
                ),
                old: (!p["excluded"].as_bool().unwrap_or(false)).to_string(),
                new: p["excluded"].to_string(),
                why: p["reason"].as_str().unwrap_or("").to_string(),
            }),
            "sign-off" => {
                let sha = p["signed_sha256"].as_str().unwrap_or("").to_string();
                signoffs.push(report::SignOffLine {
                    who: e.actor.clone(),
                    at: e.at.clone(),
                    meaning: p["meaning"].as_str().unwrap_or("").to_string(),
                    covers_current: current.as_deref() == Some(sha.as_str()),
                    signed_sha256: sha,
                });
            }
            _ => {}
        }
    }
    let rec = state.record.as_ref();
    let site_currency = rec
        .and_then(|r| r.site.as_ref())
        .and_then(|s| cfg.sites.iter().find(|x| &x.name == s))
        .and_then(|s| s.currency.clone());
    let identity = report::LotIdentity {
        lot: state.lot.clone(),
        catalyst: rec.map_or("(not registered)".into(), |r| r.catalyst.clone()),
        metal: rec.map_or(String::new(), |r| r.metal.clone()),
        loading_wt_pct: rec.map_or(f64::NAN, |r| r.loading_wt_pct),
        charged_mass_g: rec.map_or(f64::NAN, |r| r.charged_mass_g),
        received: rec.and_then(|r| r.received.clone()),
        supplier_lot: rec.and_then(|r| r.supplier_lot.clone()),
        cost: rec.and_then(|r| r.cost),
        currency: site_currency,
        site: rec.and_then(|r| r.site.clone()).unwrap_or_default(),
    };
    let cycles = state
        .cycles
        .iter()
        .map(|c| {
            let m = c.metrics.as_ref();
            let has = |f: &str| c.flags.iter().any(|x| x == f);
            report::CycleLine {
                cycle_no: c.cycle,
                batch_id: c.view.batch_id.clone(),
                started_at: c.view.started_at.clone(),
                values: Quantity::ALL
                    .iter()
                    .filter_map(|q| {
                        c.view.get(*q).map(|v| report::ReportValue {
                            quantity: *q,
                            value: v,
                        })
                    })
                    .collect(),
                ton: m.and_then(|m| m.ton),
                tof_per_h: m.and_then(|m| m.tof_per_h),
                k_app_per_h: m.and_then(|m| m.k_app_per_h),
                activity: m.and_then(|m| m.activity),
                flags: report::CycleFlags {
                    censored: has("censored"),
                    pending: has("pending"),
                    conflict: has("conflict"),
                    excluded: has("excluded"),
                    corrected: corrected_batches.contains(&c.view.batch_id),
                },
                sources: c
                    .sources
                    .iter()
                    .flat_map(|s| {
                        s.lines.iter().map(|l| report::SourceRef {
                            file_name: s.path.clone(),
                            sha256: s.sha256.clone(),
                            line: u64::try_from(*l).unwrap_or(0),
                        })
                    })
                    .collect(),
            }
        })
        .collect();
    let v = crate::audit::verify(conn)?;
    let verify = report::VerifyLine {
        ran_at: crate::audit::now_utc(),
        outcome: if v.ok() {
            report::VerifyOutcome::Intact {
                entries: v.events as u64,
            }
        } else {
            report::VerifyOutcome::Broken {
                first_broken: v.findings[0].to_string(),
            }
        },
    };
    Ok(LotReport {
        generated_at: crate::audit::now_utc(),
        turnbook_version: env!("CARGO_PKG_VERSION").to_string(),
        identity,
        cycles,
        fit: state.analysis.as_ref().and_then(|a| fit_summary(cfg, a)),
        alerts: alerts_of(conn, &state.lot)?,
        corrections,
        signoffs,
        verify: Some(verify),
        cautions: Vec::new(),
    })
}

/// Fill the site summary across all lots.
pub fn build_site(
    conn: &Connection,
    cfg: &Config,
    site: Option<&str>,
) -> Result<report::SiteReport, Failure> {
    let mut lots = Vec::new();
    for name in crate::analysis::lot_names(conn)? {
        let s = lot_state(conn, cfg, &name)?;
        let lot_site = s.record.as_ref().and_then(|r| r.site.clone());
        if site.is_some() && lot_site.as_deref() != site {
            continue;
        }
        let open: u32 = conn.query_row(
            "SELECT COUNT(*) FROM alert_condition WHERE lot = ?1 AND state != 'cleared'",
            [&name],
            |r| r.get(0),
        )?;
        let a = s.analysis.as_ref();
        let state = if s.record.is_none() {
            "pending: lot not registered".to_string()
        } else if s.attention.is_empty() {
            "in service".to_string()
        } else {
            s.attention.join("; ")
        };
        lots.push(report::SiteLotLine {
            lot: name.clone(),
            catalyst: s
                .record
                .as_ref()
                .map_or("(not registered)".into(), |r| r.catalyst.clone()),
            metal: s.record.as_ref().map_or(String::new(), |r| r.metal.clone()),
            state,
            cycles: s.cycles.len() as u32,
            latest_activity: s.latest_activity(),
            forecast: a.and_then(|a| a.forecast.as_ref()).map(report_forecast),
            open_alerts: open,
            activity_history: s
                .cycles
                .iter()
                .filter_map(|c| c.metrics.as_ref().and_then(|m| m.activity))
                .collect(),
            threshold: a
                .and_then(|a| a.forecast.as_ref())
                .and_then(|f| f.threshold),
        });
    }
    Ok(report::SiteReport {
        generated_at: crate::audit::now_utc(),
        turnbook_version: env!("CARGO_PKG_VERSION").to_string(),
        site: site.map_or_else(
            || {
                cfg.sites
                    .first()
                    .map_or("all sites".into(), |s| s.name.clone())
            },
            str::to_string,
        ),
        lots,
        cautions: Vec::new(),
    })
}

/// Write a lot's HTML report and, when asked, its CSV table.
pub fn write_lot(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
    out: &Path,
    csv: Option<&Path>,
) -> Result<(), Failure> {
    write_lot_as_of(conn, cfg, lot, None, out, csv)
}

/// Write a lot's report as it stood after event `as_of` (None: now).
pub fn write_lot_as_of(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
    as_of: Option<i64>,
    out: &Path,
    csv: Option<&Path>,
) -> Result<(), Failure> {
    let state = crate::analysis::lot_state_as_of(conn, cfg, lot, as_of)?;
    if state.record.is_none() && state.cycles.is_empty() {
        return Err(Failure::rejected(format!(
            "no lot '{lot}' is registered and no cycle names it"
        )));
    }
    let r = build(conn, cfg, &state)?;
    std::fs::write(out, report::lot_html(&r))
        .map_err(|e| Failure::rejected(format!("cannot write {}: {e}", out.display())))?;
    if let Some(csv) = csv {
        std::fs::write(csv, report::lot_csv(&r))
            .map_err(|e| Failure::rejected(format!("cannot write {}: {e}", csv.display())))?;
    }
    Ok(())
}

/// `turnbook report`.
pub fn run(
    cfg: &Config,
    lot: Option<&str>,
    site: bool,
    as_of: Option<i64>,
    out: &Path,
    csv: Option<&Path>,
) -> CmdResult {
    let conn = store::open(&cfg.database_path())?;
    match (lot, site) {
        (Some(lot), false) => {
            write_lot_as_of(&conn, cfg, lot, as_of, out, csv)?;
            match as_of {
                Some(seq) => println!(
                    "report of lot {lot} as it stood after event {seq} written to {}",
                    out.display()
                ),
                None => println!("report of lot {lot} written to {}", out.display()),
            }
        }
        (None, true) => {
            let s = build_site(&conn, cfg, None)?;
            std::fs::write(out, report::site_html(&s))
                .map_err(|e| Failure::rejected(format!("cannot write {}: {e}", out.display())))?;
            println!("site report written to {}", out.display());
        }
        _ => {
            return Err(Failure::usage(
                "give a LOT, or --site for the summary of all lots",
            ));
        }
    }
    Ok(0)
}
