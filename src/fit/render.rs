//! Pieces for the command line: reading a two-column series, parsing model and start
//! arguments, JSON of a fit and the text rendering of an analysis.

use serde_json::{Map, Value, json};

use super::analysis::LotAnalysis;
use super::average::{NextCycle, NextVerdict};
use super::engine::FitResult;
use super::error::{FitError, SeriesError};
use super::forecast::{Forecast, ForecastStatus, NotReachedWhy};
use super::models::ModelId;

/// A model argument: a model id, or `auto` for the AICc choice.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ModelArg {
    Auto,
    Model(ModelId),
}

/// Parses a model argument (`auto` or a model id).
pub fn parse_model_arg(s: &str) -> Result<ModelArg, FitError> {
    let t = s.trim();
    if t == "auto" {
        return Ok(ModelArg::Auto);
    }
    ModelId::from_id(t).map(ModelArg::Model)
}

/// Parses one start value `name=number`.
pub fn parse_start_arg(s: &str) -> Result<(String, f64), FitError> {
    let (name, value) = s
        .split_once('=')
        .ok_or_else(|| FitError::BadStartArg(s.to_string()))?;
    let v: f64 = value
        .trim()
        .parse()
        .map_err(|_| FitError::BadStartArg(s.to_string()))?;
    let name = name.trim();
    if name.is_empty() || !v.is_finite() {
        return Err(FitError::BadStartArg(s.to_string()));
    }
    Ok((name.to_string(), v))
}

/// Reads CSV text with a header row, x in the first column and y in the second.
pub fn read_series_csv(text: &str) -> Result<(Vec<f64>, Vec<f64>), SeriesError> {
    if text.trim().is_empty() {
        return Err(SeriesError::Empty);
    }
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let (mut xs, mut ys) = (Vec::new(), Vec::new());
    for (i, rec) in rdr.records().enumerate() {
        let fallback_line = i + 2;
        let rec = rec.map_err(|e| SeriesError::Malformed {
            line: e
                .position()
                .map(|p| p.line() as usize)
                .unwrap_or(fallback_line),
            message: e.to_string(),
        })?;
        let line = rec
            .position()
            .map(|p| p.line() as usize)
            .unwrap_or(fallback_line);
        if rec.iter().all(|f| f.is_empty()) {
            continue;
        }
        if rec.len() < 2 {
            return Err(SeriesError::MissingColumn {
                line,
                found: rec.len(),
            });
        }
        let num = |col: usize| -> Result<f64, SeriesError> {
            let t = &rec[col];
            t.parse::<f64>()
                .ok()
                .filter(|v| v.is_finite())
                .ok_or_else(|| SeriesError::BadNumber {
                    line,
                    column: col + 1,
                    text: t.chars().take(40).collect(),
                })
        };
        xs.push(num(0)?);
        ys.push(num(1)?);
    }
    if xs.is_empty() {
        return Err(SeriesError::NoData);
    }
    Ok((xs, ys))
}

fn status_word(s: ForecastStatus) -> &'static str {
    s.word()
}

fn why_words(w: NotReachedWhy) -> &'static str {
    match w {
        NotReachedWhy::AsymptoteAbove => "activity levels off above the criterion",
        NotReachedWhy::SlopeWrongSign => "activity is not falling",
        NotReachedWhy::BeyondHorizon => "not within a million spans of the data",
        NotReachedWhy::UndefinedCriterion => "the criterion is not a finite number",
        NotReachedWhy::CurveEnds => "the fitted curve ends above the criterion",
    }
}

fn num(v: Option<f64>) -> Value {
    v.filter(|v| v.is_finite())
        .map_or(Value::Null, |v| json!(v))
}

