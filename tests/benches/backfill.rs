//! Backfill throughput: 100,000 small export files (one cycle each, distinct batch ids,
//! five lots) ingested through `Ingestor::ingest_paths` in this process, with the default
//! files per transaction. Prints files/s for the whole run and for the recompute at its
//! end, and the peak resident set (VmHWM).
//!
//! `cargo bench --bench backfill` (TURNBOOK_BENCH_FILES overrides the count,
//! TURNBOOK_BENCH_GROUP the files per transaction, TURNBOOK_BENCH_EXPORTS names a folder
//! that keeps the export files for the next run).

use std::io::Read;
use std::path::{Path, PathBuf};
use std::time::Instant;

use sha2::{Digest, Sha256};

use turnbook::config::Config;
use turnbook::notebook::{self as ingestion, Ingestor};

const LOTS: usize = 5;

const CONFIG: &str = r#"
database = "bench.db"
quarantine = "quarantine"

[profiles.reactor]
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

[[folders]]
path = "exports"
profile = "reactor"
"#;

fn vm_hwm_kib() -> Option<u64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = s.lines().find(|l| l.starts_with("VmHWM:"))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

/// CPU seconds (user + system) of `/proc/<which>/stat`: "self" for the process,
/// "thread-self" for the calling thread (here the single database writer).
fn cpu_secs(which: &str) -> f64 {
    let Ok(s) = std::fs::read_to_string(format!("/proc/{which}/stat")) else {
        return f64::NAN;
    };
    // Fields after the command name, which is in parentheses and may hold spaces.
    let rest = s.rsplit_once(')').map_or("", |(_, r)| r);
    let f: Vec<&str> = rest.split_whitespace().collect();
    let ticks = |i: usize| {
        f.get(i)
            .and_then(|v| v.parse::<f64>().ok())
            .unwrap_or(f64::NAN)
    };
    // utime and stime are fields 14 and 15 of stat, 12 and 13 after the name; 100 ticks/s.
    (ticks(11) + ticks(12)) / 100.0
}

fn write_exports(dir: &Path, n: usize) -> std::io::Result<()> {
    // 100 files a subfolder keeps directory listings short.
    for i in 0..n {
        let sub = dir.join(format!("{:04}", i / 100));
        if i % 100 == 0 {
            std::fs::create_dir_all(&sub)?;
        }
        let lot = i % LOTS;
        let cycle = i / LOTS + 1;
        // An invented, slowly decaying conversion with a little deterministic scatter.
        let conv = 40.0 + 55.0 * (-(cycle as f64) / 8000.0).exp() + ((i * 7919) % 13) as f64 * 0.05;
        let text = format!(
            "Batch,Lot,Cycle,Started,Time (min),T (degC),Conversion (%)\n\
             B{i:07},LOT-{lot},{cycle},2026-{:02}-{:02}T{:02}:{:02}:00,120,60.0,{conv:.3}\n",
            1 + (i / 28 / 24 / 60) % 12,
            1 + (i / 24 / 60) % 28,
            (i / 60) % 24,
            i % 60,
        );
        std::fs::write(sub.join(format!("B{i:07}.csv")), text)?;
    }
    Ok(())
}

/// Read every file whole, one after the other, into one buffer.
fn read_each(files: &[PathBuf], mut with: impl FnMut(&[u8])) {
    let mut buf = Vec::new();
    for f in files {
        buf.clear();
        std::fs::File::open(f)
            .and_then(|mut h| h.read_to_end(&mut buf))
            .expect("read a file");
        with(&buf);
    }
}

