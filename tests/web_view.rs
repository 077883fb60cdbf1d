//! The web view against the demo plant's database: every page and the JSON API answer
//! with their content, text from exports is escaped, the bearer token is enforced, the
//! metrics parse and move when a file lands, and `/events` announces a commit.

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::atomic::AtomicBool;
use std::sync::{Arc, OnceLock};
use std::time::{Duration, Instant};

use axum::body::Body;
use axum::http::{Request, StatusCode};
use http_body_util::BodyExt as _;
use tokio::io::{AsyncReadExt as _, AsyncWriteExt as _};
use tower::ServiceExt as _;
use turnbook::config::Config;
use turnbook::notebook::Ingestor;
use turnbook::web::{Token, WebView};

/// The demo plant, made once per test binary (without its live part).
fn demo_dir() -> &'static Path {
    static DIR: OnceLock<tempfile::TempDir> = OnceLock::new();
    DIR.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let out = Command::new(common::turnbook_binary())
            .args(["demo", "--no-live", "--dir"])
            .arg(dir.path().join("plant"))
            .output()
            .unwrap();
        assert!(out.status.success(), "demo failed: {out:?}");
        dir
    })
    .path()
}

/// A private copy of the demo plant, so a test may add files to it.
fn plant() -> (tempfile::TempDir, Config) {
    let tmp = tempfile::tempdir().unwrap();
    let status = Command::new("cp")
        .arg("-r")
        .arg(demo_dir().join("plant"))
        .arg(tmp.path())
        .status()
        .unwrap();
    assert!(status.success());
    let cfg = Config::load(&tmp.path().join("plant/turnbook.toml")).unwrap();
    (tmp, cfg)
}

/// A view with its change watch running until the returned sender is dropped or told.
fn view(cfg: &Config, token: Option<&str>) -> (WebView, tokio::sync::watch::Sender<bool>) {
    let v = WebView::new(
        cfg.clone(),
        token.and_then(Token::new),
        Arc::new(AtomicBool::new(true)),
    );
    let (stop, rx) = tokio::sync::watch::channel(false);
    let w = v.clone();
    tokio::spawn(async move { w.watch_changes(rx).await });
    (v, stop)
}

async fn get(v: &WebView, path: &str, token: Option<&str>) -> (StatusCode, String, String) {
    let mut req = Request::builder().uri(path);
    if let Some(t) = token {
        req = req.header("authorization", format!("Bearer {t}"));
    }
    let r = v
        .router()
        .oneshot(req.body(Body::empty()).unwrap())
        .await
        .unwrap();
    let status = r.status();
    let csp = r
        .headers()
        .get("content-security-policy")
        .map(|h| h.to_str().unwrap().to_string())
        .unwrap_or_default();
    let body = r.into_body().collect().await.unwrap().to_bytes();
    (status, csp, String::from_utf8_lossy(&body).into_owned())
}

/// An HPLC export of the demo's format, with one batch of `lot`.
fn hplc_export(batch: &str, lot: &str) -> String {
    format!(
        "Sample report export,KV4 HPLC-2\nMethod,RED-ASSAY-v3\n\
         Batch,Catalyst lot,Cycle,Started,Reaction time (min),Temperature (degC),Conversion (%),Selectivity (%)\n\
         {batch},{lot},1,2026-10-30T09:15:00,90,50.0,88.40,97.20\n"
    )
}

