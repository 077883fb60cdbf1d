//! The lot report opened in a real browser (headless Chromium): it must render (a
//! screenshot that is not blank and shows the chart's colours), its DOM must hold the
//! cycle table and the SVG chart, and the page must log no console errors.
//!
//! Without Chromium the test fails when `CI` is set and is skipped otherwise.

#[path = "report_fixture.rs"]
mod report_fixture;

use std::io::Read as _;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

use report_fixture::demo_lot;
use turnbook::report::{SiteLotLine, SiteReport, lot_html, site_html};

fn find_chromium() -> Option<PathBuf> {
    if let Some(p) = std::env::var_os("TURNBOOK_CHROMIUM") {
        return Some(PathBuf::from(p));
    }
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .flat_map(|d| ["chromium", "chromium-browser"].map(|n| d.join(n)))
        .find(|p| p.is_file())
}

fn chromium_or_skip() -> Option<PathBuf> {
    match find_chromium() {
        Some(p) => Some(p),
        None if std::env::var_os("CI").is_some() => {
            panic!("CI is set but no chromium was found on PATH (apt-get install chromium)")
        }
        None => {
            eprintln!("SKIPPED: chromium not found on PATH; install it to run this test");
            None
        }
    }
}

/// Run Chromium headless on a local file with a fresh profile, killing it after a minute.
fn run_chromium(bin: &Path, page: &Path, extra: &[String]) -> Output {
    let profile = tempfile::tempdir().unwrap();
    let mut cmd = Command::new(bin);
    cmd.args([
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
    ])
    .arg(format!("--user-data-dir={}", profile.path().display()))
    .args(extra)
    .arg(format!("file://{}", page.display()))
    .stdin(Stdio::null())
    .stdout(Stdio::piped())
    .stderr(Stdio::piped());
    let mut child = cmd.spawn().unwrap();
    // Drain both pipes while waiting: a DOM dump is larger than a pipe buffer, and a
    // browser blocked on a full pipe would never exit.
    let drain = |pipe: Option<Box<dyn std::io::Read + Send>>| {
        std::thread::spawn(move || {
            let mut buf = Vec::new();
            if let Some(mut p) = pipe {
                let _ = p.read_to_end(&mut buf);
            }
            buf
        })
    };
    let out_t = drain(child.stdout.take().map(|p| Box::new(p) as _));
    let err_t = drain(child.stderr.take().map(|p| Box::new(p) as _));
    let start = Instant::now();
    let status = loop {
        if let Some(st) = child.try_wait().unwrap() {
            break st;
        }
        if start.elapsed() > Duration::from_secs(90) {
            let _ = child.kill();
            let _ = child.wait();
            panic!("chromium did not finish within 90 s");
        }
        std::thread::sleep(Duration::from_millis(100));
    };
    Output {
        status,
        stdout: out_t.join().unwrap(),
        stderr: err_t.join().unwrap(),
    }
}

/// Lines of Chromium's log that report something the page itself did wrong.
fn page_errors(stderr: &str) -> Vec<String> {
    stderr
        .lines()
        .filter(|l| l.contains("Uncaught") || l.contains("CONSOLE") || l.contains(":CONSOLE("))
        .map(String::from)
        .collect()
}

struct Pixels {
    total: usize,
    non_white: usize,
    /// Pixels in the fitted curve's orange (RGB 200, 82, 0, allowing anti-aliasing).
    orange: usize,
    /// Pixels in the measured points' blue (RGB 31, 78, 140).
    blue: usize,
}

fn count_pixels(png_path: &Path) -> Pixels {
    let file = std::fs::File::open(png_path).unwrap();
    let mut decoder = png::Decoder::new(std::io::BufReader::new(file));
    decoder.set_transformations(png::Transformations::EXPAND | png::Transformations::STRIP_16);
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    let channels = info.color_type.samples();
    assert!(
        channels >= 3,
        "unexpected PNG colour type {:?}",
        info.color_type
    );
    let mut p = Pixels {
        total: 0,
        non_white: 0,
        orange: 0,
        blue: 0,
    };
    for px in buf[..info.buffer_size()].chunks_exact(channels) {
        let (r, g, b) = (i32::from(px[0]), i32::from(px[1]), i32::from(px[2]));
        p.total += 1;
        if r < 245 || g < 245 || b < 245 {
            p.non_white += 1;
        }
        if (r - 200).abs() < 30 && (g - 82).abs() < 30 && b < 40 {
            p.orange += 1;
        }
        if (r - 31).abs() < 25 && (g - 78).abs() < 25 && (b - 140).abs() < 25 {
            p.blue += 1;
        }
    }
    p
}

