//! The demo reports in a real browser: rendered by headless Chromium at
//! 1280 px and at the printable width of an A4 page with the print rules
//! in force, nothing may overflow horizontally (no sideways scrolling, no
//! column cut off in print).
//!
//! The report itself carries no script; the measuring script is injected
//! into a copy. It records the page's scroll width against the viewport,
//! every HTML element whose box reaches beyond the viewport, and every
//! HTML element whose content is wider than its box, into the DOM, which
//! `chromium --dump-dom` prints.
//!
//! Chromium is Debian's `chromium` package. When it is missing and the
//! test runs as root on a system with apt-get, it is installed; otherwise
//! the test is skipped with a message (with `CI=true` it fails instead).

use std::path::{Path, PathBuf};
use std::process::Command;

use fitaudit::diagnostics::NoProgress;

/// Width of the printable area of an A4 page at the browser's 96 px per
/// inch: 210 mm less Chromium's default margins of 0.4 in (10.16 mm) on
/// each side, 189.7 mm = 717 px (ISO 216: A4 is 210 mm x 297 mm).
const A4_PRINTABLE_PX: u32 = 717;

const PROBE: &str = r#"<script>
(function () {
  var vw = document.documentElement.clientWidth, bad = [];
  var all = document.querySelectorAll('body *');
  var html = 'http://www.w3.org/1999/xhtml';
  for (var i = 0; i < all.length; i++) {
    var e = all[i];
    if (e.namespaceURI !== html) continue;
    var r = e.getBoundingClientRect();
    if (r.width > 0 && r.right > vw + 1) bad.push(e.tagName + (e.id ? '#' + e.id : '') + ' right ' + Math.round(r.right));
    if (e.clientWidth > 0 && e.scrollWidth > e.clientWidth + 1) bad.push(e.tagName + (e.id ? '#' + e.id : '') + ' content ' + e.scrollWidth + ' > box ' + e.clientWidth);
  }
  var p = document.createElement('pre');
  p.id = 'layout-result';
  p.textContent = ['LAYOUT', document.documentElement.scrollWidth, vw, bad.length].join(':') + ':' + bad.slice(0, 12).join(' ; ') + ':END';
  document.body.appendChild(p);
})();
</script>"#;

fn chromium() -> Option<PathBuf> {
    let find = || {
        ["chromium", "chromium-browser"]
            .iter()
            .filter_map(|name| {
                let out = Command::new("sh")
                    .arg("-c")
                    .arg(format!("command -v {name}"))
                    .output()
                    .ok()?;
                let path = String::from_utf8_lossy(&out.stdout).trim().to_string();
                (!path.is_empty()).then(|| PathBuf::from(path))
            })
            .next()
    };
    if let Some(p) = find() {
        return Some(p);
    }
    let root = Command::new("id")
        .arg("-u")
        .output()
        .map(|o| String::from_utf8_lossy(&o.stdout).trim() == "0")
        .unwrap_or(false);
    if root && Path::new("/usr/bin/apt-get").exists() {
        eprintln!("browser_layout: chromium missing, installing Debian's package");
        let _ = Command::new("apt-get")
            .args(["install", "-y", "chromium"])
            .status();
    }
    find()
}

/// (page scroll width, viewport width, offending elements) of `html`
/// rendered `width` px wide.
fn measure(browser: &Path, html: &str, width: u32, dir: &Path, name: &str) -> (u32, u32, Vec<String>) {
    let file = dir.join(format!("{name}.html"));
    assert!(html.contains("</body>"));
    std::fs::write(&file, html.replacen("</body>", &format!("{PROBE}</body>"), 1)).unwrap();
    let out = Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            &format!("--window-size={width},1000"),
            "--dump-dom",
        ])
        .arg(format!("file://{}", file.display()))
        .output()
        .expect("chromium runs");
    let dom = String::from_utf8_lossy(&out.stdout);
    let at = dom.find("LAYOUT:").unwrap_or_else(|| {
        panic!(
            "{name}: no measurement in the DOM; stderr: {}",
            String::from_utf8_lossy(&out.stderr)
        )
    });
    let rest = &dom[at + "LAYOUT:".len()..];
    let rest = &rest[..rest.find(":END").expect("end mark")];
    let mut parts = rest.splitn(4, ':');
    let page: u32 = parts.next().unwrap().parse().unwrap();
    let viewport: u32 = parts.next().unwrap().parse().unwrap();
    let count: usize = parts.next().unwrap().parse().unwrap();
    let list: Vec<String> = parts
        .next()
        .unwrap_or("")
        .split(" ; ")
        .filter(|s| !s.is_empty())
        .map(str::to_string)
        .collect();
    assert_eq!(count == 0, list.is_empty(), "{name}");
    (page, viewport, list)
}

#[test]
fn demo_reports_fit_1280_px_and_a4_print_without_horizontal_overflow() {
    let Some(browser) = chromium() else {
        let msg = "browser_layout: skipped, no chromium (install Debian's `chromium` package to run it)";
        assert!(std::env::var("CI").as_deref() != Ok("true"), "{msg}");
        eprintln!("{msg}");
        return;
    };
    let work = tempfile::tempdir().unwrap();
    let out = work.path().join("demo");
    let summary = fitaudit::demo::run_all(&out, "fitaudit demo", &NoProgress).unwrap();
    let mut checked = 0;
    for entry in std::fs::read_dir(&out).unwrap() {
        let dir = entry.unwrap().path();
        let report = dir.join("report.html");
        if !report.is_file() {
            continue;
        }
        let name = dir.file_name().unwrap().to_string_lossy().to_string();
        let html = std::fs::read_to_string(&report).unwrap();
        // The report as written carries no script.
        assert!(!html.contains("<script"), "{name}");

        let (page, viewport, bad) = measure(&browser, &html, 1280, work.path(), &format!("{name}-screen"));
        eprintln!("{name} at 1280 px: page {page} px, viewport {viewport} px, overflowing {bad:?}");
        assert_eq!(viewport, 1280, "{name}");
        assert!(
            page <= viewport,
            "{name}: the page scrolls sideways ({page} > {viewport} px)"
        );
        assert!(bad.is_empty(), "{name} at 1280 px: {bad:?}");

        // A4: the print rules applied on screen at the printable width.
        let print = html.replace("@media print", "@media all");
        assert_ne!(print, html, "{name}: the report has print rules");
        let (page, viewport, bad) = measure(
            &browser,
            &print,
            A4_PRINTABLE_PX,
            work.path(),
            &format!("{name}-a4"),
        );
        eprintln!("{name} at A4 ({A4_PRINTABLE_PX} px): page {page} px, overflowing {bad:?}");
        assert!(
            page <= viewport,
            "{name}: A4 print cuts columns ({page} > {viewport} px)"
        );
        assert!(bad.is_empty(), "{name} on A4: {bad:?}");
        checked += 1;
    }
    assert_eq!(checked, summary.scenarios.len(), "every demo report was measured");
    assert!(checked >= 3);
}
