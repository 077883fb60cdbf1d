//! One lot's page: identity, the activity chart with fit and band (the report's chart
//! code), the forecast, the cycles with every value's source file and line, alerts,
//! corrections, sign-offs, history and the audit status.

use maud::{Markup, html};

use super::render::{cautions, forecast_words, num, segment, svg};
use crate::notebook::LotPage;
use crate::report::{self, LotReport, VerifyOutcome};

pub fn render(lot: &str, p: &LotPage) -> Markup {
    let r = &p.report;
    html! {
        h1 { "Lot " (lot) }
        (identity(r))
        p.links {
            a href={ "/lots/" (segment(lot)) "/report" } { "Printable report" }
            a href={ "/lots/" (segment(lot)) "/report?download=1" } { "Download the report" }
            a href={ "/api/lots/" (segment(lot)) } { "Cycles as JSON" }
        }
        (fit(r, lot))
        (cycles(r))
        (alerts(r))
        (entries(r))
        (history(p))
        (audit(r))
    }
}

fn identity(r: &LotReport) -> Markup {
    let rec = &r.identity.record;
    let cur = r.identity.currency.clone().unwrap_or_default();
    html! {
        dl.facts #identity {
            dt { "Catalyst" } dd { (rec.catalyst) }
            dt { "Metal, loading" } dd { (rec.metal) " " (num(Some(rec.loading_wt_pct), 2)) " wt %" }
            dt { "Charged" } dd { (num(Some(rec.charged_mass_g), 2)) " g"
                @if let Some(w) = rec.water_content_wt_pct { " (" (num(Some(w), 1)) " wt % water; metal on the dry mass)" } }
            dt { "Supplier lot" } dd { (rec.supplier_lot.clone().unwrap_or_else(|| "–".into())) }
            dt { "Received" } dd { (rec.received.clone().map(|d| d.to_string()).unwrap_or_else(|| "–".into())) }
            dt { "Site" } dd { (rec.site.clone().unwrap_or_else(|| "–".into())) }
            dt { "Cost" } dd { (num(rec.cost, 0)) " " (cur) }
        }
    }
}

fn fit(r: &LotReport, lot: &str) -> Markup {
    let Some(f) = &r.fit else {
        return html! {
            h2 { "Activity" }
            p.muted { "No fit yet: too few complete cycles, or the lot is not registered." }
            @if let Ok(s) = report::ton_svg(&r.cycles, &format!("TON per cycle, lot {lot}")) {
                div.chart { (svg(s)) }
            }
        };
    };
    let (words, class) = forecast_words(f.forecast.as_ref());
    html! {
        h2 { "Activity and forecast" }
        p { "Model " strong { (f.model_id) } "; replacement criterion "
            (num(f.threshold, 3)) "; forecast: " span class=(class) #forecast { (words) } "." }
        div.chart #activity-chart {
            @match report::activity_svg(f, &format!("Lot {lot}: {}", f.y_label)) {
                Ok(s) => (svg(s)),
                Err(e) => p.muted { "The chart cannot be drawn: " (e.to_string()) },
            }
        }
        (cautions())
    }
}

fn cycles(r: &LotReport) -> Markup {
    html! {
        h2 { "Cycles (" (r.cycles.len()) ")" }
        @if let Some(n) = &r.activity_note {
            p.muted #activity-definition {
                "Activity: " (n.definition)
                @if let Some(c) = n.reference_cycle { " (cycle " (c) " = 1"
                    @if n.reference_moved { ": cycle 1 is censored, so the first uncensored cycle is the reference" }
                    ")" }
                "."
            }
        }
        table #cycles {
            thead { tr {
                th.num { "Cycle" } th { "Batch" } th { "Started" }
                th.num title="mol product per mol metal charged" { "TON" }
                th.num title="mol product per mol metal available: charged less the metal found in earlier products" { "TON (metal available)" }
                th.num title="average TOF: TON / whole reaction time" { "TOF avg h⁻¹" }
                th.num title="initial TOF: k_app × mol substrate / mol metal (first-order batch); ≥ for a censored cycle" { "TOF initial h⁻¹" }
                th.num { "k h⁻¹" } th.num { "Activity" } th.num { "± se" } th { "Flags" }
                th { "Source file : line" }
            } }
            tbody { @for c in &r.cycles { tr {
                td.num { (c.cycle_no) }
                td { (c.batch_id) }
                td { (c.started_at.clone().unwrap_or_default()) }
                td.num { (num(c.ton, 1)) }
                td.num { (num(c.ton_per_metal_available, 1)) }
                td.num { (num(c.tof_per_h, 1)) }
                td.num { @if c.flags.censored && c.tof_initial_per_h.is_some() { "≥ " } (num(c.tof_initial_per_h, 1)) }
                td.num { (num(c.k_app_per_h, 3)) }
                td.num { @if c.flags.censored && c.activity.is_some() { "≥ " } (num(c.activity, 3)) }
                td.num { (num(c.activity_se, 3)) }
                td class=[(!c.flags.words().is_empty()).then_some("warn")] { (c.flags.words().join(", ")) }
                td { @for s in &c.sources {
                    span title=(s.sha256) { (s.file_name) " : " (s.line) } br;
                } }
            } } }
        }
    }
}

