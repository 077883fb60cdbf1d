//! Self-contained HTML pages: one file with inline CSS and inline SVG, no scripts, no
//! network, so a report can be archived, mailed and opened years later, and printed.
//!
//! Every string that came from a user or a file passes through [`escape_html`] (in the
//! page) or through plotters' own escaping (in the charts).

use std::fmt::Write as _;

use crate::model::Quantity;

use super::chart::{activity_svg, sparkline_svg, ton_svg};
use super::escape::{escape_html as esc, fmt_opt, fmt_pct, fmt_sig};
use super::model::{
    CycleLine, FamilyForecast, FitSummary, Forecast, ForecastStatus, LotReport, SiteReport,
    VerifyOutcome,
};
use super::table::simple_table;

/// Cautions every report shows, whatever the site adds.
pub const FIXED_CAUTIONS: [&str; 3] = [
    "Spent catalysts can be pyrophoric, especially supported precious metals wet with \
     solvent or dried with adsorbed hydrogen: keep them wet and handle them under the \
     site's procedures.",
    "Forecasts are advisory: they extrapolate a fitted model and can be wrong when the \
     process changes (a new feed lot, a poison, a different temperature).",
    "Batch release follows the site's QA procedures and local regulations; this report \
     supports that decision and does not replace it.",
];

