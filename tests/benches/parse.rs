//! Parsing one small export file, as a backfill does 100,000 times: the backfill's profile
//! and file text (tests/benches/backfill.rs), through `parse_valid`.
//!
//! `cargo bench --bench parse`

use std::hint::black_box;
use std::time::Duration;

use criterion::{Criterion, criterion_group, criterion_main};
use turnbook::ingest::{Profile, parse_valid};

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

fn bench(c: &mut Criterion) {
    let profile = match Profile::from_toml(PROFILE) {
        Ok(p) => p,
        Err(e) => panic!("bench profile invalid: {e}"),
    };
    let mut g = c.benchmark_group("parse_one_line_file");
    g.measurement_time(Duration::from_secs(5));
    g.bench_function("parse_valid", |b| {
        b.iter(|| parse_valid(black_box(FILE.as_bytes()), black_box(&profile)))
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
