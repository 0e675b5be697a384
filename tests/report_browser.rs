//! `report.html` in a real browser: headless Chromium (Debian's `chromium` package) loads a run's
//! page inside a 360-px frame, the width of a small phone, and a probe page measures it. The test
//! skips, saying so, where no Chromium is installed (CI machines have none by default:
//! `apt-get install chromium` to run it).

use std::path::{Path, PathBuf};
use std::process::Command;

use crate::common::{run_ok, WorkDir};

/// The Chromium binary, if one is installed.
fn chromium() -> Option<PathBuf> {
    ["/usr/bin/chromium", "/usr/bin/chromium-browser"]
        .iter()
        .map(PathBuf::from)
        .find(|p| p.exists())
}

/// Loads `page` headless and returns (the DOM after the page ran, Chromium's stderr).
fn load(browser: &Path, page: &Path, profile_dir: &Path) -> (String, String) {
    let out = Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--allow-file-access-from-files",
            "--enable-logging=stderr",
            "--v=0",
            "--virtual-time-budget=10000",
            "--dump-dom",
        ])
        .arg(format!("--user-data-dir={}", profile_dir.display()))
        .arg(format!("file://{}", page.display()))
        .output()
        .expect("start chromium");
    (
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// A probe page: the report in a 360-px frame; once it has loaded, the frame's measurements are
/// written into the probe's own DOM as JSON (the report itself carries no script).
const PROBE: &str = r#"<!doctype html><html><body>
<iframe id="f" src="report.html" style="width:360px;height:2000px;border:0"></iframe>
<pre id="out">not loaded</pre>
<script>
document.getElementById('f').onload = function () {
  var d = this.contentDocument, r = {};
  r.scrollWidth = d.documentElement.scrollWidth;
  r.clientWidth = d.documentElement.clientWidth;
  r.svgs = Array.prototype.map.call(d.querySelectorAll('figure svg'), function (s) {
    var b = s.getBoundingClientRect(); return [b.width, b.height];
  });
  r.tables = Array.prototype.map.call(d.querySelectorAll('table'), function (t) {
    var b = t.parentElement.getBoundingClientRect(); return [b.width, t.rows.length];
  });
  r.title = d.title;
  r.verdict = (d.querySelector('.verdict') || {}).textContent || '';
  r.scripts = d.querySelectorAll('script').length;
  document.getElementById('out').textContent = JSON.stringify(r);
};
</script></body></html>"#;

#[test]
fn the_run_report_renders_in_a_browser_at_phone_width() {
    let Some(browser) = chromium() else {
        eprintln!(
            "skipped: no Chromium at /usr/bin/chromium (install Debian's `chromium` package to run \
             the browser test)"
        );
        return;
    };
    let wd = WorkDir::new();
    run_ok(&wd, &["run", "--duration", "120", "--out", "r"]);
    let dir = wd.path("r");
    std::fs::write(dir.join("probe.html"), PROBE).expect("probe page");
    let (dom, log) = load(
        &browser,
        &dir.join("probe.html"),
        &wd.path("chromium-profile"),
    );

    // No console error and no failed load, from the page or its frame.
    for line in log.lines() {
        let l = line.to_lowercase();
        assert!(
            !(l.contains(":console") && (l.contains("error") || l.contains("uncaught")))
                && !l.contains("failed to load resource")
                && !l.contains("net::err_"),
            "browser log: {line}"
        );
    }
    let json = dom
        .split("<pre id=\"out\">")
        .nth(1)
        .and_then(|s| s.split("</pre>").next())
        .unwrap_or_else(|| panic!("probe output missing from the DOM:\n{dom}"));
    let r: serde_json::Value = serde_json::from_str(&json.replace("&quot;", "\""))
        .unwrap_or_else(|e| panic!("probe output {json}: {e}"));
    // One column at phone width: nothing wider than the frame.
    let (sw, cw) = (
        r["scrollWidth"].as_f64().unwrap(),
        r["clientWidth"].as_f64().unwrap(),
    );
    assert!(
        cw > 300.0 && sw <= cw,
        "page {sw} px wide in a {cw}-px frame"
    );
    // The chart scales to the column and keeps its aspect ratio (plotters draws it 1200 × 1000).
    let svgs = r["svgs"].as_array().expect("svgs");
    assert_eq!(svgs.len(), 1, "{r}");
    let (w, h) = (svgs[0][0].as_f64().unwrap(), svgs[0][1].as_f64().unwrap());
    assert!(w > 300.0 && w <= cw, "chart {w} px wide");
    assert!((h / w - 1000.0 / 1200.0).abs() < 0.02, "chart {w} × {h}");
    // The figures and the alert rows are tables, each in its own scrolling box.
    let tables = r["tables"].as_array().expect("tables");
    assert!(tables.len() >= 2, "{r}");
    for t in tables {
        assert!(
            t[0].as_f64().unwrap() <= cw && t[1].as_u64().unwrap() >= 1,
            "{r}"
        );
    }
    assert_eq!(r["scripts"].as_u64(), Some(0), "the report runs no script");
    assert!(
        r["title"].as_str().unwrap().contains("demo-liion-buck"),
        "{r}"
    );
    assert!(
        r["verdict"].as_str().unwrap().starts_with("Verdict:"),
        "{r}"
    );
}

#[test]
fn every_study_folder_holds_a_self_contained_report() {
    let wd = WorkDir::new();
    run_ok(
        &wd,
        &[
            "compare",
            "demo",
            "lead-acid-direct",
            "--duration",
            "20",
            "--out",
            "cmp",
        ],
    );
    run_ok(
        &wd,
        &[
            "sweep",
            "--param",
            "drive.stages.0.ratio",
            "--values",
            "4,6",
            "--duration",
            "20",
            "--out",
            "sw",
        ],
    );
    run_ok(
        &wd,
        &[
            "montecarlo",
            "--runs",
            "3",
            "--duration",
            "20",
            "--out",
            "mc",
        ],
    );
    for (dir, must) in [
        (
            "cmp",
            vec!["demo-liion-buck", "Setup as run: lead-acid", "hydrogen"],
        ),
        ("sw", vec!["drive.stages.0.ratio", "<svg"]),
        ("mc", vec!["3 operators", "overcharge in", "Lithium cells"]),
    ] {
        let html = wd.read(&format!("{dir}/report.html"));
        assert!(html.starts_with("<!doctype html>"), "{dir}");
        assert!(html.contains("<table"), "{dir}: no table");
        for m in must {
            assert!(html.contains(m), "{dir}: no {m:?}");
        }
        let lower = html.to_lowercase();
        for bad in ["<script", " src=", "href=", "url("] {
            assert!(!lower.contains(bad), "{dir}: {bad}");
        }
    }
}