fn ingest(cfg: &Config, name: &str, text: &str) -> PathBuf {
    let path = cfg.resolve(Path::new("exports/hplc")).join(name);
    std::fs::write(&path, text).unwrap();
    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    ing.ingest_file(&path).unwrap();
    path
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_page_and_the_api_answer_with_their_content() {
    let (_tmp, cfg) = plant();
    let (v, _stop) = view(&cfg, None);
    let (st, csp, lots) = get(&v, "/", None).await;
    assert_eq!(st, StatusCode::OK);
    assert!(csp.contains("default-src 'none'") && csp.contains("script-src 'self'"));
    for want in [
        "PD-C-2611-A",
        "PT-AL-2610-B",
        "RU-C-2612-D",
        "pending",
        "advisory",
        "QA procedures",
        "/assets/live.js",
    ] {
        assert!(lots.contains(want), "lots page lacks {want}");
    }
    let (_, _, by_activity) = get(&v, "/?sort=activity", None).await;
    let pos = |body: &str, s: &str| body.find(s).unwrap();
    // Sorted by latest activity, lowest first: the deactivating Pd lot before the Pt lot.
    assert!(pos(&by_activity, "PD-C-2611-A\"") < pos(&by_activity, "PT-AL-2610-B\""));
    let (st, _, lot) = get(&v, "/lots/PD-C-2611-A", None).await;
    assert_eq!(st, StatusCode::OK);
    for want in [
        "<svg",
        "id=\"cycles\"",
        "id=\"history\"",
        "id=\"audit-status\"",
        "intact",
        ".csv : ",
        "/lots/PD-C-2611-A/report",
        "advisory",
    ] {
        assert!(lot.contains(want), "lot page lacks {want}");
    }
    let (st, csp, report) = get(&v, "/lots/PD-C-2611-A/report", None).await;
    assert_eq!(st, StatusCode::OK);
    assert!(report.contains("PD-C-2611-A") && report.contains("<svg"));
    assert!(!csp.contains("script-src") && csp.contains("default-src 'none'"));
    let (st, _, alerts) = get(&v, "/alerts", None).await;
    assert!(st == StatusCode::OK && alerts.contains("id=\"messages\""));
    let (st, _, files) = get(&v, "/files", None).await;
    assert!(st == StatusCode::OK && files.contains("KV4-R-001.csv") && files.contains("ingested"));
    let (st, _, audit) = get(&v, "/audit", None).await;
    assert!(st == StatusCode::OK && audit.contains("Intact"), "{audit}");
    let (st, _, _) = get(&v, "/lots/NO-SUCH-LOT", None).await;
    assert_eq!(st, StatusCode::NOT_FOUND);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_api_has_the_command_lines_json_shapes() {
    let (_tmp, cfg) = plant();
    let (v, _stop) = view(&cfg, None);
    let (st, _, body) = get(&v, "/api/lots", None).await;
    assert_eq!(st, StatusCode::OK);
    let api: serde_json::Value = serde_json::from_str(&body).unwrap();
    // `lots --json` prints the lines stamped with the JSON schema version.
    let cli =
        turnbook::notebook::with_schema(&turnbook::notebook::lot_lines(&cfg).unwrap()).unwrap();
    assert_eq!(api, cli, "/api/lots differs from `lots --json`");
    let lots = api.as_array().unwrap();
    assert!(!lots.is_empty());
    for line in lots {
        assert_eq!(line["schema"], turnbook::notebook::JSON_SCHEMA, "{line}");
    }
    let (st, _, body) = get(&v, "/api/lots/PT-AL-2610-B", None).await;
    assert_eq!(st, StatusCode::OK);
    let one: serde_json::Value = serde_json::from_str(&body).unwrap();
    let state = turnbook::notebook::known_lot(&cfg, "PT-AL-2610-B").unwrap();
    let cycles = serde_json::to_value(turnbook::notebook::cycle_lines(&state)).unwrap();
    assert_eq!(one["lot"], "PT-AL-2610-B");
    assert_eq!(one["cycles"], cycles);
    assert_eq!(one["schema"], turnbook::notebook::JSON_SCHEMA);
    for path in ["/api/lots/PT-AL-2610-B/history", "/api/status"] {
        let (st, _, body) = get(&v, path, None).await;
        assert_eq!(st, StatusCode::OK, "{path}");
        let doc: serde_json::Value = serde_json::from_str(&body).unwrap();
        let objects = match doc.as_array() {
            Some(items) => items.clone(),
            None => vec![doc],
        };
        assert!(!objects.is_empty(), "{path}");
        for o in objects {
            assert_eq!(o["schema"], turnbook::notebook::JSON_SCHEMA, "{path}: {o}");
        }
    }
    let (st, _, _) = get(&v, "/api/lots/NO-SUCH-LOT", None).await;
    assert_eq!(st, StatusCode::NOT_FOUND);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn names_from_exports_render_as_text() {
    let (_tmp, cfg) = plant();
    let lot = "L<script>alert(1)</script>\"onerror=alert(2)";
    let batch = "B<script>alert(3)</script>\"onerror=alert(4)";
    let csv_lot = format!("\"{}\"", lot.replace('"', "\"\""));
    let csv_batch = format!("\"{}\"", batch.replace('"', "\"\""));
    ingest(
        &cfg,
        "f<script>alert(5)\"onerror=x.csv",
        &hplc_export(&csv_batch, &csv_lot),
    );
    let (v, _stop) = view(&cfg, None);
    let enc: String = lot
        .bytes()
        .map(|b| {
            if b.is_ascii_alphanumeric() {
                char::from(b).to_string()
            } else {
                format!("%{b:02X}")
            }
        })
        .collect();
    for path in [
        "/".to_string(),
        format!("/lots/{enc}"),
        "/files".into(),
        "/alerts".into(),
    ] {
        let (st, _, body) = get(&v, &path, None).await;
        assert_eq!(st, StatusCode::OK, "{path}");
        assert!(
            !body.contains("<script>alert"),
            "{path} holds a live script tag"
        );
        assert!(
            !body.contains("\"onerror="),
            "{path} holds a raw attribute break"
        );
        if path != "/alerts" {
            assert!(
                body.contains("&lt;script&gt;alert"),
                "{path} does not show the name as text"
            );
        }
    }
    let (_, _, page) = get(&v, &format!("/lots/{enc}"), None).await;
    assert!(page.contains("B&lt;script&gt;alert(3)&lt;/script&gt;&quot;onerror=alert(4)"));
    assert!(page.contains("f&lt;script&gt;alert(5)&quot;onerror=x.csv : "));
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn with_a_token_requests_without_it_are_refused() {
    let (_tmp, cfg) = plant();
    let (v, _stop) = view(&cfg, Some("s3cret-token-value"));
    for path in ["/", "/api/lots", "/metrics", "/healthz", "/events"] {
        assert_eq!(
            get(&v, path, None).await.0,
            StatusCode::UNAUTHORIZED,
            "{path}"
        );
        assert_eq!(
            get(&v, path, Some("wrong")).await.0,
            StatusCode::UNAUTHORIZED,
            "{path}"
        );
    }
    for path in ["/", "/api/lots", "/metrics", "/healthz"] {
        assert_eq!(
            get(&v, path, Some("s3cret-token-value")).await.0,
            StatusCode::OK,
            "{path}"
        );
    }
}

fn write_config(dir: &Path, web: &str) -> PathBuf {
    let text = std::fs::read_to_string(demo_dir().join("plant/turnbook.toml"))
        .unwrap()
        .replace("listen = \"127.0.0.1:8470\"", web);
    let path = dir.join("plant/turnbook.toml");
    std::fs::write(&path, text).unwrap();
    path
}

#[test]
fn a_reachable_address_without_a_private_token_file_is_refused_at_start() {
    let (tmp, _cfg) = plant();
    let run = |cfg: &Path| {
        Command::new(common::turnbook_binary())
            .arg("--config")
            .arg(cfg)
            .arg("watch")
            .output()
            .unwrap()
    };
    let cfg = write_config(tmp.path(), "listen = \"0.0.0.0:0\"");
    let out = run(&cfg);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(
        err.contains("reachable from other machines") && err.contains("web.token_file"),
        "{err}"
    );
    let token = tmp.path().join("token");
    std::fs::write(&token, "abc-secret-987\n").unwrap();
    use std::os::unix::fs::PermissionsExt;
    std::fs::set_permissions(&token, std::fs::Permissions::from_mode(0o644)).unwrap();
    let cfg = write_config(
        tmp.path(),
        &format!(
            "listen = \"0.0.0.0:0\"\ntoken_file = \"{}\"",
            token.display()
        ),
    );
    let out = run(&cfg);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("can be read by other users"), "{err}");
    assert!(
        !err.contains("abc-secret-987"),
        "the token was shown: {err}"
    );
}

/// The metric families of a text exposition, checked strictly: every sample belongs to a
/// family declared by `# TYPE` before it, names and labels are well formed, values parse.
fn parse_metrics(text: &str) -> std::collections::BTreeMap<String, f64> {
    let mut types = std::collections::BTreeMap::new();
    let mut samples = std::collections::BTreeMap::new();
    let name_ok = |n: &str| {
        !n.is_empty()
            && n.chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == ':')
            && !n.starts_with(|c: char| c.is_ascii_digit())
    };
    for line in text.lines() {
        if let Some(rest) = line.strip_prefix("# TYPE ") {
            let (name, kind) = rest.split_once(' ').unwrap();
            assert!(name_ok(name), "bad family name {name}");
            assert!(["counter", "gauge", "histogram", "summary", "untyped"].contains(&kind));
            assert!(
                types.insert(name.to_string(), kind.to_string()).is_none(),
                "{name} twice"
            );
            continue;
        }
        if line.starts_with("# HELP ") || line.is_empty() {
            continue;
        }
        assert!(!line.starts_with('#'), "stray comment {line}");
        let (series, value) = line.rsplit_once(' ').unwrap();
        let v: f64 = match value {
            "+Inf" => f64::INFINITY,
            "-Inf" => f64::NEG_INFINITY,
            v => v.parse().unwrap_or_else(|_| panic!("bad value in {line}")),
        };
        let name = series.split('{').next().unwrap();
        assert!(name_ok(name), "bad sample name in {line}");
        if let Some(labels) = series.strip_prefix(name).filter(|l| !l.is_empty()) {
            assert!(labels.starts_with('{') && labels.ends_with('}'), "{line}");
            for pair in labels[1..labels.len() - 1].split("\",") {
                let (k, v) = pair.split_once("=\"").unwrap_or_else(|| panic!("{line}"));
                assert!(name_ok(k), "bad label in {line}");
                assert!(!v.trim_end_matches('"').contains('"'), "{line}");
            }
        }
        let family = ["_bucket", "_sum", "_count"]
            .iter()
            .find_map(|s| {
                name.strip_suffix(s)
                    .filter(|f| types.get(*f).is_some_and(|k| k == "histogram"))
            })
            .unwrap_or(name);
        assert!(
            types.contains_key(family),
            "sample {name} before its # TYPE"
        );
        samples.insert(series.to_string(), v);
    }
    samples
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn metrics_parse_and_move_when_a_file_lands() {
    let (_tmp, cfg) = plant();
    let (v, _stop) = view(&cfg, None);
    let _ = get(&v, "/", None).await;
    let (st, _, before) = get(&v, "/metrics", None).await;
    assert_eq!(st, StatusCode::OK);
    let b = parse_metrics(&before);
    assert!(b["turnbook_files_ingested_total"] > 0.0);
    assert_eq!(
        b["turnbook_http_requests_total{route=\"/\",status=\"200\"}"],
        1.0
    );
    assert_eq!(
        b["turnbook_http_request_duration_seconds_count{route=\"/\"}"],
        1.0
    );
    ingest(
        &cfg,
        "KV4-R-002.csv",
        &hplc_export("KV4-R-002", "RU-C-2612-D"),
    );
    ingest(
        &cfg,
        "KV4-R-002-copy.csv",
        &hplc_export("KV4-R-002", "RU-C-2612-D"),
    );
    let (_, _, after) = get(&v, "/metrics", None).await;
    let a = parse_metrics(&after);
    let moved = |k: &str| a[k] - b[k];
    assert_eq!(moved("turnbook_files_ingested_total"), 1.0);
    assert_eq!(moved("turnbook_files_duplicate_total"), 1.0);
    assert!(
        a["turnbook_last_ingest_timestamp_seconds"] >= b["turnbook_last_ingest_timestamp_seconds"]
    );
    let (st, _, health) = get(&v, "/healthz", None).await;
    assert_eq!(st, StatusCode::OK);
    let h: serde_json::Value = serde_json::from_str(&health).unwrap();
    assert_eq!(h["database"], "reachable");
    assert!(h["newest_ingest_age_seconds"].as_f64().unwrap() < 60.0);
    if let Some(py) = python_with_prometheus_client() {
        let out = Command::new(py)
            .args(["-c", "import sys\nfrom prometheus_client.parser import text_string_to_metric_families as p\nprint(len(list(p(sys.stdin.read()))))"])
            .stdin(std::process::Stdio::piped())
            .stdout(std::process::Stdio::piped())
            .spawn()
            .and_then(|mut c| {
                use std::io::Write as _;
                c.stdin.take().unwrap().write_all(after.as_bytes())?;
                c.wait_with_output()
            })
            .unwrap();
        assert!(
            out.status.success(),
            "prometheus_client refused the metrics"
        );
    }
}

fn python_with_prometheus_client() -> Option<&'static str> {
    let ok = Command::new("python3")
        .args(["-c", "import prometheus_client"])
        .status()
        .is_ok_and(|s| s.success());
    match ok {
        true => Some("python3"),
        false if std::env::var_os("CI").is_some() => {
            panic!("CI is set but python3 lacks prometheus_client (pip install prometheus_client)")
        }
        false => {
            eprintln!(
                "prometheus_client not installed: only the strict parser here checks /metrics"
            );
            None
        }
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn healthz_fails_when_the_watcher_stopped() {
    let (_tmp, cfg) = plant();
    let v = WebView::new(cfg, None, Arc::new(AtomicBool::new(false)));
    let (st, _, body) = get(&v, "/healthz", None).await;
    assert_eq!(st, StatusCode::SERVICE_UNAVAILABLE, "{body}");
    assert!(body.contains("\"watcher\":\"stopped\""));
}

/// Serve `v` on a loopback port; returns the address.
pub async fn serve(v: &WebView) -> std::net::SocketAddr {
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    let app = v.router();
    tokio::spawn(async move { axum::serve(listener, app).await });
    addr
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn events_announce_a_commit_within_two_seconds() {
    let (_tmp, cfg) = plant();
    let (v, stop) = view(&cfg, None);
    let addr = serve(&v).await;
    let mut s = tokio::net::TcpStream::connect(addr).await.unwrap();
    s.write_all(b"GET /events HTTP/1.1\r\nHost: x\r\nAccept: text/event-stream\r\n\r\n")
        .await
        .unwrap();
    let mut seen = String::new();
    let mut buf = [0u8; 4096];
    let n = s.read(&mut buf).await.unwrap();
    seen.push_str(&String::from_utf8_lossy(&buf[..n]));
    assert!(seen.contains("text/event-stream"), "{seen}");
    let c = cfg.clone();
    tokio::task::spawn_blocking(move || {
        ingest(
            &c,
            "KV4-R-003.csv",
            &hplc_export("KV4-R-003", "RU-C-2612-D"),
        )
    })
    .await
    .unwrap();
    let landed = Instant::now();
    while !seen.contains("event: change") {
        let left = Duration::from_secs(2).saturating_sub(landed.elapsed());
        assert!(!left.is_zero(), "no change event within 2 s: {seen}");
        if let Ok(Ok(n)) = tokio::time::timeout(left, s.read(&mut buf)).await {
            assert!(n > 0, "stream closed: {seen}");
            seen.push_str(&String::from_utf8_lossy(&buf[..n]));
        }
    }
    // Stopping the service ends the stream, so shutdown never waits on an open page.
    stop.send(true).unwrap();
    let ended = tokio::time::timeout(Duration::from_secs(3), async {
        loop {
            match s.read(&mut buf).await {
                Ok(0) | Err(_) => return,
                Ok(n) if String::from_utf8_lossy(&buf[..n]).contains("0\r\n\r\n") => return,
                Ok(_) => {}
            }
        }
    })
    .await;
    assert!(ended.is_ok(), "the event stream outlived the stop signal");
}

fn find_chromium() -> Option<PathBuf> {
    if let Some(p) = std::env::var_os("TURNBOOK_CHROMIUM") {
        return Some(PathBuf::from(p));
    }
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .flat_map(|d| ["chromium", "chromium-browser"].map(|n| d.join(n)))
        .find(|p| p.is_file())
}

/// Headless Chromium on `url` with a fresh profile; returns (stdout, stderr).
fn chromium(bin: &Path, url: &str, extra: &[String]) -> (String, String) {
    let profile = tempfile::tempdir().unwrap();
    let mut child = Command::new(bin)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--enable-logging=stderr",
            "--v=0",
            "--window-size=1300,1000",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .args(extra)
        .arg(url)
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let start = Instant::now();
    while child.try_wait().unwrap().is_none() {
        if start.elapsed() > Duration::from_secs(60) {
            let _ = child.kill();
            panic!("chromium did not finish within 60 s");
        }
        std::thread::sleep(Duration::from_millis(100));
    }
    let out = child.wait_with_output().unwrap();
    (
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// Pixels that are not white, and pixels in the sparkline's blue (31, 78, 140).
fn pixels(png_path: &Path) -> (usize, usize, usize) {
    let file = std::fs::File::open(png_path).unwrap();
    let mut decoder = png::Decoder::new(std::io::BufReader::new(file));
    decoder.set_transformations(png::Transformations::EXPAND | png::Transformations::STRIP_16);
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    let ch = info.color_type.samples();
    let (mut total, mut ink, mut blue) = (0, 0, 0);
    for px in buf[..info.buffer_size()].chunks_exact(ch) {
        let (r, g, b) = (i32::from(px[0]), i32::from(px[1]), i32::from(px[2]));
        total += 1;
        if r < 245 || g < 245 || b < 245 {
            ink += 1;
        }
        if (r - 31).abs() < 25 && (g - 78).abs() < 25 && (b - 140).abs() < 25 {
            blue += 1;
        }
    }
    (total, ink, blue)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_pages_render_in_headless_chromium_and_go_live() {
    let Some(bin) = find_chromium() else {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI is set but no chromium was found on PATH (apt-get install chromium)"
        );
        eprintln!("SKIPPED: chromium not found on PATH; install it to run this test");
        return;
    };
    let (_tmp, cfg) = plant();
    let (v, _stop) = view(&cfg, None);
    let addr = serve(&v).await;
    let shots = tempfile::tempdir().unwrap();
    let png = shots.path().join("lots.png");
    let (b, url, shot) = (bin.clone(), format!("http://{addr}/"), png.clone());
    let (dom, log) = tokio::task::spawn_blocking(move || {
        let (_, log) = chromium(
            &b,
            &url,
            &[
                format!("--screenshot={}", shot.display()),
                "--timeout=3000".into(),
            ],
        );
        let (dom, _) = chromium(&b, &url, &["--dump-dom".into(), "--timeout=3000".into()]);
        (dom, log)
    })
    .await
    .unwrap();
    assert!(
        dom.contains("PD-C-2611-A") && dom.contains("id=\"lots\""),
        "{dom}"
    );
    // The page's script ran under its security policy and opened the event stream.
    assert!(
        dom.contains("class=\"live on\"") || dom.contains("class=\"live wait\""),
        "the page's script did not run: {dom}"
    );
    let errors: Vec<&str> = log
        .lines()
        .filter(|l| {
            l.contains("Uncaught") || l.contains("CONSOLE") || l.contains("Content Security Policy")
        })
        .collect();
    assert!(errors.is_empty(), "the page logged errors: {errors:?}");
    let (total, ink, blue) = pixels(&png);
    assert!(
        ink * 50 > total,
        "the screenshot is nearly blank ({ink} of {total} pixels)"
    );
    assert!(
        blue > 30,
        "no sparkline or link colour in the screenshot ({blue} pixels)"
    );
    // Following a lot: its page renders with the chart.
    let (b, url) = (bin, format!("http://{addr}/lots/PD-C-2611-A"));
    let dom = tokio::task::spawn_blocking(move || {
        chromium(&b, &url, &["--dump-dom".into(), "--timeout=3000".into()]).0
    })
    .await
    .unwrap();
    assert!(
        dom.contains("id=\"activity-chart\"") && dom.contains("<svg"),
        "{dom}"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_kept_lots_page_gives_way_to_a_new_commit() {
    let (_tmp, cfg) = plant();
    let (v, stop) = view(&cfg, None);
    let addr = serve(&v).await;
    let fetch = |path: &'static str| async move {
        let mut s = tokio::net::TcpStream::connect(addr).await.unwrap();
        s.write_all(
            format!("GET {path} HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n").as_bytes(),
        )
        .await
        .unwrap();
        let mut out = Vec::new();
        s.read_to_end(&mut out).await.unwrap();
        String::from_utf8_lossy(&out).into_owned()
    };
    // Twice, so the second answer comes from the page kept for this generation.
    assert!(!fetch("/").await.contains("ZZ-NEW-LOT"));
    assert!(!fetch("/").await.contains("ZZ-NEW-LOT"));
    let c = cfg.clone();
    tokio::task::spawn_blocking(move || {
        ingest(&c, "KV4-Z-001.csv", &hplc_export("KV4-Z-001", "ZZ-NEW-LOT"))
    })
    .await
    .unwrap();
    let landed = Instant::now();
    loop {
        if fetch("/").await.contains("ZZ-NEW-LOT") {
            break;
        }
        assert!(
            landed.elapsed() < Duration::from_secs(3),
            "the lots page kept showing the plant as it was before the commit"
        );
        tokio::time::sleep(Duration::from_millis(100)).await;
    }
    stop.send(true).unwrap();
}
