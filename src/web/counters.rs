//! Request counts and latencies, kept for `/metrics`.

use std::collections::BTreeMap;
use std::sync::Mutex;

/// Requests answered, by (route, status).
pub type Counts = BTreeMap<(String, u16), u64>;

#[derive(Default)]
struct Tallies {
    counts: Counts,
    latency: BTreeMap<String, Latency>,
}

/// Upper bounds of the latency histogram's buckets, in seconds.
pub const BUCKETS: [f64; 12] = [
    0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0,
];

#[derive(Default, Clone)]
pub struct Latency {
    /// Cumulative counts per bucket of [`BUCKETS`].
    pub buckets: [u64; BUCKETS.len()],
    pub count: u64,
    pub sum: f64,
}

/// Requests by route and status, and their latencies by route.
#[derive(Default)]
pub struct RequestMetrics {
    inner: Mutex<Tallies>,
}

impl RequestMetrics {
    pub fn record(&self, route: &str, status: u16, seconds: f64) {
        let mut g = self.inner.lock().unwrap_or_else(|p| p.into_inner());
        *g.counts.entry((route.to_string(), status)).or_default() += 1;
        let l = g.latency.entry(route.to_string()).or_default();
        l.count += 1;
        l.sum += seconds;
        for (b, le) in l.buckets.iter_mut().zip(BUCKETS) {
            if seconds <= le {
                *b += 1;
            }
        }
    }

    /// A copy of the counts by (route, status) and the latencies by route.
    pub fn snapshot(&self) -> (Counts, BTreeMap<String, Latency>) {
        let g = self.inner.lock().unwrap_or_else(|p| p.into_inner());
        (g.counts.clone(), g.latency.clone())
    }
}

/// Warnings and errors the process logged, by level and kind (the event's message), for
/// `/metrics`' "errors by kind". Counted by [`ProblemTally`], a tracing layer the command
/// line chains behind its log output: it counts what the log shows at warn and error.
static PROBLEMS: Mutex<BTreeMap<(&'static str, String), u64>> = Mutex::new(BTreeMap::new());

/// Distinct kinds kept before further ones are counted as "other": every message is a
/// fixed text at its call site, so the number of kinds is bounded by the code, but a
/// library's formatted message must not grow the metrics without end.
const MAX_KINDS: usize = 200;

/// Counts of warnings and errors logged so far, by (level, kind).
pub fn problem_counts() -> BTreeMap<(&'static str, String), u64> {
    PROBLEMS.lock().unwrap_or_else(|p| p.into_inner()).clone()
}

/// A tracing layer that counts every WARN and ERROR event of turnbook's own code by its
/// message; it writes nothing.
pub struct ProblemTally;

impl<S: tracing::Subscriber> tracing_subscriber::Layer<S> for ProblemTally {
    fn on_event(
        &self,
        event: &tracing::Event<'_>,
        _ctx: tracing_subscriber::layer::Context<'_, S>,
    ) {
        let meta = event.metadata();
        let level = match *meta.level() {
            tracing::Level::ERROR => "error",
            tracing::Level::WARN => "warn",
            _ => return,
        };
        if !meta.target().starts_with("turnbook") {
            return;
        }
        let mut message = Message(String::new());
        event.record(&mut message);
        let mut g = PROBLEMS.lock().unwrap_or_else(|p| p.into_inner());
        let kind = if g.len() < MAX_KINDS || g.contains_key(&(level, message.0.clone())) {
            message.0
        } else {
            "other".to_string()
        };
        *g.entry((level, kind)).or_default() += 1;
    }
}

/// The `message` field of an event, as written at its call site.
struct Message(String);

impl tracing::field::Visit for Message {
    fn record_str(&mut self, field: &tracing::field::Field, value: &str) {
        if field.name() == "message" {
            self.0 = value.to_string();
        }
    }

    fn record_debug(&mut self, field: &tracing::field::Field, value: &dyn std::fmt::Debug) {
        if field.name() == "message" {
            self.0 = format!("{value:?}");
        }
    }
}

#[cfg(test)]
mod tests {
    use tracing_subscriber::Layer as _;
    use tracing_subscriber::layer::SubscriberExt as _;

    #[test]
    fn warnings_and_errors_are_counted_by_message_and_others_are_not() {
        let sub = tracing_subscriber::registry()
            .with(super::ProblemTally.with_filter(tracing_subscriber::filter::LevelFilter::WARN));
        tracing::subscriber::with_default(sub, || {
            tracing::warn!(path = "a.csv", "counted test warning");
            tracing::warn!(path = "b.csv", "counted test warning");
            tracing::error!("counted test error");
            tracing::info!("counted test info");
        });
        let c = super::problem_counts();
        let get = |l: &'static str, k: &str| c.get(&(l, k.to_string())).copied();
        assert_eq!(get("warn", "counted test warning"), Some(2), "{c:?}");
        assert_eq!(get("error", "counted test error"), Some(1), "{c:?}");
        assert_eq!(get("info", "counted test info"), None, "{c:?}");
    }
}
