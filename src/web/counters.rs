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
