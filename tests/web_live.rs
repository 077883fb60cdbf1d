//! The live view as a user sees it: `turnbook watch` serves the demo plant, a real
//! headless Chromium (driven through chromedriver's WebDriver protocol) opens a lot's
//! page, and an export file dropped into the watched folder appears on that open page
//! within 2 s, without a reload and without console errors. The same service's
//! `/metrics` counts the refit and, after a broken file, the problem by its kind.
//!
//! Without chromium and chromedriver the test fails when `CI` is set and is skipped
//! otherwise (`apt-get install chromium chromium-driver`).

mod common;

use std::fs;
use std::io::{Read as _, Write as _};
use std::net::{SocketAddr, TcpListener, TcpStream};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use serde_json::{Value, json};

/// Kills a child process when dropped, so a failed assertion leaves nothing running.
struct Running(Child);

impl Drop for Running {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

fn on_path(names: &[&str]) -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .flat_map(|d| names.iter().map(move |n| d.join(n)))
        .find(|p| p.is_file())
}

fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0")
        .and_then(|l| l.local_addr())
        .map(|a| a.port())
        .unwrap()
}

/// One HTTP/1.1 exchange (`Connection: close`): the status and the body.
fn http(addr: SocketAddr, method: &str, path: &str, body: Option<&Value>) -> (u16, String) {
    let body = body.map(Value::to_string).unwrap_or_default();
    let mut s = TcpStream::connect(addr).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(60))).unwrap();
    write!(
        s,
        "{method} {path} HTTP/1.1\r\nHost: {addr}\r\nConnection: close\r\n\
         Content-Type: application/json\r\nContent-Length: {}\r\n\r\n{body}",
        body.len()
    )
    .unwrap();
    let raw = read_response(&mut s);
    let text = String::from_utf8_lossy(&raw).into_owned();
    let (head, rest) = text.split_once("\r\n\r\n").unwrap_or((&text, ""));
    let status = head
        .split_whitespace()
        .nth(1)
        .and_then(|c| c.parse().ok())
        .unwrap_or(0);
    let chunked = head
        .to_ascii_lowercase()
        .contains("transfer-encoding: chunked");
    (status, if chunked { dechunk(rest) } else { rest.into() })
}

/// A response read up to its end: its Content-Length when it states one (some servers
/// keep the connection open), else until the peer closes.
fn read_response(s: &mut TcpStream) -> Vec<u8> {
    let mut raw = Vec::new();
    let mut buf = [0u8; 8192];
    loop {
        let n = s.read(&mut buf).unwrap();
        if n == 0 {
            return raw;
        }
        raw.extend_from_slice(&buf[..n]);
        let text = String::from_utf8_lossy(&raw);
        if let Some(end) = text.find("\r\n\r\n") {
            let length = text[..end].lines().find_map(|l| {
                let (k, v) = l.split_once(':')?;
                k.eq_ignore_ascii_case("content-length")
                    .then(|| v.trim().parse::<usize>().ok())?
            });
            if length.is_some_and(|len| raw.len() >= end + 4 + len) {
                return raw;
            }
        }
    }
}

fn dechunk(mut rest: &str) -> String {
    let mut out = String::new();
    while let Some((size, tail)) = rest.split_once("\r\n") {
        let n = usize::from_str_radix(size.trim(), 16).unwrap_or(0);
        if n == 0 || tail.len() < n {
            break;
        }
        out.push_str(&tail[..n]);
        rest = tail[n..].trim_start_matches("\r\n");
    }
    out
}

/// A WebDriver session in headless Chromium.
struct Browser {
    driver: SocketAddr,
    session: String,
    _profile: tempfile::TempDir,
}

impl Browser {
    fn start(chromium: &Path, driver: SocketAddr) -> Browser {
        let profile = tempfile::tempdir().unwrap();
        let args = [
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--window-size=1280,900",
        ]
        .map(String::from)
        .into_iter()
        .chain([format!("--user-data-dir={}", profile.path().display())])
        .collect::<Vec<_>>();
        let caps = json!({"capabilities": {"alwaysMatch": {
            "browserName": "chrome",
            "goog:chromeOptions": {"binary": chromium, "args": args},
            "goog:loggingPrefs": {"browser": "ALL"}
        }}});
        let (status, body) = http(driver, "POST", "/session", Some(&caps));
        let v: Value = serde_json::from_str(&body).unwrap_or(Value::Null);
        let session = v["value"]["sessionId"].as_str().map(String::from);
        let Some(session) = session else {
            panic!("chromedriver refused a session ({status}): {body}")
        };
        Browser {
            driver,
            session,
            _profile: profile,
        }
    }

