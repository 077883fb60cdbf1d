//! Parsing one small export file, as a backfill does 100,000 times: the backfill's profile
//! and file text (tests/benches/backfill.rs), through `parse_valid` (everything read anew
//! for each file) and through one `ParseCache` (header layout and date layout kept).
//!
//! `cargo bench --bench parse`; with TURNBOOK_PARSE_LOOP=N it instead parses N files in a
//! plain loop per way (TURNBOOK_PARSE_ONLY=uncached or cached picks one) and prints wall and
//! thread CPU time per file, which a shared machine disturbs less than wall time alone.

use std::hint::black_box;
use std::time::{Duration, Instant};

use criterion::{Criterion, criterion_group};
use turnbook::ingest::{ParseCache, Profile, parse_valid};

const PROFILE: &str = r#"
kind = "cycles"
delimiter = ","
decimal = "."
encoding = "utf-8"
datetime_format = "%Y-%m-%dT%H:%M:%S"
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.cycle_no = { header = "Cycle" }
columns.started_at = { header = "Started" }
columns.duration = { header = "Time", unit = "from-header" }
columns.temperature = { header = "T", unit = "from-header" }
columns.conversion = { header = "Conversion", unit = "from-header" }
"#;

const FILE: &str = "Batch,Lot,Cycle,Started,Time (min),T (degC),Conversion (%)\n\
                    B0004711,LOT-1,943,2026-01-04T06:31:00,120,60.0,94.350\n";

fn profile() -> Profile {
    match Profile::from_toml(PROFILE) {
        Ok(p) => p,
        Err(e) => panic!("bench profile invalid: {e}"),
    }
}

fn thread_cpu_secs() -> f64 {
    let mut t = libc::timespec {
        tv_sec: 0,
        tv_nsec: 0,
    };
    // SAFETY: clock_gettime writes one timespec through a valid pointer.
    unsafe { libc::clock_gettime(libc::CLOCK_THREAD_CPUTIME_ID, &mut t) };
    t.tv_sec as f64 + t.tv_nsec as f64 * 1e-9
}

fn plain_loop(n: usize, only: Option<&str>) {
    let profile = profile();
    let mut cache = ParseCache::new();
    for way in ["uncached", "cached"] {
        if only.is_some_and(|o| o != way) {
            continue;
        }
        let (t, cpu) = (Instant::now(), thread_cpu_secs());
        for _ in 0..n {
            let r = match way {
                "cached" => cache.parse_valid(black_box(FILE.as_bytes()), black_box(&profile)),
                _ => parse_valid(black_box(FILE.as_bytes()), black_box(&profile)),
            };
            assert!(black_box(r).is_ok());
        }
        let per = |s: f64| s / n as f64 * 1e6;
        println!(
            "{way}: {:.3} µs/file wall, {:.3} µs/file thread CPU ({n} files)",
            per(t.elapsed().as_secs_f64()),
            per(thread_cpu_secs() - cpu)
        );
    }
}

fn bench(c: &mut Criterion) {
    let profile = profile();
    let mut g = c.benchmark_group("parse_one_line_file");
    g.measurement_time(Duration::from_secs(5));
    g.bench_function("parse_valid", |b| {
        b.iter(|| parse_valid(black_box(FILE.as_bytes()), black_box(&profile)))
    });
    let mut cache = ParseCache::new();
    g.bench_function("ParseCache::parse_valid", |b| {
        b.iter(|| cache.parse_valid(black_box(FILE.as_bytes()), black_box(&profile)))
    });
    g.finish();
}

criterion_group!(benches, bench);

fn main() {
    if let Some(n) = std::env::var("TURNBOOK_PARSE_LOOP")
        .ok()
        .and_then(|v| v.parse().ok())
    {
        plain_loop(n, std::env::var("TURNBOOK_PARSE_ONLY").ok().as_deref());
        return;
    }
    benches();
    Criterion::default().configure_from_args().final_summary();
}