/// JSON of a fit (and forecast): keys model, n, params, std_errors, rss, dof, aicc,
/// converged, reason, iterations, censored_bounds for a censored fit and, when given,
/// forecast {x, lower, upper, status}.
pub fn fit_json(fit: &FitResult, forecast: Option<&Forecast>) -> Value {
    let mut params = Map::new();
    let mut ses = Map::new();
    for (j, name) in fit.param_names.iter().enumerate() {
        params.insert(name.clone(), num(fit.params.get(j).copied()));
        ses.insert(
            name.clone(),
            num(fit.std_errors.as_ref().and_then(|s| s.get(j).copied())),
        );
    }
    let mut v = json!({
        "model": fit.model.id(),
        "n": fit.n,
        "params": params,
        "std_errors": ses,
        "rss": num(Some(fit.rss)),
        "sigma": num(fit.sigma),
        "dof": fit.dof,
        "aicc": num(fit.aicc),
        "converged": fit.converged,
        "reason": fit.reason.describe(),
        "iterations": fit.iterations,
    });
    // A censored fit says how many bounds it used (absent for least squares).
    if let (Some(k), Value::Object(m)) = (fit.censored, &mut v) {
        m.insert("censored_bounds".into(), json!(k));
    }
    if let (Some(fc), Value::Object(m)) = (forecast, &mut v) {
        m.insert(
            "forecast".into(),
            json!({
                "x": num(fc.x),
                "lower": num(fc.lower),
                "upper": num(fc.upper),
                "status": status_word(fc.status),
                "threshold": num(fc.threshold),
                "confidence": fc.confidence,
                "why_not": fc.why_not.map(why_words),
                "lifetime_ton": num(fc.lifetime_ton),
                "loss": num(fc.loss),
                "loss_lower": num(fc.loss_lower),
                "withheld_since": num(fc.withheld_since),
                "more_cycles_needed": fc.more_cycles_needed,
                "crossing_date": fc.dates.as_ref().and_then(|d| d.crossing_date.clone()),
                "crossing_early": fc.dates.as_ref().and_then(|d| d.crossing_early.clone()),
                "crossing_late": fc.dates.as_ref().and_then(|d| d.crossing_late.clone()),
                "order_by": fc.dates.as_ref().and_then(|d| d.order_by.clone()),
                "cycles_per_day": num(fc.dates.as_ref().and_then(|d| d.cycles_per_day)),
                "lead_days": num(fc.dates.as_ref().and_then(|d| d.lead_days)),
                "time_zone": fc.dates.as_ref().and_then(|d| d.time_zone.clone()),
            }),
        );
    }
    v
}

fn next_json(n: &NextCycle) -> Value {
    json!({
        "x": n.x,
        "predicted": num(Some(n.predicted)),
        "lower": num(Some(n.lower)),
        "upper": num(Some(n.upper)),
        "threshold": num(Some(n.threshold)),
        "verdict": n.verdict.word(),
    })
}

/// JSON of a whole analysis: [`fit_json`] of the chosen fit with the forecast, and the
/// ranking, the Akaike weights (`weights`), the step-change verdict (`abrupt`:
/// `suspected`, `change_at`, `drop` {value, lower, upper, relative}, the CUSUM's last
/// value and h) and the next batch (`next_cycle` {x, predicted, lower, upper, threshold,
/// verdict}).
pub fn analysis_json(a: &LotAnalysis) -> Value {
    let mut v = match &a.fit {
        Some(f) => fit_json(f, a.forecast.as_ref()),
        None => json!({ "model": Value::Null }),
    };
    let Value::Object(m) = &mut v else {
        return v;
    };
    m.insert(
        "ranking".into(),
        serde_json::to_value(&a.ranking).unwrap_or(Value::Null),
    );
    m.insert(
        "weights".into(),
        Value::Array(
            a.weights
                .iter()
                .map(|w| {
                    json!({
                        "model": w.model.id(),
                        "weight": num(Some(w.weight)),
                        "delta_aicc": num(Some(w.delta_aicc)),
                        "crossing": num(w.crossing),
                    })
                })
                .collect(),
        ),
    );
    let abrupt = a.abrupt.as_ref().map_or(Value::Null, |ab| {
        let drop = ab.shift.as_ref().map_or(Value::Null, |s| {
            json!({
                "value": num(Some(s.drop)),
                "lower": num(s.drop_lower),
                "upper": num(s.drop_upper),
                "relative": num(s.drop_relative),
                "at": num(Some(s.at)),
                "delta_aicc_vs_single": num(s.delta_vs_single),
            })
        });
        json!({
            "suspected": ab.suspected,
            "change_at": num(ab.change_at),
            "drop": drop,
            "cusum_last": num(ab.cusum.as_ref().map(|c| c.last)),
            "cusum_h": num(ab.cusum.as_ref().map(|c| c.h)),
            "cycles_below": ab.checks.iter().filter(|c| c.below).count(),
            "cycles_checked": ab.checks.len(),
        })
    });
    m.insert("abrupt".into(), abrupt);
    m.insert(
        "next_cycle".into(),
        a.next_cycle.as_ref().map_or(Value::Null, next_json),
    );
    m.insert("trend_cycles".into(), json!(a.trend_cycles));
    m.insert("pooled".into(), pooled_json(a));
    v
}

