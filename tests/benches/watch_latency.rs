//! Latency and idle cost of the real `turnbook watch` process.
//!
//! `cargo bench --bench watch_latency` starts the service (bench profile build) on a
//! temporary plant, measures it idle, then renames 50 exports a second into its watched
//! folder for 60 s, and measures for each file the time from its rename to its committed
//! source_files row (seen by a reader polling the database every 2 ms), then the idle cost
//! again. Figures printed: latency p50/p90/p99/max, the same less the settle time, the
//! latency trend over the run, idle CPU over 10 s from /proc/PID/stat, context switches,
//! VmRSS and VmHWM.
//!
//! Environment (optional): TURNBOOK_BENCH_SECONDS (60), TURNBOOK_BENCH_RATE (files per
//! second, 50), TURNBOOK_BENCH_LOTS (lots the files are spread over, 10),
//! TURNBOOK_BENCH_SETTLE_MS (300). Up to 100 lots are registered before the start, so
//! each file's recompute fits its lot; with more, the lots stay unregistered (no fits).

use std::collections::HashMap;
use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use rusqlite::{Connection, OpenFlags};

fn env_u64(name: &str, default: u64) -> u64 {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

/// CPU time (user + system) of a process in clock ticks, from /proc/PID/stat.
fn cpu_ticks(pid: u32) -> u64 {
    let stat = fs::read_to_string(format!("/proc/{pid}/stat")).unwrap();
    // Fields after the command name, which is in parentheses and may hold spaces.
    let rest = &stat[stat.rfind(')').unwrap() + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    // utime and stime are fields 14 and 15 of the line, 12 and 13 after the name.
    f[11].parse::<u64>().unwrap() + f[12].parse::<u64>().unwrap()
}

fn clock_ticks_per_s() -> u64 {
    Command::new("getconf")
        .arg("CLK_TCK")
        .output()
        .ok()
        .and_then(|o| String::from_utf8_lossy(&o.stdout).trim().parse().ok())
        .unwrap_or(100)
}

/// A `Vm…` line of /proc/PID/status, in kB.
fn vm_kb(pid: u32, key: &str) -> u64 {
    let status = fs::read_to_string(format!("/proc/{pid}/status")).unwrap();
    status
        .lines()
        .find_map(|l| l.strip_prefix(key))
        .and_then(|v| v.trim_start_matches(':').split_whitespace().next())
        .and_then(|v| v.parse().ok())
        .unwrap_or(0)
}

/// Voluntary + involuntary context switches of each thread, by thread id: a thread woken
/// by a timer shows here even when it uses too little CPU to count in ticks.
fn switches(pid: u32) -> HashMap<String, u64> {
    let mut by_thread = HashMap::new();
    if let Ok(dir) = fs::read_dir(format!("/proc/{pid}/task")) {
        for task in dir.flatten() {
            let Ok(s) = fs::read_to_string(task.path().join("status")) else {
                continue;
            };
            let n: u64 = s
                .lines()
                .filter(|l| {
                    l.starts_with("voluntary_ctxt_switches")
                        || l.starts_with("nonvoluntary_ctxt_switches")
                })
                .filter_map(|l| l.split_whitespace().nth(1)?.parse::<u64>().ok())
                .sum();
            by_thread.insert(task.file_name().to_string_lossy().into_owned(), n);
        }
    }
    by_thread
}

/// Switches between two samples: threads that ended in between count what they did
/// before the first sample as nothing; new threads count all of theirs.
fn switches_between(a: &HashMap<String, u64>, b: &HashMap<String, u64>) -> u64 {
    b.iter()
        .map(|(tid, n)| n.saturating_sub(a.get(tid).copied().unwrap_or(0)))
        .sum()
}

struct Idle {
    ticks: u64,
    cpu_percent: f64,
    switches: u64,
    threads: usize,
    rss_kb: u64,
    hwm_kb: u64,
}

fn measure_idle(pid: u32, over: Duration) -> Idle {
    let tck = clock_ticks_per_s();
    let (c0, s0) = (cpu_ticks(pid), switches(pid));
    std::thread::sleep(over);
    let (c1, s1) = (cpu_ticks(pid), switches(pid));
    Idle {
        ticks: c1 - c0,
        cpu_percent: (c1 - c0) as f64 / tck as f64 / over.as_secs_f64() * 100.0,
        switches: switches_between(&s0, &s1),
        threads: s1.len(),
        rss_kb: vm_kb(pid, "VmRSS"),
        hwm_kb: vm_kb(pid, "VmHWM"),
    }
}

fn print_idle(label: &str, idle: &Idle, over: Duration) {
    println!(
        "{label}: CPU {:.3} % over {:.0} s, {} context switches in {} threads, VmRSS {:.1} MB, VmHWM {:.1} MB",
        idle.cpu_percent,
        over.as_secs_f64(),
        idle.switches,
        idle.threads,
        idle.rss_kb as f64 / 1024.0,
        idle.hwm_kb as f64 / 1024.0
    );
}

fn percentile(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let rank = ((p / 100.0) * sorted.len() as f64).ceil() as usize;
    sorted[rank.clamp(1, sorted.len()) - 1]
}

fn summary(ms: &[f64]) -> String {
    let mut s = ms.to_vec();
    s.sort_by(f64::total_cmp);
    format!(
        "p50 {:.1} ms, p90 {:.1} ms, p99 {:.1} ms, max {:.1} ms (n = {})",
        percentile(&s, 50.0),
        percentile(&s, 90.0),
        percentile(&s, 99.0),
        percentile(&s, 100.0),
        s.len()
    )
}

/// The `turnbook` binary built with these tests (keep one target directory per source
/// tree: a shared one can hold another tree's build under this name).
fn this_trees_binary() -> PathBuf {
    PathBuf::from(env!("CARGO_BIN_EXE_turnbook"))
}

fn spawn(bin: &Path, config: &Path, log: &Path) -> Child {
    let log = fs::File::create(log).expect("create the service log");
    Command::new(bin)
        .arg("--log-json")
        .arg("--config")
        .arg(config)
        .arg("watch")
        .stdin(Stdio::null())
        .stdout(log.try_clone().expect("log handle"))
        .stderr(log)
        .spawn()
        .expect("start turnbook watch")
}

/// One cycle of lot `i % lots`: conversion after 30 min of a first-order reaction whose
/// rate constant decays slowly with the lot's cycle number (invented data, with a small
/// deterministic scatter), so the lot's fits have a deactivation trend to find.
fn export(i: u64, lots: u64) -> String {
    let cycle = (i / lots + 1) as f64;
    let k = 0.08 * (-0.004 * cycle).exp();
    let scatter = ((i * 37 % 11) as f64 - 5.0) * 0.06;
    let conversion = (100.0 * (1.0 - (-k * 30.0).exp()) + scatter).clamp(1.0, 99.0);
    format!(
        "Batch,Lot,Conversion,Time,Cycle,Substrate,Catalyst\n\
         LAT-{i:06},LOT-{:03},{conversion:.2},30,{cycle},0.5,2.0\n",
        i % lots
    )
}

/// Registers the lots (a Pd catalyst each) through the command line, so every file's
/// recompute fits the lot's deactivation models as in a plant.
fn register_lots(bin: &Path, config: &Path, lots: u64) {
    for l in 0..lots {
        let out = Command::new(bin)
            .arg("--config")
            .arg(config)
            .args(["register", "--catalyst", "Pd/C 5%", "--metal", "Pd"])
            .args(["--loading", "5", "--mass", "2.0"])
            .arg(format!("LOT-{l:03}"))
            .output()
            .expect("run turnbook register");
        assert!(
            out.status.success(),
            "register LOT-{l:03}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
}

fn main() {
    // `cargo bench` passes --bench; this binary takes no other arguments.
    let seconds = env_u64("TURNBOOK_BENCH_SECONDS", 60);
    let rate = env_u64("TURNBOOK_BENCH_RATE", 50).max(1);
    let lots = env_u64("TURNBOOK_BENCH_LOTS", 10).max(1);
    let settle_ms = env_u64("TURNBOOK_BENCH_SETTLE_MS", 300);
    let total = seconds * rate;

    let tmp = tempfile::tempdir().expect("temporary plant");
    let root = tmp.path();
    let inbox = root.join("inbox");
    let staging = root.join("staging");
    fs::create_dir_all(&inbox).unwrap();
    fs::create_dir_all(&staging).unwrap();
    let config = root.join("turnbook.toml");
    fs::write(
        &config,
        format!(
            r#"database = "plant.db"
quarantine = "quarantine"

[profiles.simple]
kind = "cycles"
delimiter = ","
decimal = "."
columns.batch_id = {{ header = "Batch" }}
columns.lot = {{ header = "Lot" }}
columns.conversion = {{ header = "Conversion", unit = "%" }}
columns.duration = {{ header = "Time", unit = "min" }}
columns.cycle_no = {{ header = "Cycle" }}
columns.substrate = {{ header = "Substrate", unit = "mol" }}
columns.catalyst_mass = {{ header = "Catalyst", unit = "g" }}

[[folders]]
path = "inbox"
profile = "simple"
mode = "events"
settle = {settle_ms}

[mail]
transport = "file"
dir = "outbox"
from = "turnbook@plant.test"
"#
        ),
    )
    .unwrap();
    let bin = this_trees_binary();
    println!("binary: {}", bin.display());
    let db = root.join("plant.db");
    let log = root.join("service.log");

    let register = lots <= 100;
    if register {
        register_lots(&bin, &config, lots);
    }
    let mut child = spawn(&bin, &config, &log);
    let pid = child.id();
    let t0 = Instant::now();
    while !fs::read_to_string(&log)
        .unwrap_or_default()
        .contains("\"message\":\"watching\"")
    {
        assert!(
            t0.elapsed() < Duration::from_secs(30),
            "service did not start"
        );
        std::thread::sleep(Duration::from_millis(20));
    }
    println!(
        "turnbook watch (pid {pid}), events mode, settle {settle_ms} ms; {rate} files/s for {seconds} s over {lots} lots ({})",
        if register {
            "registered"
        } else {
            "unregistered: no fits"
        }
    );
    std::thread::sleep(Duration::from_secs(1));
    let idle_over = Duration::from_secs(10);
    let fresh = measure_idle(pid, idle_over);
    print_idle("idle at start", &fresh, idle_over);

    // Reader: notes when each file's row becomes visible (committed).
    let reader = {
        let db = db.clone();
        std::thread::spawn(move || {
            let conn = Connection::open_with_flags(&db, OpenFlags::SQLITE_OPEN_READ_ONLY)
                .expect("open the database");
            conn.busy_timeout(Duration::from_secs(1)).unwrap();
            let mut seen: HashMap<u64, Instant> = HashMap::new();
            let mut last_id = 0i64;
            let limit = Instant::now() + Duration::from_secs(seconds + 120);
            while (seen.len() as u64) < total && Instant::now() < limit {
                let mut stmt = conn
                    .prepare_cached("SELECT id, path FROM source_files WHERE id > ?1 ORDER BY id")
                    .unwrap();
                let rows: Vec<(i64, String)> = stmt
                    .query_map([last_id], |r| Ok((r.get(0)?, r.get(1)?)))
                    .unwrap()
                    .filter_map(Result::ok)
                    .collect();
                let now = Instant::now();
                for (id, path) in rows {
                    last_id = last_id.max(id);
                    let n = path
                        .rsplit('/')
                        .next()
                        .and_then(|f| f.strip_prefix("lat-"))
                        .and_then(|f| f.strip_suffix(".csv"))
                        .and_then(|f| f.parse::<u64>().ok());
                    if let Some(n) = n {
                        seen.entry(n).or_insert(now);
                    }
                }
                std::thread::sleep(Duration::from_millis(2));
            }
            seen
        })
    };

    // Writer: each export written and closed in staging, then renamed in, on a fixed
    // schedule; the instant after the rename is the file's arrival.
    let start = Instant::now();
    let mut arrived: Vec<Instant> = Vec::with_capacity(total as usize);
    for i in 0..total {
        let due = start + Duration::from_secs_f64(i as f64 / rate as f64);
        if let Some(wait) = due.checked_duration_since(Instant::now()) {
            std::thread::sleep(wait);
        }
        let name = format!("lat-{i:06}.csv");
        let tmp_path = staging.join(&name);
        let mut f = fs::File::create(&tmp_path).unwrap();
        f.write_all(export(i, lots).as_bytes()).unwrap();
        drop(f);
        fs::rename(&tmp_path, inbox.join(&name)).unwrap();
        arrived.push(Instant::now());
    }
    let wrote = start.elapsed();
    let cpu_tck = clock_ticks_per_s();
    let seen = reader.join().expect("reader thread");
    println!(
        "wrote {total} files in {:.1} s; {} recorded",
        wrote.as_secs_f64(),
        seen.len()
    );

    let mut lat = Vec::with_capacity(seen.len());
    let mut by_tenth: Vec<Vec<f64>> = vec![Vec::new(); 10];
    for (i, at) in arrived.iter().enumerate() {
        if let Some(done) = seen.get(&(i as u64)) {
            let ms = done.saturating_duration_since(*at).as_secs_f64() * 1e3;
            lat.push(ms);
            by_tenth[i * 10 / arrived.len()].push(ms);
        }
    }
    println!("latency rename -> committed row: {}", summary(&lat));
    let beyond: Vec<f64> = lat.iter().map(|ms| ms - settle_ms as f64).collect();
    println!("latency beyond the settle time:  {}", summary(&beyond));
    let close = turnbook::watch::CLOSE_RECHECK.as_millis() as f64;
    let beyond_close: Vec<f64> = lat.iter().map(|ms| ms - close).collect();
    println!(
        "latency beyond the {close:.0} ms close re-check (the wait a rename actually gets): {}",
        summary(&beyond_close)
    );
    for (k, tenth) in by_tenth.iter().enumerate() {
        let mut s = tenth.clone();
        s.sort_by(f64::total_cmp);
        println!(
            "  files {:>5}..{:<5} p50 {:>7.1} ms  p99 {:>7.1} ms",
            k as u64 * total / 10,
            (k as u64 + 1) * total / 10,
            percentile(&s, 50.0),
            percentile(&s, 99.0)
        );
    }
    if let Ok(conn) = Connection::open_with_flags(&db, OpenFlags::SQLITE_OPEN_READ_ONLY) {
        let fits: Result<(i64, i64, i64), _> = conn.query_row(
            "SELECT COUNT(*), COALESCE(SUM(model IS NOT NULL), 0), \
             COALESCE(SUM(LENGTH(analysis)), 0) FROM fits",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        );
        if let Ok((n, chosen, bytes)) = fits {
            println!(
                "fits stored: {n} ({chosen} with a chosen model), {:.1} MB of analysis JSON",
                bytes as f64 / 1e6
            );
        }
    }
    let size = |p: PathBuf| fs::metadata(p).map_or(0, |m| m.len());
    println!(
        "database {:.1} MB, WAL {:.1} MB",
        size(db.clone()) as f64 / 1e6,
        size(root.join("plant.db-wal")) as f64 / 1e6
    );
    let c_after_load = cpu_ticks(pid);
    println!(
        "service CPU during the run: {:.1} s",
        c_after_load as f64 / cpu_tck as f64
    );

    std::thread::sleep(Duration::from_secs(2));
    let after = measure_idle(pid, idle_over);
    print_idle("idle after the run", &after, idle_over);

    let _ = Command::new("kill")
        .args(["-TERM", &pid.to_string()])
        .status();
    let status = child.wait().expect("wait for the service");
    println!("service stopped: {status}");

    let mut s = beyond.clone();
    s.sort_by(f64::total_cmp);
    let p99_beyond = percentile(&s, 99.0);
    let verdict = |ok: bool| if ok { "met" } else { "MISSED" };
    println!("targets:");
    println!(
        "  p99 beyond settle <= 50 ms: {:.1} ms, {}",
        p99_beyond,
        verdict(p99_beyond <= 50.0 && seen.len() as u64 == total)
    );
    let rss_mb = fresh.rss_kb.max(after.rss_kb) as f64 / 1024.0;
    println!(
        "  idle RSS <= 30 MB: {rss_mb:.1} MB, {}",
        verdict(rss_mb <= 30.0)
    );
    // Idle: at most one clock tick of CPU in 10 s (the tick is the resolution of
    // /proc/PID/stat) and fewer than 5 wakeups a second over all threads.
    let ticks = fresh.ticks.max(after.ticks);
    let busy = fresh.cpu_percent.max(after.cpu_percent);
    let wakes = fresh.switches.max(after.switches) as f64 / idle_over.as_secs_f64();
    println!(
        "  no busy polling when idle: {ticks} clock ticks ({busy:.3} % CPU), {wakes:.1} context switches/s, {}",
        verdict(ticks <= 1 && wakes < 5.0)
    );
}
