//! The pages' frame and small pieces: maud escapes every interpolated string, so text from
//! exports and people reaches the page as text.

use maud::{DOCTYPE, Markup, PreEscaped, html};

use crate::model::numbers::fixed_or;
use crate::report::{FIXED_CAUTIONS, Forecast, ForecastStatus};

/// The pages of the navigation bar: (path, label).
const NAV: [(&str, &str); 4] = [
    ("/", "Lots"),
    ("/alerts", "Alerts"),
    ("/files", "Files"),
    ("/audit", "Audit chain"),
];

/// A whole page: `here` is the navigation entry it belongs to.
pub fn page(title: &str, here: &str, content: Markup) -> Markup {
    html! {
        (DOCTYPE)
        html lang="en" {
            head {
                meta charset="utf-8";
                meta name="viewport" content="width=device-width, initial-scale=1";
                title { (title) " · turnbook" }
                link rel="stylesheet" href="/assets/style.css";
                link rel="icon" type="image/svg+xml" href="/assets/icon.svg";
                script src="/assets/live.js" defer {}
            }
            body {
                header {
                    span.brand { "turnbook" }
                    nav {
                        @for (href, label) in NAV {
                            a href=(href) class=[(href == here).then_some("here")] { (label) }
                        }
                    }
                    span #live-state .live.off { "static page (reload to update)" }
                }
                main #content data-refreshes="0" { (content) }
                footer {
                    "Read-only view of the notebook; nothing here changes a record. Shown "
                    (crate::model::time::now_utc()) "."
                }
            }
        }
    }
}

/// The report's cautions: forecasts are advisory, release follows QA procedures.
pub fn cautions() -> Markup {
    html! {
        aside.cautions {
            strong { "Please note" }
            ul { @for c in FIXED_CAUTIONS { li { (c) } } }
        }
    }
}

/// A number with `digits` decimals, or "–" when there is none.
pub fn num(v: Option<f64>, digits: usize) -> String {
    fixed_or(v, digits, "–")
}

/// A path segment: every byte outside the unreserved set percent-encoded.
pub fn segment(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for b in s.bytes() {
        if b.is_ascii_alphanumeric() || matches!(b, b'-' | b'.' | b'_' | b'~') {
            out.push(char::from(b));
        } else {
            out.push_str(&format!("%{b:02X}"));
        }
    }
    out
}

/// The link to a lot's page.
pub fn lot_href(lot: &str) -> String {
    format!("/lots/{}", segment(lot))
}

/// A forecast as a short phrase, with the class that colours it.
pub fn forecast_words(f: Option<&Forecast>) -> (String, &'static str) {
    let Some(f) = f else {
        return (
            "no forecast (too few usable cycles or no fit)".into(),
            "muted",
        );
    };
    let interval = format!(
        "{:.0} % interval {} to {}",
        f.confidence * 100.0,
        f.lower.map_or("open".into(), |v| format!("{v:.1}")),
        f.upper.map_or("open".into(), |v| format!("{v:.1}"))
    );
    match f.status {
        ForecastStatus::Ahead | ForecastStatus::UnboundedInterval => {
            (format!("criterion at {} ({interval})", num(f.x, 1)), "warn")
        }
        ForecastStatus::ReachedAlready => (f.status.describe().into(), "bad"),
        ForecastStatus::NotReached
        | ForecastStatus::NoSignificantTrend
        | ForecastStatus::Withheld => (f.status.describe().into(), "ok"),
    }
}

/// SVG made by the report's chart code, which escapes its own text.
pub fn svg(s: String) -> PreEscaped<String> {
    PreEscaped(s)
}