const STYLE: &str = r#"
:root { --ink:#1d232b; --muted:#5b6570; --line:#d5dbe1; --warn:#8a4b00; --bad:#a3162b; --ok:#17603a; }
* { box-sizing: border-box; }
body { font-family: system-ui, "Segoe UI", "DejaVu Sans", Arial, sans-serif; color: var(--ink);
       margin: 1.5rem auto; max-width: 1200px; padding: 0 1rem; line-height: 1.4; }
h1 { font-size: 1.5rem; margin: 0 0 .25rem; }
h2 { font-size: 1.15rem; margin: 1.6rem 0 .5rem; border-bottom: 2px solid var(--line); padding-bottom: .2rem; }
.meta { color: var(--muted); font-size: .9rem; }
table { border-collapse: collapse; width: 100%; font-size: .85rem; }
th, td { border: 1px solid var(--line); padding: .25rem .4rem; text-align: left; vertical-align: top; }
th { background: #f1f4f7; }
table.params { width: auto; min-width: 28rem; }
td.nowrap { white-space: nowrap; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.wide { overflow-x: auto; }
dl.identity { display: grid; grid-template-columns: max-content 1fr max-content 1fr; gap: .2rem 1rem; }
dl.identity dt { color: var(--muted); }
dl.identity dd { margin: 0; }
dl.definitions { font-size: .85rem; }
dl.definitions dt { font-weight: 600; }
dl.definitions dd { margin: 0 0 .3rem 1rem; }
.cautions { border: 2px solid var(--warn); background: #fff7ec; padding: .5rem 1rem; }
.cautions li { margin: .2rem 0; }
.flag { display: inline-block; padding: 0 .3rem; margin: 0 .1rem .1rem 0; border-radius: .2rem;
        background: #eef1f4; font-size: .75rem; }
.flag-censored, .flag-conflict { background: #fde7c8; }
.flag-excluded { background: #f6d3d8; }
.ok { color: var(--ok); font-weight: 600; }
.bad { color: var(--bad); font-weight: 600; }
.hash { font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size: .75rem; word-break: break-all; }
figure { margin: .5rem 0; }
figure svg { max-width: 100%; height: auto; }
.chart-missing { border: 1px dashed var(--line); padding: 1rem; color: var(--muted); }
svg.spark { vertical-align: middle; }
footer { margin-top: 2rem; color: var(--muted); font-size: .8rem; }
table.cycles th, table.cycles td { padding: .2rem .3rem; }
@page { size: A4 landscape; margin: 12mm; }
@media print {
  body { margin: 0; max-width: none; font-size: 10pt; }
  table.cycles { font-size: 6.5pt; }
  h2 { break-after: avoid; }
  table { font-size: 8pt; }
  tr, figure { break-inside: avoid; }
  .wide { overflow: visible; }
  .cautions { background: none; }
}
"#;

/// How a quantity is named in the cycle table, with its canonical unit as shown.
fn quantity_heading(q: Quantity) -> &'static str {
    match q {
        Quantity::Duration => "reaction time (s)",
        Quantity::Temperature => "temperature (K)",
        Quantity::Substrate => "substrate (mol)",
        Quantity::CatalystMass => "catalyst charged (g)",
        Quantity::MetalCharged => "metal charged (mol)",
        Quantity::Conversion => "conversion (fraction)",
        Quantity::Selectivity => "selectivity (fraction)",
        Quantity::Yield => "yield (fraction)",
        Quantity::ProductMass => "product (g)",
        Quantity::MetalInProduct => "metal in product (µg/g)",
        Quantity::CatalystRecovered => "catalyst recovered (g)",
    }
}

fn page_start(out: &mut String, title: &str) {
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; \
         style-src 'unsafe-inline'; img-src data:\">\n\
         <title>{}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n",
        esc(title)
    );
}

fn cautions(out: &mut String, extra: &[String]) {
    out.push_str("<section class=\"cautions\" id=\"cautions\">\n<h2>Cautions</h2>\n<ul>\n");
    for c in FIXED_CAUTIONS {
        let _ = writeln!(out, "<li>{}</li>", esc(c));
    }
    for c in extra {
        let _ = writeln!(out, "<li>{}</li>", esc(c));
    }
    out.push_str("</ul>\n</section>\n");
}

fn footer(out: &mut String, generated_at: &str, version: &str, note: &str) {
    let _ = write!(
        out,
        "<footer>Generated {} by turnbook {}. {note}</footer>\n</body>\n</html>\n",
        esc(generated_at),
        esc(version)
    );
}

fn opt_text(v: Option<&str>) -> String {
    v.map_or_else(|| "–".to_string(), esc)
}

fn forecast_text(f: &Forecast) -> String {
    let cycles = match (f.status, f.x) {
        (ForecastStatus::Ahead | ForecastStatus::UnboundedInterval, Some(x)) => format!(
            "{} ({} % interval {} to {})",
            fmt_sig(x, 3),
            fmt_pct(f.confidence),
            f.lower.map_or("unbounded".to_string(), |v| fmt_sig(v, 3)),
            f.upper.map_or("unbounded".to_string(), |v| fmt_sig(v, 3)),
        ),
        (status, _) => status.describe().to_string(),
    };
    match &f.dates {
        Some(d) => format!("{cycles}. {d}"),
        None => cycles,
    }
}

fn identity(out: &mut String, r: &LotReport) {
    let id = &r.identity.record;
    let cost = match (id.cost, r.identity.currency.as_deref()) {
        (Some(c), Some(cur)) => format!("{} {}", fmt_sig(c, 6), esc(cur)),
        (Some(c), None) => fmt_sig(c, 6),
        (None, _) => "–".to_string(),
    };
    let water = id.water_content_wt_pct.map_or_else(
        || "–".to_string(),
        |w| format!("{} wt % (metal on the dry mass)", fmt_sig(w, 3)),
    );
    let rows: [(&str, String); 10] = [
        ("Lot", esc(&id.lot)),
        ("Catalyst", esc(&id.catalyst)),
        ("Metal", esc(&id.metal)),
        ("Loading", format!("{} wt %", fmt_sig(id.loading_wt_pct, 4))),
        (
            "Charged mass",
            format!("{} g", fmt_sig(id.charged_mass_g, 5)),
        ),
        ("Water content as charged", water),
        ("Received", opt_text(id.received.as_deref())),
        ("Supplier lot", opt_text(id.supplier_lot.as_deref())),
        ("Cost (net of refining credit)", cost),
        ("Site", esc(id.site.as_deref().unwrap_or(""))),
    ];
    out.push_str("<section id=\"identity\">\n<h2>Lot</h2>\n<dl class=\"identity\">\n");
    for (k, v) in rows {
        let _ = writeln!(out, "<dt>{k}</dt><dd>{v}</dd>");
    }
    out.push_str("</dl>\n</section>\n");
}

fn verify(out: &mut String, r: &LotReport) {
    out.push_str("<section id=\"verify\">\n<h2>Audit chain</h2>\n");
    match &r.verify {
        None => out.push_str(
            "<p class=\"bad\">The audit chain has not been verified for this report.</p>\n",
        ),
        Some(v) => match &v.outcome {
            VerifyOutcome::Intact { entries } => {
                let _ = writeln!(
                    out,
                    "<p><span class=\"ok\">Intact</span>: all {entries} entries check out \
                     (verified {}).</p>",
                    esc(&v.ran_at)
                );
            }
            VerifyOutcome::Broken { first_broken } => {
                let _ = writeln!(
                    out,
                    "<p><span class=\"bad\">Broken</span> (verified {}): first broken link: {}</p>",
                    esc(&v.ran_at),
                    esc(first_broken)
                );
            }
        },
    }
    out.push_str("</section>\n");
}

fn figure(out: &mut String, id: &str, caption: &str, svg: Result<String, super::ChartError>) {
    let _ = writeln!(out, "<figure id=\"{id}\">");
    match svg {
        Ok(svg) => out.push_str(&svg),
        Err(e) => {
            tracing::warn!(chart = id, error = %e, "chart left out of report");
            let _ = write!(
                out,
                "<p class=\"chart-missing\">{}</p>",
                esc(&e.to_string())
            );
        }
    }
    let _ = writeln!(out, "<figcaption>{}</figcaption>\n</figure>", esc(caption));
}

/// A young lot's forecast with its family's prior and from its own cycles alone.
fn family_section(out: &mut String, f: &FamilyForecast) {
    out.push_str("<section id=\"family\">\n<h2>Forecast with the family's earlier lots</h2>\n");
    let names: Vec<String> = f.lots.iter().take(8).map(|l| esc(l)).collect();
    let more = if f.lots.len() > 8 { ", …" } else { "" };
    let _ = writeln!(
        out,
        "<p>A young lot borrows strength from the lots of its family: the deactivation rates \
         of {} earlier lot(s) ({}{more}) give a prior (empirical Bayes), and the lot's own \
         cycles update it{}{}.</p>",
        f.lots.len(),
        names.join(", "),
        if f.spread_assumed {
            "; too few lots to estimate the spread between lots, so a wide spread is assumed"
        } else {
            ""
        },
        f.own_share.map_or_else(String::new, |s| format!(
            " (the lot's own cycles carry {:.0} % of the weight on its rate)",
            100.0 * s
        ))
    );
    let text = |v: &Option<Forecast>| v.as_ref().map_or_else(|| "none".to_string(), forecast_text);
    let _ = writeln!(
        out,
        "<table class=\"params\"><tbody>\n<tr><td>with the family prior{}</td><td>{}</td></tr>\n\
         <tr><td>from the lot alone</td><td>{}</td></tr>\n</tbody></table>",
        if f.headline {
            " (the lot's forecast)"
        } else {
            ""
        },
        text(&f.with_prior),
        text(&f.lot_alone)
    );
    out.push_str("</section>\n");
}

fn fit_section(out: &mut String, lot: &str, fit: &FitSummary) {
    out.push_str("<section id=\"fit\">\n<h2>Activity and forecast</h2>\n");
    figure(
        out,
        "activity-chart",
        "Measured activity per cycle with the fitted deactivation model, its confidence \
         band, the replacement criterion and the forecast crossing with its interval. Open \
         triangles are censored cycles (conversion saturated): their activity is a lower bound.",
        activity_svg(fit, &format!("Lot {lot}: activity per cycle")),
    );
    let _ = writeln!(
        out,
        "<p>Chosen model: <strong>{}</strong>. Criterion: {}. Forecast crossing: {}.</p>",
        esc(&fit.model_id),
        fmt_opt(fit.threshold, 3),
        fit.forecast
            .as_ref()
            .map_or_else(|| "not computed".to_string(), forecast_text)
    );
    let _ = writeln!(
        out,
        "<table class=\"params\"><thead><tr><th>parameter</th><th>estimate</th>\
         <th>{} % interval</th></tr></thead><tbody>",
        fmt_pct(fit.level)
    );
    for p in &fit.params {
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{} to {}</td></tr>",
            esc(&p.name),
            fmt_sig(p.value, 5),
            fmt_opt(p.lower, 4),
            fmt_opt(p.upper, 4)
        );
    }
    out.push_str("</tbody></table>\n</section>\n");
}

fn flags_cell(c: &CycleLine) -> String {
    c.flags
        .words()
        .iter()
        .map(|w| format!("<span class=\"flag flag-{w}\">{w}</span>"))
        .collect::<Vec<_>>()
        .join(" ")
}

/// Every value's source file, in its own table: names and hashes are long, and inside the
/// cycle table they would make each row several lines tall.
fn provenance_table(out: &mut String, r: &LotReport) {
    let rows = r
        .cycles
        .iter()
        .flat_map(|c| {
            c.sources.iter().map(move |s| {
                vec![
                    c.cycle_no.to_string(),
                    esc(&c.batch_id),
                    esc(&s.file_name),
                    s.line.to_string(),
                    format!("<span class=\"hash\">{}</span>", esc(&s.sha256)),
                ]
            })
        })
        .collect();
    simple_table(
        out,
        "provenance",
        "Source files",
        &["cycle", "batch", "file", "line", "SHA-256 of the file"],
        rows,
    );
}

fn cycle_table(out: &mut String, r: &LotReport) {
    // Only quantities some cycle has: eleven mostly empty columns would hide the data.
    let shown: Vec<Quantity> = Quantity::ALL
        .into_iter()
        .filter(|q| r.cycles.iter().any(|c| c.value(*q).is_some()))
        .collect();
    out.push_str(
        "<section id=\"cycles\">\n<h2>Cycles</h2>\n<div class=\"wide\">\n\
         <table class=\"cycles\" id=\"cycle-table\">\n<thead><tr><th>cycle</th><th>batch</th>\
         <th>started</th>",
    );
    for q in &shown {
        let _ = write!(out, "<th>{}</th>", quantity_heading(*q));
    }
    out.push_str(
        "<th>metal charged (mmol)</th><th>metal available (mmol)</th>\
         <th>TON (per mol metal charged)</th><th>TON (per mol metal available)</th>\
         <th>average TOF (h⁻¹)</th><th>initial TOF (h⁻¹)</th><th>k<sub>app</sub> (h⁻¹)</th>\
         <th>activity</th><th>flags</th></tr></thead>\n<tbody>\n",
    );
    for c in &r.cycles {
        let _ = write!(
            out,
            "<tr><td class=\"num\">{}</td><td class=\"nowrap\">{}</td><td class=\"nowrap\">{}</td>",
            c.cycle_no,
            esc(&c.batch_id),
            opt_text(c.started_at.as_deref())
        );
        for q in &shown {
            let _ = write!(out, "<td class=\"num\">{}</td>", fmt_opt(c.value(*q), 5));
        }
        // A censored cycle's k_app, initial TOF and activity are lower bounds.
        let bound = if c.flags.censored { "≥ " } else { "" };
        let activity = match (c.activity, c.activity_se) {
            (Some(a), Some(se)) => format!("{} ± {}", fmt_sig(a, 3), fmt_sig(se, 2)),
            (a, _) => fmt_opt(a, 3),
        };
        let _ = writeln!(
            out,
            "<td class=\"num\">{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}{}</td><td class=\"num\">{}{}</td><td class=\"num\">{}{}</td>\
             <td>{}</td></tr>",
            fmt_opt(c.metal_charged_mmol, 4),
            fmt_opt(c.metal_available_mmol, 4),
            fmt_opt(c.ton, 4),
            fmt_opt(c.ton_per_metal_available, 4),
            fmt_opt(c.tof_per_h, 4),
            bound,
            fmt_opt(c.tof_initial_per_h, 4),
            bound,
            fmt_opt(c.k_app_per_h, 4),
            bound,
            activity,
            flags_cell(c)
        );
    }
    if r.cycles.is_empty() {
        let _ = writeln!(
            out,
            "<tr><td colspan=\"{}\">No cycles recorded.</td></tr>",
            shown.len() + 12
        );
    }
    out.push_str("</tbody>\n</table>\n</div>\n");
    definitions(out, r);
    methods(out);
    out.push_str("</section>\n");
}

/// What the computed columns mean, said once under the cycle table.
fn definitions(out: &mut String, r: &LotReport) {
    let activity = match &r.activity_note {
        Some(n) => {
            let reference = match (n.reference_cycle, n.reference_moved) {
                (Some(c), true) => format!(
                    " Cycle 1 is censored (its conversion reached the saturation limit, so its \
                     rate is only a lower bound): activity is relative to cycle {c}, the first \
                     uncensored cycle."
                ),
                (Some(c), false) => format!(" Activity 1 is cycle {c}."),
                (None, _) => " No cycle can serve as the reference yet.".to_string(),
            };
            format!("{} (basis “{}”).{reference}", n.definition, n.basis)
        }
        None => "k_app relative to the first cycle.".to_string(),
    };
    let _ = writeln!(
        out,
        "<dl class=\"definitions\" id=\"definitions\">\n\
         <dt>activity</dt><dd>Levenspiel's ratio of the rate with the used catalyst to that \
         with the fresh catalyst: {}. A censored cycle's activity is a lower bound. \
         ± is the standard error propagated from the conversion assay's uncertainty.</dd>\n\
         <dt>TON</dt><dd>mol product per mol metal, per mol charged (the dry catalyst mass × \
         loading) and per mol available (charged less the metal found in the products of \
         earlier cycles).</dd>\n\
         <dt>average TOF</dt><dd>TON divided by the whole reaction time; it hides a loss of \
         activity when batches run to completion.</dd>\n\
         <dt>initial TOF</dt><dd>k<sub>app</sub> × mol limiting substrate / mol metal charged, \
         the rate at the start of a batch first order in substrate, per mol metal; it follows \
         activity. A lower bound (≥) for a censored cycle.</dd>\n</dl>",
        // The sentence's own full stop is the template's.
        esc(activity.trim_end_matches('.'))
    );
}

/// The statistical methods behind the fit and the forecast, each with its published source
/// (sources marked "recalled" are cited from memory, as in the code's documentation).
const METHODS: &[(&str, &str)] = &[
    (
        "fitting",
        "nonlinear least squares by Levenberg–Marquardt (Moré 1978), weighted by the \
         activity's propagated standard errors; censored cycles as bounds (Tobit-type \
         likelihood)",
    ),
    (
        "model choice",
        "AICc (Hurvich & Tsai 1989); the simplest model within ΔAICc < 2 is shown, and the \
         forecast averages the usable models with Akaike weights (Burnham & Anderson 2002)",
    ),
    (
        "forecast interval",
        "the cycles at which the 90 % confidence band of the fitted curve meets the \
         criterion (inverting the band, a Fieller-type construction, Fieller 1954, recalled); \
         for an average, each model's Student-t tail area on its own degrees of freedom, \
         summed with the Akaike weights (model-averaged tail area, Turek & Fletcher 2012, \
         recalled); first order, second order and the power law on the scale where they are \
         linear in kd; for first order with residual activity, the profile likelihood of the \
         crossing (Venzon & Moolgavkar 1988, recalled)",
    ),
    (
        "step change",
        "a level-shift test of trend plus step at each of the three newest cycles \
         (dummy-variable form of Chow 1960, recalled; Bonferroni-corrected) and Page's CUSUM \
         (Page 1954) on one-step-ahead scores, k = 0.5, h = 4.5; after a step the trend is \
         fitted on the cycles before it",
    ),
];

/// The methods and their sources, for a reader who must judge the forecast.
fn methods(out: &mut String) {
    out.push_str("<dl class=\"definitions\" id=\"methods\">\n");
    for (name, text) in METHODS {
        let _ = writeln!(out, "<dt>{}</dt><dd>{}</dd>", esc(name), esc(text));
    }
    out.push_str("</dl>\n");
}

/// A titled table of rows of already-escaped cells; an empty list says so in words.
/// One lot's QA report as a single self-contained HTML5 file.
pub fn lot_html(r: &LotReport) -> String {
    let mut out = String::with_capacity(64 * 1024);
    let lot = &r.identity.record.lot;
    page_start(&mut out, &format!("turnbook lot report: {lot}"));
    let _ = writeln!(
        out,
        "<header><h1>Catalyst lot {}</h1>\n<p class=\"meta\">{} · {} · site {} · generated {} \
         · turnbook {}</p></header>",
        esc(lot),
        esc(&r.identity.record.catalyst),
        esc(&r.identity.record.metal),
        esc(r.identity.record.site.as_deref().unwrap_or("")),
        esc(&r.generated_at),
        esc(&r.turnbook_version)
    );
    cautions(&mut out, &r.cautions);
    identity(&mut out, r);
    verify(&mut out, r);
    super::signoff_html::signoff_state(&mut out, r);
    match &r.fit {
        Some(fit) => fit_section(&mut out, lot, fit),
        None => out.push_str(
            "<section id=\"fit\">\n<h2>Activity and forecast</h2>\n<p>No deactivation fit \
             is available for this lot yet.</p>\n</section>\n",
        ),
    }
    if !r.cause_hints.is_empty() {
        out.push_str(
            "<section id=\"causes\">\n<h2>Why it may have dropped</h2>\n<p class=\"meta\">\
             Hints from the recorded conditions, not a diagnosis.</p>\n<ul>\n",
        );
        for h in &r.cause_hints {
            let _ = writeln!(out, "<li>{}</li>", esc(h));
        }
        out.push_str("</ul>\n</section>\n");
    }
    if let Some(f) = &r.family {
        family_section(&mut out, f);
    }
    if r.cycles.iter().any(|c| c.ton.is_some()) {
        out.push_str("<section id=\"ton\">\n<h2>Turnover per cycle</h2>\n");
        figure(
            &mut out,
            "ton-chart",
            "TON of each cycle, mol product per mol metal charged.",
            ton_svg(&r.cycles, &format!("Lot {lot}: TON per cycle")),
        );
        out.push_str("</section>\n");
    }
    cycle_table(&mut out, r);
    provenance_table(&mut out, r);
    simple_table(
        &mut out,
        "alerts",
        "Alerts",
        &["raised", "rule", "subject", "state"],
        r.alerts
            .iter()
            .map(|a| {
                vec![
                    esc(&a.raised_at),
                    esc(&a.rule),
                    esc(&a.subject),
                    if a.open { "open" } else { "closed" }.to_string(),
                ]
            })
            .collect(),
    );
    simple_table(
        &mut out,
        "corrections",
        "Corrections",
        &["when", "who", "field", "old value", "new value", "why"],
        r.corrections
            .iter()
            .map(|c| {
                vec![
                    esc(&c.at),
                    esc(&c.who),
                    esc(&c.field),
                    esc(&c.old),
                    esc(&c.new),
                    esc(&c.why),
                ]
            })
            .collect(),
    );
    super::signoff_html::notes_table(&mut out, r);
    super::signoff_html::signoff_table(&mut out, r);
    footer(
        &mut out,
        &r.generated_at,
        &r.turnbook_version,
        "Numbers are traced to their source files by SHA-256; the audit chain section says \
         whether the record is intact.",
    );
    out
}

/// The site overview: every lot with its state, latest activity, forecast and alerts.
pub fn site_html(s: &SiteReport) -> String {
    let mut out = String::with_capacity(16 * 1024);
    page_start(&mut out, &format!("turnbook site overview: {}", s.site));
    let _ = writeln!(
        out,
        "<header><h1>Catalyst lots at {}</h1>\n<p class=\"meta\">{} lots · generated {} · \
         turnbook {}</p></header>",
        esc(&s.site),
        s.lots.len(),
        esc(&s.generated_at),
        esc(&s.turnbook_version)
    );
    cautions(&mut out, &s.cautions);
    out.push_str(
        "<section id=\"lots\">\n<h2>Lots</h2>\n<div class=\"wide\">\n<table id=\"lot-table\">\n\
         <thead><tr><th>lot</th><th>catalyst</th><th>metal</th><th>state</th><th>cycles</th>\
         <th>latest activity</th><th>forecast crossing</th><th>open alerts</th>\
         <th>activity trend</th></tr></thead>\n<tbody>\n",
    );
    for l in &s.lots {
        let alerts = if l.open_alerts > 0 {
            format!("<span class=\"bad\">{}</span>", l.open_alerts)
        } else {
            "0".to_string()
        };
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}</td><td>{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
            esc(&l.lot),
            esc(&l.catalyst),
            esc(&l.metal),
            esc(&l.state),
            l.cycles,
            fmt_opt(l.latest_activity, 3),
            l.forecast
                .as_ref()
                .map_or_else(|| "–".to_string(), forecast_text),
            alerts,
            sparkline_svg(&l.activity_history, l.threshold)
        );
    }
    if s.lots.is_empty() {
        out.push_str("<tr><td colspan=\"9\">No lots registered.</td></tr>\n");
    }
    out.push_str("</tbody>\n</table>\n</div>\n</section>\n");
    footer(
        &mut out,
        &s.generated_at,
        &s.turnbook_version,
        "Each lot's own report holds its full history and provenance.",
    );
    out
}
