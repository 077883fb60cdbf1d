//! Reports: fill the report's plain data from the store, the fit and the audit
//! chain, and write the self-contained HTML (and CSV) files.

use std::path::Path;

use super::error::{NotebookError, Result};
use super::history::HistoryEntry;
use super::lots::{LotState, lot_state, no_such_lot};
use crate::config::{Axis, Config, Measure};
use crate::fit;
use crate::model::LotRecord;
use crate::model::Quantity;
use crate::model::time::now_utc;
use crate::report::{self, LotReport};
use crate::store::{self, Connection};

fn report_forecast(f: &fit::Forecast) -> report::Forecast {
    report::Forecast {
        status: f.status,
        x: f.x,
        lower: f.lower,
        upper: f.upper,
        confidence: f.confidence,
        dates: f
            .dates
            .as_ref()
            .filter(|d| d.crossing_date.is_some())
            .map(|d| {
                crate::alert::dates_sentence(d)
                    .trim_end_matches('.')
                    .to_string()
            }),
    }
}

/// What the fit's y is, with its basis and reference cycle.
fn y_label(cfg: &Config, reference: Option<u32>) -> String {
    if cfg.fitting.measure == Measure::Ton {
        return "TON per cycle".into();
    }
    format!(
        "activity (relative to cycle {}, per {})",
        reference.unwrap_or(1),
        match cfg.chemistry.activity_basis {
            crate::chem::ActivityBasis::CatalystRatio => "catalyst-to-substrate ratio",
            crate::chem::ActivityBasis::MetalCharged => "mol metal charged",
        }
    )
}

fn fit_summary(
    cfg: &Config,
    a: &fit::LotAnalysis,
    reference: Option<u32>,
) -> Option<report::FitSummary> {
    let f = a.fit.as_ref()?;
    let t = fit::t_quantile(cfg.fitting.confidence, f.dof);
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
        x_label: if cfg.fitting.axis == Axis::Hours {
            "time on stream (h)".into()
        } else {
            "cycle".into()
        },
        y_label: y_label(cfg, reference),
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

fn family_forecast(a: &fit::LotAnalysis) -> Option<report::FamilyForecast> {
    let p = a.pooled.as_ref()?;
    Some(report::FamilyForecast {
        lots: p.prior.lots.clone(),
        spread_assumed: p.prior.ln_kd.assumed,
        own_share: p.own_share,
        headline: p.headline,
        with_prior: p.forecast.as_ref().map(report_forecast),
        lot_alone: p.lot_alone.as_ref().map(report_forecast),
    })
}

fn alerts_of(conn: &Connection, lot: &str) -> store::Result<Vec<report::AlertLine>> {
    Ok(store::outbox::alerts_of_lot(conn, lot)?
        .into_iter()
        .map(|a| report::AlertLine {
            raised_at: a.queued_at,
            rule: a.rule,
            subject: a.subject,
            open: a.open,
        })
        .collect())
}

/// Fill a lot report.
pub fn build(conn: &Connection, cfg: &Config, state: &LotState) -> Result<LotReport> {
    let history = crate::notebook::history::lot_history(conn, &state.lot)?;
    let current = super::signoffs::lot_fingerprint(conn, &state.lot)
        .ok()
        .map(|f| f.1);
    let entries = hand_entries(&history, current.as_deref());
    let signoff_state = super::signoffs::lot_sign_off_state(conn, &state.lot)?;
    Ok(LotReport {
        generated_at: now_utc(),
        turnbook_version: env!("CARGO_PKG_VERSION").to_string(),
        identity: identity(cfg, state),
        cycles: cycle_lines(state, &entries.corrected_batches),
        fit: state
            .analysis
            .as_ref()
            .and_then(|a| fit_summary(cfg, a, state.reference_cycle)),
        alerts: alerts_of(conn, &state.lot)?,
        corrections: entries.corrections,
        signoffs: entries.signoffs,
        verify: Some(verify_line(conn, cfg)?),
        cautions: Vec::new(),
        cause_hints: super::causes::lot_causes(cfg, state)
            .map(|h| h.lines())
            .unwrap_or_default(),
        activity_note: Some(report::ActivityNote {
            basis: state.activity_basis.key().to_string(),
            definition: state.activity_basis.definition().to_string(),
            reference_cycle: state.reference_cycle,
            reference_moved: state.reference_moved,
        }),
        family: state.analysis.as_ref().and_then(family_forecast),
        notes: entries.notes,
        signoff_state,
    })
}

/// The corrections, exclusions and sign-offs of a lot's history, as the report lists them.
struct HandEntries {
    corrections: Vec<report::CorrectionLine>,
    signoffs: Vec<report::SignOffLine>,
    notes: Vec<report::NoteLine>,
    corrected_batches: Vec<String>,
}

fn hand_entries(history: &[HistoryEntry], current: Option<&str>) -> HandEntries {
    let mut corrections = Vec::new();
    let mut signoffs = Vec::new();
    let mut notes = Vec::new();
    let mut corrected_batches = Vec::new();
    for e in history {
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
            "sign-off" => signoffs.push(sign_off_line(history, e, current)),
            "note" => notes.push(report::NoteLine {
                at: e.at.clone(),
                who: e.actor.clone(),
                on: match (p["batch_id"].as_str(), p["lot"].as_str()) {
                    (Some(b), _) => format!("batch {b}"),
                    (None, Some(l)) => format!("lot {l}"),
                    (None, None) => e.subject.clone(),
                },
                text: p["text"].as_str().unwrap_or("").to_string(),
            }),
            _ => {}
        }
    }
    HandEntries {
        corrections,
        signoffs,
        notes,
        corrected_batches,
    }
}

