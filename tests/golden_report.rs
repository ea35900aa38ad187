//! Golden outputs on a small invented fixture (tests/fixtures/golden/): the report and the results,
//! normalised by named redactions. `UPDATE_EXPECT=1 cargo test --test golden_report` rewrites the
//! expected files; an expected file that no output matches any more (stale) fails the test.

mod common;
use common::root;

use std::process::Command;

const COMPARED: [&str; 3] = ["report.html", "results.json", "rows.csv"];

/// Named redactions: the tool version and build target change between releases and machines, and
/// every sha256 that depends on them (the study digest) or on the fixture's bytes is replaced.
fn redact(text: &str) -> String {
    let version = knotwise::provenance::version();
    let target = knotwise::provenance::target();
    let mut out = text.replace(&target, "[TARGET]");
    out = out.replace(&format!("\"version\": \"{version}\""), "\"version\": \"[VERSION]\"");
    out = out.replace(&format!("knotwise {version}"), "knotwise [VERSION]");
    // Any 64-hex-digit run is a digest.
    let bytes = out.as_bytes();
    let mut res = String::with_capacity(out.len());
    let mut i = 0;
    while i < bytes.len() {
        let run = bytes[i..].iter().take_while(|b| b.is_ascii_hexdigit()).count();
        if run == 64 {
            res.push_str("[SHA256]");
            i += 64;
        } else if run > 0 {
            res.push_str(&out[i..i + run]);
            i += run;
        } else {
            let c = out[i..].chars().next().unwrap();
            res.push(c);
            i += c.len_utf8();
        }
    }
    res
}

#[test]
fn golden_outputs_of_the_small_fixture() {
    let dir = std::env::temp_dir().join(format!("knotwise-golden-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let out = Command::new(env!("CARGO_BIN_EXE_knotwise"))
        .args(["run", root("tests/fixtures/golden/study.yaml").to_str().unwrap(), "--out", dir.to_str().unwrap()])
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let expected_dir = root("tests/fixtures/golden/expected");
    let update = std::env::var_os("UPDATE_EXPECT").is_some();
    if update {
        std::fs::create_dir_all(&expected_dir).unwrap();
    }
    let mut failures = Vec::new();
    for name in COMPARED {
        let got = redact(&std::fs::read_to_string(dir.join(name)).unwrap());
        let path = expected_dir.join(name);
        if update {
            std::fs::write(&path, &got).unwrap();
            continue;
        }
        match std::fs::read_to_string(&path) {
            Ok(want) if want == got => {}
            Ok(want) => {
                let line = want.lines().zip(got.lines()).position(|(a, b)| a != b).map_or(0, |l| l + 1);
                failures.push(format!("{name} differs from its golden file (first at line {line})"));
            }
            Err(_) => failures.push(format!("{name}: no golden file; run with UPDATE_EXPECT=1")),
        }
    }
    // A stale golden file (one no output produces) fails the run.
    for entry in std::fs::read_dir(&expected_dir).unwrap() {
        let name = entry.unwrap().file_name().to_string_lossy().into_owned();
        if !COMPARED.contains(&name.as_str()) {
            failures.push(format!("stale golden file tests/fixtures/golden/expected/{name}: remove it"));
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
    assert!(
        failures.is_empty(),
        "{}\n(run `UPDATE_EXPECT=1 cargo test --test golden_report` and review the diff)",
        failures.join("\n")
    );
}
