#![allow(clippy::unwrap_used, clippy::expect_used)]
//! A real browser renders the demo report: headless Chromium takes a
//! screenshot, prints the page to PDF with its print stylesheet, and dumps the
//! DOM it built. The DOM must hold every section and chart of the page, and
//! Chromium's log must show that the page loaded without an error, a failed
//! load or a Content-Security-Policy violation. The page declares a CSP that
//! forbids every load, so anything it tried to fetch would show up here.
//!
//! The browser is `$RESTVOLT_BROWSER`, else `chromium` or `chromium-browser`
//! on the `PATH`. Without one the test says so on stderr and passes, unless
//! `RESTVOLT_REQUIRE_BROWSER=1` (as `.ci/run` sets), when it fails.
//! DEVELOPERS.md § Browser test has the command line.

mod common;
use common::{restvolt, tmp};
use scraper::{ElementRef, Html, Selector};
use serde_json::Value;
use std::collections::BTreeSet;
use std::fs::File;
use std::io::Write as _;
use std::os::unix::process::CommandExt;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// A browser that has not finished by then is killed and the test fails.
const TIMEOUT: Duration = Duration::from_secs(60);

/// Flags of every run. Headless as root needs `--no-sandbox`; there is no GPU.
/// The build machines have no network, so everything that would phone out at
/// start-up is off. `--enable-logging=stderr --v=0` writes page console
/// messages (CSP violations among them) and errors to stderr.
const FLAGS: &[&str] = &[
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--enable-logging=stderr",
    "--v=0",
];

/// Chromium's own ERROR lines that say nothing about the page, by the source
/// path in the log prefix (`[pid:tid:time:ERROR:dbus/bus.cc:405] …`):
/// - `dbus/`, `device/bluetooth/`, `ui/base/idle/`: build machines and
///   containers have no D-Bus system or session bus; Chromium asks it for
///   power, screensaver and Bluetooth state at start-up.
/// - `gpu/`, `media/gpu/`, `ui/gl/`, `ui/ozone/`, `components/viz/`: no GPU
///   and no DRM device (and `--disable-gpu`); the software path renders.
/// - `sandbox/`: running as root with `--no-sandbox`.
///
/// Only ERROR and FATAL lines are judged; warnings and information lines fail
/// the test only when they concern the page (see [`page_problems`]).
const BENIGN_SOURCES: &[&str] = &[
    "dbus/",
    "device/bluetooth/",
    "ui/base/idle/",
    "gpu/",
    "media/gpu/",
    "ui/gl/",
    "ui/ozone/",
    "components/viz/",
    "sandbox/",
];

/// The browser to use, or None (after saying why) when the test should be skipped.
fn browser() -> Option<PathBuf> {
    let required = std::env::var("RESTVOLT_REQUIRE_BROWSER").is_ok_and(|v| v == "1");
    let found = match std::env::var_os("RESTVOLT_BROWSER") {
        Some(p) => Some(PathBuf::from(p)).filter(|p| p.is_file()),
        None => ["chromium", "chromium-browser"].iter().find_map(|name| {
            std::env::split_paths(&std::env::var_os("PATH").unwrap_or_default())
                .map(|dir| dir.join(name))
                .find(|p| p.is_file())
        }),
    };
    if found.is_none() {
        assert!(
            !required,
            "RESTVOLT_REQUIRE_BROWSER=1 but no browser found: set RESTVOLT_BROWSER to chromium's \
             path (now {:?}) or install Debian's chromium package",
            std::env::var_os("RESTVOLT_BROWSER")
        );
        // Straight to stderr: the test harness captures eprintln! of passing tests.
        let _ = writeln!(
            std::io::stderr(),
            "skipped: chromium not found (set RESTVOLT_BROWSER)"
        );
    }
    found
}

