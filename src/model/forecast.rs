//! Where a lot's replacement forecast stands: the one vocabulary of the fit, the alert
//! rules, reports, the web view and messages.

use serde::{Deserialize, Serialize};

/// The plain-words outcome of a forecast.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ForecastStatus {
    /// The crossing lies after the newest point and its interval is finite.
    Ahead,
    /// The fitted curve is already at or below the criterion at the newest point.
    ReachedAlready,
    /// The fitted curve never reaches the criterion (the fit says why).
    NotReached,
    /// A crossing is forecast but the interval is not finite: the confidence band does not
    /// cross the criterion, or the curve is flat at the crossing.
    UnboundedInterval,
    /// The loss of activity over the observed cycles is not significant at the chosen
    /// confidence: no crossing is offered, at most a lower bound on it.
    NoSignificantTrend,
    /// A step change was detected and the new level has too few cycles for a trend: the
    /// forecast says since which cycle and how many more cycles it needs.
    Withheld,
}

impl ForecastStatus {
    /// The state's name as in JSON.
    pub fn word(self) -> &'static str {
        match self {
            ForecastStatus::Ahead => "ahead",
            ForecastStatus::ReachedAlready => "reached-already",
            ForecastStatus::NotReached => "not-reached",
            ForecastStatus::UnboundedInterval => "unbounded-interval",
            ForecastStatus::NoSignificantTrend => "no-significant-trend",
            ForecastStatus::Withheld => "withheld",
        }
    }

    /// A sentence for people reading a report, a page or a message.
    pub fn describe(self) -> &'static str {
        match self {
            ForecastStatus::Ahead => "criterion crossed at the forecast point",
            ForecastStatus::UnboundedInterval => {
                "criterion crossed at the forecast point, but the interval is unbounded"
            }
            ForecastStatus::ReachedAlready => "already at or below the criterion",
            ForecastStatus::NotReached => "never reached under the fitted model",
            ForecastStatus::NoSignificantTrend => {
                "no significant loss of activity: no crossing is forecast"
            }
            ForecastStatus::Withheld => {
                "forecast withheld: a step change, too few cycles at the new level"
            }
        }
    }

    /// True when the state offers a crossing point (bounded or not).
    pub fn crosses(self) -> bool {
        matches!(
            self,
            ForecastStatus::Ahead | ForecastStatus::UnboundedInterval
        )
    }
}