/// The family prior's part of an analysis as JSON: how many lots the prior came from, the
/// prior, the posterior fit, and the forecast with it (`forecast`) and without it
/// (`lot_alone`); null without a prior.
pub fn pooled_json(a: &LotAnalysis) -> Value {
    let Some(p) = &a.pooled else {
        return Value::Null;
    };
    let fc = |f: Option<&Forecast>| {
        f.map_or(Value::Null, |f| {
            serde_json::to_value(f).unwrap_or(Value::Null)
        })
    };
    json!({
        "prior_lots": p.prior.lots.len(),
        "lots": p.prior.lots,
        "model": p.prior.model.id(),
        "prior": {
            "a0": {"mean": num(Some(p.prior.a0.mean)), "sd": num(Some(p.prior.a0.sd)),
                   "between_sd": num(Some(p.prior.a0.between_sd)), "assumed": p.prior.a0.assumed},
            "ln_kd": {"mean": num(Some(p.prior.ln_kd.mean)), "sd": num(Some(p.prior.ln_kd.sd)),
                      "between_sd": num(Some(p.prior.ln_kd.between_sd)), "assumed": p.prior.ln_kd.assumed},
            "sigma": num(Some(p.prior.sigma)),
            "sigma_dof": p.prior.sigma_dof,
        },
        "params": p.fit.as_ref().map_or(Value::Null, |f| fit_json(f, None)["params"].clone()),
        "own_share": num(p.own_share),
        "headline": p.headline,
        "why_not": p.why_not,
        "forecast": fc(p.forecast.as_ref()),
        "lot_alone": fc(p.lot_alone.as_ref()),
        "next_cycle": p.next_cycle.as_ref().map_or(Value::Null, next_json),
        "lot_alone_next_cycle": p.lot_alone_next.as_ref().map_or(Value::Null, next_json),
    })
}

/// The family prior's section of [`render_text`]: where the prior came from, the posterior,
/// and the forecast with and without the prior. Empty without a prior.
fn pooled_text(a: &LotAnalysis) -> String {
    use std::fmt::Write;
    let Some(p) = &a.pooled else {
        return String::new();
    };
    let mut s = String::new();
    let pr = &p.prior;
    let names = if pr.lots.len() > 5 {
        format!("{}, …", pr.lots[..5].join(", "))
    } else {
        pr.lots.join(", ")
    };
    let _ = writeln!(
        s,
        "\nFamily prior (empirical Bayes) from {} earlier lot(s): {names}",
        pr.lots.len()
    );
    let assumed = if pr.ln_kd.assumed {
        " (assumed: too few lots to estimate the spread)"
    } else {
        ""
    };
    let _ = writeln!(
        s,
        "  a0 {} ± {}, kd {} (ln kd {} ± {}, between lots {}{assumed}), residual sd {} ({} dof)",
        fmt_g(pr.a0.mean),
        fmt_g(pr.a0.sd),
        fmt_g(pr.ln_kd.mean.exp()),
        fmt_g(pr.ln_kd.mean),
        fmt_g(pr.ln_kd.sd),
        fmt_g(pr.ln_kd.between_sd),
        fmt_g(pr.sigma),
        pr.sigma_dof
    );
    let last = a.observed.last().map(|p| p.0);
    if let Some(f) = &p.fit {
        let _ = writeln!(
            s,
            "  posterior {}: a0 {}, kd {}; the lot's own cycles carry {} of the weight on ln kd",
            f.model.id(),
            fmt_opt(f.param("a0")),
            fmt_opt(f.param("kd")),
            p.own_share
                .map_or_else(|| "—".to_string(), |v| format!("{:.0} %", 100.0 * v))
        );
    }
    let head = if p.headline {
        " (the lot's forecast)"
    } else {
        ""
    };
    match &p.forecast {
        Some(fc) => {
            let _ = writeln!(
                s,
                "  with the family prior{head}: {}",
                forecast_words(fc, last)
            );
        }
        None => {
            let _ = writeln!(
                s,
                "  with the family prior: none ({})",
                p.why_not.as_deref().unwrap_or("not computed")
            );
        }
    }
    match &p.lot_alone {
        Some(fc) => {
            let _ = writeln!(s, "  from the lot alone: {}", forecast_words(fc, last));
        }
        None => {
            let _ = writeln!(
                s,
                "  from the lot alone: none (too few cycles for a model of its own)"
            );
        }
    }
    if !p.headline
        && p.forecast.is_some()
        && let Some(w) = &p.why_not
    {
        let _ = writeln!(s, "  the lot's forecast is its own: {w}");
    }
    s
}