/// One browser run: `extra` flags on `url`, with a fresh profile directory
/// `dir/name-profile`. Returns standard output and standard error.
fn run_browser(
    exe: &Path,
    dir: &Path,
    name: &str,
    extra: &[String],
    url: &str,
) -> (String, String) {
    let profile = dir.join(format!("{name}-profile"));
    let (out_path, err_path) = (
        dir.join(format!("{name}.out")),
        dir.join(format!("{name}.err")),
    );
    // Output goes to files, not pipes: a helper process that outlives the
    // browser would otherwise hold a pipe open and hang the reader.
    let mut child = Command::new(exe)
        .args(FLAGS)
        .arg(format!("--user-data-dir={}", profile.display()))
        .args(extra)
        .arg(url)
        .stdin(Stdio::null())
        .stdout(File::create(&out_path).unwrap())
        .stderr(File::create(&err_path).unwrap())
        // Its own process group, so a hung browser goes with all its helpers.
        .process_group(0)
        .spawn()
        .unwrap_or_else(|e| panic!("starting {}: {e}", exe.display()));
    let start = Instant::now();
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        if start.elapsed() > TIMEOUT {
            // The child is not yet reaped, so its group id is still ours.
            let _ = Command::new("kill")
                .args(["-KILL", "--", &format!("-{}", child.id())])
                .status();
            let _ = child.kill();
            let _ = child.wait();
            panic!(
                "{} {name} did not finish within {TIMEOUT:?}; stderr:\n{}",
                exe.display(),
                std::fs::read_to_string(&err_path).unwrap_or_default()
            );
        }
        std::thread::sleep(Duration::from_millis(50));
    };
    let stdout = std::fs::read_to_string(&out_path).unwrap();
    let stderr = std::fs::read_to_string(&err_path).unwrap();
    assert!(
        status.success(),
        "{name}: browser exited with {status}; stderr:\n{stderr}"
    );
    (stdout, stderr)
}

/// Log lines that say the page did not load cleanly. The page runs no script,
/// so any console message at all is the browser reporting on the page (a CSP
/// violation, a blocked or failed load, a parse problem).
fn page_problems(stderr: &str) -> Vec<&str> {
    stderr
        .lines()
        .filter(|line| {
            if line.contains(":CONSOLE")
                || line.contains("net::ERR_")
                || line.contains("Content Security Policy")
                || line.contains("Content-Security-Policy")
            {
                return true;
            }
            // "[pid:tid:time:LEVEL:source/path.cc:line] message"
            let Some(head) = line.strip_prefix('[').and_then(|l| l.split(']').next()) else {
                return false;
            };
            let mut fields = head.splitn(5, ':');
            let level = fields.nth(3).unwrap_or_default();
            let source = fields.next().unwrap_or_default();
            matches!(level, "ERROR" | "FATAL")
                && !BENIGN_SOURCES.iter().any(|b| source.starts_with(b))
        })
        .collect()
}

fn assert_clean(name: &str, stderr: &str) {
    let bad = page_problems(stderr);
    assert!(
        bad.is_empty(),
        "{name}: the browser reported problems with the page:\n{}\n\nfull stderr:\n{stderr}",
        bad.join("\n")
    );
}

fn file_url(p: &Path) -> String {
    format!("file://{}", p.canonicalize().unwrap().display())
}

fn sel(s: &str) -> Selector {
    Selector::parse(s).unwrap()
}

fn text(e: ElementRef) -> String {
    e.text().collect::<String>().trim().to_string()
}

fn texts(root: ElementRef, selector: &str) -> Vec<String> {
    root.select(&sel(selector)).map(text).collect()
}

/// Width and height from a PNG's IHDR chunk, after checking the signature
/// (PNG specification, W3C / ISO/IEC 15948, published: the 8-byte signature,
/// then IHDR as the first chunk with big-endian width and height).
fn png_size(png: &[u8]) -> (u32, u32) {
    assert!(png.len() > 33, "PNG of {} bytes", png.len());
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n", "PNG signature");
    assert_eq!(
        &png[8..16],
        b"\x00\x00\x00\x0dIHDR",
        "IHDR first, 13 bytes long"
    );
    let be = |i: usize| u32::from_be_bytes(png[i..i + 4].try_into().unwrap());
    (be(16), be(20))
}