/// A sign-off as the report lists it: who signed as whom, what, the comment, and the
/// events of the lot that came after it.
fn sign_off_line(
    history: &[HistoryEntry],
    e: &HistoryEntry,
    current: Option<&str>,
) -> report::SignOffLine {
    let p = &e.payload;
    let text = |k: &str| p[k].as_str().map(str::to_string);
    let sha = text("signed_sha256").unwrap_or_default();
    report::SignOffLine {
        who: e.actor.clone(),
        at: e.at.clone(),
        meaning: text("meaning").unwrap_or_default(),
        covers_current: current == Some(sha.as_str()),
        signed_sha256: sha,
        signer: text("signer"),
        os_user: text("os_user"),
        what: text("what").unwrap_or_default(),
        comment: text("comment"),
        later_events: history
            .iter()
            .filter(|l| l.seq > e.seq && l.kind != crate::model::chain::SIGN_OFF_KIND)
            .map(|l| l.seq)
            .collect(),
    }
}

fn identity(cfg: &Config, state: &LotState) -> report::LotIdentity {
    let rec = state.record.as_ref();
    let site_currency = rec
        .and_then(|r| r.site.as_ref())
        .and_then(|s| cfg.sites.iter().find(|x| &x.name == s))
        .and_then(|s| s.currency.clone());
    // A lot nobody registered is shown with what is known of it: its name.
    let record = rec.cloned().unwrap_or_else(|| LotRecord {
        lot: state.lot.clone(),
        catalyst: "(not registered)".into(),
        metal: String::new(),
        loading_wt_pct: f64::NAN,
        charged_mass_g: f64::NAN,
        received: None,
        supplier_lot: None,
        cost: None,
        site: None,
        water_content_wt_pct: None,
        family: None,
    });
    report::LotIdentity {
        record,
        currency: site_currency,
    }
}

