//! report.html in a real browser: headless Chromium (Debian's package, installed by .ci/run)
//! loads the bundled demo's report.html (held equal to a fresh run by
//! `bundled_demo_report_is_up_to_date`), and a script added to a copy of the page checks, after
//! layout, that every section of report.md is a heading with an entry in the table of contents,
//! that every figure is an inline SVG with a non-empty drawn box, that every table has rows,
//! and that no script error or failed resource load happened. Chromium writes the page's DOM
//! with the result in an attribute; the test reads it back.

use super::support::repo;
use std::process::Command;

/// Chromium as `.ci/run` finds it: `chromium` or `chromium-browser` on the PATH.
fn chromium() -> Option<std::path::PathBuf> {
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .flat_map(|dir| ["chromium", "chromium-browser"].map(|n| dir.join(n)))
        .find(|p| p.is_file())
}

const CHECK: &str = r##"<script>
window.__errors = [];
window.addEventListener('error', function (e) { window.__errors.push(String(e.message || e.type)); }, true);
window.addEventListener('load', function () {
  var r = {};
  r.h2 = document.querySelectorAll('main h2, body h2').length;
  r.h3 = document.querySelectorAll('main h3, body h3').length;
  var nav = document.getElementById('contents');
  r.toc = nav ? nav.querySelectorAll('a[href^="#"]').length : 0;
  r.tocBroken = 0;
  if (nav) nav.querySelectorAll('a[href^="#"]').forEach(function (a) {
    if (!document.getElementById(a.getAttribute('href').slice(1))) r.tocBroken++;
  });
  var figs = document.querySelectorAll('figure');
  r.figures = figs.length;
  r.drawn = 0;
  figs.forEach(function (f) {
    var svg = f.querySelector('svg');
    if (!svg) return;
    var box = svg.getBoundingClientRect();
    var bb = svg.getBBox();
    if (box.width > 50 && box.height > 50 && bb.width > 0 && bb.height > 0 && svg.querySelectorAll('*').length > 5) r.drawn++;
  });
  r.missing = document.querySelectorAll('.missing-figure').length;
  var tables = document.querySelectorAll('table');
  r.tables = tables.length;
  r.emptyTables = 0;
  tables.forEach(function (t) { if (t.querySelectorAll('tbody tr').length === 0) r.emptyTables++; });
  r.errors = window.__errors;
  r.bodyHeight = document.body.scrollHeight;
  document.documentElement.setAttribute('data-check', JSON.stringify(r));
});
</script>"##;

#[test]
fn report_html_renders_in_a_headless_browser() {
    let Some(browser) = chromium() else {
        assert!(std::env::var_os("CI").is_none(), "Chromium is required in CI (.ci/run installs it)");
        eprintln!("chromium not installed: skipping the browser check of report.html");
        return;
    };
    let bundled = repo().join("validation-reports/demo/2015-2019");
    let md = std::fs::read_to_string(bundled.join("report.md")).unwrap();
    let html = std::fs::read_to_string(bundled.join("report.html")).unwrap();
    assert!(!html.contains("<script"), "the report itself carries no script");
    let dir = tempfile::tempdir().unwrap();
    let page = dir.path().join("report.html");
    let body_end = html.rfind("</body>").expect("a body");
    std::fs::write(&page, format!("{}{CHECK}{}", &html[..body_end], &html[body_end..])).unwrap();
    let profile = dir.path().join("profile");
    let out = Command::new(&browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--virtual-time-budget=10000",
            "--window-size=1200,900",
        ])
        .arg(format!("--user-data-dir={}", profile.display()))
        .arg("--dump-dom")
        .arg(format!("file://{}", page.display()))
        .output()
        .expect("chromium starts");
    let dom = String::from_utf8_lossy(&out.stdout);
    let start = dom.find("data-check=\"").unwrap_or_else(|| {
        panic!("no check result in the DOM; chromium stderr:\n{}", String::from_utf8_lossy(&out.stderr))
    }) + "data-check=\"".len();
    let end = start + dom[start..].find('"').unwrap();
    let json = dom[start..end].replace("&quot;", "\"").replace("&amp;", "&");
    let r: serde_json::Value = serde_json::from_str(&json).unwrap_or_else(|e| panic!("{e}: {json}"));
    println!("browser check of report.html: {r}");

    let count = |prefix: &str| md.lines().filter(|l| l.starts_with(prefix)).count() as u64;
    let (h2, h3, images) = (count("## "), count("### "), count("!["));
    let tables = md.lines().filter(|l| l.starts_with("| ---") || l.starts_with("| :--")).count() as u64;
    assert_eq!(r["h2"], h2, "every section is a heading");
    assert_eq!(r["h3"], h3, "every subsection is a heading");
    assert_eq!(r["toc"], h2 + h3, "every heading has a contents entry");
    assert_eq!(r["tocBroken"], 0, "every contents entry points at a heading");
    assert_eq!(r["figures"], images, "every figure of report.md is on the page");
    assert_eq!(r["drawn"], images, "every figure is drawn with a non-empty box");
    assert_eq!(r["missing"], 0);
    assert_eq!(r["tables"], tables, "every table of report.md is on the page");
    assert_eq!(r["emptyTables"], 0);
    assert_eq!(r["errors"].as_array().map(|a| a.len()), Some(0), "errors: {}", r["errors"]);
    assert!(r["bodyHeight"].as_u64().unwrap_or(0) > 10_000, "the page lays out its content");

    // And it prints: the unmodified page to PDF with the print styles (A4), many pages.
    let pdf = dir.path().join("report.pdf");
    let status = Command::new(&browser)
        .args(["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run"])
        .args(["--disable-background-networking", "--disable-component-update", "--disable-sync"])
        .arg("--no-pdf-header-footer")
        .arg(format!("--user-data-dir={}", profile.display()))
        .arg(format!("--print-to-pdf={}", pdf.display()))
        .arg(format!("file://{}", bundled.join("report.html").display()))
        .output()
        .expect("chromium starts");
    let bytes = std::fs::read(&pdf).unwrap_or_else(|_| panic!("no PDF: {}", String::from_utf8_lossy(&status.stderr)));
    assert!(bytes.starts_with(b"%PDF"), "not a PDF");
    // Page objects: "/Type /Page" not followed by "s" (that is the page tree).
    let pages = bytes.windows(12).filter(|w| &w[..11] == b"/Type /Page" && w[11] != b's').count();
    println!("report.html printed to PDF: {} bytes, {pages} pages", bytes.len());
    assert!(pages >= 10, "{pages} pages");
}