/// The demo report as HTML in `dir`, and the same report as JSON (what the
/// page is checked against).
fn demo(dir: &Path) -> (PathBuf, Value) {
    let html = dir.join("demo-report.html");
    let out = restvolt()
        .current_dir(dir)
        .args(["demo", "--format", "json", "--html"])
        .arg(&html)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    (html, serde_json::from_slice(&out.stdout).unwrap())
}

#[test]
fn demo_report_renders_in_a_real_browser() {
    let Some(exe) = browser() else { return };
    let dir = tmp();
    let (html, report) = demo(dir.path());
    let url = file_url(&html);

    // Screen and print in one run, the DOM in another.
    let shot = dir.path().join("demo-report.png");
    let pdf = dir.path().join("demo-report.pdf");
    let (_, err) = run_browser(
        &exe,
        dir.path(),
        "render",
        &[
            "--hide-scrollbars".into(),
            "--window-size=1280,4000".into(),
            format!("--screenshot={}", shot.display()),
            "--no-pdf-header-footer".into(),
            format!("--print-to-pdf={}", pdf.display()),
        ],
        &url,
    );
    assert_clean("screenshot and PDF", &err);
    let (dom, err) = run_browser(&exe, dir.path(), "dom", &["--dump-dom".into()], &url);
    assert_clean("DOM dump", &err);

    let png = std::fs::read(&shot).unwrap();
    assert_eq!(
        png_size(&png),
        (1280, 4000),
        "screenshot size = window size"
    );
    // Measured with this Chromium: a blank page at this size is 23 kB, the demo
    // report 700 kB; a page that failed to render is near the former.
    assert!(
        png.len() > 200_000,
        "screenshot of {} bytes looks blank",
        png.len()
    );

    // A4 is 210 × 297 mm (ISO 216, published) = 595.3 × 841.9 pt at 72 pt per
    // inch (derived); Chromium's default paper is US Letter (612 × 792 pt), so
    // this shows the print stylesheet's `@page { size: A4 }` took effect.
    let pdf = std::fs::read(&pdf).unwrap();
    assert!(pdf.starts_with(b"%PDF-"), "not a PDF");
    let pdf = String::from_utf8_lossy(&pdf);
    let boxes: Vec<&str> = pdf
        .match_indices("/MediaBox")
        .map(|(i, _)| &pdf[i..])
        .collect();
    assert!(boxes.len() >= 2, "the report should print on several pages");
    for b in boxes {
        let nums: Vec<f64> = b[b.find('[').unwrap() + 1..b.find(']').unwrap()]
            .split_whitespace()
            .map(|n| n.parse().unwrap())
            .collect();
        assert!(
            (nums[2] - 595.3).abs() < 1.0 && (nums[3] - 841.9).abs() < 1.0,
            "page is not A4: {nums:?}"
        );
    }

    check_dom(&dom, &report);
}