fn cycle_lines(state: &LotState, corrected_batches: &[String]) -> Vec<report::CycleLine> {
    state
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
                activity_se: m.and_then(|m| m.activity_se),
                tof_initial_per_h: m.and_then(|m| m.initial_tof_per_h),
                ton_per_metal_available: m.and_then(|m| m.ton_available),
                metal_charged_mmol: m.and_then(|m| m.metal_mol).map(|n| n * 1000.0),
                metal_available_mmol: m.and_then(|m| m.metal_available_mol).map(|n| n * 1000.0),
                flags: report::CycleFlags {
                    censored: has("censored"),
                    pending: has("pending"),
                    conflict: has("conflict"),
                    excluded: has("excluded"),
                    corrected: corrected_batches.contains(&c.view.batch_id),
                    ratio_off_usual: has("ratio-off-usual"),
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
        .collect()
}

/// The audit chain's state: the last recorded verification and an incremental check of
/// the events after it, with the notebook's key and witness (a full replay stays
/// `verify`'s job; see [`super::verifying::audit_status`]).
fn verify_line(conn: &Connection, cfg: &Config) -> Result<report::VerifyLine> {
    let status = super::verifying::audit_status(cfg, conn)?;
    Ok(report::VerifyLine {
        ran_at: status.when(),
        outcome: match status.first_finding() {
            None => report::VerifyOutcome::Intact {
                entries: u64::try_from(status.events()).unwrap_or(0),
            },
            Some(first_broken) => report::VerifyOutcome::Broken { first_broken },
        },
    })
}

/// Fill the site summary across all lots.
pub fn build_site(
    conn: &Connection,
    cfg: &Config,
    site: Option<&str>,
) -> Result<report::SiteReport> {
    let mut lots = Vec::new();
    for name in store::lots::lot_names(conn)? {
        let s = lot_state(conn, cfg, &name)?;
        let lot_site = s.record.as_ref().and_then(|r| r.site.clone());
        if site.is_some() && lot_site.as_deref() != site {
            continue;
        }
        let open = store::outbox::open_count(conn, &name)?;
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
        generated_at: crate::model::time::now_utc(),
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
) -> Result<()> {
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
) -> Result<()> {
    if let Some(seq) = as_of {
        let newest = store::queries::newest_event(conn)?;
        if seq > newest || seq < 1 {
            return Err(NotebookError::Refused(format!(
                "--as-of {seq}: the notebook's events run from 1 to {newest}; expected an event in that range"
            )));
        }
    }
    let state = super::lots::lot_state_as_of(conn, cfg, lot, as_of)?;
    if state.record.is_none() && state.cycles.is_empty() {
        return Err(no_such_lot(lot));
    }
    let r = build(conn, cfg, &state)?;
    std::fs::write(out, report::lot_html(&r))
        .map_err(|e| NotebookError::Refused(format!("cannot write {}: {e}", out.display())))?;
    if let Some(csv) = csv {
        let lines: Vec<_> = super::lots::cycle_lines(&state)
            .into_iter()
            .map(|c| (state.lot.clone(), c))
            .collect();
        super::export::write_csv_file(&lines, csv)?;
    }
    Ok(())
}

/// Write a lot's report as it stood after event `as_of` (None: now), and its CSV table
/// when asked.
pub fn write_lot_report(
    cfg: &Config,
    lot: &str,
    as_of: Option<i64>,
    out: &Path,
    csv: Option<&Path>,
) -> Result<()> {
    write_lot_as_of(&open(cfg)?, cfg, lot, as_of, out, csv)
}

/// Write the site summary across all lots.
pub fn write_site_report(cfg: &Config, out: &Path) -> Result<()> {
    write_site(&open(cfg)?, cfg, out)
}

/// Write every lot's cycles as one CSV (`report --site --csv`), the export's columns.
pub fn write_site_csv(cfg: &Config, csv: &Path) -> Result<()> {
    let lines = super::export::export_lines(cfg, None, None)?;
    super::export::write_csv_file(&lines, csv)
}

fn write_site(conn: &Connection, cfg: &Config, out: &Path) -> Result<()> {
    let s = build_site(conn, cfg, None)?;
    std::fs::write(out, report::site_html(&s))
        .map_err(|e| NotebookError::Refused(format!("cannot write {}: {e}", out.display())))
}

fn open(cfg: &Config) -> Result<Connection> {
    Ok(store::open(&cfg.database_path())?)
}

/// Write every lot's report (HTML and CSV) and the site summary into `dir`; returns the
/// lot reports written.
pub fn write_all_reports(cfg: &Config, dir: &Path) -> Result<Vec<std::path::PathBuf>> {
    let conn = open(cfg)?;
    std::fs::create_dir_all(dir)?;
    let mut written = Vec::new();
    for lot in store::lots::lot_names(&conn)? {
        let html = dir.join(format!("{lot}.html"));
        let csv = dir.join(format!("{lot}.csv"));
        write_lot(&conn, cfg, &lot, &html, Some(&csv))?;
        written.push(html);
    }
    write_site(&conn, cfg, &dir.join("site.html"))?;
    Ok(written)
}