#[test]
fn lot_report_renders_in_headless_chromium() {
    let Some(bin) = chromium_or_skip() else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    // Control: a page that does log errors must be caught by the log scan, or the
    // "no console errors" checks below would prove nothing with this Chromium build.
    let control = dir.path().join("control.html");
    std::fs::write(
        &control,
        "<!DOCTYPE html><html><body><p>control</p><script>console.error('control-error');\
         throw new Error('control-throw')</script></body></html>",
    )
    .unwrap();
    let out = run_chromium(&bin, &control, &["--dump-dom".to_string()]);
    let caught = page_errors(&String::from_utf8_lossy(&out.stderr));
    assert!(
        caught.iter().any(|l| l.contains("control-error"))
            && caught.iter().any(|l| l.contains("Uncaught")),
        "the console-error scan missed the control page's errors: {caught:?}"
    );

    let page = dir.path().join("lot-report.html");
    let report = demo_lot("PD-DEMO-07", "hplc-line2", "unit typo: entered kg as g");
    std::fs::write(&page, lot_html(&report)).unwrap();
    let shot = dir.path().join("lot-report.png");

    let out = run_chromium(
        &bin,
        &page,
        &[
            format!("--screenshot={}", shot.display()),
            "--window-size=1280,2000".to_string(),
        ],
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        shot.is_file(),
        "no screenshot written; chromium said:\n{stderr}"
    );
    let errors = page_errors(&stderr);
    assert!(
        errors.is_empty(),
        "page logged errors:\n{}",
        errors.join("\n")
    );
    // For looking at the result by eye: keep the screenshot, and the page beside it.
    if let Ok(keep) = std::env::var("TURNBOOK_KEEP_SCREENSHOT") {
        std::fs::copy(&shot, &keep).unwrap();
        std::fs::copy(&page, format!("{keep}.html")).unwrap();
    }

    let px = count_pixels(&shot);
    assert_eq!(px.total, 1280 * 2000);
    let share = px.non_white as f64 / px.total as f64;
    eprintln!(
        "screenshot: {:.1} % non-white, {} orange (curve) and {} blue (points) pixels",
        share * 100.0,
        px.orange,
        px.blue
    );
    assert!(
        share > 0.05,
        "screenshot nearly blank: {:.2} % non-white",
        share * 100.0
    );
    assert!(
        px.orange > 500,
        "fitted curve not visible ({} px)",
        px.orange
    );
    assert!(
        px.blue > 300,
        "measured points not visible ({} px)",
        px.blue
    );

    let out = run_chromium(&bin, &page, &["--dump-dom".to_string()]);
    let dom = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        page_errors(&stderr).is_empty(),
        "page logged errors:\n{stderr}"
    );
    assert!(
        dom.contains("<table class=\"cycles\" id=\"cycle-table\">"),
        "no cycle table"
    );
    let cycle_rows = dom
        .split("id=\"cycle-table\"")
        .nth(1)
        .and_then(|t| t.split("</table>").next())
        .map_or(0, |t| t.matches("<tr>").count());
    assert_eq!(cycle_rows, 1 + 14, "header row and 14 cycles");
    let figure = dom
        .split("id=\"activity-chart\"")
        .nth(1)
        .and_then(|t| t.split("</figure>").next())
        .unwrap_or("");
    assert!(figure.contains("<svg"), "no SVG in the activity chart");
    assert!(figure.contains("<polygon"), "no confidence band");
    assert!(figure.contains("cycle number"), "no x axis label");
    assert!(dom.contains("id=\"ton-chart\""));
    assert!(dom.contains("pyrophoric"));
}

#[test]
fn site_overview_renders_in_headless_chromium() {
    let Some(bin) = chromium_or_skip() else {
        return;
    };
    let lots = (1..=4)
        .map(|i| SiteLotLine {
            lot: format!("PD-DEMO-{i:02}"),
            catalyst: "5 % Pd/C".to_string(),
            metal: "Pd".to_string(),
            state: if i == 4 { "retired" } else { "in service" }.to_string(),
            cycles: 6 + i,
            latest_activity: Some(1.0 - 0.08 * f64::from(i)),
            forecast: None,
            open_alerts: i % 2,
            activity_history: (0..6 + i)
                .map(|n| (-0.05 * f64::from(n * i)).exp())
                .collect(),
            threshold: Some(0.55),
        })
        .collect();
    let site = SiteReport {
        generated_at: "2031-04-02T09:15:00+02:00".to_string(),
        turnbook_version: env!("CARGO_PKG_VERSION").to_string(),
        site: "Demo plant".to_string(),
        lots,
        cautions: vec![],
    };
    let dir = tempfile::tempdir().unwrap();
    let page = dir.path().join("site.html");
    std::fs::write(&page, site_html(&site)).unwrap();
    let out = run_chromium(&bin, &page, &["--dump-dom".to_string()]);
    let dom = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        page_errors(&stderr).is_empty(),
        "page logged errors:\n{stderr}"
    );
    assert_eq!(dom.matches("<svg class=\"spark\"").count(), 4);
    assert_eq!(dom.matches("<polyline").count(), 4);
}