/// Every section and chart is in the DOM the browser built, with the numbers
/// of the JSON report.
fn check_dom(dom: &str, report: &Value) {
    assert!(dom.trim_end().ends_with("</html>"), "DOM dump incomplete");
    let doc = Html::parse_document(dom);
    let root = doc.root_element();
    let csp = root
        .select(&sel("meta[http-equiv=\"Content-Security-Policy\"]"))
        .next()
        .and_then(|m| m.value().attr("content"))
        .unwrap_or_default();
    assert!(csp.starts_with("default-src 'none'"), "CSP: {csp:?}");

    // Sections in this order, each with its heading (other sections may sit between).
    let want = [
        ("header", "Fleet report: "),
        ("summary", "Summary"),
        ("actions", "Units needing action"),
        ("charts", "Charts"),
        ("data-quality", "Data quality"),
        ("cautions", "Cautions"),
        ("how-to-read", "How to read this"),
    ];
    let ids: Vec<&str> = root
        .select(&sel("section[id]"))
        .filter_map(|s| s.value().attr("id"))
        .collect();
    let mut at = 0;
    for (id, heading) in want {
        let pos = ids[at..]
            .iter()
            .position(|i| *i == id)
            .unwrap_or_else(|| panic!("section {id} missing or out of order in {ids:?}"));
        at += pos + 1;
        let s = root.select(&sel(&format!("section#{id}"))).next().unwrap();
        let h = s
            .select(&sel("h1, h2"))
            .next()
            .map(text)
            .unwrap_or_default();
        assert!(h.starts_with(heading), "section {id} heading {h:?}");
    }
    let section = |id: &str| root.select(&sel(&format!("section#{id}"))).next().unwrap();
    let summary = &report["summary"];
    let units: Vec<&Value> = report["units"].as_array().unwrap().iter().collect();

    // Header: the period covered.
    let period = summary["period"].as_array().unwrap();
    let facts = texts(section("header"), "dl.facts dd");
    let want_period = format!(
        "{} to {}",
        period[0].as_str().unwrap(),
        period[1].as_str().unwrap()
    );
    assert_eq!(facts[0], want_period);

    // Summary: one row per action present with its count, and the total.
    let s = section("summary");
    let rows: Vec<Vec<String>> = s
        .select(&sel("table:first-of-type tbody tr"))
        .map(|r| texts(r, "td"))
        .collect();
    let by_action = summary["by_action"].as_object().unwrap();
    assert_eq!(rows.len(), by_action.len(), "{rows:?}");
    for r in &rows {
        assert_eq!(r[1], by_action[&r[0]].to_string(), "count of {}", r[0]);
    }
    let total = texts(s, "table:first-of-type tfoot th");
    assert_eq!(total[1], summary["units"].to_string());

    // Ranked units: every unit needing action, in rank order, its action in words.
    let needing: Vec<&Value> = units
        .iter()
        .copied()
        .filter(|u| u["action"] != "serviceable")
        .collect();
    let titles = texts(section("actions"), "article.unit h3");
    assert_eq!(titles.len(), needing.len(), "{titles:?}");
    for (t, u) in titles.iter().zip(&needing) {
        let (id, action) = (
            u["unit_id"].as_str().unwrap(),
            u["action"].as_str().unwrap(),
        );
        assert!(
            t.contains(id) && t.contains(action),
            "{t:?} for {id} ({action})"
        );
    }

    // Charts: each an <svg role="img"> whose first children are a non-empty
    // <title> and <desc>, named by aria-labelledby.
    let charts = section("charts");
    let mut by_kind: std::collections::BTreeMap<String, Vec<String>> = Default::default();
    for svg in charts.select(&sel("svg")) {
        let v = svg.value();
        assert_eq!(v.attr("role"), Some("img"));
        let kids: Vec<ElementRef> = svg.children().filter_map(ElementRef::wrap).collect();
        assert_eq!(kids[0].value().name(), "title");
        assert_eq!(kids[1].value().name(), "desc");
        let (title, desc) = (text(kids[0]), text(kids[1]));
        assert!(
            !title.is_empty() && !desc.is_empty(),
            "chart without text alternative"
        );
        for id in v
            .attr("aria-labelledby")
            .unwrap_or_default()
            .split_whitespace()
        {
            assert!(
                root.select(&sel(&format!("#{id}"))).next().is_some(),
                "{id} missing"
            );
        }
        let kind = v.classes().find(|c| *c != "rv-chart").unwrap_or_default();
        by_kind.entry(kind.to_string()).or_default().push(title);
    }
    let titles_of = |kind: &str| by_kind.get(kind).cloned().unwrap_or_default();
    assert_eq!(
        titles_of("grouped-bars"),
        ["Units by state of charge, per site"]
    );

    let strings: BTreeSet<(String, String)> = units
        .iter()
        .filter_map(|u| {
            Some((
                u["site"].as_str()?.to_string(),
                u["string"].as_str()?.to_string(),
            ))
        })
        .collect();
    assert!(!strings.is_empty(), "the demo fleet has series strings");
    let want: Vec<String> = strings
        .iter()
        .map(|(site, st)| format!("String {st} at {site}: rest voltage per cell"))
        .collect();
    assert_eq!(titles_of("string-strip"), want);

    // A unit needing action has its chart, or is named as having no rested history.
    let history = titles_of("band-series");
    let notes = texts(charts, "p.note").join(" ");
    for u in &needing {
        let id = u["unit_id"].as_str().unwrap();
        let title = format!("State of charge over time: {id}");
        assert!(
            history.contains(&title) || notes.contains(id),
            "no history chart for {id}"
        );
    }
    assert!(!history.is_empty());

    let want: Vec<String> = summary["profiles"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| {
            format!(
                "Temperature against state of charge: {}",
                p.as_str().unwrap()
            )
        })
        .collect();
    let mut got = titles_of("scatter-curve");
    got.sort();
    assert_eq!(got, want, "one freezing-point chart per profile");

    // Data quality: the counts and every kept rejected row.
    let dq = section("data-quality");
    let facts = texts(dq, "dl.facts dd");
    assert_eq!(facts[0], summary["rows_read"].to_string());
    assert_eq!(facts[2], summary["rows_rejected"].to_string());
    let rejected = report["rejected"].as_array().unwrap();
    assert_eq!(dq.select(&sel("tbody tr")).count(), rejected.len());

    // Cautions end with who decides; how to read explains the intervals.
    let cautions = texts(section("cautions"), ".caution h3");
    assert_eq!(
        cautions.last().map(String::as_str),
        Some("Who decides"),
        "{cautions:?}"
    );
    assert!(text(section("how-to-read")).contains("95 % interval"));
}

