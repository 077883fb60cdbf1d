//! A lot's forecast in dates: the cadence of its batches in the plant's time zone turns
//! the crossing cycle and its interval into local dates, and the catalyst's lead time
//! gives the order-by date.

use crate::config::Config;
use crate::fit::LotAnalysis;
use crate::model::CycleView;
use crate::model::calendar::{Cadence, crossing_dates};
use crate::model::{ForecastStatus, LotRecord};

/// The lot's cadence from the starts of its cycles (excluded ones left out), read in the
/// plant's zone.
pub fn cadence<'a>(
    cfg: &Config,
    cycles: impl IntoIterator<Item = &'a CycleView>,
) -> Option<Cadence> {
    let starts: Vec<(u32, chrono::NaiveDateTime)> =
        cycles.into_iter().filter_map(start_of).collect();
    Cadence::of(cfg.zone(), &starts)
}

/// A cycle's number and start as the cadence takes them (none for an excluded cycle).
pub(crate) fn start_of(v: &CycleView) -> Option<(u32, chrono::NaiveDateTime)> {
    if v.excluded {
        return None;
    }
    let t = v.started_at.as_deref()?;
    Some((
        u32::try_from(v.cycle_no?).ok()?,
        crate::model::time::parse_local(t)?,
    ))
}

/// Put dates on the analysis's forecast when it offers a crossing (ahead, or with an
/// interval that does not close) and the lot has a cadence.
pub fn date_forecast<'a>(
    cfg: &Config,
    rec: &LotRecord,
    cycles: impl IntoIterator<Item = &'a CycleView>,
    a: &mut LotAnalysis,
) {
    if a.forecast.as_ref().is_some_and(|f| {
        matches!(
            f.status,
            ForecastStatus::Ahead | ForecastStatus::UnboundedInterval
        )
    }) {
        date_forecast_with(cfg, rec, cadence(cfg, cycles), a);
    }
}

/// [`date_forecast`] with the lot's cadence worked out already.
pub fn date_forecast_with(
    cfg: &Config,
    rec: &LotRecord,
    cadence: Option<Cadence>,
    a: &mut LotAnalysis,
) {
    let Some(f) = a.forecast.as_mut() else { return };
    if !matches!(
        f.status,
        ForecastStatus::Ahead | ForecastStatus::UnboundedInterval
    ) {
        return;
    }
    let (Some(x), Some(c)) = (f.x, cadence) else {
        return;
    };
    let lead = cfg.alerts.lead_days_for(&rec.catalyst);
    f.dates = crossing_dates(cfg.zone(), &c, x, f.lower, f.upper, lead).map(|mut d| {
        // The shell's clock: the plant-local date of today.
        d.as_of = Some(
            crate::model::calendar::local_date(cfg.zone(), chrono::Utc::now())
                .format("%Y-%m-%d")
                .to_string(),
        );
        Box::new(d)
    });
}