fn alerts(r: &LotReport) -> Markup {
    html! {
        h2 { "Alerts (" (r.alerts.len()) ")" }
        @if r.alerts.is_empty() { p.muted { "None raised." } } @else {
            table #lot-alerts {
                thead { tr { th { "Raised" } th { "Rule" } th { "Subject" } th { "Open" } } }
                tbody { @for a in &r.alerts { tr {
                    td { (a.raised_at) } td { (a.rule) } td { (a.subject) }
                    td class=[a.open.then_some("bad")] { @if a.open { "open" } @else { "cleared" } }
                } } }
            }
        }
    }
}

fn entries(r: &LotReport) -> Markup {
    html! {
        h2 { "Sign-offs" }
        @if r.signoffs.is_empty() { p.muted #signoffs { "Not signed off." } } @else {
            p #signoff-state { "State: " strong { (r.signoff_state.state.as_str()) } " — " (r.signoff_state.summary()) }
            table #signoffs {
                thead { tr {
                    th { "When" } th { "Signed as" } th { "Account (who)" } th { "Meaning" }
                    th { "Comment" } th { "Covers the record as it is now" }
                } }
                tbody { @for s in &r.signoffs { tr {
                    td { (s.at) }
                    td { (s.signer.as_deref().unwrap_or("no signer named")) }
                    td { (s.os_user.as_deref().unwrap_or(&s.who)) }
                    td { (s.meaning) }
                    td { (s.comment.as_deref().unwrap_or("")) }
                    td class=(if s.covers_current { "ok" } else { "warn" }) {
                        @if s.covers_current { "yes" } @else {
                            "no: the record changed since (" (s.later_events.len()) " later events)"
                        }
                    }
                } } }
            }
        }
        @if !r.notes.is_empty() {
            h2 { "Notes" }
            table #notes {
                thead { tr { th { "When" } th { "Who" } th { "On" } th { "Note" } } }
                tbody { @for n in &r.notes { tr {
                    td { (n.at) } td { (n.who) } td { (n.on) } td { (n.text) }
                } } }
            }
        }
        @if !r.corrections.is_empty() {
            h2 { "Corrections and exclusions" }
            table #corrections {
                thead { tr { th { "When" } th { "Who" } th { "What" } th { "Was" } th { "Now" } th { "Why" } } }
                tbody { @for c in &r.corrections { tr {
                    td { (c.at) } td { (c.who) } td { (c.field) } td { (c.old) } td { (c.new) } td { (c.why) }
                } } }
            }
        }
    }
}

fn history(p: &LotPage) -> Markup {
    html! {
        h2 { "History (" (p.history.len()) " events)" }
        table #history {
            thead { tr { th.num { "#" } th { "When" } th { "Who" } th { "What" } th { "Subject" } th { "Note, comment or reason" } } }
            tbody { @for e in &p.history { tr {
                td.num { (e.seq) } td { (e.at) } td { (e.actor) } td { (e.kind) } td { (e.subject) }
                td { (e.text.as_deref().unwrap_or("")) }
            } } }
        }
    }
}

fn audit(r: &LotReport) -> Markup {
    html! {
        h2 { "Audit status" }
        @match r.verify.as_ref().map(|v| (&v.ran_at, &v.outcome)) {
            Some((at, VerifyOutcome::Intact { entries })) => p.ok #audit-status {
                "The audit chain was verified at " (at) ": intact, " (entries) " events." },
            Some((at, VerifyOutcome::Broken { first_broken })) => p.bad #audit-status {
                "The audit chain was verified at " (at) " and is broken: " (first_broken) },
            None => p.muted #audit-status { "Not verified." },
        }
    }
}
