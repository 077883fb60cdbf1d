//! Hostile text from users and files must stay text in every report (the CSV's quoting and
//! formula guard are tested with the export, in `notebook::export` and
//! `tests/plant_export.rs`).

#[path = "report_fixture.rs"]
mod report_fixture;

use report_fixture::demo_lot;
use turnbook::report::*;

const HOSTILE: &str = "<script>alert(1)</script>";

fn hostile_report() -> LotReport {
    demo_lot(
        &format!("LOT-{HOSTILE}"),
        &format!("exp{HOSTILE}"),
        &format!("typo {HOSTILE} \"fixed\" & 'checked'"),
    )
}

#[test]
fn hostile_text_never_appears_unescaped_in_lot_html() {
    let html = lot_html(&hostile_report());
    assert!(
        !html.contains("<script"),
        "a script tag leaked into the page"
    );
    assert!(!html.contains(HOSTILE));
    // The text is still there for the reader, escaped: in the title, the header, the
    // identity, the sources, the correction reason and the chart caption.
    let escaped = "&lt;script&gt;alert(1)&lt;/script&gt;";
    let hits = html.matches(escaped).count();
    // lot: <title>, <h1>, identity, alert subject, chart caption (via plotters);
    // file: 14 cycle sources; reason: 1 correction.
    let expected = 5 + 14 + 1;
    assert!(
        hits >= expected,
        "only {hits} escaped occurrences, expected {expected}"
    );
    assert!(html.contains("typo &lt;script&gt;"));
    assert!(html.contains("&quot;fixed&quot; &amp; &#39;checked&#39;"));
}

#[test]
fn plotters_escapes_text_it_writes_into_svg() {
    let r = hostile_report();
    let fit = r.fit.as_ref().unwrap();
    let svg = activity_svg(fit, &format!("Lot {}", r.identity.record.lot)).unwrap();
    assert!(svg.starts_with("<svg"));
    assert!(!svg.contains("<script"));
    assert!(svg.contains("Lot LOT-&lt;script&gt;alert(1)&lt;/script&gt;"));
    // And a hostile model id or axis label too.
    let mut fit = fit.clone();
    fit.model_id = HOSTILE.to_string();
    fit.x_label = HOSTILE.to_string();
    let svg = activity_svg(&fit, "t").unwrap();
    assert!(!svg.contains("<script"));
}

#[test]
fn hostile_text_is_escaped_in_site_html() {
    let s = SiteReport {
        generated_at: "2031-04-02T09:15:00+02:00".to_string(),
        turnbook_version: "0.1.0".to_string(),
        site: HOSTILE.to_string(),
        lots: vec![SiteLotLine {
            lot: HOSTILE.to_string(),
            catalyst: HOSTILE.to_string(),
            metal: "Pd".to_string(),
            state: HOSTILE.to_string(),
            cycles: 3,
            latest_activity: Some(0.8),
            forecast: None,
            open_alerts: 1,
            activity_history: vec![1.0, 0.9, 0.8],
            threshold: Some(0.5),
        }],
        cautions: vec![HOSTILE.to_string()],
    };
    let html = site_html(&s);
    assert!(!html.contains("<script"));
    assert!(html.matches("&lt;script&gt;").count() >= 6);
}

#[test]
fn control_characters_are_made_visible() {
    let r = demo_lot("LOT\u{1b}[31m", "f\u{0}x", "why\u{7}");
    let html = lot_html(&r);
    assert!(!html.contains('\u{1b}') && !html.contains('\u{0}') && !html.contains('\u{7}'));
    assert!(html.contains("LOT\\u{001B}[31m"));
}

#[test]
fn empty_and_non_finite_reports_still_render() {
    let mut r = demo_lot("L", "f", "w");
    r.cycles.clear();
    if let Some(fit) = r.fit.as_mut() {
        fit.observed.iter_mut().for_each(|p| p.x = f64::NAN);
        fit.curve.iter_mut().for_each(|p| p.x = f64::INFINITY);
        fit.band.clear();
        fit.forecast = Some(Forecast {
            status: ForecastStatus::UnboundedInterval,
            x: Some(f64::NAN),
            lower: None,
            upper: None,
            confidence: 0.95,
            dates: None,
        });
    }
    let html = lot_html(&r);
    assert!(html.contains("No cycles recorded."));
    assert!(html.contains("no finite points to draw"));
    // Finite x but non-finite y and an unbounded forecast: the chart is still drawn.
    let mut r2 = demo_lot("L", "f", "w");
    if let Some(fit) = r2.fit.as_mut() {
        fit.observed[3].y = f64::NAN;
        fit.curve.iter_mut().for_each(|p| p.y = f64::INFINITY);
        fit.forecast = Some(Forecast {
            status: ForecastStatus::UnboundedInterval,
            x: Some(15.0),
            lower: Some(12.0),
            upper: None,
            confidence: 0.95,
            dates: None,
        });
    }
    assert!(lot_html(&r2).contains("unbounded"));
    r.fit = None;
    assert!(lot_html(&r).contains("No deactivation fit"));
}