const BARS: [char; 8] = ['▁', '▂', '▃', '▄', '▅', '▆', '▇', '█'];

/// A sparkline of values on a shared scale [lo, hi]; a gap for missing values.
pub fn sparkline(values: &[Option<f64>], lo: f64, hi: f64) -> String {
    values
        .iter()
        .map(|v| match v {
            Some(v) if v.is_finite() => {
                let f = if hi > lo { (v - lo) / (hi - lo) } else { 0.5 };
                let i = (f.clamp(0.0, 1.0) * 7.0).round() as usize;
                BARS[i.min(7)]
            }
            _ => ' ',
        })
        .collect()
}

fn fmt_opt(v: Option<f64>) -> String {
    v.filter(|v| v.is_finite())
        .map_or_else(|| "—".to_string(), |v| format!("{v:.4}"))
}

fn fmt_g(v: f64) -> String {
    if v != 0.0 && (v.abs() < 1e-3 || v.abs() >= 1e5) {
        format!("{v:.4e}")
    } else {
        format!("{v:.5}")
    }
}

/// A crossing in dates, in plain words: when the criterion is expected and by when to
/// order a replacement.
pub fn dates_words(d: &crate::model::calendar::CrossingDates) -> String {
    let zone = d.time_zone.as_deref().unwrap_or("UTC");
    let when = match (&d.crossing_early, &d.crossing_late, &d.crossing_date) {
        (Some(e), Some(l), _) if e != l => format!("criterion expected {e} to {l}"),
        (Some(e), None, _) => format!("criterion expected from {e} (no late end)"),
        (_, _, Some(c)) => format!("criterion expected about {c}"),
        _ => "no date for the criterion".to_string(),
    };
    let order = match (&d.order_by, d.lead_days) {
        (Some(o), Some(l)) => format!("; order replacement by {o} ({l:.0} d lead time)"),
        _ => "; no lead time configured for an order-by date".to_string(),
    };
    let pace = d
        .cycles_per_day
        .map_or_else(String::new, |c| format!(" at {c:.2} cycles/day"));
    format!("{when}{order}{pace} ({zone} dates)")
}

/// The forecast in plain words.
fn forecast_words(fc: &Forecast, x_last: Option<f64>) -> String {
    let pct = fc.confidence * 100.0;
    match fc.status {
        ForecastStatus::Ahead => format!(
            "the criterion is crossed at x = {:.1}, {pct:.0} % interval [{}, {}]",
            fc.x.unwrap_or(f64::NAN),
            fmt_opt(fc.lower),
            fmt_opt(fc.upper)
        ),
        ForecastStatus::UnboundedInterval => format!(
            "the fitted curve crosses at x = {:.1}, but the {pct:.0} % interval does not close: \
             from {} to unbounded",
            fc.x.unwrap_or(f64::NAN),
            fmt_opt(fc.lower)
        ),
        ForecastStatus::ReachedAlready => format!(
            "the criterion is already reached (fitted crossing at x = {})",
            fmt_opt(fc.x)
        ),
        ForecastStatus::NotReached => format!(
            "the criterion is never reached under the fitted model: {}",
            fc.why_not.map_or("", why_words)
        ),
        ForecastStatus::NoSignificantTrend => format!(
            "no significant loss of activity at {pct:.0} %: no crossing is forecast{}",
            fc.lower.map_or_else(String::new, |l| format!(
                " (it is not before x = {l:.1} at {pct:.0} % confidence)"
            ))
        ),
        ForecastStatus::Withheld => format!(
            "withheld: a step change at x = {} started a new level{}; {} more cycle(s) of it \
             are needed for a trend",
            fmt_opt(fc.withheld_since),
            x_last.map_or_else(String::new, |x| format!(" (newest x = {x})")),
            fc.more_cycles_needed.unwrap_or(0)
        ),
    }
}