/// The log check can fail: a page that breaks its own CSP, and one that does
/// not exist, are both reported. Without this a Chromium that stopped logging
/// such things would let every page pass.
#[test]
fn browser_log_check_catches_a_broken_page() {
    let Some(exe) = browser() else { return };
    let dir = tmp();
    let bad = dir.path().join("bad.html");
    std::fs::write(
        &bad,
        "<!DOCTYPE html><html><head><meta charset=\"utf-8\">\
         <meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; style-src 'unsafe-inline'; img-src data:\">\
         <title>bad</title></head><body><img src=\"missing.png\" alt=\"\"></body></html>",
    )
    .unwrap();
    let (_, err) = run_browser(
        &exe,
        dir.path(),
        "bad",
        &["--dump-dom".into()],
        &file_url(&bad),
    );
    let bad_lines = page_problems(&err);
    assert!(
        bad_lines.iter().any(|l| l.contains("missing.png")),
        "blocked load not reported; stderr:\n{err}"
    );
    let gone = format!("{}/absent.html", file_url(dir.path()));
    let (_, err) = run_browser(&exe, dir.path(), "absent", &["--dump-dom".into()], &gone);
    assert!(
        page_problems(&err)
            .iter()
            .any(|l| l.contains("net::ERR_FILE_NOT_FOUND")),
        "failed page load not reported; stderr:\n{err}"
    );
}

/// The classifier on lines as this Chromium writes them (no browser needed).
#[test]
fn log_lines_are_classified() {
    let log = "\
/usr/bin/chromium: 9: [: 25275990016: unexpected operator
[1:2:1201/175240.198438:ERROR:dbus/bus.cc:405] Failed to connect to the bus: no socket
[1:1:1201/175240.334864:WARNING:media/gpu/vaapi/vaapi_wrapper.cc:1655] drmGetDevices2() has not found any devices
[1:1:1201/175240.380980:ERROR:dbus/object_proxy.cc:572] Failed to call method
[1:1:1201/175420.735928:INFO:CONSOLE:6] \"Loading the image 'https://example.invalid/x.png' violates the following Content Security Policy directive\", source: file:///tmp/bad.html (6)
[1:1:1201/175428.0:ERROR:components/headless/command_handler/headless_command_handler.cc:403] Page load failed: net::ERR_FILE_NOT_FOUND
[1:1:1201/175428.0:ERROR:chrome/browser/something_new.cc:1] an error we do not know
";
    let bad = page_problems(log);
    assert_eq!(bad.len(), 3, "{bad:#?}");
    assert!(bad[0].contains("CONSOLE"));
    assert!(bad[1].contains("Page load failed"));
    assert!(bad[2].contains("something_new"));
}