    fn call(&self, method: &str, what: &str, body: Option<&Value>) -> Value {
        let path = format!("/session/{}/{what}", self.session);
        let (status, text) = http(self.driver, method, &path, body);
        assert_eq!(status, 200, "{method} {what}: {text}");
        serde_json::from_str::<Value>(&text).unwrap()["value"].take()
    }

    fn open(&self, url: &str) {
        self.call("POST", "url", Some(&json!({ "url": url })));
    }

    fn run(&self, script: &str) -> Value {
        self.call(
            "POST",
            "execute/sync",
            Some(&json!({"script": script, "args": []})),
        )
    }

    /// The browser's console messages at SEVERE level since the last call.
    fn console_errors(&self) -> Vec<String> {
        let logs = self.call("POST", "se/log", Some(&json!({"type": "browser"})));
        logs.as_array()
            .into_iter()
            .flatten()
            .filter(|e| e["level"] == "SEVERE")
            .map(|e| e["message"].to_string())
            .collect()
    }
}

impl Drop for Browser {
    fn drop(&mut self) {
        let path = format!("/session/{}", self.session);
        let _ = std::panic::catch_unwind(|| http(self.driver, "DELETE", &path, None));
    }
}

fn wait_for<T>(limit: Duration, mut probe: impl FnMut() -> Option<T>) -> Option<T> {
    let t0 = Instant::now();
    loop {
        if let Some(v) = probe() {
            return Some(v);
        }
        if t0.elapsed() > limit {
            return None;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
}

/// The demo plant with its web view on a free port and a short settle time, served by
/// `turnbook watch`; returns the service and the address it logged.
fn serve_demo(dir: &Path) -> (Running, SocketAddr) {
    let bin = common::turnbook_binary();
    let plant = dir.join("plant");
    let out = Command::new(&bin)
        .args(["demo", "--no-live", "--dir"])
        .arg(&plant)
        .output()
        .unwrap();
    assert!(out.status.success(), "demo failed: {out:?}");
    let config = plant.join("turnbook.toml");
    let text = fs::read_to_string(&config).unwrap();
    let text = text
        .replace("listen = \"127.0.0.1:8470\"", "listen = \"127.0.0.1:0\"")
        .replace("settle = 1500", "settle = 300");
    assert!(
        text.contains("127.0.0.1:0"),
        "the demo has no [web] listen line"
    );
    fs::write(&config, text).unwrap();
    let log = dir.join("service.log");
    let child = Command::new(&bin)
        .arg("--log-json")
        .arg("--config")
        .arg(&config)
        .arg("watch")
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(fs::File::create(&log).unwrap())
        .env_remove("RUST_LOG")
        .spawn()
        .unwrap();
    let service = Running(child);
    let addr = wait_for(Duration::from_secs(30), || {
        let text = fs::read_to_string(&log).unwrap_or_default();
        let watching = text.contains("\"message\":\"watching\"");
        let addr = text
            .lines()
            .filter_map(|l| serde_json::from_str::<Value>(l).ok())
            .find(|v| v["fields"]["message"] == "web view serving")
            .and_then(|v| v["fields"]["address"].as_str()?.parse().ok());
        addr.filter(|_| watching)
    });
    let Some(addr) = addr else {
        panic!(
            "the service did not serve its web view:\n{}",
            fs::read_to_string(&log).unwrap_or_default()
        )
    };
    (service, addr)
}

/// A metric's value from `/metrics` (the first sample whose name and labels start so).
fn metric(addr: SocketAddr, prefix: &str) -> Option<f64> {
    let (status, text) = http(addr, "GET", "/metrics", None);
    assert_eq!(status, 200, "{text}");
    text.lines()
        .find(|l| l.starts_with(prefix))
        .and_then(|l| l.rsplit(' ').next()?.parse().ok())
}

fn drop_export(folder: &Path, name: &str, text: &str) {
    let mut f = fs::File::create(folder.join(name)).unwrap();
    f.write_all(text.as_bytes()).unwrap();
    f.sync_all().unwrap();
}

#[test]
fn a_file_dropped_into_a_watched_folder_appears_on_the_open_page_within_two_seconds() {
    let (chromium, driver_bin) = match (
        on_path(&["chromium", "chromium-browser"]),
        on_path(&["chromedriver"]),
    ) {
        (Some(c), Some(d)) => (c, d),
        _ if std::env::var_os("CI").is_some() => {
            panic!(
                "CI is set but chromium or chromedriver is missing (apt-get install chromium chromium-driver)"
            )
        }
        _ => {
            eprintln!(
                "SKIPPED: chromium or chromedriver not on PATH; install them to run this test"
            );
            return;
        }
    };
    let tmp = tempfile::tempdir().unwrap();
    let (_service, addr) = serve_demo(tmp.path());
    let port = free_port();
    let driver = SocketAddr::from(([127, 0, 0, 1], port));
    let _driver = Running(
        Command::new(driver_bin)
            .arg(format!("--port={port}"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap(),
    );
    let ready = wait_for(Duration::from_secs(20), || {
        TcpStream::connect(driver).ok()?;
        let (_, body) = http(driver, "GET", "/status", None);
        serde_json::from_str::<Value>(&body).ok()?["value"]["ready"]
            .as_bool()
            .filter(|r| *r)
    });
    assert!(ready.is_some(), "chromedriver did not become ready");
    let browser = Browser::start(&chromium, driver);
    browser.open(&format!("http://{addr}/lots/PD-C-2611-A"));
    let live = wait_for(Duration::from_secs(10), || {
        let class = browser
            .run("var s = document.getElementById('live-state'); return s ? s.className : null;");
        (class == "live on").then_some(())
    });
    assert!(
        live.is_some(),
        "the page never connected to its live events"
    );
    browser.run("window.turnbookTestMark = 'the same page'; return null;");
    let fits_before = metric(addr, "turnbook_fits_recomputed_total").unwrap();

    let hplc = tmp.path().join("plant/exports/hplc");
    drop_export(
        &hplc,
        "live-test.csv",
        "Sample report export,KV4 HPLC-2\nMethod,RED-ASSAY-v3\n\
         Batch,Catalyst lot,Cycle,Started,Reaction time (min),Temperature (degC),Conversion (%),Selectivity (%)\n\
         B-LIVE-0001,PD-C-2611-A,15,2026-11-30T09:15:00,90,50.0,80.10,97.00\n",
    );
    let t0 = Instant::now();
    let seen = wait_for(Duration::from_secs(10), || {
        let v = browser.run(
            "var c = document.getElementById('content'); \
             return [c.textContent.indexOf('B-LIVE-0001') >= 0, \
                     window.turnbookTestMark || null, \
                     c.getAttribute('data-refreshes')];",
        );
        (v[0] == true).then_some(v)
    });
    let elapsed = t0.elapsed();
    let Some(seen) = seen else {
        panic!("the new batch never appeared on the open page")
    };
    eprintln!("the new batch appeared on the open page after {elapsed:?}: {seen}");
    assert_eq!(seen[1], "the same page", "the page was reloaded: {seen}");
    assert!(seen[2].as_str().is_some_and(|n| n != "0"), "{seen}");
    assert!(
        elapsed <= Duration::from_secs(2),
        "the new batch took {elapsed:?} to appear (at most 2 s)"
    );
    let errors = browser.console_errors();
    assert!(errors.is_empty(), "the page logged errors: {errors:?}");
    let fits_after = metric(addr, "turnbook_fits_recomputed_total").unwrap();
    assert!(fits_after > fits_before, "{fits_before} -> {fits_after}");

    // A broken file: the service keeps running and /metrics counts the problem by kind.
    drop_export(&hplc, "broken.csv", "not an export at all\n");
    let kind = "turnbook_problems_total{level=\"warn\",kind=\"file rejected and quarantined\"}";
    let counted = wait_for(Duration::from_secs(10), || metric(addr, kind));
    assert_eq!(
        counted,
        Some(1.0),
        "the rejected file was not counted:\n{}\n{}",
        http(addr, "GET", "/metrics", None).1,
        fs::read_to_string(tmp.path().join("service.log")).unwrap_or_default()
    );
}
