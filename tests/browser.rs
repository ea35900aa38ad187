//! The demo report in a real browser: headless Chromium loads it from a file URL with the network
//! disabled, the DOM is dumped and checked, and a screenshot is taken. Skipped with a message when no
//! browser is installed, except under CI (where .ci/run installs Debian's chromium), where that fails.

mod common;
use common::root;

use std::path::{Path, PathBuf};
use std::process::Command;

fn browser() -> Option<PathBuf> {
    ["/usr/bin/chromium", "/usr/bin/chromium-browser", "/usr/bin/google-chrome"]
        .iter()
        .map(PathBuf::from)
        .find(|p| p.exists())
}

fn headless(browser: &Path, profile: &Path, extra: &[&str], url: &str) -> std::process::Output {
    let mut args = vec![
        "--headless".to_string(),
        "--no-sandbox".into(),
        "--disable-gpu".into(),
        "--disable-background-networking".into(),
        "--disable-component-update".into(),
        "--disable-sync".into(),
        "--no-first-run".into(),
        "--disable-quic".into(),
        // No network: every host name fails to resolve and any proxy use goes nowhere.
        "--host-resolver-rules=MAP * ~NOTFOUND".into(),
        "--proxy-server=127.0.0.1:9".into(),
        format!("--user-data-dir={}", profile.display()),
    ];
    args.extend(extra.iter().map(|s| s.to_string()));
    args.push(url.to_string());
    Command::new(browser).args(&args).output().expect("start the browser")
}

#[test]
fn demo_report_renders_in_headless_chromium() {
    let Some(browser) = browser() else {
        assert!(std::env::var_os("CI").is_none(), "CI must install chromium (.ci/run does)");
        eprintln!("SKIPPED: no chromium installed; install Debian's `chromium` to run the browser test");
        return;
    };
    let dir = std::env::temp_dir().join(format!("knotwise-browser-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let out = dir.join("out");
    let status = Command::new(env!("CARGO_BIN_EXE_knotwise"))
        .args(["run", root("specs-demo/assessment.yaml").to_str().unwrap(), "--out", out.to_str().unwrap(), "--quiet"])
        .output()
        .unwrap();
    assert!(status.status.success(), "{}", String::from_utf8_lossy(&status.stderr));
    let results: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("results.json")).unwrap()).unwrap();
    let url = format!("file://{}", out.join("report.html").display());

    let dom = headless(&browser, &dir.join("profile1"), &["--dump-dom"], &url);
    let html = String::from_utf8_lossy(&dom.stdout);
    assert!(html.contains("<title>Residential sales, price per square metre"), "title missing from the DOM");
    let sizes: Vec<String> = results["fits"]["robust"]["basis-sizes"]
        .as_object()
        .unwrap()
        .iter()
        .map(|(term, k)| format!("{term} {k}"))
        .collect();
    let sizes = sizes.join(", ");
    assert!(html.contains(&sizes), "chosen sizes `{sizes}` missing from the DOM");
    let storeys =
        results["fits"]["robust"]["coefficients"].as_array().unwrap().iter().find(|c| c["name"] == "storeys").unwrap()
            ["estimate"]
            .as_f64()
            .unwrap();
    // The report prints estimates with 4 significant digits.
    let decimals = (3 - storeys.abs().log10().floor() as i32).max(0) as usize;
    let shown = format!("{storeys:.decimals$}");
    assert!(html.contains(&shown), "robust storeys coefficient {shown} not shown");

    let shot = root("docs/report-screenshot.png");
    let tmp_shot = dir.join("shot.png");
    let _ = headless(
        &browser,
        &dir.join("profile2"),
        &["--hide-scrollbars", "--window-size=1200,1600", &format!("--screenshot={}", tmp_shot.display())],
        &url,
    );
    let png = std::fs::read(&tmp_shot).expect("the browser wrote no screenshot");
    assert!(png.starts_with(b"\x89PNG"), "screenshot is not a PNG");
    if std::env::var_os("UPDATE_SCREENSHOT").is_some() {
        std::fs::write(&shot, &png).unwrap();
    }
    let _ = std::fs::remove_dir_all(&dir);
}