/// A plain-text account of an analysis: ranking, parameters with intervals, forecast,
/// abrupt-loss verdict and sparklines of the activity and the fit.
pub fn render_text(a: &LotAnalysis) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let bounds = if a.fit.as_ref().is_some_and(|f| f.censored.is_some()) {
        " (as lower bounds in the fit)"
    } else {
        ""
    };
    let _ = writeln!(
        s,
        "{} points ({} fitted as exact, {} censored{bounds}), engine {}",
        a.n_points, a.n_fitted, a.censored.count, a.engine_version
    );
    let _ = writeln!(
        s,
        "\nModel ranking (AICc; simplest within ΔAICc < 2 is chosen; the forecast averages\n\
         the usable models with Akaike weights)"
    );
    if a.abrupt.as_ref().is_some_and(|b| b.change_at.is_some()) {
        let _ = writeln!(
            s,
            "  (fitted on the {} cycles before the step change)",
            a.trend_cycles
        );
    }
    let _ = writeln!(
        s,
        "  {:<22} {:>3} {:>12} {:>10} {:>7} {:>7}  note",
        "model", "p", "RSS", "AICc", "ΔAICc", "weight"
    );
    for r in &a.ranking {
        let mark = if r.chosen { "*" } else { " " };
        let usable = r.delta_aicc.is_some();
        let note = match (&r.why_not, r.converged, r.at_bound) {
            (Some(w), false, _) if !r.params.is_empty() => format!("NOT CONVERGED: {w}"),
            (Some(w), _, true) => format!("AT BOUND: {w}"),
            (Some(w), _, _) => w.clone(),
            (None, _, _) => String::new(),
        };
        let _ = writeln!(
            s,
            "{mark} {:<22} {:>3} {:>12} {:>10} {:>7} {:>7}  {}",
            r.model.id(),
            r.model.n_params(),
            r.rss
                .filter(|_| usable)
                .map_or_else(|| "—".to_string(), fmt_g),
            r.aicc
                .filter(|_| usable)
                .map_or_else(|| "—".to_string(), |v| format!("{v:.2}")),
            r.delta_aicc
                .map_or_else(|| "—".to_string(), |v| format!("{v:.2}")),
            r.weight
                .map_or_else(|| "—".to_string(), |w| format!("{:.0} %", 100.0 * w)),
            note
        );
    }
    let Some(fit) = &a.fit else {
        let _ = writeln!(s, "\nNo model chosen.");
        s.push_str(&pooled_text(a));
        for n in &a.notes {
            let _ = writeln!(s, "note: {n}");
        }
        return s;
    };
    let fc = a.forecast.as_ref();
    let conf = fc.map_or(0.9, |f| f.confidence);
    let t = super::forecast::t_quantile(conf, fit.dof);
    let _ = writeln!(
        s,
        "\nChosen: {}  y = {}\n  parameters ({:.0} % intervals, t with {} dof):",
        fit.model.id(),
        fit.model.formula(),
        conf * 100.0,
        fit.dof
    );
    for (j, name) in fit.param_names.iter().enumerate() {
        let Some(&v) = fit.params.get(j) else {
            continue;
        };
        let se = fit.std_errors.as_ref().and_then(|e| e.get(j).copied());
        let interval = match (se, t) {
            (Some(se), Some(t)) => format!("[{}, {}]", fmt_g(v - t * se), fmt_g(v + t * se)),
            _ => "[—]".to_string(),
        };
        let _ = writeln!(
            s,
            "    {:<8} {:>14} ± {:<12} {}",
            name,
            fmt_g(v),
            se.map_or_else(|| "—".to_string(), fmt_g),
            interval
        );
    }
    if let Some(fc) = fc {
        let _ = writeln!(
            s,
            "\nForecast (criterion y = {}): {}",
            fc.threshold.map_or_else(|| "—".to_string(), fmt_g),
            status_word(fc.status)
        );
        let _ = writeln!(
            s,
            "  {}{}",
            forecast_words(fc, a.observed.last().map(|p| p.0)),
            if a.pooled.as_ref().is_some_and(|p| p.headline) {
                " (with the family prior, below)"
            } else {
                ""
            }
        );
        if let (Some(l), Some(lo)) = (fc.loss, fc.loss_lower) {
            let _ = writeln!(
                s,
                "  loss over the fitted cycles {} (one-sided {:.0} % lower bound {})",
                fmt_g(l),
                fc.confidence * 100.0,
                fmt_g(lo)
            );
        }
        if let Some(t) = fc.lifetime_ton {
            let _ = writeln!(s, "  lifetime TON at x*: {t:.0}");
        }
        if let Some(d) = fc.dates.as_ref().filter(|d| d.crossing_date.is_some()) {
            let _ = writeln!(s, "  {}", dates_words(d));
        }
    }
    if a.weights.len() > 1 {
        let parts: Vec<String> = a
            .weights
            .iter()
            .map(|w| {
                format!(
                    "{} {:.0} % ({})",
                    w.model.id(),
                    100.0 * w.weight,
                    w.crossing
                        .map_or_else(|| "no crossing".to_string(), |x| format!("x* {x:.1}"))
                )
            })
            .collect();
        let _ = writeln!(
            s,
            "  {}averaged over: {}",
            if a.pooled.as_ref().is_some_and(|p| p.headline) {
                "the lot alone "
            } else {
                ""
            },
            parts.join(", ")
        );
    }
    s.push_str(&pooled_text(a));
    if let Some(n) = &a.next_cycle {
        let _ = writeln!(
            s,
            "\nNext cycle x = {}: predicted {} [{}, {}] against {}: {}",
            n.x,
            fmt_g(n.predicted),
            fmt_g(n.lower),
            fmt_g(n.upper),
            fmt_g(n.threshold),
            match n.verdict {
                NextVerdict::Ok => "ok (the whole prediction interval is above the criterion)",
                NextVerdict::Marginal => "marginal (the prediction interval reaches the criterion)",
                NextVerdict::Below => "below (the predicted activity is below the criterion)",
            }
        );
    }
    if let Some(ab) = &a.abrupt {
        let verdict = match (ab.suspected, ab.change_at) {
            (true, Some(x)) => format!("STEP CHANGE at x = {x}"),
            (true, None) => "SUSPECTED (a level shift does not fit better than a trend)".into(),
            (false, _) => "not indicated".into(),
        };
        let _ = writeln!(s, "\nAbrupt loss: {verdict}");
        if let Some(sh) = &ab.shift {
            let _ = writeln!(
                s,
                "  level shift ({} trend) from x = {}: drop {} [{}, {}]{}, ΔAICc vs one trend {}",
                sh.base.id(),
                sh.at,
                fmt_g(sh.drop),
                fmt_opt(sh.drop_lower),
                fmt_opt(sh.drop_upper),
                sh.drop_relative
                    .map_or_else(String::new, |r| format!(" ({:.0} %)", 100.0 * r)),
                sh.delta_vs_single
                    .map_or_else(|| "—".to_string(), |d| format!("{d:.2}"))
            );
        }
        if !ab.checks.is_empty() {
            let below = ab.checks.iter().filter(|c| c.below).count();
            let _ = writeln!(
                s,
                "  {below} of {} cycles since the change below the prediction interval of the earlier fit",
                ab.checks.len()
            );
        }
        if let Some(p) = &ab.prediction {
            let _ = writeln!(
                s,
                "  newest point x = {}: observed {} vs predicted {} (lower limit {}, z = {:.2})",
                p.x,
                fmt_g(p.observed),
                fmt_g(p.predicted),
                fmt_g(p.lower),
                p.z
            );
        }
        if let Some(c) = &ab.cusum {
            let _ = writeln!(
                s,
                "  CUSUM (k = {}, h = {}): last {:.2}, max {:.2}, first alarm {}",
                c.k,
                c.h,
                c.last,
                c.max,
                c.first_alarm
                    .map_or_else(|| "none".to_string(), |i| format!("at point {}", i + 1))
            );
        }
    }
    if let Some(e) = &a.economics {
        let _ = writeln!(
            s,
            "\nEconomic replacement: after {} cycles, average cost {:.2} {} per kg of product{}",
            e.best_cycles,
            e.best_average_cost,
            e.currency.as_deref().unwrap_or("(currency units)"),
            if e.at_horizon {
                " (at the horizon: no interior minimum)"
            } else {
                ""
            }
        );
    }
    if !a.censored.above_fit.is_empty() {
        let _ = writeln!(
            s,
            "\nWarning: censored points above the fitted curve at x = {:?}",
            a.censored.above_fit
        );
    }
    let obs: Vec<Option<f64>> = a.observed.iter().map(|p| Some(p.1)).collect();
    let fitted: Vec<Option<f64>> = a.observed.iter().map(|p| Some(fit.predict(p.0))).collect();
    let all = obs
        .iter()
        .chain(&fitted)
        .flatten()
        .filter(|v| v.is_finite());
    let (lo, hi) = all.fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &v| {
        (l.min(v), h.max(v))
    });
    let _ = writeln!(s, "\n  activity {}", sparkline(&obs, lo, hi));
    let _ = writeln!(s, "  fit      {}", sparkline(&fitted, lo, hi));
    for n in &a.notes {
        let _ = writeln!(s, "note: {n}");
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::analysis::{AnalysisOptions, LotSeries, analyse};
    use crate::fit::{FitOptions, fit_model};

    #[test]
    fn csv_reads_and_errors_name_line_and_column() {
        let (x, y) = read_series_csv("cycle,activity\n1,1.0\n2, 0.9\n\n3,0.8\n").expect("ok");
        assert_eq!(x, vec![1.0, 2.0, 3.0]);
        assert_eq!(y, vec![1.0, 0.9, 0.8]);
        assert_eq!(
            read_series_csv("c,a\n1,1.0\n2,abc\n"),
            Err(SeriesError::BadNumber {
                line: 3,
                column: 2,
                text: "abc".into()
            })
        );
        assert_eq!(
            read_series_csv("c,a\n1,1\n7\n"),
            Err(SeriesError::MissingColumn { line: 3, found: 1 })
        );
        assert_eq!(read_series_csv(""), Err(SeriesError::Empty));
        assert_eq!(read_series_csv("c,a\n"), Err(SeriesError::NoData));
        assert!(matches!(
            read_series_csv("c,a\nNaN,1\n"),
            Err(SeriesError::BadNumber { column: 1, .. })
        ));
    }

    #[test]
    fn model_and_start_args() {
        assert_eq!(parse_model_arg("auto"), Ok(ModelArg::Auto));
        assert_eq!(
            parse_model_arg("two-site"),
            Ok(ModelArg::Model(ModelId::TwoSite))
        );
        assert!(parse_model_arg("exp").is_err());
        assert_eq!(parse_start_arg("kd=0.1"), Ok(("kd".into(), 0.1)));
        assert!(parse_start_arg("kd").is_err());
        assert!(parse_start_arg("kd=x").is_err());
        assert!(parse_start_arg("=1").is_err());
    }

    #[test]
    fn json_has_the_promised_keys() {
        let x: Vec<f64> = (1..=8).map(f64::from).collect();
        let y: Vec<f64> = x
            .iter()
            .map(|&v| 1.0 - 0.05 * v + 0.001 * (v % 2.0))
            .collect();
        let f = fit_model(ModelId::Linear, &x, &y, &FitOptions::default()).expect("fit");
        let fc = crate::fit::forecast::forecast(
            &f,
            crate::fit::forecast::Criterion::Absolute(0.5),
            0.9,
            1.0,
            8.0,
        );
        let v = fit_json(&f, Some(&fc));
        for k in [
            "model",
            "n",
            "params",
            "std_errors",
            "rss",
            "dof",
            "aicc",
            "converged",
        ] {
            assert!(v.get(k).is_some(), "missing {k}");
        }
        assert_eq!(v["model"], "linear");
        assert!(
            v["params"]["r"]
                .as_f64()
                .is_some_and(|r| (r - 0.05).abs() < 0.01)
        );
        assert_eq!(v["forecast"]["status"], "ahead");
        assert!(v["forecast"]["x"].as_f64().is_some());
    }

    #[test]
    fn text_rendering_contains_the_sections() {
        let x: Vec<f64> = (1..=12).map(f64::from).collect();
        let y: Vec<f64> = x.iter().map(|&v| (-0.06 * v).exp()).collect();
        let a = analyse(
            &LotSeries {
                x,
                y,
                ..LotSeries::default()
            },
            &AnalysisOptions::default(),
        );
        let t = render_text(&a);
        for part in [
            "Model ranking",
            "Chosen:",
            "Forecast",
            "Abrupt loss",
            "activity",
        ] {
            assert!(t.contains(part), "missing {part} in\n{t}");
        }
        assert!(t.chars().any(|c| BARS.contains(&c)));
    }

    #[test]
    fn sparkline_scales() {
        assert_eq!(sparkline(&[Some(0.0), Some(1.0), None], 0.0, 1.0), "▁█ ");
    }
}