fn main() {
    // As the `turnbook` binary does first thing.
    turnbook::store::configure_library();
    // `cargo bench` passes --bench; any other argument is ignored too.
    let n: usize = std::env::var("TURNBOOK_BENCH_FILES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(100_000);
    let tmp = tempfile::tempdir().expect("temporary folder");
    let root = tmp.path();
    // TURNBOOK_BENCH_EXPORTS keeps the export files in a folder of its own between runs:
    // creating 100,000 files costs more than ingesting them, and varies with the file
    // system's state. The database is always new.
    let kept = std::env::var_os("TURNBOOK_BENCH_EXPORTS").map(PathBuf::from);
    let exports = kept.clone().unwrap_or_else(|| root.join("exports"));
    // Beside the folder, not in it: everything in it is ingested.
    let marker = exports.with_extension(format!("complete-{n}"));
    let t = Instant::now();
    if !marker.exists() {
        write_exports(&exports, n).expect("write the export files");
        if kept.is_some() {
            std::fs::write(&marker, b"").expect("mark the export files complete");
        }
    }
    let cfg_path = root.join("turnbook.toml");
    // TURNBOOK_BENCH_GROUP overrides files_per_transaction (the default otherwise).
    let config = match std::env::var("TURNBOOK_BENCH_GROUP") {
        Ok(g) => CONFIG.replace(
            "quarantine = \"quarantine\"\n",
            &format!("quarantine = \"quarantine\"\nfiles_per_transaction = {g}\n"),
        ),
        Err(_) => CONFIG.to_string(),
    };
    let config = config.replace(
        "path = \"exports\"",
        &format!("path = {:?}", exports.display().to_string()),
    );
    std::fs::write(&cfg_path, config).expect("write the configuration");
    println!(
        "backfill: wrote {n} files in {:.2} s",
        t.elapsed().as_secs_f64()
    );

    let mut listing = ingestion::Listing::default();
    ingestion::collect_files(&exports, &mut listing).expect("list the files");
    assert!(listing.refused.is_empty(), "{:?}", listing.refused);
    let files: Vec<PathBuf> = listing.files;
    assert_eq!(files.len(), n);
    // Warm the page cache: read every file once.
    let mut bytes = 0usize;
    read_each(&files, |content| bytes += content.len());
    // A yardstick of this host's speed at this moment, taken in every run: reading and
    // hashing every file, one thread, nothing stored. The host's speed drifts (by up to
    // twice within an hour), so a backfill's figure is best read beside this one.
    let t = Instant::now();
    let mut digests = 0u8;
    read_each(&files, |content| digests ^= Sha256::digest(content)[0]);
    let read_hash = n as f64 / t.elapsed().as_secs_f64();
    std::hint::black_box(digests);
    let hwm_before = vm_hwm_kib().unwrap_or(0);

    let cfg = Config::load(&cfg_path).expect("load the configuration");
    let mut ing = Ingestor::open(cfg).expect("open the database");
    let (proc0, thread0) = (cpu_secs("self"), cpu_secs("thread-self"));
    let t = Instant::now();
    let mut last = t;
    let mut store_secs = 0.0;
    let mut seen = 0usize;
    let mut hwm_stored = 0;
    let summary = ing
        .ingest_paths(&files, |_| {
            seen += 1;
            if seen == n {
                hwm_stored = vm_hwm_kib().unwrap_or(0);
                last = Instant::now();
                store_secs = t.elapsed().as_secs_f64();
            }
        })
        .expect("ingest");
    let total = t.elapsed().as_secs_f64();
    let (proc_cpu, writer_cpu) = (cpu_secs("self") - proc0, cpu_secs("thread-self") - thread0);
    let recompute = last.elapsed().as_secs_f64();
    assert_eq!(
        summary.ingested,
        n,
        "every file ingested: {:?}",
        summary.errors.first()
    );
    assert_eq!(summary.rejected, 0);
    let cycles: i64 = ing
        .conn()
        .query_row("SELECT COUNT(*) FROM cycles", [], |r| r.get(0))
        .expect("count cycles");
    assert_eq!(cycles as usize, n);
    let (payload, pages, page_size): (f64, i64, i64) = ing
        .conn()
        .query_row(
            "SELECT (SELECT AVG(LENGTH(payload)) FROM events), \
                    (SELECT page_count FROM pragma_page_count()), \
                    (SELECT page_size FROM pragma_page_size())",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .expect("database figures");
    let hwm = vm_hwm_kib().unwrap_or(0);
    println!(
        "backfill: {n} files ({:.1} MB) in {total:.2} s = {:.0} files/s; \
         reading+storing {store_secs:.2} s ({:.0} files/s), recomputing {LOTS} lots {recompute:.2} s",
        bytes as f64 / 1e6,
        n as f64 / total,
        n as f64 / store_secs
    );
    println!(
        "backfill: reading and hashing alone, one thread: {read_hash:.0} files/s \
         (the backfill is {:.2} of it)",
        n as f64 / total / read_hash
    );
    println!(
        "backfill: CPU {proc_cpu:.2} s in all threads, {writer_cpu:.2} s in the writer \
         ({:.1} us a file, recompute included)",
        writer_cpu * 1e6 / n as f64
    );
    println!(
        "backfill: database {:.0} bytes a file ({pages} pages of {page_size} bytes), event payload {payload:.0} bytes on average",
        (pages * page_size) as f64 / n as f64
    );
    println!(
        "backfill: peak RSS (VmHWM) {:.1} MB (before ingesting {:.1} MB, before recomputing {:.1} MB)",
        hwm as f64 / 1024.0,
        hwm_before as f64 / 1024.0,
        hwm_stored as f64 / 1024.0
    );
}
